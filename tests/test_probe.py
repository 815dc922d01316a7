"""Tests of simloop.probe: probe syntax, saved vectors, evaluation, checks against a netlist.

The vector names follow ngspice's naming of transient results: node vectors by the node name,
branch currents as ``<element>#branch``, all lower case (ngspice manual, "Vectors" [common
practice]).
"""

from __future__ import annotations

import numpy as np
import pytest

from simloop.errors import InputError
from simloop.netlist import load_circuit
from simloop.probe import Probe, check_probe_against_netlist, parse_probe


@pytest.mark.parametrize(
    ("text", "kind", "nodes", "source", "label"),
    [
        ("v(out)", "voltage", ("out",), "", "v(out)"),
        (" V( OUT ) ", "voltage", ("out",), "", "v(out)"),
        ("v(out,0)", "voltage", ("out",), "", "v(out)"),
        ("v(out, gnd)", "voltage", ("out",), "", "v(out)"),
        ("v(an,out)", "differential", ("an", "out"), "", "v(an,out)"),
        ("v(0,out)", "differential", ("0", "out"), "", "v(0,out)"),
        ("v(x1.n2)", "voltage", ("x1.n2",), "", "v(x1.n2)"),
        ("i(Vsense)", "current", (), "vsense", "i(vsense)"),
        ("I(L1)", "current", (), "l1", "i(l1)"),
        ("i(e_amp)", "current", (), "e_amp", "i(e_amp)"),
    ],
)
def test_parse_probe_forms(text, kind, nodes, source, label):
    p = parse_probe(text)
    assert (p.kind, p.nodes, p.source, p.label) == (kind, nodes, source, label)
    assert p.unit == ("A" if kind == "current" else "V")


@pytest.mark.parametrize("text", ["out", "v(out", "v()", "v(a,b,c)", "x(out)", "v(out) + 1",
                                  "v(a;b)", "i(v1,v2)", "v({x})", ""])
def test_parse_probe_refuses_syntax(text):
    with pytest.raises(InputError, match=r"v\(node\), v\(node1,node2\) or i\(source\)"):
        parse_probe(text)


def test_parse_probe_refuses_ground_and_self():
    with pytest.raises(InputError, match="ground node"):
        parse_probe("v(0)")
    with pytest.raises(InputError, match="ground node"):
        parse_probe("v(gnd, 0)")
    with pytest.raises(InputError, match="against itself"):
        parse_probe("v(a,A)")


def test_parse_probe_refuses_current_of_non_branch_element():
    with pytest.raises(InputError, match="put a 0 V source in series"):
        parse_probe("i(R1)")


def test_probe_save_vectors():
    assert parse_probe("v(out)").save_vectors() == ("out",)
    assert parse_probe("v(a,b)").save_vectors() == ("a", "b")
    assert parse_probe("v(0,b)").save_vectors() == ("b",)
    assert parse_probe("i(V1)").save_vectors() == ("v1#branch",)


def test_probe_evaluate_voltage_and_difference():
    t = np.linspace(0.0, 1e-3, 5)
    a = np.sin(2 * np.pi * 1e3 * t)
    b = 0.25 * np.ones_like(t)
    vectors = {"time": t, "a": a, "B": b, "v1#branch": -a / 1e3}
    np.testing.assert_array_equal(parse_probe("v(a)").evaluate(vectors), a)
    np.testing.assert_array_equal(parse_probe("v(a,b)").evaluate(vectors), a - b)
    np.testing.assert_array_equal(parse_probe("v(0,b)").evaluate(vectors), -b)
    np.testing.assert_array_equal(parse_probe("i(v1)").evaluate(vectors), -a / 1e3)


def test_probe_evaluate_missing_node_lists_nodes():
    vectors = {"time": np.zeros(3), "out": np.zeros(3), "an": np.zeros(3),
               "vs#branch": np.zeros(3)}
    with pytest.raises(InputError,
                       match=r"probe v\(xyz\): no node 'xyz' in the circuit; nodes are: an, out$"):
        parse_probe("v(xyz)").evaluate(vectors)
    with pytest.raises(InputError, match=r"no source 'vx' .*sources are: vs$"):
        parse_probe("i(vx)").evaluate(vectors)


def test_probe_is_hashable_and_frozen():
    p = parse_probe("v(out)")
    assert p == Probe("voltage", ("out",)) and hash(p) == hash(Probe("voltage", ("out",)))
    with pytest.raises(AttributeError):
        p.kind = "current"  # type: ignore[misc]


def test_check_probe_against_netlist_builtin():
    text = load_circuit("full-wave-bridge").render().text
    for good in ("v(out)", "v(ac1,ac2)", "i(vsense1)", "i(vs)", "v(a1, out)"):
        check_probe_against_netlist(parse_probe(good), text)
    with pytest.raises(InputError, match=r"no node 'xyz' in the circuit; nodes are: a1, a2, ac1"):
        check_probe_against_netlist(parse_probe("v(xyz)"), text)
    with pytest.raises(InputError, match=r"no source 'vnone' .*vs, vsense1, vsense2"):
        check_probe_against_netlist(parse_probe("i(vnone)"), text)


def test_check_probe_against_netlist_device_kinds():
    text = ("t\nV1 in 0 SIN(0 1 1k)\nE1 amp 0 in 0 10\nG1 0 sink in 0 1m\nL1 amp lx 1u\n"
            "Q1 c b e qmod\nM1 d g s b nmod\nM2 d2 g2 s2 vmod\nX1 in xo buf\nB1 bo 0 V=v(in)*2\n"
            ".model qmod npn\n.model nmod nmos\n.model vmod vdmos\n"
            ".subckt buf p q\nRinner p q 1k\n.ends\n")
    for good in ("v(amp)", "v(sink)", "v(lx)", "v(c)", "v(e)", "v(b)", "v(s2)", "v(xo)",
                 "v(bo)", "v(x1.inner)", "i(e1)", "i(l1)", "i(v1)"):
        check_probe_against_netlist(parse_probe(good), text)
    for bad in ("v(qmod)", "v(nmod)", "v(vmod)", "v(buf)", "v(inner)", "v(p)", "v(x2.p)"):
        with pytest.raises(InputError, match="no node"):
            check_probe_against_netlist(parse_probe(bad), text)
