"""A Zener or TVS given as a datasheet gives it: the derived law and the loader's refusals.

Reference: the piecewise-linear breakdown law is the straight line through the datasheet's two
points (V_BR at I_T, V_C at I_PP); written out here, not taken from kickback. With an ideal,
instant switch and no node capacitance the clamped decay is first order (L di/dt = V_s − R i −
(V0 + r_d i)), whose closed form gives the peak voltage and the time to zero (first-order RL
closed form, e.g. Hayt & Kemmerly, Engineering Circuit Analysis, ch. 8). All values are demo data.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kickback import load_case, simulate
from kickback.errors import CaseError

BASE = """\
title = "datasheet words (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "50 mH"
resistance = "20 Ω"
[switch]
type = "ideal"
rated_voltage = "80 V"
[[clamp]]
across = "{across}"
[[clamp.element]]
{element}
"""

TVS = """type = "tvs"
standoff_voltage = "30 V"
breakdown_voltage = "33.3 V"
test_current = "1 mA"
clamping_voltage = "48.4 V"
peak_pulse_current = "12.4 A"
"""


def _case(element: str, across: str = "switch"):
    return load_case(BASE.format(element=element, across=across), source="t.toml")


def _line(v1, i1, v2, i2):
    """The straight line through (i1, v1) and (i2, v2): (voltage at zero current, slope)."""
    slope = (v2 - v1) / (i2 - i1)
    return v1 - slope * i1, slope


@pytest.mark.parametrize("engine", ["detailed", "batch"])
def test_tvs_from_datasheet_follows_the_two_point_line(engine):
    v0, rd = _line(33.3, 1e-3, 48.4, 12.4)
    vs, L, R = 24.0, 0.05, 20.0
    i0 = vs / R
    res = simulate(_case(TVS), engine=engine)
    f = res.figures
    # node at t = 0+: the TVS takes the whole coil current
    assert f.peak_voltage_V == pytest.approx(v0 + rd * i0, rel=1e-6)
    # first-order decay to zero against the clamp line minus the supply
    i_inf = (v0 - vs) / (R + rd)
    t_zero = L / (R + rd) * math.log(1 + i0 / i_inf)
    assert f.to_zero_s == pytest.approx(t_zero, rel=1e-5)
    model = " ".join(f.models)
    assert "V_WM 30 V" in model and "V_C 48.4 V at I_PP 12.4 A" in model
    assert f"{v0:.4g} V" in model and f"r_d = {rd:.3g} Ω" in model


def test_zener_voltage_at_test_current_with_impedance():
    """V_Z 20 V at I_ZT 50 mA with Z_ZT 2 Ω: V0 = 20 − 2·0.05 = 19.9 V (line through one point, slope Z_ZT)."""
    zener = 'type = "zener"\nvoltage = "20 V"\ntest_current = "50 mA"\nimpedance = "2 Ω"\n'
    text = BASE.format(element=zener, across="switch").replace('"24 V"', '"12 V"')
    f = simulate(load_case(text, source="t.toml")).figures
    i0 = 12.0 / 20.0
    assert f.peak_voltage_V == pytest.approx(19.9 + 2.0 * i0, rel=1e-6)
    assert "V_Z 20 V at I_ZT 50 mA, Z_ZT 2 Ω" in " ".join(f.models)


def test_old_keys_still_work_and_agree():
    v0, rd = _line(33.3, 1e-3, 48.4, 12.4)
    old = _case(f'type = "tvs"\nvoltage = "{v0!r} V"\ndynamic_resistance = "{rd!r} Ω"\n')
    new = _case(TVS)
    a, b = simulate(old).figures, simulate(new).figures
    assert a.peak_voltage_V == pytest.approx(b.peak_voltage_V, rel=1e-9)


@pytest.mark.parametrize(("change", "key"), [
    ('standoff_voltage = "34 V"', "standoff_voltage"),          # V_WM ≥ V_BR
    ('clamping_voltage = "33 V"', "clamping_voltage"),          # V_C ≤ V_BR
    ('peak_pulse_current = "1 mA"', "peak_pulse_current"),      # I_PP ≤ I_T
    ('voltage = "33 V"', "breakdown_voltage"),                   # both ways of giving V_BR
    ('dynamic_resistance = "1 Ω"', "clamping_voltage"),          # over-determined slope
], ids=["standoff-above-breakdown", "clamping-below-breakdown", "ipp-below-it", "voltage-and-vbr",
        "rd-and-vc"])
def test_inconsistent_datasheet_sets_are_refused_on_one_line(change, key):
    lines = [ln for ln in TVS.splitlines() if not ln.startswith(change.split(" =")[0])] + [change]
    with pytest.raises(CaseError) as err:
        _case("\n".join(lines) + "\n")
    text = str(err.value)
    assert "\n" not in text and f"clamp[0].element[0].{key}" in text, text


def test_missing_test_current_is_named():
    with pytest.raises(CaseError, match=r"element\[0\]\.test_current"):
        _case('type = "tvs"\nbreakdown_voltage = "33.3 V"\n')


def test_sweep_of_a_datasheet_key_moves_the_batch_figure():
    from kickback.studies.many import simulate_many

    case = _case(TVS)
    vcs = np.array([40.0, 48.4, 60.0])
    many = simulate_many(case, {"clamp[0].element[0].clamping_voltage": vcs})
    i0 = 24.0 / 20.0
    want = [sum(p * q for p, q in zip(_line(33.3, 1e-3, vc, 12.4), (1.0, i0), strict=True)) for vc in vcs]
    np.testing.assert_allclose(many.figures["switch.peak_voltage_V"], want, rtol=1e-6)


def test_compare_speaks_in_datasheet_words():
    from kickback.outputs.comparison import comparison_table
    from kickback.studies.compare import compare

    text = comparison_table(compare(_case(TVS)))
    assert "V_WM 30 V, V_BR 33.3 V at I_T 1 mA, V_C 48.4 V at I_PP 12.4 A" in text
    # built-in TVS: 0.8 × 80 V = 64 V derated limit, less the 5 % checks.min_margin = 60.8 V
    # → E24 56 V (IEC 60063), ideal: V_C = V_BR
    assert "TVS to ground (clamping 56 V; stand-off ≥ 24 V)" in text


@pytest.mark.parametrize("engine", ["detailed", "batch"])
@pytest.mark.parametrize(("vwm", "passes"), [(30.0, True), (20.0, False)])
def test_lone_tvs_working_voltage_is_checked_against_the_supply(engine, vwm, passes):
    """A lone TVS across the switch holds the supply whenever the switch is off: V_WM must be at
    least the supply (the datasheet's largest voltage with no conduction; not derated)."""
    case = _case(TVS.replace('standoff_voltage = "30 V"', f'standoff_voltage = "{vwm:g} V"'))
    (row,) = [ck for ck in simulate(case, engine=engine).checks if ck.quantity == "working voltage"]
    assert (row.value, row.limit, row.passed) == (24.0, vwm, passes)
    assert row.margin == pytest.approx((vwm - 24.0) / vwm, rel=1e-12)
