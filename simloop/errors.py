"""Exception types of simloop.

Every error simloop raises on purpose derives from :class:`SimloopError`. Its message is one
line that names what was wrong and how to fix it; the command line prints that line and exits
with code 2, never a traceback.
"""

from __future__ import annotations


class SimloopError(Exception):
    """Base class of all errors simloop raises on purpose (message: one line, with the fix)."""


class InputError(SimloopError, ValueError):
    """A value given by the user (argument, parameter, file content) is out of range or malformed."""


class NetlistRefused(InputError):
    """A netlist or a parameter value contains a construct simloop does not let reach the engine."""


class EngineUnavailable(SimloopError):
    """The ngspice shared library (or PySpice) cannot be loaded on this machine."""


class SimulationError(SimloopError):
    """The engine ran but failed: no convergence, timestep too small, timeout, crashed worker.

    Parameters
    ----------
    message : str
        One-line summary, already naming the circuit and what the engine said.
    circuit : str
        Circuit name or netlist path.
    parameters : dict
        Parameter values of the failing run.
    engine_message : str
        The engine's own words (last relevant error lines), may be empty.
    """

    def __init__(
        self,
        message: str,
        *,
        circuit: str = "",
        parameters: dict[str, float] | None = None,
        engine_message: str = "",
    ) -> None:
        super().__init__(message)
        self.circuit = circuit
        self.parameters = dict(parameters or {})
        self.engine_message = engine_message

    def __reduce__(self):  # keep the keyword attributes across process boundaries
        return (
            _rebuild_simulation_error,
            (str(self), self.circuit, self.parameters, self.engine_message),
        )


def _rebuild_simulation_error(message, circuit, parameters, engine_message):
    return SimulationError(
        message, circuit=circuit, parameters=parameters, engine_message=engine_message
    )
