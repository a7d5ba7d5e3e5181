"""The linear algebra of one simplified Newton step of Radau IIA on the transformed stage system.

With :math:`W = (T^{-1} \\otimes I) Z` the Newton matrix splits into a real system
:math:`(\\hat\\gamma/h\\, I - J)` and a complex one :math:`((\\hat\\alpha + i\\hat\\beta)/h\\, I - J)`
(Hairer & Wanner, Solving ODEs II, 2nd ed. 1996, §IV.8, eqs. (8.16)–(8.18) in spirit; derived in
``radau5_tableau``).
"""

from __future__ import annotations

import numpy as np

from kickback.engine.radau5_jit import jit
from kickback.engine.radau5_tableau import ALPHA, BETA, GAMMA, TI, T, lu_factor, lu_solve


@jit
def newton_matrices(J, h, lur, pivr, luc, pivc):
    """Factor γ/h·I − J (real) and (α + iβ)/h·I − J (complex) in place; False when singular."""
    n = J.shape[0]
    for i in range(n):
        for j in range(n):
            lur[i, j] = -J[i, j]
            luc[i, j] = -J[i, j]
        lur[i, i] += GAMMA / h
        luc[i, i] += complex(ALPHA / h, BETA / h)
    return lu_factor(lur, pivr) and lu_factor(luc, pivc)


@jit
def newton_correction(F, W, h, lur, pivr, luc, pivc, br, bc, dZ, scale):
    """One simplified Newton correction from the stage slopes F at the current W.

    Solves :math:`(h^{-1}\\Lambda \\otimes I - I \\otimes J)\\Delta W = -h^{-1}(\\Lambda \\otimes I)W
    + (T^{-1} \\otimes I)F`; leaves ΔW in ``br`` (real part) and ``bc`` (complex pair),
    ΔZ = (T ⊗ I)ΔW in ``dZ``, and returns the RMS of ΔZ / scale.
    """
    n = W.shape[1]
    for j in range(n):
        g0 = TI[0, 0] * F[0, j] + TI[0, 1] * F[1, j] + TI[0, 2] * F[2, j]
        g1 = TI[1, 0] * F[0, j] + TI[1, 1] * F[1, j] + TI[1, 2] * F[2, j]
        g2 = TI[2, 0] * F[0, j] + TI[2, 1] * F[1, j] + TI[2, 2] * F[2, j]
        br[j] = g0 - GAMMA / h * W[0, j]
        bc[j] = complex(g1 - (ALPHA * W[1, j] - BETA * W[2, j]) / h, g2 - (BETA * W[1, j] + ALPHA * W[2, j]) / h)
    lu_solve(lur, pivr, br)
    lu_solve(luc, pivc, bc)
    dn = 0.0
    for i in range(3):
        for j in range(n):
            d = T[i, 0] * br[j] + T[i, 1] * bc[j].real + T[i, 2] * bc[j].imag
            dZ[i, j] = d
            dn += (d / scale[j]) ** 2
    return np.sqrt(dn / (3 * n))
