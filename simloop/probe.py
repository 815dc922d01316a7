"""Probes: which waveform of a circuit simloop analyses (``v(out)``, ``v(a,b)``, ``i(vsense)``).

A probe names a node voltage, the voltage between two nodes, or the current through an element
that carries a branch current in ngspice (an independent voltage source, an E or H controlled
voltage source, or an inductor). The engine saves the vectors a probe asks for; the probe then
turns those vectors into one waveform.

ngspice names the vectors of a transient after the nodes (``out``) and after the branch
elements (``v1#branch``), all in lower case; node ``0`` (alias ``gnd``) is ground.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError
from .vocab import ProbeKind

#: Names ngspice treats as the ground node.
GROUND_NAMES: frozenset[str] = frozenset({"0", "gnd"})

#: First letters of elements whose current ngspice keeps as a ``<name>#branch`` vector.
BRANCH_LETTERS: frozenset[str] = frozenset("vehl")

ACCEPTED_FORMS = "v(node), v(node1,node2) or i(source), e.g. v(out), v(an,out), i(vsense)"

_NAME = r"[A-Za-z0-9_][A-Za-z0-9_.:+\-\[\]]*"
_PROBE = re.compile(
    rf"\s*(?P<kind>[vViI])\s*\(\s*(?P<a>{_NAME})\s*(?:,\s*(?P<b>{_NAME})\s*)?\)\s*"
)


def _node(name: str) -> str:
    name = name.lower()
    return "0" if name in GROUND_NAMES else name


@dataclass(frozen=True, slots=True)
class Probe:
    """One waveform of a circuit: a node voltage, a node-pair voltage or a branch current.

    Parameters
    ----------
    kind : {"voltage", "differential", "current"}
        ``voltage``: ``v(a)`` against ground; ``differential``: ``v(a,b)`` = v(a) - v(b);
        ``current``: ``i(name)``, the branch current of element ``name`` (ngspice's sign: the
        current that flows into the element's positive terminal, through it, to the negative).
    nodes : tuple of str
        Lower-case node names: one for ``voltage``, two for ``differential`` (the first may be
        ground ``"0"``), none for ``current``.
    source : str
        Lower-case element name for ``current`` probes, else ``""``.

    Examples
    --------
    >>> p = parse_probe("V(An, OUT)")
    >>> p.kind, p.label, p.save_vectors()
    ('differential', 'v(an,out)', ('an', 'out'))
    >>> import numpy as np
    >>> p.evaluate({"an": np.array([1.0, 0.7]), "out": np.array([0.3, 0.7])}).tolist()
    [0.7, 0.0]
    """

    kind: ProbeKind
    nodes: tuple[str, ...] = ()
    source: str = ""

    @property
    def label(self) -> str:
        """Canonical lower-case text of the probe: ``v(out)``, ``v(a,b)``, ``i(vs)``."""
        if self.kind == "current":
            return f"i({self.source})"
        return f"v({','.join(self.nodes)})"

    @property
    def unit(self) -> str:
        """``"A"`` for current probes, ``"V"`` otherwise."""
        return "A" if self.kind == "current" else "V"

    def save_vectors(self) -> tuple[str, ...]:
        """Names of the vectors the engine must save (ground needs none).

        Returns
        -------
        tuple of str
            ``("out",)`` for ``v(out)``, ``("a", "b")`` for ``v(a,b)``, ``("v1#branch",)`` for
            ``i(v1)``.
        """
        if self.kind == "current":
            return (f"{self.source}#branch",)
        return tuple(n for n in self.nodes if n != "0")

    def evaluate(self, vectors: Mapping[str, ArrayLike]) -> NDArray[np.float64]:
        """The probe's waveform from the engine's vectors.

        Parameters
        ----------
        vectors : mapping of str to array
            Vectors of one transient, keyed by ngspice's names (case does not matter).

        Returns
        -------
        ndarray of float
            ``v(out)`` -> ``vectors["out"]``; ``v(a,b)`` -> a - b (ground contributes zeros);
            ``i(v1)`` -> ``vectors["v1#branch"]``.

        Raises
        ------
        InputError
            If a node or branch the probe needs is not among the vectors.
        """
        lower = {str(k).lower(): v for k, v in vectors.items()}
        if self.kind == "current":
            key = f"{self.source}#branch"
            if key not in lower:
                have = sorted(k.split("#")[0] for k in lower if k.endswith("#branch"))
                raise InputError(
                    f"probe {self.label}: no source '{self.source}' with a current in the circuit; "
                    f"sources are: {_listing(have)}"
                )
            return np.array(lower[key], dtype=float)
        arrays = []
        for node in self.nodes:
            if node == "0":
                arrays.append(None)
                continue
            if node not in lower:
                have = sorted(k for k in lower if "#" not in k and k != "time")
                raise InputError(
                    f"probe {self.label}: no node '{node}' in the circuit; nodes are: {_listing(have)}"
                )
            arrays.append(np.array(lower[node], dtype=float))
        shape = next(a.shape for a in arrays if a is not None)
        values = [np.zeros(shape) if a is None else a for a in arrays]
        if len(values) == 1:
            return values[0]
        return values[0] - values[1]


def _listing(names: list[str], limit: int = 30) -> str:
    if not names:
        return "(none)"
    shown = ", ".join(names[:limit])
    return shown + (f", ... ({len(names) - limit} more)" if len(names) > limit else "")


def parse_probe(text: str) -> Probe:
    """Parse a probe expression.

    Parameters
    ----------
    text : str
        ``v(node)``, ``v(node1,node2)`` or ``i(name)``, any case, spaces allowed. ``gnd`` is the
        same node as ``0``.

    Returns
    -------
    Probe

    Raises
    ------
    InputError
        For any other syntax (listing the accepted forms), for a probe of the ground node alone
        or of a node against itself (always zero), and for ``i()`` of an element without a
        branch current.

    Examples
    --------
    >>> parse_probe("v(out, 0)").label, parse_probe("I(Vsense)").label
    ('v(out)', 'i(vsense)')
    """
    m = _PROBE.fullmatch(str(text))
    if m is None:
        raise InputError(f"probe {text!r} is not understood; write {ACCEPTED_FORMS}")
    kind, a, b = m.group("kind").lower(), m.group("a"), m.group("b")
    if kind == "i":
        if b is not None:
            raise InputError(f"probe {text!r}: i() takes one element name; write {ACCEPTED_FORMS}")
        name = a.lower()
        if name[0] not in BRANCH_LETTERS:
            raise InputError(
                f"probe {text!r}: i() reads the current of a voltage source (V), a controlled "
                "voltage source (E, H) or an inductor (L); put a 0 V source in series to measure "
                "a current elsewhere"
            )
        return Probe("current", (), name)
    first = _node(a)
    if b is None or _node(b) == "0":
        if first == "0":
            raise InputError(f"probe {text!r} is the ground node, always 0 V; name another node")
        return Probe("voltage", (first,))
    second = _node(b)
    if first == second:
        raise InputError(f"probe {text!r} measures a node against itself, always 0 V")
    return Probe("differential", (first, second))


def check_probe_against_netlist(probe: Probe, text: str) -> None:
    """Refuse a probe whose node or element does not exist in a netlist, before any run.

    Parameters
    ----------
    probe : Probe
        The parsed probe.
    text : str
        Netlist text (rendered, or with its includes inlined). Nodes of the top level count,
        and ``x<name>.<node>`` for nodes inside subcircuit instances that exist.

    Raises
    ------
    InputError
        ``probe v(xyz): no node 'xyz' in the circuit; nodes are: ...`` and the like.
    """
    from .netlist import circuit_branches, circuit_nodes  # netlist imports this module

    if probe.kind == "current":
        branches = circuit_branches(text)
        if probe.source not in branches and not _inside_instance(probe.source, text):
            raise InputError(
                f"probe {probe.label}: no source '{probe.source}' with a current in the circuit; "
                f"sources are: {_listing(sorted(branches))}"
            )
        return
    nodes = circuit_nodes(text)
    for node in probe.nodes:
        if node == "0" or node in nodes or _inside_instance(node, text):
            continue
        raise InputError(
            f"probe {probe.label}: no node '{node}' in the circuit; nodes are: "
            f"{_listing(sorted(nodes - {'0'}))}"
        )


def _inside_instance(name: str, text: str) -> bool:
    """True for ``x1.n2``-style names whose first part is a subcircuit instance of ``text``."""
    from .netlist import circuit_instances

    head, dot, _ = name.partition(".")
    return bool(dot) and head in circuit_instances(text)
