"""Check design variants against their limits: every limit at every corner, for CI.

Each DESIGN.toml names a circuit, fixed parameters, corners (a grid and/or a list) and limits on
dc_v, rms_v, ripple_v, peak_v, trough_v, thd, conduction_angle_deg and, per harmonic N, hN_v,
hN_dbv, hN_dbc, hN_delta_db, hN_efficiency (format: DEVELOPERS.md, "Design files"). All files are
validated before anything runs; each error names the file, line and key. The corners run as a
sweep (local engine workers or --dask) and every point is kept in the results store, so a re-check
after an unrelated change simulates nothing. A DESIGN may also be a folder (its *.toml files) or a
quoted glob pattern (expanded here, for shells and containers that leave it alone).

Exit codes: 0 every limit holds at every corner; 1 some limit fails; 2 a design file is invalid,
a simulation failed or found no steady state, or a metric is not available at some corner.
"""

from __future__ import annotations

import argparse
import glob
import sys
from pathlib import Path

from ..errors import InputError, SimloopError
from ._common import Outputs


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("designs", nargs="+", metavar="DESIGN.toml",
                   help="design files, folders of them, or glob patterns")
    p.add_argument("--junit", type=Path, metavar="PATH",
                   help="write JUnit XML: one test case per design x corner x limit")
    p.add_argument("--summary", type=Path, metavar="PATH",
                   help="write a Markdown summary (for a pull-request comment)")
    p.add_argument("--json", type=Path, metavar="PATH", help="write every verdict as JSON")
    p.add_argument("--report", type=Path, metavar="PATH",
                   help="write one self-contained HTML report of every verdict")
    p.add_argument("--workers", type=int,
                   default=None,
                   metavar="N", help="local engine worker processes (default $SIMLOOP_WORKERS or "
                                     "the CPU count)")
    p.add_argument("--dask", metavar="ADDRESS",
                   help="run the corners on a Dask cluster, e.g. tcp://scheduler:8786")
    p.add_argument("--store", type=Path, default=Path("simloop-results.db"), metavar="PATH",
                   help="results database reused between checks (SQLite; default "
                        "simloop-results.db, shared with simloop sweep)")
    p.add_argument("--fresh", action="store_true", help="ignore stored points and simulate all again")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def expand_designs(items: list[str]) -> list[Path]:
    """Design paths from the arguments: files as given, folders' ``*.toml``, glob patterns.

    Raises
    ------
    InputError
        A folder without ``.toml`` files or a pattern that matches nothing.
    """
    paths: list[Path] = []
    for item in items:
        path = Path(item)
        if path.is_dir():
            found = sorted(path.glob("*.toml"))
            if not found:
                raise InputError(f"folder {item} holds no .toml design files")
            paths.extend(found)
        elif not path.exists() and glob.has_magic(item):
            found = sorted(Path(p) for p in glob.glob(item))
            if not found:
                raise InputError(f"no design file matches {item!r}; check the pattern")
            paths.extend(found)
        else:
            paths.append(path)  # a missing file is reported by load_design
    unique: list[Path] = []
    for p in paths:
        if p not in unique:
            unique.append(p)
    return unique


def main(args: argparse.Namespace) -> int:
    from ..design import check_designs, exit_status, load_design
    from ..progress import Progress
    from ..store import ResultStore
    from ..verdicts_out import (totals_line, verdict_table, write_check_json, write_junit,
                                write_summary)
    from .run_cmd import CAUTION

    from .sweep_cmd import resolve_workers

    args.workers = resolve_workers(args.workers)
    if args.workers < 1:
        raise InputError(f"--workers must be at least 1, got {args.workers}")
    designs, problems = [], []
    for path in expand_designs(args.designs):
        try:
            designs.append(load_design(path))
        except SimloopError as exc:
            problems.append(str(exc))
    if problems:  # nothing runs unless every file is valid
        for line in problems:
            print(f"simloop check: error: {line}", file=sys.stderr)
        return 2
    total = sum(len(d.corners) for d in designs)
    store = ResultStore(args.store)
    try:
        with Progress(total, enabled=False if args.quiet else None, label="corners") as progress:
            outcomes = check_designs(
                designs, store=store, workers=args.workers, dask_address=args.dask,
                fresh=args.fresh,
                on_point=lambda p: progress.update(failed=p["status"] != "ok",
                                                   reused=bool(p.get("reused"))),
            )
    finally:
        store.close()
    code = exit_status(outcomes)
    for outcome in outcomes:
        print(verdict_table(outcome))
        print()
    print(totals_line(outcomes, code))
    if any(_above_elv(o) for o in outcomes):
        print(CAUTION, file=sys.stderr)
    outputs = Outputs("check")
    if args.junit:
        outputs.attempt(str(args.junit), lambda: write_junit(args.junit, outcomes))
    if args.summary:
        outputs.attempt(str(args.summary),
                        lambda: write_summary(args.summary, outcomes, exit_code=code))
    if args.json:
        outputs.attempt(str(args.json),
                        lambda: write_check_json(args.json, outcomes, exit_code=code))
    if args.report:
        def report() -> None:
            from ..html_report import check_report, write_report
            from .run_cmd import CAUTION, ELV_PEAK_V

            rows = [v.as_dict() for o in outcomes for v in o.verdicts]
            high = any(
                p.get("amplitude_v") is not None and p["amplitude_v"] > ELV_PEAK_V
                for o in outcomes for p in o.points)
            write_report(args.report, check_report(
                rows, title="simloop check: " + ", ".join(o.design.name for o in outcomes),
                caution=CAUTION if high else None))

        outputs.attempt(str(args.report), report)
    return outputs.status(code)


def _above_elv(outcome) -> bool:
    from .run_cmd import ELV_PEAK_V

    amplitude = outcome.design.template.amplitude_param
    return bool(amplitude) and any(
        float((p.get("parameters") or {}).get(amplitude, 0.0)) > ELV_PEAK_V for p in outcome.points)
