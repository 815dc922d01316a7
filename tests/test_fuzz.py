"""Fuzzing (hypothesis) of netlist screening and of parameter parsing.

Two properties:

1. No generated netlist gets a forbidden construct past the screen. The netlists mix benign
   cards with ``.control``/``.endc``, backquotes, ``shell``, ``codemodel``, ``osdi``, ``*#``
   comment commands, ``ng_script``, file-reading models and includes of paths outside the
   netlist's folder, in random case, with random leading blanks, ``+`` continuation splits at
   random places (with comment lines between), CR/LF variants and Unicode look-alikes. Each one
   is either refused (a SimloopError), or accepted and then found clean by an independent reader
   written here after the ngspice manual's rules for comments and continuation lines ("Basic
   lexicon"; ngspice joins ``+`` lines to the card before them, skipping comment lines) [from
   memory]: in no card, joined with or without a blank, does a forbidden token appear in any
   case; no comment line starts with ``*#`` or holds ``ng_script``; every include resolves into
   the netlist's folder; the rendered text handed to the engine has no include card left.
2. No parser crashes: parse_number, parse_assignment, parse_vary, parse_probe (and the probe
   lookup of a circuit, find_periodic_source) return a valid value or raise a SimloopError;
   nothing else escapes.

Example counts keep this file well under 30 s.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st

from simloop.errors import SimloopError
from simloop.netlist import find_periodic_source, load_circuit, models_dir, parse_assignment, screen
from simloop.probe import parse_probe
from simloop.sweep import parse_vary
from simloop.units import parse_number

#: Every token that must not reach the engine outside a comment (screen's docstring).
FORBIDDEN = (".control", ".endc", "`", "shell", "codemodel", "osdi", "ng_script", ".cmodel",
             "filesource", "d_source", "d_state", "table2d", "table3d", "numd", "nbjt", "numos",
             ".csparam")

BENIGN = (
    "R1 in out 1k", "C1 out 0 {cx}", ".param cx=1u rl=1k", ".model dx D(IS=1e-14 N=1)",
    "D1 out k dx", "Rl k 0 {rl}", "* a plain comment: the shell of the box, no .control here",
    "", "   ", ".options reltol=1e-4", ".tran 1u 1m", "L1 k m 1m", "Rm m 0 1", ".include ok.lib",
    ".lib ok.lib", ".inc 'ok.lib'", "* # a comment, not a command", ".subckt sub a b",
    "R9 a b 1k", ".ends", "X1 in k sub", ".end",
)
DANGEROUS = (
    ".control", ".endc", "shell touch MARK", "*# shell touch MARK", "*#echo hi", "*ng_script",
    "R5 a b `echo 1`", ".param x={`id`}", "codemodel /tmp/x.cm", "pre_osdi x.osdi",
    "osdi x.osdi", ".include /etc/passwd", ".inc ../outside.lib", ".include ../outside.lib",
    ".lib ../outside.lib sec", ".include ~/x.lib", ".incl '/tmp/x'", '.include "../outside.lib"',
    ".include sub/../../outside.lib", ".csparam x=1", ".model fs filesource(file=x)",
    "A1 a b fs", "R6 a 0 1k ; shell", "V3 a 0 1 $ .control", ".cmodel m1", "N1 a b numd",
    ".model tb table2d(file=x)", "R7 a b 1k NBJT", ".include evil.lib", ".controlx",
)
#: Unicode look-alikes and invisible characters (Cyrillic, fullwidth, zero-width, NBSP).
LOOKALIKE = {"o": "\u043e", "c": "\u0441", "e": "\u0435", "a": "\u0430", "p": "\u0440",
             "s": "\u0455", "i": "\u0456", ".": "\uff0e", "l": "\u04cf", "t": "\uff54"}
INVISIBLE = ("\u200b", "\u00a0", "\ufeff", "\u2028", "\t")


@st.composite
def mangled_line(draw: st.DrawFn) -> str:
    line = draw(st.sampled_from(BENIGN + DANGEROUS + DANGEROUS))
    case = draw(st.sampled_from(("keep", "upper", "lower", "random")))
    if case == "upper":
        line = line.upper()
    elif case == "lower":
        line = line.lower()
    elif case == "random" and line:
        flips = draw(st.lists(st.booleans(), min_size=len(line), max_size=len(line)))
        line = "".join(ch.upper() if flip else ch.lower() for ch, flip in zip(line, flips))
    if line and draw(st.booleans()):  # look-alikes and invisible characters
        for _ in range(draw(st.integers(1, 3))):
            k = draw(st.integers(0, len(line) - 1))
            if draw(st.booleans()):
                line = line[:k] + LOOKALIKE.get(line[k].lower(), line[k]) + line[k + 1:]
            else:
                line = line[:k] + draw(st.sampled_from(INVISIBLE)) + line[k:]
    line = draw(st.sampled_from(("", "", " ", "\t", "  \t "))) + line
    if len(line) > 2 and draw(st.booleans()):  # split with '+' continuations
        for _ in range(draw(st.integers(1, 2))):
            k = draw(st.integers(1, len(line) - 1))
            between = draw(st.sampled_from(("", "", "* between\n", "\n")))
            blank = draw(st.sampled_from(("", " ", "\t")))
            line = line[:k] + "\n" + between + blank + "+" + line[k:]
    return line


@st.composite
def netlist_text(draw: st.DrawFn) -> str:
    lines = draw(st.lists(mangled_line(), min_size=1, max_size=8))
    eol = draw(st.sampled_from(("\n", "\n", "\r\n", "mixed")))
    text = "* fuzzed netlist\nVs in 0 SIN(0 1 50)\nR0 in 0 1k\n" + "\n".join(lines) + "\n"
    if eol == "\r\n":
        text = text.replace("\n", "\r\n")
    elif eol == "mixed":
        text = text.replace("\n", draw(st.sampled_from(("\r\n", "\r", "\n"))), 1)
    return text


# ------------------------------------------------------------------ the independent reader
def _is_comment(line: str) -> bool:
    return line.lstrip().startswith("*")


def _cards(text: str) -> list[list[str]]:
    """Cards with their '+' continuation lines (comment and blank lines between skipped)."""
    cards: list[list[str]] = []
    for line in text.split("\n"):
        if line.lstrip().startswith("+") and cards:
            cards[-1].append(line.lstrip()[1:])
        elif _is_comment(line) or not line.strip():
            continue
        else:
            cards.append([line])
    return cards


def _include_path(card: str) -> str | None:
    words = card.split()
    if not words or not words[0].lower().startswith((".inc", ".lib")):
        return None
    rest = card.strip()[len(words[0]):].strip()
    if rest[:1] in ("'", '"'):
        return rest[1:].split(rest[0], 1)[0]
    return rest.split()[0] if rest else ""


def assert_clean(text: str, *, folder: Path | None, allow_includes: bool) -> None:
    """What the engine may see: the property every accepted text must have."""
    assert "\r" not in text.replace("\r\n", "\n")
    assert not re.search(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", text)
    text = text.replace("\r\n", "\n")
    for line in text.split("\n"):
        if _is_comment(line):
            assert not re.match(r"\s*\*#", line), line
            assert "ng_script" not in line.lower(), line
    for card in _cards(text):
        for joined in (" ".join(card), "".join(card)):
            lower = joined.lower()
            for token in FORBIDDEN:
                assert token not in lower, (token, joined)
            target = _include_path(joined)
            if target is None:
                continue
            assert allow_includes, f"include card left for the engine: {joined!r}"
            assert folder is not None and target, joined
            path = Path(target).expanduser()
            resolved = (path if path.is_absolute() else folder / path).resolve()
            roots = (folder.resolve(), models_dir().resolve())
            assert any(resolved.is_relative_to(root) for root in roots), (joined, resolved)


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A netlist folder with a benign and an evil library, and a library outside it."""
    root = tmp_path_factory.mktemp("fuzz")
    work = root / "work"
    (work / "sub").mkdir(parents=True)
    (work / "ok.lib").write_text("* ok\n.model dy D(IS=1e-12)\n", encoding="utf-8")
    (work / "evil.lib").write_text("* evil\n.control\nshell touch MARK\n.endc\n", encoding="utf-8")
    (root / "outside.lib").write_text("* outside\n.model dz D\n", encoding="utf-8")
    return work


FUZZ = settings(max_examples=400, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@FUZZ
@given(text=netlist_text())
def test_screen_fuzz_accepts_only_clean_text(text: str, lab: Path) -> None:
    try:
        screen(text, source_dir=lab, allowed_dirs=(lab, models_dir()), origin="fuzz")
    except SimloopError as exc:
        assert "\n" not in str(exc)
        event("refused")
        return
    event("accepted")
    assert_clean(text, folder=lab, allow_includes=True)


@settings(max_examples=250, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=netlist_text())
def test_load_circuit_fuzz_renders_only_clean_text(text: str, lab: Path) -> None:
    path = lab / "fuzzed.cir"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    try:
        rendered = load_circuit(path).render()
    except SimloopError as exc:
        assert "\n" not in str(exc)
        event("refused")
        return
    event("accepted")
    assert "MARK" not in rendered.text  # evil.lib's command never arrives
    assert_clean(rendered.text, folder=None, allow_includes=False)


def test_assert_clean_catches_what_it_must() -> None:
    """The reader above is not vacuous: it flags each kind of construct it is meant to."""
    for bad in ("t\n.con\n+trol\n", "t\nR1 a b 1k\n* c\n+ she\n+ll\n", "t\n  *# echo\n",
                "t\nR1 a 0 `x`\n", "t\n.include /etc/passwd\n", "t\n.LIB ../x.lib s\n",
                "t\nR1 a 0 1\rR2\n", "t\n* ng_script\n"):
        with pytest.raises(AssertionError):
            assert_clean(bad, folder=Path("/nonexistent/work"), allow_includes=True)
    assert_clean("t\n* the shell of the box\nR1 a 0 1k\n", folder=None, allow_includes=False)


# ------------------------------------------------------------------ parameter parsing
@pytest.fixture(scope="module")
def half_wave():
    return load_circuit("half-wave")


NUMBERISH = st.one_of(
    st.text(max_size=30),
    st.from_regex(r"\s*[+-]?\d{0,4}(\.\d{0,4})?([eE][+-]?\d{1,4})?(meg|mil|[fpnumkgtFPNUMKGT])?\w{0,3}\s*",
                  fullmatch=True),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)


@settings(max_examples=1500, deadline=None)
@given(text=NUMBERISH)
def test_parse_number_fuzz_finite_float_or_input_error(text: str) -> None:
    try:
        value = parse_number(text, what="--set x")
    except SimloopError as exc:
        assert "\n" not in str(exc) and str(exc).startswith("--set x: ")
        return
    assert isinstance(value, float) and math.isfinite(value)


NAMES = st.sampled_from(("rload", "RLOAD", "vpk", "freq", "cres", "diode", "nosuch", "", "r l",
                         "_x", "9a"))
VALUES = st.one_of(NUMBERISH, st.sampled_from(("sl_schottky", "SL_FAST", "sl_nope", "1k;.control",
                                               "{x}", "`id`", "1k\n.control")))


@settings(max_examples=800, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=NAMES, sep=st.sampled_from(("=", " = ", "==", ":")), value=VALUES,
       raw=st.text(max_size=30), use_raw=st.booleans(), with_template=st.booleans())
def test_parse_assignment_fuzz(name, sep, value, raw, use_raw, with_template, half_wave) -> None:
    text = raw if use_raw else f"{name}{sep}{value}"
    template = half_wave if with_template else None
    try:
        key, parsed = parse_assignment(text, template)
    except SimloopError as exc:
        assert "\n" not in str(exc)
        return
    assert re.fullmatch(r"[a-z_]\w*", key)
    if isinstance(parsed, str):
        assert template is not None and parsed in template.choices[key].allowed
    else:
        assert math.isfinite(parsed)
        if template is not None:
            spec = template.parameters[key]
            assert spec.min <= parsed <= spec.max


SPEC_NUMBER = st.one_of(st.sampled_from(("1", "10", "1k", "1meg", "0", "-1", "nan", "1e400", "",
                                         "100m", "2.2u", "abc")), NUMBERISH)
SPEC = st.one_of(
    st.lists(SPEC_NUMBER, min_size=1, max_size=5).map(",".join),
    st.tuples(SPEC_NUMBER, SPEC_NUMBER, st.integers(-3, 300).map(str) | st.sampled_from(("x", "1.5", "")),
              st.sampled_from(("", ":log", ":LOG", ":lin", ":log:x"))).map(
        lambda t: f"{t[0]}:{t[1]}:{t[2]}{t[3]}"),
    st.lists(st.sampled_from(("sl_schottky", "sl_fast", "sl_rect1a", "nope", "")), min_size=1,
             max_size=4).map(",".join),
    st.text(max_size=30),
)


@settings(max_examples=800, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=NAMES, spec=SPEC, raw=st.text(max_size=40), use_raw=st.booleans())
def test_parse_vary_fuzz(name, spec, raw, use_raw, half_wave) -> None:
    text = raw if use_raw else f"{name}={spec}"
    assume(not re.search(r":\s*\d{6,}", text))  # huge COUNTs: a known bug, see test_bad_inputs
    try:
        vary = parse_vary(text, half_wave)
    except SimloopError as exc:
        assert "\n" not in str(exc)
        return
    assert vary.values and len(set(vary.values)) == len(vary.values)
    if vary.is_choice:
        assert set(vary.values) <= set(half_wave.choices[vary.name].allowed)
    else:
        spec_obj = half_wave.parameters[vary.name]
        assert all(math.isfinite(v) and spec_obj.min <= v <= spec_obj.max for v in vary.values)


PROBEISH = st.one_of(
    st.text(max_size=30),
    st.builds(lambda k, a, b, pad: f"{pad}{k}({a}{b}){pad}",
              st.sampled_from(("v", "V", "i", "I", "x", "")),
              st.text(st.characters(codec="utf-8"), max_size=8)
              | st.sampled_from(("out", "0", "gnd", "vs", "an")),
              st.sampled_from(("", ",out", ", an", ",0", ",", ",,x")),
              st.sampled_from(("", " ", "\t"))),
)


@settings(max_examples=1500, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=PROBEISH)
def test_parse_probe_fuzz_safe_label_or_input_error(text: str, half_wave) -> None:
    try:
        probe = parse_probe(text)
    except SimloopError as exc:
        assert "\n" not in str(exc)
    else:
        # what reaches the engine's .save card: no blank, separator or command character
        assert re.fullmatch(r"[vi]\([A-Za-z0-9_.:+\-\[\],]+\)", probe.label), probe.label
        for vector in probe.save_vectors():
            assert re.fullmatch(r"[A-Za-z0-9_.:+\-\[\]#]+", vector), vector
    try:
        half_wave.probe(text)
    except SimloopError as exc:
        assert "\n" not in str(exc)


SOURCE_ARG = st.one_of(
    st.sampled_from(("0", "1", "50", "1k", "-1", "1e308", "5e-324", "nan", "{f0}", "{1/0}", "{x}",
                     "{2**2**2**2**2}", "{f0*2}", "'f0'", "1u", "10n")),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
)


@settings(max_examples=1000, deadline=None)
@given(kind=st.sampled_from(("SIN", "PULSE", "sin", "Pulse")), args=st.lists(SOURCE_ARG, max_size=9),
       paren=st.booleans())
def test_find_periodic_source_fuzz(kind: str, args: list[str], paren: bool) -> None:
    body = " ".join(args)
    card = f"V1 a 0 {kind}({body})" if paren else f"V1 a 0 {kind} {body}"
    try:
        source = find_periodic_source(f"t\n.param f0=50\n{card}\n")
    except SimloopError as exc:
        assert "\n" not in str(exc)
        return
    assert source.frequency > 0
