"""Benchmark: cascade synthesis (issue 14) — ratios and times measured in one run; not a test.

1. Cascade design (plan, part search over E24 resistors / E12 capacitors in the default ranges, the
   joined circuit and its notes) of a sixth-order target of our own:
       (s^2 + 0.5 s + 400)(s + 3) / ((s^2 + 4 s + 400)(s + 30)(0.2 s + 1)(s^2 + 3 s + 9))
   (--moderate: (s + 2)(s^2 + 6 s + 100) / ((s + 20)(s^2 + 4 s + 64)(s^2 + 10 s + 400)(0.05 s + 1)),
   no zero pair of Q 40 next to a pole pair). Target: <= 2 s (printed as the ratio to 2 s).
2. Its 10,000-draw Monte Carlo tolerance analysis (convert.circuit.tolerance.monte_carlo, 400
   frequencies) against the same analysis of a single-stage PID. No single-stage PID has as many
   parts as the cascade, so the reference is pid-two-input (17 parts, the catalog's largest PID)
   timed in the same run and scaled by part count (draw generation and polynomial evaluation grow
   about linearly with the parts); the raw ratio is printed too. Target: <= 2x. Where a part set's
   phase moves 90 degrees or more from nominal (the first target's Q = 40 zero pair, 0.5 rad/s wide,
   does with 5 % capacitors) the engine (convert.circuit.tolerance) takes its exact complex path,
   which is several times slower.

Run: /work/venv/bin/python bench/cascade.py [--repeat 3]   (exit 1 when a target is missed)
"""

from __future__ import annotations

import argparse
import math
import sys
import time

import numpy as np

TARGET = "(s^2 + 0.5*s + 400)*(s + 3)/((s^2 + 4*s + 400)*(s + 30)*(0.2*s + 1)*(s^2 + 3*s + 9))"
TARGET_MODERATE = "(s + 2)*(s^2 + 6*s + 100)/((s + 20)*(s^2 + 4*s + 64)*(s^2 + 10*s + 400)*(0.05*s + 1))"


def _best(fn, repeat: int) -> float:
    out = math.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        out = min(out, time.perf_counter() - t0)
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--draws", type=int, default=10_000)
    ap.add_argument("--moderate", action="store_true",
                    help="use the second sixth-order target (no near pole-zero pair of Q 40)")
    args = ap.parse_args()

    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.tolerance import Comparison, run_tolerances

    def monte_carlo(topo, parts, tol, f, *, draws, seed):
        """The tolerance engine with the 0.5/99.5 % bands and per-draw maxima (what `circuit` runs)."""
        ref = topo.response({k: np.asarray([v]) for k, v in parts.items()}, f)[0]
        return run_tolerances(topo, parts, tol, band_f_hz=f, comparisons=[Comparison("t", ref)], draws=draws,
                              seed=seed, display_f_hz=f).band
    from convert.circuit.topologies import get_topology
    from convert.controller import from_expression

    target = from_expression(TARGET_MODERATE if args.moderate else TARGET)
    print(f"target: {TARGET_MODERATE if args.moderate else TARGET}")
    options = DesignOptions(resistors="E24", capacitors="E12")
    design = design_circuit(target, options)  # warm-up (imports)
    t_design = _best(lambda: design_circuit(target, options), args.repeat)
    fitted = design.fitted_parts()
    print(f"cascade: {len(design.cascade.sections)} stages, {design.cascade.total_amplifiers} op-amps, "
          f"{len(fitted)} fitted parts; rounding {design.candidates[0].max_gain_error_db:.3g} dB / "
          f"{design.candidates[0].max_phase_error_deg:.3g} deg")
    print(f"1. design time {t_design:.3f} s; ratio to the 2 s target {t_design / 2.0:.3f} "
          f"({'ok' if t_design <= 2.0 else 'MISSED'})")

    tol = {"R": 0.01, "C": 0.05}
    f = np.logspace(math.log10(design.band_hz[0]), math.log10(design.band_hz[1]), 400)
    pid = get_topology("pid-two-input")
    pid_parts = {"R1": 10e3, "R2": 10e3, "R3": 22e3, "R4": 10e3, "R5": 15e3, "R6": 220e3, "R7": 220e3,
                 "C1": 1e-6, "C2": 220e-9, "R8": 6.8e3, "C3": 470e-9, "R9": 3.3e3, "R10": 100e3,
                 "R11": 10e3, "R12": 10e3, "R13": 10e3, "R14": 10e3}
    import warnings

    monte_carlo(pid, pid_parts, tol, f, draws=1000, seed=1)  # warm-up
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        monte_carlo(design.topology, design.rounded, tol, f, draws=1000, seed=1)

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = monte_carlo(design.topology, design.rounded, tol, f, draws=args.draws, seed=1)
    finite = bool(np.all(np.isfinite(result.gain_db)) and np.all(np.isfinite(result.phase_deg))) and not caught
    print(f"   cascade Monte Carlo figures finite: {finite}"
          + ("" if finite else f" ({len(caught)} warning(s): {caught[0].message}) -- the float32 engine overflows"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t_cas = _best(lambda: monte_carlo(design.topology, design.rounded, tol, f, draws=args.draws, seed=1),
                      args.repeat)
    t_pid = _best(lambda: monte_carlo(pid, pid_parts, tol, f, draws=args.draws, seed=1), args.repeat)
    scaled = t_pid * len(fitted) / len(pid_parts)
    ratio = t_cas / scaled
    print(f"2. Monte Carlo {args.draws} draws x 400 freqs: cascade {t_cas:.3f} s, pid-two-input {t_pid:.3f} s "
          f"({len(pid_parts)} parts); raw ratio {t_cas / t_pid:.2f}; per equal part count ({len(fitted)}) "
          f"{ratio:.2f} (target <= 2: {'ok' if ratio <= 2.0 else 'MISSED'})")
    return 0 if t_design <= 2.0 and ratio <= 2.0 else 1


if __name__ == "__main__":
    sys.exit(main())
