"""Benchmark: cascade synthesis (issue 14) — ratios and times measured in one run; not a test.

1. Cascade design (plan, part search over E24 resistors / E12 capacitors in the default ranges, the
   joined circuit and its notes) of a sixth-order target of our own:
       (s^2 + 0.5 s + 400)(s + 3) / ((s^2 + 4 s + 400)(s + 30)(0.2 s + 1)(s^2 + 3 s + 9))
   (--moderate: (s + 2)(s^2 + 6 s + 100) / ((s + 20)(s^2 + 4 s + 64)(s^2 + 10 s + 400)(0.05 s + 1)),
   no zero pair of Q 40 next to a pole pair). Target: <= 2 s (printed as the ratio to 2 s).
2. Its 10,000-draw Monte Carlo tolerance analysis (convert.circuit.tolerance.run_tolerances, 400
   frequencies) against the same analysis of a single-stage PID. No single-stage PID has as many
   parts as the cascade, so the reference is pid-two-input (17 parts, the catalog's largest PID)
   timed in the same run by interleaved pairs and scaled by part count (draw generation and
   polynomial evaluation grow about linearly with the parts); the raw ratio is a note. Target: <= 2x. Where a part set's
   phase moves 90 degrees or more from nominal (the first target's Q = 40 zero pair, 0.5 rad/s wide,
   does with 5 % capacitors) the engine (convert.circuit.tolerance) takes its exact complex path,
   which is several times slower.

Run: /work/venv/bin/python bench/cascade.py [--quick] [--json]   (exit 1 when a target is missed)
"""

from __future__ import annotations

import math
import sys
import warnings

import numpy as np

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, interleaved, repeated, run_script, seconds_figure

TARGET = "(s^2 + 0.5*s + 400)*(s + 3)/((s^2 + 4*s + 400)*(s + 30)*(0.2*s + 1)*(s^2 + 3*s + 9))"
TARGET_MODERATE = "(s + 2)*(s^2 + 6*s + 100)/((s + 20)*(s^2 + 4*s + 64)*(s^2 + 10*s + 400)*(0.05*s + 1))"


DRAWS = 10_000


def measure(quick: bool = False, moderate: bool = False) -> list[Figure]:
    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.tolerance import Comparison, run_tolerances

    def monte_carlo(topo, parts, tol, f, *, draws, seed):
        """The tolerance engine with the 0.5/99.5 % bands and per-draw maxima (what `circuit` runs)."""
        ref = topo.response({k: np.asarray([v]) for k, v in parts.items()}, f)[0]
        return run_tolerances(
            topo, parts, tol, band_f_hz=f, comparisons=[Comparison("t", ref)], draws=draws, seed=seed, display_f_hz=f
        ).band

    from convert.circuit.topologies import get_topology
    from convert.controller import from_expression

    target = from_expression(TARGET_MODERATE if moderate else TARGET)
    options = DesignOptions(resistors="E24", capacitors="E12")
    design = design_circuit(target, options)
    times = repeated(lambda: design_circuit(target, options), 2 if quick else 5, warmup=False)
    fitted = design.fitted_parts()
    out = [
        seconds_figure(
            "cascade: design of a sixth-order target, E24/E12",
            times,
            2.0,
            f"design_circuit ({len(design.cascade.sections)} stages, {design.cascade.total_amplifiers} op-amps, "
            f"{len(fitted)} fitted parts)",
        )
    ]

    tol = {"R": 0.01, "C": 0.05}
    f = np.logspace(math.log10(design.band_hz[0]), math.log10(design.band_hz[1]), 400)
    pid = get_topology("pid-two-input")
    pid_parts = {
        "R1": 10e3,
        "R2": 10e3,
        "R3": 22e3,
        "R4": 10e3,
        "R5": 15e3,
        "R6": 220e3,
        "R7": 220e3,
        "C1": 1e-6,
        "C2": 220e-9,
        "R8": 6.8e3,
        "C3": 470e-9,
        "R9": 3.3e3,
        "R10": 100e3,
        "R11": 10e3,
        "R12": 10e3,
        "R13": 10e3,
        "R14": 10e3,
    }

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = monte_carlo(design.topology, design.rounded, tol, f, draws=DRAWS, seed=1)
    finite = bool(np.all(np.isfinite(result.gain_db)) and np.all(np.isfinite(result.phase_deg))) and not caught

    def cascade():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            monte_carlo(design.topology, design.rounded, tol, f, draws=DRAWS, seed=1)

    p = interleaved(lambda: monte_carlo(pid, pid_parts, tol, f, draws=DRAWS, seed=1), cascade, 2 if quick else 5)
    scale = len(pid_parts) / len(fitted)
    out.append(
        Figure(
            f"cascade: {DRAWS}-draw Monte Carlo vs a PID per part",
            p.median * scale,
            2.0,
            spread=(p.spread[0] * scale, p.spread[1] * scale),
            detail=f"cascade {p.subject_s:.3f} s vs pid-two-input {p.reference_s:.3f} s ({len(pid_parts)} parts), "
            f"scaled to {len(fitted)} parts (medians of {len(p.ratios)} interleaved pairs, 400 frequencies)",
            notes=(
                f"raw ratio {p.median:.2f}; figures finite: {finite}"
                + ("" if finite else f" ({len(caught)} warning(s): {caught[0].message})"),
            ),
        )
    )
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
