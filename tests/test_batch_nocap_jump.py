"""Batch engine, no node capacitance: the node jumps onto a breakdown law at t = 0+ (issue 14).

With no capacitance at the switch node, a fall so fast that L·i0/t_f exceeds the breakdown voltage
puts the node at once on the lowest law that conducts (the switch's avalanche, or a diode + TVS
across the coil), which takes the coil current the falling channel no longer carries. The first
probe a few attoseconds into the fall asks for a current (1e-13 A) below what one unit in the last
place of the node voltage means on a milliohm piece: the batch engine read the blocking state
there and stopped the variant with "no conducting path takes the coil current" (wide-range cases
1628, 1858, 1914, 5575, 6294 of the 10^4-case reliability run), which the physics contradicts.

The reference is the node equation written out here: with the node held on the conducting law,
    L di/dt = V_s − R·i − v,  v = V_K + r_K·(i − i_ch(t)),  i_ch = i0·(1 − t/t_f) during the fall,
(first-order RL with ramp forcing: textbook, e.g. Hayt, Kemmerly and Durbin, *Engineering Circuit
Analysis*, 8th ed., ch. 8), solved with scipy's Radau at rtol 1e-12 with the energies as states;
the test asserts that the clamp or avalanche current i − i_ch stays positive, so the node really is
on that law throughout. Never kickback's own output.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from kickback.case import Case, Checks, Clamp, Coil, Element, Supply, Switch
from kickback.simulation import simulate


def _reference(vs, L, R, tf, vk, rk, off=0.0):
    """Peak node voltage, energy into the conducting law (its far end at ``off`` volts), time to
    10 % of i0 (scipy Radau)."""
    i0 = vs / R  # ideal/BJT-like on-state: the channel's drop is set apart by the callers

    def ich(t):
        return i0 * max(0.0, 1.0 - t / tf)

    def rhs(t, y):
        i = y[0]
        x = i - ich(t)
        v = vk + rk * x
        return [(vs - R * i - v) / L, (v - off) * x]

    def zero(t, y):
        return y[0]

    zero.terminal, zero.direction = True, -1

    def ten(t, y):
        return y[0] - 0.1 * i0

    ten.direction = -1
    tend = 50 * L / R + 10 * tf
    sol = solve_ivp(rhs, (0.0, tend), [i0, 0.0], method="Radau", rtol=1e-12, atol=[1e-15 * i0, 1e-18],
                    events=(zero, ten), dense_output=True)
    assert sol.status == 1  # the current reached zero
    t = np.linspace(0.0, sol.t[-1], 4001)[1:]
    x = sol.sol(t)[0] - np.array([ich(tt) for tt in t])
    assert np.all(x[t < sol.t[-1] * 0.999] > 0)  # the node stays on the conducting law
    peak = vk + rk * max(float(sol.sol(tf)[0]), 0.0)  # i − i_ch is largest at the fall's end
    return peak, float(sol.y[1, -1]), float(sol.t_events[1][0])


def test_bjt_avalanche_takes_the_current_at_once():
    # demo data (invented): a 150 V coil on a BJT, its fall far faster than L·i0/V_BR
    vs, L, R, tf, vbr, rav = 150.0, 2.0e-3, 1500.0, 0.5e-6, 260.0, 0.055
    sw = Switch("bjt", saturation_voltage=0.0, fall_time=tf, breakdown_voltage=vbr, avalanche_resistance=rav,
                rated_voltage=300.0, rated_avalanche_energy=1e-3)
    case = Case("avalanche at t = 0+ (demo data)", Supply(vs), Coil(L, R), sw, (), Checks(derating=1.0))
    r = simulate(case, engine="batch")
    peak, energy, t10 = _reference(vs, L, R, tf, vbr, rav)
    f = r.figures
    # tolerances: the batch engine is exact for these piecewise-linear laws (DESIGN §9)
    assert f.peak_voltage_V == pytest.approx(peak, rel=1e-9)
    assert f.avalanche_energy_J == pytest.approx(energy, rel=1e-7)
    assert f.to_10_percent_s == pytest.approx(t10, rel=1e-7)


def test_diode_and_tvs_take_the_current_at_once():
    # demo data (invented): a small relay coil, an ideal switch, a constant-drop diode + a 1.3 mΩ TVS
    vs, L, R, tf, vf, vz, rz = 5.6, 0.02, 2100.0, 78e-9, 0.9, 12.9, 1.3e-3
    sw = Switch("ideal", fall_time=tf, rated_voltage=45.0)
    clamp = Clamp("C0", "coil", (Element("diode", name="D", model="constant-drop", forward_voltage=vf),
                                  Element("tvs", name="T", voltage=vz, dynamic_resistance=rz)))
    case = Case("diode + TVS at t = 0+ (demo data)", Supply(vs), Coil(L, R), sw, (clamp,), Checks(derating=1.0))
    r = simulate(case, engine="batch")
    peak, energy, t10 = _reference(vs, L, R, tf, vs + vf + vz, rz, off=vs)
    f = r.figures
    assert f.peak_voltage_V == pytest.approx(peak, rel=1e-9)
    assert f.clamps[0].energy_J == pytest.approx(energy, rel=1e-7)
    assert f.to_10_percent_s == pytest.approx(t10, rel=1e-7)
