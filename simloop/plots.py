"""Figures (matplotlib, imported lazily, Agg backend: no screen needed).

Layouts are simloop's own: waveform over one period on top, spectrum in dBV (re 1 V rms) below.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from .spectrum import Spectrum


#: Dynamic range of the spectrum plots [dB]: components further below the largest are absent
#: (a closed form's zeros, the engine's numerical noise) and are not drawn.
RANGE_DB = 100.0

#: One colour per series, chosen for contrast in print and for colour-blind readers.
SERIES_STYLE = {
    "ideal": {"color": "#4d4d4d", "marker": "o", "label": "ideal"},
    "estimate": {"color": "#e69f00", "marker": "s", "label": "drop-corrected estimate"},
    "simulated": {"color": "#0072b2", "marker": "D", "label": "simulated"},
}


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _dbv(spectrum: Spectrum) -> NDArray[np.float64]:
    from .fourier import spectrum_dbv

    return spectrum_dbv(spectrum)


def _time_axis(period: float) -> tuple[float, str]:
    for factor, unit in ((1.0, "s"), (1e3, "ms"), (1e6, "µs"), (1e9, "ns")):
        if period * factor >= 1.0:
            return factor, unit
    return 1e12, "ps"


def _stems(ax, spectra: Sequence[tuple[str, Spectrum]]) -> None:
    width = 0.8 / max(len(spectra), 1)
    levels = [_dbv(spec) for _, spec in spectra]
    top = max(float(np.max(y[np.isfinite(y)], initial=-300.0)) for y in levels)
    floor = 10.0 * np.ceil((top - RANGE_DB) / 10.0)
    for k, ((name, spec), y) in enumerate(zip(spectra, levels)):
        style = SERIES_STYLE[name]
        n = np.arange(spec.harmonics + 1)
        x = n + (k - (len(spectra) - 1) / 2) * width
        shown = np.isfinite(y) & (y > floor)
        ax.vlines(x[shown], floor, y[shown], color=style["color"], linewidth=1.6)
        ax.plot(x[shown], y[shown], linestyle="none", marker=style["marker"],
                color=style["color"], markersize=4.5, label=style["label"])
    ax.set_ylim(floor, top + 8.0)
    ax.set_xlabel("harmonic order n  (n = 0: DC)")
    ax.set_ylabel("amplitude [dBV, re 1 V rms]")
    highest = max(s.harmonics for _, s in spectra)
    ax.set_xticks(range(0, highest + 1, max(1, highest // 20)))
    ax.set_title(f"spectrum (components more than {RANGE_DB:.0f} dB below the largest not drawn)",
                 fontsize=8, color="#555555", loc="left")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(loc="upper right", fontsize=8)


def ideal_figure(
    spectrum: Spectrum, t: NDArray[np.float64], v: NDArray[np.float64], *, title: str
):
    """Waveform over one period above its spectrum in dBV; returns the matplotlib Figure."""
    plt = _pyplot()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(8.0, 6.5), constrained_layout=True)
    factor, unit = _time_axis(1.0 / spectrum.fundamental_hz)
    top.plot(t * factor, v, color=SERIES_STYLE["ideal"]["color"], linewidth=1.5)
    top.set_xlabel(f"time [{unit}]")
    top.set_ylabel("value [V]")
    top.set_title(title)
    top.grid(True, alpha=0.3)
    _stems(bottom, [("ideal", spectrum)])
    return fig


def comparison_figure(
    *,
    t: NDArray[np.float64],
    simulated_wave: NDArray[np.float64],
    ideal_wave: NDArray[np.float64] | None,
    spectra: Sequence[tuple[str, Spectrum]],
    title: str,
    probe_label: str,
):
    """One period of the simulated waveform over the ideal one, then the spectra side by side."""
    plt = _pyplot()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(9.0, 7.0), constrained_layout=True)
    period = 1.0 / spectra[0][1].fundamental_hz
    factor, unit = _time_axis(period)
    t0 = t - t[0]
    if ideal_wave is not None:
        top.plot(t0 * factor, ideal_wave, color=SERIES_STYLE["ideal"]["color"], linestyle="--",
                 linewidth=1.2, label="ideal")
    top.plot(t0 * factor, simulated_wave, color=SERIES_STYLE["simulated"]["color"],
             linewidth=1.6, label="simulated")
    top.set_xlabel(f"time within the last period [{unit}]")
    top.set_ylabel(probe_label)
    top.set_title(title)
    top.grid(True, alpha=0.3)
    top.legend(loc="upper right", fontsize=8)
    _stems(bottom, spectra)
    return fig


def save(fig, path: Path) -> None:
    """Save a figure as PNG (through a temporary file) and close it."""
    import io

    from .files import write_atomic

    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=130)
    _pyplot().close(fig)
    write_atomic(Path(path), buffer.getvalue())
