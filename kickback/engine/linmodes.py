"""Modes of an affine phase ``x' = A·x + b``: the eigen-decomposition of the augmented matrix
``[[A, b], [0, 0]]`` for the dense solution, checked against an extended-precision exponential.

References
----------
C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix,
twenty-five years later", SIAM Review 45(1), 2003 (eigenvector method, scaling and squaring).
"""

from __future__ import annotations

import math

import numpy as np

#: allowed disagreement of the dense (eigenvector) solution with :func:`expm_extended` at the end of the
#: phase, relative to each state's scale (eigenvalues of a stiff matrix are only accurate to
#: ~eps·‖A‖; the extended-precision exponential gives the end state that the cycle map uses)
DENSE_TOL = 1e-10


def expm_extended(M: np.ndarray, t: float) -> np.ndarray:
    """``exp(M·t)`` by scaling and squaring of a Taylor series in extended precision
    (``numpy.longdouble``): stiff matrices lose ~eps·‖M‖·t/|λ_slow| to the squarings, and the
    extra digits keep that below double rounding for the matrices met here.

    References
    ----------
    C. Moler and C. Van Loan, SIAM Review 45(1), 2003, method 3 (scaling and squaring).
    """
    a = np.asarray(M, dtype=np.longdouble) * np.longdouble(t)
    norm = float(np.max(np.sum(np.abs(a), axis=0)))
    s = max(0, int(math.ceil(math.log2(norm))) + 1) if norm > 0 else 0
    a = a / np.longdouble(2.0) ** s
    eye = np.eye(a.shape[0], dtype=np.longdouble)
    term, out = eye.copy(), eye.copy()
    for k in range(1, 24):  # ‖a‖ ≤ 1/2: the remainder is below 2⁻²⁴/24!
        term = term @ a / np.longdouble(k)
        out = out + term
    for _ in range(s):
        out = out @ out
    return out


def decompose(A: np.ndarray, b: np.ndarray, x0: np.ndarray, span: float, scale: np.ndarray):
    """Modes of the augmented matrix (for the dense solution) and the end state by
    :func:`expm_extended` (the accurate one on stiff matrices); None when the two disagree beyond
    :data:`DENSE_TOL` or the decomposition is ill-conditioned.

    The modes come from :func:`_refined_modes` where ``A`` is invertible (each eigenvalue refined
    in extended precision, the equilibrium by refined solves), else from the eigen-decomposition
    of the augmented matrix."""
    m = A.shape[0] + 1
    M = np.zeros((m, m))
    M[:-1, :-1], M[:-1, -1] = A, b
    z0 = np.append(x0, 1.0)
    ref = np.asarray(expm_extended(M, span) @ z0.astype(np.longdouble), dtype=float)
    if not np.all(np.isfinite(ref)):
        return None
    # rounding of the scaling and squaring, relative to the states' scales
    expm_doubt = float(np.finfo(np.longdouble).eps * np.max(np.sum(np.abs(M), axis=0)) * span
                       * np.max(np.abs(z0) / np.append(scale, 1.0)))
    for modes in (_refined_modes, _augmented_modes):
        try:
            got = modes(A, b, M, z0)
        except (np.linalg.LinAlgError, ValueError, ArithmeticError):
            continue
        if got is None:
            continue
        lam, vec, coef = got
        if not np.all(np.isfinite(lam)) or np.linalg.cond(vec) > 1e8 or np.max(lam.real) * span > 50.0:
            continue
        z_end = np.real(vec @ (coef * np.exp(lam * span)))
        if np.all(np.abs(z_end[:-1] - ref[:-1]) <= DENSE_TOL * scale):
            return lam, vec, coef, ref[:-1]
        if modes is _refined_modes and expm_doubt > DENSE_TOL and _modes_hold(M, lam, vec):
            # the extended-precision exponential itself is off by ~eps·‖M‖·t here (a 1e-17 s node
            # time constant over a millisecond): the refined modes give the end state
            return lam, vec, coef, z_end[:-1]
    return None


def _modes_hold(M: np.ndarray, lam: np.ndarray, vec: np.ndarray, tol: float = 1e-9) -> bool:
    """Each mode satisfies ``M·v = λ·v`` to ``tol`` relative to ``|λ|·|v|`` (slow modes) plus the
    rounding of ``v`` itself carried through ``M``."""
    Ml = M.astype(np.longdouble)
    for k in range(lam.size):
        v = vec[:, k]
        mv = np.asarray(Ml @ np.real(v).astype(np.longdouble), dtype=float) \
            + 1j * np.asarray(Ml @ np.imag(v).astype(np.longdouble), dtype=float)
        res = np.max(np.abs(mv - lam[k] * v))
        # (the mode is stored in double: its own rounding enters M·v times ‖M‖)
        allow = tol * abs(lam[k]) * np.max(np.abs(v)) + 8 * np.finfo(float).eps * float(
            np.max(np.abs(M) @ np.abs(v)))
        if not res <= allow:
            return False
    return True


def _augmented_modes(A, b, M, z0):
    lam, vec = np.linalg.eig(M)
    return lam, vec, np.linalg.solve(vec, z0.astype(complex))


def _refined_modes(A, b, M, z0):
    """Modes of ``x' = A·x + b`` as those of the augmented matrix: ``x(t) = x_eq + Σ v_k c_k e^{λ_k t}``.

    A stiff ``A`` (a node time constant of 1e-17 s beside a coil's 1e-5 s) gives its slow
    eigenvalues only to ~eps·‖A‖ absolute from LAPACK — 5e-5 relative in one case met, an end
    state off by as much. Each eigenpair is refined by one inverse-iteration step and the
    two-sided Rayleigh quotient evaluated in extended precision; the equilibrium ``−A⁻¹b`` by
    solves refined with extended-precision residuals.

    References
    ----------
    G. H. Golub and C. F. Van Loan, Matrix Computations, 4th ed., JHU Press 2013, §7.6.1
    (inverse iteration), §7.2.2 (the two-sided Rayleigh quotient), §3.5.3 (iterative refinement).
    """
    n = A.shape[0]
    lam, V = np.linalg.eig(A)
    lam, V = lam.astype(complex), V.astype(complex)
    lw, W = np.linalg.eig(A.T)
    W = W[:, [int(np.argmin(np.abs(lw - x))) for x in lam]]
    Al = A.astype(np.longdouble)
    for k in range(n):
        with np.errstate(all="ignore"):  # (A − λ·I) is singular to rounding: v may be huge
            v = np.linalg.solve(A - lam[k] * np.eye(n), V[:, k])
            v = v / np.max(np.abs(v))
        if not np.all(np.isfinite(v)):
            v = V[:, k]
        v = v / np.max(np.abs(v))
        w = W[:, k]
        num = _ext_dot(w, Al, v)
        den = complex(w @ v)
        if den == 0:
            return None
        lam[k], V[:, k] = num / den, v
    x_eq = np.linalg.solve(A, -b)
    for _ in range(2):
        r = np.asarray(Al @ x_eq.astype(np.longdouble) + b.astype(np.longdouble), dtype=float)
        x_eq = x_eq - np.linalg.solve(A, r)
    vec = np.zeros((n + 1, n + 1), dtype=complex)
    vec[:n, :n], vec[:n, n], vec[n, n] = V, x_eq, 1.0
    coef = np.append(np.linalg.solve(V, (z0[:n] - x_eq).astype(complex)), 1.0)
    return np.append(lam, 0.0), vec, coef


def _ext_dot(w, Al, v) -> complex:
    """``wᵀ·A·v`` with the product and the sums in extended precision (``Al``: A as longdouble)."""
    wr, wi = np.real(w).astype(np.longdouble), np.imag(w).astype(np.longdouble)
    out = 0j
    for part, unit in ((np.real(v), 1.0), (np.imag(v), 1j)):
        if np.any(part):
            av = Al @ part.astype(np.longdouble)
            out += unit * complex(float(wr @ av), float(wi @ av))
    return out


def decompose_held(A: np.ndarray, b: np.ndarray, x0: np.ndarray, span: float, scale: np.ndarray, tol: float):
    """(λ, modes, coefficients, end state, held) of ``dx/dt = A·x + b`` from ``x0`` over ``span``
    [s]: :func:`decompose`, with held states taken out.

    A *held* state — a capacitor behind a Shockley diode in reverse: it drains at the constant
    saturation current, and nothing else depends on it — has a nil row and column in ``A`` (to ``tol``
    relative to the scales over the phase). Its eigenvalue ~0 beside the augmented one makes the modes
    defective, so it is taken out: it ramps, ``x = x0 + b·t``, and the rest are solved as before
    (the path is verified against the true rates all the same). ``held`` is None without one.
    """
    ie = A.shape[0]
    x0 = np.asarray(x0, dtype=float)
    rel = np.abs(A) * scale[None, :] / scale[:, None] * span
    small = (np.max(rel, axis=0) <= tol) & (np.max(rel, axis=1) <= tol)
    if not np.any(small) or np.all(small):
        dec = decompose(A, b, x0, span, scale)
        return None if dec is None else (*dec, None)
    keep, idx = np.flatnonzero(~small), np.flatnonzero(small)
    dec = decompose(A[np.ix_(keep, keep)], b[keep], x0[keep], span, scale[keep])
    if dec is None:
        return None
    lam, vk, coef, xk_end = dec
    vec = np.zeros((ie + 1, vk.shape[1]), dtype=vk.dtype)
    vec[keep], vec[ie] = vk[:-1], vk[-1]
    x_end = x0.copy()
    x_end[keep] = xk_end
    x_end[idx] += b[idx] * span
    return lam, vec, coef, x_end, (idx, b[idx].copy())

