"""Hostile inputs: every command ends with one line on stderr, its exit status, no traceback, nothing written.

Exit statuses are the CLI contract (DESIGN §7, README "Exit status"): 2 bad input or a case that
cannot be solved, 130 interrupted (128 + SIGINT, the shell's convention), 143 terminated. Each
case below states its expected status and checks the message: one line, no "Traceback", and the
words that name the file, the key or the option and what was expected. The CLI runs in-process
(click's CliRunner) except where a signal or a blocking file needs a real process.
"""

from __future__ import annotations

import csv
import io
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback.cli import main

ROOT = Path(__file__).resolve().parent.parent
VALVE = (ROOT / "cases" / "irrigation_valve.toml").read_text(encoding="utf-8")
TRACE = ROOT / "examples" / "valve_rise_trace.csv"
COMMANDS = ("run", "compare", "sweep", "choose", "tolerance", "report")
EXTRA = {"sweep": ["--vary", "coil.inductance=100mH:150mH:3"]}
HAS_OUT = ("run", "compare", "sweep", "choose", "tolerance")


def invoke(args, cwd: Path | None = None):
    """Run the CLI in-process; (exit status, stdout, stderr)."""
    old = os.getcwd()
    try:
        if cwd is not None:
            os.chdir(cwd)
        res = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    finally:
        os.chdir(old)
    return res.exit_code, res.stdout, res.stderr


def assert_clean(status, out, err, expected_status, *words, stdout_empty=True):
    """The failure contract: the stated status, one line on stderr naming what it must, no traceback."""
    assert status == expected_status, (status, err)
    assert "Traceback" not in err + out, err
    lines = [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("note: ")]
    assert len(lines) == 1, f"expected one line on stderr, got {lines!r}"
    assert len(lines[0]) < 2000, f"a line of {len(lines[0])} characters"
    for word in words:
        assert word in lines[0], f"{word!r} not in {lines[0]!r}"
    assert "\x1b" not in err and "\x07" not in err, repr(err)
    if stdout_empty:
        assert out == "", f"something was printed before the failure: {out[:200]!r}"


def write(tmp_path: Path, text: str | bytes, name: str = "case.toml") -> Path:
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text, encoding="utf-8")
    return p


def sub(old: str, new: str, count: int = 1):
    """A mutation of the demo case: replace ``old`` (must be present) by ``new``."""
    def mutate(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, count)
    return mutate


def add(extra: str):
    return lambda text: text + "\n" + extra + "\n"


def top(extra: str):
    return lambda text: extra + "\n" + text


CLAMP = VALVE[VALVE.index("[[clamp]]"):VALVE.index("[checks]")]
NO_CLAMP = VALVE[:VALVE.index("[[clamp]]")] + VALVE[VALVE.index("[checks]"):]
ZENER = '[[clamp.element]]\ntype = "zener"\nvoltage = "20 V"\n'

# ---- case files: (id, mutation, words the one-line message must hold) -------------------------------

CASE_FILES = [
    ("syntax", sub('voltage = "24 V"', "voltage = 24 V"), ["case.toml:6", "TOML syntax"]),
    ("unclosed-string", sub('"24 V"', '"24 V'), ["TOML syntax"]),
    ("duplicate-key", sub('voltage = "24 V"', 'voltage = "24 V"\nvoltage = "12 V"'), ["TOML syntax"]),
    ("unknown-top", top("colour = 'red'"), ["colour", "unknown key"]),
    ("unknown-coil-key", sub('resistance = "36 Ω"', 'resistance = "36 Ω"\ninductanse = "1 H"'),
     ["coil.inductanse", "did you mean 'inductance'"]),
    ("wrong-unit", sub('"120 mH"', '"120 mV"'), ["coil.inductance", "wrong unit", "expected a value in H"]),
    ("no-unit-string", sub('"120 mH"', '"120"'), ["coil.inductance", "no unit"]),
    ("rkm", sub('"36 Ω"', '"3R6"'), ["coil.resistance", "RKM"]),
    ("meg", sub('"36 Ω"', '"1 megohm"'), ["coil.resistance", "meg"]),
    ("capital-K", sub('"36 Ω"', '"1 KΩ"'), ["coil.resistance", "kilo"]),
    ("fullwidth-digits", sub('"120 mH"', '"\uff11\uff12\uff10 mH"'), ["coil.inductance", "ASCII digits"]),
    ("arabic-digits", sub('"120 mH"', '"\u0661\u0662\u0660 mH"'), ["coil.inductance", "ASCII digits"]),
    ("fullwidth-percent-band", sub('band = "10 %"', 'band = "\uff11\uff10 %"'),
     ['tolerance."coil.inductance".band', "ASCII digits"]),
    ("nan-string", sub('"120 mH"', '"nan H"'), ["coil.inductance", "finite"]),
    ("nan-float", sub('"120 mH"', "nan"), ["coil.inductance", "finite"]),
    ("inf-float", sub('"120 mH"', "inf"), ["coil.inductance", "finite"]),
    ("huge-exponent", sub('"120 mH"', '"1e999 H"'), ["coil.inductance", "out of range"]),
    ("huge-int-quantity", sub('"120 mH"', "1" + "0" * 400), ["coil.inductance", "finite"]),
    ("huge-int-ideality", sub("ideality = 1.9", "ideality = 1" + "0" * 400), ["ideality", "finite"]),
    ("giant-int-literal", sub("ideality = 1.9", "ideality = 1" + "0" * 5000), ["TOML syntax", "digits"]),
    ("ideality-range", sub("ideality = 1.9", "ideality = 1e300"), ["ideality", "[0.5, 10]"]),
    ("negative-L", sub('"120 mH"', '"-120 mH"'), ["coil.inductance", "> 0"]),
    ("zero-L", sub('"120 mH"', "0"), ["coil.inductance", "> 0"]),
    ("negative-R", sub('"36 Ω"', '"-36 Ω"'), ["coil.resistance", ">= 0"]),
    ("bool-quantity", sub('"120 mH"', "true"), ["coil.inductance", "boolean"]),
    ("array-quantity", sub('"120 mH"', '["120 mH"]'), ["coil.inductance", "array"]),
    ("table-quantity", sub('"120 mH"', "{ value = 1 }"), ["coil.inductance", "table"]),
    ("date-quantity", sub('"120 mH"', "1979-05-27"), ["coil.inductance", "date"]),
    ("megabyte-value", sub('"120 mH"', '"1 ' + "x" * 900_000 + '"'), ["coil.inductance", "expected a value in H"]),
    ("empty-string", sub('"120 mH"', '""'), ["coil.inductance", "empty"]),
    ("temperature-0.01K", sub("ideality = 1.9", 'ideality = 1.9\ntemperature = "0.01 K"'),
     ["temperature", "173.15 K"]),
    ("temperature-hot", sub("ideality = 1.9", 'ideality = 1.9\ntemperature = "1000 °C"'), ["temperature"]),
    ("below-absolute-zero", sub("ideality = 1.9", 'ideality = 1.9\ntemperature = "-300 °C"'),
     ["temperature", "absolute zero"]),
    ("ambient-cold", sub("derating = 0.8", 'derating = 0.8\nambient_temperature = "0.5 K"'),
     ["checks.ambient_temperature"]),
    ("derating-above-1", sub("derating = 0.8", "derating = 8"), ["checks.derating", "(0, 1]"]),
    ("derating-string", sub("derating = 0.8", 'derating = "eighty %"'), ["checks.derating", "percentage"]),
    ("derating-percent-fullwidth", sub("derating = 0.8", 'derating = "８０ %"'), ["checks.derating", "ASCII digits"]),
    ("switch-type", sub('type = "mosfet"', 'type = "relay"'), ["switch.type", "ideal, bjt, mosfet"]),
    ("across", sub('across = "coil"', 'across = "ground"'), ["clamp[0].across", "coil, switch"]),
    ("element-type", sub('type = "zener"', 'type = "fuse"'), ["clamp[0].element[1].type"]),
    ("bjt-key-on-mosfet", sub('on_resistance = "45 mΩ"', 'on_resistance = "45 mΩ"\ngain = 50'),
     ["switch.gain", "bjt"]),
    ("breakdown-below-supply", sub('"68 V"', '"12 V"'), ["switch.breakdown_voltage", "exceed"]),
    ("overdetermined-diode", sub("ideality = 1.9", 'ideality = 1.9\nsaturation_current = "1 nA"'),
     ["saturation_current", "over-determined"]),
    ("missing-title", sub('title = "Irrigation valve driver, 24 V, diode + Zener (demo data)"', ""),
     ["title", "missing"]),
    ("empty-title", sub('title = "Irrigation valve driver, 24 V, diode + Zener (demo data)"', 'title = "  "'),
     ["title", "empty"]),
    ("long-title", sub('title = "Irrigation valve driver, 24 V, diode + Zener (demo data)"',
                       f'title = "{"x" * 300}"'), ["title", "at most 200"]),
    ("missing-supply", sub('[supply]\nvoltage = "24 V"', ""), ["supply", "missing"]),
    ("escape-in-title", sub("Irrigation valve", "\\u001b[31mIrrigation valve"), ["title", "U+001B"]),
    ("bell-in-title", sub("Irrigation valve", "\\u0007Irrigation valve"), ["title", "U+0007"]),
    ("nul-in-title", sub("Irrigation valve", "\\u0000Irrigation valve"), ["title", "U+0000"]),
    ("del-in-title", sub("Irrigation valve", "\\u007fIrrigation valve"), ["title", "U+007F"]),
    ("c1-csi-in-title", sub("Irrigation valve", "\\u009b31mIrrigation valve"), ["title", "U+009B"]),
    ("bidi-override-title", sub("Irrigation valve", "\\u202eIrrigation valve"), ["title", "U+202E"]),
    ("line-separator-title", sub("Irrigation valve", "\\u2028Irrigation valve"), ["title", "U+2028"]),
    ("escape-in-clamp-name", sub('name = "D1+Z1"', 'name = "D1\\u001b[2J"'), ["clamp[0].name", "U+001B"]),
    ("escape-in-element-name", sub('name = "Z1"', 'name = "Z1\\u001b]0;x\\u0007"'),
     ["clamp[0].element[1].name", "U+001B"]),
    ("escape-in-key", top('"a\\u001bb" = 1'), ["control character"]),
    ("escape-in-quantity", sub('"120 mH"', '"120 mH\\u001b"'), ["coil.inductance", "U+001B"]),
    ("duplicate-clamp-names", add(CLAMP.replace("[checks]", "")), ["clamp[1].name", "used twice"]),
    ("duplicate-element-names", sub('name = "Z1"', 'name = "D1"'), ["clamp[0].element[1].name", "used twice"]),
    ("default-name-clash", lambda t: t.replace('name = "D1+Z1"', 'name = "clamp 2"') + "\n" + CLAMP.replace(
        'name = "D1+Z1"\n', ""), ["clamp", "used twice"]),
    ("33-clamps", lambda t: NO_CLAMP + "\n" + "".join(
        f'[[clamp]]\nname = "c{k}"\nacross = "coil"\n{ZENER}' for k in range(33)), ["clamp", "at most 32"]),
    ("10000-clamps", lambda t: NO_CLAMP + "\n" + "".join(
        f'[[clamp]]\nacross = "coil"\n{ZENER}' for k in range(10_000)), ["clamp", "at most 32"]),
    ("17-elements", lambda t: NO_CLAMP + '\n[[clamp]]\nacross = "coil"\n' + ZENER * 17,
     ["clamp[0].element", "at most 16"]),
    ("33-options", add("".join(f'[[option]]\nname = "o{k}"\n' for k in range(33))), ["option", "at most 32"]),
    ("duplicate-option", add('[[option]]\nname = "a"\n[[option]]\nname = "a"\n'), ["option[1].name", "twice"]),
    ("65-foster-stages", sub('rated_avalanche_energy = "30 mJ"', 'rated_avalanche_energy = "30 mJ"\n'
                             'thermal_resistance = [' + ", ".join(['"1 K/W"'] * 65) + "]\n"
                             'thermal_tau = [' + ", ".join(['"1 ms"'] * 65) + "]"),
     ["switch.thermal_", "at most 64"]),
    ("deep-array", add("[drive]\nfrequency = '1 kHz'\nduties = " + "[" * 3000 + "]" * 3000),
     ["TOML syntax", "nested"]),
    ("deep-inline-table", add("x = " + "{a=" * 3000 + "1" + "}" * 3000), ["TOML syntax", "nested"]),
    ("deep-dotted-keys", add("[tolerance]\n" + ".".join(["a"] * 40) + " = 1"), ["tolerance.a", "16 levels"]),
    ("65-tolerances", add("".join(f'[tolerance."x{k}"]\nband = "1 %"\n' for k in range(65))),
     ["tolerance", "at most 64"]),
    ("tolerance-band-beyond-rule", add('[tolerance."checks.derating"]\nmin = 0.5\nmax = 1.5'),
     ["tolerance", "checks.derating = 1.5", "(0, 1]"]),
    ("tolerance-ideality-beyond", add('[tolerance."clamp[0].element[0].ideality"]\nband = "90 %"'),
     ["tolerance", "[0.5, 10]"]),
    ("tolerance-coil-too-hot", sub('max = "60 °C"', 'max = "900 °C"'),
     ["coil_temperature", "573.15 K"]),
    ("tolerance-unknown-key", add('[tolerance."coil.inductance"]\nbnad = "1 %"'), ["tolerance"]),
    ("duty-outside", add("[drive]\nfrequency = '1 kHz'\nduty = 1.5"), ["drive.duty", "(0, 1)"]),
    ("frequency-nan", add("[drive]\nfrequency = nan\nduty = 0.5"), ["drive.frequency", "finite"]),
    ("motor-both", add("[motor]\nback_emf_constant = 0.1\nspeed = 10\ninertia = 1e-4"), ["motor"]),
    ("second-capacitor", sub(ZENER.split("\n")[0] + '\ntype = "zener"', '[[clamp.element]]\ntype = "capacitor"\n'
                             'capacitance = "1 nF"\n[[clamp.element]]\ntype = "capacitor"\ncapacitance = "1 nF"\n'
                             '[[clamp.element]]\ntype = "zener"'), ["clamp[0].element", "second capacitor"]),
]


@pytest.mark.parametrize(("mutate", "words"), [c[1:] for c in CASE_FILES], ids=[c[0] for c in CASE_FILES])
def test_bad_case_file(tmp_path, mutate, words):
    path = write(tmp_path, mutate(VALVE))
    status, out, err = invoke(["run", path, "--out", tmp_path / "out"], cwd=tmp_path)
    assert_clean(status, out, err, 2, "case.toml", *words)
    assert not (tmp_path / "out").exists()


RAW_FILES = [
    ("not-utf8", b'title = "\xff\xfe"\n', ["not UTF-8"]),
    ("binary", bytes(range(256)) * 4, ["case.toml"]),
    ("empty", b"", ["title", "missing"]),
    ("nul-bytes", b"\0" * 100, ["TOML syntax"]),
    ("only-bom", b"\xef\xbb\xbf", ["title", "missing"]),
    ("over-1-MiB", b"# " + b"x" * (1 << 20) + b"\n", ["too large", "1,048,576"]),
]


@pytest.mark.parametrize(("data", "words"), [c[1:] for c in RAW_FILES], ids=[c[0] for c in RAW_FILES])
def test_bad_case_bytes(tmp_path, data, words):
    path = write(tmp_path, data)
    assert_clean(*invoke(["run", path]), 2, "case.toml", *words)


# ---- paths of the case file, for every command --------------------------------------------------------

def _path_kind(tmp_path: Path, kind: str) -> tuple[str, str]:
    """(path, word the message must hold)."""
    case = write(tmp_path, VALVE)
    if kind == "missing":
        return str(tmp_path / "nope.toml"), "not found"
    if kind == "directory":
        return str(tmp_path), "directory"
    if kind == "fifo":
        fifo = tmp_path / "pipe.toml"
        os.mkfifo(fifo)
        return str(fifo), "FIFO"
    if kind == "under-a-file":
        return str(case / "x.toml"), "x.toml"
    if kind == "/dev/zero":
        return "/dev/zero", "character device"
    if kind == "/dev/urandom":
        return "/dev/urandom", "character device"
    if kind == "link-to-dev-zero":
        link = tmp_path / "zero.toml"
        os.symlink("/dev/zero", link)
        return str(link), "character device"
    if kind == "symlink-loop":
        loop = tmp_path / "loop.toml"
        os.symlink(loop, loop)
        return str(loop), "loop.toml"
    raise AssertionError(kind)


PATH_KINDS = ("missing", "directory", "fifo", "under-a-file", "/dev/zero", "/dev/urandom", "symlink-loop",
              "link-to-dev-zero")


@pytest.mark.parametrize("kind", PATH_KINDS)
@pytest.mark.parametrize("command", COMMANDS)
def test_bad_case_path(tmp_path, command, kind):
    path, word = _path_kind(tmp_path, kind)
    status, out, err = invoke([command, path, *EXTRA.get(command, [])], cwd=tmp_path)
    assert_clean(status, out, err, 2, path, word)
    assert not list(tmp_path.glob("*-report.html"))


# ---- output paths: refused before any work or output ----------------------------------------------------

OUT_KINDS = ("under-a-file", "is-a-file", "/proc", "/sys", "empty")


def _out_path(tmp_path: Path, kind: str) -> str:
    if kind == "under-a-file":
        return str(write(tmp_path, "x", "file.txt") / "out")
    if kind == "is-a-file":
        return str(write(tmp_path, "x", "file.txt"))
    if kind == "/proc":
        return "/proc/kickback-out"
    if kind == "/sys":
        return "/sys/kickback-out"
    return ""


@pytest.mark.parametrize("kind", OUT_KINDS)
@pytest.mark.parametrize("command", HAS_OUT + ("fit",))
def test_unwritable_out_is_refused_before_the_table(tmp_path, command, kind):
    out = _out_path(tmp_path, kind)
    if command == "fit":
        args = ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--shunt", "0.5 ohm", "--out", out]
    else:
        args = [command, write(tmp_path, VALVE), *EXTRA.get(command, []), "--out", out]
    status, stdout, err = invoke(args, cwd=tmp_path)
    assert_clean(status, stdout, err, 2, "--out")
    assert not Path("/proc/kickback-out").exists()
    assert not list(tmp_path.glob(".kickback-*"))


@pytest.mark.parametrize("kind", ("is-a-folder", "under-a-file", "/proc", "/sys", "empty"))
def test_unwritable_report_target_is_refused_first(tmp_path, kind):
    target = {"is-a-folder": str(tmp_path), "under-a-file": str(write(tmp_path, "x", "f.txt") / "r.html"),
              "/proc": "/proc/r.html", "/sys": "/sys/r.html", "empty": ""}[kind]
    status, out, err = invoke(["report", write(tmp_path, VALVE), "-o", target], cwd=tmp_path)
    assert_clean(status, out, err, 2, "-o")


# ---- options of every command ------------------------------------------------------------------------------

OPTIONS = [
    ("rtol-nan", ["run", "@", "--rtol", "nan"], ["--rtol", "finite"]),
    ("rtol-inf", ["run", "@", "--rtol", "inf"], ["--rtol"]),
    ("rtol-negative", ["run", "@", "--rtol", "-1"], ["--rtol", "range"]),
    ("rtol-text", ["run", "@", "--rtol", "tight"], ["--rtol"]),
    ("rtol-too-small", ["run", "@", "--rtol", "1e-20"], ["--rtol"]),
    ("report-rtol-nan", ["report", "@", "--rtol", "nan"], ["--rtol", "finite"]),
    ("run-unknown-option", ["run", "@", "--plot"], ["--plot"]),
    ("run-no-case", ["run"], ["CASE.toml"]),
    ("run-two-cases", ["run", "@", "@"], ["unexpected extra argument"]),
    ("seed-negative", ["tolerance", "@", "--seed", "-1"], ["--seed", "range"]),
    ("seed-float", ["tolerance", "@", "--seed", "1.5"], ["--seed"]),
    ("seed-2**64", ["tolerance", "@", "--seed", str(2**64)], ["--seed", "range"]),
    ("report-seed-negative", ["report", "@", "--tolerance", "10", "--seed", "-1"], ["--seed"]),
    ("samples-zero", ["tolerance", "@", "--samples", "0"], ["--samples"]),
    ("samples-huge", ["tolerance", "@", "--samples", "10000001"], ["--samples", "1000000"]),
    ("samples-text", ["tolerance", "@", "--samples", "many"], ["--samples"]),
    ("recheck-negative", ["tolerance", "@", "--recheck", "-1"], ["--recheck"]),
    ("workers-zero", ["tolerance", "@", "--workers", "0"], ["--workers"]),
    ("workers-65", ["choose", "@", "--workers", "65"], ["--workers"]),
    ("engine-bogus", ["choose", "@", "--engine", "fast"], ["--engine", "auto"]),
    ("report-tolerance-zero", ["report", "@", "--tolerance", "0"], ["--tolerance"]),
    ("vary-missing", ["sweep", "@"], ["--vary"]),
    ("vary-malformed", ["sweep", "@", "--vary", "coil.inductance"], ["--vary", "KEY=FROM:TO"]),
    ("vary-one-point", ["sweep", "@", "--vary", "coil.inductance=1mH:2mH:1"], ["--vary", "2 to 100000"]),
    ("vary-too-many", ["sweep", "@", "--vary", "coil.inductance=1mH:2mH:1000000"], ["--vary"]),
    ("vary-product", ["sweep", "@", "--vary", "coil.inductance=1mH:2mH:2000", "--vary",
                      "supply.voltage=10V:20V:2000"], ["--vary", "at most 1,000,000"]),
    ("vary-fullwidth-n", ["sweep", "@", "--vary", "coil.inductance=1mH:2mH:\uff15"], ["--vary", "ASCII"]),
    ("vary-nan", ["sweep", "@", "--vary", "checks.derating=nan:0.9:3"], ["--vary", "finite"]),
    ("vary-negative", ["sweep", "@", "--vary", "coil.inductance=-1mH:2mH:3"], ["--vary", "coil.inductance", "> 0"]),
    ("vary-unknown-key", ["sweep", "@", "--vary", "coil.inductanse=1mH:2mH:3"], ["coil.inductanse"]),
    ("vary-derating-above-1", ["sweep", "@", "--vary", "checks.derating=0.5:2:3"], ["checks.derating", "(0, 1]"]),
    ("vary-ideality-range", ["sweep", "@", "--vary", "clamp[0].element[0].ideality=0.1:20:3"],
     ["ideality", "[0.5, 10]"]),
    ("vary-temperature-1K", ["sweep", "@", "--vary", "clamp[0].element[0].temperature=1:400:3"],
     ["temperature", "173.15 K"]),
    ("vary-tiny-voltage", ["sweep", "@", "--vary", "clamp[0].element[1].voltage=1e-40:1:3"],
     ["clamp[0].element[1].voltage", "outside the range"]),
    ("vary-out-of-range-index", ["sweep", "@", "--vary", "clamp[5].element[0].voltage=1V:2V:3"], ["clamp[5]"]),
    ("vary-text-key", ["sweep", "@", "--vary", "title=1:2:3"], ["title", "not a numeric"]),
    ("vary-wrong-unit", ["sweep", "@", "--vary", "coil.inductance=1V:2V:3"], ["--vary", "unit"]),
    ("choose-rating-below-supply", ["choose", "$"], ["switch.rated_voltage", "not above the supply"]),
    ("report-choose-rating-below-supply", ["report", "$", "--choose"], ["switch.rated_voltage"]),
    ("tolerance-without-section", ["tolerance", "#"], ["tolerance", "no [tolerance] section"]),
    ("report-tolerance-without-section", ["report", "#", "--tolerance", "5"], ["tolerance"]),
    ("new-bogus", ["new", "toaster"], ["toaster"]),
    ("new-missing", ["new"], ["relay"]),
    ("unknown-command", ["simulate", "@"], ["simulate"]),
    ("fit-no-kind", ["fit", TRACE, "--supply", "24 V"], ["--kind"]),
    ("fit-bad-kind", ["fit", TRACE, "--kind", "fall", "--supply", "24 V"], ["--kind"]),
    ("fit-no-supply", ["fit", TRACE, "--kind", "rise"], ["--supply"]),
    ("fit-supply-zero", ["fit", TRACE, "--kind", "rise", "--supply", "0 V"], ["--supply", "positive"]),
    ("fit-supply-nan", ["fit", TRACE, "--kind", "rise", "--supply", "nan V"], ["--supply", "finite"]),
    ("fit-supply-unit", ["fit", TRACE, "--kind", "rise", "--supply", "24 A"], ["--supply", "unit"]),
    ("fit-supply-fullwidth", ["fit", TRACE, "--kind", "rise", "--supply", "\uff12\uff14 V"], ["--supply"]),
    ("fit-shunt-zero", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--shunt", "0 ohm"], ["--shunt"]),
    ("fit-shunt-text", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--shunt", "small"], ["--shunt"]),
    ("fit-time-unit", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--time-unit", "kg"],
     ["--time-unit"]),
    ("fit-value-unit", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--value-unit", "ms"],
     ["--value-unit"]),
    ("fit-trigger-unit", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--trigger", "2 V"], ["--trigger"]),
    ("fit-time-col", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--shunt", "0.5 ohm", "--time-col",
                      "99"], ["time column", "'99'"]),
    ("fit-value-col", ["fit", TRACE, "--kind", "rise", "--supply", "24 V", "--value-col", "nope"],
     ["value column"]),
    ("fit-saturating-decay", ["fit", TRACE, "--kind", "decay", "--supply", "24 V", "--saturating"],
     ["--saturating"]),
    ("fit-voltage-without-shunt", ["fit", TRACE, "--kind", "rise", "--supply", "24 V"], ["--shunt"]),
]


@pytest.mark.parametrize(("args", "words"), [c[1:] for c in OPTIONS], ids=[c[0] for c in OPTIONS])
def test_bad_option(tmp_path, args, words):
    case = write(tmp_path, VALVE)
    plain = write(tmp_path, VALVE[:VALVE.index("# Demo tolerances")], "plain.toml")
    low = write(tmp_path, VALVE.replace('rated_voltage = "60 V"', 'rated_voltage = "1 pV"'), "low.toml")
    args = [{"@": case, "#": plain, "$": low}.get(a, a) if isinstance(a, str) else a for a in args]
    status, out, err = invoke(args, cwd=tmp_path)
    assert_clean(status, out, err, 2, *words)
    assert not list(tmp_path.glob("*-report.html"))


# ---- measured traces: `run --measured` and `fit` ---------------------------------------------------------------

TRACES = [
    ("missing", None, "no such file"),
    ("empty", b"", "no numeric rows"),
    ("text-only", b"hello\nworld\n", "no numeric rows"),
    ("one-column", b"t [s]\n0\n1\n2\n", "no numeric rows"),
    ("no-units", b"t,i\n0,1\n1,2\n2,3\n", "unit"),
    ("time-backwards", b"t [s],i [A]\n0,1\n1,2\n0.5,3\n", "does not increase"),
    ("nan-only", b"t [s],i [A]\nnan,nan\nnan,nan\n", "finite"),
    ("binary", bytes(range(256)) * 8, "no numeric rows"),
    ("too-large", b"t [s],i [A]\n" + b"0,0\n" * 1, "too large"),
    ("huge-values", b"t [s],i [A]\n0,1e300\n1,2e300\n2,3e300\n", "outside the range"),
    ("fifo", None, "FIFO"),
    ("dev-zero", None, "character device"),
    ("directory", None, "directory"),
]


def _trace_path(tmp_path: Path, kind: str, data: bytes | None) -> str:
    if kind == "missing":
        return str(tmp_path / "nope.csv")
    if kind == "fifo":
        os.mkfifo(tmp_path / "pipe.csv")
        return str(tmp_path / "pipe.csv")
    if kind == "dev-zero":
        return "/dev/zero"
    if kind == "directory":
        return str(tmp_path)
    if kind == "too-large":
        p = tmp_path / "big.csv"
        with open(p, "wb") as fh:
            fh.write(data)
            fh.truncate((64 << 20) + 1)
        return str(p)
    return str(write(tmp_path, data, "trace.csv"))


@pytest.mark.parametrize("command", ("measured", "fit"))
@pytest.mark.parametrize(("kind", "data", "word"), TRACES, ids=[t[0] for t in TRACES])
def test_bad_trace(tmp_path, command, kind, data, word):
    trace = _trace_path(tmp_path, kind, data)
    if command == "measured":
        args = ["run", write(tmp_path, VALVE), "--measured", trace, "--out", tmp_path / "out"]
    else:
        args = ["fit", trace, "--kind", "rise", "--supply", "24 V", "--out", tmp_path / "out"]
    status, out, err = invoke(args, cwd=tmp_path)
    assert_clean(status, out, err, 2, trace, word)
    assert not (tmp_path / "out").exists()


# ---- faults inside a command: one line, stated status ---------------------------------------------------------

FAULTS = [
    ("zero-division", ZeroDivisionError("float division by zero"), 2, ["case.toml", "could not be solved"]),
    ("memory", MemoryError(), 2, ["case.toml", "out of memory"]),
    ("recursion", RecursionError("deep"), 2, ["case.toml", "nested too deeply"]),
    ("os-error", OSError(28, "No space left on device", "/tmp/x"), 2, ["/tmp/x", "No space left"]),
    ("library-value-error", ValueError("`first_step` exceeds bounds."), 2, ["case.toml", "internal error"]),
    ("multi-line-message", RuntimeError("line one\nline two"), 2, ["line one line two"]),
    ("ctrl-c", KeyboardInterrupt(), 130, ["interrupted"]),
    ("scipy-step-message", __import__("kickback.errors").errors.SolverError(
        "the solver failed in the decay phase at t = 1e-05 s: Required step size is less than spacing between "
        "numbers."), 2, ["decay phase", "resolution of the time axis"]),
    ("case-error-without-file", __import__("kickback.errors").errors.CaseError("bad value", key="coil.x"), 2,
     ["case.toml: coil.x: bad value"]),
    ("solver-error", __import__("kickback.errors").errors.SolverError("no path for the current"), 2,
     ["case.toml: no path for the current"]),
]


@pytest.mark.parametrize(("exc", "status", "words"), [f[1:] for f in FAULTS], ids=[f[0] for f in FAULTS])
def test_fault_inside_the_engine(tmp_path, monkeypatch, exc, status, words):
    import kickback.simulation

    def boom(*args, **kwargs):
        raise exc

    monkeypatch.setattr(kickback.simulation, "simulate", boom)
    result = invoke(["run", write(tmp_path, VALVE), "--out", tmp_path / "out"], cwd=tmp_path)
    assert_clean(*result, status, *words)
    assert not (tmp_path / "out").exists()
    assert not list(tmp_path.glob(".kickback-*"))


def test_zero_coil_resistance_mosfet_ends_in_one_line(tmp_path):
    """A MOSFET with R = 0 (the engine's own fix is elsewhere): whatever happens, no traceback."""
    path = write(tmp_path, VALVE.replace('"36 Ω"', '"0 Ω"'))
    status, out, err = invoke(["run", path], cwd=tmp_path)
    assert "Traceback" not in err
    if status == 2:
        assert_clean(status, out, err, 2, "case.toml")
    else:
        assert status in (0, 1)


def test_library_warnings_become_one_note(tmp_path, monkeypatch):
    import kickback.simulation

    real = kickback.simulation.simulate

    def noisy(*args, **kwargs):
        for _ in range(50):
            warnings.warn("overflow encountered in exp", RuntimeWarning, stacklevel=1)
        return real(*args, **kwargs)

    monkeypatch.setattr(kickback.simulation, "simulate", noisy)
    status, out, err = invoke(["run", write(tmp_path, VALVE)], cwd=tmp_path)
    assert status == 0
    notes = [ln for ln in err.splitlines() if "RuntimeWarning" in ln]
    assert len(notes) == 1 and "50 warning(s)" in notes[0], err
    assert "overflow encountered" not in err


# ---- plain numbers far from their key's usual range: a note, not an error -----------------------------------

NOTES = [
    ("coil-10-H", '"120 mH"', "10", "coil.inductance", "10 H"),
    ("fall-1-s", '"150 ns"', "1", "switch.fall_time", "1 s"),
    ("capacitance-1-F", '"220 pF"', "1", "switch.capacitance", "1 F"),
]


@pytest.mark.parametrize(("old", "new", "key", "shown"), [n[1:] for n in NOTES], ids=[n[0] for n in NOTES])
def test_plain_number_far_from_usual_gets_a_note(tmp_path, old, new, key, shown):
    from kickback.caseio import load_case

    case = load_case(write(tmp_path, VALVE.replace(old, new)))
    assert len(case.notes) == 1, case.notes
    assert key in case.notes[0] and shown in case.notes[0] and "usual" in case.notes[0]
    assert case.notes[0].startswith(f"{tmp_path / 'case.toml'}:")


def test_usual_plain_numbers_get_no_note(tmp_path):
    from kickback.caseio import load_case

    text = VALVE.replace('"36 Ω"', "36").replace('"24 V"', "24").replace('"120 mH"', "0.12")
    assert load_case(write(tmp_path, text)).notes == ()


def test_note_reaches_stderr_and_the_run_goes_on(tmp_path):
    status, out, err = invoke(["run", write(tmp_path, VALVE.replace('"36 Ω"', "2e5"))], cwd=tmp_path)
    assert status in (0, 1) and "verdict" in out
    assert "note:" in err and "coil.resistance" in err


# ---- outputs: one set or none ------------------------------------------------------------------------------

def test_write_set_replaces_the_set_and_removes_stale_files(tmp_path):
    from kickback.outputs.files import write_set

    out = tmp_path / "out"
    write_set(out, {"a.json": "new", "a.png": b"png"}, family=("a.json", "a.png", "a.svg"))
    (out / "a.svg").write_text("old")
    (out / "mine.txt").write_text("user's")
    write_set(out, {"a.json": "newer"}, family=("a.json", "a.png", "a.svg"))
    assert sorted(p.name for p in out.iterdir()) == ["a.json", "mine.txt"]
    assert (out / "a.json").read_text() == "newer"


@pytest.mark.parametrize("fault", (KeyboardInterrupt, OSError))
@pytest.mark.parametrize("fresh", (True, False), ids=("new-folder", "existing-folder"))
def test_write_set_interrupted_leaves_the_old_set(tmp_path, monkeypatch, fault, fresh):
    import kickback.outputs.files as files
    from kickback.errors import OutputError

    out = tmp_path / "out"
    if not fresh:
        out.mkdir()
        (out / "a.json").write_text("old")
        (out / "a.csv").write_text("old")
    real, calls = files._write, []

    def flaky(path, data):
        calls.append(path)
        if len(calls) == 2:
            raise fault(28, "No space left on device") if fault is OSError else fault()
        real(path, data)

    monkeypatch.setattr(files, "_write", flaky)
    with pytest.raises(OutputError if fault is OSError else KeyboardInterrupt):
        files.write_set(out, {"a.json": "new", "a.csv": "new", "a.png": b"new"})
    assert list(tmp_path.glob(".kickback-*")) == [] and list(out.glob(".kickback-*")) == [] if out.exists() else True
    if fresh:
        assert not out.exists()
    else:
        assert {p.name: p.read_text() for p in out.iterdir()} == {"a.json": "old", "a.csv": "old"}


def test_csv_cells_with_separators_and_quotes_read_back(tmp_path):
    """A clamp and element name with a comma and quotes: the CSV header reads back exactly (RFC 4180)."""
    text = VALVE.replace('name = "D1+Z1"', 'name = "D1, \\"fast\\""').replace('name = "Z1"', 'name = "Z1;x"')
    status, out, err = invoke(["run", write(tmp_path, text), "--out", tmp_path / "o", "--no-plot"], cwd=tmp_path)
    assert status == 0, err
    header = next(csv.reader(io.StringIO((tmp_path / "o" / "waveforms.csv").read_text())))
    assert 'D1, "fast"/Z1;x voltage [V]' in header


def test_multiline_title_is_folded_to_one_line(tmp_path):
    from kickback.caseio import load_case

    text = VALVE.replace('title = "Irrigation valve driver', 'title = """Irrigation\nvalve\tdriver')
    text = text.replace('(demo data)"', '(demo data)"""', 1)
    assert load_case(write(tmp_path, text)).title.startswith("Irrigation valve driver, 24 V")


# ---- progress on stderr: no terminal codes when it is not a terminal ----------------------------------------

class _Stream(io.StringIO):
    def __init__(self, tty: bool):
        super().__init__()
        self.tty = tty

    def isatty(self):
        return self.tty


def test_progress_without_a_terminal_is_plain_lines():
    from kickback.progress import with_progress

    stream = _Stream(tty=False)

    def work(progress):
        for k in range(1, 101):
            progress(k)
        return "done"

    assert with_progress("sweep", 100, work, stream=stream) == "done"
    text = stream.getvalue()
    assert "\x1b" not in text and "\r" not in text
    assert text.splitlines() == ["sweep: 25 of 100", "sweep: 50 of 100", "sweep: 75 of 100", "sweep: 100 of 100"]


def test_progress_on_a_terminal_draws_a_bar():
    from kickback.progress import with_progress

    stream = _Stream(tty=True)
    with_progress("sweep", 100, lambda progress: [progress(k) for k in range(1, 101)], stream=stream)
    assert "\r" in stream.getvalue() or "\x1b" in stream.getvalue()


# ---- real processes: signals and blocking files ---------------------------------------------------------------

def _spawn(args, cwd):
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": ""}
    return subprocess.Popen([sys.executable, "-m", "kickback.cli", *map(str, args)], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


def _wait_for_workers(pid: int, timeout: float = 60.0) -> None:
    """Until the command runs its worker processes (its signal handlers are in place by then)."""
    children = Path(f"/proc/{pid}/task/{pid}/children")
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if not children.exists():
            time.sleep(4)
            return
        if children.read_text().split():
            time.sleep(0.5)
            return
        time.sleep(0.1)


@pytest.mark.parametrize(("sig", "status", "word"), [(signal.SIGINT, 130, "interrupted"),
                                                     (signal.SIGTERM, 143, "terminated")], ids=("SIGINT", "SIGTERM"))
def test_signal_during_a_sweep_with_workers(tmp_path, sig, status, word):
    case = write(tmp_path, VALVE)
    out = tmp_path / "out"
    out.mkdir()
    (out / "sweep.json").write_text("previous")
    proc = _spawn(["sweep", case, "--vary", "coil.inductance=50mH:200mH:400", "--engine", "detailed",
                   "--workers", "2", "--out", out], tmp_path)
    _wait_for_workers(proc.pid)
    os.killpg(proc.pid, sig)  # the whole group, as a terminal's Ctrl-C does
    stdout, stderr = proc.communicate(timeout=60)
    assert_clean(proc.returncode, stdout, stderr, status, word)
    assert [p.name for p in out.iterdir()] == ["sweep.json"] and (out / "sweep.json").read_text() == "previous"
    assert not list(tmp_path.glob(".kickback-*"))


def test_fifo_case_does_not_hang(tmp_path):
    os.mkfifo(tmp_path / "pipe.toml")
    proc = _spawn(["run", tmp_path / "pipe.toml"], tmp_path)
    stdout, stderr = proc.communicate(timeout=30)
    assert_clean(proc.returncode, stdout, stderr, 2, "pipe.toml", "FIFO")


def test_compare_whose_own_clamp_fails_prints_and_writes_nothing(tmp_path, monkeypatch):
    from types import SimpleNamespace

    import kickback.studies.compare

    failed = SimpleNamespace(own=SimpleNamespace(result=None, error="no path for the coil current"),
                             to_dict=lambda: {})
    monkeypatch.setattr(kickback.studies.compare, "compare", lambda case, **kw: failed)
    status, out, err = invoke(["compare", write(tmp_path, VALVE), "--out", tmp_path / "out"], cwd=tmp_path)
    assert_clean(status, out, err, 2, "case.toml", "own clamp", "no path for the coil current")
    assert not (tmp_path / "out").exists()


def test_bad_source_date_epoch_is_refused_before_the_work(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "9" * 30)
    status, out, err = invoke(["report", write(tmp_path, VALVE), "-o", tmp_path / "r.html"], cwd=tmp_path)
    assert_clean(status, out, err, 2, "SOURCE_DATE_EPOCH", "seconds since 1970")
    assert not (tmp_path / "r.html").exists()


def test_library_log_messages_are_counted_not_printed(tmp_path, monkeypatch):
    import logging

    import kickback.simulation

    real = kickback.simulation.simulate

    def chatty(*args, **kwargs):
        logging.getLogger("matplotlib").warning("Matplotlib created a temporary cache directory")
        return real(*args, **kwargs)

    monkeypatch.setattr(kickback.simulation, "simulate", chatty)
    status, out, err = invoke(["run", write(tmp_path, VALVE)], cwd=tmp_path)
    assert status == 0 and "cache directory" not in err and "1 warning(s)" in err, err


@pytest.mark.parametrize("text", ["\uff11\uff10 mH", "\u0661\u0660 mH", "1\u0660 mH"])
def test_quantity_reader_takes_ascii_digits_only(text):
    from kickback.units import UnitError, parse_quantity

    with pytest.raises(UnitError, match="cannot read"):
        parse_quantity(text, "H")
