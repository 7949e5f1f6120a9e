"""Benchmark: circuit Monte Carlo and part search (ratios measured in one run; not a test).

1. Monte Carlo of 100,000 draws of the single-amplifier PID at 400 frequencies, producing the
   0.5 / 50 / 99.5 % bands of gain and phase (convert.circuit.tolerance.monte_carlo), against
   (a) python-control one draw at a time (control.tf + frequency_response): a sample of
       --sample draws is timed and scaled to 100,000 (stated in the output);
   (b) a numpy floor: np.log10 and np.arctan2 once over a 100,000 x 400 float64 array.
   Targets: >= 10x faster than (a); <= 1.5x the floor (b).
   Also the accuracy of the float32 arithmetic against the float64 path (limit 0.01 dB).
2. Part search (design_circuit) with E96 resistors and E12 capacitors over the default ranges
   (1 kOhm-1 MOhm, 100 pF-10 uF). Target <= 0.5 s.

Run: /work/venv/bin/python bench/circuit.py [--draws 100000] [--sample 2000]   (exit 1 when a target is missed)
"""

from __future__ import annotations

import argparse
import time

import numpy as np


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--draws", type=int, default=100_000)
    ap.add_argument("--freqs", type=int, default=400)
    ap.add_argument("--sample", type=int, default=2000)
    args = ap.parse_args()

    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.tolerance import draw_parts, monte_carlo
    from convert.circuit.topologies import get_topology
    from convert.controller import from_expression

    topo = get_topology("pid-single-amp")
    parts = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
    tol = {"R": 0.01, "C": 0.05}
    f = np.logspace(-2, 3, args.freqs)

    # warm-up (imports, caches)
    monte_carlo(topo, parts, tol, f, draws=1000, seed=1)

    t0 = time.perf_counter()
    r32 = monte_carlo(topo, parts, tol, f, draws=args.draws, seed=1)
    t_ours = time.perf_counter() - t0

    # (b) numpy floor: log10 and arctan2 once over an array of the same size
    rng = np.random.default_rng(0)
    x = rng.uniform(0.5, 2.0, (args.freqs, args.draws))
    y = rng.uniform(-1.0, 1.0, (args.freqs, args.draws))
    t0 = time.perf_counter()
    np.log10(x)
    np.arctan2(y, x)
    t_floor = time.perf_counter() - t0
    del x, y

    # (a) python-control, one draw at a time
    import control

    drawn = draw_parts(topo, parts, tol, args.sample, 2)
    w = 2 * np.pi * f
    t0 = time.perf_counter()
    for i in range(args.sample):
        c = topo.controller_from_parts({k: float(v[i]) for k, v in drawn.items()})
        resp = control.tf(list(c.num), list(c.den)).frequency_response(w)
        np.squeeze(resp.magnitude), np.squeeze(resp.phase)
    t_loop_sample = time.perf_counter() - t0
    t_loop = t_loop_sample * args.draws / args.sample

    # float32 accuracy against the float64 path (same draws)
    t0 = time.perf_counter()
    r64 = monte_carlo(topo, parts, tol, f, draws=args.draws, seed=1, dtype=np.float64)
    t_64 = time.perf_counter() - t0
    err_db = float(np.max(np.abs(r32.gain_db - r64.gain_db)))
    err_deg = float(np.max(np.abs(r32.phase_deg - r64.phase_deg)))

    print(f"Monte Carlo, pid-single-amp, {args.draws} draws x {args.freqs} frequencies, 0.5/50/99.5 % bands")
    print(f"  ours (float32 arithmetic)        {t_ours:8.3f} s")
    print(f"  ours (float64 arithmetic)        {t_64:8.3f} s")
    print(f"  numpy floor (log10 + arctan2)    {t_floor:8.3f} s   ours/floor = {t_ours / t_floor:5.2f} (target <= 1.5)")
    print(f"  python-control loop, {args.sample} draws {t_loop_sample:8.3f} s -> scaled to {args.draws}: {t_loop:8.2f} s")
    print(f"                                   loop/ours = {t_loop / t_ours:6.1f}x (target >= 10)")
    print(f"  float32 vs float64 bands: max {err_db:.2e} dB, {err_deg:.2e} deg (limit 0.01 dB)")

    missed = []
    if t_ours / t_floor > 1.5:
        missed.append("Monte Carlo vs floor")
    if t_loop / t_ours < 10:
        missed.append("Monte Carlo vs python-control loop")
    if err_db > 0.01:
        missed.append("float32 accuracy")
    for label, expr in (("pid-single-amp", "2*(1+1/(3*s))*(1+0.5*s)/(1+0.05*s)"),
                        ("pid-parallel", "(s^2+0.2*s+1)/(s*(0.01*s+1))"),
                        ("pi-rc-feedback", "2*(1+1/(0.3*s))")):
        target = from_expression(expr)
        opts = DesignOptions(resistors="E96", capacitors="E12")
        design_circuit(target, opts)  # warm-up
        t0 = time.perf_counter()
        d = design_circuit(target, opts)
        t = time.perf_counter() - t0
        print(f"part search E96/E12 default ranges, {label:15s} {t:6.3f} s (target <= 0.5 s); "
              f"best score {d.candidates[0].score:.3g}")
        if t > 0.5:
            missed.append(f"part search {label}")
    if missed:
        print("targets missed: " + ", ".join(missed))
        raise SystemExit(1)
    print("all targets met")


if __name__ == "__main__":
    main()
