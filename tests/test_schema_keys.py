"""One case schema: every numeric key of the key table (kickback.casekeys) can be varied by a
study, and a value a study sets passes the case file's own validation (range, condition, unit),
with the same one-line message as the value written in a file.

The walk goes over the key table itself, so a key added to the table without a way to vary it
fails here; a key a study may not vary must be named in :data:`NOT_VARIABLE` with its reason.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from kickback import load_case
from kickback.casekeys import CONDITIONS, key_specs, numeric_keys
from kickback.casevary import case_doc, check_ranges, variable_paths
from kickback.cli import main
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value, split_path, value_getter
from kickback.studies.sweep import parse_vary

CASES = Path(__file__).resolve().parent.parent / "cases"

#: numeric keys of the key table that a study may not vary, with the reason (none today: every
#: numeric key is variable, each entry of a list by its index)
NOT_VARIABLE: dict[str, str] = {}

_HEAD = 'title = "every key (invented demo data)"\n[supply]\nvoltage = "24 V"\n'
_COIL = ('[coil]\ninductance = "80 mH"\nresistance = "30 Ω"\ncapacitance = "100 pF"\nrelease_current = "0.2 A"\n'
         'release_delay = "1 ms"\ninitial_current = "0.7 A"\nsaturation_current = "2 A"\n')
_THERMAL = ('thermal_resistance = ["20 K/W", "40 K/W"]\nthermal_tau = ["1 ms", "1 s"]\n'
            'max_junction_temperature = "150 °C"\n')
_MOSFET = ('[switch]\ntype = "mosfet"\non_resistance = "50 mΩ"\nfall_time = "100 ns"\ncapacitance = "200 pF"\n'
           'breakdown_voltage = "60 V"\navalanche_resistance = "0.1 Ω"\nbody_diode_voltage = "0.8 V"\n'
           'rated_voltage = "55 V"\nrated_avalanche_energy = "50 mJ"\nrated_repetitive_avalanche_energy = "5 mJ"\n'
           'gate_voltage = "10 V"\non_resistance_gate_voltage = "10 V"\n' + _THERMAL)
_BJT = ('[switch]\ntype = "bjt"\nsaturation_voltage = "0.2 V"\ngain = 80\ndrive_voltage = "5 V"\n'
        'base_resistance = "470 Ω"\nbase_emitter_voltage = "0.65 V"\noverdrive = 2\n')
_CHECKS = ('[checks]\nderating = 0.75\nenergy_derating = "70 %"\nmax_release_time = "20 ms"\n'
           'max_peak_voltage = "50 V"\nmax_decay_time = "30 ms"\nmax_clamp_energy = "1 J"\n'
           'ambient_temperature = "40 °C"\nmin_margin = 0.1\n')
_ELEMENTS = (
    'type = "diode"\nforward_voltage = "0.9 V"\nat_current = "1 A"\nideality = 1.8\nseries_resistance = "50 mΩ"\n'
    'temperature = "300 K"\nrated_reverse_voltage = "100 V"\nrated_surge_current = "30 A"\n'
    'rated_average_current = "1 A"\n' + _THERMAL,
    'type = "diode"\nideality = 1.8\nsaturation_current = "1 nA"\n',
    'type = "zener"\nvoltage = "20 V"\ntest_current = "5 mA"\nimpedance = "10 Ω"\nforward_voltage = "0.8 V"\n'
    'rated_pulse_energy = "1 J"\nrated_peak_power = "600 W"\nrated_pulse_width = "1 ms"\n' + _THERMAL,
    'type = "zener"\nvoltage = "22 V"\ndynamic_resistance = "1 Ω"\n',
    'type = "tvs"\nvoltage = "40 V"\ndynamic_resistance = "0.5 Ω"\nforward_voltage = "0.9 V"\n'
    'rated_pulse_energy = "1 J"\nrated_peak_power = "600 W"\nrated_pulse_width = "1 ms"\n' + _THERMAL,
    'type = "tvs"\nbreakdown_voltage = "40 V"\ntest_current = "1 mA"\nclamping_voltage = "60 V"\n'
    'peak_pulse_current = "10 A"\nstandoff_voltage = "34 V"\nbidirectional = true\n',
    'type = "resistor"\nresistance = "50 Ω"\nrated_energy = "2 J"\n' + _THERMAL,
    'type = "capacitor"\ncapacitance = "10 nF"\nrated_voltage = "100 V"\n',
    'type = "varistor"\nvoltage = "40 V"\nat_current = "1 mA"\nexponent = 30\nrated_energy = "2 J"\n' + _THERMAL,
)
_CLAMPS = "".join(f'[[clamp]]\nname = "c{k}"\nacross = "coil"\n[[clamp.element]]\n{body}\n'
                  for k, body in enumerate(_ELEMENTS))
_DRIVE_MOTOR = ('[drive]\nfrequency = "20 kHz"\nduty = 0.5\n[motor]\nback_emf_constant = 0.02\nspeed = 100\n',
                '[drive]\nfrequency = "20 kHz"\nduties = [0.3, 0.6]\n[motor]\nback_emf_constant = 0.02\n'
                'inertia = 2e-5\nviscous_friction = 1e-5\nload_torque = 1e-3\n')
#: demo cases that together give every numeric key of the key table a value
DEMO = {"mosfet": _HEAD + _COIL + _MOSFET + _CHECKS + _CLAMPS, "bjt": _HEAD + _COIL + _BJT,
        "duty-speed": _HEAD + _COIL + _BJT + _DRIVE_MOTOR[0],
        "duties-mechanical": _HEAD + _COIL + _BJT + _DRIVE_MOTOR[1]}


def _key_of(case, path: str) -> str:
    """The key table's name of a path: ``coil.inductance``, ``element:zener.voltage``."""
    parts = split_path(path)
    if parts[0][0] == "clamp":
        return f"element:{case.clamps[parts[0][1]].elements[parts[1][1]].type}.{parts[-1][0]}"
    return f"{parts[0][0]}.{parts[1][0]}"


def _given(case, path: str) -> bool:
    """Whether the case file gives the value at ``path`` (a key left to its default is not given)."""
    node = case_doc(case)
    for name, index in split_path(path):
        if name not in node and name == "duties":  # a lone duty is written duty = x
            name, index = "duty", None
        if name not in node:
            return False
        node = node[name] if index is None else node[name][index]
    return True


def _demo_paths():
    out = []
    for name, text in DEMO.items():
        case = load_case(text, source=f"{name}.toml")
        # the paths whose value the case file gives (a study may also set a key the case leaves out)
        out += [(name, path, _key_of(case, path)) for path in variable_paths(case) if _given(case, path)]
    return out


def test_every_numeric_key_of_the_table_is_variable_or_excluded_with_a_reason():
    """The key table's numeric keys (lists included) against the paths a study accepts on the demo
    cases: none is missing unless named in NOT_VARIABLE, and an excluded key is really refused."""
    table = set(numeric_keys(lists=True))
    varied = {key for _, _, key in _demo_paths()}
    missing = sorted(table - varied - set(NOT_VARIABLE))
    assert not missing, f"numeric keys a study cannot vary on the demo cases: {missing}"
    assert not set(NOT_VARIABLE) & varied, "a key named in NOT_VARIABLE is variable: remove it from the list"
    assert all(why.strip() for why in NOT_VARIABLE.values())


def _two_values(path: str, x: float) -> tuple[float, float]:
    """Two valid values around x (the demo values sit inside every range: 1 % up stays inside)."""
    return (x, x * 1.01) if x != 0 else (0.0, 1e-3)


@pytest.mark.parametrize(("name", "path", "key"), _demo_paths(), ids=lambda x: str(x))
def test_each_path_is_swept_like_a_file_value(name, path, key):
    """The sweep's key parser and its validation (what ``run_sweep`` runs before any point) take
    the path; the value is set and read back; the engines' getter returns the varied values."""
    case = load_case(DEMO[name], source=f"{name}.toml")
    x = get_value(case, path)
    assert x is not None and math.isfinite(x)
    lo, hi = _two_values(path, x)
    ax = parse_vary(f"{path}={lo!r}:{hi!r}:2", case=case)
    assert ax.path == path and ax.unit == numeric_keys(lists=True)[key]
    check_ranges(case, {path: (lo, hi)}, "--vary")
    assert get_value(set_value(case, path, hi), path) == hi
    got = value_getter(case, {path: np.array([lo, hi])}, 2)(path)
    assert got.tolist() == [lo, hi]


def _invalid(cond: str, x: float) -> float:
    """A value its key's condition refuses (CONDITIONS in kickback.casekeys)."""
    return {">0": -abs(x), ">=0": -abs(x) - 1.0, ">1": 0.5, "(0,1]": 1.5, "[0,1)": 1.0, "[0.5,10]": 20.0,
            "T": 1000.0}[cond]


def _conditioned():
    tables, elements, _ = key_specs()
    out = []
    for name, path, key in _demo_paths():
        table, leaf = key.split(".")
        spec = elements[table.split(":")[1]] if table.startswith("element:") else tables[table]
        if spec[leaf].cond:
            out.append((name, path, spec[leaf]))
    return out


@pytest.mark.parametrize(("name", "path", "field"), _conditioned(), ids=lambda x: str(getattr(x, "kind", x)))
def test_a_varied_value_outside_its_range_gets_the_file_message(name, path, field):
    """A value its key's condition refuses is refused for a study with the words the loader uses
    for the same value in a file: the key, "must be <condition>" and what was expected."""
    case = load_case(DEMO[name], source=f"{name}.toml")
    bad = _invalid(field.cond, get_value(case, path))
    with pytest.raises(CaseError) as err:
        check_ranges(case, {path: (bad, bad)}, "--vary")
    msg = str(err.value)
    file_key = path.rsplit("[", 1)[0] if path.endswith("]") else path
    assert f"{file_key}: must be {CONDITIONS[field.cond][1]}, got" in msg, msg
    entry = replace(field, kind="q") if field.kind == "l" else field  # a list's entry reads as one value
    assert f"(expected {entry.expected()})" in msg and "\n" not in msg


_VALVE = CASES / "irrigation_valve.toml"


@pytest.mark.parametrize(("args", "words"), [
    (["--vary", "coil.inductance=-1mH:10mH:3"], "coil.inductance: must be > 0, got -1 mH (expected a value in H > 0"),
    (["--vary", "checks.derating=0.5:1.5:3"], "checks.derating: must be in (0, 1], got 1.5 (expected a fraction"),
], ids=["negative-inductance", "derating-above-1"])
def test_cli_sweep_to_an_invalid_value_writes_nothing(tmp_path, args, words):
    """One line naming the key and what was expected, exit 2, no --out directory written."""
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["sweep", str(_VALVE), *args, "--out", str(out)])
    assert res.exit_code == 2, res.output
    assert words in res.stderr and res.stderr.count("\n") == 1 and "Traceback" not in res.output
    assert res.stdout == "" and not out.exists()


@pytest.mark.parametrize(("band", "words"), [
    ('[tolerance."coil.inductance"]\nmin = "-1 mH"\nmax = "10 mH"\n',
     "coil.inductance: must be > 0, got -1 mH (expected a value in H > 0"),
    ('[tolerance."checks.derating"]\nmin = 0.5\nmax = 1.5\n',
     "checks.derating: must be in (0, 1], got 1.5 (expected a fraction"),
], ids=["negative-inductance", "derating-above-1"])
def test_cli_tolerance_band_to_an_invalid_value_writes_nothing(tmp_path, band, words):
    p = tmp_path / "tol.toml"
    p.write_text(_VALVE.read_text().split("[tolerance")[0] + band)
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["tolerance", str(p), "--samples", "20", "--seed", "1", "--out", str(out)])
    assert res.exit_code == 2, res.output
    assert words in res.stderr and res.stderr.count("\n") == 1 and "Traceback" not in res.output
    assert res.stdout == "" and not out.exists()


def test_a_foster_stage_swept_by_its_index_reaches_the_junction_temperature():
    """Sweeping one Foster stage's resistance (a list entry) changes the TVS's junction
    temperature by no more than E·ΔR/τ: a stage whose τ (2 s) is far above the pulse (~10 ms)
    integrates the power, ΔT_k ≈ (R_k/τ_k)·∫P dt ≤ E·R_k/τ_k (Foster network step response
    Z(t) = Σ R_k(1 − e^(−t/τ_k)), JEDEC JESD51-14 terms, from memory)."""
    from kickback.studies.points import evaluate

    case = load_case(CASES / "conveyor_brake.toml")
    path = "clamp[0].element[0].thermal_resistance[2]"
    assert get_value(case, path) == 20.0 and case.clamps[0].elements[0].thermal_tau[2] == 2.0
    pts = evaluate(case, {path: [20.0, 60.0]})
    tj = pts.checks["TVS1 junction temperature"].value
    energy = pts.figures["clamp[0].energy_J"][0]
    rise = tj[1] - tj[0]
    assert 0 < rise <= energy * 40.0 / 2.0 * (1 + 1e-9)


@pytest.mark.parametrize(("path", "words"), [
    ("switch.saturation_voltage", "applies to a bjt switch"),
    ("switch.gain", "applies to a bjt switch"),
    ("clamp[0].element[1].resistance", "does not apply to a zener element"),
], ids=["bjt-key-on-mosfet", "bjt-gain-on-mosfet", "resistor-key-on-zener"])
def test_simulate_many_refuses_a_key_no_engine_reads(path, words):
    """simulate_many took these and returned the same figures for every value (no engine reads a
    BJT's key on a MOSFET): now refused as the case file refuses it."""
    from kickback import simulate_many

    with pytest.raises(CaseError, match=words):
        simulate_many(load_case(_VALVE), {path: [0.1, 0.2]})


@pytest.mark.parametrize(("values", "words"), [
    ({"checks.derating": [0.8, 1.5]}, "checks.derating: must be in (0, 1], got 1.5 (expected a fraction"),
    ({"coil.inductance": [0.05, -0.01]}, "coil.inductance: must be > 0, got -10 mH (expected a value in H > 0"),
    ({"clamp[0].element[1].voltage": [20.0, -5.0]}, "clamp[0].element[1].voltage: must be > 0, got -5 V"),
    ({"coil.inductance": [0.05, 1e20]}, "outside the range kickback computes with"),
    ({"coil.inductance": [0.05, float("nan")]}, "must be finite"),
], ids=["derating-above-1", "negative-inductance", "negative-zener-voltage", "beyond-magnitude", "nan"])
def test_simulate_many_refuses_a_value_the_case_file_refuses(values, words):
    """A derating of 1.5 ran with its limits raised by half and passed; a negative Zener voltage
    ran and failed only its audit: each value now passes its key's own rule, with the file's words."""
    from kickback import simulate_many

    with pytest.raises(CaseError) as err:
        simulate_many(load_case(_VALVE), values)
    assert words in str(err.value) and "\n" not in str(err.value)
