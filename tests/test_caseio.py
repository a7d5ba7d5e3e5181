"""Tests of kickback.caseio: loading a TOML case, and the location of every error.

The valid case is the example of DESIGN.md §5 (demo data). Expected line numbers are counted
by hand in that text (listed next to VALID); TOML syntax follows the TOML v1.0.0 specification
(https://toml.io/en/v1.0.0), and line numbers of syntax errors are the ones Python's tomllib reports.
The Shockley ideality check uses n = (V_f − R_s·I) / (V_T·ln(1 + I/I_s)), V_T = kT/q with the exact
SI 2019 values of k and q (BIPM SI Brochure, 9th ed., table 1).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

import kickback
from kickback.case import Case
from kickback.caseio import load_case
from kickback.errors import CaseError, KickbackError

VALID = """\
title = "Zone valve driver, 24 V (demo data)"

[supply]
voltage = "24 V"

[coil]
inductance = "120 mH"
resistance = "36 Ω"
# capacitance = "80 pF"        winding capacitance (optional)
release_current = "60 mA"      # optional: armature drops out below this
release_delay = "4 ms"         # optional: mechanical part of release
# initial_current = "0.6 A"    optional: else the DC on-state

[switch]
type = "mosfet"                # ideal | bjt | mosfet
on_resistance = "45 mΩ"        # mosfet; bjt: saturation_voltage = "0.2 V"
fall_time = "150 ns"           # omitted or 0: instant
capacitance = "220 pF"         # output capacitance sw→ground (optional)
breakdown_voltage = "68 V"     # avalanche onset (optional: never breaks down)
rated_voltage = "60 V"
rated_avalanche_energy = "30 mJ"   # single pulse; omitted: not avalanche-rated

[[clamp]]
name = "D1+Z1"
across = "coil"                # coil | switch

[[clamp.element]]
type = "diode"
model = "shockley"             # shockley | constant-drop
forward_voltage = "0.85 V"     # shockley: terminal voltage at at_current; constant-drop: the drop
at_current = "1 A"
ideality = 1.9                 # shockley emission coefficient n (or saturation_current = "2 nA")
series_resistance = "50 mΩ"
rated_reverse_voltage = "100 V"
rated_surge_current = "30 A"

[[clamp.element]]
type = "zener"                 # also: tvs (bidirectional = true|false), resistor, capacitor, varistor
voltage = "24 V"
dynamic_resistance = "1.5 Ω"
rated_pulse_energy = "0.2 J"

[checks]
derating = 0.8                 # fraction of voltage ratings allowed (common practice, no source)
max_release_time = "12 ms"
"""
# Lines of VALID: 1 title, 3 [supply], 4 voltage, 6 [coil], 7 inductance, 8 resistance,
# 14 [switch], 15 type, 16 on_resistance, 19 breakdown_voltage, 23 [[clamp]], 25 across,
# 27 [[clamp.element]] (diode), 30 forward_voltage, 31 at_current, 32 ideality, 33 series_resistance,
# 37 [[clamp.element]] (zener), 38 type, 39 voltage, 40 dynamic_resistance, 43 [checks], 44 derating.

TEMPLATES = Path(kickback.__file__).parent / "templates"


def edit(old: str, new: str, text: str = VALID) -> str:
    """Replace one exact, unique piece of the case text."""
    assert text.count(old) == 1, f"{old!r} must occur once"
    return text.replace(old, new)


def error_of(text: str) -> CaseError:
    with pytest.raises(CaseError) as info:
        load_case(text)
    assert "\n" not in str(info.value), "messages are one line"
    return info.value


def test_valid_case_values():
    case = load_case(VALID)
    assert isinstance(case, Case)
    assert case.title == "Zone valve driver, 24 V (demo data)"
    assert case.source == "<text>" and case.text == VALID
    assert case.supply.voltage == 24.0
    c = case.coil
    assert (c.inductance, c.resistance, c.capacitance) == (0.12, 36.0, 0.0)
    assert (c.release_current, c.release_delay, c.initial_current) == (0.06, 0.004, None)
    s = case.switch
    assert (s.type, s.on_resistance, s.fall_time, s.capacitance) == ("mosfet", 0.045, 1.5e-7, 2.2e-10)
    assert (s.breakdown_voltage, s.rated_voltage, s.rated_avalanche_energy) == (68.0, 60.0, 0.03)
    assert s.saturation_voltage == 0.0 and s.body_diode_voltage is None
    (clamp,) = case.clamps
    assert (clamp.name, clamp.across, clamp.path) == ("D1+Z1", "coil", "clamp[0]")
    diode, zener = clamp.elements
    assert (diode.type, diode.model, diode.path) == ("diode", "shockley", "clamp[0].element[0]")
    assert (diode.forward_voltage, diode.at_current, diode.ideality) == (0.85, 1.0, 1.9)
    assert (diode.series_resistance, diode.rated_reverse_voltage, diode.rated_surge_current) == (0.05, 100.0, 30.0)
    assert diode.saturation_current is None and diode.temperature is None
    assert (zener.type, zener.voltage, zener.dynamic_resistance) == ("zener", 24.0, 1.5)
    assert zener.rated_pulse_energy == 0.2 and zener.path == "clamp[0].element[1]"
    assert (case.checks.derating, case.checks.max_release_time) == (0.8, 0.012)
    assert case.checks.energy_fraction == 0.8


@pytest.mark.parametrize("as_path", [True, False], ids=["Path", "str"])
def test_load_from_file(tmp_path, as_path):
    file = tmp_path / "valve.toml"
    file.write_text(VALID, encoding="utf-8")
    case = load_case(file if as_path else str(file))
    assert case.source == str(file) and case.coil.inductance == 0.12


def test_file_error_names_the_file(tmp_path):
    file = tmp_path / "bad.toml"
    file.write_text(edit('"120 mH"', '"120 mA"'), encoding="utf-8")
    with pytest.raises(CaseError) as info:
        load_case(file)
    assert str(info.value).startswith(f"{file}:7: coil.inductance: wrong unit 'mA'")


def test_source_override():
    err = error_of_source(edit('"120 mH"', '"120 mA"'), "valve.toml")
    assert str(err).startswith("valve.toml:7: coil.inductance:")


def error_of_source(text: str, source: str) -> CaseError:
    with pytest.raises(CaseError) as info:
        load_case(text, source=source)
    return info.value


@pytest.mark.parametrize("how", ["Path", "str"])
def test_missing_file(tmp_path, how):
    missing = tmp_path / "nowhere.toml"
    with pytest.raises(CaseError) as info:
        load_case(missing if how == "Path" else str(missing))
    assert str(info.value).startswith(f"{missing}: file not found")
    assert info.value.line is None


def test_case_error_is_value_error():
    with pytest.raises(ValueError):
        load_case(edit('"120 mH"', '"0 H"'))
    with pytest.raises(KickbackError):
        load_case(edit('"120 mH"', '"0 H"'))


# (id, edited text, line, key path, piece of the message)
BAD = [
    ("unknown-key", edit('resistance = "36 Ω"', 'resistanse = "36 Ω"'), 8, "coil.resistanse",
     "unknown key in [coil]; did you mean 'resistance'? (allowed keys: inductance, resistance,"),
    ("unknown-key-2nd-element", edit('dynamic_resistance = "1.5 Ω"\n', 'dynamic_resistance = "1.5 Ω"\ncolour = 1\n'),
     41, "clamp[0].element[1].colour", "unknown key in a zener element"),
    ("key-of-other-element-type", edit('dynamic_resistance = "1.5 Ω"', "ideality = 1.5"), 40,
     "clamp[0].element[1].ideality", "does not apply to a zener element (allowed keys: type, name, voltage"),
    ("unknown-top-key", edit("\n\n[supply]", "\nextra = 1\n[supply]"), 2, "extra", "unknown key in the top level"),
    ("unknown-table", VALID + "\n[coli]\nx = 1\n", 47, "coli", "unknown key in the top level"),
    ("unknown-dotted-key", VALID + "foo.bar = 1\n", 46, "checks.foo", "unknown key in [checks]"),
    ("missing-key", edit('inductance = "120 mH"\n', ""), 6, "coil.inductance",
     "missing required key (expected a value in H > 0, e.g. '80 mH')"),
    ("missing-table", edit('[supply]\nvoltage = "24 V"\n', ""), 1, "supply", "missing required table"),
    ("missing-title", edit('title = "Zone valve driver, 24 V (demo data)"\n', ""), 1, "title",
     "missing required key"),
    ("missing-switch-type", edit('type = "mosfet"', "#"), 14, "switch.type", "missing required key"),
    ("missing-zener-voltage", edit('voltage = "24 V"\ndynamic', "dynamic"), 37, "clamp[0].element[1].voltage",
     "missing required key (expected a value in V > 0"),
    ("wrong-unit", edit('"120 mH"', '"120 mA"'), 7, "coil.inductance",
     "wrong unit 'mA' (expected a value in H, e.g. '80 mH')"),
    ("L-zero", edit('"120 mH"', '"0 H"'), 7, "coil.inductance", "must be > 0, got 0 H"),
    ("L-negative", edit('"120 mH"', '"-120 mH"'), 7, "coil.inductance", "must be > 0, got -120 mH"),
    ("L-plain-negative", edit('"120 mH"', "-0.12"), 7, "coil.inductance", "must be > 0"),
    ("derating-above-1", edit("derating = 0.8", "derating = 1.2"), 44, "checks.derating",
     "must be in (0, 1], got 1.2 (expected a fraction in (0, 1] or a percentage, e.g. 0.8 or '80 %')"),
    ("derating-zero", edit("derating = 0.8", "derating = 0"), 44, "checks.derating", "must be in (0, 1]"),
    # "80 %" is taken (issue 20: as a tolerance band's "10 %" is); a string that is no percentage is not
    ("derating-string", edit("derating = 0.8", 'derating = "eighty"'), 44, "checks.derating",
     "cannot read 'eighty' as a percentage"),
    ("derating-nan", edit("derating = 0.8", "derating = nan"), 44, "checks.derating", "not a finite number"),
    ("syntax-unterminated", edit('"120 mH"', '"120 mH'), 7, "TOML syntax", "Illegal character"),
    ("syntax-bare-value", edit('"120 mH"', "120 mH"), 7, "TOML syntax", "(at column 18)"),
    ("syntax-duplicate", edit('voltage = "24 V"\n\n[coil]', 'voltage = "24 V"\nvoltage = 3\n[coil]'), 5,
     "TOML syntax", "Cannot overwrite a value"),
    ("syntax-header", edit("[checks]", "[checks"), 43, "TOML syntax", "Expected ']'"),
    ("bad-element-type", edit('type = "zener"', 'type = "zenner"'), 38, "clamp[0].element[1].type",
     "'zenner' is not allowed (expected one of: diode, zener, tvs, resistor, capacitor, varistor)"),
    ("element-type-not-string", edit('type = "zener"', "type = 3"), 38, "clamp[0].element[1].type",
     "got an integer"),
    ("ideality-string", edit("ideality = 1.9", 'ideality = "1.9"'), 32, "clamp[0].element[0].ideality",
     "got a string (expected a plain number in [0.5, 10])"),
    ("ideality-range", edit("ideality = 1.9", "ideality = 0.3"), 32, "clamp[0].element[0].ideality",
     "must be in [0.5, 10]"),
    ("table-for-value", edit('voltage = "24 V"\n\n', 'voltage = { value = 24 }\n\n'), 4, "supply.voltage",
     "got a table (expected a value in V > 0"),
    ("bool-for-value", edit('"120 mH"', "true"), 7, "coil.inductance", "got a boolean"),
    ("value-for-table", edit('[supply]\nvoltage = "24 V"', 'supply = "24 V"'), 3, "supply",
     "got a string (expected a table [supply])"),
    ("clamp-as-table", VALID.split("[[clamp]]")[0] + '[clamp]\nacross = "coil"\n', 23, "clamp",
     "got a table (expected an array of tables [[clamp]])"),
    ("rkm", edit('"36 Ω"', '"4k7"'), 8, "coil.resistance", "write '4.7 kΩ'"),
    ("meg", edit('"68 V"', '"1 meg"'), 19, "switch.breakdown_voltage", "'meg' is not an SI prefix"),
    ("no-unit-string", edit('"36 Ω"', '"36"'), 8, "coil.resistance", "no unit in '36'"),
    ("bad-switch-type", edit('"mosfet"', '"fet"'), 15, "switch.type", "'fet' is not allowed"),
    ("mosfet-needs-ron", edit('on_resistance = "45 mΩ"', "#"), 14, "switch.on_resistance",
     "missing required key"),
    ("bjt-key-on-mosfet", edit('on_resistance = "45 mΩ"', 'on_resistance = "45 mΩ"\nsaturation_voltage = "0.2 V"'),
     17, "switch.saturation_voltage", "applies to a bjt switch, not to type 'mosfet'"),
    ("ron-on-ideal", edit('"mosfet"', '"ideal"'), 16, "switch.on_resistance",
     "applies to a mosfet switch, not to type 'ideal'"),
    ("bjt-needs-vsat", edit('"mosfet"', '"bjt"').replace('on_resistance = "45 mΩ"', "#"), 14,
     "switch.saturation_voltage", "missing required key"),
    ("bjt-vsat-above-supply", edit('"mosfet"', '"bjt"').replace('on_resistance = "45 mΩ"',
                                                                'saturation_voltage = "30 V"'), 16,
     "switch.saturation_voltage", "must be below the supply voltage 24 V"),
    ("breakdown-below-supply", edit('"68 V"', '"20 V"'), 19, "switch.breakdown_voltage",
     "must exceed the supply voltage 24 V, got 20 V"),
    ("avalanche-r-without-breakdown", edit('breakdown_voltage = "68 V"', 'avalanche_resistance = "1 Ω"'), 19,
     "switch.avalanche_resistance", "needs breakdown_voltage"),
    ("zero-R-ideal-switch", edit('"36 Ω"', "0").replace('"mosfet"', '"ideal"').replace(
        'on_resistance = "45 mΩ"', "#"), 8, "coil.resistance", "zero resistance gives an unbounded"),
    ("diode-vf-without-current", edit('at_current = "1 A"\n', ""), 30, "clamp[0].element[0].forward_voltage",
     "needs at_current"),
    ("diode-current-without-vf", edit('forward_voltage = "0.85 V"', "#"), 31, "clamp[0].element[0].at_current",
     "needs forward_voltage"),
    ("diode-underdetermined", edit("ideality = 1.9", "#"), 27, "clamp[0].element[0]",
     "a shockley diode needs two of"),
    ("diode-overdetermined", edit("ideality = 1.9", 'ideality = 1.9\nsaturation_current = "2 nA"'), 33,
     "clamp[0].element[0].saturation_current", "over-determined"),
    ("diode-rs-too-big", edit('"50 mΩ"', '"1 Ω"'), 33, "clamp[0].element[0].series_resistance",
     "leaves no junction drop"),
    ("diode-is-implies-bad-n", edit("ideality = 1.9", 'saturation_current = "1 A"'), 32,
     "clamp[0].element[0].saturation_current", "ideality n = 44.9"),
    ("constant-drop-with-ideality", edit('"shockley"', '"constant-drop"').replace('at_current = "1 A"\n', ""),
     31, "clamp[0].element[0].ideality", "not used by model 'constant-drop'"),
    ("bad-diode-model", edit('"shockley"', '"ideal"'), 29, "clamp[0].element[0].model", "'ideal' is not allowed"),
    ("bad-across", edit('across = "coil"', 'across = "gate"'), 25, "clamp[0].across", "'gate' is not allowed"),
    ("clamp-without-elements", VALID + '\n[[clamp]]\nacross = "switch"\n', 47, "clamp[1].element",
     "missing required key"),
    ("second-clamp-element", VALID + '\n[[clamp]]\nacross = "switch"\n\n[[clamp.element]]\ntype = "tvs"\n'
     'voltage = "-5 V"\n', 52, "clamp[1].element[0].voltage", "must be > 0, got -5 V"),
    ("two-capacitors", VALID + '\n[[clamp]]\nacross = "coil"\n[[clamp.element]]\ntype = "capacitor"\n'
     'capacitance = "1 µF"\n[[clamp.element]]\ntype = "capacitor"\ncapacitance = "2 µF"\n', 52,
     "clamp[1].element[1]", "a second capacitor in one chain (expected at most one; the first is clamp[1].element[0])"),
    ("tvs-bidirectional-string", VALID + '\n[[clamp]]\nacross = "switch"\n[[clamp.element]]\ntype = "tvs"\n'
     'voltage = "33 V"\nbidirectional = "yes"\n', 52, "clamp[1].element[0].bidirectional", "got a string"),
    ("varistor-needs-exponent", VALID + '\n[[clamp]]\nacross = "switch"\n[[clamp.element]]\ntype = "varistor"\n'
     'voltage = "39 V"\n', 49, "clamp[1].element[0].exponent", "missing required key (expected a plain number > 1)"),
    ("empty-title", edit('"Zone valve driver, 24 V (demo data)"', '""'), 1, "title", "empty title"),
]


@pytest.mark.parametrize(("text", "line", "key", "message"), [b[1:] for b in BAD], ids=[b[0] for b in BAD])
def test_error_location(text, line, key, message):
    err = error_of(text)
    assert str(err).startswith(f"<text>:{line}: {key}: "), str(err)
    assert message in str(err), str(err)
    assert (err.line, err.key, err.source) == (line, key, "<text>")


INLINE = """\
title = "Inline tables and dotted keys (demo data)"
supply = { voltage = "24 V" }
coil.inductance = "80 mH"
coil.resistance = "30 Ω"
"switch" = { type = "ideal", breakdown_voltage = "60 V" }
clamp = [
  { across = "coil", element = [ { type = "diode", model = "constant-drop", forward_voltage = "0.7 V" },
                                 { type = "resistor", resistance = "100 Ω" } ] },
  { name = "TVS", across = "switch", element = [ { type = "tvs", voltage = "40 V", bidirectional = true } ] },
]
"""


def test_inline_case_loads():
    case = load_case(INLINE)
    assert case.coil.inductance == pytest.approx(0.08, rel=1e-15)
    assert case.switch.breakdown_voltage == 60.0
    assert [c.name for c in case.clamps] == ["clamp 1", "TVS"]
    assert case.clamps[0].elements[1].resistance == 100.0
    assert case.clamps[1].elements[0].bidirectional is True
    assert case.checks.derating == 0.8  # default


INLINE_BAD = [
    ("dotted-key", edit('"80 mH"', '"80 mA"', INLINE), 3, "coil.inductance", "wrong unit 'mA'"),
    ("inline-table-key", edit('"24 V"', '"24 A"', INLINE), 2, "supply.voltage", "wrong unit 'A'"),
    ("quoted-table-key", edit('type = "ideal"', 'type = "triac"', INLINE), 5, "switch.type", "'triac'"),
    ("array-item-2nd-line", edit('"100 Ω"', '"-100 Ω"', INLINE), 8, "clamp[0].element[1].resistance",
     "must be > 0"),
    ("second-inline-clamp", edit('"40 V"', '"40 A"', INLINE), 9, "clamp[1].element[0].voltage",
     "wrong unit 'A'"),
    ("missing-in-inline", edit(', forward_voltage = "0.7 V"', "", INLINE), 7, "clamp[0].element[0].forward_voltage",
     "missing required key"),
]


@pytest.mark.parametrize(("text", "line", "key", "message"), [b[1:] for b in INLINE_BAD],
                         ids=[b[0] for b in INLINE_BAD])
def test_error_location_inline(text, line, key, message):
    err = error_of(text)
    assert str(err).startswith(f"<text>:{line}: {key}: "), str(err)
    assert message in str(err), str(err)


def test_comments_and_multiline_strings_do_not_confuse_lines():
    text = ('title = """two\n[coil]\ninductance = 1"""  # [switch]\n'
            '[supply]\nvoltage = "24 V"\n[coil]   # the coil\n"inductance" = "1 s"\nresistance = 1\n'
            "[switch]\ntype = 'ideal'\n")
    err = error_of(text)
    assert str(err).startswith("<text>:7: coil.inductance: wrong unit 's'"), str(err)


def test_optional_values_and_defaults():
    text = edit('model = "shockley"', 'temperature = "85 °C"')
    text = edit('ideality = 1.9', 'saturation_current = "2 nA"', text)
    text += ('\n[[clamp]]\nacross = "switch"\n[[clamp.element]]\ntype = "varistor"\nvoltage = "39 V"\n'
             'exponent = 30\n')
    case = load_case(text)
    diode = case.clamps[0].elements[0]
    assert diode.temperature == pytest.approx(358.15, rel=1e-12)  # 85 °C, SI Brochure 2.3.1
    assert diode.saturation_current == pytest.approx(2e-9, rel=1e-12)
    assert diode.model == "shockley"  # default
    varistor = case.clamps[1].elements[0]
    assert (varistor.at_current, varistor.exponent, case.clamps[1].name) == (1e-3, 30.0, "clamp 2")


def test_implied_ideality_in_range_is_accepted():
    # n = (0.85 - 0.05) / (V_T ln(1 + 1/2e-9)) with V_T = k·298.15/q = 25.693 mV gives n ≈ 1.554
    vt = 1.380649e-23 * 298.15 / 1.602176634e-19
    n = 0.8 / (vt * math.log1p(1 / 2e-9))
    assert 0.5 < n < 10
    case = load_case(edit("ideality = 1.9", 'saturation_current = "2 nA"'))
    assert case.clamps[0].elements[0].ideality is None


def test_zero_resistance_allowed_with_mosfet_or_initial_current():
    assert load_case(edit('"36 Ω"', "0")).coil.resistance == 0.0
    text = edit('"36 Ω"', '0\ninitial_current = "0.6 A"').replace('"mosfet"', '"ideal"').replace(
        'on_resistance = "45 mΩ"', "#")
    assert load_case(text).coil.initial_current == 0.6


def test_no_clamp_and_no_checks():
    text = VALID.split("[[clamp]]")[0]
    case = load_case(text)
    assert case.clamps == () and case.checks.derating == 0.8


@pytest.mark.parametrize("name", ["relay", "valve", "motor"])
def test_templates_load(name):
    path = TEMPLATES / f"{name}.toml"
    case = load_case(path)
    assert "(demo data)" in case.title
    assert case.clamps, "each template has a clamp"
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
        if "=" in line.split("#")[0]:
            assert "#" in line, f"{name}.toml:{number}: every key carries a comment"


def test_template_specifics():
    relay, valve, motor = (load_case(TEMPLATES / f"{n}.toml") for n in ("relay", "valve", "motor"))
    assert relay.supply.voltage == 12.0 and relay.switch.type == "bjt"
    assert [e.type for e in relay.clamps[0].elements] == ["diode"]
    assert valve.supply.voltage == 24.0 and [e.type for e in valve.clamps[0].elements] == ["diode", "zener"]
    assert motor.switch.type == "mosfet" and motor.switch.capacitance > 0
    assert [e.type for e in motor.clamps[0].elements] == ["resistor", "capacitor"]
    assert motor.clamps[0].across == "coil"
