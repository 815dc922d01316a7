"""Verdicts of ``simloop check`` for people and for CI: a text table, JUnit XML, Markdown, JSON.

Input is a list of :class:`simloop.design.DesignOutcome`; nothing here simulates or reads files.

JUnit XML (the de-facto schema most CI systems read: Jenkins, GitLab, GitHub and Azure test
reporters)::

    <testsuites name="simloop check" tests= failures= errors= time=>
      <testsuite name=DESIGN tests= failures= errors= skipped="0" time= timestamp= file=>
        <properties> circuit, title, corners, simulated, reused </properties>
        <testcase classname="simloop.check.DESIGN" name="LIMIT [CORNER]" file= line=>
          <failure type="limit" message="METRIC = VALUE at CORNER: bound BOUND, margin MARGIN">
          or <error type="not available|simulation" message=...>
          or (pass) <system-out>METRIC = VALUE, bound BOUND, margin MARGIN</system-out>

One test case per design x corner x limit (a limit skipped at a corner by an override has
none); ``line`` is the line of the ``[[limit]]`` in the design file.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from .files import clean_json, write_atomic, write_json

__all__ = [
    "check_document",
    "format_margin",
    "format_value",
    "junit_xml",
    "markdown_summary",
    "totals_line",
    "verdict_table",
    "write_check_json",
    "write_junit",
    "write_summary",
]

_STATUS_SHOWN = {"pass": "pass", "fail": "FAIL", "error": "ERROR"}
#: Characters XML 1.0 does not allow (engine messages may carry them).
_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _unit(unit: str) -> str:
    return "" if unit in ("", "1") else f" {unit}"


def format_value(value: float | None, unit: str = "") -> str:
    """``4.7512 V``, ``-12.31 dBc``, ``0.4352`` (ratio); ``-`` when there is none.

    Examples
    --------
    >>> format_value(4.751234, "V"), format_value(-math.inf, "dBV"), format_value(None, "V")
    ('4.7512 V', '-inf dBV', '-')
    """
    if value is None:
        return "-"
    if math.isinf(value):
        return f"{'-' if value < 0 else ''}inf{_unit(unit)}"
    return f"{value:.5g}{_unit(unit)}"


def format_margin(margin: float | None, unit: str = "") -> str:
    """A margin with its sign: ``+0.25 V``, ``-1.69 dB``; ``-`` when there is none.

    Examples
    --------
    >>> format_margin(0.25, "V"), format_margin(-1.6912, "dB")
    ('+0.25 V', '-1.6912 dB')
    """
    if margin is None:
        return "-"
    if math.isinf(margin):
        return f"{'-' if margin < 0 else '+'}inf{_unit(unit)}"
    return f"{margin:+.5g}{_unit(unit)}"


def _sentence(v) -> str:
    """``ripple_v = 1.62 V at rload=50: bound <= 1.5 V, margin -0.12 V`` (or the error reason)."""
    head = f"{v.metric} at {v.corner}" if v.value is None else (
        f"{v.metric} = {format_value(v.value, v.unit)} at {v.corner}")
    if v.status == "error":
        return f"{head}: {v.reason} (bound {v.bound.text(v.unit)})"
    return (f"{head}: bound {v.bound.text(v.unit)}, margin "
            f"{format_margin(v.margin, v.margin_unit)}")


def _counts(outcomes) -> dict[str, int]:
    verdicts = [v for o in outcomes for v in o.verdicts]
    return {"checks": len(verdicts),
            "pass": sum(v.status == "pass" for v in verdicts),
            "fail": sum(v.status == "fail" for v in verdicts),
            "error": sum(v.status == "error" for v in verdicts)}


# ============================================================================ text
def verdict_table(outcome) -> str:
    """The printed verdicts of one design: heading, counts, one line per limit and corner.

    Failures come first, then errors, then passes (the order of ``outcome.verdicts``).
    """
    d = outcome.design
    n = {s: outcome.count(s) for s in ("pass", "fail", "error")}
    lines = [
        f"{d.file}: {d.template.name}: {d.title}",
        f"  {len(d.corners)} corners ({outcome.simulated} simulated, {outcome.reused} reused "
        f"from the store), {len(d.limits)} limits: {len(outcome.verdicts)} checks, "
        f"{n['fail']} FAIL, {n['error']} ERROR, {n['pass']} pass",
    ]
    head = ("status", "limit", "corner", "value", "bound", "margin")
    rows = [(_STATUS_SHOWN[v.status], v.limit, v.corner, format_value(v.value, v.unit),
             v.bound.text(v.unit),
             v.reason if v.status == "error" else format_margin(v.margin, v.margin_unit))
            for v in outcome.verdicts]
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(len(head) - 1)]
    for row in [head, *rows]:
        cells = [f"{c:<{w}}" for c, w in zip(row, widths)] + [row[-1]]
        lines.append("  " + "  ".join(cells).rstrip())
    return "\n".join(lines)


def totals_line(outcomes: Sequence[Any], exit_code: int) -> str:
    """``3 designs, 40 checks: 38 pass, 2 FAIL, 0 ERROR (exit 1)``."""
    c = _counts(outcomes)
    return (f"{len(outcomes)} design{'s' if len(outcomes) != 1 else ''}, {c['checks']} checks: "
            f"{c['pass']} pass, {c['fail']} FAIL, {c['error']} ERROR (exit {exit_code})")


# ============================================================================ JUnit
def _xml_text(text: str) -> str:
    return _XML_BAD.sub("?", str(text))


def _classname(name: str) -> str:
    return "simloop.check." + re.sub(r"[^A-Za-z0-9_-]+", "_", name)


def junit_xml(outcomes: Sequence[Any], *, timestamp: datetime | None = None) -> str:
    """The verdicts as JUnit XML text (see the module notes for the structure).

    Parameters
    ----------
    outcomes : sequence of DesignOutcome
    timestamp : datetime, optional
        When the check ran (UTC now by default).

    Returns
    -------
    str
        An XML document, UTF-8 declared.
    """
    stamp = (timestamp or datetime.now(timezone.utc)).isoformat(timespec="seconds")
    c = _counts(outcomes)
    total_time = sum(o.elapsed_s for o in outcomes)
    root = ET.Element("testsuites", {
        "name": "simloop check", "tests": str(c["checks"]), "failures": str(c["fail"]),
        "errors": str(c["error"]), "time": f"{total_time:.3f}",
    })
    for o in outcomes:
        d = o.design
        suite = ET.SubElement(root, "testsuite", {
            "name": d.name, "tests": str(len(o.verdicts)), "failures": str(o.count("fail")),
            "errors": str(o.count("error")), "skipped": "0", "time": f"{o.elapsed_s:.3f}",
            "timestamp": stamp, "file": d.file,
        })
        props = ET.SubElement(suite, "properties")
        for name, value in (("circuit", d.template.name), ("title", d.title),
                            ("corners", len(d.corners)), ("limits", len(d.limits)),
                            ("simulated", o.simulated), ("reused", o.reused)):
            ET.SubElement(props, "property", {"name": name, "value": _xml_text(str(value))})
        for v in o.verdicts:
            case = ET.SubElement(suite, "testcase", {
                "classname": _classname(d.name), "name": _xml_text(f"{v.limit} [{v.corner}]"),
                "file": d.file, "line": str(v.line),
            })
            sentence = _xml_text(_sentence(v))
            detail = _xml_text("\n".join([
                sentence,
                f"design {d.file} line {v.line}, circuit {d.template.name}",
                "corner values: " + ", ".join(
                    f"{k}={format_value(x) if not isinstance(x, str) else x}"
                    for k, x in v.parameters.items()),
            ]))
            if v.status == "fail":
                ET.SubElement(case, "failure", {"type": "limit", "message": sentence}).text = detail
            elif v.status == "error":
                kind = "not available" if v.reason.startswith("not available") else "simulation"
                ET.SubElement(case, "error", {"type": kind, "message": sentence}).text = detail
            else:
                ET.SubElement(case, "system-out").text = sentence
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def write_junit(path: Path, outcomes: Sequence[Any]) -> None:
    """Write :func:`junit_xml` to ``path`` (atomically)."""
    write_atomic(path, junit_xml(outcomes))


# ============================================================================ Markdown
def _md(text: str) -> str:
    return str(text).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def markdown_summary(outcomes: Sequence[Any], *, exit_code: int) -> str:
    """A Markdown summary for a pull-request comment.

    A headline with the overall verdict, a table of designs (corners, checks, pass, fail,
    error), a table of every failure and error (value, bound, margin or reason), and every
    check in a collapsed ``<details>`` block.
    """
    c = _counts(outcomes)
    verdict = {0: "all limits hold", 1: "limits FAIL", 2: "ERRORS"}.get(exit_code, "ERRORS")
    lines = [
        f"## simloop check: {verdict}",
        "",
        f"{len(outcomes)} design{'s' if len(outcomes) != 1 else ''}, {c['checks']} checks: "
        f"**{c['pass']} pass, {c['fail']} fail, {c['error']} error** (exit code {exit_code}).",
        "",
        "| design | circuit | corners | checks | pass | fail | error | simulated | reused |",
        "|---|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for o in outcomes:
        d = o.design
        lines.append(f"| `{_md(d.file)}` | {_md(d.template.name)} | {len(d.corners)} | "
                     f"{len(o.verdicts)} | {o.count('pass')} | {o.count('fail')} | "
                     f"{o.count('error')} | {o.simulated} | {o.reused} |")
    bad = [(o, v) for o in outcomes for v in o.verdicts if v.status != "pass"]
    row_head = ["| status | design | limit | corner | value | bound | margin |",
                "|---|---|---|---|---:|---|---:|"]

    def row(o, v) -> str:
        last = v.reason if v.status == "error" else format_margin(v.margin, v.margin_unit)
        return (f"| {_STATUS_SHOWN[v.status]} | {_md(o.design.name)} | {_md(v.limit)} | "
                f"{_md(v.corner)} | {_md(format_value(v.value, v.unit))} | "
                f"{_md(v.bound.text(v.unit))} | {_md(last)} |")

    if bad:
        lines += ["", "### Failures and errors", "", *row_head, *(row(o, v) for o, v in bad)]
    every = [(o, v) for o in outcomes for v in o.verdicts]
    if every:
        lines += ["", f"<details><summary>All {len(every)} checks</summary>", "", *row_head,
                  *(row(o, v) for o, v in every), "", "</details>"]
    return "\n".join(lines) + "\n"


def write_summary(path: Path, outcomes: Sequence[Any], *, exit_code: int) -> None:
    """Write :func:`markdown_summary` to ``path`` (atomically)."""
    write_atomic(path, markdown_summary(outcomes, exit_code=exit_code))


# ============================================================================ JSON
def check_document(outcomes: Sequence[Any], *, exit_code: int) -> dict[str, Any]:
    """Everything the check found, as plain JSON data (infinities become null)."""
    return clean_json({
        "exit_code": exit_code,
        "counts": _counts(outcomes),
        "designs": [{
            "file": o.design.file, "name": o.design.name, "circuit": o.design.template.name,
            "title": o.design.title, "status": o.status, "simulated": o.simulated,
            "reused": o.reused, "elapsed_s": o.elapsed_s,
            "corners": [{"name": c.name, "values": dict(c.values)} for c in o.design.corners],
            "verdicts": [v.as_dict() for v in o.verdicts],
        } for o in outcomes],
    })


def write_check_json(path: Path, outcomes: Sequence[Any], *, exit_code: int) -> None:
    write_json(path, check_document(outcomes, exit_code=exit_code))
