"""A ring whose start finds a Shockley diode on its forward knee (kickback.engine.linring): the
closed form is tried again within twenty periods of the node's own ring, not twenty periods of
the slow mode the conducting diode's conductance puts into the linearisation at the start.

Wide-range case 939 (two diode + R + C chains across a 0.67 H coil, 13.7 pF at the node): at the
coil current's zero one diode still conducts a few mA, the linearisation there rings at 200 Hz,
and the 52 kHz node ring that follows (the diode soon blocks) was stepped for 0.1 s — 25 000
Radau steps. The checks below are against the Shockley law written here (A. S. Sedra and K. C.
Smith, Microelectronic Circuits, ch. 4: V = n·V_T·ln(1 + I/I_s) + R_s·I, V_T = kT/q at 25 °C with
the exact SI 2019 constants, BIPM SI Brochure 9th ed.): a capacitor behind a reverse-biased
diode drains at the diode's saturation current, dV/dt = −I_s/C (C·dV/dt = i, Kirchhoff).
"""

from __future__ import annotations

import math

import numpy as np
from wide_range import draw

from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.engine.detailed import integrate
from kickback.engine.linring import RingSolution

K_B, Q_E = 1.380649e-23, 1.602176634e-19  # SI 2019, exact
V_T = K_B * 298.15 / Q_E


def _saturation_current(v_f, i_f, n, r_s):
    """I_s from the forward voltage v_f at i_f (the Shockley law with series resistance)."""
    return i_f / math.expm1((v_f - r_s * i_f) / (n * V_T))


def test_ring_after_a_forward_knee_is_solved_in_closed_form():
    case = load_case(draw(939).text, source="939")
    c = Circuit(case)
    w = integrate(c)
    ring = [p for p in w.phases if p.name == "ring"]
    span = ring[-1].t1 - ring[0].t0
    stepped = sum(p.t1 - p.t0 for p in ring if not isinstance(p.sol, RingSolution))
    first = next(p for p in ring if isinstance(p.sol, RingSolution))
    # the node ring's period, 2π·√(L·C) with the coil's and the switch's capacitance (Thomson)
    c_node = case.coil.capacitance + (case.switch.capacitance or 0.0)
    period = 2 * math.pi * math.sqrt(case.coil.inductance * c_node)
    # before: the first 0.1 s of the 0.17 s ring stepped (~5000 node periods); now the closed form
    # takes over after twenty node periods, and what is stepped is mostly the slow ring through the
    # first chain's knee (its capacitor drained to the node's level)
    assert first.t0 - ring[0].t0 <= 40 * period, (first.t0 - ring[0].t0, period)
    assert stepped < 0.3 * span, (stepped, span)
    # the second chain's capacitor (0.918 µF behind a diode of 0.698 V at 9.09 A, n = 2.45,
    # R_s = 3.45 mΩ, values from the case text) drains at I_s/C while its diode blocks: checked on
    # the first closed-form stretch, its diode reverse-biased by hundreds of volts
    el = case.clamps[1].elements
    d, cap = el[0], el[2]
    i_s = _saturation_current(d.forward_voltage, d.at_current, d.ideality, d.series_resistance)
    k = c.icap[1]
    ta, tb = first.t0 + 0.1 * (first.t1 - first.t0), first.t0 + 0.9 * (first.t1 - first.t0)
    ya, yb = first.sol(ta), first.sol(tb)
    assert ya[1] - case.supply.voltage < ya[k] - 100.0, "the diode is reverse-biased by > 100 V"
    slope = (yb[k] - ya[k]) / (tb - ta)
    assert slope == np.float64(slope) and abs(slope - (-i_s / cap.capacitance)) <= 1e-6 * i_s / cap.capacitance
