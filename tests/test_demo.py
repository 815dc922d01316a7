"""The README's main job: the built-in demo writes its table, JSON, plot and report per scenario."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from cli_support import run_simloop

pytestmark = pytest.mark.engine


@pytest.mark.parametrize("scenario", ["bench-supply", "mains-front-end"])
def test_demo_scenario_writes_all_outputs(tmp_path: Path, scenario: str) -> None:
    proc = run_simloop("demo", "--out", "out", "--only", scenario, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "out"
    for suffix in (".txt", ".json", ".png", ".html"):
        assert (out / f"{scenario}{suffix}").stat().st_size > 0, suffix
    doc = json.loads((out / f"{scenario}.json").read_text(encoding="utf-8"))
    assert doc["steady_state"]["converged"] is True
    html = (out / f"{scenario}.html").read_text(encoding="utf-8")
    if scenario == "mains-front-end":
        # 325 V peak is far above safety-extra-low voltage: every output carries the caution
        assert "licensed practice" in doc["caution"]
        assert "licensed practice" in (out / f"{scenario}.txt").read_text(encoding="utf-8")
        assert 'role="alert"' in html
        assert doc["metrics"]["mains"]["limit_class"] == "D"
    else:
        assert "caution" not in doc and 'role="alert"' not in html
