"""Circuit templates: SPICE netlists with ``.param`` defaults, their metadata, screening, rendering.

A circuit template is a standard SPICE file (``<name>.cir``) whose tunable values are ``.param``
lines, with an optional sidecar ``<name>.toml`` that gives each parameter a unit, a meaning and a
sane range, names the probes, the fundamental and the drive amplitude, and lists model choices.
The built-in circuits live in ``netlists/`` (``simloop/_netlists`` in an installed wheel).

A netlist from a user is untrusted input: ngspice runs ``.control`` blocks, ``*#`` comment
lines and ``*ng_script`` files as commands (which can start programs and load shared
libraries), and ``.include``/``.lib`` read any file. :func:`screen` refuses those constructs;
:meth:`CircuitTemplate.render` inlines the (screened) include files, so the engine gets one
self-contained text without analysis card and without ``.end``.

Flow: :func:`load_circuit` (read, screen, inline, parse ``.param``, read metadata) ->
:meth:`CircuitTemplate.render` (set values and choices, drop analysis cards) ->
:class:`RenderedCircuit` for the engine.
"""

from __future__ import annotations

import ast
import functools
import math
import operator
import re
import tomllib
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from .errors import InputError, NetlistRefused
from .probe import Probe, check_probe_against_netlist, parse_probe
from .units import parse_number
from .vocab import TIME_REFERENCES, WAVEFORM_KINDS

#: Largest netlist or include file read [bytes].
MAX_FILE_BYTES = 2 * 1024 * 1024
#: Largest netlist after all includes are inlined [characters].
MAX_INLINED_CHARS = 8 * 1024 * 1024
#: Deepest chain of nested includes.
MAX_INCLUDE_DEPTH = 16

# ------------------------------------------------------------------------------------ screening
# Each entry: (lower-case text searched for, why it is refused, how to fix it).
_FORBIDDEN: tuple[tuple[str, str, str], ...] = (
    (".control", "a .control block runs commands when the netlist loads",
     "remove the .control ... .endc block; simloop sets the analysis itself"),
    (".endc", "it belongs to a .control block, which runs commands",
     "remove the .control ... .endc block; simloop sets the analysis itself"),
    ("`", "a backquote is ngspice's command substitution", "remove the backquote"),
    ("shell", "'shell' is the ngspice command that starts programs",
     "rename the node, model or parameter that contains 'shell'"),
    ("codemodel", "'codemodel' loads a shared library into ngspice",
     "remove it; simloop accepts only the models ngspice has built in"),
    ("osdi", "'osdi' loads compiled device models into ngspice",
     "remove it; simloop accepts only the models ngspice has built in"),
    ("ng_script", "'ng_script' makes ngspice run the file as a command script",
     "remove it"),
    (".cmodel", "'.cmodel' declares a numerical device that can write files",
     "use a compact .model instead"),
    ("filesource", "the filesource code model reads files", "use a PWL or SIN source"),
    ("d_source", "the d_source code model reads files", "remove it"),
    ("d_state", "the d_state code model reads files", "remove it"),
    ("table2d", "the table2D code model reads files", "remove it"),
    ("table3d", "the table3D code model reads files", "remove it"),
    ("numd", "numerical (CIDER) devices can write files", "use a compact D model"),
    ("nbjt", "numerical (CIDER) devices can write files", "use a compact BJT model"),
    ("numos", "numerical (CIDER) devices can write files", "use a compact MOS model"),
    (".csparam", "'.csparam' sets variables of ngspice's command interpreter",
     "use .param instead"),
)
_HASH_COMMAND = re.compile(r"\s*\*#")
_CONTROL_CHARS = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def builtin_dir() -> Path:
    """Folder of the built-in circuits: ``simloop/_netlists`` if installed, else ``<repo>/netlists``."""
    here = Path(__file__).resolve().parent
    installed = here / "_netlists"
    return installed if installed.is_dir() else here.parent / "netlists"


def models_dir() -> Path:
    """Folder of the shipped model libraries (``models/`` beside the built-in circuits)."""
    return builtin_dir() / "models"


def _refuse(origin: str, number: int, message: str) -> NetlistRefused:
    return NetlistRefused(f"{origin}, line {number}: {message}")


def _check_text(text: str, *, origin: str) -> str:
    """Refuse text ngspice could read differently from us; return it with CRLF made LF."""
    try:
        size = len(text.encode("utf-8"))
    except UnicodeEncodeError:
        raise NetlistRefused(f"{origin}: text is not valid UTF-8; save the file as UTF-8") from None
    if size > MAX_FILE_BYTES:
        raise NetlistRefused(
            f"{origin}: {size} bytes is larger than the {MAX_FILE_BYTES} bytes simloop reads; "
            "split the file or shorten it"
        )
    text = text.replace("\r\n", "\n")
    bad = _CONTROL_CHARS.search(text) or re.search("\r", text)
    if bad:
        number = text.count("\n", 0, bad.start()) + 1
        what = "a NUL byte" if bad.group() == "\x00" else f"control character {bad.group()!r}"
        raise _refuse(origin, number, f"{what} is refused; save the netlist as plain text")
    return text


def _is_file(path: Path) -> bool:
    """``path.is_file()``, but False (not an OSError) for names the system cannot even look up."""
    try:
        return path.is_file()
    except OSError:  # e.g. ENAMETOOLONG
        return False


def _read_file(path: Path, *, origin: str) -> str:
    """Read a netlist or include file: a regular file, at most 2 MB, UTF-8, no NUL bytes."""
    if not _is_file(path):
        raise InputError(f"{origin}: {path} is not a readable file; check the path")
    with open(path, "rb") as fh:
        data = fh.read(MAX_FILE_BYTES + 1)
    if len(data) > MAX_FILE_BYTES:
        raise NetlistRefused(
            f"{origin}: larger than the {MAX_FILE_BYTES} bytes simloop reads; split or shorten it"
        )
    if b"\x00" in data:
        number = data.count(b"\n", 0, data.index(b"\x00")) + 1
        raise _refuse(origin, number, "a NUL byte is refused; save the netlist as plain text")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        number = data.count(b"\n", 0, exc.start) + 1
        raise _refuse(origin, number, "not valid UTF-8; save the file as UTF-8") from None
    return _check_text(text, origin=origin)


def _is_comment(line: str) -> bool:
    return line.lstrip().startswith("*")


def _is_continuation(line: str) -> bool:
    return line.lstrip().startswith("+")


def _groups(lines: list[str]) -> Iterator[tuple[int, list[str]]]:
    """Cards with their ``+`` continuation lines: (first line number, physical lines).

    As in ngspice, comment and blank lines between a card and its continuation do not break it.
    """
    current: list[str] = []
    start = 0
    for number, line in enumerate(lines, start=1):
        if _is_continuation(line) and current:
            current.append(line)
        elif _is_comment(line) or not line.strip():
            continue
        else:
            if current:
                yield start, current
            current, start = [line], number
    if current:
        yield start, current


def _join(group: list[str], sep: str) -> str:
    return group[0] + "".join(sep + g.lstrip()[1:] for g in group[1:])


def screen(
    text: str,
    *,
    source_dir: Path | None,
    allowed_dirs: Sequence[Path],
    origin: str = "netlist",
) -> None:
    """Refuse netlist constructs that could run commands or read files outside the allowed folders.

    Parameters
    ----------
    text : str
        Netlist text (the first line, the title, is screened like any other line).
    source_dir : Path or None
        Folder that relative ``.include``/``.lib`` paths are read from (the netlist's own folder);
        ``None`` refuses relative include paths.
    allowed_dirs : sequence of Path
        Folders include files may lie in (normally the netlist's folder and the shipped models
        folder). Paths are compared after resolving symlinks and ``..``.
    origin : str
        What the text is, for the messages (``"netlist lab.cir"``).

    Raises
    ------
    NetlistRefused
        One line naming the line number, the construct and the fix, for:

        * NUL bytes, other control characters, text that is not UTF-8, more than 2 MB;
        * comment lines that ngspice executes: ``*#`` lines and ``*ng_script``;
        * in any line that is not a ``*`` comment (inline ``;``/``$`` comments included):
          ``.control``, ``.endc``, backquotes, ``shell``, ``codemodel``, ``osdi``, ``ng_script``,
          ``.cmodel``, the file-reading code models (``filesource``, ``d_source``, ``d_state``,
          ``table2d``, ``table3d``), the numerical devices (``numd``, ``nbjt``, ``numos``) and
          ``.csparam`` (sets interpreter variables), as substrings, any case, also across ``+`` continuation lines joined with or without
          a space;
        * ``.include``/``.inc*``/``.lib*`` of a path outside ``allowed_dirs``.

    Notes
    -----
    Matching is on substrings, deliberately blunt: a node called ``nutshell`` is refused too.
    ngspice matches ``.control`` and ``.inc`` as prefixes after leading blanks (``.controlx``
    opens a block, ``.incl f`` includes ``f``), and runs ``*# cmd`` comment lines, which is why
    those are refused as well (checked against ngspice 39).

    Examples
    --------
    >>> screen("t\\nR1 a 0 1k\\n", source_dir=None, allowed_dirs=())
    >>> try:
    ...     screen("t\\n.CONTROL\\n", source_dir=None, allowed_dirs=())
    ... except NetlistRefused as e:
    ...     print(str(e)[:44])
    netlist, line 2: refused '.control': a .cont
    """
    text = _check_text(text, origin=origin)
    lines = text.split("\n")
    for number, line in enumerate(lines, start=1):
        lower = line.lower()
        if _is_comment(line):
            if _HASH_COMMAND.match(line):
                raise _refuse(origin, number, "a '*#' comment line runs as an ngspice command; "
                              "write '* #' or remove the line")
            if "ng_script" in lower:
                raise _refuse(origin, number, "'ng_script' makes ngspice run the file as commands; "
                              "remove it")
            continue
        _screen_words(lower, origin, number)
    for number, group in _groups(lines):
        variants = {_join(group, " "), _join(group, "")} if len(group) > 1 else {group[0]}
        for variant in variants:
            if len(group) > 1:
                _screen_words(variant.lower(), origin, number)
            target = _include_target(variant)
            if target is not None:
                _resolve_include(target[1], base_dir=source_dir, allowed_dirs=allowed_dirs,
                                 origin=origin, number=number)


def _screen_words(lower: str, origin: str, number: int) -> None:
    for token, why, fix in _FORBIDDEN:
        if token in lower:
            raise _refuse(origin, number, f"refused {token!r}: {why}; {fix}")


def _include_target(card: str) -> tuple[str, str, str | None] | None:
    """``(".include" | ".lib", path, section or None)`` for include cards, else None."""
    stripped = card.strip()
    first = stripped.split(None, 1)[0].lower() if stripped else ""
    if first.startswith(".inc"):
        kind = ".include"
    elif first.startswith(".lib"):
        kind = ".lib"
    else:
        return None
    rest = stripped[len(first):].strip()
    if not rest:
        return (kind, "", None)
    if rest[0] in "\"'":
        end = rest.find(rest[0], 1)
        path = rest[1:end] if end > 0 else rest[1:]
        tail = rest[end + 1:].split() if end > 0 else []
    else:
        parts = rest.split()
        path, tail = parts[0], parts[1:]
    return (kind, path, tail[0] if tail else None)


def _resolve_include(
    arg: str, *, base_dir: Path | None, allowed_dirs: Sequence[Path], origin: str, number: int
) -> Path:
    if not arg:
        raise _refuse(origin, number, "an include card without a file name; give the file")
    path = Path(arg).expanduser()
    if not path.is_absolute():
        if base_dir is None:
            raise _refuse(origin, number, f"include {arg!r} is relative but the netlist has no "
                          "folder; give a path inside the netlist's folder")
        path = base_dir / path
    resolved = path.resolve()
    roots = [Path(d).resolve() for d in allowed_dirs]
    if not any(resolved.is_relative_to(root) for root in roots):
        where = " or ".join(str(r) for r in roots) or "(no folder)"
        raise _refuse(origin, number, f"include {arg!r} resolves to {resolved}, outside {where}; "
                      "copy the file next to the netlist")
    return resolved


# ------------------------------------------------------------------------------ logical lines
@dataclass(frozen=True, slots=True)
class _Line:
    """One logical netlist line: continuation lines joined with a space."""

    number: int
    text: str
    origin: str
    kind: Literal["title", "comment", "card"]

    @property
    def first(self) -> str:
        parts = self.text.split(None, 1)
        return parts[0].lower() if parts else ""


def _logical_lines(text: str, *, origin: str, title: bool) -> list[_Line]:
    lines = text.split("\n")
    out: list[_Line] = []
    last_card: int | None = None
    for number, line in enumerate(lines, start=1):
        if title and number == 1:
            out.append(_Line(1, line.strip(), origin, "title"))
            continue
        if not line.strip():
            continue
        if _is_comment(line):
            out.append(_Line(number, line.rstrip(), origin, "comment"))
        elif _is_continuation(line):
            if last_card is None:
                raise InputError(f"{origin}, line {number}: a '+' continuation line with no card "
                                 "before it; join it to a card or remove the '+'")
            prev = out[last_card]
            joined = prev.text + " " + line.lstrip()[1:].strip()
            out[last_card] = _Line(prev.number, joined, origin, "card")
        else:
            card = _Line(number, line.strip(), origin, "card")
            if title and card.first == ".end":
                out.append(card)
                break  # ngspice reads nothing after the top-level .end
            out.append(card)
            last_card = len(out) - 1
    return out


def _expand(
    lines: list[_Line],
    *,
    base_dir: Path | None,
    allowed_dirs: Sequence[Path],
    stack: tuple[tuple[Path, str | None], ...],
    budget: list[int],
) -> list[_Line]:
    """Inline ``.include`` and ``.lib`` cards recursively (each file screened first)."""
    out: list[_Line] = []
    skipping: str | None = None
    for ln in lines:
        if ln.kind != "card":
            if skipping is None:
                out.append(ln)
            continue
        if skipping is not None:
            if ln.first.startswith(".endl"):
                skipping = None
            continue
        target = _include_target(ln.text)
        if target is None:
            out.append(ln)
            continue
        kind, arg, section = target
        path = _resolve_include(arg, base_dir=base_dir, allowed_dirs=allowed_dirs,
                                origin=ln.origin, number=ln.number)
        if kind == ".lib" and section is None and not _is_file(path):
            skipping = arg  # a section header of a library read whole: not wanted here
            continue
        key = (path, section.lower() if section else None)
        if key in stack:
            chain = " -> ".join(p.name + (f" [{s}]" if s else "") for p, s in (*stack, key))
            raise InputError(f"{ln.origin}, line {ln.number}: circular include {chain}; "
                             "remove one of the include cards")
        if len(stack) >= MAX_INCLUDE_DEPTH:
            raise NetlistRefused(f"{ln.origin}, line {ln.number}: includes nested deeper than "
                                 f"{MAX_INCLUDE_DEPTH}; flatten them")
        label = f"include {arg}" + (f" [{section}]" if section else "")
        text = _read_file(path, origin=label)
        budget[0] += len(text)
        if budget[0] > MAX_INLINED_CHARS:
            raise NetlistRefused(f"{ln.origin}, line {ln.number}: the inlined netlist grows past "
                                 f"{MAX_INLINED_CHARS} characters; include less")
        screen(text, source_dir=path.parent, allowed_dirs=allowed_dirs, origin=label)
        inner = _logical_lines(text, origin=label, title=False)
        if section is not None:
            inner = _lib_section(inner, section, label)
        out.append(_Line(ln.number, f"* begin {label}", ln.origin, "comment"))
        out.extend(_expand(inner, base_dir=path.parent, allowed_dirs=allowed_dirs,
                           stack=(*stack, key), budget=budget))
        out.append(_Line(ln.number, f"* end {label}", ln.origin, "comment"))
    if skipping is not None:
        raise InputError(f"{lines[-1].origin}: '.lib {skipping}' is neither a file nor a section "
                         "closed by .endl; check the path")
    return out


def _lib_section(lines: list[_Line], section: str, origin: str) -> list[_Line]:
    """Lines between ``.lib <section>`` and its ``.endl`` in a library file."""
    want = section.lower()
    inside = False
    picked: list[_Line] = []
    for ln in lines:
        if ln.kind == "card" and ln.first.startswith(".lib"):
            parts = ln.text.split()
            if not inside and len(parts) == 2 and parts[1].lower() == want:
                inside = True
                continue
        if inside and ln.kind == "card" and ln.first.startswith(".endl"):
            return picked
        if inside:
            picked.append(ln)
    raise InputError(f"{origin}: no section '.lib {section}' ... '.endl' in the library; "
                     "check the section name")


# ------------------------------------------------------------------------------ tokens, values
_TOKEN = re.compile(r"\{[^{}]*\}|'[^']*'|\"[^\"]*\"|[^\s,()={}']+|[()=]")
_LITERAL = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?([a-zA-Z]*)")
_SCALE = {"f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "k": 1e3, "g": 1e9,
          "t": 1e12, "a": 1e-18}


def _strip_inline_comment(text: str) -> str:
    """Cut ngspice inline comments (``;``, `` $ ``, ``//``) outside braces and quotes."""
    depth, quote = 0, ""
    for i, ch in enumerate(text):
        if quote:
            quote = "" if ch == quote else quote
        elif ch in "'\"":
            quote = ch
        elif ch == "{":
            depth += 1
        elif ch == "}":
            depth = max(0, depth - 1)
        elif depth == 0 and (ch == ";" or text.startswith("//", i)
                             or (ch == "$" and (i == 0 or text[i - 1] in " \t"))):
            return text[:i].rstrip()
    return text


def _tokens(text: str) -> list[re.Match[str]]:
    return list(_TOKEN.finditer(_strip_inline_comment(text)))


def _spice_literal(text: str) -> float | None:
    """A SPICE number as ngspice reads it (``10uF`` is 1e-5, units ignored), else None."""
    s = text.strip()
    if s.startswith("{") and s.endswith("}") or s.startswith("'") and s.endswith("'"):
        s = s[1:-1].strip()
    m = _LITERAL.fullmatch(s)
    if m is None:
        return None
    letters = m.group(1).lower()
    mantissa = float(s[: len(s) - len(letters)]) if letters else float(s)
    if letters.startswith("meg"):
        scale = 1e6
    elif letters.startswith("mil"):
        scale = 25.4e-6
    else:
        scale = _SCALE.get(letters[:1], 1.0)
    value = mantissa * scale
    return value if math.isfinite(value) else None


_FUNCTIONS = {
    "sqrt": math.sqrt, "exp": math.exp, "log": math.log, "ln": math.log, "log10": math.log10,
    "sin": math.sin, "cos": math.cos, "tan": math.tan, "atan": math.atan, "sinh": math.sinh,
    "cosh": math.cosh, "tanh": math.tanh, "abs": abs, "min": min, "max": max, "pow": math.pow,
    "floor": math.floor, "ceil": math.ceil,
}
_CONSTANTS = {"pi": math.pi, "e": math.e}
_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow, ast.Mod: operator.mod}
_NUMBER_IN_EXPR = re.compile(
    r"(?<![\w.])((?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)(meg|mil|[a-zA-Z]+)?(?![\w.])"
)


class _Unresolved(Exception):
    """An expression names something we cannot evaluate (not an error by itself)."""


def _evaluate(expr: str, env: Mapping[str, float]) -> float:
    """Evaluate a numparam expression (``{vsec/ratio}``) with + - * / ** ^ and math functions."""
    s = expr.strip()
    if s.startswith("{") and s.endswith("}") or s.startswith("'") and s.endswith("'"):
        s = s[1:-1]
    literal = _spice_literal(s)
    if literal is not None:
        return literal
    if len(s) > 2000:
        raise _Unresolved(s)

    def number(m: re.Match[str]) -> str:
        value = _spice_literal(m.group(0))
        if value is None:
            raise _Unresolved(m.group(0))
        return repr(value)

    s = _NUMBER_IN_EXPR.sub(number, s).replace("^", "**")
    try:
        tree = ast.parse(s.lower(), mode="eval")
    except SyntaxError:
        raise _Unresolved(expr) from None

    def walk(node: ast.AST) -> float:
        if isinstance(node, ast.Expression):
            return walk(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
            return float(node.value)
        if isinstance(node, ast.Name):
            if node.id in env:
                return float(env[node.id])
            if node.id in _CONSTANTS:
                return _CONSTANTS[node.id]
            raise _Unresolved(node.id)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            value = walk(node.operand)
            return -value if isinstance(node.op, ast.USub) else value
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            left, right = walk(node.left), walk(node.right)
            if isinstance(node.op, ast.Pow) and abs(right) > 1000:
                raise _Unresolved(expr)
            return float(_BINARY[type(node.op)](left, right))
        if (isinstance(node, ast.Call) and isinstance(node.func, ast.Name)
                and node.func.id in _FUNCTIONS and not node.keywords):
            return float(_FUNCTIONS[node.func.id](*(walk(a) for a in node.args)))
        raise _Unresolved(expr)

    try:
        value = walk(tree)
    except (ArithmeticError, ValueError, TypeError):
        raise _Unresolved(expr) from None
    if not math.isfinite(value):
        raise _Unresolved(expr)
    return value


# ------------------------------------------------------------------------------------ .param
_ASSIGN = re.compile(
    r"(?P<name>[A-Za-z_]\w*)\s*=\s*(?P<value>\{[^{}]*\}|'[^']*'|\"[^\"]*\"|[^\s,]+)"
)


def _is_param_card(line: _Line) -> bool:
    return line.kind == "card" and line.first.startswith(".para")


@dataclass(frozen=True, slots=True)
class _ParamDef:
    name: str
    text: str
    literal: float | None
    origin: str
    number: int


def _top_level(lines: Sequence[_Line]) -> Iterator[_Line]:
    """The cards outside every ``.subckt`` ... ``.ends`` body (the delimiters left out)."""
    depth = 0
    for ln in lines:
        if ln.kind != "card":
            continue
        if ln.first.startswith(".subckt"):
            depth += 1
        elif ln.first.startswith(".ends"):
            depth = max(0, depth - 1)
        elif depth == 0:
            yield ln


def _param_defs(lines: Sequence[_Line]) -> list[_ParamDef]:
    defs: list[_ParamDef] = []
    for ln in _top_level(lines):
        if _is_param_card(ln):
            body = _strip_inline_comment(ln.text.split(None, 1)[1] if " " in ln.text else "")
            for m in _ASSIGN.finditer(body):
                defs.append(_ParamDef(m.group("name").lower(), m.group("value"),
                                      _spice_literal(m.group("value")), ln.origin, ln.number))
    return defs


def _param_env(defs: Sequence[_ParamDef], overrides: Mapping[str, float]) -> dict[str, float]:
    """Values of every parameter that can be evaluated, in the order ngspice reads them."""
    env: dict[str, float] = {}
    for d in defs:
        if d.name in overrides:
            env[d.name] = float(overrides[d.name])
        elif d.literal is not None:
            env[d.name] = d.literal
        else:
            try:
                env[d.name] = _evaluate(d.text, env)
            except _Unresolved:
                env.pop(d.name, None)
    return env


_BRACED = re.compile(r"\{([^{}]*)\}")
_IDENT = re.compile(r"(?<![\w.])([A-Za-z_]\w*)(?!\w)(\s*\()?")
_PROBE_CALL = re.compile(r"\b[viVI]\s*\([^()]*\)")
_BUILTIN_NAMES = frozenset({"pi", "e", "temper", "hertz", "time", "boltz", "planck", "echarge",
                            "kelvin", "true", "false", "gmin", "vt", "temp"})


def _check_defined(lines: Sequence[_Line]) -> None:
    """Refuse ``{name}`` uses with no ``.param``, ``.func`` or subcircuit parameter behind them."""
    known = set(_BUILTIN_NAMES)
    for ln in lines:
        if ln.kind != "card":
            continue
        body = _strip_inline_comment(ln.text)
        if ln.first.startswith((".para", ".subckt")) or ln.first[:1] == "x":
            known.update(m.group("name").lower() for m in _ASSIGN.finditer(body))
        elif ln.first.startswith(".func"):
            m = re.match(r"\.func\w*\s+([A-Za-z_]\w*)\s*\(([^)]*)\)", body, re.IGNORECASE)
            if m:
                known.add(m.group(1).lower())
                known.update(a.strip().lower() for a in m.group(2).split(",") if a.strip())
    for ln in lines:
        if ln.kind != "card":
            continue
        for expr in _BRACED.findall(_strip_inline_comment(ln.text)):
            scrubbed = _NUMBER_IN_EXPR.sub("0", _PROBE_CALL.sub("0", expr))
            for m in _IDENT.finditer(scrubbed):
                name = m.group(1).lower()
                if m.group(2) is None and name not in known:
                    raise InputError(f"{ln.origin}, line {ln.number}: parameter '{name}' is used "
                                     f"in {{{expr.strip()}}} but never defined; add "
                                     f".param {name}=<value>")


# ------------------------------------------------------------------------------ circuit scans
_MODEL_TOKEN_INDEX = {"d": 3, "s": 5, "w": 4, "j": 4, "z": 4}
_NODE_COUNT = {"r": 2, "c": 2, "l": 2, "d": 2, "v": 2, "i": 2, "f": 2, "h": 2, "b": 2, "w": 2,
               "e": 4, "g": 4, "s": 4, "t": 4, "o": 4, "m": 4, "q": 3, "j": 3, "z": 3}
_EG_KEYWORDS = ("value", "vol", "cur", "poly", "table", "laplace", "freq", "and", "or", "nand",
                "nor")


@functools.lru_cache(maxsize=16)
def _top_cards(text: str) -> tuple[tuple[str, ...], ...]:
    """Lower-case tokens of every top-level card (subcircuit bodies skipped).

    Cached per text: one run asks several questions (nodes, branches, diode models, storage
    elements, a source's nodes) of the same rendered netlist, and parsing it is the cost.
    """
    cards = []
    for ln in _top_level(_logical_lines(text.replace("\r\n", "\n"), origin="netlist", title=True)):
        tokens = tuple(m.group(0).lower() for m in _tokens(ln.text))
        if tokens:
            cards.append(tokens)
    return tuple(cards)


def _model_names(text: str) -> dict[str, str]:
    """``{model name: model type}`` of every ``.model`` card (lower case)."""
    names: dict[str, str] = {}
    for ln in _logical_lines(text.replace("\r\n", "\n"), origin="netlist", title=True):
        if ln.kind == "card" and ln.first == ".model":
            tokens = [m.group(0).lower() for m in _tokens(ln.text)]
            if len(tokens) >= 3:
                names[tokens[1]] = tokens[2]
    return names


def _device_nodes(tokens: list[str], models: Mapping[str, str]) -> list[str]:
    letter = tokens[0][0]
    words = [t for t in tokens[1:] if t not in "()"]
    if letter == "x":
        plain: list[str] = []
        for i, t in enumerate(words):
            if t == "params:" or t == "=" or (i + 1 < len(words) and words[i + 1] == "="):
                break
            plain.append(t)
        return plain[:-1]
    count = _NODE_COUNT.get(letter, 0)
    if letter in "eg" and len(words) > 2 and words[2].startswith(_EG_KEYWORDS):
        count = 2
    if letter in "mq" and len(words) > 3 and words[3] in models:
        count = 3
    return [w for w in words[:count] if not w.startswith(("{", "'"))]


def circuit_nodes(text: str) -> frozenset[str]:
    """Lower-case names of the top-level nodes of a netlist (``gnd`` given as ``0``).

    Examples
    --------
    >>> sorted(circuit_nodes("t\\nV1 in 0 1\\nR1 in out 1k\\nD1 out gnd dx\\n"))
    ['0', 'in', 'out']
    """
    models = _model_names(text)
    nodes: set[str] = set()
    for tokens in _top_cards(text):
        if tokens[0][0].isalpha():
            nodes.update("0" if n == "gnd" else n for n in _device_nodes(tokens, models))
    return frozenset(nodes)


def circuit_branches(text: str) -> frozenset[str]:
    """Lower-case names of the top-level elements with a branch current (V, E, H, L)."""
    return frozenset(t[0] for t in _top_cards(text) if t[0][0] in "vehl")


def element_nodes(text: str, name: str) -> tuple[str, ...]:
    """Lower-case node names of the top-level element ``name`` (its first two for a source).

    Raises
    ------
    InputError
        If no top-level element has that name.
    """
    wanted = name.lower()
    for tokens in _top_cards(text):
        if tokens[0] == wanted:
            return tuple(tokens[1:3])
    raise InputError(f"no element {name!r} in the circuit")


@dataclass(frozen=True, slots=True)
class StorageElement:
    """A top-level capacitor or inductor: its state is a voltage (C) or a current (L)."""

    name: str
    kind: Literal["C", "L"]
    plus: str
    minus: str
    value: str
    coupled: bool = False
    """An inductor named in a K (mutual coupling) card."""

    def save_vectors(self) -> tuple[str, ...]:
        """Engine save expressions needed to read the state."""
        if self.kind == "L":
            return (f"i({self.name})",)
        return tuple(f"v({node})" for node in (self.plus, self.minus) if node != "0")

    def read(self, vectors: Mapping[str, Any]) -> Any:
        """The state over the engine's time points: v(plus) - v(minus) [V], or i(L) [A]."""
        if self.kind == "L":
            return vectors[f"{self.name}#branch"]
        plus = vectors[self.plus] if self.plus != "0" else 0.0
        minus = vectors[self.minus] if self.minus != "0" else 0.0
        return plus - minus


def storage_elements(text: str) -> tuple[StorageElement, ...]:
    """Top-level capacitors and inductors of a circuit text, in netlist order.

    Elements inside subcircuits are not reported (their states cannot be set from outside).
    """
    found: list[StorageElement] = []
    cards = list(_top_cards(text))
    coupled = {t for tokens in cards if tokens[0][0] == "k" for t in tokens[1:3]}
    for tokens in cards:
        name = tokens[0]
        if name[0] in "cl" and len(tokens) >= 4 and not name.startswith("."):
            found.append(StorageElement(name, "C" if name[0] == "c" else "L", tokens[1],
                                        tokens[2], tokens[3], coupled=name in coupled))
    return tuple(found)


def with_initial_conditions(text: str, states: Mapping[str, float]) -> str:
    """The circuit text with ``IC=value`` on the named capacitors and inductors.

    Used with a ``uic`` transient: the engine then starts from these capacitor voltages [V] and
    inductor currents [A] instead of the operating point. Continuation lines are joined.
    """
    wanted = {k.lower(): float(v) for k, v in states.items()}
    out: list[str] = []
    depth = 0
    for ln in _logical_lines(text.replace("\r\n", "\n"), origin="netlist", title=True):
        line = ln.text
        if ln.kind == "card":
            if ln.first.startswith(".subckt"):
                depth += 1
            elif ln.first.startswith(".ends"):
                depth = max(0, depth - 1)
            elif depth == 0 and ln.first in wanted:
                line = re.sub(r"\s+ic\s*=\s*\S+", "", line, flags=re.IGNORECASE)
                line = f"{line} IC={wanted[ln.first]:.17g}"
        out.append(line)
    return "\n".join(out) + "\n"


def replace_model(text: str, model: str, parameters: Mapping[str, float]) -> str:
    """The circuit text with the ``.model`` card ``model`` rewritten to hold only ``parameters``.

    The model keeps its name and type, so the devices that use it are unchanged; parameters left
    out take the engine's defaults. Continuation lines of the old card are joined first.

    Raises
    ------
    InputError
        If there is no such model card.
    """
    wanted = model.lower()
    out: list[str] = []
    found = False
    for ln in _logical_lines(text.replace("\r\n", "\n"), origin="netlist", title=True):
        line = ln.text
        if ln.kind == "card" and ln.first == ".model":
            tokens = [m.group(0).lower() for m in _tokens(line)]
            if len(tokens) >= 3 and tokens[1] == wanted:
                kind = tokens[2].upper()
                values = " ".join(f"{k.upper()}={float(v):.17g}" for k, v in parameters.items())
                line = f".model {tokens[1]} {kind}({values})"
                found = True
        out.append(line)
    if not found:
        raise InputError(f"no .model {model!r} in the circuit")
    return "\n".join(out) + "\n"


def device_models(text: str, prefix: str = "d") -> dict[str, str]:
    """``{device: model}`` of the top-level devices whose names start with ``prefix``."""
    models = _model_names(text)
    found: dict[str, str] = {}
    for tokens in _top_cards(text):
        if tokens[0].startswith(prefix.lower()) and not tokens[0].startswith("."):
            model = next((t for t in tokens[1:] if t in models), None)
            if model is not None:
                found[tokens[0]] = model
    return found


_MODEL_ASSIGN = re.compile(r"([A-Za-z_]\w*)\s*=\s*([^\s()=,]+)")


def model_parameters(text: str, model: str) -> dict[str, float]:
    """Numeric parameters of the ``.model`` card named ``model`` (upper-case keys).

    Values that are not plain SPICE numbers (expressions in braces) are left out.

    Examples
    --------
    >>> model_parameters("t\\n.model dx D(IS=1e-9 N=1.8 RS=0.5)\\n", "dx")
    {'IS': 1e-09, 'N': 1.8, 'RS': 0.5}
    """
    wanted = model.lower()
    for ln in _logical_lines(text.replace("\r\n", "\n"), origin="netlist", title=True):
        if ln.kind != "card" or ln.first != ".model":
            continue
        tokens = [m.group(0).lower() for m in _tokens(ln.text)]
        if len(tokens) < 3 or tokens[1] != wanted:
            continue
        values: dict[str, float] = {}
        for key, raw in _MODEL_ASSIGN.findall(ln.text):
            try:
                values[key.upper()] = parse_number(raw)
            except InputError:
                continue
        return values
    raise InputError(f"no .model {model!r} in the circuit")


def circuit_instances(text: str) -> frozenset[str]:
    """Lower-case names of the top-level subcircuit instances (X lines)."""
    return frozenset(t[0] for t in _top_cards(text) if t[0][0] == "x")


def _model_token(ln: _Line, models: Mapping[str, str]) -> re.Match[str] | None:
    """The token holding the model name of a device card, or None."""
    tokens = [m for m in _tokens(ln.text) if m.group(0) not in "()"]
    letter = ln.first[:1]
    if letter in "mq":
        index = 4 if len(tokens) > 4 and tokens[4].group(0).lower() in models else 5
    else:
        index = _MODEL_TOKEN_INDEX.get(letter, -1)
    if index < 0 or index >= len(tokens):
        return None
    return tokens[index]


_MODEL_FAMILY = {"d": ("d",), "s": ("sw",), "w": ("csw",), "m": ("nmos", "pmos", "vdmos"),
                 "q": ("npn", "pnp"), "j": ("njf", "pjf"), "z": ("nmf", "pmf")}


# ---------------------------------------------------------------------------- periodic source
@dataclass(frozen=True, slots=True)
class PeriodicSource:
    """The periodic drive of a circuit: its first SIN or PULSE source, values evaluated.

    Parameters
    ----------
    name : str
        Source name (lower case).
    kind : {"sin", "pulse"}
    frequency : float
        Fundamental frequency [Hz] (SIN: FREQ; PULSE: 1/PER).
    amplitude : float
        SIN: VA; PULSE: V2 - V1 [V or A].
    offset : float
        SIN: VO; PULSE: V1 [V or A].
    delay : float
        TD [s].
    phase_deg : float
        SIN phase [deg] (0 for PULSE).
    v1, v2, rise, fall, width, period : float or None
        PULSE values [V or A, s]; None for SIN.
    duty : float or None
        PULSE 50 %-point duty ``(PW + (TR + TF)/2) / PER``; None for SIN.

    Notes
    -----
    :attr:`time_origin` is the engine time of the waveform's reference instant: for SIN the
    rising zero crossing of ``VO + VA sin(2 pi f (t - TD) + phase)``, ``TD - phase/(360 f)``;
    for PULSE the centre between the 50 % points,
    ``TD + (TR/2 + TR + PW + TF/2) / 2 = TD + 3 TR/4 + PW/2 + TF/4``.
    """

    name: str
    kind: Literal["sin", "pulse"]
    frequency: float
    amplitude: float
    offset: float
    delay: float
    phase_deg: float = 0.0
    v1: float | None = None
    v2: float | None = None
    rise: float | None = None
    fall: float | None = None
    width: float | None = None
    period: float | None = None
    duty: float | None = None

    @property
    def time_origin(self) -> float:
        """Engine time [s] of the reference instant (see Notes)."""
        if self.kind == "sin":
            return self.delay - self.phase_deg / (360.0 * self.frequency)
        assert self.rise is not None and self.width is not None and self.fall is not None
        return self.delay + 0.75 * self.rise + 0.5 * self.width + 0.25 * self.fall


_SOURCE_KEYWORDS = ("dc", "ac", "distof1", "distof2", "sin", "pulse", "pwl", "exp", "sffm", "am",
                    "trnoise", "trrandom")


def _source_args(ln: _Line) -> tuple[str, list[str]] | None:
    tokens = [m.group(0) for m in _tokens(ln.text)]
    for i, tok in enumerate(tokens[3:], start=3):
        kind = tok.lower()
        if kind not in ("sin", "pulse"):
            continue
        args: list[str] = []
        rest = tokens[i + 1:]
        if rest and rest[0] == "(":
            for t in rest[1:]:
                if t == ")":
                    break
                args.append(t)
        else:
            for t in rest:
                if t.lower() in _SOURCE_KEYWORDS or t in "()=":
                    break
                args.append(t)
        return kind, args
    return None


def _first_periodic(lines: Sequence[_Line]) -> tuple[_Line, str, list[str]] | None:
    for ln in _top_level(lines):
        if ln.first[:1] in ("v", "i"):
            found = _source_args(ln)
            if found is not None:
                return ln, found[0], found[1]
    return None


def _periodic_from(ln: _Line, kind: str, args: list[str], env: Mapping[str, float]) -> PeriodicSource:
    where = f"{ln.origin}, line {ln.number}"
    values: list[float] = []
    for a in args:
        try:
            values.append(_evaluate(a, env))
        except _Unresolved as exc:
            raise InputError(f"{where}: cannot evaluate {a!r} of the {kind.upper()} source "
                             f"(unknown {exc.args[0]!r}); use numbers or .param names") from None
    name = ln.first
    if kind == "sin":
        if len(values) < 3:
            raise InputError(f"{where}: SIN source {name} needs VO VA FREQ at least; "
                             "give the frequency explicitly")
        vo, va, freq, *more = values
        td, theta, phase = (more + [0.0, 0.0, 0.0])[:3]
        if not freq > 0:
            raise InputError(f"{where}: SIN source {name} has frequency {freq!r}; it must be > 0")
        if theta != 0:
            raise InputError(f"{where}: SIN source {name} is damped (THETA {theta!r}), so not "
                             "periodic; set THETA to 0")
        return PeriodicSource(name, "sin", freq, va, vo, td, phase)
    if len(values) < 7:
        raise InputError(f"{where}: PULSE source {name} needs all of V1 V2 TD TR TF PW PER; "
                         "ngspice would fill the missing ones from the time step")
    if len(values) > 7:
        raise InputError(f"{where}: PULSE source {name} has a pulse count, so it stops; "
                         "remove the 8th value")
    v1, v2, td, tr, tf, pw, per = values
    if not (per > 0 and tr > 0 and tf > 0 and pw >= 0 and td >= 0):
        raise InputError(f"{where}: PULSE source {name} needs PER > 0, TR > 0, TF > 0, PW >= 0, "
                         f"TD >= 0; got TD {td:g}, TR {tr:g}, TF {tf:g}, PW {pw:g}, PER {per:g}")
    if tr + pw + tf > per * (1 + 1e-12):
        raise InputError(f"{where}: PULSE source {name}: TR + PW + TF = {tr + pw + tf:g} s is "
                         f"longer than the period {per:g} s; shorten the pulse")
    return PeriodicSource(name, "pulse", 1.0 / per, v2 - v1, v1, td, 0.0, v1, v2, tr, tf, pw,
                          per, (pw + 0.5 * (tr + tf)) / per)


def find_periodic_source(text: str, params: Mapping[str, float] | None = None) -> PeriodicSource:
    """Find the first SIN or PULSE independent source of a netlist and evaluate its values.

    Parameters
    ----------
    text : str
        Netlist text (first line is the title).
    params : mapping of str to float, optional
        Parameter values overriding the netlist's ``.param`` defaults (names any case).
        Values in ``{}`` are evaluated with these and the defaults.

    Returns
    -------
    PeriodicSource

    Raises
    ------
    InputError
        If there is no SIN/PULSE source, a value cannot be evaluated, or the source is not
        periodic (damped SIN, PULSE with a count or missing TR/TF/PW/PER, pulse longer than
        its period).

    Examples
    --------
    A 50 Hz secondary of 12 V peak:

    >>> s = find_periodic_source("t\\n.param f0=50 vp=12\\nVs a 0 SIN(0 {vp} {f0})\\n")
    >>> s.kind, s.frequency, s.amplitude
    ('sin', 50.0, 12.0)
    >>> p = find_periodic_source("t\\nVg g 0 PULSE(0 5 0 10n 10n 240n 1u)\\n")
    >>> round(p.frequency), round(p.duty, 3)
    (1000000, 0.25)
    """
    text = _check_text(text, origin="netlist")
    lines = _logical_lines(text, origin="netlist", title=True)
    found = _first_periodic(lines)
    if found is None:
        raise InputError("no SIN or PULSE source in the netlist; simloop needs a periodic drive")
    overrides: dict[str, float] = {}
    for key, value in (params or {}).items():
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"parameter {key}: {value!r} is not a number; give numbers")
        overrides[key.lower()] = float(value)
    env = _param_env(_param_defs(lines), overrides)
    env.update(overrides)
    return _periodic_from(*found, env)


# ---------------------------------------------------------------------------- templates
class FrozenMap(Mapping):
    """A read-only, picklable, hashable mapping (templates travel to worker processes)."""

    __slots__ = ("_data",)

    def __init__(self, data: Mapping | None = None) -> None:
        object.__setattr__(self, "_data", dict(data or {}))

    def __getitem__(self, key):
        return self._data[key]

    def __iter__(self):
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __hash__(self) -> int:
        return hash(frozenset(self._data.items()))

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Mapping) and dict(self._data) == dict(other)

    def __repr__(self) -> str:
        return f"FrozenMap({self._data!r})"

    def __reduce__(self):
        return (FrozenMap, (self._data,))

    def __setattr__(self, name, value):
        raise AttributeError("FrozenMap is read-only")


@dataclass(frozen=True, slots=True)
class ParameterSpec:
    """One tunable ``.param`` of a circuit.

    Parameters
    ----------
    name : str
        Lower-case parameter name.
    default : float
        Default value from the netlist's ``.param`` line [unit].
    unit : str
        SI unit (``"V"``, ``"Hz"``, ``"ohm"``, ``"F"``, ``"H"``, ``"s"``, ``"1"``); ``""`` if unknown.
    meaning : str
        What the parameter is; ``""`` if unknown.
    min, max : float or None
        Sane range, inclusive; None where unknown.
    """

    name: str
    default: float
    unit: str = ""
    meaning: str = ""
    min: float | None = None
    max: float | None = None

    def check(self, value: float, *, what: str = "") -> float:
        """Return ``value`` as float, or raise InputError if it is not finite or out of range."""
        label = what or f"parameter {self.name}"
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"{label}: {value!r} is not a number; give a value in "
                             f"{self.unit or 'its unit'}")
        value = float(value)
        if not math.isfinite(value):
            raise InputError(f"{label}: {value!r} is not a finite number")
        lo = -math.inf if self.min is None else self.min
        hi = math.inf if self.max is None else self.max
        if not lo <= value <= hi:
            unit = f" {self.unit}" if self.unit and self.unit != "1" else ""
            raise InputError(f"{label} = {value:g}{unit} is outside its range "
                             f"{_fmt(self.min, '-inf')} .. {_fmt(self.max, 'inf')}{unit}; "
                             "choose a value inside")
        return value


def _fmt(value: float | None, unbounded: str) -> str:
    return unbounded if value is None else f"{value:g}"


@dataclass(frozen=True, slots=True)
class ChoiceSpec:
    """A model selection: which ``.model`` the listed device lines use.

    Parameters
    ----------
    name : str
        Choice name (``"diode"``), used as ``--set diode=sl_schottky``.
    default : str
        Model used unless another is chosen (lower case).
    devices : tuple of str
        Device names whose model field is rewritten (lower case).
    allowed : tuple of str
        Model names that may be chosen (lower case).
    meaning : str
        What is being chosen.
    """

    name: str
    default: str
    devices: tuple[str, ...]
    allowed: tuple[str, ...]
    meaning: str = ""


@dataclass(frozen=True, slots=True)
class RenderedCircuit:
    """A netlist ready for the engine: includes inlined, no analysis card, no ``.end``.

    Parameters
    ----------
    text : str
        The netlist; first line is a ``*`` title comment.
    parameters : mapping of str to float
        Final value of every tunable parameter.
    choices : mapping of str to str
        Final model of every choice.
    notes : tuple of str
        What rendering changed that a user should know (dropped cards and the like).
    drive : PeriodicSource or None
        The periodic drive evaluated with the final values (None if the netlist has none).
    """

    text: str
    parameters: Mapping[str, float]
    choices: Mapping[str, str]
    notes: tuple[str, ...]
    drive: PeriodicSource | None


MetadataOrigin = Literal["sidecar", "inferred"]

_DROP_EXACT = frozenset({".tran", ".op", ".ac", ".dc", ".noise", ".tf", ".sens", ".pz", ".disto",
                         ".pss", ".sp", ".end"})
_DROP_PREFIX = (".four", ".meas", ".print", ".plot", ".save", ".probe", ".width")


@dataclass(frozen=True, slots=True)
class CircuitTemplate:
    """A parametrised circuit: netlist, parameter specs, probes, drive and model choices.

    Parameters
    ----------
    name : str
        Built-in name or the netlist's file stem.
    path : Path
        The netlist file.
    text : str
        The netlist as read (screened).
    title, description : str
        Scenario title and description (from the metadata; title from line 1 otherwise).
    parameters : mapping of str to ParameterSpec
        Tunable parameters (``.param`` with a literal default), lower-case names.
    probes : mapping of str to Probe
        Named probes (``diode_current``); :meth:`probe` also parses expressions.
    default_probe : Probe or None
        Probe used when none is asked for.
    conduction_probes : tuple of Probe
        Diode current probes that measure the conduction angle.
    fundamental_param, amplitude_param : str or None
        Parameters holding the fundamental [Hz] and the drive amplitude [V].
    reference : str or None
        Time reference of the ideal waveform (a :data:`simloop.vocab.TIME_REFERENCES` value).
    ideal_kind, estimate_kind : str or None
        Ideal counterpart and drop-corrected estimate (:data:`simloop.vocab.WAVEFORM_KINDS`).
    choices : mapping of str to ChoiceSpec
        Model selections.
    metadata_origin : {"sidecar", "inferred"}
        Whether the metadata came from a ``.toml`` file or was inferred from the netlist.
    builtin : bool
        True for the circuits shipped with simloop.
    roles : mapping of str to str or int
        Parameter names by role (``load``, ``source_resistance``, ``reservoir``, ...), the
        element that delivers the input power (``power_source``) and ``diodes_in_path``.
    """

    name: str
    path: Path
    text: str
    title: str
    description: str
    parameters: Mapping[str, ParameterSpec]
    probes: Mapping[str, Probe]
    default_probe: Probe | None
    conduction_probes: tuple[Probe, ...]
    fundamental_param: str | None
    amplitude_param: str | None
    reference: str | None
    ideal_kind: str | None
    estimate_kind: str | None
    choices: Mapping[str, ChoiceSpec]
    metadata_origin: MetadataOrigin
    builtin: bool
    _lines: tuple[_Line, ...] = field(repr=False, compare=False)
    roles: Mapping[str, str | int] = field(default_factory=lambda: FrozenMap())
    """What the estimate and the efficiency need to know (see :data:`ROLE_PARAMETERS`)."""

    @property
    def defaults(self) -> dict[str, float]:
        """Default value of every tunable parameter."""
        return {name: spec.default for name, spec in self.parameters.items()}

    @property
    def inlined_text(self) -> str:
        """The netlist with its includes inlined, otherwise unchanged."""
        return "\n".join(ln.text for ln in self._lines) + "\n"

    def probe(self, name_or_expression: str) -> Probe:
        """A named probe of this circuit (``"diode_current"``) or a parsed, checked expression.

        Raises
        ------
        InputError
            If it is neither a known name nor a probe of an existing node or source.
        """
        key = name_or_expression.strip().lower()
        if key in self.probes:
            return self.probes[key]
        if "(" not in key:
            raise InputError(f"{self.name}: no probe named {name_or_expression!r}; named probes "
                             f"are: {', '.join(self.probes) or '(none)'}, or write v(node), "
                             "v(node1,node2), i(source)")
        probe = parse_probe(name_or_expression)
        check_probe_against_netlist(probe, self.inlined_text)
        return probe

    def final_values(self, values: Mapping[str, float] | None = None) -> dict[str, float]:
        """Final tunable values: defaults updated with ``values`` (checked names and ranges)."""
        final = self.defaults
        for key, value in (values or {}).items():
            name = key.lower()
            if name not in self.parameters:
                raise InputError(f"{self.name}: unknown parameter {key!r}; parameters are: "
                                 f"{', '.join(self.parameters)}")
            final[name] = self.parameters[name].check(value)
        return final

    def render(
        self, values: Mapping[str, float] | None = None, choices: Mapping[str, str] | None = None
    ) -> RenderedCircuit:
        """Set parameter values and model choices; inline includes; drop analysis cards and ``.end``.

        Parameters
        ----------
        values : mapping of str to float, optional
            New values for tunable parameters (names any case) [their units].
        choices : mapping of str to str, optional
            ``{choice name: model name}``.

        Returns
        -------
        RenderedCircuit

        Raises
        ------
        InputError
            Unknown parameter or choice (listing the known ones), value out of range (naming
            the range), model not allowed, a PULSE drive made inconsistent by the values.

        Examples
        --------
        >>> t = load_circuit("half-wave")
        >>> r = t.render({"RLOAD": 47}, {"diode": "sl_schottky"})
        >>> r.parameters["rload"]
        47.0
        >>> [line.split() for line in r.text.splitlines() if line.startswith(("D1", ".tran"))]
        [['D1', 'an', 'out', 'sl_schottky']]
        """
        final = self.final_values(values)
        picked = {name: spec.default for name, spec in self.choices.items()}
        for key, model in (choices or {}).items():
            name = key.lower()
            if name not in self.choices:
                raise InputError(f"{self.name}: unknown choice {key!r}; choices are: "
                                 f"{', '.join(self.choices) or '(none)'}")
            picked[name] = _check_choice(self.choices[name], model)
        device_model = {dev: picked[c.name] for c in self.choices.values() for dev in c.devices}
        models = _model_names(self.inlined_text)

        out: list[str] = []
        dropped: dict[str, list[int]] = {}
        top = self._lines[0].origin if self._lines else ""
        depth = 0
        for ln in self._lines:
            if ln.kind == "title":
                out.append("* " + ln.text.lstrip("*").strip() if ln.text else "* " + self.name)
                continue
            if ln.kind == "comment":
                out.append(ln.text)
                continue
            first = ln.first
            if first in _DROP_EXACT or first.startswith(_DROP_PREFIX):
                dropped.setdefault(first, []).append(ln.number)
                if first == ".end" and ln.origin == top:
                    break
                continue
            text = ln.text
            if first.startswith(".subckt"):
                depth += 1
            elif first.startswith(".ends"):
                depth = max(0, depth - 1)
            if _is_param_card(ln) and depth == 0:
                text = _rewrite_params(text, final)
            elif first in device_model:
                tok = _model_token(ln, models)
                if tok is not None:
                    text = text[: tok.start()] + device_model[first] + text[tok.end():]
            elif first.startswith(".opt") and re.search(r"\binterp\b", text, re.IGNORECASE):
                text = re.sub(r"\binterp\b", "", text, flags=re.IGNORECASE)
                dropped.setdefault("interp", []).append(ln.number)
            out.append(text)
        rendered = "\n".join(out) + "\n"
        screen(rendered, source_dir=None, allowed_dirs=(), origin=f"rendered {self.name}")

        drive = None
        found = _first_periodic(self._lines)
        if found is not None:
            env = _param_env(_param_defs(self._lines), final)
            drive = _periodic_from(*found, env)
        return RenderedCircuit(rendered, FrozenMap(final), FrozenMap(picked),
                               _drop_notes(dropped), drive)


def _check_choice(spec: ChoiceSpec, model: str) -> str:
    value = str(model).strip().lower()
    if value not in spec.allowed:
        raise InputError(f"choice {spec.name}: {model!r} is not one of the models allowed: "
                         f"{', '.join(spec.allowed)}")
    return value


def _rewrite_params(text: str, final: Mapping[str, float]) -> str:
    head, _, body = text.partition(" ")
    pieces: list[str] = []
    last = 0
    code = _strip_inline_comment(body)
    for m in _ASSIGN.finditer(code):
        name = m.group("name").lower()
        if name in final:
            pieces.append(body[last: m.start("value")])
            pieces.append(repr(float(final[name])))
            last = m.end("value")
    pieces.append(body[last:])
    return head + " " + "".join(pieces)


def _drop_notes(dropped: Mapping[str, list[int]]) -> tuple[str, ...]:
    notes = []
    for card, numbers in dropped.items():
        where = ("lines " if len(numbers) > 1 else "line ") + ", ".join(str(n) for n in numbers)
        if card == ".end":
            continue
        if card == ".tran":
            notes.append(f"replaced the netlist's own .tran card ({where}) with simloop's")
        elif card == "interp":
            notes.append(f"removed 'interp' from .options ({where}): simloop needs the "
                         "engine's own time points")
        elif card.startswith((".print", ".plot", ".save", ".probe", ".width")):
            notes.append(f"dropped {card} ({where}): the engine saves the vectors it needs")
        elif card.startswith((".meas", ".four")):
            notes.append(f"dropped {card} ({where}): simloop measures the waveform itself")
        else:
            notes.append(f"dropped the {card} analysis ({where}): simloop runs a transient")
    return tuple(notes)


# ---------------------------------------------------------------------------- loading
_TOP_KEYS = {"title", "description", "ideal_kind", "estimate_kind", "reference",
             "fundamental_param", "amplitude_param", "default_probe", "conduction_probes",
             "parameters", "probes", "choices", "roles"}
#: Roles a parameter can play for the drop-corrected estimate (``[roles]`` in the metadata).
ROLE_PARAMETERS = frozenset({
    "load", "source_resistance", "reservoir", "reservoir_esr", "on_resistance", "duty",
    "stray_inductance", "stray_capacitance",
})
#: Other roles: the element delivering the input power, and conducting diodes in series.
ROLE_OTHER = frozenset({"power_source", "diodes_in_path"})
_PARAM_KEYS = {"unit", "meaning", "min", "max"}
_CHOICE_KEYS = {"default", "devices", "allowed", "meaning"}


def load_circuit(name_or_path: str | Path) -> CircuitTemplate:
    """Load a built-in circuit by name, or a user netlist by path.

    Parameters
    ----------
    name_or_path : str or Path
        A built-in name (``"half-wave"``) or the path of a ``.cir`` file. A user netlist may
        have a sidecar ``<stem>.toml`` beside it; without one, the parameters are its
        ``.param`` lines (unknown units and ranges), and the fundamental and amplitude come
        from its first SIN or PULSE source.

    Returns
    -------
    CircuitTemplate

    Raises
    ------
    NetlistRefused
        If the netlist or an include file contains a refused construct (see :func:`screen`).
    InputError
        Missing file, broken metadata, undefined parameters, circular includes, no periodic
        source where one is needed.

    Examples
    --------
    >>> t = load_circuit("half-wave")
    >>> t.fundamental_param, t.parameters["freq"].default, t.default_probe.label
    ('freq', 50.0, 'v(out)')
    """
    text = str(name_or_path)
    candidate = builtin_dir() / f"{text}.cir"
    if "/" not in text and "\\" not in text and not text.endswith(".cir") and _is_file(candidate):
        return _load(candidate, builtin=True)
    path = Path(name_or_path).expanduser()
    if not _is_file(path):
        names = ", ".join(p.stem for p in sorted(builtin_dir().glob("*.cir")))
        raise InputError(f"no circuit {text!r}: not a built-in ({names}) and not a netlist file")
    return _load(path.resolve(), builtin=False)


def list_builtin() -> list[CircuitTemplate]:
    """All built-in circuits, sorted by name."""
    return [_load(p, builtin=True) for p in sorted(builtin_dir().glob("*.cir"))]


def _load(path: Path, *, builtin: bool) -> CircuitTemplate:
    origin = f"netlist {path.name}"
    allowed = (path.parent, models_dir())
    text = _read_file(path, origin=origin)
    screen(text, source_dir=path.parent, allowed_dirs=allowed, origin=origin)
    lines = _expand(_logical_lines(text, origin=origin, title=True), base_dir=path.parent,
                    allowed_dirs=allowed, stack=((path, None),), budget=[len(text)])
    _check_defined(lines)
    defs = _param_defs(lines)
    literal = {d.name: d.literal for d in defs if d.literal is not None}
    derived = {d.name for d in defs if d.literal is None} - set(literal)
    inlined = "\n".join(ln.text for ln in lines) + "\n"
    sidecar = path.with_suffix(".toml")
    if builtin and not sidecar.is_file():
        raise InputError(f"built-in circuit {path.stem} has no metadata file {sidecar.name}")
    meta = _read_toml(sidecar) if sidecar.is_file() else None
    where = sidecar.name
    title = lines[0].text.lstrip("*").strip() if lines and lines[0].kind == "title" else path.stem

    def fail(message: str) -> InputError:
        return InputError(f"{where}: {message}")

    found = _first_periodic(lines)
    if meta is None:
        if found is None:
            raise InputError(f"netlist {path.name}: no SIN or PULSE source; simloop needs a "
                             "periodic drive, or a sidecar .toml naming fundamental_param")
        ln, kind, args = found
        fundamental = _single_param(args[2] if kind == "sin" and len(args) > 2 else
                                    args[6] if kind == "pulse" and len(args) > 6 else "")
        if kind == "pulse" and fundamental is not None:
            fundamental = None  # PER is a period, not a frequency
        amplitude = _single_param(args[1] if len(args) > 1 else "")
        params = {n: ParameterSpec(n, v) for n, v in literal.items()}
        nodes = circuit_nodes(inlined)
        default_probe = parse_probe("v(out)") if "out" in nodes else None
        template = CircuitTemplate(
            path.stem, path, text, title, "", FrozenMap(params), FrozenMap(), default_probe, (),
            fundamental if fundamental in literal else None,
            amplitude if amplitude in literal else None,
            "sine" if kind == "sin" else "cosine", None, None, FrozenMap(), "inferred", builtin,
            tuple(lines),
        )
        _periodic_from(ln, kind, args, _param_env(defs, {}))  # refuse a broken drive now
        return template

    unknown = set(meta) - _TOP_KEYS
    if unknown:
        raise fail(f"unknown keys {', '.join(sorted(unknown))}; known: {', '.join(sorted(_TOP_KEYS))}")
    declared = {str(k).lower(): v for k, v in meta.get("parameters", {}).items()}
    params: dict[str, ParameterSpec] = {}
    for name, spec in declared.items():
        if name not in literal:
            hint = " (it is an expression)" if name in derived else ""
            raise fail(f"parameter {name!r} has no .param line with a number{hint} in {path.name}")
        if not isinstance(spec, dict) or set(spec) - _PARAM_KEYS:
            raise fail(f"parameter {name}: give a table with keys {', '.join(sorted(_PARAM_KEYS))}")
        lo, hi = spec.get("min"), spec.get("max")
        for bound in (lo, hi):
            if bound is not None and not (isinstance(bound, (int, float)) and math.isfinite(bound)):
                raise fail(f"parameter {name}: min and max must be numbers")
        if lo is not None and hi is not None and lo > hi:
            raise fail(f"parameter {name}: min {lo} is above max {hi}; swap them")
        p = ParameterSpec(name, literal[name], str(spec.get("unit", "")),
                          str(spec.get("meaning", "")), None if lo is None else float(lo),
                          None if hi is None else float(hi))
        p.check(p.default, what=f"{where}: default of {name}")
        params[name] = p
    missing = set(literal) - set(params)
    if missing and builtin:
        raise fail(f"no metadata for parameters {', '.join(sorted(missing))}")
    for name in sorted(missing):
        params[name] = ParameterSpec(name, literal[name])

    def param_key(key: str, unit: str) -> str | None:
        value = meta.get(key)
        if value is None:
            return None
        value = str(value).lower()
        if value not in params:
            raise fail(f"{key} {value!r} is not a parameter; parameters: {', '.join(params)}")
        if params[value].unit not in ("", unit):
            raise fail(f"{key} {value!r} has unit {params[value].unit!r}, expected {unit!r}")
        return value

    def kind_key(key: str, allowed: tuple[str, ...]) -> str | None:
        value = meta.get(key)
        if value is not None and value not in allowed:
            raise fail(f"{key} {value!r} is not one of {', '.join(allowed)}")
        return value

    def checked_probe(expression: object, what: str) -> Probe:
        try:
            probe = parse_probe(str(expression))
            check_probe_against_netlist(probe, inlined)
        except InputError as exc:
            raise fail(f"{what}: {exc}") from None
        return probe

    probes = {str(k).lower(): checked_probe(v, f"probe {k}")
              for k, v in meta.get("probes", {}).items()}
    default_probe = (checked_probe(meta["default_probe"], "default_probe")
                     if "default_probe" in meta else None)
    conduction = tuple(checked_probe(v, "conduction_probes")
                       for v in meta.get("conduction_probes", []))
    choices = _read_choices(meta.get("choices", {}), lines, inlined, params, fail)
    fundamental = param_key("fundamental_param", "Hz")
    if fundamental is None and found is None:
        raise fail("no fundamental_param and no SIN or PULSE source in the netlist; add one")
    roles = _read_roles(meta.get("roles", {}), params, inlined, fail)
    template = CircuitTemplate(
        path.stem, path, text, str(meta.get("title", title)), str(meta.get("description", "")),
        FrozenMap(params), FrozenMap(probes), default_probe, conduction, fundamental,
        param_key("amplitude_param", "V"), kind_key("reference", TIME_REFERENCES),
        kind_key("ideal_kind", WAVEFORM_KINDS), kind_key("estimate_kind", WAVEFORM_KINDS),
        FrozenMap(choices), "sidecar", builtin, tuple(lines), FrozenMap(roles),
    )
    if found is not None:
        _periodic_from(*found, _param_env(defs, {}))
    return template


def _read_roles(raw, params, inlined, fail) -> dict[str, str | int]:
    if not isinstance(raw, dict):
        raise fail("roles: give a table, e.g. [roles] load = \"rload\"")
    roles: dict[str, str | int] = {}
    for key, value in raw.items():
        role = str(key).lower()
        if role in ROLE_PARAMETERS:
            name = str(value).lower()
            if name not in params:
                raise fail(f"roles.{role}: {value!r} is not a parameter; parameters: {', '.join(params)}")
            roles[role] = name
        elif role == "diodes_in_path":
            if not isinstance(value, int) or isinstance(value, bool) or not 1 <= value <= 8:
                raise fail("roles.diodes_in_path: give a whole number 1..8")
            roles[role] = value
        elif role == "power_source":
            name = str(value).lower()
            if name not in circuit_branches(inlined):
                raise fail(f"roles.power_source: no voltage source {value!r} in the netlist")
            roles[role] = name
        else:
            known = ", ".join(sorted(ROLE_PARAMETERS | ROLE_OTHER))
            raise fail(f"roles: unknown role {key!r}; known: {known}")
    return roles


def _single_param(arg: str) -> str | None:
    m = re.fullmatch(r"\{\s*([A-Za-z_]\w*)\s*\}", arg.strip())
    return m.group(1).lower() if m else None


def _read_toml(path: Path) -> dict:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path.name}: not valid TOML ({exc}); fix the file") from None
    except RecursionError:
        raise InputError(f"{path.name}: tables nested too deeply to read; flatten the file") from None


def _read_choices(raw, lines, inlined, params, fail) -> dict[str, ChoiceSpec]:
    models = _model_names(inlined)
    devices_present = {ln.first: ln for ln in lines if ln.kind == "card"}
    choices: dict[str, ChoiceSpec] = {}
    for key, spec in raw.items():
        name = str(key).lower()
        if name in params:
            raise fail(f"choice {name!r} has the name of a parameter; rename one of them")
        if not isinstance(spec, dict) or set(spec) - _CHOICE_KEYS or "devices" not in spec:
            raise fail(f"choice {name}: give a table with 'default', 'devices' and optionally "
                       "'allowed', 'meaning'")
        devices = tuple(str(d).lower() for d in spec["devices"])
        families: set[str] = set()
        for dev in devices:
            if dev not in devices_present:
                raise fail(f"choice {name}: device {dev!r} is not in the netlist")
            if _model_token(devices_present[dev], models) is None:
                raise fail(f"choice {name}: device {dev!r} has no model field")
            families.update(_MODEL_FAMILY.get(dev[0], ()))
        if "allowed" in spec:
            allowed = tuple(str(a).lower() for a in spec["allowed"])
        else:
            allowed = tuple(sorted(n for n, t in models.items() if t in families))
        for model in allowed:
            if model not in models:
                raise fail(f"choice {name}: model {model!r} is not defined by any .model card")
        default = str(spec.get("default", "")).lower()
        if default not in allowed:
            raise fail(f"choice {name}: default {default!r} is not among {', '.join(allowed)}")
        choices[name] = ChoiceSpec(name, default, devices, allowed, str(spec.get("meaning", "")))
    return choices


# ---------------------------------------------------------------------------- --set
_SET = re.compile(r"\s*(?P<name>[A-Za-z_]\w*)\s*=\s*(?P<value>.*?)\s*")


def parse_assignment(text: str, template: CircuitTemplate | None = None) -> tuple[str, float | str]:
    """Parse one ``--set NAME=VALUE``.

    Parameters
    ----------
    text : str
        ``RL=1k``, ``freq=2meg``, ``diode=sl_schottky``.
    template : CircuitTemplate, optional
        The circuit: the name must be one of its parameters (value a number, checked against
        the range) or one of its choices (value an allowed model name). Without it, the name
        must be a valid identifier and the value a number.

    Returns
    -------
    (str, float or str)
        Lower-case name, and the number [the parameter's unit] or the lower-case model name.

    Raises
    ------
    InputError
        One line, for anything else: ``RL=1k;.control``, ``RL={x}``, ``RL=1e999``, ``RL=nan``,
        unknown names (listing the known ones), values out of range.

    Examples
    --------
    >>> parse_assignment("RL=4.7k"), parse_assignment("f0=2meg")
    (('rl', 4700.0), ('f0', 2000000.0))
    """
    m = _SET.fullmatch(str(text))
    if m is None:
        raise InputError(f"--set {text!r}: write NAME=VALUE, e.g. rload=1k or diode=sl_schottky")
    name, value = m.group("name").lower(), m.group("value")
    if template is None:
        return name, parse_number(value, what=f"--set {name}")
    if name in template.parameters:
        number = parse_number(value, what=f"--set {name}")
        return name, template.parameters[name].check(number, what=f"--set {name}")
    if name in template.choices:
        return name, _check_choice(template.choices[name], value)
    known = ", ".join([*template.parameters, *template.choices])
    raise InputError(f"--set {name}: {template.name} has no parameter or choice {name!r}; "
                     f"known: {known}")
