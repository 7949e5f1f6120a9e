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
    "given_forms_tank_level": "fail",
    "evidence_temp_card": "fail",
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
    """Each demo report built once through the CLI (200 Monte Carlo draws to stay quick);
    the evaluated results are kept too (see :func:`evaluated`), so the reference checks below
    need no second run."""
    import convert.compare.evaluate as ev

    root = tmp_path_factory.mktemp("reports")
    out = {}
    kept = {}
    real = ev.evaluate_case

    def keep(case, **kw):
        res = real(case, **kw)
        kept[case.name] = res
        return res

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(ev, "evaluate_case", keep)
        for name in EXPECTED:
            folder = root / name
            code, text = _main("report", str(CASES / f"{name}.toml"), "--out", str(folder), "--draws", "200")
            out[name] = (code, text, folder)
    _EVALUATED.update(kept)
    return out


_EVALUATED: dict = {}


@pytest.fixture(scope="module")
def evaluated(reports):
    """name -> CaseResults of the demo reports built by :func:`reports`."""
    assert set(_EVALUATED) >= set(EXPECTED)
    return _EVALUATED


def test_every_demo_case_is_covered():
    assert {p.stem for p in CASES.glob("*.toml")} == set(EXPECTED)


@pytest.mark.parametrize("name", list(EXPECTED))
def test_report_files_exist_and_are_not_empty(reports, name):
    code, text, folder = reports[name]
    assert code in (0, 1), text
    for rel in (
        "report.html",
        "report.md",
        "results.json",
        "figures/bode.png",
        "figures/polezero.png",
        "figures/loop.png",
    ):
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


@pytest.mark.parametrize("name", list(EXPECTED))
def test_results_json_schema_2(reports, name):
    """results.json schema 2 (docs/report.md): a schema_version, every key snake_case (names and
    labels as values in records), the budget once (top level, one entry per realization in order)."""
    import re

    data = json.loads((reports[name][2] / "results.json").read_text())
    assert data["schema_version"] == 2
    keys: list[str] = []

    def walk(value):
        if isinstance(value, dict):
            keys.extend(value)
            for v in value.values():
                walk(v)
        elif isinstance(value, list):
            for v in value:
                walk(v)

    walk(data)
    assert keys and [k for k in keys if not re.fullmatch(r"[a-z][a-z0-9_]*", k)] == []
    assert [b["realization"] for b in data["budget"]] == [r["name"] for r in data["realizations"]]
    assert all("budget" not in r for r in data["realizations"])
    circuits = [r for r in data["realizations"] if r["form"] == "circuit" and "topology" in r["details"]]
    for real in circuits:  # part names as values
        assert all(re.fullmatch(r"[RC][0-9A-Za-z_.]*", rec["name"]) for rec in real["details"]["parts"])


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
    assert all(
        j["status"] in ("skipped", "not set")
        for j in data["judgements"]
        if j["criterion"] in ("max_phase_margin_change_deg", "max_step_deviation")
    )
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
    # issue 9 item 1: --force replaces an earlier report only while it holds nothing the user added
    code, _ = _main("report", str(CASES / "pi_card_to_firmware.toml"), "--out", str(folder), "--force")
    err = capsys.readouterr().err
    assert code == 2 and "keep.txt" in err and marker.read_text() == "mine"
    marker.unlink()
    code, _ = _main("report", str(CASES / "pi_card_to_firmware.toml"), "--out", str(folder), "--force")
    assert code == 0
    assert (folder / "results.json").stat().st_size > 0
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
            [
                browser,
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--no-first-run",
                f"--user-data-dir={profile}",
                "--enable-logging=stderr",
                "--v=0",
                "--virtual-time-budget=5000",
                "--dump-dom",
                page.as_uri(),
            ],
            capture_output=True,
            text=True,
            timeout=120,
        )
    import re

    m = re.search(r'<body[^>]*data-images="(\d+)"[^>]*data-loaded="(\d+)"[^>]*data-errors="(\d+)"', proc.stdout)
    assert m, f"the probe did not run: {proc.stderr[-500:]}"
    console_errors = [ln for ln in proc.stderr.splitlines() if "CONSOLE" in ln and ("ERROR" in ln or "Uncaught" in ln)]
    return {"images": int(m[1]), "loaded": int(m[2]), "errors": int(m[3])}, "\n".join(console_errors)


def test_probe_detects_broken_images_and_errors():
    """The browser check itself can fail: a missing image and a script error are seen."""
    bad = (
        '<!DOCTYPE html><html><head><meta charset="utf-8"></head><body><img src="data:image/png;base64,AAAA">'
        "<script>undefined_function()</script></body></html>"
    )
    seen, _ = _chromium_probe(bad)
    assert seen["images"] == 1 and seen["loaded"] == 0 and seen["errors"] >= 1


def test_html_opens_in_chromium_with_every_image(reports):
    """Headless Chromium (the Debian package) loads report.html: every image decodes, no errors."""
    folder = reports["firmware_pid_to_opamp"][2]
    html = (folder / "report.html").read_text()
    assert 'src="figures/' not in html  # self-contained: nothing loaded from beside it
    seen, console = _chromium_probe(html)
    assert seen["images"] >= 4 and seen["loaded"] == seen["images"]
    assert seen["errors"] == 0 and not console


# ----------------------------------------------------------------------------- demo realism
@pytest.mark.parametrize("name", list(EXPECTED))
def test_demo_source_loops_are_sensibly_tuned(reports, name):
    """Common practice: a reference loop worth filing has a phase margin of roughly 40–65° and
    a sensitivity peak Ms ≤ 2 (6 dB). Every demo's source loop is tuned so; the built-to-fail
    case fails because of its target, not because of its source."""
    m = json.loads((reports[name][2] / "results.json").read_text())["loop_check"]["source_margins"]
    assert 40.0 <= m["phase_margin_deg"] <= 65.0
    assert m["sensitivity_peak_db"] <= 6.0
    assert m["gain_margin_db"] is None or m["gain_margin_db"] >= 6.0


def test_flow_card_has_no_setpoint_offset(evaluated):
    """Common practice: a PI card whose setpoint and measurement reach the summing node through
    equal DC resistance settles at y = r. The card's setpoint path and feedback controller have
    the same integral gain (the s⁰ coefficient of H_sp·s and of C·s)."""
    from convert.case import source_controller
    from convert.circuit.card import analyze_card
    from convert.circuit.netlist import read_netlist

    path = CASES / "cards" / "flow_pi_card.cir"
    card = analyze_card(
        read_netlist(path.read_text(), source=path.name),
        input="VIN",
        output="out",
        setpoint="VSP",
        measurement="VPV",
        with_sensitivities=False,
    )
    c = evaluated["netlist_card_to_firmware"].reference
    assert c.num[-1] / c.den[-2] == pytest.approx(card.controller.num[-1] / card.controller.den[-2])
    sim = evaluated["netlist_card_to_firmware"].source_step
    assert sim.y[-1] == pytest.approx(1.0, abs=0.01)  # settles on the setpoint
    assert source_controller(evaluated["netlist_card_to_firmware"].case).controller.integrator_count() == 1


# ----------------------------------------------------------------------------- outside references
@pytest.mark.parametrize("name", list(EXPECTED))
def test_source_margins_match_python_control_with_pade(evaluated, name):
    """Reference: python-control ``stability_margins`` of C·P·Padé(θ) (9th-order ``control.pade``
    for the dead time; accurate where ωθ is small, as at these crossovers). Ours adds −ωθ exactly."""
    import control
    import numpy as np

    res = evaluated[name]
    plant = res.case.plant
    num, den = control.pade(plant.dead_time_s, 9)
    loop = res.reference.to_control() * plant.model.to_control() * control.tf(num, den)
    with np.errstate(over="ignore", invalid="ignore"):  # python-control's polynomial search far above the band
        gm, pm, _, wpc, wgc, _ = control.stability_margins(loop)
    m = res.source_margins
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert m.crossover_hz == pytest.approx(wgc / (2 * np.pi), rel=1e-3)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.05)
    assert m.phase_crossover_hz == pytest.approx(wpc / (2 * np.pi), rel=2e-3)


def _sampled_loop(res, realization):
    """The digital loop as python-control sees it at the sample instants: C(z)·z^-d·P_zoh(z)·z^-m,
    with the plant sampled by ``control.sample_system(..., 'zoh')`` and the computation delay d and
    dead time m whole numbers of samples."""
    import control

    t = realization.controller.sample_period_s
    d = realization.details["delay_s"] / t
    m = res.case.plant.dead_time_s / t
    assert abs(d - round(d)) < 1e-9 and abs(m - round(m)) < 1e-9, "the check needs whole-sample delays"
    z = control.tf([1, 0], [1], t)
    pz = control.sample_system(res.case.plant.model.to_control(), t, method="zoh")
    cz = realization.controller.to_control()
    return cz, pz, 1 / z ** int(round(d)), 1 / z ** int(round(m))


@pytest.mark.parametrize("which", [0, 1])
def test_digital_step_and_load_match_python_control_sampled_loop(evaluated, which):
    """Reference: python-control ``forced_response`` of the sampled-data loop (plant by
    ``sample_system`` with zoh, 60 samples of dead time and one of computation delay as z^-61)
    for the netlist case at 200 Hz: our simulation runs the plant between samples, so at the
    sample instants the two must agree to rounding (no clamp is reached: steps of 1, limits ±10)."""
    import control
    import numpy as np

    res = evaluated["netlist_card_to_firmware"]
    r = res.realizations[which]
    cz, pz, comp, dead = _sampled_loop(res, r)
    t = cz.dt
    # the load enters at the plant input: it sees the dead time but not the computation delay
    for resp, closed, size in (
        (r.step, control.feedback(cz * comp * dead * pz, 1), res.case.signals.setpoint_step),
        (r.disturbance, control.feedback(dead * pz, cz * comp), res.case.signals.disturbance_step),
    ):
        every = int(round(t / resp.sub_step_s))
        y_ours = resp.y[::every]
        n = y_ours.size
        k = np.arange(n) * t
        _, y_ref = control.forced_response(closed, T=k, U=np.full(n, size))
        assert np.max(np.abs(y_ours - y_ref)) < 1e-6 * np.max(np.abs(y_ref))
        assert np.max(np.abs(resp.u)) < 10  # the ±10 limits never act, so the linear reference holds


def test_digital_margins_match_python_control_sampled_loop(evaluated):
    """Reference: python-control ``stability_margins`` of the discrete loop C(z)·z^-61·P_zoh(z)
    (netlist case, 200 Hz, crossover near 0.26 Hz). Ours sees the hold as sinc·e^{-sT/2} in the
    continuous loop; at fs ≈ 770 × crossover the two agree within a few hundredths of a degree."""
    import control
    import numpy as np

    res = evaluated["netlist_card_to_firmware"]
    r = res.realizations[0]
    cz, pz, comp, dead = _sampled_loop(res, r)
    loop = cz * comp * dead * pz
    # z^-61 makes the polynomial search ill-conditioned; python-control's frequency-response method
    # on a dense grid up to Nyquist is its own advice for such a loop
    w = np.logspace(-2, np.log10(0.999 * np.pi / cz.dt), 20000)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(control.frd(loop, w), method="frd")
    assert r.margins.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert r.margins.crossover_hz == pytest.approx(wgc / (2 * np.pi), rel=2e-3)
    assert r.margins.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.05)


# ----------------------------------------------------------------------------- what a reader sees
def test_report_echoes_inputs_criteria_and_how_far_from_the_limit(reports):
    html = (reports["slow_firmware_fails"][2] / "report.html").read_text()
    md = (reports["slow_firmware_fails"][2] / "report.md").read_text()
    for doc in (html, md):
        assert "Case inputs" in doc and "Acceptance criteria" in doc
        assert "Kc = 8, Ti = 20 s, Td = 2 s" in doc  # the source PID, readable
        assert "0.5/((30s + 1)(5s + 1))" in doc and "sample rate 1 Hz" in doc
        assert "over by" in doc and "FAIL" in doc  # which criterion failed, and by how much
        assert "e-0" not in doc.split("## Figures")[0]  # no exponent notation in the tables
    for c in ("bench or in simulation", "bumpless", "interlocks", "change procedure"):
        assert c in html and c in md


@pytest.mark.parametrize("name", list(EXPECTED))
def test_markdown_figures_are_relative_and_exist(reports, name):
    folder = reports[name][2]
    import re

    targets = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", (folder / "report.md").read_text())
    assert targets
    for target in targets:
        assert not target.startswith(("/", "http")) and (folder / target).is_file()


# ----------------------------------------------------------------------------- never half-written
@pytest.mark.parametrize("where", ["data", "drawing"])
def test_failure_while_drawing_leaves_no_folder(evaluated, tmp_path, monkeypatch, where):
    """A figure that raises mid-run (computing its data, or drawing it) leaves neither the
    report folder nor a temporary one, and an existing folder replaced with force survives
    untouched."""
    import convert.report.canvas as canvas
    import convert.report.figures as figs
    from convert.report import write_report

    def broken(_):
        raise RuntimeError("drawing failed")

    if where == "data":
        monkeypatch.setattr(figs, "loop_data", broken)
    else:
        monkeypatch.setattr(canvas, "draw_loop", broken)
    res = evaluated["pi_card_to_firmware"]
    out = tmp_path / "new"
    with pytest.raises(RuntimeError):
        write_report(res, out)
    assert list(tmp_path.iterdir()) == []
    from convert.report.folder import write_folder

    old = tmp_path / "old"
    write_folder(old, {"report.md": "earlier report"}, force=False, protected=[])  # an earlier report
    with pytest.raises(RuntimeError):
        write_report(res, old, force=True)
    assert [p.name for p in tmp_path.iterdir()] == ["old"]
    assert (old / "report.md").read_text() == "earlier report"


def test_failure_while_writing_leaves_no_folder(evaluated, tmp_path, monkeypatch):
    """A write that fails half-way (here: the disk refuses results.json) removes the temporary
    folder; the destination never appears and an existing one is kept."""
    from pathlib import Path as P

    from convert.report import write_report

    real = P.write_text

    def flaky(self, *a, **kw):
        if self.name == "results.json":
            raise OSError("no space left on device")
        return real(self, *a, **kw)

    monkeypatch.setattr(P, "write_text", flaky)
    res = evaluated["pi_card_to_firmware"]
    with pytest.raises(OSError):
        write_report(res, tmp_path / "r")
    assert list(tmp_path.iterdir()) == []
    from convert.report.folder import write_folder

    keep = tmp_path / "keep"
    write_folder(keep, {"results.json": b"{}"}, force=False, protected=[])  # an earlier report
    with pytest.raises(OSError):
        write_report(res, keep, force=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep"]
    assert (keep / "results.json").read_bytes() == b"{}"


def test_existing_folder_refused_before_any_work(tmp_path, capsys, monkeypatch):
    """Without --force the CLI refuses an existing folder before evaluating anything."""
    import convert.compare.evaluate as ev

    def never(*a, **kw):
        raise AssertionError("evaluated although the folder exists")

    monkeypatch.setattr(ev, "evaluate_case", never)
    (tmp_path / "r").mkdir()
    (tmp_path / "r" / "mine.txt").write_text("x")
    code, _ = _main("report", str(CASES / "pi_card_to_firmware.toml"), "--out", str(tmp_path / "r"))
    assert code == 2 and "--force" in capsys.readouterr().err
    assert (tmp_path / "r" / "mine.txt").read_text() == "x"


@pytest.mark.parametrize("name", ["firmware_pid_to_opamp", "evidence_temp_card"])
def test_painter_draws_the_same_bytes(evaluated, name):
    """The figures drawn by the early-started drawing process (Painter: data sent by pickle, drawn
    on two cores) are byte for byte those drawn here in one process, and so are the other files
    (common practice: where the work runs must not change a result)."""
    from convert import sidework
    from convert.report import build_report
    from convert.report.canvas import Painter

    res = evaluated[name]
    with Painter() as painter:
        drawn_aside = build_report(res, painter)
    with sidework.alone():
        drawn_here = build_report(res)
    assert drawn_aside.keys() == drawn_here.keys()
    assert any(k.startswith("figures/") for k in drawn_here)
    for key in drawn_here:
        assert drawn_aside[key] == drawn_here[key], key
