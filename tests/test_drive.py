"""On-state drive checks: BJT base current with overdrive, MOSFET gate voltage."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

from kickback import load_case, simulate

CASES = Path(__file__).resolve().parent.parent / "cases"


def _row(res, quantity):
    return next(c for c in res.checks if c.quantity == quantity)


def test_bjt_base_current_against_overdrive():
    case = load_case(CASES / "relay_board.toml")
    res = simulate(case)
    row = _row(res, "base current")
    s = case.switch
    # I_B = (V_drive − V_BE)/R_B (Ohm's law); needed: overdrive × I_C/β (common practice 1.5–2, no source)
    assert row.value == pytest.approx((3.3 - 0.7) / 2200.0, rel=1e-12)
    assert row.limit == pytest.approx(1.5 * res.figures.initial_current_A / s.gain, rel=1e-12)
    assert row.passed
    weak = simulate(replace(case, switch=replace(s, base_resistance=10e3)))
    assert not _row(weak, "base current").passed and not weak.passed


def test_mosfet_gate_voltage(tmp_path):
    text = (CASES / "irrigation_valve.toml").read_text().replace(
        'on_resistance = "45 mΩ"', 'on_resistance = "45 mΩ"\ngate_voltage = "5 V"\non_resistance_gate_voltage = "10 V"')
    p = tmp_path / "g.toml"
    p.write_text(text)
    row = _row(simulate(load_case(p)), "gate voltage")
    assert row.value == 5.0 and row.limit == 10.0 and not row.passed and row.margin == pytest.approx(-0.5)
    p.write_text(text.replace('gate_voltage = "5 V"', 'gate_voltage = "12 V"'))
    assert _row(simulate(load_case(p)), "gate voltage").passed


def test_drive_keys_belong_to_their_switch_type(tmp_path):
    text = (CASES / "irrigation_valve.toml").read_text().replace('on_resistance = "45 mΩ"',
                                                                 'on_resistance = "45 mΩ"\ngain = 50')
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(ValueError, match="applies to a bjt switch"):
        load_case(p)
