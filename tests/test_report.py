"""The HTML review report: one self-contained file, every section, the schematic of the case's
own topology, deterministic figures, the CLI's conventions, and how it renders in a browser."""

from __future__ import annotations

import hashlib
import re
import shutil
import subprocess
import tempfile
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback import load_case, simulate
from kickback.cli import main
from kickback.outputs.report import pwm_thermal_section, report_html, tolerance_section, verdict
from kickback.outputs.reportcss import VERDICT_COLOURS
from kickback.outputs.reportfigures import ledger_figure, waveform_figure
from kickback.outputs.schematic import layout, schematic_svg
from kickback.outputs.table import CAUTIONS

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"
UNCLAMPED = CASES / "unclamped_mosfet.toml"
DATE = "2001-02-03 04:05:06 UTC"
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}
SECTIONS = ("schematic", "inputs", "checks", "ledger", "waveforms", "assumptions", "cautions", "reproducibility")

# (demo data) an invented test rig: an ideal switch, a plain diode across the coil and two chains
# across the switch, one of them unnamed elements in series, one a bidirectional TVS
RIG = """title = "Test rig with three clamps (demo data)"
[supply]
voltage = "12 V"
[coil]
inductance = "50 mH"
resistance = "20 Ω"
[switch]
type = "ideal"
fall_time = "1 µs"
rated_voltage = "100 V"
[[clamp]]
name = "DA"
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
[[clamp]]
name = "DZR"
across = "switch"
[[clamp.element]]
type = "diode"
forward_voltage = "0.9 V"
at_current = "1 A"
ideality = 2
[[clamp.element]]
type = "zener"
voltage = "33 V"
[[clamp.element]]
type = "resistor"
resistance = "10 Ω"
[[clamp]]
name = "TV2"
across = "switch"
[[clamp.element]]
type = "tvs"
bidirectional = true
voltage = "60 V"
dynamic_resistance = "0.5 Ω"
"""


class Page(HTMLParser):
    """Collects tags, attributes, ids, text, and checks that every non-void element is closed in order."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.attrs, self.ids, self.text = [], [], [], set(), []
        self.tags: dict[str, int] = {}
        self._where: list[str] = []

    def handle_starttag(self, tag, attrs):
        self._record(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self._record(tag, attrs)

    def _record(self, tag, attrs):
        self.tags[tag] = self.tags.get(tag, 0) + 1
        for name, value in attrs:
            self.attrs.append((tag, name, value or ""))
            if name == "id":
                self.ids.add(value)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(html: str) -> Page:
    p = Page()
    p.feed(html)
    p.close()
    return p


def section(html: str, sid: str) -> str:
    m = re.search(rf'<section id="{sid}"[^>]*>(.*?)</section>', html, re.DOTALL)
    assert m, f"no section {sid!r}"
    return m.group(1)


def visible_text(fragment: str) -> str:
    """Text of an HTML/SVG fragment: tags dropped, entities resolved, whitespace collapsed."""
    return " ".join(unescape(re.sub(r"<[^>]+>", " ", fragment)).split())


@pytest.fixture(scope="module")
def valve():
    result = simulate(load_case(VALVE))
    return result, report_html(result, command="kickback report cases/irrigation_valve.toml", date=DATE)


@pytest.fixture(scope="module")
def unclamped():
    result = simulate(load_case(UNCLAMPED))
    return result, report_html(result, command="kickback report cases/unclamped_mosfet.toml", date=DATE)


def test_report_parses_and_refers_to_nothing_outside(valve):
    _, html = valve
    page = parse(html)
    assert not page.errors, page.errors[:5]
    assert page.stack == [], f"unclosed: {page.stack}"
    assert page.tags.get("svg", 0) == 3, "schematic, ledger and waveform figures are inline SVG"
    for tag in ("script", "link", "img", "iframe", "object"):
        assert tag not in page.tags, f"<{tag}> would be an external or active reference"
    for tag, name, value in page.attrs:
        if name in ("src", "href", "xlink:href"):
            assert value.startswith("#"), f"<{tag} {name}={value!r}> leaves the file"
            assert value[1:] in page.ids, f"<{tag} {name}={value!r}> points at no element"
        elif not name.startswith("xmlns"):
            assert "://" not in value, f"<{tag} {name}={value!r}> names a web address"
    for css in re.findall(r"<style[^>]*>(.*?)</style>", html, re.DOTALL):
        assert "@import" not in css
        assert all(u.startswith("#") for u in re.findall(r"url\(([^)]*)\)", css)), "CSS url() leaves the file"
    assert len(page.ids) == sum(1 for _, n, _ in page.attrs if n == "id"), "ids repeat across the figures"


def test_every_section_and_the_verdict(valve, unclamped):
    for (_, html), word in ((valve, "PASS"), (unclamped, "FAIL")):
        ids = parse(html).ids
        for sid in SECTIONS:
            assert sid in ids, f"section {sid!r} missing"
        banner = visible_text(re.search(r'<div class="banner[^"]*" id="verdict">(.*?)</div>', html).group(1))
        assert banner.startswith(word), banner
    # the unclamped MOSFET fails on its avalanche (README, demo cases): the banner names it
    _, html = unclamped
    banner = visible_text(re.search(r'id="verdict">(.*?)</div>', html).group(1))
    assert "avalanche energy" in banner


def test_print_stylesheet_breaks_pages_between_sections(valve):
    _, html = valve
    css = re.search(r"<style>(.*?)</style>", html, re.DOTALL).group(1)
    m = re.search(r"@media print\s*\{(.*)\}", css, re.DOTALL)
    assert m, "no print stylesheet"
    assert "section.page" in m.group(1) and "break-before: page" in m.group(1)
    assert len(re.findall(r'<section id="[^"]+" class="page"', html)) >= 5


def test_checks_carry_a_text_mark_beside_the_colour(unclamped):
    result, html = unclamped
    body = section(html, "checks")
    rows = re.findall(r"<tr class=\"(pass|fail)\">(.*?)</tr>", body, re.DOTALL)
    n_fail = sum(not c.passed for c in result.checks)
    assert n_fail >= 1
    assert sum(1 for cls, row in rows if cls == "fail" and "FAIL" in visible_text(row)) == n_fail
    assert sum(1 for cls, row in rows if cls == "pass" and "pass" in visible_text(row)) == len(result.checks) - n_fail


def test_checks_show_limit_after_derating_and_margin(valve):
    _, html = valve
    text = visible_text(section(html, "checks"))
    # switch rated 60 V, derating 0.8 (case file): limit 48 V; peak 45.81 V (from the figures) leaves +4.6 %
    assert "rating 60 V × 0.8" in text and "48 V" in text
    result, _ = valve
    margin = (48.0 - result.figures.peak_voltage_V) / 48.0
    assert f"{100 * margin:+.1f} %" in text


def test_inputs_in_engineering_notation_with_defaults_marked(valve):
    _, html = valve
    text = visible_text(section(html, "inputs"))
    for shown in ("120 mH", "36 Ω", "45 mΩ", "150 ns", "220 pF", "68 V", "30 mJ", "850 mV", "1.5 Ω", "200 mJ"):
        assert shown in text, f"inputs lack {shown!r}"
    # the valve case gives no winding capacitance: the model's 0 F is shown as a default
    assert re.search(r"capacitance 0 F default", text), text[:400]


def test_inputs_of_a_case_built_in_python_show_every_value():
    from dataclasses import replace

    from kickback.outputs.reportparts import inputs_table

    text = visible_text(inputs_table(replace(load_case(VALVE), text="")))
    for shown in ("120 mH", "45 mΩ", "20 V", "12 ms"):
        assert shown in text
    assert "default" not in text, "without the case text nothing can be called a default"


def test_cautions_are_the_packages_own(valve, unclamped):
    for result, html in (valve, unclamped):
        text = visible_text(section(html, "cautions"))
        body = CAUTIONS.removeprefix("Cautions: ")
        assert body[1:] in text, "the package cautions are reused"
        for must in ("many times the supply", "suitable probes", "local codes and licensed practice"):
            assert must in text
        ratio = result.figures.peak_voltage_V / result.case.supply.voltage
        assert f"{ratio:.1f} times the" in text


def test_reproducibility_hash_text_command_date(valve):
    result, html = valve
    text = visible_text(section(html, "reproducibility"))
    digest = hashlib.sha256(VALVE.read_text(encoding="utf-8").encode("utf-8")).hexdigest()
    assert digest in text
    assert "kickback report cases/irrigation_valve.toml" in text
    assert DATE in text
    assert 'inductance = "120 mH"' in unescape(section(html, "reproducibility")), "case text is embedded"
    from kickback import __version__

    assert f"kickback {__version__}" in text


def test_assumptions_name_the_models_and_what_is_not_assessed(valve):
    result, html = valve
    text = visible_text(section(html, "assumptions"))
    for model in result.figures.models:
        assert " ".join(model.split()) in text
    assert "tolerance" in text and "PWM" in text, "the studies not yet in the tool are named as not assessed"
    assert tolerance_section(None) is None and pwm_thermal_section(None) is None


def test_repetitive_switching_section_from_the_drive():
    result = simulate(load_case(CASES / "valve_pwm_hold.toml"))
    sec = pwm_thermal_section(result.pwm)
    head = re.findall(r"<th>(.*?)</th>", sec.body)
    # the case file drives at 20 kHz with duties 0.3 and 0.5
    assert head[1:] == ["duty 30 % at 20 kHz", "duty 50 % at 20 kHz"]
    highest = re.search(r"<td>coil current, highest</td><td>(.*?)</td><td>(.*?)</td>", sec.body).groups()
    # final_turn_off = true: the turn-off starts from the highest steady-state current
    from kickback.units import format_quantity

    assert format_quantity(result.figures.initial_current_A, "A") == max(
        highest, key=lambda x: float(x.split()[0]) * (1e-3 if "mA" in x else 1.0))
    assert "°C" in sec.body, "junction temperatures in degrees Celsius"
    html = report_html(result, command="kickback report cases/valve_pwm_hold.toml", date=DATE)
    assert 'id="pwm"' in html
    assert "the highest current of the [drive] steady state" in visible_text(section(html, "inputs"))
    assert "PWM" not in visible_text(section(html, "assumptions")).split("Not assessed")[1].split("Conventions")[0]


def test_same_case_same_bytes_but_the_date_and_no_date_in_figures(valve):
    result, html = valve
    other = report_html(result, command="kickback report cases/irrigation_valve.toml", date="2030-01-01 00:00:00 UTC")
    svgs = re.findall(r"<svg.*?</svg>", html, re.DOTALL)
    assert svgs == re.findall(r"<svg.*?</svg>", other, re.DOTALL), "a figure depends on the date"
    assert other.replace("2030-01-01 00:00:00 UTC", DATE) == html, "the report differs beyond its date"
    assert not any("dc:date" in s or DATE in s for s in svgs)


def test_waveforms_zoom_on_the_edge_with_limits_and_release():
    result = simulate(load_case(VALVE))
    fig = waveform_figure(result, 1e-6)
    axes = fig.axes
    assert len(axes) == 6, "edge and whole transient, three rows each"
    assert any("turn-off edge" in ax.get_title() for ax in axes)
    lines = [ln for ax in axes for ln in ax.get_lines()]
    # derated switch limit 60 V × 0.8 = 48 V (case file)
    assert any(ln.get_ydata()[0] == pytest.approx(48.0) and "switch limit" in ln.get_label() for ln in lines)
    release = [ln for ln in lines if ln.get_label().startswith("below release current")]
    assert len(release) == 1 and release[0].get_ydata()[0] == pytest.approx(0.06), "release point at 60 mA"
    assert any("clamp D1+Z1" == ln.get_label() for ax in axes if "power" in ax.get_ylabel() for ln in ax.get_lines())
    edge_t = axes[0].get_lines()[0].get_xdata()
    assert edge_t.max() <= 1.0001e-6


def test_ledger_bars_balance():
    result = simulate(load_case(VALVE))
    ax = ledger_figure(result).axes[0]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    widths = [p.get_width() for p in ax.patches]
    inflow = sum(w for lab, w in zip(labels, widths, strict=True) if lab.startswith("in:"))
    outflow = sum(w for lab, w in zip(labels, widths, strict=True) if not lab.startswith("in:"))
    # stored + supplied = dissipated + left, to the reported residual
    assert outflow == pytest.approx(inflow, rel=10 * abs(result.figures.energy_balance_error) + 1e-9)


def _schematic_text(svg: str) -> str:
    return " ".join(" ".join(re.findall(r"<tspan[^>]*>([^<]*)</tspan>", svg)).split())


# what each demo case's schematic must show, read off the case files by hand
EXPECTED = {
    "irrigation_valve": ["24 V", "L 120 mH", "R 36 Ω", "MOSFET", "Coss 220 pF", "D1", "850 mV", "Z1", "Zener",
                         "VZ 20 V", "D1+Z1", "across the coil"],
    "relay_board": ["BJT", "D1", "diode", "across the coil"],
    "conveyor_brake": ["48 V", "TVS1", "VBR 100 V", "across the switch"],
    "unclamped_mosfet": ["MOSFET", "avalanche 44 V"],
    "motor_snubber": ["R1", "10 Ω", "C1", "4.7 µF", "Cw 150 pF", "RC1"],
    "contactor_varistor": ["MOV1", "varistor", "39 V at 1 mA", "α 25"],
}


@pytest.mark.parametrize("name", sorted(EXPECTED), ids=sorted(EXPECTED))
def test_schematic_shows_each_part_of_the_case(name):
    case = load_case(CASES / f"{name}.toml")
    text = _schematic_text(schematic_svg(case))
    for shown in EXPECTED[name]:
        assert shown in text, f"{name}: schematic lacks {shown!r}"
    assert "switch node sw" in text and "+ rail" in text
    parts = layout(case).parts
    n_elements = sum(len(c.elements) for c in case.clamps)
    kinds = [p.kind for p in parts]
    assert kinds.count("inductor") == 1 and kinds.count("supply") == 1
    assert sum(1 for p in parts if p.group.startswith("clamp ")) == n_elements


def test_schematic_places_each_chain_where_it_sits():
    case = load_case(RIG)
    lay = layout(case)
    text = _schematic_text(schematic_svg(case))
    for shown in ("DA", "700 mV drop", "DZR", "diode 1", "zener 2", "VZ 33 V", "resistor 3", "10 Ω", "TV2",
                  "bidirectional", "VBR 60 V", "ideal switch", "across the switch", "across the coil"):
        assert shown in text, f"schematic lacks {shown!r}"
    by_group: dict[str, list] = {}
    for p in lay.parts:
        by_group.setdefault(p.group, []).append(p)
    for cl in case.clamps:
        chain = by_group[f"clamp {cl.name}"]
        assert len(chain) == len(cl.elements)
        assert len({p.start[0] for p in chain}) == 1, "one column per chain"
        ys = [y for p in chain for y in (p.start[1], p.end[1])]
        if cl.across == "coil":
            assert lay.y_sw <= min(ys) and max(ys) < lay.y_plus, f"{cl.name} is not between sw and +"
        else:
            assert lay.y_ground <= min(ys) and max(ys) <= lay.y_sw, f"{cl.name} is not between sw and ground"
        x = chain[0].start[0]
        far = lay.y_plus if cl.across == "coil" else lay.y_ground
        ends = sorted([chain[0].start[1], chain[-1].end[1]], key=lambda y: abs(y - lay.y_sw))
        assert abs(chain[0].start[1] - lay.y_sw) <= abs(chain[-1].end[1] - lay.y_sw), "first element nearest sw"
        for a, b in zip(chain, chain[1:], strict=False):
            assert a.end == b.start, "the chain's elements are in series"
        for y_node, y_end in ((lay.y_sw, ends[0]), (far, ends[1])):
            joined = y_node == y_end or any(w[0][0] == w[1][0] == x and {w[0][1], w[1][1]} == {y_node, y_end}
                                            for w in lay.wires)
            assert joined, f"{cl.name}: no wire from the chain to the node at y = {y_node}"
        assert any(w[0][1] == w[1][1] == far and min(w[0][0], w[1][0]) <= x <= max(w[0][0], w[1][0])
                   for w in lay.wires), f"{cl.name}: its column is not on the far rail"
    chain = by_group["clamp DZR"]
    assert [p.kind for p in chain] == ["diode", "zener", "resistor"]
    # conducting when sw rises towards ground: the diode forward from sw, the Zener in breakdown (reversed)
    assert not chain[0].reverse and chain[1].reverse
    assert by_group["clamp DA"][0].end[1] > by_group["clamp DA"][0].start[1], "coil clamp runs up from sw"


def run_cli(*args):
    return CliRunner().invoke(main, list(map(str, args)), catch_exceptions=False)


def test_cli_default_name_exit_codes_and_no_temporary_files(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = run_cli("report", UNCLAMPED)
    assert res.exit_code == 1, res.output
    out = tmp_path / "unclamped_mosfet-report.html"
    assert out.is_file()
    assert "FAIL" in res.stdout
    assert [p.name for p in tmp_path.iterdir()] == [out.name], "temporary files left behind"
    bad = tmp_path / "bad.toml"
    bad.write_text(VALVE.read_text(encoding="utf-8").replace('voltage = "24 V"', 'voltage = "24 mH"'))
    res = run_cli("report", bad, "-o", tmp_path / "bad.html")
    assert res.exit_code == 2 and "supply.voltage" in res.stderr
    assert not (tmp_path / "bad.html").exists()


def test_comparison_on_request_or_when_the_case_has_options(tmp_path, valve):
    _, html = valve
    assert 'id="comparison"' not in html, "no comparison unless asked or the case lists options"
    asked = tmp_path / "asked.html"
    assert run_cli("report", VALVE, "-o", asked, "--compare").exit_code == 0
    html = asked.read_text(encoding="utf-8")
    assert "plain diode" in visible_text(section(html, "comparison"))
    assert "--compare" in visible_text(section(html, "reproducibility"))
    with_options = tmp_path / "options.toml"
    with_options.write_text(VALVE.read_text(encoding="utf-8") + '\n[[option]]\nname = "bare diode"\n'
                            '[[option.clamp]]\nname = "D9"\nacross = "coil"\n[[option.clamp.element]]\n'
                            'type = "diode"\nmodel = "constant-drop"\nforward_voltage = "0.8 V"\n',
                            encoding="utf-8")
    out = tmp_path / "options.html"
    assert run_cli("report", with_options, "-o", out).exit_code == 0
    text = visible_text(section(out.read_text(encoding="utf-8"), "comparison"))
    assert "bare diode" in text and "[[option]]" in text
    assert "plain diode" not in text, "the case's own options replace the built-in families"


def test_verdict_words():
    result = simulate(load_case(VALVE))
    assert verdict(result)[0] == "PASS"
    from dataclasses import replace

    # the valve's ratings call for its checks: without them the result fails its audit
    assert verdict(replace(result, checks=()))[0] == "NO VERDICT"
    bare = load_case('title = "no ratings (demo data)"\n[supply]\nvoltage = "24 V"\n[coil]\ninductance = "0.1 H"\n'
                     'resistance = "48 Ω"\n[switch]\ntype = "ideal"\n[[clamp]]\nname = "D"\nacross = "coil"\n'
                     '[[clamp.element]]\ntype = "diode"\nmodel = "constant-drop"\nforward_voltage = "0.7 V"\n',
                     source="bare.toml")
    assert verdict(simulate(bare))[0] == "NOT CHECKED", "a case with no ratings and no limits"


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
HEADLESS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium(args, tmp: Path) -> subprocess.CompletedProcess:
    profile = tempfile.mkdtemp(dir=tmp)
    return subprocess.run([CHROMIUM, *HEADLESS, f"--user-data-dir={profile}", *args], capture_output=True,
                          timeout=90, check=False)


def _hex(colour: str):
    return tuple(int(colour[k:k + 2], 16) for k in (1, 3, 5))


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed here (CI installs Debian's chromium)")
@pytest.mark.parametrize("which, word", [("valve", "PASS"), ("unclamped", "FAIL")], ids=["pass", "fail"])
def test_rendered_report_is_not_blank_and_shows_the_verdict(request, tmp_path, which, word):
    import numpy as np
    from PIL import Image

    _, html = request.getfixturevalue(which)
    page = tmp_path / "report.html"
    page.write_text(html, encoding="utf-8")
    png = tmp_path / "shot.png"
    run = _chromium([f"--screenshot={png}", "--dump-dom", "--window-size=1200,1400", page.as_uri()], tmp_path)
    assert png.is_file(), f"chromium wrote no screenshot: {run.stderr.decode(errors='replace')[-400:]}"
    img = np.asarray(Image.open(png).convert("RGB")).astype(np.int32)
    packed = (img[..., 0] << 16) | (img[..., 1] << 8) | img[..., 2]
    assert np.unique(packed).size > 50, "the screenshot is (nearly) one colour"
    assert (img.sum(axis=2) < 300).mean() > 0.002, "almost no dark pixels: no text rendered"
    # the verdict banner: a block of its colour near the top of the page, and none of the other verdict's
    colour = np.array(_hex(VERDICT_COLOURS["pass" if word == "PASS" else "fail"]))
    other = np.array(_hex(VERDICT_COLOURS["fail" if word == "PASS" else "pass"]))
    top = img[:300]
    assert (np.abs(top - colour).max(axis=2) <= 6).sum() > 20_000, f"no {word} banner block in the screenshot"
    assert (np.abs(top - other).max(axis=2) <= 6).sum() < 500
    m = re.search(r'id="verdict">(.*?)</div>', run.stdout.decode("utf-8"), re.DOTALL)
    assert m and visible_text(m.group(1)).startswith(word), "the rendered page does not carry the verdict"


#: a script run in the rendered page: every card, table, figure and paragraph that reaches past its
#: container's right edge, and a page that scrolls sideways (the browser's own layout boxes)
_OVERFLOW_JS = """<script>(function(){const bad=[];const W=document.documentElement.clientWidth;
const S=document.documentElement.scrollWidth;if(S>W+1)bad.push('the page scrolls sideways: '+S+' > '+W);
document.querySelectorAll('.card').forEach(c=>{if(c.scrollWidth>c.clientWidth+1)
  bad.push('card '+c.querySelector('h4').textContent+': '+c.scrollWidth+' px in '+c.clientWidth+' px');});
document.querySelectorAll('table, figure, pre, p, ul').forEach(t=>{const p=t.parentElement.getBoundingClientRect(),
  r=t.getBoundingClientRect();if(r.right>p.right+1)bad.push(t.tagName+'.'+(t.className||'')+' ends at '+
  Math.round(r.right)+' px past its container at '+Math.round(p.right)+' px: '+t.textContent.slice(0,50));});
const o=document.createElement('pre');o.id='overflow-result';o.textContent=JSON.stringify(bad);
document.body.appendChild(o);})();</script>"""


def overflows(html: str, tmp_path: Path, width: int = 1200) -> list:
    """What reaches past its border when Chromium lays the report out ``width`` px wide."""
    import json

    page = tmp_path / f"overflow-{width}.html"
    page.write_text(html.replace("</body>", _OVERFLOW_JS + "</body>"), encoding="utf-8")
    run = _chromium([f"--window-size={width},2400", "--dump-dom", page.as_uri()], tmp_path)
    m = re.search(r'<pre id="overflow-result">(.*?)</pre>', run.stdout.decode("utf-8"), re.DOTALL)
    assert m, f"the check script did not run: {run.stderr.decode(errors='replace')[-400:]}"
    return json.loads(unescape(m.group(1)))


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed here (CI installs Debian's chromium)")
@pytest.mark.parametrize("name", sorted(p.stem for p in CASES.glob("*.toml")))
def test_nothing_overflows_its_border(name, tmp_path):
    """Issue 20: at 1200 px (and 800 px for the valve, whose [tolerance] card has the longest keys
    and values) no card, table or figure of the report reaches past its border: long keys break
    after a dot or a bracket, values after a comma or a semicolon. Measured on Chromium's layout."""
    result = simulate(load_case(CASES / f"{name}.toml"))
    html = report_html(result, command=f"kickback report cases/{name}.toml", date=DATE, versions={})
    for width in (1200, 800) if name == "irrigation_valve" else (1200,):
        assert overflows(html, tmp_path, width) == [], width


def test_tolerance_and_tradeoff_sections(tmp_path):
    # the report carries a tolerance study and a clamp choice when asked (small ones here)
    from kickback.studies.choose import choose
    from kickback.studies.tolerance import run_tolerance

    case = load_case(CASES / "irrigation_valve.toml")  # the demo case carries a [tolerance] section
    assert case.tolerances
    study = run_tolerance(case, 8, seed=2, workers=1, search_budget=4)
    choice = choose(case, workers=2)
    html = report_html(simulate(case), tolerance=study, choice=choice, versions={})
    assert 'id="tolerance"' in html and 'id="tradeoff"' in html
    assert f"Yield {100 * study.yield_:.2f} %" in html
    assert choice.ranked[0].option.name in html
    # the studies name their engine; the batch engine's samples were checked against the detailed one
    assert study.engine == "batch" and "Samples run by the batch engine" in html
    assert "Checked against the detailed engine" in html and "candidates screened by the" in html
    assert "Shockley diode as a piecewise-linear fit" in html
    if CHROMIUM is not None:  # the study sections' tables stay inside the page (issue 20)
        assert overflows(html, tmp_path) == []


def test_measured_trace_in_the_report(tmp_path):
    out = tmp_path / "r.html"
    res = CliRunner().invoke(main, ["report", str(CASES / "irrigation_valve.toml"), "-o", str(out), "--measured",
                                    str(CASES.parent / "examples" / "valve_decay_trace.csv")])
    assert res.exit_code == 0, res.output
    html = out.read_text()
    assert 'id="measured"' in html and "valve_decay_trace.csv" in html and "decay to 10 %" in html


def test_ledger_of_every_output_carries_the_motor_term_and_closes():
    # one ledger definition (kickback.ledger): the report's terms, the text table's rows and the JSON's
    # energy_balance_error agree; the motor's back-EMF term takes most of the fan's energy
    import json

    from kickback.ledger import ledger_input, ledger_terms
    from kickback.outputs.reportparts import ledger_items, ledger_table
    from kickback.outputs.table import result_table

    result = simulate(load_case(CASES / "fan_motor_pwm.toml"))
    items = ledger_items(result)
    assert ("out", "to the motor (back-EMF)") in [(s, lab) for s, lab, _ in items]
    total = ledger_input(ledger_terms(result.figures, result.case))
    net = sum(x if side == "in" else -x for side, _, x in items)
    d = json.loads(json.dumps(result.to_dict()))
    assert net / total == pytest.approx(d["energy_balance_error"], rel=1e-9, abs=1e-15)
    # independent of kickback's sums: the motor term is the bulk of the input here (89 %), so a
    # ledger without it would leave a residual far above the 0.1 % bound (DESIGN.md §3)
    motor = next(x for s, lab, x in items if lab == "to the motor (back-EMF)")
    assert motor / total > 0.5 and abs(d["energy_balance_error"]) < 1e-6
    assert "to the motor (back-EMF)" in ledger_table(result)
    assert "to the motor (back-EMF)" in result_table(result)
    # the report's sentence names the largest sink
    from kickback.outputs.report import summary_line

    assert "the motor's back-EMF" in summary_line(result)
