"""The benchmark suite's machinery (no timing is asserted here: times belong to ``python -m bench``).

* every benchmark script under bench/ is in the suite, and every suite entry has ``measure``;
* the report's floor (bench/floor.py) draws the same figures as the report: its PNGs are byte for
  byte the report's, so the floor is not cheaper for drawing less (common practice: a baseline
  must do the same work as the subject it bounds).
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
HELPERS = {"__init__", "__main__", "common", "floor", "scaling"}


def _defines_measure(path: Path) -> bool:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return any(isinstance(n, ast.FunctionDef) and n.name == "measure" for n in tree.body)


def test_every_benchmark_script_is_in_the_suite():
    from bench.__main__ import SUITE

    scripts = {p.stem for p in (ROOT / "bench").glob("*.py")} - HELPERS
    assert scripts == set(SUITE), (
        f"bench/ scripts not in SUITE: {scripts - set(SUITE)}; SUITE entries without a script: {set(SUITE) - scripts}"
    )
    assert all(_defines_measure(ROOT / "bench" / f"{name}.py") for name in SUITE)


def test_the_floor_draws_the_same_figures_as_the_report(tmp_path):
    from bench.report import record, unmatched

    case = ROOT / "cases" / "pi_card_to_firmware.toml"
    recording, names = record(case, None, tmp_path)
    assert "bode.png" in names
    proc = subprocess.run(
        [sys.executable, str(ROOT / "bench" / "floor.py"), str(recording), str(tmp_path / "floor")],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 0, proc.stderr
    assert len(list((tmp_path / "floor" / "figures").glob("*.png"))) == len(names)
    assert unmatched(tmp_path / "recorded", tmp_path / "floor") == []
    assert "data:image/png;base64," in (tmp_path / "floor" / "floor.html").read_text(encoding="utf-8")
