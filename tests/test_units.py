"""SPICE-style numbers. Scale factors as in the ngspice user manual, "Basic lexicon / scale
factors" (f p n u m k meg g t; m is milli, meg is mega) [from memory]."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from simloop.errors import InputError
from simloop.units import format_number, parse_number


@pytest.mark.parametrize(
    ("text", "value"),
    [("1k", 1e3), ("10u", 1e-5), ("2meg", 2e6), ("2MEG", 2e6), ("4.7e-9", 4.7e-9), ("1m", 1e-3),
     ("3.3", 3.3), ("-5", -5.0), (".5p", 0.5e-12), ("1G", 1e9), ("7T", 7e12), ("1e3k", 1e6),
     ("100f", 1e-13), ("47n", 47e-9)],
)
def test_parse_number_spice_suffixes(text, value):
    assert parse_number(text) == pytest.approx(value, rel=1e-15)


@pytest.mark.parametrize("text", ["", "k", "10uF", "1k5", "nan", "inf", "1e999", "1,5", "{x}",
                                  "1k;.control", "0x10", "1 k", "--1"])
def test_parse_number_refuses(text):
    with pytest.raises(InputError, match="RL"):
        parse_number(text, what="RL")


@given(st.floats(min_value=-1e14, max_value=1e14, allow_nan=False).filter(lambda x: abs(x) > 1e-14))
def test_format_number_round_trips(x):
    assert parse_number(format_number(x, digits=15)) == pytest.approx(x, rel=1e-13)


def test_format_number_rounding_carries_into_next_prefix():
    assert format_number(0.99999) == "1"
    assert format_number(999999.0) == "1meg"
