"""Progress line: silent off a terminal, the figures it shows, throttling, the final newline.

Time comes from a fake clock (a list of instants) so rates and times left are exact numbers.
"""

from __future__ import annotations

import doctest
import io
import time

import pytest

from simloop import progress
from simloop.errors import InputError
from simloop.progress import MIN_REDRAW_S, Progress, format_duration


class FakeClock:
    """Returns the instants given, one per call; the last one repeats."""

    def __init__(self, *instants: float) -> None:
        self.instants = list(instants)

    def __call__(self) -> float:
        return self.instants.pop(0) if len(self.instants) > 1 else self.instants[0]


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def _frames(text: str) -> list[str]:
    """The successive states of the line (each redraw starts with a carriage return)."""
    return [frame.rstrip() for frame in text.rstrip("\n").split("\r")[1:]]


# --------------------------------------------------------------------------- silence
def test_progress_disabled_writes_nothing():
    out = Terminal()  # a terminal, but --quiet
    with Progress(4, stream=out, enabled=False, clock=FakeClock(0.0, 1.0, 2.0)) as bar:
        bar.update()
        bar.update(failed=True)
    assert out.getvalue() == ""


def test_progress_not_a_tty_writes_nothing():
    out = io.StringIO()  # a pipe or a log file: isatty() is False
    with Progress(2, stream=out, clock=FakeClock(0.0, 1.0, 2.0)) as bar:
        bar.update()
        bar.update()
    assert not bar.enabled
    assert out.getvalue() == ""


def test_progress_tty_enables():
    out = Terminal()
    with Progress(1, stream=out, clock=FakeClock(0.0, 1.0)) as bar:
        bar.update()
    assert bar.enabled
    assert "1/1" in out.getvalue()


# --------------------------------------------------------------------------- content
def test_progress_enabled_shows_counts_and_newline():
    out = io.StringIO()
    clock = FakeClock(0.0, 1.0, 2.0, 3.0)
    with Progress(4, stream=out, enabled=True, clock=clock, catch_up_s=None) as bar:
        bar.update()
        bar.update(failed=True)
        bar.update()
        assert "\n" not in out.getvalue()  # one line, redrawn in place
        last = _frames(out.getvalue())[-1]
        assert "3/4 points" in last
        assert "1 failed" in last and "0 reused" in last
    text = out.getvalue()
    assert text.endswith("\n") and text.count("\n") == 1
    assert all(frame.startswith("[") for frame in _frames(text))


def test_progress_rate_and_eta_from_clock():
    out = io.StringIO()
    # start at t = 10 s; two points reused at once, then two simulated at t = 14 s and 18 s
    clock = FakeClock(10.0, 10.0, 10.0, 14.0, 18.0)
    bar = Progress(10, stream=out, enabled=True, clock=clock, catch_up_s=None)
    with bar:
        bar.update(reused=True)
        bar.update(reused=True)
        assert bar.rate is None and bar.eta_s is None  # nothing simulated yet
        bar.update()
        bar.update(failed=True)
    # 2 simulated points in 8 s: 0.25 points/s; 6 points left at that rate: 24 s
    assert bar.simulated == 2 and bar.elapsed_s == 8.0
    assert bar.rate == 0.25
    assert bar.eta_s == 24.0
    last = _frames(out.getvalue())[-1]
    assert "4/10 points" in last and "2 reused" in last and "1 failed" in last
    assert "0.25 points/s" in last and "ETA 24s" in last


def test_progress_bar_fill():
    out = io.StringIO()
    with Progress(4, stream=out, enabled=True, clock=FakeClock(0.0, 1.0, 2.0, 3.0, 4.0),
                  catch_up_s=None) as bar:
        bar.update()
        bar.update()
        half = _frames(out.getvalue())[-1]
        bar.update()
        bar.update()
    width = progress.BAR_WIDTH
    assert half.startswith("[" + "#" * (width // 2) + "-" * (width // 2) + "]")
    assert _frames(out.getvalue())[-1].startswith("[" + "#" * width + "]")


def test_progress_label_and_done():
    out = io.StringIO()
    with Progress(2, stream=out, enabled=True, label="variants",
                  clock=FakeClock(0.0, 5.0, 10.0)) as bar:
        bar.update()
        bar.update()
    last = _frames(out.getvalue())[-1]
    assert "2/2 variants" in last and "0.2 variants/s" in last and "ETA 0s" in last


# --------------------------------------------------------------------------- throttling
def test_progress_throttles_redraws():
    out = io.StringIO()
    # 20 points finishing 1/64 s apart (exact binary instants): a redraw once 0.1 s has passed
    # since the last one, i.e. after points 7 and 14, besides the initial and the final state
    clock = FakeClock(*[k / 64 for k in range(21)])
    with Progress(20, stream=out, enabled=True, clock=clock, catch_up_s=None) as bar:
        for _ in range(20):
            bar.update()
    counts = [frame.split("] ")[1].split(" ")[0] for frame in _frames(out.getvalue())]
    assert counts == ["0/20", "7/20", "14/20", "20/20"]


def test_progress_redraws_after_interval():
    out = io.StringIO()
    clock = FakeClock(0.0, 0.5 * MIN_REDRAW_S, 1.5 * MIN_REDRAW_S)
    with Progress(5, stream=out, enabled=True, clock=clock, catch_up_s=None) as bar:
        bar.update()  # too soon after the initial draw: skipped
        assert len(_frames(out.getvalue())) == 1
        bar.update()  # 0.15 s after the initial draw: drawn
        assert "2/5" in _frames(out.getvalue())[-1]


def test_progress_catches_up_after_a_skipped_redraw():
    out = io.StringIO()
    clock = FakeClock(0.0, 0.01)  # the update lands inside the redraw interval
    with Progress(5, stream=out, enabled=True, clock=clock, catch_up_s=0.02) as bar:
        bar.update()
        deadline = time.monotonic() + 5.0
        while "1/5" not in out.getvalue() and time.monotonic() < deadline:
            time.sleep(0.01)
        assert "1/5" in _frames(out.getvalue())[-1]  # drawn by the timer, no further update
    assert out.getvalue().endswith("\n")


def test_progress_shorter_line_wipes_the_longer():
    out = io.StringIO()
    clock = FakeClock(0.0, 1.0, 2.0)
    with Progress(3, stream=out, enabled=True, clock=clock, catch_up_s=None) as bar:
        bar.update()
        bar.update()
    raw = out.getvalue().rstrip("\n").split("\r")[1:]
    for before, after in zip(raw, raw[1:]):
        assert len(after) >= len(before)  # padded with spaces where the new text is shorter


def test_progress_more_updates_than_total():
    out = io.StringIO()
    with Progress(1, stream=out, enabled=True, clock=FakeClock(0.0, 1.0, 2.0)) as bar:
        bar.update()
        bar.update()
    assert bar.total == 2 and "2/2" in _frames(out.getvalue())[-1]


def test_progress_bad_total():
    with pytest.raises(InputError, match="whole number >= 0"):
        Progress(-1)
    with pytest.raises(InputError, match="whole number >= 0"):
        Progress(2.5)


def test_progress_newline_after_exception():
    out = io.StringIO()
    with pytest.raises(KeyboardInterrupt):
        with Progress(3, stream=out, enabled=True, clock=FakeClock(0.0, 1.0)) as bar:
            bar.update()
            raise KeyboardInterrupt
    assert out.getvalue().endswith("\n")


def test_format_duration_cases():
    assert format_duration(None) == "--"
    assert format_duration(float("inf")) == "--"
    assert format_duration(59.4) == "59s"
    assert format_duration(61.0) == "1m01s"
    assert format_duration(3599.0) == "59m59s"
    assert format_duration(3 * 3600 + 4 * 60) == "3h04m"


def test_progress_module_examples():
    result = doctest.testmod(progress, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 4 and result.failed == 0
