"""Coefficients of the 3-stage Radau IIA method (order 5) and the small dense linear algebra it needs.

Everything here is derived at import from the method's definition — the collocation nodes
(zeros of a Radau polynomial), the collocation conditions — rather than typed in:

* nodes :math:`c_{1,2} = (4 \\mp \\sqrt 6)/10`, :math:`c_3 = 1`; the matrix :math:`A` from
  :math:`\\sum_j a_{ij} c_j^{k-1} = c_i^k / k`, :math:`k = 1, 2, 3` (collocation, condition C(3));
* :math:`A^{-1}` has one real eigenvalue :math:`\\hat\\gamma` and a complex pair
  :math:`\\hat\\alpha \\pm i\\hat\\beta`; the real matrix :math:`T` with
  :math:`T^{-1} A^{-1} T = \\begin{pmatrix}\\hat\\gamma&0&0\\\\0&\\hat\\alpha&-\\hat\\beta\\\\
  0&\\hat\\beta&\\hat\\alpha\\end{pmatrix}` turns the simplified Newton system into one real and one
  complex system of the size of the ODE;
* the embedded formula of order 3, :math:`\\hat b_0 = \\gamma_0 = 1/\\hat\\gamma` on
  :math:`f(t_0, y_0)` plus weights :math:`\\hat b_i` on the stages, from the order conditions
  :math:`\\hat b_0 + \\sum \\hat b_i = 1`, :math:`\\sum \\hat b_i c_i = 1/2`,
  :math:`\\sum \\hat b_i c_i^2 = 1/3`; the error weights ``E`` act on the stage increments
  :math:`Z_i` (:math:`hF = (A^{-1} \\otimes I) Z`).
* the collocation polynomial :math:`u(t_0 + \\theta h) = y_0 + \\sum_k D_k \\theta^{k+1}` with
  :math:`D = V^{-1} Z`, :math:`V_{jk} = c_j^{k+1}` (dense output).

References
----------
E. Hairer and G. Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996,
§IV.5 (Radau IIA), §IV.8 (implementation of implicit Runge–Kutta methods).
"""

from __future__ import annotations

import numpy as np

from kickback.engine.radau5_jit import jit

SQ6 = np.sqrt(6.0)
#: collocation nodes
C = np.array([(4.0 - SQ6) / 10.0, (4.0 + SQ6) / 10.0, 1.0])
_VAND = np.array([[c ** k for c in C] for k in range(3)])  # row k: c_j^k
#: Runge–Kutta matrix from the collocation conditions C(3)
A = np.linalg.solve(_VAND, np.array([[c ** (k + 1) / (k + 1) for c in C] for k in range(3)])).T.copy()
A_INV = np.linalg.inv(A)

_lam, _vec = np.linalg.eig(A_INV)
_ireal = int(np.argmin(np.abs(_lam.imag)))
_icplx = int(np.argmax(_lam.imag))
#: real eigenvalue of A^-1 and the complex pair alpha ± i beta
GAMMA = float(_lam[_ireal].real)
ALPHA = float(_lam[_icplx].real)
BETA = float(_lam[_icplx].imag)
_v = _vec[:, _icplx]
#: real transformation T (columns: real eigenvector, Re v, -Im v) and its inverse
T = np.column_stack([_vec[:, _ireal].real, _v.real, -_v.imag])
TI = np.linalg.inv(T)
LAMBDA = np.array([[GAMMA, 0.0, 0.0], [0.0, ALPHA, -BETA], [0.0, BETA, ALPHA]])

#: weight of f(t0, y0) in the embedded formula
GAMMA0 = 1.0 / GAMMA
_B = A[2]  # stiffly accurate: b = last row of A
_BHAT = np.linalg.solve(_VAND, np.array([1.0 - GAMMA0, 0.5, 1.0 / 3.0]))
#: error weights on the stage increments: sum_i E_i Z_i = h sum_i (bhat_i - b_i) f(Y_i)
E = A_INV.T @ (_BHAT - _B)
#: dense output: D = DENSE @ Z gives the coefficients of theta, theta^2, theta^3
DENSE = np.linalg.inv(np.array([[c ** (k + 1) for k in range(3)] for c in C]))


@jit
def lu_factor(a, piv):
    """Gaussian elimination with partial pivoting, in place (real or complex ``a``).

    Returns False when a pivot is exactly zero (singular matrix).
    """
    n = a.shape[0]
    for k in range(n):
        p = k
        big = abs(a[k, k])
        for i in range(k + 1, n):
            if abs(a[i, k]) > big:
                big = abs(a[i, k])
                p = i
        piv[k] = p
        if big == 0.0:
            return False
        if p != k:
            for j in range(n):
                tmp = a[k, j]
                a[k, j] = a[p, j]
                a[p, j] = tmp
        inv = 1.0 / a[k, k]
        for i in range(k + 1, n):
            m = a[i, k] * inv
            a[i, k] = m
            if m != 0.0:
                for j in range(k + 1, n):
                    a[i, j] -= m * a[k, j]
    return True


@jit
def lu_solve(lu, piv, b):
    """Solve in place with the factors of :func:`lu_factor` (``b`` overwritten by x)."""
    n = lu.shape[0]
    for k in range(n):
        p = piv[k]
        if p != k:
            tmp = b[k]
            b[k] = b[p]
            b[p] = tmp
    for i in range(n):
        s = b[i]
        for j in range(i):
            s -= lu[i, j] * b[j]
        b[i] = s
    for i in range(n - 1, -1, -1):
        s = b[i]
        for j in range(i + 1, n):
            s -= lu[i, j] * b[j]
        b[i] = s / lu[i, i]


@jit
def rms(x, scale):
    """Root-mean-square of x / scale."""
    s = 0.0
    for i in range(x.size):
        q = x[i] / scale[i]
        s += q * q
    return np.sqrt(s / max(x.size, 1))


@jit
def dense_eval(theta, y_old, dcoef, out):
    """Collocation polynomial at t_old + theta·h: out = y_old + sum_k D_k theta^(k+1)."""
    n = y_old.size
    t1 = theta
    t2 = theta * theta
    t3 = t2 * theta
    for i in range(n):
        out[i] = y_old[i] + dcoef[0, i] * t1 + dcoef[1, i] * t2 + dcoef[2, i] * t3
