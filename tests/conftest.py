"""Fixtures shared by the whole suite: the repository root and the engine gate.

Every test marked ``@pytest.mark.engine`` first passes through :func:`require_engine`, which loads
ngspice's shared library. Without it the test is skipped, except under ``CI=true``, where it fails:
CI must exercise the real engine.
"""

from __future__ import annotations

import ctypes
import functools
import os
from pathlib import Path

import pytest

#: Soname of ngspice's shared library (Debian package libngspice0); PySpice reads this variable.
NGSPICE_LIBRARY_DEFAULT = "libngspice.so.0"
os.environ.setdefault("NGSPICE_LIBRARY_PATH", NGSPICE_LIBRARY_DEFAULT)

ENGINE_INSTALL_HINT = "sudo apt-get install -y ngspice libngspice0 (or run: bash bootstrap.sh test)"


def _under_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


@functools.cache
def _engine_problem() -> str | None:
    """Why ngspice's shared library cannot be loaded, or None when it can."""
    library = os.environ["NGSPICE_LIBRARY_PATH"]
    try:
        ctypes.CDLL(library)
    except OSError as exc:
        return f"ngspice shared library {library!r} (NGSPICE_LIBRARY_PATH) not loadable: {exc}"
    return None


@pytest.fixture(scope="session")
def repo_root() -> Path:
    """The repository root (the folder holding pyproject.toml)."""
    return Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session")
def require_engine() -> None:
    """Skip (or, under CI=true, fail) when ngspice's shared library cannot be loaded."""
    problem = _engine_problem()
    if problem is None:
        return
    if _under_ci():
        pytest.fail(f"{problem}; CI must run the engine: {ENGINE_INSTALL_HINT}", pytrace=False)
    pytest.skip(f"{problem}; install it with: {ENGINE_INSTALL_HINT}")


@pytest.fixture(autouse=True)
def _engine_gate(request: pytest.FixtureRequest) -> None:
    """Apply :func:`require_engine` to every test that carries the ``engine`` marker."""
    if request.node.get_closest_marker("engine") is not None:
        request.getfixturevalue("require_engine")
