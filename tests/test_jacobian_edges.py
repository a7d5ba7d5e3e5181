"""The detailed engine's analytic Jacobian at two edges of its laws, against a central difference of
the state equations written here (the definition of the derivative; no other source needed).

* A saturating coil's first state past the flux law's end (|λ| > 0.999·L0·I_sat, where only trial
  states of an implicit step go): the coil current is continued linearly there, so di/dλ is the
  slope at the end (wide-range case 197: the entry was 90× too large).
"""

from __future__ import annotations

import numpy as np
import pytest

from kickback.caseio import load_case
from kickback.circuit import Circuit

SATURATING = """
title = "saturating coil past its flux law's end (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "50 mH"
resistance = "12 Ω"
saturation_current = "1.5 A"
capacitance = "200 pF"
[switch]
type = "mosfet"
on_resistance = "50 mΩ"
fall_time = "100 ns"
[[clamp]]
name = "D1"
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.8 V"
"""



def _central(c: Circuit, t: float, y: np.ndarray, j: int, h: float) -> np.ndarray:
    yp, ym = y.copy(), y.copy()
    yp[j] += h
    ym[j] -= h
    return (c.rhs(t, yp) - c.rhs(t, ym)) / (2 * h)


@pytest.mark.parametrize("beyond", [1.01, 1.2, 2.0])
def test_saturating_coil_jacobian_past_the_flux_law_end(beyond):
    c = Circuit(load_case(SATURATING, source="sat"))
    lam_end = 0.999 * c.L * c.i_sat
    y = c.initial_state()
    y[0] = beyond * lam_end
    h = 1e-7 * lam_end
    ref = _central(c, 1.0, y, 0, h)[0]
    jm = c.jacobian(1.0, y)
    assert jm[0, 0] == pytest.approx(ref, rel=1e-5)
