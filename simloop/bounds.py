"""Bounds on harmonic generation: Page's 1/n^2 limit for positive nonlinear resistors.

A positive nonlinear resistor (current a single-valued, non-decreasing function of voltage,
i(0) = 0: a diode, a resistor) driven at the fundamental converts at most 1/n^2 of the power it
takes in at the fundamental to the n-th harmonic (Page 1956). The bound does **not** apply to
nonlinear reactances (varactor multipliers), which the Manley-Rowe relations allow to reach
100 %; a flag raised by :func:`conversion_to_harmonics` on such a circuit is expected, not an
error. On a resistive circuit a flag means the powers or the sign convention are wrong.

Pure functions on :class:`~simloop.spectrum.Spectrum` objects.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .errors import InputError
from .spectrum import Spectrum

__all__ = [
    "BOUND_NOTE",
    "PageCheck",
    "PageRow",
    "conversion_to_harmonics",
    "element_output_power",
    "page_bound",
]

#: Carried by every check: where the bound applies.
BOUND_NOTE = (
    "Page's bound 1/n^2 holds for positive nonlinear resistors (current a non-decreasing function "
    "of voltage); nonlinear reactances may exceed it (Manley-Rowe: up to 100 %)"
)


def _order(n: Any, *, minimum: int) -> int:
    if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)):
        raise InputError(f"harmonic order must be an integer >= {minimum}, got {n!r}")
    if n < minimum:
        raise InputError(f"harmonic order must be >= {minimum}, got {n}")
    return int(n)


def page_bound(n: int) -> float:
    """Page's upper bound on the efficiency of generating harmonic n with a positive resistor.

    Parameters
    ----------
    n : int
        Harmonic order, >= 1.

    Returns
    -------
    float
        1 / n^2 [-].

    Raises
    ------
    InputError
        n not an integer or below 1.

    Notes
    -----
    Page's relation for a positive nonlinear resistor with powers P_m absorbed at the harmonics
    m w0 of one fundamental:

    .. math:: \\sum_m m^2 P_m \\ge 0 .

    With power absorbed at the fundamental only (P_1 > 0) and given out at the harmonics
    (P_m <= 0, m >= 2), n^2 |P_n| <= P_1, i.e. the efficiency |P_n| / P_1 <= 1/n^2.

    References
    ----------
    .. [1] C. H. Page, "Frequency conversion with positive nonlinear resistors," *J. Res. Natl.
       Bur. Stand.* 56(4), 1956, Research Paper 2664.
    .. [2] R. H. Pantell, *Proc. IRE* 46(12), 1958 (cited from memory).

    Examples
    --------
    A diode doubler and tripler for a 10 MHz reference can do no better than:

    >>> print(f"{page_bound(2):.4f}, {page_bound(3):.4f}")
    0.2500, 0.1111
    """
    n = _order(n, minimum=1)
    return 1.0 / (n * n)


def _same_fundamental(voltage: Spectrum, current: Spectrum) -> None:
    if not math.isclose(voltage.fundamental_hz, current.fundamental_hz, rel_tol=1e-12):
        raise InputError(
            f"element voltage is at {voltage.fundamental_hz:g} Hz but its current at "
            f"{current.fundamental_hz:g} Hz; give both spectra on the same fundamental"
        )


def element_output_power(element_voltage: Spectrum, element_current: Spectrum, n: int) -> float:
    """Power a two-terminal element gives out at harmonic order n [W].

    Parameters
    ----------
    element_voltage : Spectrum
        Voltage across the element [V].
    element_current : Spectrum
        Current into the element through its positive terminal [A] (passive sign convention),
        same fundamental.
    n : int
        Harmonic order, >= 0 (0: DC).

    Returns
    -------
    float
        -(1/2) V_n I_n cos(psi_v,n - psi_i,n) for n >= 1, -V0 I0 for n = 0 [W]; positive where
        the element is a source at that order.

    Raises
    ------
    InputError
        Different fundamentals, n not an integer, below 0, or above the harmonics either spectrum
        holds.

    Notes
    -----
    The mean of v i over a period keeps only products of equal order, so the power absorbed at
    order n is (1/2) V_n I_n cos(psi_v,n - psi_i,n); the power given out is its negative.

    References
    ----------
    .. [1] C. H. Page, *J. Res. Natl. Bur. Stand.* 56(4), 1956, RP2664 (powers P_n absorbed at
       each frequency).

    Examples
    --------
    A diode in a 1 MHz doubler: 0.4 V and 10 mA peak at 2 MHz, in antiphase:

    >>> v = Spectrum(1e6, [0.0, 1.0, 0.4], [0.0, 0.0, np.pi])
    >>> i = Spectrum(1e6, [0.0, 0.05, 0.01], [0.0, 0.0, 0.0])
    >>> print(f"{element_output_power(v, i, 2) * 1e3:.2f} mW")
    2.00 mW
    """
    _same_fundamental(element_voltage, element_current)
    n = _order(n, minimum=0)
    top = min(element_voltage.harmonics, element_current.harmonics)
    if n > top:
        raise InputError(f"order {n} asked for but the element spectra hold orders 0..{top}")
    v, i = element_voltage.amplitude[n], element_current.amplitude[n]
    if n == 0:
        return float(-v * i)
    return float(-0.5 * v * i * math.cos(element_voltage.phase_rad[n] - element_current.phase_rad[n]))


@dataclass(frozen=True, slots=True)
class PageRow:
    """One harmonic against Page's bound.

    Attributes
    ----------
    order : int
        Harmonic order n >= 2.
    output_power_w : float
        Power delivered at n w0 [W].
    efficiency : float
        eta_n = output power / power into the element at the fundamental [-].
    bound : float
        1 / n^2 [-].
    exceeds : bool
        eta_n > bound (1 + rtol).
    """

    order: int
    output_power_w: float
    efficiency: float
    bound: float
    exceeds: bool

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready row: ``order``, ``output_power_w``, ``efficiency``, ``page_bound``,
        ``exceeds``."""
        return {
            "order": self.order,
            "output_power_w": self.output_power_w,
            "efficiency": self.efficiency,
            "page_bound": self.bound,
            "exceeds": self.exceeds,
        }


@dataclass(frozen=True, slots=True)
class PageCheck:
    """Harmonic conversion efficiencies of one element against Page's bound.

    Attributes
    ----------
    input_power_w : float
        Power into the element at the fundamental, P_in1 [W].
    rows : tuple of PageRow
        Orders 2..N.
    exceeds : bool
        Some order exceeds its bound.
    rtol : float
        Relative tolerance used for the flags.
    power_source : str
        ``"given"`` (output powers handed in) or ``"element"`` (from the element's own spectra).
    note : str
        :data:`BOUND_NOTE`.
    """

    input_power_w: float
    rows: tuple[PageRow, ...]
    exceeds: bool
    rtol: float
    power_source: str
    note: str = BOUND_NOTE

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready check (units in the keys), rows under ``orders``."""
        return {
            "fundamental_input_power_w": self.input_power_w,
            "exceeds": self.exceeds,
            "rtol": self.rtol,
            "power_source": self.power_source,
            "note": self.note,
            "orders": [r.to_dict() for r in self.rows],
        }


def _powers(values: Sequence[float] | NDArray[np.float64]) -> NDArray[np.float64]:
    try:
        p = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise InputError("load_power_w must be a sequence of numbers of watts") from None
    if p.ndim != 1 or p.size < 3:
        raise InputError(
            "load_power_w must be a 1-D sequence indexed by order n = 0..N with N >= 2 "
            "(entries 0 and 1 are ignored), e.g. compare.harmonic_powers(...)"
        )
    if not np.all(np.isfinite(p)):
        raise InputError("load_power_w must hold finite numbers of watts")
    return p


def conversion_to_harmonics(
    *,
    element_voltage: Spectrum,
    element_current: Spectrum,
    load_power_w: Sequence[float] | NDArray[np.float64] | None = None,
    rtol: float = 1e-6,
) -> PageCheck:
    """Efficiency of harmonic generation of one nonlinear element, set against Page's bound.

    Parameters
    ----------
    element_voltage : Spectrum
        Voltage across the nonlinear element [V].
    element_current : Spectrum
        Current into the element [A] (passive sign convention), same fundamental.
    load_power_w : sequence of float, optional
        Power delivered at each order, indexed by n = 0..N [W]; entries 0 and 1 are ignored.
        For a resistive load R with load-voltage spectrum v, ``harmonic_powers(v, load_ohm=R)``
        of :mod:`simloop.compare` (A_n^2 / (2R)). None: the element's own output power
        :func:`element_output_power` at each order 2..N the spectra hold.
    rtol : float
        A row is flagged when eta_n > (1 + rtol) / n^2, so that numerical noise in a circuit
        that reaches the bound does not flag; >= 0.

    Returns
    -------
    PageCheck
        P_in1, one :class:`PageRow` per order 2..N, and whether any exceeds its bound.

    Raises
    ------
    InputError
        Different fundamentals; P_in1 <= 0 (the element gives out power at the fundamental: wrong
        current direction, or not the driven element); malformed load powers; negative rtol.

    Notes
    -----
    Power into the element at the fundamental and efficiency at order n:

    .. math:: P_{in,1} = \\tfrac12 V_1 I_1 \\cos(\\psi_{v,1} - \\psi_{i,1}),\\qquad
              \\eta_n = \\frac{P_n}{P_{in,1}} \\le \\frac{1}{n^2}.

    The bound holds for positive nonlinear resistors (Page's definition: the current is a real,
    single-valued, non-decreasing function of the voltage with i(0) = 0, jumps allowed; the
    ideal diode is its limit) when the only source is at the fundamental. It does not hold for
    nonlinear reactances: a lossless varactor multiplier may reach eta = 1 (Manley-Rowe), so a
    flag there is physics, not an error.

    References
    ----------
    .. [1] C. H. Page, "Frequency conversion with positive nonlinear resistors," *J. Res. Natl.
       Bur. Stand.* 56(4), 1956, Research Paper 2664.
    .. [2] R. H. Pantell, *Proc. IRE* 46(12), 1958 (cited from memory).
    .. [3] J. M. Manley and H. E. Rowe, "Some general properties of nonlinear elements - Part I.
       General energy relations," *Proc. IRE* 44, 1956, pp. 904-913.

    Examples
    --------
    A bench frequency doubler: 10 V peak at 1 kHz through an ideal diode into 1 kOhm. The diode
    sees V/2 at the fundamental and takes V/(2R) (ideal half-wave), and gives out 2V/(3 pi R)
    of current at 2 kHz into the load:

    >>> vd = Spectrum(1e3, [0.0, 5.0, 20.0 / (3 * np.pi)], [0.0, 0.0, np.pi])
    >>> idiode = Spectrum(1e3, [0.0, 5e-3, 0.02 / (3 * np.pi)], [0.0, 0.0, 0.0])
    >>> check = conversion_to_harmonics(element_voltage=vd, element_current=idiode)
    >>> r = check.rows[0]
    >>> print(f"P_in1 {check.input_power_w * 1e3:.2f} mW, eta2 {r.efficiency:.4f} "
    ...       f"<= {r.bound:.2f}: {not r.exceeds}")
    P_in1 12.50 mW, eta2 0.1801 <= 0.25: True
    """
    _same_fundamental(element_voltage, element_current)
    if isinstance(rtol, (bool, np.bool_)) or not (
        isinstance(rtol, (int, float, np.floating)) and math.isfinite(rtol) and rtol >= 0
    ):
        raise InputError(f"rtol must be a finite number >= 0, got {rtol!r}")
    p_in1 = -element_output_power(element_voltage, element_current, 1)
    if not p_in1 > 0:
        raise InputError(
            f"power into the element at the fundamental is {p_in1:g} W <= 0; give the current "
            "flowing into the element (passive sign convention) of the driven nonlinear element"
        )
    if load_power_w is None:
        top = min(element_voltage.harmonics, element_current.harmonics)
        if top < 2:
            raise InputError("element spectra hold no harmonic above the fundamental; nothing to check")
        out = [element_output_power(element_voltage, element_current, n) for n in range(2, top + 1)]
        source = "element"
    else:
        out = [float(x) for x in _powers(load_power_w)[2:]]
        source = "given"
    rows = []
    for n, p_n in enumerate(out, start=2):
        eta = p_n / p_in1
        bound = page_bound(n)
        rows.append(PageRow(n, p_n, eta, bound, bool(eta > bound * (1.0 + rtol))))
    return PageCheck(
        input_power_w=p_in1,
        rows=tuple(rows),
        exceeds=any(r.exceeds for r in rows),
        rtol=float(rtol),
        power_source=source,
    )
