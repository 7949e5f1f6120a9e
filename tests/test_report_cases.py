"""The report command on every demo case: files, results.json, verdicts, overwrite protection,
and the HTML in headless Chromium."""

from __future__ import annotations

import io
import json
import shutil
import subprocess
import tempfile
from pathlib import Path

import pytest

from convert.compare.budget import ROWS

CASES = Path(__file__).resolve().parent.parent / "cases"
EXPECTED = {
    "pi_card_to_firmware": "pass",
    "leadlag_position_fast": "pass",
    "netlist_card_to_firmware": "pass",
    "firmware_pid_to_opamp": "pass",
    "slow_firmware_fails": "fail",
}


def _main(*argv: str) -> tuple[int, str]:
    from rich.console import Console

    from convert.cli.main import main

    buf = io.StringIO()
    console = Console(file=buf, width=140, color_system=None, force_terminal=False)
    code = main(list(argv), console=console)
    return code, buf.getvalue()


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """Each demo report built once (200 Monte Carlo draws to stay quick)."""
    root = tmp_path_factory.mktemp("reports")
    out = {}
    for name in EXPECTED:
        folder = root / name
        code, text = _main("report", str(CASES / f"{name}.toml"), "--out", str(folder), "--draws", "200")
        out[name] = (code, text, folder)
    return out


def test_every_demo_case_is_covered():
    assert {p.stem for p in CASES.glob("*.toml")} == set(EXPECTED)


@pytest.mark.parametrize("name", list(EXPECTED))
def test_report_files_exist_and_are_not_empty(reports, name):
    code, text, folder = reports[name]
    assert code in (0, 1), text
    for rel in ("report.html", "report.md", "results.json", "figures/bode.png", "figures/polezero.png",
                "figures/loop.png"):
        path = folder / rel
        assert path.is_file() and path.stat().st_size > 0, rel
    md = (folder / "report.md").read_text()
    for line in md.splitlines():
        if line.startswith("!["):
            target = line.split("](", 1)[1].rstrip(")")
            assert (folder / target).is_file(), target


@pytest.mark.parametrize("name", list(EXPECTED))
def test_verdict_and_exit_code(reports, name):
    code, text, folder = reports[name]
    data = json.loads((folder / "results.json").read_text())
    assert data["verdict"] == EXPECTED[name]
    assert code == (0 if EXPECTED[name] == "pass" else 1)
    assert f"verdict: {EXPECTED[name].upper()}" in text


@pytest.mark.parametrize("name", list(EXPECTED))
def test_results_json_has_every_budget_row(reports, name):
    data = json.loads((reports[name][2] / "results.json").read_text())
    assert data["budget"], "no realizations"
    for entry in data["budget"]:
        keys = [row["key"] for row in entry["rows"]]
        assert keys == [k for k, _ in ROWS]
        for row in entry["rows"]:
            if row["applicable"]:
                assert row["max_gain_error_db"] is not None and row["max_phase_error_deg"] is not None
            else:
                assert row["note"].startswith("not applicable")
    assert data["loop_check"]["source_margins"]["phase_margin_deg"] > 0
    for real in data["realizations"]:
        assert real["loop"]["margins"] is not None and real["loop"]["step"] is not None
    assert len(data["cautions"]) >= 4


def test_failing_case_reports_the_failing_numbers(reports):
    code, text, folder = reports["slow_firmware_fails"]
    data = json.loads((folder / "results.json").read_text())
    failed = {f["criterion"]: f for f in data["failures"]}
    assert "max_phase_error_deg" in failed
    f = failed["max_phase_error_deg"]
    assert f["value"] > f["limit"]
    assert "fails:" in text and "max phase error" in text
    assert data["rate_advice"][0]["checked_fs_hz"] > 1.0  # the advice asks for a faster rate


def test_circuit_case_writes_netlist_and_monte_carlo(reports):
    folder = reports["firmware_pid_to_opamp"][2]
    assert (folder / "circuit.cir").stat().st_size > 0
    assert list((folder / "figures").glob("montecarlo-*.png"))
    data = json.loads((folder / "results.json").read_text())
    assert data["monte_carlo"] == {"draws": 200, "seed": 7}
    rows = {r["key"]: r for r in data["budget"][0]["rows"]}
    assert rows["tolerances"]["applicable"] and rows["tolerances"]["percentile"] == 99.0
    assert not rows["discretization"]["applicable"]


def test_case_without_plant_lists_skipped_checks(tmp_path):
    text = (CASES / "pi_card_to_firmware.toml").read_text()
    head, _, rest = text.partition("[plant]")
    rest = rest.split("[signals]", 1)[1]
    case = tmp_path / "noplant.toml"
    case.write_text(head + "[signals]" + rest)
    code, out = _main("report", str(case), "--out", str(tmp_path / "r"))
    data = json.loads((tmp_path / "r" / "results.json").read_text())
    assert data["loop_check"]["skipped"] and "skipped" in out
    assert all(j["status"] in ("skipped", "not set") for j in data["judgements"]
               if j["criterion"] in ("max_phase_margin_change_deg", "max_step_deviation"))
    assert code in (0, 1)


def test_existing_report_not_overwritten_without_force(reports, capsys):
    folder = reports["pi_card_to_firmware"][2]
    before = (folder / "results.json").read_bytes()
    marker = folder / "keep.txt"
    marker.write_text("mine")
    code, _ = _main("report", str(CASES / "pi_card_to_firmware.toml"), "--out", str(folder))
    err = capsys.readouterr().err
    assert code == 2 and "--force" in err
    assert marker.read_text() == "mine" and (folder / "results.json").read_bytes() == before
    code, _ = _main("report", str(CASES / "pi_card_to_firmware.toml"), "--out", str(folder), "--force")
    assert code == 0
    assert not marker.exists() and (folder / "results.json").stat().st_size > 0
    assert not [p for p in folder.parent.iterdir() if p.name.startswith(f".{folder.name}.")]


def test_refuses_a_report_folder_that_holds_the_case(tmp_path, capsys):
    case = tmp_path / "c.toml"
    shutil.copy(CASES / "pi_card_to_firmware.toml", case)
    code, _ = _main("report", str(case), "--out", str(tmp_path), "--force")
    assert code == 2 and "contains the input" in capsys.readouterr().err
    assert case.is_file()


# ----------------------------------------------------------------------------- browser
_PROBE = """<script>
window.__errors=[];window.addEventListener('error',function(e){window.__errors.push(String(e.message||e.type));},true);
var __ce=console.error;console.error=function(){window.__errors.push('console.error');__ce.apply(console,arguments);};
window.addEventListener('load',function(){var im=document.images,ok=0;for(var i=0;i<im.length;i++){
if(im[i].complete&&im[i].naturalWidth>0)ok++;}var b=document.body;b.setAttribute('data-images',im.length);
b.setAttribute('data-loaded',ok);b.setAttribute('data-errors',window.__errors.length);});
</script>"""


def _chromium_probe(html: str) -> tuple[dict, str]:
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    with tempfile.TemporaryDirectory() as tmp:
        page = Path(tmp) / "page.html"
        page.write_text(html.replace("<head>", "<head>" + _PROBE, 1), encoding="utf-8")
        profile = Path(tmp) / "profile"
        proc = subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={profile}",
             "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000", "--dump-dom", page.as_uri()],
            capture_output=True, text=True, timeout=120)
    import re

    m = re.search(r'<body[^>]*data-images="(\d+)"[^>]*data-loaded="(\d+)"[^>]*data-errors="(\d+)"', proc.stdout)
    assert m, f"the probe did not run: {proc.stderr[-500:]}"
    console_errors = [ln for ln in proc.stderr.splitlines() if "CONSOLE" in ln and ("ERROR" in ln or "Uncaught" in ln)]
    return {"images": int(m[1]), "loaded": int(m[2]), "errors": int(m[3])}, "\n".join(console_errors)


def test_probe_detects_broken_images_and_errors():
    """The browser check itself can fail: a missing image and a script error are seen."""
    bad = ('<!DOCTYPE html><html><head><meta charset="utf-8"></head><body><img src="data:image/png;base64,AAAA">'
           "<script>undefined_function()</script></body></html>")
    seen, _ = _chromium_probe(bad)
    assert seen["images"] == 1 and seen["loaded"] == 0 and seen["errors"] >= 1


def test_html_opens_in_chromium_with_every_image(reports):
    """Headless Chromium (the Debian package) loads report.html: every image decodes, no errors."""
    folder = reports["firmware_pid_to_opamp"][2]
    html = (folder / "report.html").read_text()
    assert "src=\"figures/" not in html  # self-contained: nothing loaded from beside it
    seen, console = _chromium_probe(html)
    assert seen["images"] >= 4 and seen["loaded"] == seen["images"]
    assert seen["errors"] == 0 and not console
