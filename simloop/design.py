"""Design-variant files: one circuit, its corners and the limits it must meet, checked in CI.

A design file is TOML of our own. It names a circuit, fixes some of its parameters, lists the
corners to simulate and the limits every corner must meet. ``simloop check`` validates the whole
file before anything runs, simulates the corners through the sweep machinery (local pool or Dask,
each point stored, so a re-check after an unrelated change simulates nothing) and gives one
verdict per limit and corner: pass, fail or error.

A complete example::

    title = "5 V rail pre-regulator: half-wave rectifier with reservoir"
    circuit = "half-wave"               # a built-in, or a netlist path relative to this file

    [settings]                          # how to simulate (all optional)
    harmonics = 6                       # highest order N; limits may name h0..hN
    tolerance = 1e-6                    # steady state, as simloop run --tolerance

    [parameters]                        # fixed values: numbers, SPICE strings or model names
    cres = "2200u"
    diode = "sl_schottky"

    [corners]                           # a grid: every combination (first name outermost)
    rload = [50, 100]
    vpk = ["8.1", "9.9"]

    [[limit]]
    metric = "dc_v"
    min = 6.0                           # >= 6 V
    max = "9.5"                         # and <= 9.5 V: a range

    [[limit]]
    name = "ripple before the regulator"
    metric = "ripple_v"
    max = 1.2
    [[limit.override]]                  # other bounds at some corners
    where = { rload = 50 }
    max = 1.5

Keys
----
Top level: ``title`` (default: the circuit's title) and ``description`` (text), ``circuit``
(required), ``[settings]``, ``[parameters]``, ``[corners]``, ``[[corner]]``, ``[[limit]]``. Any
other key is an error.

- ``circuit``: a built-in name (``half-wave``), or, when it contains ``/`` or ends in ``.cir``,
  the path of a netlist relative to the design file (screened as untrusted, as ``simloop run``
  does).
- ``[settings]``: ``harmonics`` (whole number 1..1000, default 10), ``probe``, ``fundamental``
  [Hz], ``amplitude`` [V], ``ideal`` (a waveform kind), ``tolerance`` (default 1e-6),
  ``max_periods`` (default 2000), ``tmax`` [s], ``timeout`` [s] (default ``$SIMLOOP_TIMEOUT`` or
  120), ``resample`` (``spline``/``linear``), ``steady`` (``auto``/``settle``/``shoot``): the
  meanings of the ``simloop run`` options of the same names.
- ``[parameters]``: ``name = value`` for the circuit's parameters (a TOML number or a SPICE
  string such as ``"10u"``, checked against the parameter's range) and model choices
  (``diode = "sl_schottky"``).

Corners
-------
``[corners]`` is a grid: each key a parameter or choice, each value a non-empty list; every
combination is one corner. ``[[corner]]`` is a list of named corners, each a table with an
optional ``name`` and the values it sets (``name = "hot", rsrc = 0.8, diode = "sl_fast"``).
Given both, the corners are the product: each listed corner at every grid point. Given neither,
there is one corner, ``nominal``. A name may not be both fixed in ``[parameters]`` and varied
by a corner, nor set by both a listed corner and the grid. A corner is shown by its name and grid
values (``hot rload=50 vpk=9.9``).

Limits and metrics
------------------
Each ``[[limit]]`` has ``metric``, a bound, and optionally ``name`` (the label shown and used in
JUnit; default: the metric's name), ``carrier`` (dBc metrics only) and ``[[limit.override]]``.
Metrics are read from the steady-state period of the circuit's probe:

- ``dc_v`` [V]: mean A0
- ``rms_v`` [V]: RMS, DC included
- ``ripple_v`` [V]: peak-to-peak excursion over one period
- ``peak_v``, ``trough_v`` [V]: largest and smallest value over one period
- ``thd`` [1]: sqrt(sum_{n=2..N} A_n^2) / A_1, a ratio (0.05 = 5 %)
- ``conduction_angle_deg`` [deg]: diode conduction angle (circuits with conduction probes)
- ``power_factor``, ``displacement_factor`` [1] and ``mains_margin_a`` [A] (the smallest margin of
  the line current's orders under their IEC 61000-3-2 limits, as reproduced in secondary
  sources): need ``[settings] mains_class = "A"`` or ``"D"`` (and ``mains_power`` [W] for a
  given Class D power; default: from the spectra), and ``harmonics = 40`` to cover the standard
- ``hN_v`` [V]: peak amplitude A_N (``h0_v`` is the signed mean A0)
- ``hN_dbv`` [dBV]: 20 log10(A_N / sqrt 2), re 1 V rms; N = 0: 20 log10 |A0|
- ``hN_dbc`` [dBc]: 20 log10(A_N / A_c), carrier c = the limit's ``carrier`` (default 1)
- ``hN_delta_db`` [dB]: 20 log10(A_N / ideal A_N), the deviation from the ideal closed form
- ``hN_efficiency`` [1]: load power at order N over average source power (``h0``: DC power,
  the rectification efficiency)

N runs from 0 to ``[settings] harmonics``. Ratios (``thd``, efficiencies) are fractions, not
percent.

Bounds
------
``min = X`` means value >= X, ``max = X`` value <= X, both a range (min <= max). X is a TOML
number or a SPICE string (``"4.75"``, ``"10m"``). Bounds that no value can meet are refused:
a negative bound on an amplitude, RMS, ripple, THD or efficiency, an efficiency bound above 1.

The margin is ``value - min`` for a lower bound and ``max - value`` for an upper bound; for a
range, the smaller of the two. A limit holds when its margin is >= 0. The margin is in the
metric's unit (dB for the three dB metrics).

Per-corner overrides
--------------------
``[[limit.override]]`` after a ``[[limit]]`` belongs to it. It selects corners by ``where =
{ name = value, ... }`` (every named value equal, numbers compared to 1e-9 relative; any
parameter or choice, at its value at that corner) and/or ``corner = "name"`` (a ``[[corner]]``
name), and then gives new ``min`` and/or ``max`` (a bound not given stays the limit's) or
``skip = true`` (the limit does not apply there). Overrides apply in file order, later ones on
top of earlier ones. An override that matches no corner is an error (a typo, most likely).

Verdicts
--------
Each limit at each corner is ``pass``, ``fail`` or ``error``. It is an error when the corner's
simulation failed or found no periodic steady state, or when the metric is not available at that
corner: ``thd`` and ``hN_dbc`` of an output without a carrier (a full-wave rectifier has no
fundamental: A_1 below 1e-6 of the largest component), ``hN_delta_db`` where the ideal harmonic is
zero, an efficiency the run did not compute. ``simloop check`` exits 2 if any verdict is an
error, otherwise 1 if any limit fails, otherwise 0. Verdicts are listed failures first, then
errors, then passes, each group in limit order, then corner order.

Runs
----
The corners of a design are one :func:`simloop.sweep.run_sweep` grid: local engine workers or a
Dask cluster, every finished point committed to the results store under a key made of the
circuit's content hash, the final parameter values and choices, the run settings and the engine
version. Limits, names and titles are not part of the key: editing them, or adding a design
whose corners were already simulated, re-judges from the store without simulating. A failed
point is stored but never reused (a re-check simulates it again).

Errors in the file
------------------
Every problem is a :class:`DesignError` whose message reads ``FILE:LINE: KEY: what is wrong and
how to fix it``. KEY is the dotted key path with 1-based indices for arrays and arrays of tables
(``limit[2].override[1].min``, ``corners.rload[3]``). tomllib gives no line numbers, so
:class:`SourceMap` finds them in the raw text: exact for top-level keys, keys in ``[tables]``,
keys in the k-th ``[[array-of-tables]]`` (nested ones too), dotted keys, keys in inline tables and
the elements of arrays; a key that is missing is reported at the line of the table that should
hold it (line 1 for the top level). TOML syntax errors keep tomllib's own line and column.
"""

from __future__ import annotations

import bisect
import math
import os
import re
import time
import tomllib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

from .errors import InputError
from .units import format_number, parse_number

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .analyse import RunSettings
    from .netlist import CircuitTemplate

__all__ = [
    "CARRIER_FLOOR",
    "SCALAR_METRICS",
    "HARMONIC_FORMS",
    "Bound",
    "Corner",
    "Design",
    "DesignError",
    "DesignOutcome",
    "Limit",
    "Metric",
    "Override",
    "SourceMap",
    "Verdict",
    "check_designs",
    "exit_status",
    "judge",
    "key_label",
    "load_design",
    "metric_value",
    "parse_metric",
]

KeyPath = tuple[str | int, ...]
VerdictStatus = Literal["pass", "fail", "error"]

#: A carrier (A_1, or A_c of ``carrier``) counts as absent below this fraction of the largest
#: component, the test :mod:`simloop.analyse` applies before it reports a THD.
CARRIER_FLOOR = 1e-6

#: Metrics that are one number per corner: name -> (unit, meaning, never negative).
SCALAR_METRICS: dict[str, tuple[str, str, bool]] = {
    "dc_v": ("V", "mean A0", False),
    "rms_v": ("V", "RMS, DC included", True),
    "ripple_v": ("V", "peak-to-peak excursion over one period", True),
    "peak_v": ("V", "largest value over one period", False),
    "trough_v": ("V", "smallest value over one period", False),
    "thd": ("1", "sqrt(sum n=2..N A_n^2) / A_1, a ratio", True),
    "conduction_angle_deg": ("deg", "diode conduction angle", True),
    "power_factor": ("1", "P / (V_rms I_rms) at the power source (needs [settings] mains_class)", True),
    "displacement_factor": ("1", "cos of the fundamental's angle (needs [settings] mains_class)", False),
    "mains_margin_a": ("A", "smallest margin of the line current under IEC 61000-3-2 limits "
                            "(needs [settings] mains_class)", False),
}

#: Per-harmonic forms ``hN_<form>``: form -> (unit, meaning).
HARMONIC_FORMS: dict[str, tuple[str, str]] = {
    "v": ("V", "peak amplitude A_N"),
    "dbv": ("dBV", "20 log10(A_N / sqrt 2), re 1 V rms"),
    "dbc": ("dBc", "20 log10(A_N / A_carrier)"),
    "delta_db": ("dB", "20 log10(A_N / ideal A_N)"),
    "efficiency": ("1", "load power at N / source power"),
}

_HARMONIC = re.compile(r"h(\d{1,4})_(v|dbv|dbc|delta_db|efficiency)")

#: Largest design file read [bytes] (a real one is a few kB).
MAX_DESIGN_BYTES = 1_000_000

_TOP_KEYS = ("title", "description", "circuit", "settings", "parameters", "corners", "corner",
             "limit")
_SETTINGS_KEYS = ("harmonics", "probe", "fundamental", "amplitude", "ideal", "tolerance",
                  "max_periods", "tmax", "timeout", "resample", "steady", "mains_class",
                  "mains_power")
_LIMIT_KEYS = ("metric", "min", "max", "name", "carrier", "override")
_OVERRIDE_KEYS = ("where", "corner", "min", "max", "skip")


# ============================================================================ errors and lines
class DesignError(InputError):
    """A problem in a design file; the message reads ``FILE:LINE: KEY: problem and fix``.

    Parameters
    ----------
    file : str
        The design file as named by the user.
    line : int
        1-based line of the key (or of the table that should hold a missing key); 0 when the
        file itself cannot be read (the message then names no line).
    key : str
        The key path, as :func:`key_label` writes it.
    problem : str
        What is wrong and how to fix it.
    """

    def __init__(self, file: str, line: int, key: str, problem: str) -> None:
        where = f"{file}:{line}" if line > 0 else file
        super().__init__(f"{where}: {key}: {problem}" if key else f"{where}: {problem}")
        self.file = file
        self.line = line
        self.key = key
        self.problem = problem

    def __reduce__(self):
        return (DesignError, (self.file, self.line, self.key, self.problem))


def key_label(path: Sequence[str | int]) -> str:
    """Dotted key path with 1-based indices: ``("limit", 1, "min")`` -> ``limit[2].min``.

    Examples
    --------
    >>> key_label(("limit", 1, "override", 0, "where", "rload")), key_label(("circuit",))
    ('limit[2].override[1].where.rload', 'circuit')
    """
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            text = str(part)
            if not re.fullmatch(r"[A-Za-z0-9_-]+", text):
                text = '"' + text.replace('"', '\\"') + '"'
            out += ("." if out else "") + text
    return out


class SourceMap:
    """Line numbers of the keys of a TOML text (which tomllib has already accepted).

    Parameters
    ----------
    text : str
        The file's text.

    Notes
    -----
    One pass over the text, tracking headers (``[a.b]``, ``[[a.b]]`` with a counter per array of
    tables, so ``[[limit.override]]`` lands in the last ``[[limit]]``), dotted keys, strings of
    all four kinds (so key-like text inside a multi-line string is skipped), arrays (elements
    indexed) and inline tables (their keys recorded). Paths use 0-based indices.

    Examples
    --------
    >>> m = SourceMap('a = 1\\n[[limit]]\\nmetric = "dc_v"\\n[[limit]]\\n'
    ...               'metric = "thd"\\n[[limit.override]]\\nwhere = { rload = 50 }\\n')
    >>> m.line(("limit", 1, "metric")), m.line(("limit", 1, "override", 0, "where", "rload"))
    (5, 7)
    """

    _BARE = re.compile(r"[A-Za-z0-9_-]+")

    def __init__(self, text: str) -> None:
        self._text = text
        self._pos = 0
        self._starts = [0] + [m.end() for m in re.finditer("\n", text)]
        self._lines: dict[KeyPath, int] = {}
        self._arrays: dict[KeyPath, int] = {}
        self._scan()

    # -------------------------------------------------------------- queries
    def line(self, path: Sequence[str | int]) -> int:
        """Line of the key at ``path``, or of its nearest recorded ancestor (1 for none)."""
        p = tuple(path)
        while p:
            if p in self._lines:
                return self._lines[p]
            p = p[:-1]
        return 1

    def exact(self, path: Sequence[str | int]) -> int | None:
        """Line of exactly this key, or None if the text does not hold it."""
        return self._lines.get(tuple(path))

    # -------------------------------------------------------------- scanner
    def _lineno(self, pos: int) -> int:
        return bisect.bisect_right(self._starts, pos)

    def _peek(self, k: int = 1) -> str:
        return self._text[self._pos:self._pos + k]

    def _record(self, path: KeyPath, pos: int) -> None:
        self._lines.setdefault(path, self._lineno(pos))

    def _skip_space(self) -> None:
        t = self._text
        while self._pos < len(t) and t[self._pos] in " \t":
            self._pos += 1

    def _skip_blank(self) -> None:
        """Spaces, newlines and comments."""
        t = self._text
        while self._pos < len(t):
            c = t[self._pos]
            if c in " \t\r\n":
                self._pos += 1
            elif c == "#":
                end = t.find("\n", self._pos)
                self._pos = len(t) if end < 0 else end
            else:
                break

    def _string(self) -> str:
        t = self._text
        quote = t[self._pos]
        if t.startswith(quote * 3, self._pos):
            end = t.find(quote * 3, self._pos + 3)
            while quote == '"' and end > 0 and _escaped(t, end):
                end = t.find(quote * 3, end + 1)
            end = len(t) if end < 0 else end + 3
            while end < len(t) and t[end] == quote:  # up to two quotes may close the content
                end += 1
            raw, self._pos = t[self._pos:end], end
            return raw
        i = self._pos + 1
        while i < len(t) and t[i] != quote and t[i] != "\n":
            i += 2 if (quote == '"' and t[i] == "\\") else 1
        raw, self._pos = t[self._pos + 1:i], min(i + 1, len(t))
        return raw

    def _key(self) -> list[str]:
        parts: list[str] = []
        while True:
            self._skip_space()
            c = self._peek()
            if c in ('"', "'"):
                parts.append(self._string())
            else:
                m = self._BARE.match(self._text, self._pos)
                if m is None:
                    return parts
                parts.append(m.group())
                self._pos = m.end()
            self._skip_space()
            if self._peek() != ".":
                return parts
            self._pos += 1

    def _value(self, path: KeyPath) -> None:
        c = self._peek()
        if c in ('"', "'"):
            self._string()
        elif c == "[":
            self._pos += 1
            index = 0
            while True:
                self._skip_blank()
                if self._pos >= len(self._text) or self._peek() == "]":
                    self._pos += 1
                    return
                self._record(path + (index,), self._pos)
                self._value(path + (index,))
                index += 1
                self._skip_blank()
                if self._peek() == ",":
                    self._pos += 1
        elif c == "{":
            self._pos += 1
            while True:
                self._skip_blank()
                if self._pos >= len(self._text) or self._peek() == "}":
                    self._pos += 1
                    return
                start = self._pos
                keys = self._key()
                self._record_key(path, keys, start)
                self._skip_space()
                self._pos += 1  # "="
                self._skip_space()
                self._value(path + tuple(keys))
                self._skip_blank()
                if self._peek() == ",":
                    self._pos += 1
        else:
            m = re.compile(r"[^,\]}\n#]*").match(self._text, self._pos)
            self._pos = m.end() if m else self._pos + 1

    def _record_key(self, base: KeyPath, keys: Sequence[str], pos: int) -> None:
        for i in range(1, len(keys) + 1):
            self._record(base + tuple(keys[:i]), pos)

    def _resolve(self, keys: Sequence[str], *, array: bool) -> KeyPath:
        path: KeyPath = ()
        for i, key in enumerate(keys):
            path = path + (key,)
            if array and i == len(keys) - 1:
                count = self._arrays.get(path, 0)
                self._arrays[path] = count + 1
                path = path + (count,)
            elif path in self._arrays:
                path = path + (self._arrays[path] - 1,)
        return path

    def _scan(self) -> None:
        current: KeyPath = ()
        t = self._text
        while True:
            self._skip_blank()
            if self._pos >= len(t):
                return
            start = self._pos
            if t.startswith("[[", self._pos):
                self._pos += 2
                keys = self._key()
                current = self._resolve(keys, array=True)
                self._record(current[:-1], start)
                self._record(current, start)
                self._pos = t.find("]]", self._pos) + 2
            elif t[self._pos] == "[":
                self._pos += 1
                keys = self._key()
                current = self._resolve(keys, array=False)
                self._record(current, start)
                self._pos = t.find("]", self._pos) + 1
            else:
                keys = self._key()
                if not keys:  # cannot happen in valid TOML; do not loop forever
                    self._pos += 1
                    continue
                self._record_key(current, keys, start)
                self._skip_space()
                self._pos += 1  # "="
                self._skip_space()
                self._value(current + tuple(keys))
            end = t.find("\n", self._pos)  # rest of the line: at most a comment
            if end < 0:
                return
            self._pos = max(self._pos, end)


def _escaped(text: str, index: int) -> bool:
    """True when the character at ``index`` is preceded by an odd number of backslashes."""
    count = 0
    while index - count - 1 >= 0 and text[index - count - 1] == "\\":
        count += 1
    return count % 2 == 1


# ============================================================================ metrics
@dataclass(frozen=True, slots=True)
class Metric:
    """A quantity a limit bounds.

    Parameters
    ----------
    name : str
        As written in the file (``"h2_dbc"``).
    form : str
        ``"scalar"`` or a key of :data:`HARMONIC_FORMS`.
    order : int or None
        Harmonic order N of ``hN_*`` metrics.
    carrier : int
        Reference order of dBc metrics (default 1, the fundamental).
    """

    name: str
    form: str
    order: int | None = None
    carrier: int = 1

    @property
    def unit(self) -> str:
        """Unit of the value (``"1"`` for ratios)."""
        if self.form == "scalar":
            return SCALAR_METRICS[self.name][0]
        return HARMONIC_FORMS[self.form][0]

    @property
    def margin_unit(self) -> str:
        """Unit of a margin: a difference of dB levels is in dB."""
        return "dB" if self.unit in ("dBV", "dBc") else self.unit

    @property
    def never_negative(self) -> bool:
        if self.form == "scalar":
            return SCALAR_METRICS[self.name][2]
        return self.form == "efficiency" or (self.form == "v" and self.order != 0)


def parse_metric(name: str) -> Metric:
    """The metric called ``name``.

    Raises
    ------
    InputError
        For any other name, listing the known ones.

    Examples
    --------
    >>> m = parse_metric("h2_dbc")
    >>> m.form, m.order, m.unit, m.margin_unit
    ('dbc', 2, 'dBc', 'dB')
    """
    text = str(name).strip()
    if text in SCALAR_METRICS:
        return Metric(text, "scalar")
    m = _HARMONIC.fullmatch(text)
    if m:
        return Metric(text, m.group(2), int(m.group(1)))
    known = ", ".join([*SCALAR_METRICS, *(f"hN_{f}" for f in HARMONIC_FORMS)])
    raise InputError(f"{text!r} is not a metric; use one of {known} (N a harmonic order, e.g. h2_dbc)")


def _rows(point: Mapping[str, Any]) -> dict[int, Mapping[str, Any]]:
    return {int(r["n"]): r for r in (point.get("harmonics") or ())}


def metric_value(metric: Metric, point: Mapping[str, Any]) -> tuple[float | None, str]:
    """The value of ``metric`` at one simulated point, or None and why it is not available.

    Parameters
    ----------
    metric : Metric
    point : mapping
        A sweep point (:func:`simloop.sweep.simulate_point`): ``metrics`` and ``harmonics`` rows
        with ``n``, ``sim_v``, ``delta_db``.

    Returns
    -------
    (float or None, str)
        The value in the metric's unit, and an empty reason; or None and the reason.

    Notes
    -----
    dBV = 20 log10(A_N / sqrt 2) for N >= 1 (rms of a sinusoid of peak A_N, re 1 V), 20 log10 |A0|
    for N = 0; dBc = 20 log10(A_N / A_c), undefined when A_c is below :data:`CARRIER_FLOOR` of the
    largest component. A zero amplitude gives -inf dB.

    Examples
    --------
    A fundamental of 2 V peak and a second harmonic of 0.2 V:

    >>> point = {"metrics": {}, "harmonics": [{"n": 0, "sim_v": 1.0}, {"n": 1, "sim_v": 2.0},
    ...                                        {"n": 2, "sim_v": 0.2}]}
    >>> print(round(metric_value(parse_metric("h1_dbv"), point)[0], 4),
    ...       round(metric_value(parse_metric("h2_dbc"), point)[0], 4))
    3.0103 -20.0
    """
    metrics = point.get("metrics") or {}
    if metric.form == "scalar" and metric.name == "mains_margin_a":
        mains = metrics.get("mains")
        if not mains:
            return None, "not available: set [settings] mains_class = \"A\" or \"D\""
        margins = [row["margin_a"] for row in mains["orders"] if row["limit_a_rms"] is not None]
        return _finite(min(margins), metric.name) if margins else (None, "no limited orders")
    if metric.form == "scalar":
        value = metrics.get(metric.name)
        if value is None:
            if metric.name == "thd":
                return None, ("not available: the output has no fundamental (A_1 below 1e-6 of "
                              "the largest component), so THD re the fundamental is undefined")
            return None, f"not available: this run reports no {metric.name}"
        return _finite(value, metric.name)
    n = int(metric.order or 0)
    if metric.form == "efficiency":
        eff = metrics.get("efficiency")
        if not eff or str(n) not in eff or eff[str(n)] is None:
            return None, ("not available: no conversion efficiency (the circuit names no power "
                          "source or load, the probe is not the default, or no power flowed)")
        return _finite(eff[str(n)], metric.name)
    rows = _rows(point)
    if n not in rows:
        return None, f"not available: the run holds no harmonic {n}"
    row = rows[n]
    if metric.form == "delta_db":
        delta = row.get("delta_db")
        if delta is None:
            return None, (f"not available: the ideal harmonic {n} is zero or there is no ideal "
                          "counterpart, so its deviation in dB is undefined")
        return _finite(delta, metric.name)
    amplitude = float(row["sim_v"])
    if metric.form == "v":
        return _finite(amplitude, metric.name)
    if metric.form == "dbv":
        level = abs(amplitude) if n == 0 else abs(amplitude) / math.sqrt(2.0)
        return (-math.inf if level == 0.0 else 20.0 * math.log10(level)), ""
    # dbc
    if metric.carrier not in rows:
        return None, f"not available: the run holds no harmonic {metric.carrier}"
    carrier = abs(float(rows[metric.carrier]["sim_v"]))
    largest = max(abs(float(r["sim_v"])) for r in rows.values())
    if not carrier > CARRIER_FLOOR * largest:
        which = "fundamental" if metric.carrier == 1 else f"carrier h{metric.carrier}"
        return None, (f"not available: the {which} is absent (below 1e-6 of the largest "
                      "component); give the limit a carrier = ORDER that is present")
    return (-math.inf if amplitude == 0.0 else 20.0 * math.log10(abs(amplitude) / carrier)), ""


def _finite(value: Any, name: str) -> tuple[float | None, str]:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None, f"not available: {name} is {value!r}, not a number"
    if math.isnan(number):
        return None, f"not available: {name} is NaN"
    return number, ""


# ============================================================================ bounds, limits
@dataclass(frozen=True, slots=True)
class Bound:
    """``min <= value <= max``; either side may be open (None).

    Examples
    --------
    >>> b = Bound(min=4.75, max=5.25)
    >>> print(round(b.margin(5.0), 6), round(b.margin(5.4), 6), b.text("V"))
    0.25 -0.15 4.75 .. 5.25 V
    """

    min: float | None = None
    max: float | None = None

    def margin(self, value: float) -> float:
        """``value - min`` (lower bound), ``max - value`` (upper bound), the smaller for a range."""
        sides = []
        if self.min is not None:
            sides.append(value - self.min)
        if self.max is not None:
            sides.append(self.max - value)
        return min(sides)

    def text(self, unit: str = "") -> str:
        """``>= 4.75 V``, ``<= -14 dBc``, ``4.75 .. 5.25 V``."""
        u = "" if unit in ("", "1") else f" {unit}"
        if self.min is not None and self.max is not None:
            return f"{self.min:.6g} .. {self.max:.6g}{u}"
        if self.min is not None:
            return f">= {self.min:.6g}{u}"
        return f"<= {self.max:.6g}{u}"

    def as_dict(self) -> dict[str, float | None]:
        return {"min": self.min, "max": self.max}


@dataclass(frozen=True, slots=True)
class Corner:
    """One corner of a design.

    Parameters
    ----------
    name : str
        As shown (``"hot rload=50"``; ``"nominal"`` for a design without corners).
    entry : str or None
        The ``[[corner]]`` name it comes from.
    values : mapping
        What the corner sets (numbers for parameters, model names for choices).
    full : mapping
        Every parameter and choice at this corner: defaults, ``[parameters]``, then ``values``.
    """

    name: str
    entry: str | None
    values: Mapping[str, float | str]
    full: Mapping[str, float | str]


@dataclass(frozen=True, slots=True)
class Override:
    """Other bounds of a limit at the corners it selects (see the module notes)."""

    where: Mapping[str, float | str]
    corner: str | None
    min: float | None
    max: float | None
    skip: bool
    line: int

    def matches(self, corner: Corner) -> bool:
        if self.corner is not None and corner.entry != self.corner:
            return False
        return all(_same(corner.full.get(k), v) for k, v in self.where.items())


def _same(a: float | str | None, b: float | str) -> bool:
    if isinstance(a, str) or isinstance(b, str) or a is None:
        return a == b
    return math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=0.0)


@dataclass(frozen=True, slots=True)
class Limit:
    """A metric with a bound, as one ``[[limit]]`` of a design file."""

    label: str
    metric: Metric
    bound: Bound
    overrides: tuple[Override, ...] = ()
    line: int = 1

    def bound_at(self, corner: Corner) -> Bound | None:
        """The bound at ``corner`` after the overrides; None where one skips the limit."""
        lo, hi = self.bound.min, self.bound.max
        skipped = False
        for ov in self.overrides:
            if not ov.matches(corner):
                continue
            skipped = ov.skip
            if ov.min is not None:
                lo = ov.min
            if ov.max is not None:
                hi = ov.max
        return None if skipped else Bound(lo, hi)


@dataclass(frozen=True, slots=True)
class Design:
    """A validated design file, ready to simulate.

    Parameters
    ----------
    file : str
        The file as named by the user.
    name : str
        Its stem (the JUnit test suite name).
    title : str
    template : CircuitTemplate
    fixed_values, fixed_choices : mapping
        ``[parameters]``.
    corners : tuple of Corner
    limits : tuple of Limit
    settings : simloop.analyse.RunSettings
    """

    file: str
    name: str
    title: str
    template: CircuitTemplate
    fixed_values: Mapping[str, float]
    fixed_choices: Mapping[str, str]
    corners: tuple[Corner, ...]
    limits: tuple[Limit, ...]
    settings: RunSettings


# ============================================================================ loading
class _Reader:
    """Validation helpers bound to one file: every error names file, line and key."""

    def __init__(self, file: str, source: SourceMap) -> None:
        self.file = file
        self.source = source

    def fail(self, path: KeyPath, problem: str) -> DesignError:
        return DesignError(self.file, self.source.line(path), key_label(path), problem)

    def table(self, data: Any, path: KeyPath, known: Sequence[str] | None) -> dict[str, Any]:
        if not isinstance(data, dict):
            raise self.fail(path, f"must be a table, got {_kind(data)}")
        if known is not None:
            for key in data:
                if key not in known:
                    raise self.fail(path + (key,), f"unknown key {key!r}; known keys here: "
                                                   f"{', '.join(known)}")
        return data

    def text(self, data: Mapping[str, Any], key: str, path: KeyPath, *, required: bool = False) -> str | None:
        if key not in data:
            if required:
                hint = {"circuit": "; name a built-in circuit or a netlist path, e.g. "
                                   "circuit = \"half-wave\"",
                        "metric": "; e.g. metric = \"dc_v\""}.get(key, "")
                raise self.fail(path, f"missing key {key!r}{hint}")
            return None
        value = data[key]
        if not isinstance(value, str) or not value.strip():
            raise self.fail(path + (key,), f"must be a non-empty string, got {_kind(value)}")
        return value.strip()

    def number(self, value: Any, path: KeyPath) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float, str)):
            raise self.fail(path, f"must be a number (TOML number or SPICE string such as "
                                  f"\"4.7k\"), got {_kind(value)}")
        if isinstance(value, str):
            try:
                return parse_number(value, what="value")
            except InputError as exc:
                raise self.fail(path, str(exc).removeprefix("value: ")) from None
        number = float(value)
        if not math.isfinite(number):
            raise self.fail(path, f"{value!r} is not a finite number")
        return number

    def whole(self, value: Any, path: KeyPath, low: int, high: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
            raise self.fail(path, f"must be a whole number {low}..{high}, got {value!r}")
        return value


def _kind(value: Any) -> str:
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array" if value else "an empty array"
    if isinstance(value, str):
        return f"the string {value!r}"
    return f"{type(value).__name__} {value!r}"


def load_design(path: str | Path) -> Design:
    """Read and fully validate one design file (no simulation).

    Parameters
    ----------
    path : str or Path
        The design file; a netlist named in it is found relative to its folder.

    Returns
    -------
    Design

    Raises
    ------
    DesignError
        For every problem: not TOML, unknown keys, unknown or unavailable metrics, bad bounds,
        unknown parameters or values out of range, corners and overrides that select nothing,
        missing netlists; the message names the file, the line and the key.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "d.toml").write_text('circuit = "half-wave"\\n[corners]\\n'
    ...      'rload = [50, 100]\\n[[limit]]\\nmetric = "dc_v"\\nmin = "2.5"\\n')
    >>> d = load_design(folder / "d.toml")
    >>> [c.name for c in d.corners], d.limits[0].bound.text("V")
    (['rload=50', 'rload=100'], '>= 2.5 V')
    """
    from .netlist import load_circuit

    file = str(path)
    design_path = Path(path)
    try:
        raw = design_path.read_bytes()
    except FileNotFoundError:
        raise DesignError(file, 0, "", "no such design file; check the path") from None
    except OSError as exc:
        raise DesignError(file, 0, "", f"cannot read the design file: {exc.strerror}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DesignError(file, line, "", "not UTF-8 text; save the file as UTF-8") from None
    if len(raw) > MAX_DESIGN_BYTES:
        raise DesignError(file, 0, "", f"the design file is larger than the {MAX_DESIGN_BYTES} "
                                       f"bytes simloop reads ({len(raw)}); split it into several files")
    try:
        data = tomllib.loads(text)
    except RecursionError:
        raise DesignError(file, 1, "", "tables nested too deeply to read; flatten the file") from None
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column (\d+)\)", str(exc))
        line = int(m.group(1)) if m else 1
        message = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        col = f" at column {m.group(2)}" if m else ""
        raise DesignError(file, line, "", f"not valid TOML: {message}{col}; fix the syntax") from None
    r = _Reader(file, SourceMap(text))
    r.table(data, (), _TOP_KEYS)

    title = r.text(data, "title", ()) or ""
    r.text(data, "description", ())
    circuit_ref = r.text(data, "circuit", (), required=True)
    try:
        if "/" in circuit_ref or "\\" in circuit_ref or circuit_ref.lower().endswith(".cir"):
            netlist = (design_path.parent / circuit_ref).resolve()
            folder = design_path.parent.resolve()
            if not netlist.is_relative_to(folder):
                raise r.fail(("circuit",), f"netlist {circuit_ref!r} lies outside the design "
                                           "file's folder; keep designs and their netlists "
                                           "together (a built-in name needs no path)")
            if not netlist.is_file():
                raise r.fail(("circuit",), f"netlist {circuit_ref!r} not found (looked for "
                                           f"{netlist}); paths are relative to the design file")
            template = load_circuit(netlist)
        else:
            template = load_circuit(circuit_ref)
    except DesignError:
        raise
    except InputError as exc:
        raise r.fail(("circuit",), str(exc)) from None

    settings = _read_settings(r, data.get("settings", {}), template)

    fixed_values: dict[str, float] = {}
    fixed_choices: dict[str, str] = {}
    for key, value in r.table(data.get("parameters", {}), ("parameters",), None).items():
        name, checked = _circuit_value(r, template, key, value, ("parameters", key))
        (fixed_choices if isinstance(checked, str) else fixed_values)[name] = checked  # type: ignore[index]

    corners = _read_corners(r, data, template, fixed_values, fixed_choices)
    limits = _read_limits(r, data.get("limit", []), template, settings, corners)
    return Design(file=file, name=design_path.stem, title=title or template.title,
                  template=template, fixed_values=fixed_values, fixed_choices=fixed_choices,
                  corners=corners, limits=limits, settings=settings)


def _read_settings(r: _Reader, raw: Any, template: CircuitTemplate) -> RunSettings:
    from .analyse import RunSettings
    from .steady import SteadySettings
    from .vocab import RESAMPLE_METHODS, STEADY_METHODS, WAVEFORM_KINDS

    base: KeyPath = ("settings",)
    s = r.table(raw, base, _SETTINGS_KEYS)
    harmonics = r.whole(s["harmonics"], base + ("harmonics",), 1, 1000) if "harmonics" in s else 10
    max_periods = (r.whole(s["max_periods"], base + ("max_periods",), 12, 10**7)
                   if "max_periods" in s else 2000)
    steady_kw: dict[str, Any] = {"max_periods": max_periods}
    for key in ("tolerance", "tmax", "timeout"):
        if key in s:
            value = r.number(s[key], base + (key,))
            if not value > 0:
                raise r.fail(base + (key,), f"must be > 0, got {value:g}")
            steady_kw[key] = value
    if "timeout" not in steady_kw:
        env = os.environ.get("SIMLOOP_TIMEOUT", "120")
        try:
            steady_kw["timeout"] = parse_number(env, what="SIMLOOP_TIMEOUT")
        except InputError:
            raise r.fail(base, f"the environment variable SIMLOOP_TIMEOUT={env!r} is not a "
                               "number of seconds; fix it or set [settings] timeout") from None
    run_kw: dict[str, Any] = {"harmonics": harmonics}
    for key, allowed, target, into in (("resample", RESAMPLE_METHODS, "method", run_kw),
                                       ("ideal", WAVEFORM_KINDS, "ideal_kind", run_kw),
                                       ("steady", STEADY_METHODS, "method", steady_kw)):
        if key in s:
            value = r.text(s, key, base)
            if value not in allowed:
                raise r.fail(base + (key,), f"{value!r} is not one of {', '.join(allowed)}")
            into[target] = value
    for key, target in (("fundamental", "fundamental_hz"), ("amplitude", "amplitude")):
        if key in s:
            value = r.number(s[key], base + (key,))
            if not value > 0:
                raise r.fail(base + (key,), f"must be > 0, got {value:g}")
            run_kw[target] = value
    if "mains_class" in s:
        value = r.text(s, "mains_class", base)
        if value not in ("A", "D"):
            raise r.fail(base + ("mains_class",), f"{value!r} is not one of A, D")
        run_kw["mains_class"] = value
    if "mains_power" in s:
        value = r.number(s["mains_power"], base + ("mains_power",))
        if not value > 0:
            raise r.fail(base + ("mains_power",), f"must be > 0, got {value:g}")
        run_kw["mains_power_w"] = value
    if "probe" in s:
        probe = r.text(s, "probe", base)
        try:
            template.probe(probe)
        except InputError as exc:
            raise r.fail(base + ("probe",), str(exc)) from None
        run_kw["probe"] = probe
    try:
        steady = SteadySettings(**steady_kw)
        return RunSettings(steady=steady, **run_kw)
    except InputError as exc:
        raise r.fail(base, str(exc)) from None


def _circuit_value(r: _Reader, template, key: str, value: Any, path: KeyPath) -> tuple[str, float | str]:
    """Check ``key = value`` against the circuit: a parameter (number in range) or a choice."""
    name = str(key).lower()
    if name in template.choices:
        choice = template.choices[name]
        if not isinstance(value, str) or value.strip().lower() not in choice.allowed:
            raise r.fail(path, f"{_kind(value)} is not an allowed model of choice {name}; "
                               f"choose from {', '.join(choice.allowed)}")
        return name, value.strip().lower()
    if name not in template.parameters:
        known = ", ".join([*template.parameters, *template.choices])
        raise r.fail(path, f"{template.name} has no parameter or choice {key!r}; known: {known}")
    number = r.number(value, path)
    try:
        return name, template.parameters[name].check(number, what=name)
    except InputError as exc:
        raise r.fail(path, str(exc)) from None


def _show(value: float | str) -> str:
    return value if isinstance(value, str) else format_number(float(value))


def _read_corners(r: _Reader, data: Mapping[str, Any], template, fixed_values, fixed_choices
                  ) -> tuple[Corner, ...]:
    import itertools

    fixed = {**fixed_values, **fixed_choices}
    axes: list[tuple[str, list[float | str]]] = []
    grid = r.table(data.get("corners", {}), ("corners",), None)
    for key, values in grid.items():
        path: KeyPath = ("corners", key)
        if not isinstance(values, list) or not values:
            raise r.fail(path, f"must be a non-empty array of values, e.g. {key} = [50, 100], got "
                               f"{_kind(values)}")
        checked = [_circuit_value(r, template, key, v, path + (i,)) for i, v in enumerate(values)]
        name = checked[0][0]
        if name in fixed:
            raise r.fail(path, f"{name} is fixed in [parameters] and varied here; drop one")
        if any(name == other for other, _ in axes):
            raise r.fail(path, f"{name} is given twice; give each name once")
        seen: list[float | str] = []
        for i, (_, v) in enumerate(checked):
            if any(_same(v, s) for s in seen):
                raise r.fail(path + (i,), f"the value {_show(v)} is listed twice; give each once")
            seen.append(v)
        axes.append((name, seen))

    entries: list[tuple[str | None, dict[str, float | str]]] = []
    listed = data.get("corner", [])
    if not isinstance(listed, list):
        raise r.fail(("corner",), "must be an array of tables: write [[corner]] sections")
    axis_names = {name for name, _ in axes}
    for k, entry in enumerate(listed):
        base: KeyPath = ("corner", k)
        r.table(entry, base, None)
        label = r.text(entry, "name", base)
        values: dict[str, float | str] = {}
        for key, value in entry.items():
            if key == "name":
                continue
            name, checked = _circuit_value(r, template, key, value, base + (key,))
            if name in fixed:
                raise r.fail(base + (key,), f"{name} is fixed in [parameters] and set by a corner; "
                                            "drop one")
            if name in axis_names:
                raise r.fail(base + (key,), f"{name} is varied by [corners] and set here; drop one")
            values[name] = checked
        if not values:
            raise r.fail(base, "a [[corner]] must set at least one parameter or choice")
        if label is None:
            label = " ".join(f"{n}={_show(v)}" for n, v in values.items())
        if any(label == other for other, _ in entries):
            raise r.fail(base + ("name",) if "name" in entry else base,
                         f"corner name {label!r} is used twice; give each corner its own name")
        entries.append((label, values))

    defaults: dict[str, float | str] = {**template.defaults,
                                        **{n: c.default for n, c in template.choices.items()},
                                        **fixed}
    combos = list(itertools.product(*(vals for _, vals in axes)))
    corners: list[Corner] = []
    for label, values in entries or [(None, {})]:
        for combo in combos:
            grid_values = dict(zip((n for n, _ in axes), combo))
            shown = " ".join(f"{n}={_show(v)}" for n, v in grid_values.items())
            name = " ".join(part for part in (label, shown) if part) or "nominal"
            own = {**values, **grid_values}
            corners.append(Corner(name=name, entry=label if entries else None, values=own,
                                  full={**defaults, **own}))
    return tuple(corners)


def _read_limits(r: _Reader, raw: Any, template, settings, corners: Sequence[Corner]
                 ) -> tuple[Limit, ...]:
    if not isinstance(raw, list):
        raise r.fail(("limit",), "must be an array of tables: write [[limit]] sections")
    if not raw:
        raise r.fail((), "no [[limit]] section; a design needs at least one limit to check")
    limits: list[Limit] = []
    labels: list[str] = []
    for k, entry in enumerate(raw):
        base: KeyPath = ("limit", k)
        r.table(entry, base, _LIMIT_KEYS)
        name = r.text(entry, "metric", base, required=True)
        try:
            metric = parse_metric(name)
        except InputError as exc:
            raise r.fail(base + ("metric",), str(exc)) from None
        metric = _checked_metric(r, entry, base, metric, template, settings)
        bound = _read_bound(r, entry, base, metric, required=True)
        label = r.text(entry, "name", base) or metric.name
        if label in labels:
            if "name" in entry:
                raise r.fail(base + ("name",), f"limit name {label!r} is used twice; give each "
                                               "limit its own name")
            label = f"{label} #{k + 1}"
        labels.append(label)
        overrides = []
        listed = entry.get("override", [])
        if not isinstance(listed, list):
            raise r.fail(base + ("override",), "must be an array of tables: write "
                                               "[[limit.override]] sections after the [[limit]]")
        for j, ov in enumerate(listed):
            overrides.append(_read_override(r, ov, base + ("override", j), metric, bound,
                                            template, corners))
        limits.append(Limit(label=label, metric=metric, bound=bound, overrides=tuple(overrides),
                            line=r.source.line(base)))
    return tuple(limits)


def _checked_metric(r: _Reader, entry, base: KeyPath, metric: Metric, template, settings) -> Metric:
    path = base + ("metric",)
    harmonics = settings.harmonics
    if metric.order is not None and metric.order > harmonics:
        raise r.fail(path, f"{metric.name} needs harmonic {metric.order} but [settings] harmonics "
                           f"is {harmonics}; raise it to at least {metric.order}")
    if "carrier" in entry:
        if metric.form != "dbc":
            raise r.fail(base + ("carrier",), f"carrier applies to hN_dbc metrics only, not "
                                              f"{metric.name}; remove it")
        carrier = r.whole(entry["carrier"], base + ("carrier",), 1, harmonics)
        if carrier == metric.order:
            raise r.fail(base + ("carrier",), f"{metric.name} against carrier {carrier} is 0 dBc "
                                              "by definition; choose another order")
        metric = Metric(metric.name, metric.form, metric.order, carrier)
    elif metric.form == "dbc" and metric.order == 1:
        raise r.fail(path, "h1_dbc is 0 dBc by definition; give carrier = ORDER to compare the "
                           "fundamental with another harmonic")
    if metric.form == "efficiency":
        default = template.default_probe
        probe_ok = settings.probe is None or (default is not None and
                                              template.probe(settings.probe) == default)
        if not template.roles.get("power_source") or not template.roles.get("load"):
            raise r.fail(path, f"{metric.name} needs a circuit that names its power source and "
                               f"load ([roles] power_source, load in its metadata); "
                               f"{template.name} does not")
        if not probe_ok:
            raise r.fail(path, f"{metric.name} is computed on the circuit's default probe only; "
                               f"remove [settings] probe or this limit")
    if metric.form == "delta_db" and settings.ideal_kind is None and template.ideal_kind is None:
        raise r.fail(path, f"{metric.name} needs an ideal counterpart; {template.name} has none: "
                           "set [settings] ideal = KIND")
    if metric.name == "conduction_angle_deg" and not template.conduction_probes:
        raise r.fail(path, f"{template.name} declares no diode current probes "
                           "(conduction_probes), so it has no conduction angle")
    return metric


def _read_bound(r: _Reader, entry, base: KeyPath, metric: Metric, *, required: bool) -> Bound:
    lo = r.number(entry["min"], base + ("min",)) if "min" in entry else None
    hi = r.number(entry["max"], base + ("max",)) if "max" in entry else None
    if required and lo is None and hi is None:
        raise r.fail(base, f"no bound for {metric.name}: give min = X (value >= X), max = X "
                           "(value <= X), or both (a range)")
    if lo is not None and hi is not None and lo > hi:
        raise r.fail(base + ("min",), f"min {lo:g} is above max {hi:g}; swap them")
    for key, value in (("min", lo), ("max", hi)):
        if value is None:
            continue
        if metric.never_negative and value < 0:
            raise r.fail(base + (key,), f"{metric.name} is never negative, so {key} = {value:g} "
                                        "cannot be meant; fix the sign")
        if metric.form == "efficiency" and value > 1:
            raise r.fail(base + (key,), f"{metric.name} is a fraction 0..1, so {key} = {value:g} "
                                        "cannot be meant; write 0.25 for 25 %")
    return Bound(lo, hi)


def _read_override(r: _Reader, raw: Any, base: KeyPath, metric: Metric, bound: Bound, template,
                   corners: Sequence[Corner]) -> Override:
    ov = r.table(raw, base, _OVERRIDE_KEYS)
    if "where" not in ov and "corner" not in ov:
        raise r.fail(base, "an override needs where = { NAME = VALUE } and/or corner = \"NAME\" "
                           "to select corners")
    where: dict[str, float | str] = {}
    if "where" in ov:
        table = r.table(ov["where"], base + ("where",), None)
        if not table:
            raise r.fail(base + ("where",), "is empty; name at least one parameter or choice")
        for key, value in table.items():
            name, checked = _circuit_value(r, template, key, value, base + ("where", key))
            where[name] = checked
    corner_name = r.text(ov, "corner", base)
    if corner_name is not None and not any(c.entry == corner_name for c in corners):
        known = sorted({c.entry for c in corners if c.entry is not None})
        raise r.fail(base + ("corner",), f"no [[corner]] named {corner_name!r}; corners: "
                                         f"{', '.join(known) or '(none listed)'}")
    skip = False
    if "skip" in ov:
        if not isinstance(ov["skip"], bool):
            raise r.fail(base + ("skip",), f"must be true or false, got {_kind(ov['skip'])}")
        skip = ov["skip"]
    local = _read_bound(r, ov, base, metric, required=False)
    if skip and (local.min is not None or local.max is not None):
        raise r.fail(base + ("skip",), "skip = true and a bound contradict; give one of them")
    if not skip and local.min is None and local.max is None:
        raise r.fail(base, "an override needs min, max or skip = true")
    merged = Bound(local.min if local.min is not None else bound.min,
                   local.max if local.max is not None else bound.max)
    if merged.min is not None and merged.max is not None and merged.min > merged.max:
        key = "min" if local.min is not None else "max"
        raise r.fail(base + (key,), f"with the limit's bounds this gives min {merged.min:g} above "
                                    f"max {merged.max:g}; fix the bounds")
    result = Override(where=where, corner=corner_name, min=local.min, max=local.max, skip=skip,
                      line=r.source.line(base))
    if not any(result.matches(c) for c in corners):
        raise r.fail(base, "matches no corner of this design; check the names and values")
    return result


# ============================================================================ verdicts
@dataclass(frozen=True, slots=True)
class Verdict:
    """One limit at one corner.

    Parameters
    ----------
    design : str
        Design name (file stem).
    file : str
        Design file.
    corner : str
        Corner name.
    limit : str
        Limit label.
    metric : str
        Metric name.
    unit, margin_unit : str
        Units of the value and the margin (``"1"`` for ratios).
    bound : Bound
        The bound at this corner (overrides applied).
    value, margin : float or None
        None for errors.
    status : {"pass", "fail", "error"}
    reason : str
        Why an error is one (empty otherwise).
    line : int
        Line of the limit in the design file.
    parameters : mapping
        Final parameter values and choices of the corner's run.
    """

    design: str
    file: str
    corner: str
    limit: str
    metric: str
    unit: str
    margin_unit: str
    bound: Bound
    value: float | None
    margin: float | None
    status: VerdictStatus
    reason: str = ""
    line: int = 1
    parameters: Mapping[str, float | str] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        return {
            "design": self.design, "file": self.file, "corner": self.corner,
            "limit": self.limit, "metric": self.metric, "unit": self.unit,
            "margin_unit": self.margin_unit, "bound": self.bound.as_dict(),
            "value": self.value, "margin": self.margin, "status": self.status,
            "reason": self.reason, "line": self.line, "parameters": dict(self.parameters),
        }


_RANK = {"fail": 0, "error": 1, "pass": 2}


def judge(design: Design, points: Sequence[Mapping[str, Any]]) -> tuple[Verdict, ...]:
    """Every limit of ``design`` at every corner, failures first.

    Parameters
    ----------
    design : Design
    points : sequence of mapping
        One sweep point per corner, in corner order (``status``, ``error``, ``metrics``,
        ``harmonics``, ``parameters``, ``choices``).

    Returns
    -------
    tuple of Verdict
        Sorted: failures, then errors, then passes; within each, limit order then corner order.
        A limit skipped at a corner by an override gives no verdict there.
    """
    if len(points) != len(design.corners):
        raise InputError(f"{design.file}: {len(points)} results for {len(design.corners)} corners")
    ranked: list[tuple[tuple[int, int, int], Verdict]] = []
    for ci, (corner, point) in enumerate(zip(design.corners, points)):
        status = point.get("status")
        params = {**(point.get("parameters") or {}), **(point.get("choices") or {})}
        for li, limit in enumerate(design.limits):
            bound = limit.bound_at(corner)
            if bound is None:
                continue
            value: float | None = None
            margin: float | None = None
            if status == "failed":
                verdict, reason = "error", f"simulation failed: {point.get('error') or 'unknown'}"
            elif status != "ok":
                verdict, reason = "error", str(point.get("error") or "no periodic steady state")
            else:
                value, reason = metric_value(limit.metric, point)
                if value is None:
                    verdict = "error"
                else:
                    margin = bound.margin(value)
                    verdict = "pass" if margin >= 0 else "fail"
            v = Verdict(design=design.name, file=design.file, corner=corner.name,
                        limit=limit.label, metric=limit.metric.name, unit=limit.metric.unit,
                        margin_unit=limit.metric.margin_unit, bound=bound, value=value,
                        margin=margin, status=verdict, reason=reason, line=limit.line,
                        parameters=params)
            ranked.append(((_RANK[verdict], li, ci), v))
    ranked.sort(key=lambda item: item[0])
    return tuple(v for _, v in ranked)


@dataclass(frozen=True, slots=True)
class DesignOutcome:
    """A checked design: its verdicts, the points behind them, and what was simulated."""

    design: Design
    verdicts: tuple[Verdict, ...]
    points: tuple[Mapping[str, Any], ...] = ()
    simulated: int = 0
    reused: int = 0
    elapsed_s: float = 0.0

    def count(self, status: VerdictStatus) -> int:
        return sum(1 for v in self.verdicts if v.status == status)

    @property
    def status(self) -> VerdictStatus:
        """``error`` if any verdict is one, else ``fail`` if any, else ``pass``."""
        if self.count("error"):
            return "error"
        return "fail" if self.count("fail") else "pass"


def exit_status(outcomes: Sequence[DesignOutcome]) -> int:
    """2 if any verdict is an error, otherwise 1 if any limit fails, otherwise 0.

    Examples
    --------
    >>> exit_status([])
    0
    """
    statuses = {o.status for o in outcomes}
    return 2 if "error" in statuses else 1 if "fail" in statuses else 0


def check_designs(
    designs: Sequence[Design],
    *,
    store: Any = None,
    workers: int = 1,
    dask_address: str | None = None,
    fresh: bool = False,
    on_point: Callable[[Mapping[str, Any]], None] | None = None,
) -> list[DesignOutcome]:
    """Simulate every corner of every design (through :func:`simloop.sweep.run_sweep`) and judge.

    Parameters
    ----------
    designs : sequence of Design
    store : simloop.store.ResultStore or None
        Points already stored under the same key are reused, new ones stored.
    workers : int
        Local engine workers (at most one per corner is started).
    dask_address : str or None
        Run the corners on this Dask scheduler instead.
    fresh : bool
        Simulate again even what the store holds.
    on_point : callable
        Called with each finished point (progress display).

    Returns
    -------
    list of DesignOutcome
        In the order of ``designs``.
    """
    from .sweep import run_sweep

    outcomes = []
    for design in designs:
        start = time.perf_counter()
        sweep = run_sweep(
            design.template, [dict(c.values) for c in design.corners],
            fixed_values=design.fixed_values, fixed_choices=design.fixed_choices,
            settings=design.settings, store=store, fresh=fresh,
            workers=max(1, min(workers, len(design.corners))), dask_address=dask_address,
            on_point=on_point,
        )
        outcomes.append(DesignOutcome(
            design=design, verdicts=judge(design, sweep.points), points=tuple(sweep.points),
            simulated=sweep.simulated, reused=sweep.reused,
            elapsed_s=time.perf_counter() - start,
        ))
    return outcomes
