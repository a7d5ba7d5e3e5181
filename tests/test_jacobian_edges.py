"""The detailed engine's analytic Jacobian at two edges of its laws, against a central difference of
the state equations written here (the definition of the derivative; no other source needed).

* A saturating coil's first state past the flux law's end (|λ| > 0.999·L0·I_sat, where only trial
  states of an implicit step go): the coil current is continued linearly there, so di/dλ is the
  slope at the end (wide-range case 197: the entry was 90× too large).
* A node with no capacitance solved onto exactly the meeting point of two linear pieces with no
  band between them (a MOSFET's on-state at 0 V): the channel's conductance 1/r_on belongs in the
  Jacobian (wide-range case 17: J[0,0] was −143 against −121).
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

ALGEBRAIC = """
title = "MOSFET with no node capacitance, RC snubber across the switch (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "10 mH"
resistance = "10 Ω"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
fall_time = "0 s"
[[clamp]]
name = "R1"
across = "switch"
[[clamp.element]]
type = "resistor"
resistance = "20 Ω"
[[clamp.element]]
type = "capacitor"
capacitance = "100 nF"
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


def test_node_at_the_on_state_meeting_point_keeps_the_channel_conductance():
    c = Circuit(load_case(ALGEBRAIC, source="alg"))
    c.conducting = True
    y = c.initial_state()
    (k,) = c.icap
    v_cap, r_s, r_on = 5.0, 20.0, 0.1
    y[c.icap[k]] = v_cap
    # the snubber alone takes the coil current at 0 V: the balance puts the node exactly where
    # the channel's pieces meet
    y[0] = -v_cap / r_s
    assert c.node_voltage(0.0, y) == 0.0
    h = 1e-6 * c.i0
    ref = _central(c, 0.0, y, 0, h)[0]
    # the node is r_on ∥ r_s fed by i + v_cap/r_s (Kirchhoff): di/dt = (V_s − R·i − v)/L, whose
    # derivative in i is −(R + r_on ∥ r_s)/L
    r_par = 1.0 / (1.0 / r_on + 1.0 / r_s)
    assert ref == pytest.approx(-(10.0 + r_par) / 10e-3, rel=1e-6)
    assert c.jacobian(0.0, y)[0, 0] == pytest.approx(ref, rel=1e-6)
