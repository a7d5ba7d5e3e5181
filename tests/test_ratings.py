"""Rating checks (kickback.ratings.rating_checks): limit = rating × derating, margin by hand.

The figures are built directly (invented numbers) so that every limit and margin below is
worked out by hand from the definitions in DESIGN.md §5–6:
limit = rating × derating (voltage, current) or × energy_derating (energy, power; default the
same fraction), margin = (limit − value)/limit, pass = value ≤ limit. Derating to 80 % is common
practice, no source. One end-to-end case uses kickback.simulate with a constant-voltage clamp,
whose peak voltage is Vs + Vd + Vz (derived: DESIGN §3, an ideal clamp holds the node at its
voltage above the supply).
"""

from __future__ import annotations

import dataclasses

import pytest

from kickback.case import Case, Checks, Clamp, Coil, Element, Supply, Switch
from kickback.figures import ClampFigures, ElementFigures, Figures
from kickback.ratings import rating_checks
from kickback.simulation import simulate

STORED = 0.5 * 0.08 * 0.8**2  # [J] ½·L·i0² of the invented 80 mH coil at 0.8 A


def _element_figures(etype, name, *, energy=0.0, peak_v=0.0, peak_i=0.0, standoff=0.0, peak_p=0.0):
    return ElementFigures(type=etype, name=name, description=f"{etype} (test)", energy_J=energy,
                          peak_voltage_V=peak_v, peak_current_A=peak_i, standoff_voltage_V=standoff,
                          peak_power_W=peak_p, pulse_width_s=None)


def _clamp_figures(name, *elements, across="coil"):
    return ClampFigures(name=name, across=across, energy_J=sum(e.energy_J for e in elements),
                        peak_current_A=max((e.peak_current_A for e in elements), default=0.0),
                        conduction_s=1e-3, on_state_current_A=0.0, elements=tuple(elements))


def _figures(clamps=(), **kw):
    """Invented figures of one turn-off; keyword arguments override single fields."""
    base = dict(initial_current_A=0.8, stored_energy_J=STORED, initial_capacitor_energy_J=0.0,
                resistance_energy_J=0.01, to_10_percent_s=1.0e-3, to_1_percent_s=1.5e-3, to_zero_s=1.8e-3,
                release_s=4.2e-3, peak_voltage_V=40.0, peak_time_s=0.0, crossover_energy_J=0.0,
                avalanche_energy_J=0.0, body_diode_energy_J=0.0, supply_energy_J=0.0, clamps=tuple(clamps),
                left_in_capacitors_J=0.0, left_in_coil_J=0.0, energy_balance_error=0.0, end_time_s=2e-3,
                bound_hit=False, findings=(), models=())
    base.update(kw)
    return Figures(**base)


def _case(clamps=(), switch=None, checks=None):
    return Case("ratings test (invented)", Supply(24.0), Coil(0.08, 30.0),
                switch or Switch("ideal"), tuple(clamps), checks or Checks())


def _row(checks, part, quantity):
    rows = [c for c in checks if c.part == part and c.quantity == quantity]
    assert len(rows) == 1, f"expected one row {part!r}/{quantity!r}, got {[(c.part, c.quantity) for c in checks]}"
    return rows[0]


def _assert_row(row, value, limit, passed, rtol=1e-12):
    """limit and margin = (limit − value)/limit computed here (DESIGN §6); ``rtol`` on the value."""
    assert row.value == pytest.approx(value, rel=rtol), f"{row.part} {row.quantity}: value {row.value}, want {value}"
    assert row.limit == pytest.approx(limit, rel=1e-12), f"{row.part} {row.quantity}: limit {row.limit}, want {limit}"
    want_margin = (limit - value) / limit
    # derived: an error δ in the value moves the margin by δ/limit
    assert row.margin == pytest.approx(want_margin, rel=1e-12, abs=rtol * abs(value) / limit + 1e-15), (
        f"{row.part} {row.quantity}: margin {row.margin}, want {want_margin}")
    assert row.passed is passed, f"{row.part} {row.quantity}: pass {row.passed}, want {passed}"


# ============================================================================ switch
@pytest.mark.parametrize(("peak", "rated", "derating", "passed"), [
    pytest.param(40.0, 60.0, 0.8, True, id="40V-of-60Vx0.8-pass"),
    pytest.param(50.0, 60.0, 0.8, False, id="50V-of-60Vx0.8-fail"),
    pytest.param(48.0, 60.0, 0.8, True, id="at-the-limit-passes"),
    pytest.param(50.0, 60.0, 0.9, True, id="50V-of-60Vx0.9-pass"),
])
def test_switch_peak_voltage(peak, rated, derating, passed):
    """Switch peak voltage against rated_voltage × derating (DESIGN §5)."""
    case = _case(switch=Switch("mosfet", on_resistance=0.05, rated_voltage=rated), checks=Checks(derating=derating))
    rows = rating_checks(case, _figures(peak_voltage_V=peak))
    _assert_row(_row(rows, "switch", "peak voltage"), peak, rated * derating, passed)


def test_switch_avalanche_without_rating_fails_with_no_limit():
    """A switch that avalanches but has no avalanche rating fails, limit None (DESIGN §5)."""
    case = _case(switch=Switch("mosfet", on_resistance=0.05, breakdown_voltage=60.0))
    row = _row(rating_checks(case, _figures(avalanche_energy_J=5e-3)), "switch", "avalanche energy")
    assert row.value == pytest.approx(5e-3), f"avalanche energy value {row.value}"
    assert row.limit is None and row.margin is None, f"no rating: limit {row.limit}, margin {row.margin}"
    assert row.passed is False, "avalanche into an unrated switch must fail"


@pytest.mark.parametrize(("energy_derating", "limit"), [
    pytest.param(None, 30e-3 * 0.8, id="energy-derating-defaults-to-derating"),
    pytest.param(0.5, 30e-3 * 0.5, id="energy-derating-given"),
])
def test_switch_avalanche_with_rating(energy_derating, limit):
    """Avalanche energy against rated_avalanche_energy × energy_derating (DESIGN §5)."""
    case = _case(switch=Switch("mosfet", on_resistance=0.05, breakdown_voltage=60.0, rated_avalanche_energy=30e-3),
                 checks=Checks(derating=0.8, energy_derating=energy_derating))
    row = _row(rating_checks(case, _figures(avalanche_energy_J=18e-3)), "switch", "avalanche energy")
    _assert_row(row, 18e-3, limit, 18e-3 <= limit)


@pytest.mark.parametrize("rated", [None, 30e-3], ids=["unrated", "rated"])
@pytest.mark.parametrize("energy", [0.0, -5e-3], ids=["none", "negative"])
def test_avalanche_row_exists_by_the_ratings(rated, energy):
    """A switch that can break down has its avalanche check whatever energy the run booked (issue
    14: a check the ratings call for exists by rule, not by the sign of its value): a zero energy
    passes; a negative one is not hidden (the row shows it; the audit rejects it)."""
    case = _case(switch=Switch("mosfet", on_resistance=0.05, breakdown_voltage=60.0, rated_avalanche_energy=rated))
    row = _row(rating_checks(case, _figures(avalanche_energy_J=energy)), "switch", "avalanche energy")
    assert row.value == energy, f"avalanche energy value {row.value}, want {energy}"
    assert row.passed is True, "no avalanche passes its check"
    assert (row.limit is None) == (rated is None), f"limit {row.limit} for rating {rated}"


def test_no_breakdown_no_avalanche_row():
    """A switch with neither a breakdown voltage nor an avalanche rating cannot avalanche: no row."""
    case = _case(switch=Switch("mosfet", on_resistance=0.05))
    assert not [c for c in rating_checks(case, _figures()) if c.quantity == "avalanche energy"]


def test_no_ratings_no_rows():
    """A case without ratings or limits yields no checks."""
    assert rating_checks(_case(), _figures()) == []


# ============================================================================ clamp elements
DIODE = Element("diode", name="D1", model="constant-drop", forward_voltage=0.7,
                rated_reverse_voltage=100.0, rated_surge_current=2.0)
ZENER = Element("zener", name="Z1", voltage=24.0, rated_pulse_energy=0.2, rated_peak_power=50.0)


def _dz_case(checks):
    return _case(clamps=(Clamp("DZ", "coil", (DIODE, ZENER)),), checks=checks)


def _dz_figures(*, standoff=24.0, peak_i=0.8, zener_energy=0.02, zener_peak_p=19.2):
    return _figures(clamps=(_clamp_figures(
        "DZ",
        _element_figures("diode", "D1", energy=5e-4, peak_i=peak_i, standoff=standoff),
        _element_figures("zener", "Z1", energy=zener_energy, peak_v=24.0, peak_i=peak_i, peak_p=zener_peak_p)),))


@pytest.mark.parametrize(("standoff", "passed"), [
    pytest.param(24.0, True, id="24V-of-100Vx0.8"), pytest.param(85.0, False, id="85V-of-100Vx0.8")])
def test_diode_reverse_voltage(standoff, passed):
    """Diode standoff against rated_reverse_voltage × derating (DESIGN §5)."""
    rows = rating_checks(_dz_case(Checks(derating=0.8)), _dz_figures(standoff=standoff))
    _assert_row(_row(rows, "DZ: D1", "reverse voltage"), standoff, 80.0, passed)


@pytest.mark.parametrize(("peak_i", "passed"), [
    pytest.param(0.8, True, id="0.8A-of-2Ax0.8"), pytest.param(1.7, False, id="1.7A-of-2Ax0.8")])
def test_diode_surge_current(peak_i, passed):
    """Diode peak current against rated_surge_current × derating (DESIGN §5)."""
    rows = rating_checks(_dz_case(Checks(derating=0.8)), _dz_figures(peak_i=peak_i))
    _assert_row(_row(rows, "DZ: D1", "peak current"), peak_i, 1.6, passed)


@pytest.mark.parametrize(("checks", "fraction"), [
    pytest.param(Checks(derating=0.7), 0.7, id="energy-derating-defaults-to-derating"),
    pytest.param(Checks(derating=0.7, energy_derating=0.5), 0.5, id="energy-derating-given"),
])
def test_zener_pulse_energy_and_peak_power(checks, fraction):
    """Zener pulse energy and peak power against the rating × energy_derating (DESIGN §5)."""
    rows = rating_checks(_dz_case(checks), _dz_figures(zener_energy=0.12, zener_peak_p=30.0))
    _assert_row(_row(rows, "DZ: Z1", "pulse energy"), 0.12, 0.2 * fraction, 0.12 <= 0.2 * fraction)
    _assert_row(_row(rows, "DZ: Z1", "peak power"), 30.0, 50.0 * fraction, 30.0 <= 50.0 * fraction)


@pytest.mark.parametrize(("etype", "extra"), [
    pytest.param("resistor", {"resistance": 10.0}, id="resistor"),
    pytest.param("varistor", {"voltage": 39.0, "exponent": 30.0}, id="varistor"),
])
def test_resistor_and_varistor_energy(etype, extra):
    """Pulse energy of a resistor or varistor against rated_energy × energy_derating (DESIGN §5)."""
    el = Element(etype, name="X1", rated_energy=0.5, **extra)
    case = _case(clamps=(Clamp("X", "switch", (el,)),), checks=Checks(derating=0.8))
    fig = _figures(clamps=(_clamp_figures("X", _element_figures(etype, "X1", energy=0.3), across="switch"),))
    _assert_row(_row(rating_checks(case, fig), "X: X1", "pulse energy"), 0.3, 0.4, True)


@pytest.mark.parametrize(("peak_v", "passed"), [
    pytest.param(60.0, True, id="60V-of-100Vx0.8"), pytest.param(90.0, False, id="90V-of-100Vx0.8")])
def test_capacitor_voltage(peak_v, passed):
    """Snubber capacitor peak voltage against rated_voltage × derating (DESIGN §5)."""
    els = (Element("resistor", name="R1", resistance=47.0), Element("capacitor", name="C1", capacitance=100e-9,
                                                                    rated_voltage=100.0))
    case = _case(clamps=(Clamp("RC", "switch", els),), checks=Checks(derating=0.8))
    fig = _figures(clamps=(_clamp_figures("RC", _element_figures("resistor", "R1", energy=1e-3),
                                          _element_figures("capacitor", "C1", peak_v=peak_v), across="switch"),))
    _assert_row(_row(rating_checks(case, fig), "RC: C1", "peak voltage"), peak_v, 80.0, passed)


# ============================================================================ case limits
@pytest.mark.parametrize(("release", "passed"), [
    pytest.param(10e-3, True, id="10ms-of-12ms"), pytest.param(15e-3, False, id="15ms-of-12ms")])
def test_max_release_time(release, passed):
    """Release time against checks.max_release_time, no derating (DESIGN §5: a case limit)."""
    rows = rating_checks(_case(checks=Checks(max_release_time=12e-3)), _figures(release_s=release))
    _assert_row(_row(rows, "case", "release time"), release, 12e-3, passed)


def test_max_release_time_without_release_fails():
    """No release time (DESIGN §6: null) with a release limit is a failed check, value None."""
    row = _row(rating_checks(_case(checks=Checks(max_release_time=12e-3)), _figures(release_s=None)),
               "case", "release time")
    assert row.value is None and row.margin is None, f"value {row.value}, margin {row.margin}"
    assert row.passed is False, "a release that never happens cannot meet a release limit"


def test_max_peak_voltage():
    """Peak switch voltage against checks.max_peak_voltage (case limit, no derating)."""
    rows = rating_checks(_case(checks=Checks(max_peak_voltage=50.0)), _figures(peak_voltage_V=48.7))
    _assert_row(_row(rows, "case", "peak switch voltage"), 48.7, 50.0, True)


@pytest.mark.parametrize(("to_zero", "passed"), [
    pytest.param(1.8e-3, True, id="1.8ms-of-2ms"), pytest.param(2.5e-3, False, id="2.5ms-of-2ms")])
def test_max_decay_time(to_zero, passed):
    """Decay to zero against checks.max_decay_time (case limit)."""
    rows = rating_checks(_case(checks=Checks(max_decay_time=2e-3)), _figures(to_zero_s=to_zero))
    _assert_row(_row(rows, "case", "decay to zero"), to_zero, 2e-3, passed)


def test_max_decay_time_without_zero_fails():
    """The current never reached zero in the run: the decay limit fails, value None."""
    row = _row(rating_checks(_case(checks=Checks(max_decay_time=2e-3)), _figures(to_zero_s=None)),
               "case", "decay to zero")
    assert row.value is None and row.passed is False, f"value {row.value}, pass {row.passed}"


@pytest.mark.parametrize(("zener_energy", "passed"), [
    pytest.param(0.02, True, id="under-limit"), pytest.param(0.05, False, id="over-limit")])
def test_max_clamp_energy(zener_energy, passed):
    """Each clamp's total energy against checks.max_clamp_energy (case limit)."""
    fig = _dz_figures(zener_energy=zener_energy)
    total = 5e-4 + zener_energy  # diode + Zener energies of _dz_figures
    rows = rating_checks(_dz_case(Checks(max_clamp_energy=0.03)), fig)
    _assert_row(_row(rows, "DZ", "clamp energy"), total, 0.03, passed)


def test_check_to_dict_keys():
    """Check.to_dict has exactly the contract keys of DESIGN §6 and the unit added by issue 20."""
    rows = rating_checks(_dz_case(Checks(max_release_time=12e-3)), _dz_figures())
    assert rows, "the diode/Zener case has rated parts"
    for row in rows:
        d = row.to_dict()
        assert set(d) == {"part", "quantity", "value", "limit", "margin", "pass", "unit"}, f"keys {sorted(d)}"
        assert d["unit"] == row.unit and d["unit"] in {"V", "A", "J", "W", "s", "K"}
        assert d["pass"] is row.passed and d["value"] == row.value and d["limit"] == row.limit


# ============================================================================ end to end
def test_ratings_of_a_simulated_diode_zener_clamp():
    """Ideal switch, ideal D 0.7 V + Z 24 V across an 80 mH / 30 Ω coil at 24 V (invented).

    derived: peak = Vs + Vd + Vz = 48.7 V (DESIGN §3); the diode holds Vs = 24 V in the
    on-state (ideal switch at 0 V) and carries i0 = Vs/R = 0.8 A at t = 0+ (continuity of the
    coil current, Alexander & Sadiku ch. 6).
    """
    switch = Switch("ideal", rated_voltage=60.0)
    diode = dataclasses.replace(DIODE, rated_surge_current=1.2)
    case = Case("D+Z (invented)", Supply(24.0), Coil(0.08, 30.0), switch,
                (Clamp("DZ", "coil", (diode, Element("zener", name="Z1", voltage=24.0))),),
                Checks(derating=0.8, max_peak_voltage=50.0))
    res = simulate(case)
    # rtol 1e-9: the engine gives an ideal off switch a 1e-12 relative leakage (circuit.g_leak),
    # and the algebraic node voltage is exact otherwise (DESIGN §3)
    tol = 1e-9
    sw = _row(res.checks, "switch", "peak voltage")
    _assert_row(sw, 48.7, 48.0, False, tol)  # 48.7 V > 0.8 × 60 V: fails by (48 − 48.7)/48
    _assert_row(_row(res.checks, "DZ: D1", "reverse voltage"), 24.0, 80.0, True, tol)
    _assert_row(_row(res.checks, "DZ: D1", "peak current"), 0.8, 0.96, True, tol)
    _assert_row(_row(res.checks, "case", "peak switch voltage"), 48.7, 50.0, True, tol)
    assert res.passed is False, "one failing check fails the case"


# ============================================================================ clamp conducting while on
def _lone_zener_case(vs=24.0, r=30.0, r_on=0.5, vz=20.0, rd=1.5, vf=0.7):
    zener = Element("zener", voltage=vz, dynamic_resistance=rd, forward_voltage=vf)
    return Case("lone Zener across the coil (invented)", Supply(vs), Coil(0.08, r),
                Switch("mosfet", on_resistance=r_on, rated_voltage=60.0), (Clamp("Z1", "coil", (zener,)),),
                Checks())


@pytest.mark.parametrize("engine", ["detailed", "batch"])
def test_clamp_conducting_while_on_fails(engine):
    """A lone Zener across the coil conducts forward while the switch is on: a failed check, on both
    engines, with the on-state current of the DC node balance solved by hand (Kirchhoff's current law,
    linear pieces): v/R_on = (Vs − v)/R + (Vs − V_f − v)/r_d, i_Z = (Vs − V_f − v)/r_d."""
    vs, r, r_on, vf, rd = 24.0, 30.0, 0.5, 0.7, 1.5
    v = (vs / r + (vs - vf) / rd) / (1 / r_on + 1 / r + 1 / rd)
    i_z = (vs - vf - v) / rd
    assert i_z > 10.0  # the hand solution: about 11.5 A through the Zener's forward path
    res = simulate(_lone_zener_case(vs, r, r_on, 20.0, rd, vf), engine=engine)
    row = _row(res.checks, "Z1", "current while the switch is on")
    assert row.value == pytest.approx(i_z, rel=1e-9)
    assert row.passed is False and row.limit == 0.0
    assert res.passed is False


def test_clamp_conducting_while_on_batch_columns_agree():
    """The rules as columns over many variants (kickback.ratings.check_columns) give the same row
    (value, pass) as for one case, and only where the clamp conducts in the on-state: a supply of
    0.5 V stays below the Zener's 0.7 V forward drop, so that variant has no row."""
    from kickback.studies.many import simulate_many

    case = _lone_zener_case()
    many = simulate_many(case, {"supply.voltage": [0.5, 12.0, 24.0]})
    col = many.checks["Z1: current while the switch is on"]
    assert list(col.applies) == [False, True, True]
    assert list(col.passed) == [True, False, False]
    assert list(many.passed[1:]) == [False, False]
    for k, vs in enumerate([12.0, 24.0], start=1):
        v = (vs / 30.0 + (vs - 0.7) / 1.5) / (1 / 0.5 + 1 / 30.0 + 1 / 1.5)  # node balance as above
        assert col.value[k] == pytest.approx((vs - 0.7 - v) / 1.5, rel=1e-9)


@pytest.mark.parametrize("engine", ["detailed", "batch"])
def test_reverse_leakage_of_a_freewheel_diode_is_not_conduction(engine):
    """A Shockley freewheel diode reverse-biased by the supply in the on-state carries −I_s (the
    ideal diode's reverse saturation current, Sze & Ng, Physics of Semiconductor Devices, 3rd ed.,
    §2.3). On a weak coil (3 V, 5 kΩ: 0.6 mA) a saturation current of 1 µA is 1.7e-3 of the coil
    current, above ON_STATE_FRACTION: it is leakage, not conduction — no failed check, no finding.
    The detailed engine reports the on-state current −I_s itself (the closed form for v ≫ n·V_T)."""
    i_s = 1e-6
    diode = Element("diode", name="D1", model="shockley", ideality=1.0, saturation_current=i_s,
                    rated_reverse_voltage=50.0)
    case = Case("weak relay coil, leaky freewheel diode (invented)", Supply(3.0), Coil(0.5, 5000.0),
                Switch("mosfet", on_resistance=0.1, rated_voltage=60.0), (Clamp("D1", "coil", (diode,)),),
                Checks())
    res = simulate(case, engine=engine)
    assert not [c for c in res.checks if c.quantity == "current while the switch is on"]
    assert not [f for f in res.figures.findings if "while the switch is on" in f]
    if engine == "detailed":
        assert res.figures.clamps[0].on_state_current_A == pytest.approx(-i_s, rel=1e-6)
