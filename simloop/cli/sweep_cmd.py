"""Sweep a circuit over a grid of load, drive, model and any other parameter.

Each --vary NAME=SPEC adds one axis: a list (100,1k,10k; model names for a choice such as
diode=sl_rect1a,sl_schottky) or a range START:STOP:COUNT with an optional :log. Points run in
parallel on local engine workers (or on a Dask cluster with --dask) and each is committed to the
results store (SQLite) as it finishes; a rerun reuses the stored points. A point that fails is
recorded with its reason and the sweep goes on; the exit code is then 2.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from ..errors import InputError
from ._common import Outputs, write_json
from .run_cmd import CAUTION, ELV_PEAK_V, add_engine_arguments, settings_from_args, split_assignments


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("circuit", metavar="CIRCUIT", help="built-in circuit name or netlist path")
    p.add_argument("--vary", action="append", required=True, metavar="NAME=SPEC",
                   help="a swept parameter or model choice: LIST (100,1k,10k) or "
                        "START:STOP:COUNT[:log], values in the parameter's unit; repeat for a grid")
    add_engine_arguments(p)
    p.add_argument("--workers", type=int, default=None,
                   metavar="N", help="local engine worker processes (default $SIMLOOP_WORKERS or the CPU count)")
    p.add_argument("--dask", metavar="ADDRESS",
                   help="run the points on a Dask cluster, e.g. tcp://scheduler:8786 (workers need "
                        "ngspice and simloop: the project's container image)")
    p.add_argument("--store", type=Path, metavar="PATH",
                   help="results database (SQLite; default beside --json/--csv, else simloop-results.db)")
    p.add_argument("--fresh", action="store_true", help="ignore stored points and simulate all again")
    p.add_argument("--max-points", type=int, default=1000, metavar="N",
                   help="refuse grids larger than N points (default 1000)")
    p.add_argument("--json", type=Path, metavar="PATH", help="write all points as JSON")
    p.add_argument("--csv", type=Path, metavar="PATH",
                   help="write a tidy CSV: one row per point and harmonic, units in the column names")
    p.add_argument("--plot", type=Path, metavar="PATH",
                   help="write a PNG: chosen harmonics in dBV, dBc and dB from ideal vs the first --vary")
    p.add_argument("--plot-harmonics", default="1,2,3", metavar="N,N",
                   help="harmonic orders to plot (default 1,2,3)")
    p.add_argument("--report", type=Path, metavar="PATH",
                   help="write one self-contained HTML report (points table and figure)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def resolve_workers(workers: int | None) -> int:
    """--workers, else $SIMLOOP_WORKERS, else the CPU count (a malformed variable: one line)."""
    if workers is not None:
        return workers
    raw = os.environ.get("SIMLOOP_WORKERS", str(os.cpu_count() or 1))
    try:
        return int(raw)
    except ValueError:
        raise InputError(f"environment variable SIMLOOP_WORKERS={raw!r} is not a whole number; "
                         "set it to e.g. 2 or give --workers") from None


def default_store(args: argparse.Namespace) -> Path:
    if args.store is not None:
        return args.store
    for out in (args.json, args.csv, args.plot):
        if out is not None:
            return out.with_suffix(".db")
    return Path("simloop-results.db")


def _orders(text: str) -> tuple[int, ...]:
    try:
        orders = tuple(int(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--plot-harmonics {text!r}: give orders like 1,2,3") from None
    if not orders or min(orders) < 0:
        raise InputError(f"--plot-harmonics {text!r}: give orders >= 0 like 1,2,3")
    return orders


def main(args: argparse.Namespace) -> int:
    from ..netlist import load_circuit
    from ..progress import Progress
    from ..store import ResultStore
    from ..sweep import expand_grid, parse_vary, run_sweep

    args.workers = resolve_workers(args.workers)
    from ..sweep import MAX_WORKERS

    if args.workers > MAX_WORKERS:
        raise InputError(f"--workers {args.workers} is over the limit of {MAX_WORKERS}; "
                         "each worker is a process with its own engine")
    if args.workers < 1:
        raise InputError(f"--workers must be at least 1, got {args.workers}")
    if args.max_points < 1:
        raise InputError(f"--max-points must be at least 1, got {args.max_points}")
    template = load_circuit(args.circuit)
    values, choices = split_assignments(template, args.set)
    varies = [parse_vary(text, template) for text in args.vary]
    grid = expand_grid(varies, max_points=args.max_points)
    settings = settings_from_args(args)
    orders = _orders(args.plot_harmonics)
    if max(orders) > settings.harmonics:
        raise InputError(f"--plot-harmonics asks for order {max(orders)} but --harmonics is "
                         f"{settings.harmonics}; raise --harmonics")
    store_path = default_store(args)
    store = ResultStore(store_path)
    try:
        with Progress(len(grid), enabled=False if args.quiet else None) as progress:
            outcome = run_sweep(
                template, grid, fixed_values=values, fixed_choices=choices, settings=settings,
                store=store, fresh=args.fresh, workers=args.workers, dask_address=args.dask,
                on_point=lambda p: progress.update(failed=p["status"] != "ok",
                                                   reused=bool(p.get("reused"))),
            )
    finally:
        store.close()
    points = outcome.points
    names = [v.name for v in varies]
    units = {name: template.parameters[name].unit for name in names if name in template.parameters}
    for point in points:
        shown = ", ".join(f"{k}={v:g}" if not isinstance(v, str) else f"{k}={v}"
                          for k, v in point["varied"].items())
        line = f"{point['index']:>4}  {shown:<40} {point['status']:<11}"
        if point["status"] == "ok" and point.get("metrics"):
            m = point["metrics"]
            line += f" DC {m['dc_v']:.5g} V  RMS {m['rms_v']:.5g} V"
        elif point.get("error"):
            line += f" {point['error']}"
        print(line)
    print(f"{len(points)} points: {outcome.simulated} simulated, {outcome.reused} reused from "
          f"{store_path}, {outcome.failed} failed")
    amplitude = template.amplitude_param
    high = bool(amplitude and any(p["parameters"].get(amplitude, 0) > ELV_PEAK_V for p in points))
    if high:
        print(CAUTION, file=sys.stderr)
    outputs = Outputs("sweep")
    if args.json:
        outputs.attempt(str(args.json), lambda: write_json(args.json, outcome.to_dict()))
    if args.csv:
        from ..report import write_sweep_csv

        outputs.attempt(str(args.csv), lambda: write_sweep_csv(args.csv, points, names, units=units))
    if args.plot:
        def plot() -> None:
            from ..sweep_plots import save_sweep_figure, sweep_figure

            fig = sweep_figure(points, x_name=names[0], line_name=names[1] if len(names) > 1 else None,
                               harmonics=orders, x_unit=units.get(names[0], ""),
                               title=f"{template.name}: {template.title}")
            save_sweep_figure(fig, args.plot)

        outputs.attempt(str(args.plot), plot)
    if args.report:
        def report() -> None:
            from ..html_report import figure_png, sweep_report, write_report
            from ..sweep_plots import sweep_figure

            figures = {}
            if any(p["status"] == "ok" for p in points):
                fig = sweep_figure(points, x_name=names[0],
                                   line_name=names[1] if len(names) > 1 else None,
                                   harmonics=orders, x_unit=units.get(names[0], ""),
                                   title=f"{template.name}: {template.title}")
                figures["harmonics against the swept variable"] = figure_png(fig)
            write_report(args.report, sweep_report(
                outcome.to_dict(), title=f"{template.name}: {template.title}", figures=figures,
                units=units, caution=CAUTION if high else None))

        outputs.attempt(str(args.report), report)
    if outcome.failed:
        outputs.failures.append(f"{outcome.failed} of {len(points)} points failed or did not "
                                "converge; their reasons are in the table above and the outputs")
    return outputs.status()
