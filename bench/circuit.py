"""Benchmark: the tolerance engine on the path `report` and `circuit` take, and the part search
(ratios measured in one run, interleaved pairs; not a test).

1. Tolerance engine (convert.circuit.tolerance.run_tolerances, the call `loopshift circuit` makes
   and the core of the report's Monte Carlo): --draws (100,000) draws of the single-amplifier PID
   at --freqs (400) frequencies, with the 0.5/99.5 % gain and phase bands and each draw's largest
   gain and phase error, against
   (a) a numpy floor: the same rational responses (same draws, same chunks) evaluated in
       complex64 by Horner's rule, then magnitude and phase (np.abs, np.angle);
   (b) python-control, one draw at a time (control.tf + frequency_response), a sample of
       --sample draws timed and scaled to --draws (stated in the output).
   Targets: engine <= 1.5x (a); engine >= 20x faster than (b). Also float32 against float64 on
   the same draws (the stated bound, FLOAT32_BOUND).
2. Memory, peak resident set by getrusage(RUSAGE_CHILDREN) of a fresh launcher process:
   the engine at 1,000,000 draws x 400 frequencies (target <= 1 GB), and
   `loopshift report cases/firmware_pid_to_opamp.toml --draws 100000` (target <= 500 MB);
   with --million also the report at 1,000,000 draws (target <= 1 GB; takes many minutes).
3. `loopshift report cases/firmware_pid_to_opamp.toml --draws 10000` against
   `python -c "import control, matplotlib.pyplot"`, fresh processes, interleaved pairs, median
   (target <= 4). (No "floor that draws the same figures" is built here: see docs/report.md.)
4. Part search (design_circuit) with E96 resistors and E12 capacitors over the default ranges
   (1 kOhm-1 MOhm, 100 pF-10 uF). Target <= 0.5 s.

Run: /work/venv/bin/python bench/circuit.py [--draws 100000] [--freqs 400] [--sample 500] [--repeat 3]
     [--million] [--skip-report]      (exit 1 when a target is missed)
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
PARTS = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
TOL = {"R": 0.01, "C": 0.05}
CASE = ROOT / "cases" / "firmware_pid_to_opamp.toml"

ENGINE_SCRIPT = """
import sys
import numpy as np
from convert.circuit.tolerance import Comparison, run_tolerances
from convert.circuit.topologies import get_topology
topo = get_topology("pid-single-amp")
parts = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
f = np.logspace(-2, 3, int(sys.argv[2]))
ref = topo.response({k: np.array([v]) for k, v in parts.items()}, f)[0]
run_tolerances(topo, parts, {"R": 0.01, "C": 0.05}, band_f_hz=f, comparisons=[Comparison("t", ref)],
               draws=int(sys.argv[1]), seed=1, display_f_hz=f)
"""

LAUNCHER = ("import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL); "
            "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")


def _peak_mb(cmd: list[str]) -> float:
    """Peak RSS (MB) of ``cmd`` run by a small launcher (Linux keeps a process's peak across exec
    from its parent, so the launcher starts small)."""
    out = subprocess.run([sys.executable, "-c", LAUNCHER, *cmd], cwd=ROOT, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    return int(out.stdout.split()[-1]) / 1024


def _floor(topo, drawn: dict, f: np.ndarray, chunk: int) -> None:
    """Evaluate N(jw)/D(jw) in complex64 for every draw (Horner), then |H| and arg H, in chunks."""
    num, den = topo.coefficients(drawn)
    s = (2j * np.pi * f).astype(np.complex64)[:, None]
    n = len(next(iter(drawn.values())))
    for i in range(0, n, chunk):
        sl = slice(i, min(n, i + chunk))

        def horner(coeffs):
            acc = np.zeros((f.size, sl.stop - sl.start), np.complex64)
            for c in coeffs:
                acc *= s
                acc += np.broadcast_to(np.asarray(c, dtype=np.float32), (n,))[sl]
            return acc

        h = horner(num)
        h /= horner(den)
        np.abs(h)
        np.angle(h)


def _pairs(a, b, repeat: int) -> tuple[float, float, list[float]]:
    """Run a() and b() interleaved ``repeat`` times: medians and the ratios of each pair."""
    ta, tb, ratios = [], [], []
    for _ in range(repeat):
        t0 = time.perf_counter()
        a()
        t1 = time.perf_counter()
        b()
        t2 = time.perf_counter()
        ta.append(t1 - t0)
        tb.append(t2 - t1)
        ratios.append((t1 - t0) / (t2 - t1))
    return statistics.median(ta), statistics.median(tb), ratios


def _spread(ratios: list[float]) -> str:
    return f"median {statistics.median(ratios):.2f} (pairs {min(ratios):.2f}-{max(ratios):.2f})"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--draws", type=int, default=100_000)
    ap.add_argument("--freqs", type=int, default=400)
    ap.add_argument("--sample", type=int, default=500)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--million", action="store_true", help="also run the report at 1,000,000 draws (slow)")
    ap.add_argument("--skip-report", action="store_true", help="skip the report runs (sections 2b and 3)")
    ap.add_argument("--skip-memory", action="store_true", help="skip the memory runs (section 2)")
    args = ap.parse_args()

    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.tolerance import (DEFAULT_CHUNK, FLOAT32_BOUND, Comparison, draw_parts, run_tolerances)
    from convert.circuit.topologies import get_topology
    from convert.controller import from_expression

    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, args.freqs)
    ref = topo.response({k: np.array([v]) for k, v in PARTS.items()}, f)[0]
    missed = []

    def engine(dtype=np.float32, workers=1):
        return run_tolerances(topo, PARTS, TOL, band_f_hz=f, comparisons=[Comparison("t", ref)], draws=args.draws,
                              seed=1, display_f_hz=f, parameters=False, dtype=dtype, workers=workers)

    drawn = draw_parts(topo, PARTS, TOL, args.draws, 1)
    engine()  # warm-up
    # judged on one thread (the default, as the floor runs); two threads printed beside it
    t_ours, t_floor, ratios = _pairs(engine, lambda: _floor(topo, drawn, f, DEFAULT_CHUNK), args.repeat)
    ratio_floor = statistics.median(ratios)
    t_two, _, ratios_two = _pairs(lambda: engine(workers=2), lambda: _floor(topo, drawn, f, DEFAULT_CHUNK),
                                  args.repeat)

    import control

    sample = draw_parts(topo, PARTS, TOL, args.sample, 2)
    w = 2 * np.pi * f
    t0 = time.perf_counter()
    for i in range(args.sample):
        c = topo.controller_from_parts({k: float(v[i]) for k, v in sample.items()})
        resp = control.tf(list(c.num), list(c.den)).frequency_response(w)
        np.squeeze(resp.magnitude), np.squeeze(resp.phase)
    t_loop = (time.perf_counter() - t0) * args.draws / args.sample

    r32, r64 = engine(), engine(np.float64)
    err = max(abs(r32.figures["t"].max_gain_error_db - r64.figures["t"].max_gain_error_db),
              abs(r32.figures["t"].max_phase_error_deg - r64.figures["t"].max_phase_error_deg),
              float(np.max(np.abs(r32.band.gain_db - r64.band.gain_db))),
              float(np.max(np.abs(r32.band.phase_deg - r64.band.phase_deg))))

    print(f"1. tolerance engine, pid-single-amp, {args.draws} draws x {args.freqs} frequencies "
          "(0.5/99.5 % bands + per-draw maxima)")
    print(f"   engine (float32, one thread)             {t_ours:8.3f} s")
    print(f"   numpy floor (complex64 Horner, abs, angle) {t_floor:8.3f} s   engine/floor {_spread(ratios)} "
          "(target <= 1.5)")
    print(f"   engine on two threads (workers=2)        {t_two:8.3f} s   engine/floor {_spread(ratios_two)}")
    print(f"   python-control loop, {args.sample} draws scaled to {args.draws}: {t_loop:8.2f} s   "
          f"loop/engine = {t_loop / t_ours:6.1f}x (target >= 20)")
    print(f"   float32 vs float64, largest difference of any figure or band: {err:.2e} (bound {FLOAT32_BOUND:g})")
    if ratio_floor > 1.5:
        missed.append("engine vs numpy floor")
    if t_loop / t_ours < 20:
        missed.append("engine vs python-control loop")
    if err > FLOAT32_BOUND:
        missed.append("float32 bound")

    if not args.skip_memory:
        print("2. memory (peak resident set)")
        peak = _peak_mb([sys.executable, "-c", ENGINE_SCRIPT, "1000000", str(args.freqs)])
        print(f"   engine, 1,000,000 draws x {args.freqs} frequencies: {peak:7.0f} MB (target <= 1024)")
        if peak > 1024:
            missed.append("engine memory at 1e6 draws")
    with tempfile.TemporaryDirectory() as tmp:
        runs = [] if args.skip_report or args.skip_memory else [(100_000, 500)]
        if args.million:
            runs.append((1_000_000, 1024))
        for draws, limit in runs:
            out = Path(tmp) / f"r{draws}"
            t0 = time.perf_counter()
            peak = _peak_mb([sys.executable, "-m", "convert", "report", str(CASE), "--out", str(out), "--force",
                             "--draws", str(draws)])
            print(f"   report {CASE.stem} --draws {draws}: {peak:7.0f} MB (target <= {limit}), "
                  f"{time.perf_counter() - t0:.1f} s")
            if peak > limit:
                missed.append(f"report memory at {draws} draws")

        if not args.skip_report:
            py = sys.executable
            out = Path(tmp) / "r10k"

            def report():
                subprocess.run([py, "-m", "convert", "report", str(CASE), "--out", str(out), "--force", "--draws",
                                "10000"], cwd=ROOT, capture_output=True, check=False)

            def imports():
                subprocess.run([py, "-c", "import control, matplotlib.pyplot"], capture_output=True, check=True)

            t_rep, t_imp, ratios = _pairs(report, imports, args.repeat)
            print(f"3. report {CASE.stem} --draws 10000: {t_rep:.2f} s; import control, matplotlib.pyplot: "
                  f"{t_imp:.2f} s; ratio {_spread(ratios)} (target <= 4)")
            if statistics.median(ratios) > 4:
                missed.append("report at 10,000 draws")

    for label, expr in (("pid-single-amp", "2*(1+1/(3*s))*(1+0.5*s)/(1+0.05*s)"),
                        ("pid-parallel", "(s^2+0.2*s+1)/(s*(0.01*s+1))"),
                        ("pi-rc-feedback", "2*(1+1/(0.3*s))")):
        target = from_expression(expr)
        opts = DesignOptions(resistors="E96", capacitors="E12")
        design_circuit(target, opts)  # warm-up
        t0 = time.perf_counter()
        d = design_circuit(target, opts)
        t = time.perf_counter() - t0
        print(f"4. part search E96/E12 default ranges, {label:15s} {t:6.3f} s (target <= 0.5 s); "
              f"best score {d.candidates[0].score:.3g}")
        if t > 0.5:
            missed.append(f"part search {label}")
    if missed:
        print("targets missed: " + ", ".join(missed))
        raise SystemExit(1)
    print("all targets met")


if __name__ == "__main__":
    main()
