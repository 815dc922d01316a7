"""simloop: harmonics of real rectifiers and switching stages, simulated and set beside theory.

``import simloop`` is light: it loads neither PySpice nor matplotlib. The engine and the plots are
imported only by the functions that need them.
"""

from __future__ import annotations

from .errors import (
    EngineUnavailable,
    InputError,
    NetlistRefused,
    SimloopError,
    SimulationError,
)
from .spectrum import Spectrum

__version__ = "0.1.0"

__all__ = [
    "EngineUnavailable",
    "InputError",
    "NetlistRefused",
    "SimloopError",
    "SimulationError",
    "Spectrum",
    "__version__",
]
