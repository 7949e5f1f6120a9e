"""Tolerance analysis: the one Monte Carlo engine (chunked, bounded memory) against python-control
evaluated one draw at a time and numpy percentiles, its invariance to the chunk size and the draw
count, float32 against float64, `circuit` against `report`, and worst case against every corner."""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from convert.circuit.tolerance import (
    FLOAT32_BOUND,
    MAX_DRAWS,
    Comparison,
    draw_parts,
    parse_tolerances,
    percentiles,
    run_tolerances,
    worst_case,
)
from convert.circuit.topologies import get_topology
from convert.errors import InputError
from tests.test_circuit_spice import PARTS as CATALOG_PARTS

PID = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
TOL = {"R": 0.01, "C": 0.05}
ROOT = Path(__file__).resolve().parent.parent


def _nominal(topo, parts, f):
    return topo.response({k: np.array([v]) for k, v in parts.items()}, f)[0]


def _run(topo=None, parts=PID, f=None, **kw):
    topo = topo or get_topology("pid-single-amp")
    f = np.logspace(-2, 3, 60) if f is None else f
    kw.setdefault("comparisons", [Comparison("tolerances", _nominal(topo, parts, f))])
    return run_tolerances(topo, parts, TOL, band_f_hz=f, display_f_hz=f, **kw)


def test_percentiles_match_numpy():
    """Source: numpy.percentile (method 'linear') on the same data; the streaming selection keeps
    only the tails, in blocks."""
    rng = np.random.default_rng(2)
    for n in (1, 2, 7, 1000, 20001):
        x = rng.standard_normal((5, n))
        for q in ([0.5, 99.5], [0, 100], [13, 87]):
            assert np.allclose(percentiles(x.copy(), q), np.percentile(x, q, axis=1), rtol=0, atol=1e-15)


def test_engine_matches_python_control_per_draw():
    """Source: python-control TransferFunction frequency response, one draw at a time (300 draws
    made by the engine's own draw stream), reduced by numpy: the 0.5/99.5 % bands of gain and
    phase per frequency, and the 99th percentile of each draw's largest |gain error| and |phase
    error| against the rounded parts. Within 0.01 dB and 0.01 deg (float32 arithmetic)."""
    control = pytest.importorskip("control")
    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, 60)
    r = _run(topo, f=f, draws=300, seed=11)
    drawn = draw_parts(topo, PID, TOL, 300, 11)
    nominal = control.tf(*[list(x) for x in (topo.controller_from_parts(PID).num, topo.controller_from_parts(PID).den)])
    h0 = np.squeeze(nominal.frequency_response(2 * np.pi * f).complex)
    gains, phases, gerr, perr = [], [], [], []
    for i in range(300):
        c = topo.controller_from_parts({k: float(v[i]) for k, v in drawn.items()})
        h = np.squeeze(control.tf(list(c.num), list(c.den)).frequency_response(2 * np.pi * f).complex)
        gains.append(20 * np.log10(np.abs(h)))
        phases.append(np.degrees(np.unwrap(np.angle(h))))
        gerr.append(np.max(np.abs(20 * np.log10(np.abs(h / h0)))))
        perr.append(np.max(np.abs(np.degrees(np.angle(h / h0)))))
    g = np.percentile(np.array(gains), [0.5, 99.5], axis=0)
    p = np.percentile(np.array(phases), [0.5, 99.5], axis=0)
    p += 360 * np.round((r.band.phase_deg - p) / 360)  # same branch of the phase
    assert np.max(np.abs(g - r.band.gain_db)) < 0.01
    assert np.max(np.abs(p - r.band.phase_deg)) < 0.01
    fig = r.figures["tolerances"]
    assert fig.max_gain_error_db == pytest.approx(np.percentile(gerr, 99), abs=0.01)
    assert fig.max_phase_error_deg == pytest.approx(np.percentile(perr, 99), abs=0.01)
    assert fig.max_gain_error_db > 0.1  # tolerances must show


def _same(a, b) -> None:
    assert a.figures == b.figures
    for name in ("gain_db", "phase_deg"):
        assert np.array_equal(getattr(a.band, name), getattr(b.band, name))
    assert a.parameters == b.parameters


def test_figures_do_not_depend_on_the_chunk_size():
    """The same seed in chunks of 1, 97, 500 and all draws at once, on one to three threads, gives
    identical figures
    (bands, per-draw maxima, where they lie, design quantities), also with a loop, a plant and a
    single-pole op-amp model (python-control's margins are not needed: equality is the claim)."""
    from convert.circuit.opamp import OpAmpModel
    from convert.compare.loop import margins_of_responses
    from convert.controller import from_expression

    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 2, 40)
    loop_f = np.logspace(-2, 2, 50)
    plant = from_expression("2/((3*s+1)*(0.5*s+1))")
    ref = _nominal(topo, PID, f)
    ref_l = _nominal(topo, PID, loop_f)
    model = OpAmpModel(1e4)
    comps = [Comparison("tolerances", ref, None, ref_l), Comparison("total", ref * 1.01, model, ref_l)]
    kw = dict(
        f=f,
        comparisons=comps,
        draws=1000,
        seed=5,
        loop_f_hz=loop_f,
        display_opamp=model,
        loop_margins=lambda r: margins_of_responses(loop_f, r, plant, 0.2),
    )
    runs = [_run(chunk=c, workers=w, **kw) for c, w in ((1000, 1), (1, 1), (97, 2), (500, 2), (97, 3))]
    for other in runs[1:]:
        _same(runs[0], other)
    tot = runs[0].figures["total"]
    assert tot.delta_phase_margin_deg is not None and tot.max_gain_error_db > 0.05


def test_percentile_does_not_depend_on_the_draw_count():
    """The 99th percentile of the per-draw largest gain error, at 2,000, 10,000 and 40,000 draws
    (three seeds), lies inside the 3-sigma order-statistic interval of the true value, taken from
    an independent computation: 400,000 draws of the parts by numpy's legacy generator, evaluated
    in float64 by numpy from the topology's coefficients. (The interval of a sample quantile:
    q ± 3·sqrt(q(1 − q)/n); common practice.)"""
    topo = get_topology("pi-rc-feedback")
    parts = {"R1": 1e4, "R2": 2e4, "C1": 1e-6}
    f = np.logspace(-1, 2, 25)
    h0 = _nominal(topo, parts, f)
    rs = np.random.RandomState(99)
    big = {k: v * (1 + TOL[k[0]] * rs.uniform(-1, 1, 400_000)) for k, v in parts.items()}
    num, den = topo.coefficients(big)
    s = 2j * np.pi * f[None, :]
    h = sum(np.asarray(c)[:, None] * s ** (len(num) - 1 - i) for i, c in enumerate(num)) / sum(
        np.asarray(c)[:, None] * s ** (len(den) - 1 - i) for i, c in enumerate(den)
    )
    truth = np.max(np.abs(20 * np.log10(np.abs(h / h0))), axis=1)
    for draws, seed in ((2000, 1), (10_000, 2), (40_000, 3)):
        r = run_tolerances(topo, parts, TOL, band_f_hz=f, comparisons=[Comparison("t", h0)], draws=draws, seed=seed)
        half = 3 * np.sqrt(0.99 * 0.01 / draws) * 100
        lo, hi = np.percentile(truth, [99 - half, min(100.0, 99 + half)])
        assert lo <= r.figures["t"].max_gain_error_db <= hi, (draws, lo, r.figures["t"].max_gain_error_db, hi)


@pytest.mark.parametrize("name", sorted(CATALOG_PARTS))
def test_float32_within_the_stated_bound_of_float64(name):
    """The float32 coefficient path against the same engine in float64 (same draws), for every
    topology of the catalog (the part sets the ngspice check uses): every figure and band within
    FLOAT32_BOUND (dB and degrees), over seven decades of frequency."""
    topo, parts = get_topology(name), CATALOG_PARTS[name]
    f = np.logspace(-3, 4, 120)
    r32 = _run(topo, parts, f=f, draws=2000, seed=4)
    r64 = _run(topo, parts, f=f, draws=2000, seed=4, dtype=np.float64)
    a, b = r32.figures["tolerances"], r64.figures["tolerances"]
    assert abs(a.max_gain_error_db - b.max_gain_error_db) < FLOAT32_BOUND
    assert abs(a.max_phase_error_deg - b.max_phase_error_deg) < FLOAT32_BOUND
    assert np.max(np.abs(r32.band.gain_db - r64.band.gain_db)) < FLOAT32_BOUND
    assert np.max(np.abs(r32.band.phase_deg - r64.band.phase_deg)) < FLOAT32_BOUND
    assert a.max_gain_error_db > 1e-3  # the tolerances show


@pytest.mark.parametrize("name", sorted(CATALOG_PARTS))
def test_float32_with_an_opamp_model_within_the_stated_bound_of_float64(name):
    """The same with a single-pole op-amp (GBW 100 kHz, A0 1e5): the draws' figures against the
    ideal nominal response and the display band with the model, float32 against float64 (the
    written-out circuit in float32 where the stages read only earlier nodes, the node solution in
    float64 otherwise), within FLOAT32_BOUND over seven decades; the model must show."""
    from convert.circuit.opamp import OpAmpModel

    topo, parts = get_topology(name), CATALOG_PARTS[name]
    f = np.logspace(-3, 4, 120)
    model = OpAmpModel(gbw_hz=1e5)
    ref = _nominal(topo, parts, f)
    kw = dict(f=f, draws=2000, seed=4, comparisons=[Comparison("total", ref, model)], display_opamp=model)
    r32, r64 = _run(topo, parts, **kw), _run(topo, parts, dtype=np.float64, **kw)
    a, b = r32.figures["total"], r64.figures["total"]
    assert abs(a.max_gain_error_db - b.max_gain_error_db) < FLOAT32_BOUND
    assert abs(a.max_phase_error_deg - b.max_phase_error_deg) < FLOAT32_BOUND
    assert np.max(np.abs(r32.band.gain_db - r64.band.gain_db)) < FLOAT32_BOUND
    assert np.max(np.abs(r32.band.phase_deg - r64.band.phase_deg)) < FLOAT32_BOUND
    ideal = _run(topo, parts, f=f, draws=2000, seed=4, comparisons=[Comparison("total", ref)])
    assert abs(a.max_phase_error_deg - ideal.figures["total"].max_phase_error_deg) > 0.01  # the model shows


def test_worst_case_brackets_every_corner():
    """Reference: all 2^5 tolerance corners evaluated exactly; the worst-case band from the
    sensitivities is made of corners, so it lies inside their envelope, and it reaches the envelope
    within 1e-3 dB (where a sensitivity changes sign inside the tolerance the sign-chosen corner
    can miss the extreme vertex by a little)."""
    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, 50)
    wc = worst_case(topo, PID, TOL, f)
    names = list(PID)
    env = []
    for signs in itertools.product((-1, 1), repeat=len(names)):
        parts = {n: np.array([PID[n] * (1 + s * TOL[n[0]])]) for n, s in zip(names, signs)}
        env.append(20 * np.log10(np.abs(topo.response(parts, f)[0])))
    env = np.array(env)
    assert np.all(wc.gain_db_high <= env.max(axis=0) + 1e-9)
    assert np.all(wc.gain_db_low >= env.min(axis=0) - 1e-9)
    assert np.allclose(wc.gain_db_high, env.max(axis=0), atol=1e-3)
    assert np.allclose(wc.gain_db_low, env.min(axis=0), atol=1e-3)


def test_seed_reproducible_and_seeds_differ():
    topo = get_topology("pi-rc-feedback")
    parts = {"R1": 1e4, "R2": 2e4, "C1": 1e-6}
    a, b, c = (_run(topo, parts, draws=500, seed=s) for s in (4, 4, 5))
    assert np.array_equal(a.band.gain_db, b.band.gain_db)
    assert not np.array_equal(a.band.gain_db, c.band.gain_db)


def test_normal_distribution_is_narrower_than_uniform():
    """Tolerance as 3 sigma of a normal spread against uniform within the tolerance: the
    99th-percentile figure is smaller (common practice: 3 sigma < the full uniform width)."""
    u = _run(draws=4000, seed=3).figures["tolerances"]
    n = _run(draws=4000, seed=3, distribution="normal").figures["tolerances"]
    assert 0 < n.max_gain_error_db < u.max_gain_error_db


@pytest.mark.parametrize("draws", [0, -3, MAX_DRAWS + 1, 2.5, True])
def test_draw_count_bounds(draws):
    with pytest.raises(InputError, match="draws"):
        _run(draws=draws)


def test_cli_cap_matches_the_engine():
    from convert.cli.circuit import MAX_DRAWS as CLI_MAX

    assert CLI_MAX == MAX_DRAWS


@pytest.mark.parametrize(
    "words, match", [(["R"], "KIND=PERCENT"), (["R=150%"], "below 100"), (["X9=1%"], "unknown part"), (["R=abc"], "R")]
)
def test_bad_tolerances(words, match):
    with pytest.raises(InputError, match=match):
        parse_tolerances(words, part_names=["R1", "C1"])


def test_tolerance_words():
    assert parse_tolerances(["R=0.1%", "C=10%", "R1=2%"], part_names=["R1"]) == {"R": 0.001, "C": 0.1, "R1": 0.02}


# ------------------------------------------------------------------------ circuit against report
CASE = """
[case]
title = "Tolerance figures from two commands"

[source]
expression = "2.5*(1 + 1/(0.8*s))*(1 + 0.12*s)/(1 + 0.012*s)"

[target.circuit]
topology = "auto"
resistors = "E24"
capacitors = "E6"
tolerances = {{ R = "2 %", C = "10 %" }}
draws = {draws}
seed = 13
distribution = "{distribution}"

[criteria]
band = ["0.05 Hz", "20 Hz"]
max_gain_error_db = 3
max_phase_error_deg = 20
"""


@pytest.mark.parametrize("distribution", ["uniform", "normal"])
def test_circuit_and_report_give_the_same_tolerance_figures(run_cli, tmp_path, distribution):
    """The same design, seed, draws and distribution through `loopshift circuit --json` and
    `loopshift report` (results.json): the same 99th-percentile gain and phase figures, exactly."""
    case = tmp_path / "tol.toml"
    case.write_text(CASE.format(draws=1500, distribution=distribution))
    r = run_cli("report", str(case), "--out", str(tmp_path / "rep"))
    assert r.code in (0, 1), r.err
    data = json.loads((tmp_path / "rep" / "results.json").read_text())
    rows = {r["key"]: r for r in data["budget"][0]["rows"]}
    r = run_cli(
        "circuit",
        "2.5*(1 + 1/(0.8*s))*(1 + 0.12*s)/(1 + 0.012*s)",
        "--band",
        "0.05Hz",
        "20Hz",
        "--resistors",
        "E24",
        "--capacitors",
        "E6",
        "--tolerance",
        "R=2%",
        "C=10%",
        "--draws",
        "1500",
        "--seed",
        "13",
        "--distribution",
        distribution,
        "--json",
    )
    assert r.code == 0, r.err
    mc = json.loads(r.out)["errors"]["tolerance"]["monte_carlo"]
    fig = mc["figures"]["tolerances"]
    assert (mc["draws"], mc["seed"], mc["distribution"]) == (1500, 13, distribution)
    assert fig["max_gain_error_db"] == rows["tolerances"]["max_gain_error_db"]
    assert fig["max_phase_error_deg"] == rows["tolerances"]["max_phase_error_deg"]
    assert fig["max_gain_error_db"] > 0.05


def test_case_file_draws_are_capped_and_distribution_read(run_cli, tmp_path):
    case = tmp_path / "big.toml"
    case.write_text(CASE.format(draws=MAX_DRAWS + 1, distribution="uniform"))
    r = run_cli("report", str(case), "--out", str(tmp_path / "rep"))
    assert r.code == 2 and "target.circuit.draws" in r.err and "1,000,000" in r.err and "Traceback" not in r.err
    case.write_text(CASE.format(draws=200, distribution="lognormal"))
    r = run_cli("report", str(case), "--out", str(tmp_path / "rep"))
    assert r.code == 2 and "target.circuit.distribution" in r.err


# ------------------------------------------------------------------------ memory
MEMORY_SCRIPT = textwrap.dedent("""
    import sys
    import numpy as np
    from convert.circuit.opamp import OpAmpModel
    from convert.circuit.topologies import get_topology
    from convert.compare.circuitwork import monte_carlo_rows
    from convert.compare.loop import margins_of_responses
    from convert.controller import from_expression

    draws = int(sys.argv[1])
    topo = get_topology("pid-single-amp")
    parts = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
    band = np.logspace(-2, 1, 8)
    loop_f = np.logspace(-2, 1, 12)
    disp = np.logspace(-3, 2, 8)
    plant = from_expression("2/((3*s+1)*(0.5*s+1))")
    nom = lambda f: -topo.response({k: np.array([v]) for k, v in parts.items()}, f)[0]
    monte_carlo_rows(topo, parts, {"R": 0.01, "C": 0.05}, band, sign=-1.0, draws=draws, seed=3,
                     distribution="uniform", rounded_response=nom(band), source_response=nom(band),
                     opamp=OpAmpModel(None), loop_f_hz=loop_f,
                     loop_margins=lambda r: margins_of_responses(loop_f, r, plant, 0.2),
                     loop_rounded=nom(loop_f), loop_source=nom(loop_f), display_f_hz=disp)
""")

MEMORY_LIMIT_MB = 400


LAUNCHER = (
    "import resource, subprocess, sys; subprocess.run([sys.executable, '-c', sys.argv[1], sys.argv[2]], "
    "check=True, stdout=subprocess.DEVNULL); print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)"
)


def _peak_mb(draws: int) -> float:
    """Peak resident memory (MB) of MEMORY_SCRIPT, by getrusage(RUSAGE_CHILDREN) in a small
    launcher process. (Linux carries a process's peak across exec from the process that started
    it, so a child started straight from pytest would report pytest's own peak; the launcher
    starts from nothing.)"""
    out = subprocess.run(
        [sys.executable, "-c", LAUNCHER, MEMORY_SCRIPT, str(draws)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"},
        check=True,
    )
    return int(out.stdout.split()[-1]) / 1024  # ru_maxrss is in KiB on Linux


def test_a_million_draws_stay_in_bounded_memory():
    """1,000,000 draws through the report's Monte Carlo (the circuit target's call: both
    comparisons, a single-pole op-amp model, loop margins with a plant, the display band) on
    small frequency grids, peak resident memory by resource.getrusage in a subprocess: under
    MEMORY_LIMIT_MB, and within 64 MB of the same run at 10,000 draws (memory O(chunk), not
    O(draws)). The grids are small to keep the test quick; the per-draw memory is what grows."""
    small, big = _peak_mb(10_000), _peak_mb(1_000_000)
    assert big < MEMORY_LIMIT_MB
    assert big - small < 64, (small, big)


def test_figures_on_two_cores_are_those_of_one(monkeypatch):
    """Left at its default, the engine shares every other chunk with a helper process
    (convert.sidework) from HELPER_MIN_DRAWS draws; its figures are identical to one thread's,
    with a loop, a plant and an op-amp model (equality is the claim, as for the chunk size)."""
    from convert import sidework
    from convert.circuit.opamp import OpAmpModel
    from convert.circuit.tolerance import HELPER_MIN_DRAWS
    from convert.compare.loop import margins_of_responses
    from convert.controller import from_expression

    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 2, 40)
    loop_f = np.logspace(-2, 2, 50)
    plant = from_expression("2/((3*s+1)*(0.5*s+1))")
    ref, ref_l = _nominal(topo, PID, f), _nominal(topo, PID, loop_f)
    model = OpAmpModel(1e4)
    comps = [Comparison("tolerances", ref, None, ref_l), Comparison("total", ref * 1.01, model, ref_l)]
    kw = dict(
        f=f,
        comparisons=comps,
        draws=HELPER_MIN_DRAWS + 501,
        seed=7,
        loop_f_hz=loop_f,
        display_opamp=model,
        loop_margins=lambda r: margins_of_responses(loop_f, r, plant, 0.2),
    )
    one = _run(chunk=700, workers=1, **kw)
    started = []
    real_start = sidework.start
    monkeypatch.setattr(sidework, "start", lambda fn, *a, **k: started.append(fn) or real_start(fn, *a, **k))
    for chunk in (700, 100_000):  # chunks shared out, and one chunk halved
        _same(one, _run(chunk=chunk, **kw))
    assert len(started) == (2 if sidework.helpers_usable() else 0)
    # a light run (ideal op-amp, no loop) of as many draws stays in this process: forking costs more
    light = dict(f=f, comparisons=[comps[0]], draws=HELPER_MIN_DRAWS + 501, seed=7)
    _same(_run(chunk=700, workers=1, **light), _run(chunk=700, **light))
    assert len(started) == (2 if sidework.helpers_usable() else 0)


@pytest.mark.parametrize(
    "parts, plant_text, theta",
    [
        ({"R1": 1e6, "R2": 1e6, "C1": 120e-6}, "0.04/(s*(15*s + 1))", 2.0),  # the tank-level card's loop
        ({"R1": 22e3, "R2": 68e3, "C1": 2.2e-6}, "2/((3*s+1)*(0.5*s+1))", 0.2),
    ],
)
def test_margin_changes_on_the_drawn_loop_grid_match_a_dense_grid(parts, plant_text, theta):
    """Each draw's margins are taken on 320 points around the nominal loop's marks
    (compare.circuitwork.drawn_loop_grid); the same 300 draws' margins on a grid of 4,000 points a
    decade over six decades (margins_of_responses, itself checked against python-control in
    tests/test_margins_reference.py) give the same 99th-percentile margin changes within 0.01 deg
    and 0.005 dB: the figure does not rest on the grid's density."""
    from convert.compare.circuitwork import drawn_loop_grid
    from convert.compare.loop import margins_of_responses
    from convert.controller import from_expression

    topo = get_topology("pi-rc-feedback")
    plant = from_expression(plant_text)
    tol = {"R": 0.01, "C": 0.10}
    band = np.logspace(-4, -1, 30)
    nom = {k: np.array([v]) for k, v in parts.items()}
    dense = np.logspace(-5, 1, 24001)
    marks = margins_of_responses(dense, topo.response(nom, dense), plant, theta)
    grid = drawn_loop_grid(
        *(float(marks[k][0]) for k in ("crossover_hz", "phase_crossover_hz", "sensitivity_peak_hz")), band[-1]
    )
    assert grid.size == 320
    ref_b, ref_l = topo.response(nom, band)[0], topo.response(nom, grid)[0]
    mc = run_tolerances(
        topo,
        parts,
        tol,
        band_f_hz=band,
        comparisons=[Comparison("x", ref_b, None, ref_l)],
        draws=300,
        seed=4,
        loop_f_hz=grid,
        loop_margins=lambda r: margins_of_responses(grid, r, plant, theta),
        parameters=False,
        workers=1,
    )
    fig = mc.figures["x"]
    drawn = draw_parts(topo, parts, tol, 300, 4)
    m = margins_of_responses(dense, topo.response(drawn, dense), plant, theta)
    for name, attr, within in (
        ("phase_margin_deg", "delta_phase_margin_deg", 0.01),
        ("gain_margin_db", "delta_gain_margin_db", 0.005),
        ("sensitivity_peak_db", "delta_sensitivity_peak_db", 0.005),
    ):
        change = np.abs(m[name] - marks[name][0])
        level = np.sort(change)[int(round(0.99 * (change.size - 1)))]  # the order statistic nearest the 99th percentile
        assert abs(abs(getattr(fig, attr)) - level) < within, name
        assert level > 10 * within  # the tolerances must move the margins, or the check proves nothing
