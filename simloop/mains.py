"""Line-current harmonics of a mains front end against IEC 61000-3-2 Class A and Class D limits.

Pure functions on :class:`~simloop.spectrum.Spectrum` objects. The limit values are those of
IEC 61000-3-2 as reproduced in secondary sources; they were written down from memory and have
not been checked against the text of the standard. Every verdict carries :data:`SOURCE_NOTE`
saying so: confirm the values against the edition that applies to the product before relying on
a pass.

Limits are rms amperes; a :class:`Spectrum` holds peak amplitudes, so the current of order n is
compared as ``I_n = A_n / sqrt(2)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal, get_args

import numpy as np

from .errors import InputError
from .spectrum import Spectrum

__all__ = [
    "CLASS_D_POWER_RANGE_W",
    "LIMIT_CLASSES",
    "MAX_LIMIT_ORDER",
    "SOURCE_NOTE",
    "LimitClass",
    "MainsVerdict",
    "OrderVerdict",
    "active_power",
    "class_a_limit",
    "class_d_limit",
    "displacement_factor",
    "line_current_check",
    "power_factor",
]

#: Where the limit values come from, and how far they can be trusted. Carried by every verdict.
SOURCE_NOTE = (
    "IEC 61000-3-2 limits as reproduced in secondary sources (values from memory, not checked "
    "against the standard's text); confirm against the edition that applies to your product"
)

LimitClass = Literal["A", "D"]
"""Equipment class of IEC 61000-3-2 whose limit table is applied."""
LIMIT_CLASSES: tuple[str, ...] = get_args(LimitClass)

#: Highest harmonic order the limit tables list.
MAX_LIMIT_ORDER = 40

#: Class D limits are given per watt for 75 W < P <= 600 W (secondary sources, from memory).
CLASS_D_POWER_RANGE_W = (75.0, 600.0)

# Class A [A rms], orders with a tabulated value; 15..39 odd and 8..40 even follow a 1/n rule.
_CLASS_A_ODD = {3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21}
_CLASS_A_EVEN = {2: 1.08, 4: 0.43, 6: 0.30}
# Class D [mA/W], odd orders only; 13..39 odd follow 3.85/n.
_CLASS_D_ODD_MA_PER_W = {3: 3.4, 5: 1.9, 7: 1.0, 9: 0.5, 11: 0.35}


# --------------------------------------------------------------------------- validation
def _order(n: Any) -> int:
    if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)):
        raise InputError(f"harmonic order must be an integer >= 1, got {n!r}")
    if n < 1:
        raise InputError(f"harmonic order must be >= 1, got {n}")
    return int(n)


def _power(value: Any, what: str) -> float:
    if isinstance(value, (bool, np.bool_)):
        raise InputError(f"{what} must be a number of watts, got {value!r}")
    try:
        p = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number of watts, got {value!r}") from None
    if not math.isfinite(p) or p < 0:
        raise InputError(f"{what} must be a finite number of watts >= 0, got {value!r}")
    return p


def _limit_class(value: Any) -> str:
    if value not in LIMIT_CLASSES:
        raise InputError(
            f"limit class must be one of {', '.join(LIMIT_CLASSES)}, got {value!r}"
        )
    return str(value)


def _same_fundamental(voltage: Spectrum, current: Spectrum) -> None:
    if not math.isclose(voltage.fundamental_hz, current.fundamental_hz, rel_tol=1e-12):
        raise InputError(
            f"supply voltage is at {voltage.fundamental_hz:g} Hz but the line current at "
            f"{current.fundamental_hz:g} Hz; give both spectra on the same fundamental"
        )


# --------------------------------------------------------------------------- limit tables
def class_a_limit(n: int) -> float | None:
    """IEC 61000-3-2 Class A limit of the line current at harmonic order n [A rms].

    Parameters
    ----------
    n : int
        Harmonic order, >= 1.

    Returns
    -------
    float or None
        Maximum permissible rms current of order n [A]; None for n = 1 (the fundamental is not
        limited) and n > 40 (beyond the table).

    Raises
    ------
    InputError
        n not an integer or below 1.

    Notes
    -----
    Odd orders: 2.30 A (3), 1.14 A (5), 0.77 A (7), 0.40 A (9), 0.33 A (11), 0.21 A (13),
    and for 15 <= n <= 39

    .. math:: I_{n,\\max} = 0.15\\,\\frac{15}{n}\\ \\mathrm{A}.

    Even orders: 1.08 A (2), 0.43 A (4), 0.30 A (6), and for 8 <= n <= 40

    .. math:: I_{n,\\max} = 0.23\\,\\frac{8}{n}\\ \\mathrm{A}.

    These are the values of IEC 61000-3-2 as reproduced in secondary sources, written down from
    memory and not checked against the standard's text (see :data:`SOURCE_NOTE`).

    References
    ----------
    .. [1] IEC 61000-3-2, *Electromagnetic compatibility (EMC) - Part 3-2: Limits - Limits for
       harmonic current emissions (equipment input current <= 16 A per phase)*, Table 1 (Class A),
       as reproduced in secondary sources; edition and values cited from memory.

    Examples
    --------
    The 21st-harmonic allowance of a 230 V bench power supply tested as Class A:

    >>> print(f"{class_a_limit(21):.5f} A rms")
    0.10714 A rms
    >>> print(class_a_limit(1), class_a_limit(41))
    None None
    """
    n = _order(n)
    if n == 1 or n > MAX_LIMIT_ORDER:
        return None
    if n % 2:
        return _CLASS_A_ODD[n] if n in _CLASS_A_ODD else 0.15 * 15.0 / n
    return _CLASS_A_EVEN[n] if n in _CLASS_A_EVEN else 0.23 * 8.0 / n


def class_d_limit(n: int, *, power_w: float) -> float | None:
    """IEC 61000-3-2 Class D limit of the line current at harmonic order n [A rms].

    Parameters
    ----------
    n : int
        Harmonic order, >= 1.
    power_w : float
        Active input power P of the equipment [W], 75 W < P <= 600 W.

    Returns
    -------
    float or None
        Maximum permissible rms current of order n [A]: the per-watt value times P, but never
        above the Class A value of the same order. None for n = 1, for even n (the Class D table
        lists odd orders only) and for n > 39.

    Raises
    ------
    InputError
        n not an integer or below 1; power negative, not finite, or outside 75 W < P <= 600 W
        (the range for which the per-watt Class D limits are given).

    Notes
    -----
    Per-watt limits [mA/W]: 3.4 (3), 1.9 (5), 1.0 (7), 0.5 (9), 0.35 (11), and for odd
    13 <= n <= 39 3.85/n. The limit in amperes is

    .. math:: I_{n,\\max} = \\min\\left(10^{-3}\\,k_n P,\\ I^{(A)}_{n,\\max}\\right),

    with k_n the per-watt value and I^(A) the Class A limit (:func:`class_a_limit`). Near 600 W
    the Class A value binds from n = 15 up (0.6 x 3.85/n = 2.31/n A against 2.25/n A).

    These are the values of IEC 61000-3-2 as reproduced in secondary sources, written down from
    memory and not checked against the standard's text (see :data:`SOURCE_NOTE`).

    References
    ----------
    .. [1] IEC 61000-3-2, Table 3 (Class D), as reproduced in secondary sources; edition and
       values cited from memory.

    Examples
    --------
    A 230 V, 100 W bench supply front end (a bridge and a reservoir capacitor), Class D:

    >>> print(f"I3 <= {class_d_limit(3, power_w=100.0):.3f} A, "
    ...       f"I13 <= {class_d_limit(13, power_w=100.0):.5f} A rms")
    I3 <= 0.340 A, I13 <= 0.02962 A rms
    >>> print(class_d_limit(4, power_w=100.0))
    None
    """
    n = _order(n)
    p = _power(power_w, "Class D power power_w")
    low, high = CLASS_D_POWER_RANGE_W
    if not low < p <= high:
        raise InputError(
            f"Class D per-watt limits apply for {low:g} W < P <= {high:g} W (IEC 61000-3-2 as "
            f"reproduced in secondary sources), got {p:g} W; give the active input power in range"
        )
    if n == 1 or n % 2 == 0 or n > MAX_LIMIT_ORDER:
        return None
    per_w_ma = _CLASS_D_ODD_MA_PER_W.get(n, 3.85 / n)
    class_a = class_a_limit(n)
    assert class_a is not None  # every odd order 3..39 has a Class A value
    return min(per_w_ma * 1e-3 * p, class_a)


# --------------------------------------------------------------------------- power quantities
def active_power(voltage: Spectrum, current: Spectrum) -> float:
    """Average power carried by a voltage and current given as spectra [W].

    Parameters
    ----------
    voltage : Spectrum
        Voltage across the port [V].
    current : Spectrum
        Current into the port [A], same fundamental.

    Returns
    -------
    float
        P = V0 I0 + sum_n (1/2) V_n I_n cos(psi_v,n - psi_i,n) over the orders both spectra hold
        [W]; positive when the port absorbs power.

    Raises
    ------
    InputError
        Different fundamentals.

    Notes
    -----
    With v = V0 + sum V_n cos(n w0 t - psi_v,n) and i likewise, the mean of v i over a period
    keeps only products of equal order (orthogonality of the harmonics):

    .. math:: P = V_0 I_0 + \\sum_{n\\ge1} \\tfrac12 V_n I_n \\cos(\\psi_{v,n} - \\psi_{i,n}).

    Orders held by only one of the spectra contribute nothing (their product with a missing
    component is taken as zero).

    References
    ----------
    .. [1] Parseval's relation for Fourier series, e.g. M. R. Spiegel, *Mathematical Handbook of
       Formulas and Tables*, Schaum's Outline Series (cited from memory).

    Examples
    --------
    325 V peak mains, 0.6 A peak current lagging by 30 degrees:

    >>> v = Spectrum(50.0, [0.0, 325.0], [0.0, 0.0])
    >>> i = Spectrum(50.0, [0.0, 0.6], [0.0, np.radians(30.0)])
    >>> print(f"{active_power(v, i):.2f} W")
    84.44 W
    """
    _same_fundamental(voltage, current)
    n = min(voltage.harmonics, current.harmonics)
    dv = voltage.phase_rad[1 : n + 1] - current.phase_rad[1 : n + 1]
    ac = 0.5 * np.sum(voltage.amplitude[1 : n + 1] * current.amplitude[1 : n + 1] * np.cos(dv))
    return float(voltage.dc * current.dc + ac)


def power_factor(voltage: Spectrum, current: Spectrum) -> float:
    """Power factor P / (V_rms I_rms) of a port [-].

    Parameters
    ----------
    voltage, current : Spectrum
        As :func:`active_power`.

    Returns
    -------
    float
        lambda = P / (V_rms I_rms), with the rms values of the truncated series (Parseval).

    Raises
    ------
    InputError
        Different fundamentals, or a zero rms voltage or current (no power factor).

    Notes
    -----
    .. math:: \\lambda = \\frac{P}{V_{rms} I_{rms}}.

    With a sinusoidal supply and no DC it factors into displacement and distortion parts,
    lambda = cos(phi_1) / sqrt(1 + THD_i^2) (common practice).

    References
    ----------
    .. [1] IEEE Std 1459, definitions of power quantities under non-sinusoidal conditions
       (cited from memory).

    Examples
    --------
    The same 30-degree lagging load:

    >>> v = Spectrum(50.0, [0.0, 325.0], [0.0, 0.0])
    >>> i = Spectrum(50.0, [0.0, 0.6], [0.0, np.radians(30.0)])
    >>> print(f"{power_factor(v, i):.4f}")
    0.8660
    """
    p = active_power(voltage, current)
    s = voltage.rms * current.rms
    if not s > 0:
        raise InputError("power factor needs a non-zero rms voltage and current")
    return p / s


def displacement_factor(voltage: Spectrum, current: Spectrum) -> float:
    """Displacement factor cos(phi_1) between fundamental voltage and current [-].

    Parameters
    ----------
    voltage, current : Spectrum
        As :func:`active_power`.

    Returns
    -------
    float
        cos(psi_v,1 - psi_i,1).

    Raises
    ------
    InputError
        Different fundamentals, or a zero fundamental in either spectrum (no angle).

    Notes
    -----
    .. math:: \\cos\\varphi_1 = \\cos(\\psi_{i,1} - \\psi_{v,1}),

    phi_1 > 0 when the current lags. Harmonics do not enter.

    References
    ----------
    .. [1] IEEE Std 1459 (cited from memory).

    Examples
    --------
    >>> v = Spectrum(50.0, [0.0, 325.0], [0.0, 0.0])
    >>> i = Spectrum(50.0, [0.0, 0.6, 0.3], [0.0, np.radians(30.0), 0.0])
    >>> print(f"{displacement_factor(v, i):.4f}")
    0.8660
    """
    _same_fundamental(voltage, current)
    if not (voltage.amplitude[1] > 0 and current.amplitude[1] > 0):
        raise InputError("displacement factor needs a non-zero fundamental in voltage and current")
    return float(math.cos(current.phase_rad[1] - voltage.phase_rad[1]))


# --------------------------------------------------------------------------- verdicts
@dataclass(frozen=True, slots=True)
class OrderVerdict:
    """The line current of one harmonic order against its limit.

    Attributes
    ----------
    order : int
        Harmonic order n.
    current_a_rms : float
        I_n = A_n / sqrt(2) [A rms].
    limit_a_rms : float or None
        The limit [A rms]; None where the table gives none (the order passes).
    margin_a : float or None
        limit - I_n [A]; negative means over the limit.
    margin_db : float or None
        20 log10(limit / I_n) [dB]; positive means under the limit; None where there is no
        limit or the current is zero (unbounded margin).
    passed : bool
        I_n <= limit (True where there is no limit).
    """

    order: int
    current_a_rms: float
    limit_a_rms: float | None
    margin_a: float | None
    margin_db: float | None
    passed: bool

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready row: ``order``, ``current_a_rms``, ``limit_a_rms``, ``margin_a``,
        ``margin_db``, ``passed``."""
        return {
            "order": self.order,
            "current_a_rms": self.current_a_rms,
            "limit_a_rms": self.limit_a_rms,
            "margin_a": self.margin_a,
            "margin_db": self.margin_db,
            "passed": self.passed,
        }


@dataclass(frozen=True, slots=True)
class MainsVerdict:
    """A line-current spectrum checked against one IEC 61000-3-2 class.

    Attributes
    ----------
    limit_class : {"A", "D"}
        Class whose limits were applied.
    power_w : float or None
        Power the Class D limits were scaled by [W] (None for Class A unless given).
    power_from_spectra : bool
        True when ``power_w`` was computed from the voltage and current spectra.
    rows : tuple of OrderVerdict
        Orders 2..max_order.
    passed : bool
        Every order passed.
    worst_order : int or None
        Order with the smallest margin in dB (the largest I_n / limit); None if no order has
        both a limit and a current.
    line_current_a_rms : float
        RMS of the whole current spectrum [A].
    active_power_w : float or None
        P from the two spectra [W]; None without a voltage spectrum.
    power_factor : float or None
        P / (V_rms I_rms); None without a voltage spectrum.
    displacement_factor : float or None
        cos(phi_1); None without a voltage spectrum.
    source_note : str
        :data:`SOURCE_NOTE`.
    """

    limit_class: str
    power_w: float | None
    power_from_spectra: bool
    rows: tuple[OrderVerdict, ...]
    passed: bool
    worst_order: int | None
    line_current_a_rms: float
    active_power_w: float | None
    power_factor: float | None
    displacement_factor: float | None
    source_note: str = SOURCE_NOTE

    def failures(self) -> tuple[OrderVerdict, ...]:
        """The rows over their limit."""
        return tuple(r for r in self.rows if not r.passed)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready verdict (units in the keys), with the rows under ``orders``."""
        return {
            "limit_class": self.limit_class,
            "power_w": self.power_w,
            "power_from_spectra": self.power_from_spectra,
            "passed": self.passed,
            "worst_order": self.worst_order,
            "line_current_a_rms": self.line_current_a_rms,
            "active_power_w": self.active_power_w,
            "power_factor": self.power_factor,
            "displacement_factor": self.displacement_factor,
            "source_note": self.source_note,
            "orders": [r.to_dict() for r in self.rows],
        }


def _order_verdict(n: int, current_a_rms: float, limit: float | None) -> OrderVerdict:
    if limit is None:
        return OrderVerdict(n, current_a_rms, None, None, None, True)
    margin_db = None if current_a_rms == 0.0 else 20.0 * math.log10(limit / current_a_rms)
    return OrderVerdict(
        n, current_a_rms, limit, limit - current_a_rms, margin_db, current_a_rms <= limit
    )


def line_current_check(
    current: Spectrum,
    *,
    supply_voltage: Spectrum | None,
    limit_class: LimitClass,
    power_w: float | None = None,
    max_order: int = MAX_LIMIT_ORDER,
) -> MainsVerdict:
    """Check a line-current spectrum against the IEC 61000-3-2 Class A or Class D limits.

    Parameters
    ----------
    current : Spectrum
        Line current drawn from the mains [A], peak amplitudes, holding at least ``max_order``
        harmonics.
    supply_voltage : Spectrum or None
        Mains voltage at the same terminals [V] (same fundamental); gives the active power,
        power factor and displacement factor. None: those are not reported.
    limit_class : {"A", "D"}
        Equipment class.
    power_w : float or None
        Active input power [W] scaling the Class D limits (75 W < P <= 600 W). None: computed
        from the two spectra (Class D then needs ``supply_voltage``). Recorded, not used, for
        Class A.
    max_order : int
        Highest order checked, 2..40.

    Returns
    -------
    MainsVerdict
        One :class:`OrderVerdict` per order 2..max_order, the overall verdict and the power
        quantities, carrying :data:`SOURCE_NOTE`.

    Raises
    ------
    InputError
        Unknown class; max_order outside 2..40 or above the harmonics the current holds (an
        unchecked order would read as a pass); negative power; Class D without power_w or a
        voltage; Class D power out of range; different fundamentals.

    Notes
    -----
    Limits are rms amperes, so the current of order n is I_n = A_n / sqrt(2). Per order the
    margin is limit - I_n [A] and 20 log10(limit / I_n) [dB]. Where the voltage is given:

    .. math:: P = V_0 I_0 + \\sum_n \\tfrac12 V_n I_n \\cos(\\psi_{v,n} - \\psi_{i,n}),\\quad
              \\lambda = \\frac{P}{V_{rms} I_{rms}},\\quad \\cos\\varphi_1 = \\cos(\\psi_{i,1} -
              \\psi_{v,1}).

    The standard is written for 220-240 V (and 50/60 Hz) mains; nothing here checks the supply.
    The limit values are from secondary sources, written down from memory (:data:`SOURCE_NOTE`).

    References
    ----------
    .. [1] IEC 61000-3-2, Tables 1 (Class A) and 3 (Class D), as reproduced in secondary
       sources; edition and values cited from memory.

    Examples
    --------
    A 230 V, 50 Hz, 100 W bench supply front end (capacitor-input bridge), invented current
    peaks 0.9, 0.6, 0.45, 0.15 A at orders 1, 3, 5, 7:

    >>> amp = np.zeros(41)
    >>> amp[[1, 3, 5, 7]] = [0.9, 0.6, 0.45, 0.15]
    >>> i = Spectrum(50.0, amp, np.zeros(41))
    >>> v = Spectrum(50.0, [0.0, 230.0 * np.sqrt(2)], [0.0, 0.0])
    >>> verdict = line_current_check(i, supply_voltage=v, limit_class="D")
    >>> print(f"P {verdict.power_w:.1f} W, PF {verdict.power_factor:.3f}, pass {verdict.passed}")
    P 146.4 W, PF 0.762, pass False
    >>> r = verdict.rows[1]
    >>> print(f"n {r.order}: {r.current_a_rms:.3f} A rms against {r.limit_a_rms:.3f} A")
    n 3: 0.424 A rms against 0.498 A
    >>> print(", ".join(str(r.order) for r in verdict.failures()))
    5
    """
    cls = _limit_class(limit_class)
    if isinstance(max_order, (bool, np.bool_)) or not isinstance(max_order, (int, np.integer)):
        raise InputError(f"max_order must be an integer 2..{MAX_LIMIT_ORDER}, got {max_order!r}")
    if not 2 <= max_order <= MAX_LIMIT_ORDER:
        raise InputError(f"max_order must be 2..{MAX_LIMIT_ORDER}, got {max_order}")
    if current.harmonics < max_order:
        raise InputError(
            f"line-current spectrum holds {current.harmonics} harmonics but orders up to "
            f"{max_order} are to be checked; compute more harmonics or lower max_order"
        )
    given = None if power_w is None else _power(power_w, "power_w")

    p_active = pf = dpf = None
    if supply_voltage is not None:
        p_active = active_power(supply_voltage, current)
        pf = power_factor(supply_voltage, current)
        dpf = displacement_factor(supply_voltage, current)

    from_spectra = False
    p_limits = given
    if cls == "D" and given is None:
        if p_active is None:
            raise InputError(
                "Class D limits scale with the input power: give power_w or the supply_voltage "
                "spectrum to compute it from"
            )
        p_limits, from_spectra = p_active, True
        low, high = CLASS_D_POWER_RANGE_W
        if not low < p_active <= high:
            raise InputError(
                f"active power computed from the spectra is {p_active:g} W, outside the Class D "
                f"range {low:g} W < P <= {high:g} W (secondary sources); check the current's "
                "sign and phase, or give power_w"
            )

    rows = []
    for n in range(2, max_order + 1):
        i_rms = float(current.amplitude[n]) / math.sqrt(2.0)
        limit = class_a_limit(n) if cls == "A" else class_d_limit(n, power_w=p_limits)
        rows.append(_order_verdict(n, i_rms, limit))
    rated = [r for r in rows if r.margin_db is not None]
    worst = min(rated, key=lambda r: r.margin_db).order if rated else None
    return MainsVerdict(
        limit_class=cls,
        power_w=p_limits,
        power_from_spectra=from_spectra,
        rows=tuple(rows),
        passed=all(r.passed for r in rows),
        worst_order=worst,
        line_current_a_rms=current.rms,
        active_power_w=p_active,
        power_factor=pf,
        displacement_factor=dpf,
    )
