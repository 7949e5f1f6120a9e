"""`loopshift batch`: many cases as one job, on any executor (in-process, a process pool, a real
Dask distributed LocalCluster).

The reference for each case's verdict is `loopshift report` run on the same case file alone: a
batch must give every case the verdict (and exit code) the single report gives it.
"""

from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest

CASES = Path(__file__).resolve().parent.parent / "cases"
PASSING = "pi_card_to_firmware.toml"
FAILING = "slow_firmware_fails.toml"


@pytest.fixture
def case_dir(tmp_path):
    """A folder with a passing, a failing and an unreadable case (copies of the demo cases)."""
    d = tmp_path / "site"
    d.mkdir()
    for name in (PASSING, FAILING):
        shutil.copy(CASES / name, d / name)
    (d / "broken.toml").write_text('[source]\nexpression = "1/(s"\n')
    return d


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "a":
            self.links.append(dict(attrs)["href"])


def _without_times(data: dict) -> list[dict]:
    return [{k: v for k, v in c.items() if k not in ("seconds", "report")} for c in data["cases"]]


def test_batch_gives_each_case_the_verdict_its_own_report_gives(case_dir, tmp_path, run_cli):
    """Reference: `loopshift report` on each case alone (exit 0 pass, 1 fail, 2 unreadable)."""
    single = {}
    for f in sorted(case_dir.glob("*.toml")):
        single[f.stem] = run_cli("report", str(f), "--out", str(tmp_path / f"alone-{f.stem}")).code
    assert single == {"broken": 2, "pi_card_to_firmware": 0, "slow_firmware_fails": 1}

    out = tmp_path / "batch"
    result = run_cli("batch", str(case_dir), "--out", str(out), "--workers", "1")
    assert result.code == 2, result.err  # the worst case decides: one could not be read
    data = json.loads((out / "batch.json").read_text())
    codes = {c["name"]: c["exit_code"] for c in data["cases"]}
    assert codes == single
    by_name = {c["name"]: c for c in data["cases"]}
    assert "column 5" in by_name["broken"]["message"]  # the case's own one-line error, not a traceback
    assert "max phase error" in by_name["slow_firmware_fails"]["message"]
    assert by_name["slow_firmware_fails"]["worst_ratio"] > 1 > by_name["pi_card_to_firmware"]["worst_ratio"]
    assert data["counts"] == {"pass": 1, "fail": 1, "unchecked": 0, "unreadable": 1, "error": 0}
    assert "UNREADABLE" in result.out and "FAIL" in result.out and "PASS" in result.out

    # index.html links every written report, and each link resolves to a file
    parser = _Links()
    parser.feed((out / "index.html").read_text())
    assert sorted(parser.links) == ["pi_card_to_firmware/report.html", "slow_firmware_fails/report.html"]
    for link in parser.links:
        assert (out / link).is_file()


def test_exit_code_is_the_worst_case(case_dir, tmp_path, run_cli):
    """0 all pass, 1 any fails, 2 any unreadable (common practice for batch runners; documented in --help)."""
    (case_dir / "broken.toml").unlink()
    assert run_cli("batch", str(case_dir), "--out", str(tmp_path / "a"), "--workers", "1").code == 1
    (case_dir / FAILING).unlink()
    assert run_cli("batch", str(case_dir), "--out", str(tmp_path / "b"), "--workers", "1").code == 0


def test_process_pool_gives_the_same_outcomes_as_one_worker(case_dir, tmp_path, run_cli):
    """Two worker processes give the same outcomes, in input order, as one in-process worker."""
    one = run_cli("batch", str(case_dir), "--out", str(tmp_path / "one"), "--workers", "1")
    two = run_cli("batch", str(case_dir), "--out", str(tmp_path / "two"), "--workers", "2")
    assert one.code == two.code == 2
    a = json.loads((tmp_path / "one" / "batch.json").read_text())
    b = json.loads((tmp_path / "two" / "batch.json").read_text())
    assert _without_times(a) == _without_times(b)
    assert [c["name"] for c in b["cases"]] == ["broken", "pi_card_to_firmware", "slow_firmware_fails"]


def test_dask_local_cluster_runs_the_batch(case_dir, tmp_path, run_cli):
    """A real dask.distributed LocalCluster (reference: the Dask distributed engine) runs the same
    batch with the same outcomes as the in-process runner."""
    pytest.importorskip("distributed", reason="dask.distributed is not installed (the [cluster] extra)")
    (case_dir / "broken.toml").unlink()
    local = run_cli("batch", str(case_dir), "--out", str(tmp_path / "one"), "--workers", "1")
    dask = run_cli("batch", str(case_dir), "--out", str(tmp_path / "dask"), "--scheduler", "local", "--workers", "2")
    assert local.code == dask.code == 1, dask.err
    a = json.loads((tmp_path / "one" / "batch.json").read_text())
    b = json.loads((tmp_path / "dask" / "batch.json").read_text())
    assert _without_times(a) == _without_times(b)


def test_same_stem_in_two_folders_gets_two_reports(tmp_path, run_cli):
    for sub in ("unit1", "unit2"):
        (tmp_path / sub).mkdir()
        shutil.copy(CASES / PASSING, tmp_path / sub / "loop.toml")
    out = tmp_path / "out"
    assert (
        run_cli(
            "batch", str(tmp_path / "unit1"), str(tmp_path / "unit2" / "loop.toml"), "--out", str(out), "--workers", "1"
        ).code
        == 0
    )
    assert (out / "loop" / "report.html").is_file() and (out / "loop-2" / "report.html").is_file()


def test_user_folder_and_earlier_batch_are_not_overwritten(case_dir, tmp_path, run_cli):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.txt").write_text("keep me")
    r = run_cli("batch", str(case_dir), "--out", str(mine), "--force")
    assert r.code == 2 and "not an earlier batch" in r.err and len(r.err.strip().splitlines()) == 1
    assert (mine / "thesis.txt").read_text() == "keep me" and len(list(mine.iterdir())) == 1

    (case_dir / "broken.toml").unlink()
    out = tmp_path / "out"
    assert run_cli("batch", str(case_dir), "--out", str(out), "--workers", "1").code == 1
    again = run_cli("batch", str(case_dir), "--out", str(out), "--workers", "1")
    assert again.code == 2 and "--force" in again.err
    assert run_cli("batch", str(case_dir), "--out", str(out), "--workers", "1", "--force").code == 1


@pytest.mark.parametrize(
    "argv, words",
    [
        (["batch", "no/such/folder"], "no such case file"),
        (["batch", "cases", "--workers", "0"], "1 to 256 workers"),
        (["batch", "cases", "--workers", "two"], "whole number"),
        (["batch", "cases", "--draws", "0"], "draws"),
    ],
)
def test_bad_batch_input_is_one_line(argv, words, run_cli, tmp_path, monkeypatch):
    monkeypatch.chdir(CASES.parent)
    r = run_cli(*argv, "--out", str(tmp_path / "x"))
    assert r.code == 2 and words in r.err and len(r.err.strip().splitlines()) == 1
    assert "Traceback" not in r.err


def test_empty_folder_is_refused(tmp_path, run_cli):
    (tmp_path / "empty").mkdir()
    r = run_cli("batch", str(tmp_path / "empty"), "--out", str(tmp_path / "out"))
    assert r.code == 2 and "no case file" in r.err


def test_unchecked_case_is_unchecked_not_fail(case_dir, tmp_path, run_cli):
    """A case that sets a loop criterion and has no plant: `loopshift report` on it alone says
    UNCHECKED (exit 1); the batch gives it the status "unchecked" (not "fail"), counts it apart
    from the failures, and carries the report's reason. Reference: the single report's verdict
    and its results.json, run on the same file."""
    (case_dir / "broken.toml").unlink()
    (case_dir / "no_plant.toml").write_text(
        '[source]\nexpression = "1.2*(1 + 1/(15*s))"\n[target.digital]\nfs = "20 Hz"\n'
        '[criteria]\nband = ["1 mHz", "0.5 Hz"]\nmax_gain_error_db = 1.0\nmax_phase_margin_change_deg = 3\n'
    )
    alone = run_cli("report", str(case_dir / "no_plant.toml"), "--out", str(tmp_path / "alone"))
    single = json.loads((tmp_path / "alone" / "results.json").read_text())
    assert alone.code == 1 and single["verdict"] == "unchecked"

    out = tmp_path / "batch"
    result = run_cli("batch", str(case_dir), "--out", str(out), "--workers", "1")
    assert result.code == 1, result.err
    data = json.loads((out / "batch.json").read_text())
    by_name = {c["name"]: c for c in data["cases"]}
    assert by_name["no_plant"]["status"] == "unchecked"
    assert by_name["no_plant"]["exit_code"] == 1
    assert by_name["slow_firmware_fails"]["status"] == "fail"
    assert data["counts"] == {"pass": 1, "fail": 1, "unchecked": 1, "unreadable": 0, "error": 0}
    assert single["unchecked_reason"] and " ".join(single["unchecked_reason"].split()) in by_name["no_plant"]["message"]
    row = next(line for line in result.out.splitlines() if line.startswith("no_plant"))
    assert "UNCHECKED" in row and "FAIL" not in row
    assert "1 unchecked" in result.out
    assert '<tr class="unchecked">' in (out / "index.html").read_text()

    # an unchecked case alone (no failure, no unreadable case) still exits 1: never a pass
    (case_dir / FAILING).unlink()
    assert run_cli("batch", str(case_dir), "--out", str(tmp_path / "b"), "--workers", "1").code == 1


def test_summary_names_a_failed_criterion_that_has_no_figure():
    """An unstable closed loop fails without a value/limit pair: the summary's "closest to its
    limit" column names it instead of staying empty (common practice: a summary row says why a
    case failed)."""
    from convert.report.batch import CaseOutcome, format_worst

    unstable = CaseOutcome("a.toml", "a", "fail", worst_label="closed-loop stability")
    assert format_worst(unstable) == "closed-loop stability: fails"
    nothing = CaseOutcome("b.toml", "b", "unchecked")
    assert format_worst(nothing) == ""
    figure = CaseOutcome(
        "c.toml",
        "c",
        "pass",
        worst_label="max phase error",
        worst_value=2.1,
        worst_limit=5.0,
        worst_unit="deg",
        worst_ratio=0.42,
    )
    assert format_worst(figure) == "max phase error 2.1 / 5 deg (42 %)"
