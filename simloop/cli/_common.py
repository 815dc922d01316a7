"""Helpers shared by the command modules: argument types and output writing."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable

from ..errors import InputError, SimloopError
from ..files import write_atomic, write_json  # noqa: F401  (re-exported for commands)
from ..units import parse_number


def number(what: str, *, positive: bool = False, nonnegative: bool = False) -> Callable[[str], float]:
    """argparse type: a SPICE-style number (``1k``, ``10u``), optionally > 0 or >= 0."""

    def convert(text: str) -> float:
        try:
            value = parse_number(text, what="value")
        except InputError as exc:  # argparse names the option itself ("argument --duty: ...")
            raise argparse.ArgumentTypeError(str(exc).removeprefix("value: ")) from None
        if positive and not value > 0:
            raise argparse.ArgumentTypeError(f"must be > 0, got {text}")
        if nonnegative and value < 0:
            raise argparse.ArgumentTypeError(f"must be >= 0, got {text}")
        return value

    convert.__name__ = what
    return convert


def harmonics_count(text: str, *, limit: int = 10000) -> int:
    """argparse type: the number of harmonics N, 1..limit."""
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"takes a whole number 1..{limit}, got {text!r}") from None
    if not 1 <= n <= limit:
        raise argparse.ArgumentTypeError(f"takes a whole number 1..{limit}, got {n}")
    return n


def engine_harmonics_count(text: str) -> int:
    """argparse type: harmonics of a simulated spectrum, 1..1000."""
    return harmonics_count(text, limit=1000)


class Outputs:
    """Writes each requested output in turn; a failure of one does not stop the others.

    Errors are collected and reported as one line each at the end; ``status`` then is 2.
    """

    def __init__(self, command: str) -> None:
        self.command = command
        self.failures: list[str] = []

    def attempt(self, label: str, action: Callable[[], None]) -> None:
        try:
            action()
        except SimloopError as exc:
            self.failures.append(str(exc))
        except OSError as exc:
            self.failures.append(f"cannot write {label}: {exc}")
        else:
            sys.stdout.flush()  # keep the report and the "wrote" lines in order on a terminal
            print(f"wrote {label}", file=sys.stderr)

    def status(self, ok_code: int = 0) -> int:
        for line in self.failures:
            print(f"simloop {self.command}: error: {line}", file=sys.stderr)
        return 2 if self.failures else ok_code
