"""Import hygiene: ``import simloop`` and its light modules load neither PySpice nor matplotlib.

The engine and the plots are imported inside the functions that need them (DESIGN.md, "Import
hygiene"), so that the command line starts fast and a machine without ngspice can still use the
pure parts. Each check runs in a fresh interpreter, since the test process itself may already hold
both libraries.

A module that is meant to load the engine or the plots at import time opts out with a module-level
``_HEAVY = True`` or a docstring line starting with ``Heavy:``. The opt-out is read from the source
with :mod:`ast`, so discovering the modules imports none of them.
"""

from __future__ import annotations

import ast
import importlib.util
import json
import os
import pkgutil
import subprocess
import sys
from pathlib import Path

import pytest

HEAVY_LIBRARIES = ("PySpice", "matplotlib")

#: Modules that exist from the package skeleton on and must always stay light.
CORE_MODULES = ("simloop.errors", "simloop.spectrum", "simloop.units", "simloop.vocab")

_PROBE = """
import importlib, json, sys
loaded = []
for name in sys.argv[1:]:
    importlib.import_module(name)
    loaded.append([name, sorted(lib for lib in {libs!r} if lib in sys.modules)])
print(json.dumps(loaded))
""".format(libs=HEAVY_LIBRARIES)


def _is_marked_heavy(source: Path) -> bool:
    """True when the module at ``source`` declares ``_HEAVY = True`` or a ``Heavy:`` docstring line."""
    try:
        tree = ast.parse(source.read_text(encoding="utf-8"), filename=str(source))
    except (OSError, SyntaxError, UnicodeDecodeError):
        return False  # let the import itself report the problem
    docstring = ast.get_docstring(tree) or ""
    if any(line.strip().lower().startswith("heavy:") for line in docstring.splitlines()):
        return True
    for node in tree.body:
        if isinstance(node, ast.Assign):
            targets, value = node.targets, node.value
        elif isinstance(node, ast.AnnAssign):
            targets, value = [node.target], node.value
        else:
            continue
        named = any(isinstance(target, ast.Name) and target.id == "_HEAVY" for target in targets)
        if named and isinstance(value, ast.Constant) and value.value is True:
            return True
    return False


def _walk(directory: Path, prefix: str) -> tuple[list[str], list[str]]:
    """Split the modules under ``directory`` into (light, heavy); heavy packages are not entered."""
    light: list[str] = []
    heavy: list[str] = []
    for info in pkgutil.iter_modules([str(directory)]):
        if info.name == "__main__":
            continue  # runs the command line when imported
        name = f"{prefix}.{info.name}"
        source = directory / info.name / "__init__.py" if info.ispkg else directory / f"{info.name}.py"
        if _is_marked_heavy(source):
            heavy.append(name)
            continue
        light.append(name)
        if info.ispkg:
            sub_light, sub_heavy = _walk(directory / info.name, name)
            light += sub_light
            heavy += sub_heavy
    return light, heavy


def _simloop_modules() -> tuple[list[str], list[str]]:
    spec = importlib.util.find_spec("simloop")
    assert spec is not None and spec.submodule_search_locations, "simloop is not importable"
    light: list[str] = []
    heavy: list[str] = []
    for location in spec.submodule_search_locations:
        sub_light, sub_heavy = _walk(Path(location), "simloop")
        light += sub_light
        heavy += sub_heavy
    return light, heavy


def _import_in_fresh_interpreter(names: list[str], cwd: Path) -> list[tuple[str, list[str]]]:
    result = subprocess.run(
        [sys.executable, "-c", _PROBE, *names],
        cwd=cwd,
        env=dict(os.environ),
        capture_output=True,
        text=True,
        timeout=120,
    )
    if result.returncode != 0:
        pytest.fail(f"importing simloop modules failed:\n{result.stderr}", pytrace=False)
    return [(name, libs) for name, libs in json.loads(result.stdout.splitlines()[-1])]


def test_import_simloop_loads_no_engine_or_plots(repo_root: Path) -> None:
    [(name, loaded)] = _import_in_fresh_interpreter(["simloop"], repo_root)
    assert loaded == [], f"import {name} pulled in {loaded}: import them inside functions"


def test_import_light_modules_load_no_engine_or_plots(repo_root: Path) -> None:
    light, _heavy = _simloop_modules()
    assert set(CORE_MODULES) <= set(light), f"module discovery missed core modules: {light}"
    imported = _import_in_fresh_interpreter(["simloop", *light], repo_root)
    culprit = next(((name, libs) for name, libs in imported if libs), None)
    assert culprit is None, (
        f"importing {culprit[0]} pulled in {culprit[1]}: import them inside functions,"
        " or mark the module `_HEAVY = True` if it must load them at import time"
    )


def test_is_marked_heavy_flag_and_docstring(tmp_path: Path) -> None:
    cases = {
        "flag.py": ('"""Plots."""\n_HEAVY = True\n', True),
        "annotated.py": ("_HEAVY: bool = True\n", True),
        "flag_false.py": ("_HEAVY = False\n", False),
        "docline.py": ('"""Figures.\n\nHeavy: imports matplotlib at import time.\n"""\n', True),
        "mention.py": ('"""Figures drawn with matplotlib, imported inside each function."""\n', False),
        "plain.py": ("x = 1\n", False),
    }
    for filename, (text, _expected) in cases.items():
        (tmp_path / filename).write_text(text, encoding="utf-8")
    found = {name: _is_marked_heavy(tmp_path / name) for name in cases}
    assert found == {name: expected for name, (_text, expected) in cases.items()}
