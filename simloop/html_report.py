"""Self-contained HTML reports of a run, a sweep and a check: one file, no outside resources.

A report is one HTML5 document with its style sheet inline and every figure embedded as a PNG
``data:`` URI, so it can be mailed, archived or attached to a CI run and still open anywhere. It
holds no script at all, and a Content-Security-Policy meta tag forbids scripts, frames and any
load from outside (``default-src 'none'; img-src data:; style-src 'unsafe-inline'``), so even a
string that slipped past the escaping could not run or fetch anything. Every string that comes
from a document (netlist titles, parameter names, error messages, design names) is user input and
is passed through :func:`html.escape`.

The functions here are pure: they take the JSON documents the commands already write (and PNG
bytes of figures) and return HTML text; :func:`write_report` writes it atomically. Nothing here
simulates or imports matplotlib, except :func:`figure_png`, which renders a Figure in memory.

Effect breakdown (the ``breakdown`` argument of :func:`run_report`), one row per step that takes
the ideal waveform towards the simulated one, one column per harmonic order::

    {"steps": ["diode drop", "source resistance", ...],   # names, in order of application
     "harmonics": [1, 2, 3],                              # the orders n of the columns
     "step_db": [[...], ...],        # len(steps) rows x len(harmonics): change of that step [dB]
     "cumulative_db": [[...], ...],  # same shape: level after the step re the ideal [dB]
     "reference": "ideal closed form"}  # optional: what 0 dB is

At least one of ``step_db`` and ``cumulative_db`` is needed; a cell may be None (not defined).

Limit verdicts (``verdicts`` of :func:`run_report` and :func:`check_report`): mappings as
:meth:`simloop.design.Verdict.as_dict` gives them (``design``, ``corner``, ``limit``,
``metric``, ``value``, ``unit``, ``bound`` {min, max}, ``margin``, ``margin_unit``, ``status``,
``reason``); a row may give ``passed`` (True/False) in place of ``status``, and ``bound`` may be
text already.

Number display: quantities with an SI unit get an engineering prefix and five significant digits
(``4.7512 mV``, ``1 kHz``); levels and deltas in dB three decimals with their sign; phases two
decimals in degrees; THD in percent; a missing value (None, NaN) is shown as an en dash ``–``.
"""

from __future__ import annotations

import base64
import html
import math
import numbers
import re
import struct
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from types import MappingProxyType
from typing import Any

from .errors import InputError
from .files import write_atomic

__all__ = [
    "CAUTION_POINTS",
    "DASH",
    "check_report",
    "figure_png",
    "format_db",
    "format_eng",
    "format_quantity",
    "run_report",
    "sweep_report",
    "write_report",
]

#: Shown for a value that is missing (None or NaN).
DASH = "\u2013"

#: What the caution block always says, after the caller's own text: the three facts a reader of a
#: mains or high-voltage result must not miss.
CAUTION_POINTS: tuple[str, ...] = (
    "Lethal voltages: mains-connected and high-voltage circuits can kill on contact.",
    "Stored charge in capacitors: reservoir and filter capacitors can keep a dangerous charge "
    "long after power-off; discharge them and measure before touching.",
    "Follow local electrical codes and licensed practice: a simulation does not make a circuit "
    "safe to build or to touch.",
)

_EMPTY: Mapping[str, Any] = MappingProxyType({})
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G",
             12: "T"}
_UNIT_SHOWN = {"ohm": "\u03a9", "ohms": "\u03a9", "1": "", "deg": "\u00b0"}
_STATUS_RANK = {"fail": 0, "error": 1, "pass": 2}
_STATUS_SHOWN = {"pass": "pass", "fail": "FAIL", "error": "ERROR"}


# ============================================================================ numbers
def _real(value: Any) -> float | None:
    """A float for a real number (numpy scalars too), None for anything else (bool included)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        return None
    return float(value)


def _tidy_exponent(text: str) -> str:
    """``1e-06`` -> ``1e-6``, ``2.5e+07`` -> ``2.5e7``."""
    return re.sub(r"e([+-])0*(\d)", lambda m: "e" + ("-" if m.group(1) == "-" else "") + m.group(2),
                  text)


def _unit_shown(unit: str | None) -> str:
    unit = (unit or "").strip()
    return _UNIT_SHOWN.get(unit.lower(), unit)


def format_eng(value: Any, unit: str = "", *, digits: int = 5, sign: bool = False) -> str:
    """A number with an engineering (SI) prefix and its unit, for people.

    Parameters
    ----------
    value : float or None
        The number [unit]. None and NaN give :data:`DASH`; text is returned as it is.
    unit : str
        SI unit (``"V"``, ``"Hz"``, ``"ohm"`` shown as Ω, ``"1"`` or ``""`` for a pure number).
    digits : int
        Significant digits.
    sign : bool
        Show ``+`` on positive values (margins, changes).

    Returns
    -------
    str
        ``"4.7512 mV"``, ``"1 kHz"``, ``"-∞ V"``; a pure number has no prefix (``"1e-6"``), and
        values beyond the prefixes f..T are written with an exponent (``"1e-20 V"``).

    Notes
    -----
    The prefix exponent is ``3 floor(log10|x| / 3)``; the mantissa is rounded to ``digits``
    significant digits, and a rounding that reaches 1000 moves to the next prefix.

    References
    ----------
    Bureau International des Poids et Mesures, "The International System of Units (SI)",
    9th edition, 2019, Table 7 (SI prefixes).

    Examples
    --------
    >>> format_eng(0.00475123, "V"), format_eng(1000.0, "Hz"), format_eng(4700, "ohm")
    ('4.7512 mV', '1 kHz', '4.7 kΩ')
    >>> format_eng(0.9999996, "V"), format_eng(None, "V"), format_eng(-0.25, "V", sign=True)
    ('1 V', '–', '-250 mV')
    """
    number = _real(value)
    if number is None:
        return DASH if value is None else str(value)
    if math.isnan(number):
        return DASH
    shown = _unit_shown(unit)
    space = f" {shown}" if shown else ""
    if math.isinf(number):
        return ("-\u221e" if number < 0 else ("+\u221e" if sign else "\u221e")) + space
    flag = "+" if sign else ""
    if number == 0.0:
        return f"0{space}"
    if not shown:
        return _tidy_exponent(f"{number:{flag}.{digits}g}")
    exp3 = 3 * math.floor(math.log10(abs(number)) / 3)
    mantissa = f"{number / 10.0 ** exp3:{flag}.{digits}g}"
    if abs(float(mantissa)) >= 1000.0:  # 999.9996 rounds to 1000: one prefix up
        exp3 += 3
        mantissa = f"{number / 10.0 ** exp3:{flag}.{digits}g}"
    if exp3 not in _PREFIXES:
        return _tidy_exponent(f"{number:{flag}.{digits}g}") + space
    return f"{_tidy_exponent(mantissa)} {_PREFIXES[exp3]}{shown}"


def format_db(value: Any, unit: str = "", *, decimals: int = 3, sign: bool = True) -> str:
    """A level or a change in dB: three decimals, signed (``+0.125``, ``-12.310 dBc``).

    Examples
    --------
    >>> format_db(-1.0), format_db(-12.3104, "dBc", sign=False), format_db(None)
    ('-1.000', '-12.310 dBc', '–')
    """
    number = _real(value)
    if number is None:
        return DASH if value is None else str(value)
    if math.isnan(number):
        return DASH
    space = f" {unit}" if unit else ""
    if math.isinf(number):
        return ("-\u221e" if number < 0 else "+\u221e") + space
    return f"{number:{'+' if sign else ''}.{decimals}f}{space}"


def _degrees(value: Any) -> str:
    number = _real(value)
    if number is None or not math.isfinite(number):
        return DASH
    text = f"{number:.2f}"
    return ("0.00" if float(text) == 0.0 else text) + "\u00b0"  # no "-0.00"


def _percent(value: Any) -> str:
    """A ratio as a percentage, four significant digits (THD 0.4352 -> ``43.52 %``)."""
    number = _real(value)
    if number is None or not math.isfinite(number):
        return DASH
    return _tidy_exponent(f"{100.0 * number:.4g}") + " %"


def format_quantity(value: Any, unit: str = "", *, sign: bool = False) -> str:
    """A value in its unit: dB units in dB, ``deg`` in degrees, others with an SI prefix.

    Examples
    --------
    >>> format_quantity(-14.2, "dBc"), format_quantity(0.012, "V"), format_quantity(0.25, "dB", sign=True)
    ('-14.200 dBc', '12 mV', '+0.250 dB')
    """
    unit = (unit or "").strip()
    if unit.lower().startswith("db"):
        return format_db(value, unit, sign=sign)
    if unit.lower() in ("deg", "\u00b0"):
        return _degrees(value)
    if unit == "%":
        number = _real(value)
        return DASH if number is None or math.isnan(number) else f"{number:{'+' if sign else ''}.4g} %"
    return format_eng(value, unit, sign=sign)


# ============================================================================ markup helpers
def _e(text: Any) -> str:
    """Escape any value for element content and attribute values."""
    return html.escape(str(text), quote=True)


def _cell(text: str, *, cls: str = "", tag: str = "td", markup: bool = False) -> str:
    attr = f' class="{cls}"' if cls else ""
    return f"<{tag}{attr}>{text if markup else _e(text)}</{tag}>"


def _table(head: Sequence[str], rows: Iterable[Sequence[str]], *, table_id: str,
           caption: str = "", numeric: Iterable[int] = (), row_classes: Sequence[str] = (),
           narrow: bool = False) -> str:
    """A data table. ``head`` is plain text; ``rows`` hold ready-made HTML cell contents."""
    numeric = set(numeric)
    lines = [f'<table class="data{" narrow" if narrow else ""}" id="{table_id}">']
    if caption:
        lines.append(f"<caption>{_e(caption)}</caption>")
    lines.append("<thead><tr>" + "".join(
        _cell(h, tag="th", cls="num" if i in numeric else "") for i, h in enumerate(head))
        + "</tr></thead>")
    lines.append("<tbody>")
    for k, row in enumerate(rows):
        cls = row_classes[k] if k < len(row_classes) and row_classes[k] else ""
        attr = f' class="{cls}"' if cls else ""
        lines.append(f"<tr{attr}>" + "".join(
            _cell(c, cls="num" if i in numeric else "", markup=True) for i, c in enumerate(row))
            + "</tr>")
    lines.append("</tbody></table>")
    return "\n".join(lines)


def _key_values(pairs: Sequence[tuple[str, str]], *, table_id: str) -> str:
    """A two-column table of label and (already formatted, plain-text) value."""
    rows = "".join(f"<tr><th scope=\"row\">{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in pairs)
    return f'<table class="kv" id="{table_id}"><tbody>{rows}</tbody></table>'


def _section(section_id: str, heading: str, body: str) -> str:
    return f'<section id="{section_id}">\n<h2>{_e(heading)}</h2>\n{body}\n</section>'


def _plain(value: Any) -> str:
    """A setting or figure of unknown meaning: numbers as numbers, the rest as text."""
    if value is None:
        return DASH
    if isinstance(value, bool):
        return "yes" if value else "no"
    if _real(value) is not None:
        return format_eng(value, "", digits=6)
    if isinstance(value, Mapping):
        return ", ".join(f"{k}: {_plain(v)}" for k, v in value.items()) or DASH
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v) for v in value) or DASH
    return str(value)


# ============================================================================ page
_CSS = """
:root { --ink: #1d2330; --muted: #5b6474; --rule: #d5dae2; --band: #f3f5f8;
        --accent: #0072b2; --bad: #b00020; --badbg: #fdecea; --warn: #8a5a00; --warnbg: #fff4d6;
        --good: #1b7a3d; }
* { box-sizing: border-box; }
html { background: #ffffff; }
body { margin: 0 auto; padding: 24px 32px 40px; max-width: 1160px; color: var(--ink);
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", "DejaVu Sans", sans-serif; }
header.report-head { border-bottom: 3px solid var(--accent); padding-bottom: 10px; margin-bottom: 18px; }
.kind { margin: 0; color: var(--accent); font-weight: 600; letter-spacing: .06em;
        text-transform: uppercase; font-size: 12px; }
h1 { margin: 4px 0 6px; font-size: 26px; line-height: 1.25; overflow-wrap: anywhere; }
h2 { font-size: 18px; margin: 28px 0 10px; padding-bottom: 4px; border-bottom: 1px solid var(--rule); }
h3 { font-size: 15px; margin: 14px 0 6px; color: var(--muted); }
.sub { margin: 0; color: var(--muted); }
.sub span + span::before { content: "\\00b7"; margin: 0 .6em; color: var(--rule); }
code { font-family: "DejaVu Sans Mono", ui-monospace, monospace; font-size: .92em;
       background: var(--band); padding: 0 .25em; border-radius: 3px; }
.caution { border: 2px solid var(--bad); border-left-width: 10px; background: var(--badbg);
           color: #5c0011; padding: 12px 18px; margin: 0 0 18px; border-radius: 4px; }
.caution h2 { margin: 0 0 6px; border: 0; padding: 0; color: var(--bad); font-size: 19px; }
.caution p { margin: 0 0 6px; font-weight: 600; }
.caution ul { margin: 4px 0 0; padding-left: 1.3em; }
.banner { padding: 10px 16px; border-radius: 4px; margin: 0 0 16px; font-weight: 600; }
.banner.warn { background: var(--warnbg); border: 1px solid #e0b84a; color: var(--warn); }
.banner.bad { background: var(--badbg); border: 1px solid var(--bad); color: var(--bad); }
.banner.good { background: #e8f5ec; border: 1px solid #8cc9a2; color: var(--good); }
.cards { display: flex; flex-wrap: wrap; gap: 10px; margin: 0; padding: 0; }
.card { flex: 1 1 128px; background: var(--band); border-radius: 6px; padding: 8px 12px;
        border-top: 3px solid var(--accent); }
.card dt { color: var(--muted); font-size: 12px; text-transform: uppercase; letter-spacing: .04em; }
.card dd { margin: 2px 0 0; font-size: 20px; font-weight: 600; font-variant-numeric: tabular-nums; }
.card.bad { border-top-color: var(--bad); } .card.bad dd { color: var(--bad); }
.card.good { border-top-color: var(--good); }
figure { margin: 10px 0 18px; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 13px; margin-top: 4px; }
table { border-collapse: collapse; font-variant-numeric: tabular-nums; }
table.data { width: 100%; font-size: 13.5px; }
table.data caption { caption-side: top; text-align: left; color: var(--muted); font-size: 13px;
                     padding-bottom: 4px; }
table.data th { text-align: left; font-weight: 600; background: var(--band);
                border-bottom: 2px solid var(--rule); padding: 5px 8px; vertical-align: bottom; }
table.data td { padding: 4px 8px; border-bottom: 1px solid var(--rule); vertical-align: top;
                overflow-wrap: break-word; }
table.data.narrow { width: auto; min-width: 40%; }
table.data tbody tr:nth-child(even) td { background: #fafbfc; }
table.data .num { text-align: right; white-space: nowrap; }
th .u { display: block; font-weight: 400; color: var(--muted); font-size: 12px; }
table.kv { font-size: 13.5px; width: 100%; }
table.kv th { text-align: left; font-weight: 400; color: var(--muted); padding: 3px 12px 3px 0;
              vertical-align: top; width: 55%; }
table.kv td { padding: 3px 0; overflow-wrap: break-word; font-variant-numeric: tabular-nums; }
.columns { display: grid; grid-template-columns: repeat(auto-fill, minmax(300px, 1fr)); gap: 8px 32px; }
tr.fail td { background: var(--badbg) !important; }
tr.error td { background: var(--warnbg) !important; }
.status-fail, .status-failed { color: var(--bad); font-weight: 700; }
.status-error, .status-unconverged { color: var(--warn); font-weight: 700; }
.status-pass, .status-ok { color: var(--good); }
.tag { font-size: 11px; color: var(--muted); border: 1px solid var(--rule); border-radius: 3px;
       padding: 0 4px; margin-left: 4px; }
.cum { display: block; color: var(--muted); font-size: 12px; }
.note-list li { margin-bottom: 4px; }
footer { margin-top: 32px; padding-top: 8px; border-top: 1px solid var(--rule); color: var(--muted);
         font-size: 12px; }
@page { margin: 14mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  h2 { break-after: avoid; }
  figure, .cards, .caution, tr, .kv { break-inside: avoid; }
  thead { display: table-header-group; }
  .caution, .banner, .card, tr.fail td, tr.error td { -webkit-print-color-adjust: exact;
                                                       print-color-adjust: exact; }
  table.data tbody tr:nth-child(even) td { background: none; }
}
"""

_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def _page(*, title: str, kind: str, heading: str, sub: Sequence[str], body: Sequence[str],
          caution: str | None) -> str:
    from . import __version__

    sub_html = "".join(f"<span>{s}</span>" for s in sub)  # already escaped by the callers
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">',
        f'<meta name="generator" content="simloop {_e(__version__)}">',
        f"<title>{_e(title)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        '<header class="report-head">',
        f'<p class="kind">{_e(kind)}</p>',
        f"<h1>{_e(heading)}</h1>",
        f'<p class="sub">{sub_html}</p>' if sub_html else "",
        "</header>",
    ]
    if caution is not None:
        parts.append(_caution_block(caution))
    parts.extend(body)
    parts += [
        f"<footer>Written by simloop {_e(__version__)}. Amplitudes are peak values; "
        "a dB change is 20 log<sub>10</sub> of an amplitude ratio; "
        f"{_e(DASH)} marks a value that is not defined.</footer>",
        "</body>",
        "</html>",
        "",
    ]
    return "\n".join(p for p in parts if p)


def _caution_block(text: str) -> str:
    points = "".join(f"<li>{_e(p)}</li>" for p in CAUTION_POINTS)
    lead = f"<p>{_e(text)}</p>" if str(text).strip() else ""
    return ('<div class="caution" id="caution" role="alert">'
            "<h2>\u26a0 Caution: dangerous voltage</h2>"
            f"{lead}<ul>{points}</ul></div>")


def _figures(figures: Mapping[str, bytes]) -> str:
    """``<figure>`` blocks, one per PNG; the name is the caption and the alt text."""
    blocks = []
    for name, data in figures.items():
        if not isinstance(data, (bytes, bytearray, memoryview)):
            raise InputError(f"figure {name!r} is {type(data).__name__}, not PNG bytes; render it "
                             "with simloop.html_report.figure_png")
        data = bytes(data)
        if not data.startswith(_PNG_SIGNATURE) or len(data) < 24 or data[12:16] != b"IHDR":
            raise InputError(f"figure {name!r} is not PNG data; render it with "
                             "simloop.html_report.figure_png")
        width, height = struct.unpack(">II", data[16:24])
        encoded = base64.b64encode(data).decode("ascii")
        blocks.append(
            f'<figure><img src="data:image/png;base64,{encoded}" alt="{_e(name)}" '
            f'width="{width}" height="{height}"><figcaption>{_e(name)}</figcaption></figure>')
    return "\n".join(blocks)


def _cards(items: Sequence[tuple[str, str, str]]) -> str:
    """Headline figures: (label, value text, css class)."""
    cards = "".join(f'<div class="card{" " + cls if cls else ""}"><dt>{_e(label)}</dt>'
                    f"<dd>{_e(value)}</dd></div>" for label, value, cls in items)
    return f'<dl class="cards">{cards}</dl>'


# ============================================================================ run
_WAVE_METRICS = {  # key -> (label, True: in the probe's unit)
    "dc_v": ("DC (mean)", True),
    "rms_v": ("RMS (DC included)", True),
    "ripple_v": ("ripple, peak to peak", True),
    "peak_v": ("peak", True),
    "trough_v": ("trough", True),
}
_METRIC_LABELS = {
    "crest_factor": "crest factor",
    "thd": "THD (re the fundamental)",
    "thd_r": "THD-R (re the RMS of the AC part)",
    "thd_orders": "THD orders",
    "conduction_angle_deg": "conduction angle",
    "drop_v": "estimate: junction drop",
    "peak_current_a": "estimate: peak diode current",
    "level_v": "estimate: pulse level",
    "rise_s": "estimate: rise time",
    "fall_s": "estimate: fall time",
    "source_power_w": "source power (mean)",
}
_SUFFIX_UNITS = (("_dbv", "dBV"), ("_dbc", "dBc"), ("_db", "dB"), ("_deg", "deg"), ("_hz", "Hz"),
                 ("_v", "V"), ("_a", "A"), ("_w", "W"), ("_s", "s"))
_STEADY_LABELS = {
    "method": "method",
    "converged": "periodic steady state",
    "periods_simulated": "periods simulated",
    "engine_periods": "engine work [periods]",
    "residual": "last change (relative)",
    "drift": "change still to come (relative)",
    "tmax_s": "engine TMAX",
    "attempts": "attempts",
    "shooting_iterations": "shooting: Newton iterations",
    "shooting_residual": "shooting: state residual",
    "fallback": "fallback",
}
_SETTING_LABELS = {
    "harmonics": "highest harmonic N",
    "tolerance": "steady-state tolerance",
    "max_periods": "most periods",
    "resampling": "resampling",
}


def _metric_text(key: str, value: Any, probe_unit: str) -> tuple[str, str]:
    """(label, value text) of one entry of ``metrics``."""
    if key in _WAVE_METRICS:
        label, _ = _WAVE_METRICS[key]
        return label, format_eng(value, probe_unit)
    label = _METRIC_LABELS.get(key, key)
    if key in ("thd", "thd_r"):
        return label, _percent(value)
    if key == "crest_factor" or _real(value) is None:
        return label, _plain(value)
    for suffix, unit in _SUFFIX_UNITS:
        if key.endswith(suffix):
            return label, format_quantity(value, unit)
    return label, _plain(value)


def _probe_unit(document: Mapping[str, Any]) -> str:
    """Amplitudes are in amperes when the probe is a current, ``i(...)``, else in volts."""
    return "A" if str(document.get("probe", "")).strip().lower().startswith("i(") else "V"


def _harmonic_table(rows: Sequence[Mapping[str, Any]], unit: str) -> str:
    head = ["n", "frequency", f"ideal [{unit}]", f"estimate [{unit}]", f"simulated [{unit}]",
            "sim \u2212 ideal [dB]", "sim \u2212 estimate [dB]", "phase, simulated [\u00b0]",
            "phase, ideal [\u00b0]"]
    body = []
    for r in rows:
        n = r.get("n")
        body.append([
            _e(n if n is not None else DASH),
            _e(format_eng(r.get("freq_hz"), "Hz")),
            _e(format_eng(r.get("ideal_v"), unit)),
            _e(format_eng(r.get("estimate_v"), unit)),
            _e(format_eng(r.get("sim_v"), unit)),
            _e(format_db(r.get("delta_db"))),
            _e(format_db(r.get("estimate_delta_db"))),
            _e(_degrees(r.get("sim_phase_deg"))),
            _e(_degrees(r.get("ideal_phase_deg"))),
        ])
    return _table(head, body, table_id="harmonic-table", numeric=range(9),
                  caption="Peak amplitude of each order n (n = 0: the DC value); dB changes are "
                          "20 log10(simulated / reference).")


def _matrix(breakdown: Mapping[str, Any], key: str, steps: int, orders: int) -> list | None:
    rows = breakdown.get(key)
    if rows is None:
        return None
    if isinstance(rows, (str, bytes)) or not isinstance(rows, Sequence) or len(rows) != steps:
        raise InputError(f"effect breakdown: {key} must hold one row per step ({steps}), got "
                         f"{len(rows) if isinstance(rows, Sequence) else type(rows).__name__}; "
                         "give len(steps) rows of len(harmonics) values")
    for i, row in enumerate(rows):
        if isinstance(row, (str, bytes)) or not isinstance(row, Sequence) or len(row) != orders:
            raise InputError(f"effect breakdown: {key} row {i} must hold {orders} values, one per "
                             "harmonic order; give len(harmonics) values per row")
        for value in row:
            if value is not None and _real(value) is None:
                raise InputError(f"effect breakdown: {key} row {i} holds {value!r}; give numbers "
                                 "[dB] or None")
    return [list(row) for row in rows]


def breakdown_table(breakdown: Mapping[str, Any]) -> str:
    """The effect breakdown as a table: one row per step, one column per harmonic order.

    Parameters
    ----------
    breakdown : mapping
        ``{"steps": [names], "harmonics": [n, ...], "step_db": [[...], ...],
        "cumulative_db": [[...], ...], "reference": str (optional)}``; each matrix has one row per
        step and one value per order [dB] (None: not defined); one of the two may be left out.

    Returns
    -------
    str
        An HTML ``<table id="breakdown-table">``: each cell the step's own change, with the
        running total below it.

    Raises
    ------
    InputError
        Missing steps or orders, or a matrix of another shape.

    Examples
    --------
    >>> t = breakdown_table({"steps": ["drop"], "harmonics": [1, 2], "step_db": [[-0.5, -1.25]]})
    >>> print(t.count("<tr>"), "-1.250" in t)
    2 True
    """
    steps = breakdown.get("steps")
    orders = breakdown.get("harmonics")
    if not steps or isinstance(steps, str) or not isinstance(steps, Sequence):
        raise InputError("effect breakdown: 'steps' must be a non-empty list of step names")
    if not orders or isinstance(orders, str) or not isinstance(orders, Sequence):
        raise InputError("effect breakdown: 'harmonics' must be a non-empty list of orders n")
    step_db = _matrix(breakdown, "step_db", len(steps), len(orders))
    cumulative = _matrix(breakdown, "cumulative_db", len(steps), len(orders))
    if step_db is None and cumulative is None:
        raise InputError("effect breakdown: give 'step_db' or 'cumulative_db' (or both), one row "
                         "per step")
    head = ["step", *(f"n = {n}" for n in orders)]
    body = []
    for i, name in enumerate(steps):
        row = [_e(name)]
        for j in range(len(orders)):
            parts = []
            if step_db is not None:
                parts.append(_e(format_db(step_db[i][j])))
            if cumulative is not None:
                total = _e("\u03a3 " + format_db(cumulative[i][j]))
                parts.append(f'<span class="cum">{total}</span>' if step_db is not None else total)
            row.append("".join(parts))
        body.append(row)
    reference = breakdown.get("reference") or "the ideal closed form"
    what = []
    if step_db is not None:
        what.append("the change this step makes [dB]")
    if cumulative is not None:
        what.append(f"\u03a3: the level after it, re {reference} [dB]")
    return _table(head, body, table_id="breakdown-table", numeric=range(1, len(orders) + 1),
                  narrow=True, caption="Steps in the order applied; each cell: " + "; ".join(what) + ".")


def _bound_text(bound: Any, unit: str) -> str:
    if bound is None:
        return DASH
    if isinstance(bound, Mapping):
        low, high = bound.get("min"), bound.get("max")
        if low is not None and high is not None:
            return f"{format_quantity(low, unit)} \u2026 {format_quantity(high, unit)}"
        if low is not None:
            return f"\u2265 {format_quantity(low, unit)}"
        if high is not None:
            return f"\u2264 {format_quantity(high, unit)}"
        return DASH
    if _real(bound) is not None:
        return format_quantity(bound, unit)
    return str(bound)


def _status(verdict: Mapping[str, Any]) -> str:
    status = verdict.get("status")
    if status in _STATUS_RANK:
        return str(status)
    passed = verdict.get("passed")
    if passed is None:
        return "error"
    return "pass" if passed else "fail"


def _verdict_rows(verdicts: Sequence[Mapping[str, Any]]) -> tuple[list, list[str], dict[str, int]]:
    ranked = sorted(enumerate(verdicts), key=lambda iv: (_STATUS_RANK[_status(iv[1])], iv[0]))
    rows, classes = [], []
    counts = {"fail": 0, "error": 0, "pass": 0}
    for _, v in ranked:
        status = _status(v)
        counts[status] += 1
        unit = str(v.get("unit") or "")
        margin_unit = str(v.get("margin_unit") or unit)
        metric = v.get("metric")
        limit = str(v.get("limit") or metric or DASH)
        limit_cell = _e(limit) + (f'<span class="cum">{_e(metric)}</span>'
                                  if metric and metric != limit else "")
        rows.append([
            f'<span class="status-{status}">{_e(_STATUS_SHOWN[status])}</span>',
            _e(v.get("design") or DASH),
            limit_cell,
            _e(v.get("corner") or DASH),
            _e(format_quantity(v.get("value"), unit)),
            _e(_bound_text(v.get("bound"), unit)),
            _e(format_quantity(v.get("margin"), margin_unit, sign=True)),
            _e(v.get("reason") or ""),
        ])
        classes.append("" if status == "pass" else status)
    return rows, classes, counts


def _verdict_table(verdicts: Sequence[Mapping[str, Any]]) -> tuple[str, dict[str, int]]:
    rows, classes, counts = _verdict_rows(verdicts)
    head = ["status", "design", "limit", "corner", "value", "bound", "margin", "reason"]
    table = _table(head, rows, table_id="verdict-table", numeric=(4, 6), row_classes=classes,
                   caption="Failures first, then errors, then passes. The margin is the distance "
                           "to the bound, negative when the limit fails.")
    return table, counts


def _counts_text(counts: Mapping[str, int]) -> str:
    total = sum(counts.values())
    return (f"{total} check{'s' if total != 1 else ''}: {counts['fail']} FAIL, "
            f"{counts['error']} ERROR, {counts['pass']} pass")


def _verdict_section(verdicts: Sequence[Mapping[str, Any]], heading: str) -> str:
    table, counts = _verdict_table(verdicts)
    if counts["fail"]:
        banner = f'<p class="banner bad">Limits FAIL. {_e(_counts_text(counts))}</p>'
    elif counts["error"]:
        banner = f'<p class="banner warn">Some checks could not be made. {_e(_counts_text(counts))}</p>'
    else:
        banner = f'<p class="banner good">All limits hold. {_e(_counts_text(counts))}</p>'
    return _section("verdicts", heading, banner + "\n" + table)


def _largest_departure(rows: Sequence[Mapping[str, Any]]) -> tuple[str, str]:
    best = None
    for r in rows:
        d = _real(r.get("delta_db"))
        if d is not None and math.isfinite(d) and (best is None or abs(d) > abs(best[0])):
            best = (d, r.get("n"))
    if best is None:
        return "largest departure from ideal", DASH
    return "largest departure from ideal", f"{format_db(best[0])} dB at n = {best[1]}"


def _efficiency_table(efficiency: Mapping[str, Any]) -> str:
    rows = [[_e(n), _e(_percent(e))] for n, e in efficiency.items()]
    return _table(["n", "load power at n / source power"], rows, table_id="efficiency-table",
                  numeric=(0, 1), narrow=True)


def run_report(
    document: Mapping[str, Any],
    *,
    figures: Mapping[str, bytes] = _EMPTY,
    breakdown: Mapping[str, Any] | None = None,
    verdicts: Sequence[Mapping[str, Any]] | None = None,
    caution: str | None = None,
) -> str:
    """The HTML report of one run, as one self-contained document.

    Parameters
    ----------
    document : mapping
        The run document, :meth:`simloop.analyse.RunResult.to_dict` (circuit, title,
        parameters, choices, probe, fundamental_hz, engine, settings, steady_state, metrics,
        harmonics, notes), optionally with ``units`` {parameter: SI unit} and ``caution``.
    figures : mapping of str to bytes
        PNG images by caption (the caption is also the alt text), e.g. from :func:`figure_png`.
    breakdown : mapping, optional
        Effect breakdown, steps x harmonics [dB] (shape: module notes, :func:`breakdown_table`).
    verdicts : sequence of mapping, optional
        Limit verdicts (:meth:`simloop.design.Verdict.as_dict` rows, or rows with ``passed``).
    caution : str, optional
        Shown first, in a block with ``role="alert"``, followed by :data:`CAUTION_POINTS`. When
        None the document's own ``caution`` entry is used, if it has one.

    Returns
    -------
    str
        HTML5 text: inline style, images as ``data:`` URIs, no script, no outside resource.

    Raises
    ------
    InputError
        A figure that is not PNG bytes, or a breakdown of the wrong shape.

    Examples
    --------
    A half-wave output whose 2nd harmonic sits 0.5 dB under the ideal one:

    >>> doc = {"circuit": "hw", "title": "half-wave <demo>", "probe": "v(out)",
    ...        "harmonics": [{"n": 2, "freq_hz": 100.0, "ideal_v": 2.122, "sim_v": 2.003,
    ...                       "delta_db": -0.5}]}
    >>> page = run_report(doc)
    >>> print("half-wave &lt;demo&gt;" in page, "<script" in page, "2.003 V" in page)
    True False True
    """
    doc = document
    caution = caution if caution is not None else doc.get("caution")
    unit = _probe_unit(doc)
    rows = list(doc.get("harmonics") or ())
    metrics = dict(doc.get("metrics") or {})
    steady = dict(doc.get("steady_state") or {})
    engine = doc.get("engine") or {}
    engine_text = (f"{engine.get('name', '')} {engine.get('version', '')}".strip()
                   if isinstance(engine, Mapping) else str(engine)) or DASH
    circuit = str(doc.get("circuit") or "")
    title = str(doc.get("title") or "")

    sub = [f"circuit <code>{_e(circuit or DASH)}</code>",
           f"probe <code>{_e(doc.get('probe') or DASH)}</code>",
           f"fundamental {_e(format_eng(doc.get('fundamental_hz'), 'Hz'))}",
           f"engine {_e(engine_text)}"]
    body: list[str] = []
    converged = steady.get("converged")
    if converged is False:
        body.append('<p class="banner warn" id="not-steady">No periodic steady state was reached: '
                    "the spectrum below is NOT a steady-state one.</p>")

    cards = [(label, format_eng(metrics.get(key), unit), "")
             for key, (label, _) in _WAVE_METRICS.items() if key in ("dc_v", "rms_v", "ripple_v")
             and key in metrics]
    if "thd" in metrics:
        cards.append(("THD", _percent(metrics["thd"]), ""))
    if "conduction_angle_deg" in metrics:
        cards.append(("conduction angle", _degrees(metrics["conduction_angle_deg"]), ""))
    if rows:
        label, value = _largest_departure(rows)
        cards.append((label, value, ""))
    if converged is not None:
        cards.append(("steady state", "reached" if converged else "NOT reached",
                      "good" if converged else "bad"))
    if cards:
        body.append(_section("summary", "At a glance", _cards(cards)))
    if figures:
        body.append(_section("figures", "Figures", _figures(figures)))
    if rows:
        body.append(_section("harmonics", "Harmonics", _harmonic_table(rows, unit)))
    if breakdown is not None:
        body.append(_section("breakdown", "Effect breakdown", breakdown_table(breakdown)))
    if verdicts is not None:
        body.append(_verdict_section(verdicts, "Limit verdicts"))

    units = doc.get("units") or {}
    params = doc.get("parameters") or {}
    param_rows = [[_e(name), _e(format_eng(value, str(units.get(name, "")), digits=6)),
                   _e(_unit_shown(str(units.get(name, ""))) or DASH)]
                  for name, value in params.items()]
    columns = []
    circuit_column = []
    if param_rows:
        circuit_column.append("<h3>Parameters</h3>" + _table(
            ["name", "value", "unit"], param_rows, table_id="parameter-table", numeric=(1,)))
    choices = doc.get("choices") or {}
    if choices:
        circuit_column.append("<h3>Model choices</h3>" + _table(
            ["name", "model"], [[_e(k), f"<code>{_e(v)}</code>"] for k, v in choices.items()],
            table_id="choice-table"))
    if circuit_column:
        columns.append("<div>" + "".join(circuit_column) + "</div>")
    run_pairs = [("circuit", circuit or DASH), ("title", title or DASH),
                 ("probe", str(doc.get("probe") or DASH)),
                 ("fundamental", format_eng(doc.get("fundamental_hz"), "Hz")),
                 ("drive amplitude", format_eng(doc.get("amplitude_v"), "V")),
                 ("ideal counterpart", str(doc.get("ideal_kind") or DASH)),
                 ("estimate", str(doc.get("estimate_kind") or DASH)),
                 ("engine", engine_text)]
    settings = doc.get("settings") or {}
    run_pairs += [(_SETTING_LABELS.get(k, k), _plain(v)) for k, v in settings.items()]
    columns.append("<div><h3>Run and settings</h3>" + _key_values(run_pairs, table_id="run-table")
                   + "</div>")
    if steady:
        pairs = []
        for key, value in steady.items():
            if key == "converged":
                text = DASH if value is None else ("reached" if value else "NOT reached")
            elif key == "tmax_s":
                text = format_eng(value, "s")
            else:
                text = _plain(value)
            pairs.append((_STEADY_LABELS.get(key, key), text))
        columns.append("<div><h3>Steady state</h3>" + _key_values(pairs, table_id="steady-table")
                       + "</div>")
    body.append(_section("circuit", "Circuit and run", f'<div class="columns">{"".join(columns)}</div>'))

    if metrics:
        efficiency = metrics.pop("efficiency", None)
        pairs = [_metric_text(k, v, unit) for k, v in metrics.items()]
        block = f'<div>{_key_values(pairs, table_id="metric-table")}</div>'
        if isinstance(efficiency, Mapping) and efficiency:
            block += (f"<div><h3>Conversion efficiency</h3>{_efficiency_table(efficiency)}</div>")
        block = f'<div class="columns">{block}</div>'
        body.append(_section("metrics", "Waveform figures", block))
    notes = list(doc.get("notes") or ())
    if notes:
        items = "".join(f"<li>{_e(n)}</li>" for n in notes)
        body.append(_section("notes", "Notes", f'<ul class="note-list">{items}</ul>'))

    heading = title or circuit or "simloop run"
    page_title = f"{circuit}: {title}" if circuit and title else heading
    return _page(title=f"{page_title} \u2014 simloop run", kind="simloop run report",
                 heading=heading, sub=sub, body=body, caution=caution)


# ============================================================================ sweep
def _varied_names(points: Sequence[Mapping[str, Any]]) -> list[str]:
    names: dict[str, None] = {}
    for p in points:
        for name in (p.get("varied") or {}):
            names.setdefault(str(name), None)
    return list(names)


def sweep_report(
    outcome: Mapping[str, Any],
    *,
    title: str,
    figures: Mapping[str, bytes] = _EMPTY,
    caution: str | None = None,
    units: Mapping[str, str] | None = None,
) -> str:
    """The HTML report of a sweep: counts, figures and one table row per point.

    Parameters
    ----------
    outcome : mapping
        The sweep document, :meth:`simloop.sweep.SweepOutcome.to_dict` (``points``,
        ``simulated``, ``reused``, ``failed``); each point has ``index``, ``varied``,
        ``status``, ``error``, ``reused`` and ``metrics``.
    title : str
        Heading (the circuit and its title).
    figures : mapping of str to bytes
        PNG images by caption, e.g. :func:`simloop.sweep_plots.sweep_figure` through
        :func:`figure_png`.
    caution : str, optional
        As in :func:`run_report`.
    units : mapping, optional
        SI unit of each varied parameter (``{"rload": "ohm"}``); default ``outcome["units"]``.

    Returns
    -------
    str
        HTML5 text; the points table has the id ``point-table``.

    Examples
    --------
    >>> pts = [{"index": 0, "varied": {"rload": 1000.0}, "status": "ok",
    ...         "metrics": {"dc_v": 4.2, "rms_v": 5.0, "thd": 0.4352}},
    ...        {"index": 1, "varied": {"rload": 10.0}, "status": "failed", "error": "timestep"}]
    >>> page = sweep_report({"points": pts, "simulated": 2, "reused": 0}, title="sweep",
    ...                     units={"rload": "ohm"})
    >>> print("1 kΩ" in page, "43.52 %" in page, "1 failed" in page)
    True True True
    """
    points = list(outcome.get("points") or ())
    units = dict(units if units is not None else (outcome.get("units") or {}))
    names = _varied_names(points)
    failed = outcome.get("failed")
    if failed is None:
        failed = sum(1 for p in points if p.get("status") != "ok")
    head = ["#", *(f"{n} [{_unit_shown(units[n])}]" if _unit_shown(units.get(n)) else n
                   for n in names), "status", "DC", "RMS", "THD", "error"]
    rows, classes = [], []
    for position, p in enumerate(points):
        varied = p.get("varied") or {}
        status = str(p.get("status") or DASH)
        m = p.get("metrics") or {}
        unit = _probe_unit(p)
        status_cell = f'<span class="status-{_e(status)}">{_e(status)}</span>'
        if p.get("reused"):
            status_cell += '<span class="tag">stored</span>'
        rows.append([
            _e(p.get("index", position)),
            *(_e(format_eng(varied.get(n), str(units.get(n, "")), digits=6)
                 if n in varied else DASH) for n in names),
            status_cell,
            _e(format_eng(m.get("dc_v"), unit)),
            _e(format_eng(m.get("rms_v"), unit)),
            _e(_percent(m.get("thd"))),
            _e(p.get("error") or ""),
        ])
        classes.append({"ok": "", "unconverged": "error"}.get(status, "fail"))
    ncols = len(names)
    table = _table(head, rows, table_id="point-table",
                   numeric=(0, *range(1, ncols + 1), ncols + 2, ncols + 3, ncols + 4),
                   row_classes=classes,
                   caption="One row per point of the grid, in grid order; \u201cstored\u201d: "
                           "reused from the results store.")
    counts = [("points", str(len(points)), ""),
              ("simulated", str(outcome.get("simulated", DASH)), ""),
              ("reused from the store", str(outcome.get("reused", DASH)), ""),
              ("failed or unconverged", str(failed), "bad" if failed else "good")]
    body = [_section("summary", "At a glance", _cards(counts))]
    if figures:
        body.append(_section("figures", "Figures", _figures(figures)))
    body.append(_section("points", "Points", table))
    sub = [_e(f"{len(points)} points: {outcome.get('simulated', DASH)} simulated, "
              f"{outcome.get('reused', DASH)} reused, {failed} failed"),
           "varied " + ", ".join(f"<code>{_e(n)}</code>" for n in names) if names else ""]
    return _page(title=f"{title} \u2014 simloop sweep", kind="simloop sweep report",
                 heading=title, sub=[s for s in sub if s], body=body, caution=caution)


# ============================================================================ check
def check_report(
    verdicts: Sequence[Mapping[str, Any]],
    *,
    title: str,
    caution: str | None = None,
) -> str:
    """The HTML report of ``simloop check``: counts and the verdict table, failures first.

    Parameters
    ----------
    verdicts : sequence of mapping
        :meth:`simloop.design.Verdict.as_dict` rows of every design (or rows with ``passed``).
    title : str
        Heading.
    caution : str, optional
        As in :func:`run_report`.

    Returns
    -------
    str
        HTML5 text; the table has the id ``verdict-table``.

    Examples
    --------
    >>> rows = [{"design": "psu", "corner": "rload=50", "limit": "ripple", "unit": "V",
    ...          "value": 1.62, "bound": {"min": None, "max": 1.5}, "margin": -0.12,
    ...          "status": "fail"}]
    >>> page = check_report(rows, title="nightly")
    >>> print("1 FAIL" in page, "\u2264 1.5 V" in page, "-120 mV" in page)
    True True True
    """
    verdicts = list(verdicts)
    _, _, counts = _verdict_rows(verdicts)
    designs = list(dict.fromkeys(str(v.get("design") or DASH) for v in verdicts))
    cards = [("checks", str(len(verdicts)), ""),
             ("FAIL", str(counts["fail"]), "bad" if counts["fail"] else "good"),
             ("ERROR", str(counts["error"]), "bad" if counts["error"] else "good"),
             ("pass", str(counts["pass"]), "")]
    body = [_section("summary", "At a glance", _cards(cards)),
            _verdict_section(verdicts, "Verdicts")]
    sub = [_e(f"{len(designs)} design{'s' if len(designs) != 1 else ''}"), _e(_counts_text(counts))]
    return _page(title=f"{title} \u2014 simloop check", kind="simloop check report", heading=title,
                 sub=sub, body=body, caution=caution)


# ============================================================================ output
def figure_png(fig: Any, *, dpi: float = 110.0) -> bytes:
    """Render a matplotlib Figure to PNG bytes in memory and close it.

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> png = figure_png(Figure(figsize=(2.0, 1.0)), dpi=50)
    >>> print(png[:4] == b"\\x89PNG", int.from_bytes(png[16:20], "big"))
    True 100
    """
    import io

    from .plots import _pyplot

    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    _pyplot().close(fig)
    return buffer.getvalue()


def write_report(path: Path | str, html_text: str) -> None:
    """Write a report to ``path`` atomically (:func:`simloop.files.write_atomic`), UTF-8."""
    write_atomic(Path(path), html_text)
