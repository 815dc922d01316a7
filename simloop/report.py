"""Sweep results as a tidy CSV: one row per point and harmonic order.

A sweep hands over its points as plain dicts (the document of
:meth:`simloop.analyse.RunResult.to_dict` plus ``index``, ``varied``, ``status``, ``error`` and
``reused``). This module flattens them for spreadsheets and data-frame tools: each harmonic row
of each point becomes one CSV row, carrying the point's swept values and its waveform metrics, so
the file can be filtered and pivoted without joins. A failed point gives one row holding its
error and empty harmonic columns, so no point of the grid goes missing.

Levels: ``sim_dbv`` is dBV re 1 V rms (:func:`simloop.fourier.dbv`); ``sim_dbc`` is dB relative
to the reference harmonic of the sweep, chosen by :func:`dbc_reference_order` (the fundamental,
or for outputs without one, such as a full-wave rectifier's, the largest AC harmonic: its own
row then reads 0 dBc, which names the reference in the file itself).
"""

from __future__ import annotations

import csv
import io
import math
import numbers
import re
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from .errors import InputError
from .files import write_atomic
from .fourier import dbv

__all__ = [
    "FUNDAMENTAL_FLOOR",
    "HARMONIC_COLUMNS",
    "METRIC_COLUMNS",
    "POINT_STATUSES",
    "dbc_reference_order",
    "format_cell",
    "level_dbc",
    "level_dbv",
    "sweep_csv_columns",
    "sweep_csv_rows",
    "unit_suffix",
    "write_sweep_csv",
]

#: What a sweep point's ``status`` may be.
POINT_STATUSES: tuple[str, ...] = ("ok", "unconverged", "failed")

#: Columns taken from (or computed for) each harmonic row of a point, in file order.
HARMONIC_COLUMNS: tuple[str, ...] = (
    "n", "freq_hz", "ideal_v", "estimate_v", "sim_v", "sim_dbv", "sim_dbc", "sim_phase_deg",
    "delta_db",
)

#: Waveform metrics of the point, repeated on each of its rows.
METRIC_COLUMNS: tuple[str, ...] = ("dc_v", "rms_v", "ripple_v", "thd")

#: A point has a fundamental when A_1 exceeds this fraction of its largest component (the same
#: test :mod:`simloop.analyse` applies before it reports a THD re the fundamental).
FUNDAMENTAL_FLOOR = 1e-6

_FIXED_HEAD = ("point",)
_FIXED_MIDDLE = ("status", "error")

#: Spellings of units that are not plain letters, for column names.
_UNIT_WORDS = {"Ω": "ohm", "ω": "ohm", "%": "pct", "°": "deg", "µ": "u", "μ": "u"}


# --------------------------------------------------------------------------- columns
def unit_suffix(unit: str) -> str:
    """The column-name suffix of a unit: lower case, letters and digits only; ``""`` for none.

    Parameters
    ----------
    unit : str
        SI unit as the circuit metadata spells it (``"ohm"``, ``"V"``, ``"Hz"``, ``"F"``);
        ``""`` or ``"1"`` (dimensionless) give no suffix.

    Returns
    -------
    str

    Examples
    --------
    >>> [unit_suffix(u) for u in ("ohm", "Ω", "V", "Hz", "1", "")]
    ['ohm', 'ohm', 'v', 'hz', '', '']
    """
    text = str(unit).strip()
    if text in ("", "1"):
        return ""
    for symbol, word in _UNIT_WORDS.items():
        text = text.replace(symbol, word)
    return re.sub(r"[^a-z0-9]", "", text.lower())


def _choice_names(points: Sequence[Mapping[str, Any]], varied_names: Sequence[str]) -> set[str]:
    """Varied names that are model choices: a string value, or a key of the point's choices."""
    names = set()
    for p in points:
        varied = p.get("varied") or {}
        choices = p.get("choices") or {}
        for name in varied_names:
            if isinstance(varied.get(name), str) or (name in choices and name not in varied):
                names.add(name)
    return names


def sweep_csv_columns(
    varied_names: Sequence[str],
    *,
    units: Mapping[str, str] | None = None,
    choice_names: Iterable[str] = (),
) -> list[str]:
    """The CSV header: ``point``, the swept names with units, status, harmonic and metric columns.

    Parameters
    ----------
    varied_names : sequence of str
        The swept names, in the order the sweep varies them.
    units : mapping of str to str, optional
        Unit of each swept parameter (``{"rload": "ohm"}``): the column becomes ``rload_ohm``.
        Names without a known unit, and model choices, keep their plain name.
    choice_names : iterable of str
        Swept names that are model choices (never given a unit).

    Returns
    -------
    list of str

    Raises
    ------
    InputError
        A swept name that is empty, repeated, or whose column would be named twice.

    Notes
    -----
    A swept column that would take the name of a fixed column (sweeping ``freq`` [Hz] gives
    ``freq_hz``, the name of the harmonic frequency) is prefixed ``param_``: ``param_freq_hz``.

    Examples
    --------
    >>> sweep_csv_columns(["rload", "diode"], units={"rload": "ohm"}, choice_names={"diode"})[:4]
    ['point', 'rload_ohm', 'diode', 'status']
    """
    units = dict(units or {})
    choices = set(choice_names)
    fixed = {*_FIXED_HEAD, *_FIXED_MIDDLE, *HARMONIC_COLUMNS, *METRIC_COLUMNS}
    names = [str(name) for name in varied_names]
    if len(set(names)) != len(names):
        raise InputError(f"swept names {names} repeat a name; give each swept name once")
    swept: list[str] = []
    for name in names:
        if not name.strip():
            raise InputError("a swept name is empty; name each swept parameter or model choice")
        suffix = "" if name in choices else unit_suffix(units.get(name, ""))
        column = f"{name}_{suffix}" if suffix and not name.endswith(f"_{suffix}") else name
        if column in fixed:
            column = f"param_{column}"
        if column in swept:
            raise InputError(f"swept names give the CSV column {column!r} twice; rename one")
        swept.append(column)
    return [*_FIXED_HEAD, *swept, *_FIXED_MIDDLE, *HARMONIC_COLUMNS, *METRIC_COLUMNS]


# --------------------------------------------------------------------------- dBc reference
def _has_fundamental(amplitudes: Mapping[int, float]) -> bool:
    largest = max((abs(a) for a in amplitudes.values()), default=0.0)
    return abs(amplitudes.get(1, 0.0)) > FUNDAMENTAL_FLOOR * largest


def _sim_amplitudes(point: Mapping[str, Any]) -> dict[int, float]:
    return {
        int(row["n"]): float(row["sim_v"])
        for row in point.get("harmonics") or ()
        if row.get("sim_v") is not None and math.isfinite(float(row["sim_v"]))
    }


def dbc_reference_order(points: Sequence[Mapping[str, Any]]) -> int | None:
    """The harmonic order the sweep's dBc levels refer to: 1, or the largest AC harmonic.

    Parameters
    ----------
    points : sequence of dict
        Sweep points; those with harmonic rows (status ok or unconverged) decide.

    Returns
    -------
    int or None
        1 when every point with harmonics has a fundamental (A_1 above ``FUNDAMENTAL_FLOOR`` of
        its largest component). Otherwise, as for a full-wave rectifier's output whose
        fundamental is rounding noise, the order n >= 2 that is the largest harmonic in the
        most points (ties: the lower order); n = 1 is then no candidate, since some point
        lacks it. None when no point has a component to refer to.

    Notes
    -----
    One order for the whole sweep keeps dBc values comparable from point to point:
    ``L_n = 20 log10(|A_n| / A_ref)`` with the same ``ref`` in every row (n = 0 compares the DC
    value with the reference's peak amplitude, as :func:`simloop.fourier.dbc` does).

    Examples
    --------
    A full-wave output: A_1 is noise, A_2 the largest AC harmonic.

    >>> rows = [{"n": 0, "sim_v": 6.37}, {"n": 1, "sim_v": 1e-12}, {"n": 2, "sim_v": 4.24},
    ...         {"n": 4, "sim_v": 0.85}]
    >>> dbc_reference_order([{"harmonics": rows}])
    2
    """
    spectra = [a for a in (_sim_amplitudes(p) for p in points) if a]
    if not spectra:
        return None
    if all(_has_fundamental(a) for a in spectra):
        return 1
    tops = Counter()
    for a in spectra:
        ac = {n: abs(v) for n, v in a.items() if n >= 2 and v != 0.0}
        if ac:
            top = max(ac.values())
            tops[min(n for n, v in ac.items() if v == top)] += 1
    if not tops:
        return None
    most = max(tops.values())
    return min(n for n, count in tops.items() if count == most)


# --------------------------------------------------------------------------- rows
def level_dbv(n: int, amplitude: float | None) -> float | None:
    """Level of harmonic ``n`` in dBV re 1 V rms: DC by its magnitude, n >= 1 by rms (A/sqrt 2).

    Examples
    --------
    >>> print(round(level_dbv(0, -2.0), 4), round(level_dbv(1, 2.0), 4), level_dbv(3, None))
    6.0206 3.0103 None
    """
    if amplitude is None:
        return None
    return float(dbv(abs(amplitude), dc=True)) if n == 0 else float(dbv(amplitude))


def level_dbc(amplitude: float | None, reference: float | None) -> float | None:
    """``20 log10(|amplitude| / |reference|)`` [dB]; None without a (non-zero) reference.

    Examples
    --------
    >>> print(level_dbc(0.1, 1.0), level_dbc(0.0, 1.0), level_dbc(0.1, 0.0))
    -20.0 -inf None
    """
    if amplitude is None or not reference:
        return None
    if amplitude == 0.0:
        return -math.inf
    return 20.0 * math.log10(abs(amplitude) / abs(reference))


def _swept_value(point: Mapping[str, Any], name: str, position: int) -> Any:
    for key in ("varied", "parameters", "choices"):
        source = point.get(key) or {}
        if name in source:
            return source[name]
    raise InputError(
        f"sweep point {point.get('index', position)} has no value for the swept name {name!r}; "
        "pass the names the sweep varies"
    )


def _status(point: Mapping[str, Any], position: int) -> str:
    status = point.get("status")
    if status not in POINT_STATUSES:
        raise InputError(
            f"sweep point {point.get('index', position)} has status {status!r}; expected one of "
            f"{', '.join(POINT_STATUSES)}"
        )
    return str(status)


def sweep_csv_rows(
    points: Sequence[Mapping[str, Any]],
    varied_names: Sequence[str],
    *,
    units: Mapping[str, str] | None = None,
) -> list[dict[str, Any]]:
    """Flatten sweep points into tidy rows: one per point and harmonic order.

    Parameters
    ----------
    points : sequence of dict
        Sweep points in grid order (see the module docstring for their keys).
    varied_names : sequence of str
        The swept names (parameters and model choices), in sweep order.
    units : mapping of str to str, optional
        Units of the swept parameters, for the column names (``{"rload": "ohm"}``).

    Returns
    -------
    list of dict
        Keys in the order of :func:`sweep_csv_columns`; values are plain Python numbers,
        strings or None (not yet formatted: :func:`write_sweep_csv` formats them). A point
        without harmonic rows (failed) gives one row with None in the harmonic and metric
        columns.

    Raises
    ------
    InputError
        A point with an unknown status, or without a value for a swept name.

    Notes
    -----
    ``sim_dbv = 20 log10(A_n / sqrt 2)`` for n >= 1 (the rms of a sinusoid of peak A_n) and
    ``20 log10 |A_0|`` for DC, both re 1 V. ``sim_dbc = 20 log10(|A_n| / A_ref)`` with ``ref``
    from :func:`dbc_reference_order`; None where the point has no reference component. A zero
    amplitude gives ``-inf``.

    Examples
    --------
    A half-wave point with a 1 V fundamental and a failed one:

    >>> ok = {"index": 0, "varied": {"rload": 100.0}, "status": "ok", "error": None,
    ...       "metrics": {"dc_v": 0.6366, "rms_v": 1.0, "ripple_v": 2.0, "thd": 0.435},
    ...       "harmonics": [{"n": 1, "freq_hz": 50.0, "ideal_v": 1.0, "estimate_v": None,
    ...                      "sim_v": 0.5, "sim_phase_deg": 0.0, "delta_db": -6.0206}]}
    >>> bad = {"index": 1, "varied": {"rload": 1.0}, "status": "failed",
    ...        "error": "timestep too small", "metrics": None, "harmonics": None}
    >>> rows = sweep_csv_rows([ok, bad], ["rload"], units={"rload": "ohm"})
    >>> print(len(rows), rows[0]["rload_ohm"], round(rows[0]["sim_dbv"], 4), rows[1]["n"])
    2 100.0 -9.0309 None
    """
    names = list(varied_names)
    columns = sweep_csv_columns(names, units=units, choice_names=_choice_names(points, names))
    swept_columns = columns[len(_FIXED_HEAD) : len(_FIXED_HEAD) + len(names)]
    ref_n = dbc_reference_order(points)
    rows: list[dict[str, Any]] = []
    for position, point in enumerate(points):
        status = _status(point, position)
        head: dict[str, Any] = {"point": point.get("index", position)}
        for name, column in zip(names, swept_columns):
            head[column] = _swept_value(point, name, position)
        head["status"] = status
        head["error"] = point.get("error")
        metrics = point.get("metrics") or {}
        tail = {key: metrics.get(key) for key in METRIC_COLUMNS}
        harmonics = list(point.get("harmonics") or ())
        reference = _sim_amplitudes(point).get(ref_n) if ref_n is not None else None
        if not harmonics:
            rows.append({**head, **dict.fromkeys(HARMONIC_COLUMNS), **tail})
            continue
        for h in harmonics:
            n = int(h["n"])
            sim_v = h.get("sim_v")
            rows.append({
                **head,
                "n": n,
                "freq_hz": h.get("freq_hz"),
                "ideal_v": h.get("ideal_v"),
                "estimate_v": h.get("estimate_v"),
                "sim_v": sim_v,
                "sim_dbv": level_dbv(n, sim_v),
                "sim_dbc": level_dbc(sim_v, reference),
                "sim_phase_deg": h.get("sim_phase_deg"),
                "delta_db": h.get("delta_db"),
                **tail,
            })
    return rows


# --------------------------------------------------------------------------- writing
def format_cell(value: Any) -> str:
    """One CSV cell: ``""`` for None, ``repr`` of floats (exact round trip), text as it is.

    Examples
    --------
    >>> [format_cell(v) for v in (None, 0.1 + 0.2, 3, float("-inf"), True, "sl_rect1a")]
    ['', '0.30000000000000004', '3', '-inf', 'true', 'sl_rect1a']
    """
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        return repr(float(value))
    return str(value)


def write_sweep_csv(
    path: Path | str,
    points: Sequence[Mapping[str, Any]],
    varied_names: Sequence[str],
    *,
    units: Mapping[str, str] | None = None,
) -> None:
    """Write the tidy CSV of a sweep (UTF-8, comma-separated, header first), atomically.

    Parameters
    ----------
    path : path
        Destination; written through a temporary sibling (:func:`simloop.files.write_atomic`).
    points, varied_names, units
        As :func:`sweep_csv_rows`.

    Raises
    ------
    InputError
        As :func:`sweep_csv_rows`, or when the file cannot be written.

    Notes
    -----
    Numbers are written with ``repr`` (17 significant digits where needed), so ``float(cell)``
    gives back the very value computed; empty cells stand for "no value" (None), and ``-inf``
    marks a level of a zero amplitude.
    """
    names = list(varied_names)
    columns = sweep_csv_columns(names, units=units, choice_names=_choice_names(points, names))
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    for row in sweep_csv_rows(points, names, units=units):
        writer.writerow([format_cell(row[c]) for c in columns])
    write_atomic(Path(path), buffer.getvalue())
