"""Varied values (sweep, tolerance): every numeric key of the case file can be varied, and every
varied value passes the case file's own rules (kickback.casevary, kickback.keypath)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from kickback import load_case
from kickback.caseio import key_specs
from kickback.cli import main
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value
from kickback.studies.sweep import parse_vary, run_sweep

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"

_ELEMENTS = {
    "diode": 'type = "diode"\nforward_voltage = "0.9 V"\nat_current = "1 A"\nideality = 1.8\n',
    "zener": 'type = "zener"\nvoltage = "20 V"\n',
    "tvs": 'type = "tvs"\nvoltage = "40 V"\n',
    "resistor": 'type = "resistor"\nresistance = "50 Ω"\n',
    "capacitor": 'type = "capacitor"\ncapacitance = "10 nF"\n',
    "varistor": 'type = "varistor"\nvoltage = "40 V"\nexponent = 30\n',
}


def _case_text(switch: str = "mosfet", mechanical: bool = False) -> str:
    """An invented case with every table: one clamp per element type, a [drive] with one duty and a
    [motor] (fixed speed or mechanical)."""
    sw = {"mosfet": 'on_resistance = "50 mΩ"', "bjt": 'saturation_voltage = "0.2 V"', "ideal": ""}[switch]
    motor = "inertia = 2e-5" if mechanical else "speed = 100"
    clamps = "".join(f'[[clamp]]\nname = "{t}"\nacross = "coil"\n[[clamp.element]]\n{body}\n'
                     for t, body in _ELEMENTS.items())
    return (f'title = "every table (invented)"\n[supply]\nvoltage = "24 V"\n[coil]\ninductance = "80 mH"\n'
            f'resistance = "30 Ω"\n[switch]\ntype = "{switch}"\n{sw}\nrated_voltage = "60 V"\n'
            f'[motor]\nback_emf_constant = 0.02\n{motor}\n[drive]\nfrequency = "20 kHz"\nduty = 0.5\n{clamps}')


def _case_for(table: str, key: str):
    """A case the key applies to (switch type, motor model)."""
    _, _, only = key_specs()
    switch = only.get(key, "mosfet") if table == "switch" else "mosfet"
    mechanical = table == "motor" and key in ("inertia", "viscous_friction", "load_torque")
    return load_case(_case_text(switch, mechanical), source="every.toml")


def _numeric_keys():
    """Every numeric key of the loader's own tables (kinds: quantity, plain number)."""
    tables, elements, _ = key_specs()
    out = [(t, k, f.unit) for t, spec in tables.items() for k, f in spec.items() if f.kind in ("q", "n")]
    out += [(f"element:{t}", k, f.unit) for t, spec in elements.items() for k, f in spec.items()
            if f.kind in ("q", "n")]
    return out


@pytest.mark.parametrize(("table", "key", "unit"), _numeric_keys(), ids=lambda x: str(x))
def test_every_numeric_case_key_can_be_varied(table, key, unit):
    """The sweep's key parser takes every numeric key the case file accepts, with the key's unit,
    and the value can be set and read back on a case it applies to."""
    if table.startswith("element:"):
        kind = table.split(":")[1]
        case = _case_for("clamp", key)
        path = f"clamp[{list(_ELEMENTS).index(kind)}].element[0].{key}"
    else:
        case = _case_for(table, key)
        path = f"{table}.{key}"
    ax = parse_vary(f"{path}=0.2:0.4:2")
    assert ax.unit == unit and ax.path == path
    x = 0.3
    assert get_value(set_value(case, path, x), path) == x


def test_a_key_that_does_not_apply_is_refused():
    case = load_case(VALVE)
    for path, words in (("switch.saturation_voltage", "applies to a bjt"), ("drive.duty", "no \\[drive\\]"),
                        ("clamp[0].element[1].resistance", "does not apply to a zener"),
                        ("motor.speed", "no \\[motor\\]")):
        with pytest.raises(CaseError, match=words):
            run_sweep(case, (parse_vary(f"{path}=0.1:0.3:2"),))
    pwm = load_case(CASES / "valve_pwm_hold.toml")  # duties = [0.3, 0.5]
    with pytest.raises(CaseError, match="2 duties"):
        run_sweep(pwm, (parse_vary("drive.duty=0.2:0.6:2"),))


@pytest.mark.parametrize(("args", "words"), [
    (["--vary", "supply.voltage=20V:80V:3"], "must exceed the supply voltage 80 V"),
    (["--vary", "checks.derating=0.5:5:3"], "checks.derating: must be in (0, 1]"),
    (["--vary", "switch.saturation_voltage=0.1V:0.3V:3"], "applies to a bjt switch"),
    (["--vary", "switch.fall_time=0s:1us:3", "--vary", "clamp[0].element[0].series_resistance=-1ohm:1ohm:3"],
     "must be >= 0"),
], ids=["supply-above-breakdown", "derating-5", "bjt-key-on-mosfet", "negative-resistance"])
def test_cli_sweep_refuses_values_the_case_file_refuses(args, words):
    """A varied value breaks a rule of the case file (DESIGN §5): one line, exit 2, nothing run."""
    res = CliRunner().invoke(main, ["sweep", str(VALVE), *args])
    assert res.exit_code == 2, res.output
    assert words in res.stderr and res.stderr.count("\n") == 1 and "Traceback" not in res.output
    assert res.stdout == ""


def _with_tolerance(extra: str) -> str:
    return VALVE.read_text().split("[tolerance")[0] + extra


@pytest.mark.parametrize(("extra", "words"), [
    ('[tolerance."switch.saturation_voltage"]\nmin = "0.1 V"\nmax = "0.3 V"\n', "applies to a bjt"),
    ('[tolerance."checks.derating"]\nmin = 0.5\nmax = 5\n', "must be in (0, 1]"),
    ('[tolerance."supply.voltage"]\nmin = "20 V"\nmax = "80 V"\n', "must exceed the supply voltage 80 V"),
], ids=["bjt-key-on-mosfet", "derating-5", "supply-above-breakdown"])
def test_tolerance_band_refused_like_the_case_file(tmp_path, extra, words):
    p = tmp_path / "tol.toml"
    p.write_text(_with_tolerance(extra))
    res = CliRunner().invoke(main, ["tolerance", str(p), "--samples", "20", "--seed", "1"])
    assert res.exit_code == 2, res.output
    assert words in res.stderr and "Traceback" not in res.output and res.stdout == ""


def test_tolerance_samples_checked_together(tmp_path):
    """Each band alone is valid, but their corner (supply 60 V, breakdown 58 V) breaks the rule
    breakdown > supply: refused before anything runs."""
    p = tmp_path / "tol.toml"
    p.write_text(_with_tolerance('[tolerance."supply.voltage"]\nmin = "20 V"\nmax = "60 V"\n'
                                 '[tolerance."switch.breakdown_voltage"]\nmin = "58 V"\nmax = "80 V"\n'))
    load_case(p)  # each band passes on its own
    res = CliRunner().invoke(main, ["tolerance", str(p), "--samples", "20", "--seed", "1"])
    assert res.exit_code == 2 and "must exceed the supply voltage" in res.stderr, res.output


def test_sweep_of_the_duty_changes_every_point():
    """drive.duty can be swept (detailed engine: a [drive]); the final turn-off starts from the
    periodic state, whose mean current follows the volt-second balance of the coil
    (D·(V_s − R_on·I) − (1 − D)·V_d = R·I, PWM averaging, Erickson & Maksimović, Fundamentals of
    Power Electronics, 2nd ed., §2.2); the ripple Vs·D(1 − D)/(f·L) ≤ 5 mA and the diode drop's
    spread (0.8–0.85 V from its Shockley law) bound the difference to the peak current by 4 %."""
    text = (CASES / "valve_pwm_hold.toml").read_text().replace("duties = [0.3, 0.5]", "duty = 0.5")
    case = load_case(text, source="hold.toml")
    sw = run_sweep(case, (parse_vary("drive.duty=0.3:0.6:2"),), engine="auto")
    assert sw.engine == "detailed" and not any(sw.errors)
    e = sw.figures["clamp_energy_J"]
    assert e[0] != e[1] and sw.figures["to_zero_s"][0] != sw.figures["to_zero_s"][1]
    from kickback import simulate

    for k, d in enumerate((0.3, 0.6)):
        r = simulate(load_case(text.replace("duty = 0.5", f"duty = {d}"), source="hold.toml"))
        assert sw.figures["clamp_energy_J"][k] == pytest.approx(sum(c.energy_J for c in r.figures.clamps),
                                                                rel=1e-9)
        i_mean = (d * 24.0 - (1 - d) * 0.82) / (48.0 + d * 0.08)
        assert r.figures.initial_current_A == pytest.approx(i_mean, rel=0.04)
    ratio = np.array(e)
    assert ratio[1] > 2 * ratio[0]  # about (0.6/0.3)² more energy at turn-off


_EXACT = """title = "diode + Zener, exact laws (invented)"
[supply]
voltage = "24 V"
[coil]
inductance = "80 mH"
resistance = "30 Ω"
release_current = "60 mA"
[switch]
type = "mosfet"
on_resistance = "50 mΩ"
rated_voltage = "60 V"
on_resistance_gate_voltage = "10 V"
[[clamp]]
name = "DZ"
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.8 V"
[[clamp.element]]
type = "zener"
voltage = "18 V"
"""


def test_varying_a_key_the_case_leaves_out_gives_the_variants_structure():
    """A key the base case does not give takes its structure from the variants: a gate voltage
    sweep gets the gate-voltage check (pass from 10 V on: at least the gate voltage R_on is
    specified at) on both engines alike; a saturation current makes the coil saturating, which the
    batch engine does not cover, so the sweep runs on the detailed engine."""
    case = load_case(_EXACT, source="exact.toml")
    ax = parse_vary("switch.gate_voltage=5V:12V:3")  # 5, 8.5, 12 V
    for engine in ("batch", "detailed"):
        sw = run_sweep(case, (ax,), engine=engine)
        assert [("switch gate voltage" in f) for f in sw.failing] == [True, True, False], engine
    sat = run_sweep(case, (parse_vary("coil.saturation_current=0.5A:2A:2"),), engine="auto")
    assert sat.engine == "detailed" and "saturating" in sat.engine_note
    base = run_sweep(case, (parse_vary("supply.voltage=24V:24.0001V:2"),), engine="auto")
    assert sat.figures["peak_voltage_V"][0] != pytest.approx(base.figures["peak_voltage_V"][0], rel=1e-9) or \
        sat.figures["to_zero_s"][0] != pytest.approx(base.figures["to_zero_s"][0], rel=1e-6)
