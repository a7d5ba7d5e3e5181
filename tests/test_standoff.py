"""Stand-off per element kind (kickback.standoff), in both engines, against hand-worked values.

Definition (kickback/standoff.py, issues 14 and 15): the largest voltage an element holds in
its blocking direction while its chain does not conduct — in the on-state, in the rest state after
the transient (capacitors keep their charge, the node back at the supply), and at interior maxima
of a blocking interval (never at the knee where a breakdown element starts or stops conducting).
The expected values below follow from that definition and Kirchhoff's voltage law on the chain
(the chain voltage is the sum of its element voltages); the one dynamic value (the charge a
diode + R + C chain keeps) comes from a Radau solve (rtol 1e-12) of the series RLC written here.
"""

from __future__ import annotations

import pytest
from scipy.integrate import solve_ivp

from kickback.case import Case, Checks, Clamp, Coil, Element, Supply, Switch
from kickback.simulation import simulate

VS, L, R = 24.0, 0.08, 30.0
ENGINES = ["detailed", "batch"]


def _run(engine, clamps, switch=None):
    case = Case("stand-off (invented)", Supply(VS), Coil(L, R), switch or Switch("ideal"), tuple(clamps), Checks())
    return simulate(case, engine=engine).figures


def _standoffs(fig):
    return [[e.standoff_voltage_V for e in cl.elements] for cl in fig.clamps]


@pytest.mark.parametrize("engine", ENGINES)
def test_flyback_diode_and_zener(engine):
    """D + Z across the coil, MOSFET: in the on-state the chain sees v_on − Vs; the diode blocks it
    in reverse, the Zener (forward direction, no current) holds nothing; after the transient the
    node is back at Vs and the chain holds 0 V. Diode: Vs − i0·R_on; Zener: 0."""
    ron = 0.05
    cl = Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                               Element("zener", voltage=24.0, dynamic_resistance=1.5)))
    f = _run(engine, [cl], Switch("mosfet", on_resistance=ron))
    i0 = VS / (R + ron)
    assert _standoffs(f)[0] == pytest.approx([VS - i0 * ron, 0.0], rel=1e-9, abs=1e-9), _standoffs(f)


@pytest.mark.parametrize("engine", ENGINES)
@pytest.mark.parametrize(("etype", "kw"), [
    pytest.param("zener", dict(voltage=36.0, dynamic_resistance=1.0), id="zener"),
    pytest.param("tvs", dict(voltage=36.0, dynamic_resistance=1.0), id="tvs-unidirectional"),
    pytest.param("tvs", dict(voltage=36.0, dynamic_resistance=1.0, bidirectional=True), id="tvs-bidirectional"),
    pytest.param("varistor", dict(voltage=39.0, exponent=30.0), id="varistor"),
])
def test_clamp_across_the_switch_holds_the_supply_at_rest(engine, etype, kw):
    """A breakdown element across the switch (ideal switch: 0 V on): it holds 0 V while the
    switch is on and the supply Vs once the transient is over — not its breakdown voltage, where
    it sits only at the knee as its current dies away (issue 15). Stand-off: Vs."""
    f = _run(engine, [Clamp("X", "switch", (Element(etype, **kw),))])
    assert _standoffs(f)[0][0] == pytest.approx(VS, rel=1e-9), f"{etype}: {_standoffs(f)}"


@pytest.mark.parametrize("engine", ENGINES)
def test_bidirectional_tvs_across_the_coil_holds_the_supply(engine):
    """Issue 15: a bidirectional TVS across the coil holds Vs in the on-state (the coil's voltage)
    and reported its breakdown voltage (36 V) instead. Stand-off: Vs."""
    cl = Clamp("TVS", "coil", (Element("tvs", voltage=36.0, dynamic_resistance=1.0, bidirectional=True),))
    f = _run(engine, [cl])
    assert _standoffs(f)[0][0] == pytest.approx(VS, rel=1e-9), _standoffs(f)


def _kept_charge(vd, rc, cc):
    """Capacitor voltage [V] when the current of a D + R + C chain across the coil stops (Radau,
    rtol 1e-12): L di/dt = −(R + R_c)·i − V_d − v_C, C dv_C/dt = i, from i0 = Vs/R and the on-state
    v_C = −Vs (the chain's on-state voltage, DESIGN §3), until i = 0."""
    def rhs(t, y):
        return [(-(R + rc) * y[0] - vd - y[1]) / L, y[0] / cc]

    def stop(t, y):
        return y[0]

    stop.terminal, stop.direction = True, -1
    sol = solve_ivp(rhs, (0.0, 1.0), [VS / R, -VS], method="Radau", rtol=1e-12, atol=[1e-15, 1e-12], events=stop)
    assert sol.status == 1, "reference: the chain current never stopped"
    return float(sol.y_events[0][0][1])


@pytest.mark.parametrize("engine", ENGINES)
def test_diode_resistor_capacitor_chain_keeps_its_charge(engine):
    """Issue 14 (rcd_diode_standoff): after the transient the capacitor of a D + R + C chain across
    the coil keeps its charge V_C; with the node back at Vs the chain voltage is 0, so the diode
    blocks V_C in reverse (Kirchhoff: v_D + v_R + v_C = 0, v_R = 0 without current). Diode: V_C;
    resistor: 0; capacitor: max(Vs (on-state), V_C)."""
    vd, rc, cc = 0.7, 10.0, 100e-9
    cl = Clamp("D+R+C", "coil", (Element("diode", model="constant-drop", forward_voltage=vd),
                                 Element("resistor", resistance=rc), Element("capacitor", capacitance=cc)))
    f = _run(engine, [cl])
    vc = _kept_charge(vd, rc, cc)
    assert vc > 100.0, f"reference: the capacitor should charge far above Vs (got {vc} V)"
    assert _standoffs(f)[0] == pytest.approx([vc, 0.0, max(VS, vc)], rel=1e-6), (_standoffs(f), vc)


@pytest.mark.parametrize("engine", ENGINES)
def test_resistor_holds_off_nothing(engine):
    """A resistor's voltage is its current times its resistance: it holds off nothing, in a chain
    that conducts (R across the coil) or blocks (D + R across the coil). Stand-off: 0."""
    f = _run(engine, [Clamp("R", "coil", (Element("resistor", resistance=100.0),)),
                      Clamp("D+R", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                                            Element("resistor", resistance=47.0)))])
    assert _standoffs(f)[0] == [0.0] and _standoffs(f)[1][1] == 0.0, _standoffs(f)
    assert _standoffs(f)[1][0] == pytest.approx(VS, rel=1e-9), "the diode of D + R blocks Vs in the on-state"
