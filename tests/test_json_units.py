"""Every number in every JSON file kickback writes says its unit (issue 20).

A number's unit is readable when
- its key ends in an SI unit symbol (``peak_voltage_V``, ``release_s``, ``mean_torque_Nm``);
- it is a statistic of a figure named so (``percentiles.peak_voltage_V."99.0"``,
  ``corners.release_s.max``, ``coil.decay_s.to_zero``);
- the object holding it has a ``unit`` (check rows, worst samples, sensitivity rows, choices);
- its key is a case key path the document declares with its unit (a sweep's ``axes``, a tolerance
  study's ``parameters``);
- or it is a pure number by its name: a ratio (margin, yield, duty, relative error) or a count
  (samples, seed, parts, cycles, variants per engine) — :data:`PURE` lists them.

All cases are the project's demo data (invented designs).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback import load_case, simulate
from kickback.cli import main

ROOT = Path(__file__).resolve().parents[1]
CASES = sorted((ROOT / "cases").glob("*.toml"))
VALVE = ROOT / "cases" / "irrigation_valve.toml"
#: SI symbols a key may end in
SUFFIX = re.compile(r".+_(V|A|J|s|W|K|H|F|Hz|ohm|Nm|rad_s)$")
#: ratios and counts, by key; "seconds" names its own unit
PURE = {"margin", "min_margin", "yield", "yield_ci95", "energy_balance_error", "max_rel", "duty", "contraction",
        "residual", "seed", "samples", "failed_samples", "detailed_errors", "verdicts_differ", "indices", "sample",
        "present_in_one_only", "parts", "brute_force_cycles", "cycle_solves", "batch", "detailed", "seconds",
        "confidence", "points", "dof"}


def missing_units(doc) -> list[str]:
    """Paths of the numbers in ``doc`` whose unit cannot be read (see the module docstring)."""
    declared = set()
    for entry in (doc.get("axes") or []) + (doc.get("parameters") or []) if isinstance(doc, dict) else []:
        if isinstance(entry, dict) and entry.get("unit") is not None:
            declared.add(entry["key"])
    out = []

    def walk(x, keys: tuple, holder_has_unit: bool):
        if isinstance(x, dict):
            for k, v in x.items():
                walk(v, keys + (k,), "unit" in x)
        elif isinstance(x, list):
            for v in x:
                walk(v, keys, holder_has_unit)
        elif isinstance(x, (int, float)) and not isinstance(x, bool):
            own = keys[-1] if keys else ""
            parent = keys[-2] if len(keys) > 1 else ""
            if not (SUFFIX.match(own) or SUFFIX.match(parent) or holder_has_unit or own in declared
                    or own in PURE):
                out.append("/".join(keys))

    walk(doc, (), False)
    return sorted(set(out))


def test_the_rule_finds_a_number_without_a_unit():
    # the worst-sample row of a tolerance study before issue 20: value and limit with no unit
    row = {"worst_per_check": {"switch peak voltage": {"margin": -0.01, "value": 48.5, "limit": 48.0,
                                                       "params": {"supply.voltage": 26.2}}}}
    assert missing_units(row) == ["worst_per_check/switch peak voltage/limit",
                                  "worst_per_check/switch peak voltage/params/supply.voltage",
                                  "worst_per_check/switch peak voltage/value"]
    row["worst_per_check"]["switch peak voltage"]["unit"] = "V"
    row["parameters"] = [{"key": "supply.voltage", "unit": "V"}]
    assert missing_units(row) == []


@pytest.mark.parametrize("path", CASES, ids=[p.stem for p in CASES])
def test_run_json_of_every_demo_case(path):
    assert missing_units(simulate(load_case(path)).to_dict()) == []


def _json(args) -> dict | list:
    res = CliRunner().invoke(main, args)
    assert res.exit_code in (0, 1), res.output
    if "check" in args:
        return [json.loads(line) for line in res.stdout.splitlines()]
    return json.loads(res.stdout)


# the PWM demo cases take minutes to compare (every option solved to its periodic steady state);
# their rows are run's, checked above
@pytest.mark.parametrize("path", [p for p in CASES if "pwm" not in p.stem], ids=lambda p: p.stem)
def test_compare_json(path):
    assert missing_units(_json(["compare", str(path), "--json"])) == []


def test_sweep_json_one_and_two_values():
    one = _json(["sweep", str(VALVE), "--vary", "supply.voltage=20V:28V:3", "--json"])
    two = _json(["sweep", str(VALVE), "--vary", "supply.voltage=20V:28V:2", "--vary",
                 "clamp[0].element[1].voltage=15V:20V:2", "--json"])
    assert missing_units(one) == [] and missing_units(two) == []


def test_tolerance_json_worst_samples_carry_units():
    doc = _json(["tolerance", str(VALVE), "--samples", "40", "--seed", "2", "--recheck", "2", "--json"])
    assert missing_units(doc) == []
    # the unit of each worst sample is its check's: a voltage check in volts, a time in seconds
    worst = doc["worst_per_check"]
    assert worst["switch peak voltage"]["unit"] == "V" and worst["case release time"]["unit"] == "s"
    assert {p["key"]: p["unit"] for p in doc["parameters"]} == {
        "coil.inductance": "H", "clamp[0].element[1].voltage": "V", "supply.voltage": "V", "coil_temperature": "K"}


def test_choose_json():
    assert missing_units(_json(["choose", str(VALVE), "--json"])) == []


@pytest.mark.parametrize("args", [
    ["examples/valve_rise_trace.csv", "--kind", "rise", "--supply", "24V", "--shunt", "0.5ohm", "--saturating",
     "--trigger", "2ms"],
    ["examples/valve_decay_trace.csv", "--kind", "decay", "--supply", "24V", "--clamp-resistance", "1.5ohm"]],
    ids=["rise", "decay"])
def test_fit_json(tmp_path, args):
    """The README's two fits: fit.json's [coil] values carry their unit in the key."""
    res = CliRunner().invoke(main, ["fit", str(ROOT / args[0]), *args[1:], "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "fit.json").read_text(encoding="utf-8"))
    assert missing_units(doc) == [] and {"inductance_H", "resistance_ohm"} <= set(doc["coil"])


def test_check_json_lines_with_tolerance():
    rows = _json(["check", str(ROOT / "examples" / "board"), "--tolerance", "20", "--json"])
    assert len(rows) == 4 and all(missing_units(r) == [] for r in rows)
