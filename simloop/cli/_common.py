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
            value = parse_number(text, what=what)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
        if positive and not value > 0:
            raise argparse.ArgumentTypeError(f"{what} must be > 0, got {text}")
        if nonnegative and value < 0:
            raise argparse.ArgumentTypeError(f"{what} must be >= 0, got {text}")
        return value

    convert.__name__ = what
    return convert


def harmonics_count(text: str) -> int:
    """argparse type: the number of harmonics N, 1..10000."""
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--harmonics takes a whole number 1..10000, got {text!r}") from None
    if not 1 <= n <= 10000:
        raise argparse.ArgumentTypeError(f"--harmonics takes a whole number 1..10000, got {n}")
    return n


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
            print(f"wrote {label}", file=sys.stderr)

    def status(self, ok_code: int = 0) -> int:
        for line in self.failures:
            print(f"simloop {self.command}: error: {line}", file=sys.stderr)
        return 2 if self.failures else ok_code
