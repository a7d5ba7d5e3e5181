"""The node pinned at a vertical law (a constant-drop freewheel diode) by a channel whose current
falls more slowly than the coil would decay alone: at the instant the pin starts, the balance left
the diode −2.4e-18 A, which its blocking piece read as an element voltage of −inf (the audit then
withheld the verdict). Checked against the closed form of the floating phase, written here."""

from __future__ import annotations

import math

import pytest

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.simulation import simulate


def test_diode_pinned_after_the_coil_followed_the_channel():
    vs, lh, r, tf, vf = 24.0, 1.0, 1e7, 1e-6, 0.7  # L/R = 0.1 µs, far below the fall time
    d = Element("diode", model="constant-drop", forward_voltage=vf)
    case = Case("coil faster than the fall (demo data)", Supply(vs), Coil(lh, r),
                Switch("ideal", fall_time=tf), (Clamp("D", "coil", (d,)),))
    res = simulate(case)
    # While the diode blocks, the coil carries the falling ceiling i = I_0·(1 − t/t_f) (no node
    # capacitance: KCL) and its voltage follows from L·di/dt = V_s − v − R·i:
    # v = V_s − R·I_0·(1 − t/t_f) + L·I_0/t_f; the diode starts where v = V_s + V_f (derived).
    i0 = vs / r
    t_pin = tf * (1.0 - (lh * i0 / tf - vf) / (r * i0))
    f = res.figures
    assert f.peak_voltage_V == pytest.approx(vs + vf, rel=1e-9)
    assert f.peak_time_s == pytest.approx(t_pin, rel=1e-6)
    el = f.clamps[0].elements[0]
    assert math.isfinite(el.peak_voltage_V)
    assert not res.audit.findings


def test_diode_peak_reverse_voltage_just_after_turn_off():
    vs, lh, r, tf, vf = 24.0, 1.0, 1e7, 1e-6, 0.7
    d = Element("diode", model="constant-drop", forward_voltage=vf)
    case = Case("coil faster than the fall (demo data)", Supply(vs), Coil(lh, r),
                Switch("ideal", fall_time=tf), (Clamp("D", "coil", (d,)),))
    el = simulate(case).figures.clamps[0].elements[0]
    i0 = vs / r
    # the element's largest voltage of either polarity: reverse, just after turn-off, where the
    # node is at V_s − R·I_0 + L·I_0/t_f (the coil following the falling ceiling, derived above)
    assert el.peak_voltage_V == pytest.approx(r * i0 - lh * i0 / tf, rel=1e-9)
