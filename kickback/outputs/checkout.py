"""Outputs of ``kickback check``: the summary table, the failing checks in full, JSON lines and a
JUnit XML report.

JUnit XML as CI systems read it (element and attribute names from memory of the common format,
no schema file is shipped): ``<testsuites tests failures errors time>`` holding one
``<testsuite name tests failures errors time>`` per case, holding one ``<testcase name
classname time>`` per design check; a failing check carries ``<failure message type>`` with its
value, limit, margin and unit; a case that is invalid, cannot be solved or fails its audit is one
``<testcase>`` carrying ``<error message type>``.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

from kickback.outputs.jsonout import to_json
from kickback.outputs.table import check_value, percent_text
from kickback.units import format_quantity as q


def _low(cc) -> tuple[str, str]:
    low = cc.smallest()
    if low is None:
        return "—", ""
    margin = "fails" if low["margin"] is None else percent_text(low["margin"])
    return margin, f"{low['part']} {low['quantity']}"


def _tol(cc) -> str:
    t = cc.tolerance
    if t is None:
        return ""
    if "none" in t:
        return "no [tolerance]"
    lo, hi = t["yield_ci95"]
    return f"{100 * t['yield']:.1f} % ({100 * lo:.1f}–{100 * hi:.1f} %)"


def summary_table(results, skipped=()) -> str:
    """One row per case, then each failing check in full and each case without a verdict."""
    with_tol = any(cc.tolerance is not None for cc in results)
    head = ["case", "verdict", "smallest margin", "check", "peak voltage", "release", "engine"]
    rows = [head + (["yield (95 % interval)"] if with_tol else [])]
    for cc in results:
        margin, which = _low(cc)
        row = [cc.path, cc.verdict, margin, which, q(cc.peak_voltage_V, "V"), q(cc.release_s, "s"),
               cc.engine or "—"]
        rows.append(row + ([_tol(cc)] if with_tol else []))
    lines = _grid_left(rows)
    counts = {s: sum(cc.status == s for cc in results) for s in ("pass", "fail")}
    other = len(results) - counts["pass"] - counts["fail"]
    lines.append("")
    lines.append(f"{len(results)} case(s): {counts['pass']} pass, {counts['fail']} fail, {other} without a verdict")
    fails = [cc for cc in results if cc.status == "fail"]
    if fails:
        lines += ["", "Failing checks:"]
        for cc in fails:
            lines.append(f"  {cc.path} ({cc.title})")
            table = [["part", "quantity", "value", "limit", "margin", "how the limit was formed"]]
            for c in cc.failing():
                table.append([c["part"], c["quantity"], check_value(c["value"], c["unit"]),
                              check_value(c["limit"], c["unit"]), percent_text(c["margin"]), c["note"] or ""])
            lines += _grid_left(table, "    ")
    bad = [cc for cc in results if cc.status not in ("pass", "fail")]
    if bad:
        lines += ["", "Without a verdict:"]
        lines += [f"  {cc.verdict}: {cc.message}" for cc in bad]
    if skipped:
        lines += ["", "Skipped:"] + [f"  {p}: {why}" for p, why in skipped]
    return "\n".join(lines) + "\n"


def _grid_left(rows, indent: str = "  ") -> list[str]:
    """A text grid, every column left-aligned (paths and names)."""
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    return [indent + "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in rows]


def json_lines(results) -> str:
    """One JSON object per case, one per line (JSON Lines: a stream a script reads line by line)."""
    return "".join(to_json(cc.to_dict(), indent=None).rstrip("\n") + "\n" for cc in results)


def _num(x, unit: str) -> str:
    return "none" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.6g} {unit}".strip()


def junit_xml(results, name: str = "kickback check") -> str:
    """The JUnit XML report (see the module docstring): one testcase per design check."""
    suites = ET.Element("testsuites", name=name)
    totals = {"tests": 0, "failures": 0, "errors": 0, "time": 0.0}
    for cc in results:
        suite = ET.SubElement(suites, "testsuite", name=cc.path)
        n = fails = errors = 0
        if cc.status in ("pass", "fail"):
            share = cc.seconds / max(1, len(cc.checks))
            for c in cc.checks:
                tc = ET.SubElement(suite, "testcase", name=f"{c['part']} {c['quantity']}", classname=cc.path,
                                   time=f"{share:.3f}")
                n += 1
                if not c["pass"]:
                    fails += 1
                    margin = "none" if c["margin"] is None else f"{100 * c['margin']:+.2f} %"
                    msg = (f"value {_num(c['value'], c['unit'])}, limit {_num(c['limit'], c['unit'])}, "
                           f"margin {margin}")
                    fe = ET.SubElement(tc, "failure", message=msg, type="check failed")
                    fe.text = f"{msg} ({c['note']})" if c["note"] else msg
            if cc.tolerance is not None:
                tc = ET.SubElement(suite, "testcase", name="tolerance yield", classname=cc.path, time="0")
                n += 1
                ET.SubElement(tc, "system-out").text = _tol(cc)
        else:
            tc = ET.SubElement(suite, "testcase", name="case", classname=cc.path, time=f"{cc.seconds:.3f}")
            n, errors = 1, 1
            er = ET.SubElement(tc, "error", message=cc.message, type=cc.status)
            er.text = cc.message
        suite.set("tests", str(n))
        suite.set("failures", str(fails))
        suite.set("errors", str(errors))
        suite.set("time", f"{cc.seconds:.3f}")
        for k, v in (("tests", n), ("failures", fails), ("errors", errors), ("time", cc.seconds)):
            totals[k] += v
    for k in ("tests", "failures", "errors"):
        suites.set(k, str(totals[k]))
    suites.set("time", f"{totals['time']:.3f}")
    ET.indent(suites)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(suites, encoding="unicode") + "\n"


__all__ = ["json_lines", "junit_xml", "summary_table"]
