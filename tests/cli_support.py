"""Running the real ``simloop`` console script in the CLI tests (one copy for every test file)."""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Mapping
from pathlib import Path

import pytest

#: The console script installed beside this interpreter (pip install -e . puts it there).
SIMLOOP = Path(sys.executable).parent / "simloop"


def run_simloop(*args: str | Path, cwd: Path, timeout: float = 180.0,
                env: Mapping[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    """Run the real console script with ``args`` in ``cwd``; output captured as text."""
    if not SIMLOOP.is_file():
        pytest.fail(f"console script {SIMLOOP} is missing; install simloop: pip install -e .",
                    pytrace=False)
    full = dict(os.environ, MPLBACKEND="Agg")
    full.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    full.update(env or {})
    return subprocess.run([str(SIMLOOP), *map(str, args)], cwd=cwd, env=full, capture_output=True,
                          text=True, timeout=timeout, check=False)


def assert_one_line_error(proc: subprocess.CompletedProcess[str], *, prefix: str = "") -> str:
    """Exit code 2, exactly one non-empty stderr line (starting with ``prefix``), no traceback."""
    assert proc.returncode == 2, (proc.returncode, proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].strip() and lines[0].startswith(prefix), proc.stderr
    return lines[0]
