r"""Coil flux laws: a linear coil and a saturating coil in the Frölich–Kennelly form.

The flux linkage of the coil as a function of its current is

.. math:: \lambda(i) = \frac{L_0\, i}{1 + |i| / I_\mathrm{sat}}

with the small-signal inductance ``L0`` at zero current and the saturation current ``i_sat``
at which the flux linkage reaches half its limit ``L0·i_sat``. A linear coil is ``i_sat = inf``
(then λ = L0·i). All functions are pure, take SI floats or numpy arrays and return the same.

The energization of a coil from a constant voltage through its series resistance
(:func:`rise_time`, :func:`rise_current`) has an exact implicit solution t(i), derived below;
the fit of a measured switch-on trace uses it.

References
----------
O. Frölich, "Investigations of dynamoelectric machines and electric power transmission",
*Electrotechnische Zeitschrift*, 1881; A. E. Kennelly, "Magnetic reluctance",
*Trans. AIEE* 8, 1891 — the rational law B = H/(a + b·|H|) used here for λ(i).
D. C. Jiles, *Introduction to Magnetism and Magnetic Materials*, 3rd ed., CRC Press, 2015,
ch. 2 (stored magnetic energy as ∫ i dλ for a nonlinear inductor).
"""

from __future__ import annotations

import numpy as np

__all__ = ["current_from_flux", "flux_linkage", "incremental_inductance", "rise_current", "rise_time",
           "stored_energy"]

#: below this i/i_sat the stored energy uses its power series (the closed form cancels)
_SERIES_LIMIT = 1e-2


def _check(L0: float, i_sat: float) -> None:
    if not L0 > 0:
        raise ValueError(f"L0 must be > 0 H, got {L0!r}")
    if not i_sat > 0:
        raise ValueError(f"i_sat must be > 0 A (inf for a linear coil), got {i_sat!r}")


def flux_linkage(i, L0: float, i_sat: float = np.inf):
    r"""Flux linkage of the coil at current ``i``.

    Parameters
    ----------
    i : float or ndarray — [A] coil current (either sign)
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil

    Returns
    -------
    float or ndarray — [Wb] (V·s), odd in ``i``, bounded by ±L0·i_sat

    .. math:: \lambda(i) = \frac{L_0\, i}{1 + |i| / I_\mathrm{sat}}

    References
    ----------
    Frölich (1881), Kennelly (1891): the rational magnetisation law (see the module notes).
    """
    _check(L0, i_sat)
    i = np.asarray(i, dtype=float)
    out = L0 * i / (1.0 + np.abs(i) / i_sat)
    return out if out.ndim else float(out)


def current_from_flux(lam, L0: float, i_sat: float = np.inf):
    r"""Coil current at flux linkage ``lam``: the exact inverse of :func:`flux_linkage`.

    Parameters
    ----------
    lam : float or ndarray — [Wb] flux linkage (either sign)
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil

    Returns
    -------
    float or ndarray — [A]; ±inf where ``|lam| >= L0·i_sat`` (no finite current reaches it)

    .. math:: i(\lambda) = \frac{\lambda\, I_\mathrm{sat}}{L_0 I_\mathrm{sat} - |\lambda|}

    Solving λ·(1 + |i|/I_sat) = L0·i for i, with sign(i) = sign(λ). The limit L0·I_sat is
    compared as computed, so λ = L0·I_sat gives inf exactly.
    """
    _check(L0, i_sat)
    lam = np.asarray(lam, dtype=float)
    if np.isinf(i_sat):
        out = lam / L0
    else:
        den = L0 * i_sat - np.abs(lam)  # exact subtraction near the limit (Sterbenz)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.where(den > 0, lam * i_sat / np.where(den > 0, den, 1.0), np.sign(lam) * np.inf)
    return out if out.ndim else float(out)


def incremental_inductance(i, L0: float, i_sat: float = np.inf):
    r"""Incremental (differential) inductance dλ/di at current ``i``.

    Parameters
    ----------
    i : float or ndarray — [A] coil current (either sign)
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil

    Returns
    -------
    float or ndarray — [H], even in ``i``; L0/4 at ``|i| = i_sat``

    .. math:: L_\mathrm{inc}(i) = \frac{d\lambda}{di} = \frac{L_0}{(1 + |i| / I_\mathrm{sat})^2}

    (quotient rule on λ(i); for i ≥ 0, d/di [i/(1 + i/a)] = 1/(1 + i/a)²).
    """
    _check(L0, i_sat)
    i = np.asarray(i, dtype=float)
    out = L0 / (1.0 + np.abs(i) / i_sat) ** 2
    return out if out.ndim else float(out)


def _log_series(x):
    r"""``ln(1 + x) + 1/(1 + x) − 1`` for x ≥ 0, without cancellation near 0.

    Power series for x < 1e-2: :math:`\sum_{k\ge2} (-1)^k \frac{k-1}{k} x^k` (ln(1+x) minus
    x/(1+x) term by term); ten terms leave a relative error below 1e-18.
    """
    x = np.asarray(x, dtype=float)
    small = x < _SERIES_LIMIT
    xs = np.where(small, x, 0.0)
    series = np.zeros_like(xs)
    for k in range(11, 1, -1):  # Horner-free sum, high order first for accuracy
        series += (-1) ** k * (k - 1) / k * xs**k
    xl = np.where(small, 1.0, x)
    closed = np.log1p(xl) - xl / (1.0 + xl)
    return np.where(small, series, closed)


def stored_energy(i, L0: float, i_sat: float = np.inf):
    r"""Magnetic energy stored in the coil at current ``i``: the integral ∫ i dλ from 0.

    Parameters
    ----------
    i : float or ndarray — [A] coil current (either sign; the energy is even in ``i``)
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil (then ½·L0·i²)

    Returns
    -------
    float or ndarray — [J]

    Notes
    -----
    With dλ = L_inc(i')·di' and the substitution u = 1 + i'/I_sat (i' = I_sat·(u − 1),
    di' = I_sat·du), for I ≥ 0:

    .. math::
        W = \int_0^I i' \frac{L_0}{(1 + i'/I_\mathrm{sat})^2}\,di'
          = L_0 I_\mathrm{sat}^2 \int_1^U \frac{u - 1}{u^2}\,du
          = L_0 I_\mathrm{sat}^2 \left(\ln U + \frac{1}{U} - 1\right),
          \quad U = 1 + I / I_\mathrm{sat}

    For I ≪ I_sat the bracket is I²/(2·I_sat²) − …, so W → ½·L0·I². It is *not* ½·λ·I or
    ½·L_inc·I² for a saturating coil: both overstate it.

    References
    ----------
    Jiles (2015), ch. 2: energy of a nonlinear inductor W = ∫ i dλ.
    """
    _check(L0, i_sat)
    a = np.abs(np.asarray(i, dtype=float))
    if np.isinf(i_sat):
        out = 0.5 * L0 * a * a
    else:
        out = L0 * i_sat * i_sat * _log_series(a / i_sat)
    return out if np.ndim(out) else float(out)


def _rise_params(voltage: float, resistance: float, L0: float, i_sat: float) -> None:
    _check(L0, i_sat)
    if not voltage > 0:
        raise ValueError(f"voltage must be > 0 V, got {voltage!r}")
    if not resistance > 0:
        raise ValueError(f"resistance must be > 0 Ω, got {resistance!r}")


def _rise_time_of_s(s, voltage: float, resistance: float, L0: float, i_sat: float):
    """t(s) with s = −ln(1 − i/I∞), the stable variable of the rise (see :func:`rise_time`)."""
    i_inf = voltage / resistance
    beta = i_inf / i_sat
    x = -beta * np.expm1(-s)  # i / i_sat
    return (L0 / resistance) * ((np.log1p(x) + s) / (1.0 + beta) ** 2 + x / ((1.0 + beta) * (1.0 + x)))


def rise_time(i, voltage: float, resistance: float, L0: float, i_sat: float = np.inf):
    r"""Time for the coil current to rise from 0 to ``i`` when a constant ``voltage`` is applied
    at t = 0 across the coil and its series ``resistance`` (exact, saturating or linear).

    Parameters
    ----------
    i : float or ndarray — [A], 0 ≤ i; inf is returned for i ≥ V/R (never reached)
    voltage : float — [V] applied voltage, > 0
    resistance : float — [Ω] series resistance, > 0
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil

    Returns
    -------
    float or ndarray — [s]

    Notes
    -----
    From dλ/dt = V − R·i and dλ = L_inc(i)·di, t(i) = ∫₀ⁱ L_inc(i')/(V − R·i') di'. With
    a = I_sat, b = I∞ = V/R, the partial fractions
    1/((a + i)²(b − i)) = [1/(a + i) + 1/(b − i)]/(a + b)² + 1/((a + b)(a + i)²) give

    .. math::
        t(i) = \frac{L_0}{R}\left[\frac{\ln(1 + x) - \ln(1 - y)}{(1 + \beta)^2}
               + \frac{x}{(1 + \beta)(1 + x)}\right],
        \quad x = \frac{i}{I_\mathrm{sat}},\ y = \frac{i}{I_\infty},\ \beta = \frac{I_\infty}{I_\mathrm{sat}}

    which for I_sat → ∞ is the linear t = −(L0/R)·ln(1 − i/I∞).

    References
    ----------
    Any text on first-order circuits for the linear limit (e.g. Nilsson & Riedel, *Electric
    Circuits*, ch. 7); the saturating form is derived above from the Frölich–Kennelly law.
    """
    _rise_params(voltage, resistance, L0, i_sat)
    i = np.asarray(i, dtype=float)
    if np.any(i < 0):
        raise ValueError("rise_time needs i >= 0 A")
    y = i / (voltage / resistance)
    with np.errstate(divide="ignore"):
        s = np.where(y < 1.0, -np.log1p(-np.minimum(y, 1.0)), np.inf)
    with np.errstate(invalid="ignore"):
        out = np.where(np.isinf(s), np.inf, _rise_time_of_s(np.where(np.isinf(s), 0.0, s),
                                                              voltage, resistance, L0, i_sat))
    return out if out.ndim else float(out)


def rise_current(t, voltage: float, resistance: float, L0: float, i_sat: float = np.inf):
    r"""Coil current at time ``t`` after a constant ``voltage`` is applied at t = 0: the inverse
    of :func:`rise_time` (0 for t ≤ 0).

    Parameters
    ----------
    t : float or ndarray — [s]
    voltage : float — [V] applied voltage, > 0
    resistance : float — [Ω] series resistance, > 0
    L0 : float — [H] inductance at zero current
    i_sat : float — [A] saturation current; ``inf`` for a linear coil

    Returns
    -------
    float or ndarray — [A], in [0, V/R)

    Notes
    -----
    Solved in s = −ln(1 − i/I∞), where dt/ds = L_inc(i)/R lies between L0/(R(1+β)²) and L0/R
    and decreases with s: t(s) is increasing and concave, so Newton's method started at the
    lower bound s = t·R/L0 climbs monotonically to the root (quadratic convergence, to
    rounding). The linear coil is the closed form i = I∞·(1 − e^(−t·R/L0)).
    """
    _rise_params(voltage, resistance, L0, i_sat)
    t = np.maximum(np.asarray(t, dtype=float), 0.0)
    i_inf = voltage / resistance
    s = t * resistance / L0
    if not np.isinf(i_sat):
        for _ in range(60):
            g = _rise_time_of_s(s, voltage, resistance, L0, i_sat) - t
            x = -(i_inf / i_sat) * np.expm1(-s)
            step = g / (1.0 / (1.0 + x) ** 2 * (L0 / resistance))  # g / (dt/ds)
            s = np.maximum(s - step, t * resistance / L0)
            if np.all(np.abs(step) <= 4e-16 * (1.0 + s)):
                break
    out = -i_inf * np.expm1(-s)
    return out if out.ndim else float(out)
