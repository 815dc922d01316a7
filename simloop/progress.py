"""A one-line progress display for sweeps on a terminal.

``Progress`` redraws a single line in place (carriage return, no cursor codes): a bar, points
done of the total, how many failed and how many were reused from the store, the simulation rate
and the time left. It draws at most ten times a second, ends with a newline, and writes nothing
at all when the stream is not a terminal or when it is switched off (``--quiet``), so logs and
pipes stay clean.
"""

from __future__ import annotations

import math
import sys
import threading
import time
from collections.abc import Callable
from typing import TextIO

from .errors import InputError

__all__ = ["BAR_WIDTH", "MIN_REDRAW_S", "Progress", "format_duration"]

#: Characters of the bar.
BAR_WIDTH = 24

#: Shortest time between two redraws [s] (at most ~10 redraws per second).
MIN_REDRAW_S = 0.1


def format_duration(seconds: float | None) -> str:
    """A time left for people: ``45s``, ``3m05s``, ``2h07m``; ``--`` when unknown.

    Examples
    --------
    >>> [format_duration(s) for s in (None, 0.4, 45.2, 185.0, 7620.0)]
    ['--', '0s', '45s', '3m05s', '2h07m']
    """
    if seconds is None or not math.isfinite(seconds):
        return "--"
    whole = int(round(max(seconds, 0.0)))
    if whole < 60:
        return f"{whole}s"
    if whole < 3600:
        return f"{whole // 60}m{whole % 60:02d}s"
    return f"{whole // 3600}h{(whole % 3600) // 60:02d}m"


class Progress:
    """Progress of a sweep on one self-overwriting terminal line.

    Parameters
    ----------
    total : int
        Points the sweep will finish (>= 0).
    stream : text stream, optional
        Where to draw; None (the default) means ``sys.stderr`` at construction time.
    enabled : bool or None
        None: draw only if ``stream.isatty()``; False: draw nothing (``--quiet``); True: draw.
    label : str
        What is counted (``"points"``).
    clock : callable
        Monotonic time source [s]; injectable for tests.
    catch_up_s : float or None
        An update that falls inside the redraw interval is drawn this many (real) seconds
        later by a timer thread, so the line never stays behind while a slow point runs;
        None: no timer (the line then catches up at the next update or on exit).

    Raises
    ------
    InputError
        ``total`` not a whole number >= 0.

    Notes
    -----
    With ``k`` points done, ``r`` of them reused from the store and ``t`` seconds since the
    start, the rate counts only simulated points, ``rate = (k - r) / t`` [points/s] (a reused
    point costs no engine time), and the time left assumes the rest all need simulating:
    ``eta = (total - k) / rate`` [s]. Failed points took engine time and count as simulated.

    Examples
    --------
    >>> import io
    >>> ticks = iter([0.0, 1.0, 2.0, 3.0, 4.0])
    >>> out = io.StringIO()
    >>> with Progress(4, stream=out, enabled=True, clock=lambda: next(ticks)) as bar:
    ...     bar.update()
    ...     bar.update(failed=True)
    >>> print(bar.done, bar.failed, f"{bar.rate:.2f} points/s, {bar.eta_s:.1f} s left")
    2 1 1.00 points/s, 2.0 s left
    """

    def __init__(
        self,
        total: int,
        *,
        stream: TextIO | None = None,
        enabled: bool | None = None,
        label: str = "points",
        clock: Callable[[], float] = time.monotonic,
        catch_up_s: float | None = MIN_REDRAW_S,
    ) -> None:
        if isinstance(total, bool) or not isinstance(total, int) or total < 0:
            raise InputError(f"progress total must be a whole number >= 0, got {total!r}")
        self.total = total
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            try:
                enabled = bool(isatty()) if callable(isatty) else False
            except (OSError, ValueError):  # a closed or detached stream
                enabled = False
        self.enabled = bool(enabled)
        self.label = str(label)
        self._clock = clock
        self._start = float(clock())
        self._now = self._start
        self._last_draw: float | None = None
        self._width = 0
        self._text = ""
        self._catch_up_s = catch_up_s
        self._timer: threading.Timer | None = None
        self._lock = threading.Lock()
        self._closed = False
        self.done = 0
        self.failed = 0
        self.reused = 0

    # ---------------------------------------------------------------- figures
    @property
    def simulated(self) -> int:
        """Points finished by the engine (failed ones included), not taken from the store."""
        return self.done - self.reused

    @property
    def elapsed_s(self) -> float:
        """Seconds from the start to the last update [s]."""
        return self._now - self._start

    @property
    def rate(self) -> float | None:
        """Simulated points per second [1/s]; None before the first one or with no time passed."""
        if self.simulated <= 0 or self.elapsed_s <= 0:
            return None
        return self.simulated / self.elapsed_s

    @property
    def eta_s(self) -> float | None:
        """Estimated seconds left [s]: the remaining points at the simulation rate."""
        if self.done >= self.total:
            return 0.0
        rate = self.rate
        return None if rate is None else (self.total - self.done) / rate

    def line(self) -> str:
        """The status line as drawn (without the carriage return)."""
        fraction = 1.0 if self.total == 0 else min(self.done / self.total, 1.0)
        filled = int(round(fraction * BAR_WIDTH))
        bar = "#" * filled + "-" * (BAR_WIDTH - filled)
        rate = self.rate
        speed = "--" if rate is None else f"{rate:.3g} {self.label}/s"
        return (f"[{bar}] {self.done}/{self.total} {self.label}  {self.failed} failed  "
                f"{self.reused} reused  {speed}  ETA {format_duration(self.eta_s)}")

    # ---------------------------------------------------------------- drawing
    def _cancel_timer(self) -> None:
        if self._timer is not None:
            self._timer.cancel()
            self._timer = None

    def _catch_up(self) -> None:
        with self._lock:
            if self._closed:
                return
            self._timer = None
            self._draw(force=True)

    def _draw(self, *, force: bool = False) -> None:
        """Draw the line (caller holds the lock, or no timer can exist yet)."""
        if not self.enabled:
            return
        if (not force and self._last_draw is not None
                and self._now - self._last_draw < MIN_REDRAW_S):
            if self._catch_up_s is not None and self._timer is None:
                self._timer = threading.Timer(self._catch_up_s, self._catch_up)
                self._timer.daemon = True
                self._timer.start()
            return
        self._cancel_timer()
        text = self.line()
        if text == self._text:
            return
        pad = max(self._width - len(text), 0)  # wipe what a longer previous line left
        self.stream.write("\r" + text + " " * pad)
        self.stream.flush()
        self._width = len(text)
        self._text = text
        self._last_draw = self._now

    def update(self, *, failed: bool = False, reused: bool = False) -> None:
        """Count one finished point and redraw (unless drawn less than 0.1 s ago).

        Parameters
        ----------
        failed : bool
            The point failed or did not converge.
        reused : bool
            The point came from the results store, not from the engine.

        Notes
        -----
        More updates than ``total`` raise the total rather than the error: a progress line
        must never stop a sweep.
        """
        with self._lock:
            self.done += 1
            self.failed += int(bool(failed))
            self.reused += int(bool(reused))
            self.total = max(self.total, self.done)
            self._now = float(self._clock())
            self._draw(force=self.done == self.total)

    def close(self) -> None:
        """Draw the final state and end the line (what leaving the ``with`` block does)."""
        with self._lock:
            self._cancel_timer()
            self._closed = True
            if self.enabled and self._last_draw is not None:
                self._draw(force=True)
                self.stream.write("\n")
                self.stream.flush()
                self._last_draw = None

    def __enter__(self) -> Progress:
        with self._lock:
            self._draw(force=True)
        return self

    def __exit__(self, *exc_info: object) -> bool:
        self.close()
        return False
