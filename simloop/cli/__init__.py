"""Command line of simloop: ``simloop COMMAND ...``; one module per command.

Exit codes: 0 success (every limit holds), 1 a limit failed, 2 usage, input or simulation error.
Errors print one line on stderr (``simloop: error: ...``), never a traceback.

Environment variables read by the engine commands:

- ``NGSPICE_LIBRARY_PATH``: the ngspice shared library to load (default ``libngspice.so.0``).
- ``SIMLOOP_TIMEOUT``: wall-clock limit of one engine run [s] (default 120).
- ``SIMLOOP_WORKERS``: engine worker processes (default: CPU count, for sweeps).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from ..errors import SimloopError

#: command name -> (module, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "ideal": ("simloop.cli.ideal_cmd", "closed-form spectrum of an ideal waveform"),
    "run": ("simloop.cli.run_cmd", "simulate a circuit and compare its harmonics with theory"),
    "sweep": ("simloop.cli.sweep_cmd", "sweep load, drive, model or any parameter over a grid"),
    "explain": ("simloop.cli.explain_cmd", "which effect moved each harmonic: one realism at a time"),
    "netlists": ("simloop.cli.netlists_cmd", "list the built-in circuits and their parameters"),
    "demo": ("simloop.cli.demo_cmd", "run the built-in demonstration scenarios"),
    "check": ("simloop.cli.check_cmd", "check design variants against harmonic and output limits"),
}

EXIT_OK = 0
EXIT_LIMIT = 1
EXIT_ERROR = 2


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit with code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_ERROR, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> OneLineParser:
    parser = OneLineParser(
        prog="simloop",
        description=(
            "Harmonics of real rectifiers and switching stages: simulate in ngspice, extract the "
            "periodic steady state, and set each harmonic beside its ideal and drop-corrected "
            "values. Amplitudes are peak values [V or A]; dBV is referred to 1 V rms."
        ),
        epilog=(
            "Exit codes: 0 success, 1 a limit failed, 2 usage, input or simulation error. "
            "Environment: NGSPICE_LIBRARY_PATH (ngspice shared library, default libngspice.so.0), "
            "SIMLOOP_TIMEOUT (seconds per engine run), SIMLOOP_WORKERS (engine processes). "
            "CAUTION: mains-connected rectifiers carry lethal voltages and capacitors keep their "
            "charge after power-off; follow local electrical codes and licensed practice."
        ),
    )
    from .. import __version__

    parser.add_argument("--version", action="version", version=f"simloop {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name, (module, help_text) in COMMANDS.items():
        mod = importlib.import_module(module)
        p = sub.add_parser(name, help=help_text, description=mod.__doc__)
        mod.add_arguments(p)
        p.set_defaults(_handler=mod.main)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``simloop`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_ERROR
    try:
        return int(args._handler(args))
    except SimloopError as exc:
        print(f"simloop {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print(f"simloop {args.command}: interrupted", file=sys.stderr)
        return EXIT_ERROR
    except Exception as exc:  # a bug: still one line; SIMLOOP_DEBUG=1 shows the traceback
        if os.environ.get("SIMLOOP_DEBUG"):
            raise
        print(f"simloop {args.command}: internal error: {type(exc).__name__}: {exc} (a bug: "
              "please report it; SIMLOOP_DEBUG=1 shows the traceback)", file=sys.stderr)
        return EXIT_ERROR
