"""Circuit Monte Carlo and part search (issues 5, 9, 15), ratios measured in one run; not a test.

1. The tolerance engine (``convert.circuit.tolerance.run_tolerances``, the call ``loopshift
   circuit`` makes and the core of the report's Monte Carlo, on one thread, its default):
   100,000 draws of the single-amplifier PID at 400 frequencies, with the 0.5 / 99.5 % gain and
   phase bands and each draw's largest gain and phase error, interleaved by pairs with
   (a) a numpy floor: the same rational responses (the same drawn coefficients) evaluated in
       complex64 at s = j2πf by Horner's rule in the engine's chunks, then magnitude and phase —
       target ≤ 1.5×;
   (b) python-control one draw at a time (``control.tf`` + ``frequency_response``) over a sample
       of draws, scaled to 100,000 (stated) — target ≥ 20× faster.
   A note gives the largest difference of any figure or band between float32 and float64 on the
   same draws (the engine's stated bound, FLOAT32_BOUND); over the bound stops the benchmark.
2. The same at 1,000,000 draws in a fresh process under a 4 GB address-space
   cap: peak resident memory (target ≤ 1 GB) and its time against the floor at 1,000,000 draws,
   also in fresh processes (target ≤ 1.5×; three interleaved pairs, one with --quick: each side takes
   tens of seconds).
3. Part search (``design_circuit``) with E96 resistors and E12 capacitors over the default ranges
   for three targets: ≤ 0.5 s each, a fixed-seconds target (the figure is the median over 0.5 s).

    python bench/circuit.py [--quick] [--json]      (exit 1 when a target is missed)
"""

from __future__ import annotations

import os
import statistics
import sys
from dataclasses import replace

import numpy as np

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from bench.common import Figure, figure_from_pairs, interleaved, python, repeated, run_script, seconds_figure

FREQS = 400
TOL = {"R": 0.01, "C": 0.05}
PARTS = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}


def setup(draws: int):
    from convert.circuit.tolerance import draw_parts
    from convert.circuit.topologies import get_topology

    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, FREQS)
    drawn = draw_parts(topo, PARTS, TOL, draws, 1)
    num, den = topo.coefficients(drawn)
    return topo, f, drawn, num, den


def engine(topo, f, draws: int, dtype=np.float32):
    """The tolerance engine as ``loopshift circuit`` runs it: bands and per-draw maxima."""
    from convert.circuit.tolerance import Comparison, run_tolerances

    ref = topo.response({k: np.array([v]) for k, v in PARTS.items()}, f)[0]
    return run_tolerances(
        topo,
        PARTS,
        TOL,
        band_f_hz=f,
        comparisons=[Comparison("t", ref)],
        draws=draws,
        seed=1,
        display_f_hz=f,
        parameters=False,
        dtype=dtype,
        workers=1,
    )


def numpy_floor(num, den, f, draws: int) -> None:
    """Evaluate the rational responses in complex64, chunk by chunk, and take magnitude and phase."""
    from convert.circuit.tolerance import DEFAULT_CHUNK as CHUNK

    s = (2j * np.pi * f).astype(np.complex64)[:, None]
    num = [np.broadcast_to(np.asarray(c, dtype=np.float32), (draws,)) for c in num]
    den = [np.broadcast_to(np.asarray(c, dtype=np.float32), (draws,)) for c in den]
    for d0 in range(0, draws, CHUNK):
        sl = slice(d0, min(draws, d0 + CHUNK))
        h = np.zeros((f.size, sl.stop - sl.start), np.complex64)
        for c in num:
            h *= s
            h += c[sl]
        m = np.zeros_like(h)
        for c in den:
            m *= s
            m += c[sl]
        h /= m
        np.abs(h)
        np.angle(h)


CHILD = r"""
import sys, time
sys.path.insert(0, {root!r})
from bench.circuit import setup, engine, numpy_floor
topo, f, drawn, num, den = setup({prep_draws})  # the engine draws its own parts: setup(1) for it
t0 = time.perf_counter()
{call}
print(time.perf_counter() - t0, file=sys.stderr)
"""


def child(draws: int, call: str) -> tuple[float, float, str]:
    """(seconds, peak MB, error) of ``call`` in a fresh process capped at 4 GB of address space."""
    from bench.common import ROOT, peak_rss

    prep = 1 if call.startswith("engine") else draws
    mb, code, last = peak_rss(python("-c", CHILD.format(root=str(ROOT), prep_draws=prep, call=call)))
    if code:
        return float("nan"), mb, last or f"exit code {code}"
    return float(last), mb, ""


def measure(quick: bool = False) -> list[Figure]:
    import control

    draws = 100_000
    topo, f, drawn, num, den = setup(draws)
    pairs = 2 if quick else 5
    out = []
    p = interleaved(lambda: numpy_floor(num, den, f, draws), lambda: engine(topo, f, draws), pairs)
    from convert.circuit.tolerance import FLOAT32_BOUND

    r32, r64 = engine(topo, f, draws), engine(topo, f, draws, np.float64)
    err = max(
        abs(r32.figures["t"].max_gain_error_db - r64.figures["t"].max_gain_error_db),
        abs(r32.figures["t"].max_phase_error_deg - r64.figures["t"].max_phase_error_deg),
        float(np.max(np.abs(r32.band.gain_db - r64.band.gain_db))),
        float(np.max(np.abs(r32.band.phase_deg - r64.band.phase_deg))),
    )
    if not err <= FLOAT32_BOUND:
        raise RuntimeError(f"circuit: float32 differs from float64 by {err:.2g}, over the bound {FLOAT32_BOUND:g}")
    out.append(
        replace(
            figure_from_pairs(
                f"tolerance engine, {draws:,} draws x {FREQS} freqs vs numpy floor",
                p,
                1.5,
                "run_tolerances (bands + per-draw maxima, one thread)",
                "complex64 evaluation + magnitude and phase",
            ),
            notes=(
                f"float32 vs float64 on the same draws: largest difference of any figure or band {err:.1e} "
                f"(bound {FLOAT32_BOUND:g} dB / deg)",
            ),
        )
    )

    sample = 200 if quick else 1000
    w = 2 * np.pi * f

    def loop():
        for i in range(sample):
            c = topo.controller_from_parts({k: float(v[i]) for k, v in drawn.items()})
            resp = control.tf(list(c.num), list(c.den)).frequency_response(w)
            np.squeeze(resp.magnitude), np.squeeze(resp.phase)

    q = interleaved(loop, lambda: engine(topo, f, draws), 1 if quick else 3, warmup=False)
    scale = draws / sample
    speedups = [scale / r for r in q.ratios]
    out.append(
        Figure(
            f"tolerance engine, {draws:,} draws vs a python-control loop",
            statistics.median(speedups),
            20.0,
            at_least=True,
            spread=(min(speedups), max(speedups)),
            detail=f"speed-up: python-control loop over {sample} draws {q.reference_s:.2f} s scaled to {draws:,} "
            f"({q.reference_s * scale:.0f} s) / run_tolerances {q.subject_s:.2f} s "
            f"(medians of {len(q.ratios)} interleaved pairs)",
        )
    )

    big = 1_000_000  # a million draws take tens of seconds with the chunked engine: in --quick too
    # fresh processes of tens of seconds each, so few pairs: one with --quick, three otherwise
    runs = [
        (child(big, f"engine(topo, f, {big})"), child(big, f"numpy_floor(num, den, f, {big})"))
        for _ in range(1 if quick else 3)
    ]
    (t_eng, mb, err), (t_floor, _, err_f) = runs[0]
    big_ratios = [e[0] / fl[0] for e, fl in runs if not e[2] and not fl[2]]
    if big_ratios:
        t_eng = statistics.median(e[0] for e, _ in runs)
        t_floor = statistics.median(fl[0] for _, fl in runs)
        mb = max(e[1] for e, _ in runs)
    if err:
        out.append(
            Figure(
                f"tolerance engine, {big:,} draws: peak memory",
                4096 / 1024,
                1.0,
                detail=f"did not finish under the 4 GB address-space cap ({err}); shown as at least "
                "the cap over the 1 GB limit",
            )
        )
    else:
        out.append(
            Figure(
                f"tolerance engine, {big:,} draws: peak memory",
                mb / 1024,
                1.0,
                detail=f"peak resident {mb:.0f} MB (fresh process) as a ratio to the 1 GB limit",
            )
        )
        out.append(
            Figure(
                f"tolerance engine, {big:,} draws vs numpy floor",
                statistics.median(big_ratios) if big_ratios else t_eng / t_floor,
                1.5,
                detail=f"run_tolerances {t_eng:.1f} s vs the floor {t_floor:.1f} s, medians of {len(runs)} "
                f"interleaved pair(s) of fresh processes{'' if not err_f else f' (floor failed: {err_f})'}",
                spread=(min(big_ratios), max(big_ratios)) if len(big_ratios) > 1 else None,
            )
        )

    from convert.circuit.design import DesignOptions, design_circuit
    from convert.controller import from_expression

    opts = DesignOptions(resistors="E96", capacitors="E12")
    for label, expr in (
        ("pid-single-amp", "2*(1+1/(3*s))*(1+0.5*s)/(1+0.05*s)"),
        ("pid-parallel", "(s^2+0.2*s+1)/(s*(0.01*s+1))"),
        ("pi-rc-feedback", "2*(1+1/(0.3*s))"),
    ):
        target = from_expression(expr)
        times = repeated(lambda target=target: design_circuit(target, opts), 2 if quick else 5)
        out.append(seconds_figure(f"part search E96/E12, {label}", times, 0.5, "design_circuit"))
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
