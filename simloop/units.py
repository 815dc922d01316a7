"""SPICE-style numbers: ``1k``, ``10u``, ``2meg``, ``4.7e-9``.

Used for every value a user hands in (``--set``, sweep specs, design files). Strict on purpose:
a number, an optional scale suffix, nothing else. NaN and infinity are refused.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

from .errors import InputError

#: SPICE scale suffixes (case-insensitive; ``m`` is milli, ``meg`` is mega, as in SPICE).
#: Values are decimal exponents, applied exactly (``10u`` is 1e-05, not 9.999999999999999e-06).
SCALE_SUFFIXES: dict[str, int] = {
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "m": -3,
    "k": 3,
    "meg": 6,
    "g": 9,
    "t": 12,
}

_NUMBER = re.compile(
    r"(?P<mant>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)(?P<suffix>meg|[fpnumkgt])?",
    re.IGNORECASE | re.ASCII,
)


def parse_number(text: str, *, what: str = "value") -> float:
    """Parse one SPICE-style number.

    Parameters
    ----------
    text : str
        ``"1k"``, ``"10u"``, ``"2meg"``, ``"-3.3"``, ``"4.7e-9"``.
    what : str
        What the number is, for the error message (``"--set RL"``).

    Returns
    -------
    float

    Raises
    ------
    InputError
        On anything else (units such as ``10uF``, NaN, inf, empty text), naming ``what``.

    Examples
    --------
    >>> parse_number("2meg"), parse_number("10u"), parse_number("1.5K")
    (2000000.0, 1e-05, 1500.0)
    """
    s = str(text).strip()
    m = _NUMBER.fullmatch(s)
    if m is None:
        raise InputError(
            f"{what}: {text!r} is not a number; write digits with an optional scale suffix "
            "f p n u m k meg g t (e.g. 1k, 10u, 2meg), no units"
        )
    suffix = m.group("suffix")
    mantissa = Decimal(m.group("mant"))  # ASCII digits only (re.ASCII above)
    if suffix:
        mantissa = mantissa.scaleb(SCALE_SUFFIXES[suffix.lower()])
    try:
        value = float(mantissa)
    except OverflowError:  # pragma: no cover - Decimal gives inf, not an exception
        value = math.inf
    if not math.isfinite(value):
        raise InputError(f"{what}: {text!r} is out of the range of finite numbers")
    return value


def format_number(value: float, digits: int = 4) -> str:
    """Format a value with an engineering scale suffix, SPICE-readable (``4.7k``, ``10u``)."""
    if value == 0 or not math.isfinite(value):
        return repr(float(value))
    exp3 = int(math.floor(math.log10(abs(value)) / 3))
    exp3 = max(-5, min(4, exp3))
    names = {-5: "f", -4: "p", -3: "n", -2: "u", -1: "m", 0: "", 1: "k", 2: "meg", 3: "g", 4: "t"}
    scaled = float(f"{value / 10.0 ** (3 * exp3):.{digits}g}")
    if abs(scaled) >= 1000 and exp3 < 4:  # rounding carried into the next prefix (0.99999 -> 1)
        exp3 += 1
        scaled = float(f"{value / 10.0 ** (3 * exp3):.{digits}g}")
    return f"{scaled:.{digits}g}{names[exp3]}"


_SI_PREFIXES = {-4: "p", -3: "n", -2: "u", -1: "m", 0: "", 1: "k", 2: "M", 3: "G", 4: "T"}


def format_si(value: float, unit: str, digits: int = 4) -> str:
    """Format a value with an SI prefix and its unit, for people (``10 MHz``, ``4.7 kohm``)."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    exp3 = max(-4, min(4, int(math.floor(math.log10(abs(value)) / 3))))
    return f"{value / 10.0 ** (3 * exp3):.{digits}g} {_SI_PREFIXES[exp3]}{unit}"
