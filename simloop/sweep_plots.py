"""Sweep figures: chosen harmonics against a swept value (matplotlib, imported lazily, Agg).

Layout (simloop's own): one column per chosen harmonic order n, three rows sharing the x axis,

(a) the simulated level in dBV (re 1 V rms), solid, with the ideal level dashed in the same colour;
(b) the same relative to the reference harmonic (dBc re n = 1, or re the largest AC harmonic for
    outputs without a fundamental, see :func:`simloop.report.dbc_reference_order`);
(c) the departure from the ideal, ``delta_db = 20 log10(A_sim / A_ideal)`` [dB], around a 0 dB line.

One line per value of a second swept variable (legend on the right, with its unit). Points that
failed or did not reach a steady state are left out of the lines (a gap) and marked with an
``x`` along the bottom edge of each panel. An ideal that is absent at an order (odd harmonics of
a half-wave) gives no dashed line and no delta.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .compare import ABSENT
from .errors import InputError
from .plots import SERIES_STYLE, _pyplot, save
from .report import dbc_reference_order, level_dbc, level_dbv
from .units import format_si

__all__ = ["LINE_COLOURS", "LOG_SPAN", "MAX_COLUMNS", "MIN_SPAN_DB", "save_sweep_figure", "sweep_figure"]

#: Colours of the lines of a second swept variable, in order: the simulated and estimate colours
#: of :data:`simloop.plots.SERIES_STYLE` first, then the rest of the same colour-blind-safe set.
#: More values than colours switch to a sequential colour map.
LINE_COLOURS: tuple[str, ...] = (
    SERIES_STYLE["simulated"]["color"],
    SERIES_STYLE["estimate"]["color"],
    "#009e73",
    "#d55e00",
    "#cc79a7",
    "#56b4e9",
    "#000000",
)

#: The x axis is logarithmic when all x values are positive and max/min reaches this ratio.
LOG_SPAN = 10.0

#: Most harmonic orders (columns) one figure shows.
MAX_COLUMNS = 8

#: Smallest span of a level axis [dB]: flatter data are centred in it, not magnified.
MIN_SPAN_DB = 0.2

#: Where the failure marks sit, as a fraction of the panel height from its bottom edge.
_FAIL_MARK_Y = 0.04

_DISPLAY_UNITS = {"ohm": "Ω", "1": ""}


@dataclass(frozen=True, slots=True)
class _Line:
    """One value of the line variable: x positions and, per harmonic, the five series."""

    label: str
    colour: str
    x: NDArray[np.float64]
    bad: NDArray[np.bool_]
    sim_dbv: dict[int, NDArray[np.float64]]
    ideal_dbv: dict[int, NDArray[np.float64]]
    sim_dbc: dict[int, NDArray[np.float64]]
    ideal_dbc: dict[int, NDArray[np.float64]]
    delta_db: dict[int, NDArray[np.float64]]


# --------------------------------------------------------------------------- data
def _display_unit(unit: str) -> str:
    return _DISPLAY_UNITS.get(unit.strip(), unit.strip())


def _value_text(value: Any, unit: str) -> str:
    if isinstance(value, str):
        return value
    text = format_si(float(value), _display_unit(unit)).strip()
    return text.replace(" u", " µ")


def _value(point: Mapping[str, Any], name: str, position: int) -> Any:
    for key in ("varied", "parameters", "choices"):
        source = point.get(key) or {}
        if name in source:
            value = source[name]
            return value if isinstance(value, str) else float(value)
    raise InputError(
        f"sweep point {point.get('index', position)} has no value for {name!r}; name a swept "
        "parameter or model choice"
    )


def _harmonics(harmonics: Sequence[int]) -> tuple[int, ...]:
    try:
        orders = tuple(int(n) for n in harmonics)
    except (TypeError, ValueError):
        raise InputError(f"harmonics must be whole numbers >= 0, got {harmonics!r}") from None
    if not orders or any(n < 0 for n in orders) or len(set(orders)) != len(orders):
        raise InputError(
            f"harmonics must be one or more distinct orders >= 0 (e.g. 1,2,3), got {harmonics!r}"
        )
    if len(orders) > MAX_COLUMNS:
        raise InputError(
            f"{len(orders)} harmonic orders make {len(orders)} columns, over {MAX_COLUMNS}; "
            "plot fewer orders per figure"
        )
    return orders


def _select(points: Sequence[Mapping[str, Any]], fixed: Mapping[str, Any]) -> list:
    chosen = []
    for position, point in enumerate(points):
        keep = True
        for name, wanted in fixed.items():
            value = _value(point, name, position)
            if isinstance(value, str) or isinstance(wanted, str):
                keep &= str(value) == str(wanted)
            else:
                keep &= math.isclose(value, float(wanted), rel_tol=1e-9, abs_tol=0.0)
        if keep:
            chosen.append(point)
    if not chosen:
        raise InputError(f"no sweep point has {dict(fixed)}; pick values the sweep ran")
    return chosen


def _levels(point: Mapping[str, Any], n: int, ref_n: int | None) -> tuple[float, ...]:
    """(sim dBV, ideal dBV, sim dBc, ideal dBc, delta dB) of order n; NaN where absent."""
    rows = {int(h["n"]): h for h in point.get("harmonics") or ()}
    nan = math.nan
    if n not in rows:
        return (nan,) * 5

    def amp(order: int, key: str) -> float | None:
        value = rows.get(order, {}).get(key)
        return None if value is None else float(value)

    ideal_peak = max((abs(float(h["ideal_v"])) for h in rows.values()
                      if h.get("ideal_v") is not None), default=0.0)

    def ideal(order: int) -> float | None:
        value = amp(order, "ideal_v")
        return None if value is None or abs(value) <= ABSENT * ideal_peak else value

    def finite(value: float | None) -> float:
        return value if value is not None and math.isfinite(value) else nan

    sim = amp(n, "sim_v")
    sim_ref = amp(ref_n, "sim_v") if ref_n is not None else None
    ideal_ref = ideal(ref_n) if ref_n is not None else None
    return (
        finite(level_dbv(n, sim)),
        finite(level_dbv(n, ideal(n))),
        finite(level_dbc(sim, sim_ref)),
        finite(level_dbc(ideal(n), ideal_ref)),
        finite(amp(n, "delta_db")),
    )


def _colours(count: int) -> list[str]:
    if count <= len(LINE_COLOURS):
        return list(LINE_COLOURS[:count])
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps["viridis"]
    return [to_hex(cmap(0.9 * k / (count - 1))) for k in range(count)]


def _lines(points, *, x_name, line_name, line_unit, orders, ref_n):
    """Group the points by the line variable; returns (lines, x categories or None)."""
    xs = [_value(p, x_name, i) for i, p in enumerate(points)]
    categorical = any(isinstance(x, str) for x in xs)
    categories = list(dict.fromkeys(str(x) for x in xs)) if categorical else None
    keys = [None if line_name is None else _value(p, line_name, i) for i, p in enumerate(points)]
    groups: dict[Any, list[int]] = {}
    for i, key in enumerate(keys):
        groups.setdefault(key, []).append(i)
    if line_name is not None and not any(isinstance(k, str) for k in groups):
        groups = dict(sorted(groups.items()))
    colours = _colours(len(groups))
    lines = []
    for colour, (key, members) in zip(colours, groups.items()):
        pos = np.array([categories.index(str(xs[i])) if categorical else xs[i] for i in members],
                       dtype=float)
        if len(set(pos.tolist())) != len(pos):
            raise InputError(
                f"several points share one {x_name} value"
                + ("" if line_name is None else f" and one {line_name} value")
                + ": the sweep varies more names; pass fixed={name: value} for the others"
            )
        order = np.argsort(pos, kind="stable")
        members = [members[k] for k in order]
        series = {n: np.array([_levels(points[i], n, ref_n) for i in members]).reshape(-1, 5)
                  for n in orders}
        bad = np.array([points[i].get("status") != "ok" for i in members])
        for n in orders:
            # failed and unconverged points: gaps in the simulated lines and the deltas; the
            # ideal (a closed form) stays drawn wherever the point still reports it
            series[n][np.ix_(bad, [0, 2, 4])] = math.nan
        label = ("all points" if line_name is None
                 else f"{line_name} = {_value_text(key, line_unit)}")
        lines.append(_Line(
            label=label, colour=colour, x=pos[order], bad=bad,
            sim_dbv={n: series[n][:, 0] for n in orders},
            ideal_dbv={n: series[n][:, 1] for n in orders},
            sim_dbc={n: series[n][:, 2] for n in orders},
            ideal_dbc={n: series[n][:, 3] for n in orders},
            delta_db={n: series[n][:, 4] for n in orders},
        ))
    return lines, categories


# --------------------------------------------------------------------------- drawing
def _order_title(n: int, points: Sequence[Mapping[str, Any]]) -> str:
    name = {0: "DC", 1: "fundamental"}.get(n)
    if name is None:
        suffix = {1: "st", 2: "nd", 3: "rd"}.get(n % 10 if n % 100 not in (11, 12, 13) else 0, "th")
        name = f"{n}{suffix} harmonic"
    freqs = {float(h["freq_hz"]) for p in points for h in p.get("harmonics") or ()
             if int(h["n"]) == n and h.get("freq_hz") is not None}
    if n > 0 and len(freqs) == 1:
        name += f", {format_si(freqs.pop(), 'Hz')}".replace(" u", " µ")
    return f"n = {n} ({name})"


def _x_axis(ax, *, values: NDArray[np.float64], categories: list[str] | None) -> bool:
    """Scale and ticks of the shared x axis; returns True for a log axis."""
    from matplotlib.ticker import EngFormatter, LogLocator, NullFormatter

    if categories is not None:
        ax.set_xticks(range(len(categories)))
        ax.set_xticklabels(categories, rotation=20 if max(map(len, categories)) > 8 else 0,
                           ha="right" if max(map(len, categories)) > 8 else "center")
        ax.set_xlim(-0.5, len(categories) - 0.5)
        return False
    finite = values[np.isfinite(values)]
    log = bool(finite.size and np.all(finite > 0) and finite.max() / finite.min() >= LOG_SPAN)
    if log:
        ax.set_xscale("log")
        if finite.max() / finite.min() < 100.0:
            ax.xaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_minor_formatter(NullFormatter())
    ax.xaxis.set_major_formatter(EngFormatter(sep=""))
    return log


def _shared_ideal(lines: list[_Line], ideal_field: str, n: int):
    """(x, y) of the ideal when every line has the same one (to 1e-9 dB), else None."""
    if len(lines) < 2:
        return None
    merged: dict[float, float] = {}
    for line in lines:
        for x, y in zip(line.x.tolist(), getattr(line, ideal_field)[n].tolist()):
            if not math.isfinite(y):
                continue
            if x in merged and abs(merged[x] - y) > 1e-9:
                return None
            merged.setdefault(x, y)
    if not merged:
        return None
    xs = np.array(sorted(merged))
    return xs, np.array([merged[x] for x in xs.tolist()])


def _panel(ax, lines: list[_Line], n: int, field: str, ideal_field: str | None, *, single: bool,
           categorical: bool = False):
    drawn = False
    shared = _shared_ideal(lines, ideal_field, n) if ideal_field is not None else None
    if shared is not None:  # one grey dashed line stands for all
        ax.plot(*shared, color=SERIES_STYLE["ideal"]["color"], linestyle="--", linewidth=1.2,
                label="_ideal (all lines)", gid="ideal", zorder=2.5)
    for line in lines:
        y = getattr(line, field)[n]
        sim_colour = SERIES_STYLE["simulated"]["color"] if single else line.colour
        # on a categorical axis the connecting segments only guide the eye: keep them thin
        ax.plot(line.x, y, color=sim_colour, linewidth=0.9 if categorical else 1.7, marker="o",
                markersize=5.5 if categorical else 3.8, label=line.label, gid="simulated")
        drawn |= bool(np.any(np.isfinite(y)))
        if ideal_field is not None and shared is None:
            yi = getattr(line, ideal_field)[n]
            if np.any(np.isfinite(yi)):
                ideal_colour = SERIES_STYLE["ideal"]["color"] if single else line.colour
                ax.plot(line.x, yi, color=ideal_colour, linestyle="--", linewidth=1.2,
                        label=f"_ideal {line.label}", gid="ideal", zorder=2.5)
        if np.any(line.bad):
            ax.plot(line.x[line.bad], np.full(int(line.bad.sum()), _FAIL_MARK_Y),
                    transform=ax.get_xaxis_transform(), linestyle="none", marker="x",
                    markersize=7, markeredgewidth=1.8, color=sim_colour,
                    label=f"_failed {line.label}", gid="failed")
    ax.ticklabel_format(axis="y", useOffset=False)
    if drawn:
        low, high = ax.get_ylim()
        if high - low < MIN_SPAN_DB:  # a flat line: show it flat, not magnified noise
            middle = 0.5 * (low + high)
            low, high = middle - MIN_SPAN_DB / 2.0, middle + MIN_SPAN_DB / 2.0
        if any(np.any(line.bad) for line in lines):
            low -= 2.5 * _FAIL_MARK_Y * (high - low)  # room below the data for the x marks
        ax.set_ylim(low, high)
    ax.grid(True, which="major", alpha=0.35)
    ax.grid(True, which="minor", alpha=0.12)
    return drawn


def _note(ax, text: str) -> None:
    ax.set_yticks([])
    ax.text(0.5, 0.62, text, transform=ax.transAxes, ha="center", va="center", fontsize=8,
            color="#555555", wrap=True)


def sweep_figure(
    points: Sequence[Mapping[str, Any]],
    *,
    x_name: str,
    line_name: str | None = None,
    harmonics: Sequence[int] = (1, 2, 3),
    x_unit: str = "",
    line_unit: str = "",
    title: str = "",
    fixed: Mapping[str, float | str] | None = None,
):
    """Chosen harmonics of a sweep against one swept value; returns the matplotlib Figure.

    Parameters
    ----------
    points : sequence of dict
        Sweep points (``index``, ``varied``, ``status``, ``harmonics`` as
        :meth:`simloop.analyse.RunResult.to_dict` gives them).
    x_name : str
        Swept name on the x axis; a model choice (string values) gives a categorical axis.
    line_name : str or None
        Second swept name: one line per value. None: a single line.
    harmonics : sequence of int
        Orders to show, one column each (0 is DC).
    x_unit, line_unit : str
        Units of the x and line variables (``"ohm"``, ``"V"``, ``"Hz"``) for labels and legend.
    title : str
        Figure title.
    fixed : mapping, optional
        Values of further swept names to select points by (``{"cres": 1e-6}``), for sweeps that
        vary more than two names.

    Returns
    -------
    matplotlib.figure.Figure
        ``3 x len(harmonics)`` axes; ``fig.axes[row * len(harmonics) + column]``. Lines carry
        gids ``"simulated"``, ``"ideal"`` and ``"failed"`` (the x marks).

    Raises
    ------
    InputError
        No points, bad orders, a name the points lack, or several points per (x, line) pair.

    Notes
    -----
    Row (a): ``20 log10(A_n / sqrt 2)`` dBV (DC: ``20 log10 |A_0|``); row (b):
    ``20 log10(A_n / A_ref)`` with ``ref`` from :func:`simloop.report.dbc_reference_order`;
    row (c): the points' ``delta_db``. An ideal below ``simloop.compare.ABSENT`` of the point's
    largest ideal component counts as absent. The x axis is logarithmic when every x is > 0 and
    ``max/min >= LOG_SPAN``.

    Examples
    --------
    A fundamental of 4.6 V peak against an ideal 5 V, over two decades of load:

    >>> import math
    >>> row = {"n": 1, "freq_hz": 50.0, "ideal_v": 5.0, "sim_v": 4.6,
    ...        "delta_db": 20 * math.log10(4.6 / 5.0)}
    >>> pts = [{"index": i, "varied": {"rload": r}, "status": "ok", "harmonics": [row]}
    ...        for i, r in enumerate((100.0, 1e3, 1e4))]
    >>> fig = sweep_figure(pts, x_name="rload", harmonics=(1,), x_unit="ohm")
    >>> sim = [li for li in fig.axes[0].get_lines() if li.get_gid() == "simulated"][0]
    >>> print(len(fig.axes), fig.axes[0].get_xscale(), f"{sim.get_ydata()[0]:.4f} dBV")
    3 log 10.2449 dBV
    >>> import matplotlib.pyplot as plt; plt.close(fig)
    """
    if not points:
        raise InputError("no sweep points to plot; run the sweep first")
    orders = _harmonics(harmonics)
    if line_name is not None and line_name == x_name:
        raise InputError(f"line_name and x_name are both {x_name!r}; choose two swept names")
    chosen = _select(points, fixed) if fixed else list(points)
    ref_n = dbc_reference_order(chosen)
    lines, categories = _lines(chosen, x_name=x_name, line_name=line_name, line_unit=line_unit,
                               orders=orders, ref_n=ref_n)
    single = line_name is None
    cat = categories is not None

    plt = _pyplot()
    cols = len(orders)
    fig, axes = plt.subplots(3, cols, figsize=(3.9 * cols + 2.3, 8.6), sharex=True,
                             squeeze=False, layout="constrained")
    if ref_n == 1:
        dbc_label = "relative level [dBc re n = 1]"
    elif ref_n is None:
        dbc_label = "relative level [dBc]\n(no reference level)"
    else:
        dbc_label = (f"relative level [dB re n = {ref_n}]\n"
                     f"(no fundamental: re largest harmonic)")
    row_labels = ("simulated level\n[dBV re 1 V rms]", dbc_label, "sim − ideal [dB]")
    all_x = np.concatenate([line.x for line in lines])
    for col, n in enumerate(orders):
        a, b, c = axes[:, col]
        a.set_title(_order_title(n, chosen), fontsize=10)
        if not _panel(a, lines, n, "sim_dbv", "ideal_dbv", single=single, categorical=cat):
            _note(a, f"no simulated value at n = {n}")
        if n == ref_n:
            _panel(b, [], n, "sim_dbc", None, single=single)
            _note(b, f"n = {n} is the reference:\n0 dB by definition")
        elif not _panel(b, lines, n, "sim_dbc", "ideal_dbc", single=single, categorical=cat):
            _note(b, "no reference level")
        c.axhline(0.0, color=SERIES_STYLE["ideal"]["color"], linewidth=0.9, zorder=0)
        if not _panel(c, lines, n, "delta_db", None, single=single, categorical=cat):
            _note(c, f"no ideal value at n = {n}:\nno delta")
        for row, ax in enumerate((a, b, c)):
            _x_axis(ax, values=all_x, categories=categories)
            if col == 0:
                ax.set_ylabel(row_labels[row], fontsize=9)
        unit = _display_unit(x_unit)
        c.set_xlabel(f"{x_name} [{unit}]" if unit else (f"{x_name} (model)" if categories
                                                          else x_name))
    _legend(fig, lines, line_name=line_name, line_unit=line_unit, single=single)
    fig.suptitle(title or f"harmonics against {x_name}", fontsize=12)
    return fig


def _legend(fig, lines: list[_Line], *, line_name, line_unit, single: bool) -> None:
    from matplotlib.lines import Line2D

    grey = SERIES_STYLE["ideal"]["color"]
    handles, labels = [], []
    if not single:
        for line in lines:
            handles.append(Line2D([], [], color=line.colour, linewidth=2.2))
            labels.append(line.label.split(" = ", 1)[1])
    sim_colour = SERIES_STYLE["simulated"]["color"] if single else "#333333"
    handles += [Line2D([], [], color=sim_colour, linewidth=1.7, marker="o", markersize=3.8),
                Line2D([], [], color=grey, linestyle="--", linewidth=1.2)]
    labels += ["simulated", "ideal (closed form)" if single else
               "ideal (closed form;\ngrey: same for all lines)"]
    if any(np.any(line.bad) for line in lines):
        handles.append(Line2D([], [], color=sim_colour, linestyle="none", marker="x",
                              markersize=7, markeredgewidth=1.8))
        labels.append("failed or unconverged\n(left out)")
    unit = _display_unit(line_unit)
    heading = None if single else (f"{line_name} [{unit}]" if unit else line_name)
    fig.legend(handles, labels, loc="outside right upper", title=heading, fontsize=8.5,
               title_fontsize=9, frameon=False)


def save_sweep_figure(fig, path: Path | str) -> None:
    """Save a sweep figure as PNG (atomically, through :func:`simloop.plots.save`) and close it."""
    save(fig, Path(path))
