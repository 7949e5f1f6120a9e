"""Benchmark: cascade synthesis (issue 14) — ratios and times measured in one run; not a test.

For each of three sixth-order targets of our own (all in one run):

* **Q-40 zero pair**: (s^2 + 0.5 s + 400)(s + 3) / ((s^2 + 4 s + 400)(s + 30)(0.2 s + 1)(s^2 + 3 s + 9))
  — a narrow notch (zeros 0.5 rad/s wide at 20 rad/s) beside a Q = 5 pole pair;
* **moderate**: (s + 2)(s^2 + 6 s + 100) / ((s + 20)(s^2 + 4 s + 64)(s^2 + 10 s + 400)(0.05 s + 1));
* **undamped notch**: the first with its zeros on the axis, (s^2 + 400)(s + 3)/(...): 5 % capacitors
  move the notch past the grid points beside it, so most draws' phase error passes ±135° and the
  tolerance engine unwraps it along frequency (the path that made the first target 7.7x slower
  than a PID before; see docs/performance.md);

1. Cascade design (plan, part search over E24 resistors / E12 capacitors in the default ranges, the
   joined circuit and its notes). Target: <= 2 s (printed as the ratio to 2 s).
2. Its 10,000-draw Monte Carlo tolerance analysis (convert.circuit.tolerance.run_tolerances, 400
   frequencies) against the same analysis of a single-stage PID. No single-stage PID has as many
   parts as the cascade, so the reference is pid-two-input (17 parts, the catalog's largest PID)
   timed in the same run by interleaved pairs and scaled by part count (draw generation and
   polynomial evaluation grow about linearly with the parts); the raw ratio and the share of draws
   whose phase error passes ±135° (counted from float64 responses of the same draws) are notes.
   Target: <= 2x.

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

TARGETS = {
    "Q-40 zero pair": "(s^2 + 0.5*s + 400)*(s + 3)/((s^2 + 4*s + 400)*(s + 30)*(0.2*s + 1)*(s^2 + 3*s + 9))",
    "moderate": "(s + 2)*(s^2 + 6*s + 100)/((s + 20)*(s^2 + 4*s + 64)*(s^2 + 10*s + 400)*(0.05*s + 1))",
    "undamped notch": "(s^2 + 400)*(s + 3)/((s^2 + 4*s + 400)*(s + 30)*(0.2*s + 1)*(s^2 + 3*s + 9))",
}
DRAWS = 10_000
TOLERANCES = {"R": 0.01, "C": 0.05}
PID_PARTS = {
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


def _monte_carlo(topo, parts, f, *, draws=DRAWS, seed=1):
    """The tolerance engine with the 0.5/99.5 % bands and per-draw maxima (what `circuit` runs)."""
    from convert.circuit.tolerance import Comparison, run_tolerances

    ref = topo.response({k: np.asarray([v]) for k, v in parts.items()}, f)[0]
    return run_tolerances(
        topo, parts, TOLERANCES, band_f_hz=f, comparisons=[Comparison("t", ref)], draws=draws, seed=seed, display_f_hz=f
    ).band


def _wrapping_share(topo, parts, f) -> float:
    """Share of the draws whose wrapped phase error passes ±135° somewhere on ``f`` (float64,
    the same draws as the engine's: seed 1), i.e. those the engine unwraps along frequency."""
    from convert.circuit.tolerance import draw_parts

    ref = topo.response({k: np.asarray([v]) for k, v in parts.items()}, f)[0]
    drawn = draw_parts(topo, parts, TOLERANCES, DRAWS, 1)
    with np.errstate(all="ignore"):
        err = np.abs(np.angle(topo.response(drawn, f) / ref[None, :], deg=True))
    return float(np.mean(~(err.max(axis=1) <= 135.0)))


def measure(quick: bool = False) -> list[Figure]:
    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.topologies import get_topology
    from convert.controller import from_expression

    pid = get_topology("pid-two-input")
    out = []
    for label, expr in TARGETS.items():
        target = from_expression(expr)
        options = DesignOptions(resistors="E24", capacitors="E12")
        design = design_circuit(target, options)
        times = repeated(lambda: design_circuit(target, options), 2 if quick else 5, warmup=False)  # noqa: B023
        fitted = design.fitted_parts()
        stages = ", ".join(s.topology.name for s in design.cascade.sections)
        out.append(
            seconds_figure(
                f"cascade: design, sixth order, {label}, E24/E12",
                times,
                2.0,
                f"design_circuit ({stages}: {design.cascade.total_amplifiers} op-amps, {len(fitted)} fitted parts)",
            )
        )
        f = np.logspace(math.log10(design.band_hz[0]), math.log10(design.band_hz[1]), 400)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            result = _monte_carlo(design.topology, design.rounded, f)
        finite = bool(np.all(np.isfinite(result.gain_db)) and np.all(np.isfinite(result.phase_deg))) and not caught

        def cascade(design=design, f=f):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _monte_carlo(design.topology, design.rounded, f)

        p = interleaved(lambda f=f: _monte_carlo(pid, PID_PARTS, f), cascade, 2 if quick else 5)
        scale = len(PID_PARTS) / len(fitted)
        share = _wrapping_share(design.topology, design.rounded, f)
        out.append(
            Figure(
                f"cascade: {DRAWS}-draw Monte Carlo vs a PID per part, {label}",
                p.median * scale,
                2.0,
                spread=(p.spread[0] * scale, p.spread[1] * scale),
                detail=f"cascade {p.subject_s:.3f} s vs pid-two-input {p.reference_s:.3f} s ({len(PID_PARTS)} parts), "
                f"scaled to {len(fitted)} parts (medians of {len(p.ratios)} interleaved pairs, 400 frequencies)",
                notes=(
                    f"raw ratio {p.median:.2f}; draws unwrapped (phase error past ±135°): {100 * share:.1f} %; "
                    f"figures finite: {finite}"
                    + ("" if finite else f" ({len(caught)} warning(s): {caught[0].message})"),
                ),
            )
        )
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
