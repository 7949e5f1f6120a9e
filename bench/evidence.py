"""Benchmark: evidence (issue 13 targets).

Run: /work/venv/bin/python bench/evidence.py [--quick] [--json]

1. Replay of a 10^6-row plant log through an analog form (a filtered PI, exact first-order hold)
   and a digital form (firmware b/a at the log's rate), in the chunks the log reader gives
   (65,536 rows), against ``scipy.signal.lfilter`` of a filter of the same order over the same
   rows (the analog form's first-order-hold equivalent from python-control, the digital form's
   own b/a), measured in the same run: target ratio ≤ 3 for each. Best of 5 each.
2. The whole ``log_evidence`` pass over the same log written as CSV (reading included), in a
   fresh process, with its peak resident memory: target < 200 MB.
3. A sweep fit of a 5-part card (netlist, 41 points) from an invented sweep: target ≤ 2 s (best of 5).
Exit 1 when a target is missed.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

import numpy as np

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from bench.common import ROOT, Figure, figure_from_pairs, interleaved, peak_rss, repeated, run_script, seconds_figure

N = 1_000_000
CHUNK = 65536


def replay_figures(pairs: int) -> list[Figure]:
    """Each form's replay against ``lfilter`` of a filter of the same order over the same rows:
    for the analog form its first-order-hold sampled equivalent (python-control ``sample_system``,
    'foh'), for the digital form its own b/a."""
    import control
    from scipy.signal import lfilter

    from convert.evidence.log import replayer
    from convert.given import read_spec

    t = np.arange(N) * 0.01
    e = np.sin(0.01 * t) + 0.1 * np.random.default_rng(1).standard_normal(N)
    s = control.tf("s")
    foh = control.sample_system(2 * (1 + 1 / (30 * s)) / (0.5 * s + 1), 0.01, method="foh")
    out = []
    for label, spec, (b, a) in (
        (
            "analog 2(1+1/(30s))/(0.5s+1)",
            "2*(1 + 1/(30s))/(0.5s+1)",
            (np.ravel(foh.num[0][0]), np.ravel(foh.den[0][0])),
        ),
        ("digital b/a at 100 Hz", "digital: b=2.0004,-1.9996 a=1,-1 fs=100Hz", ([2.0004, -1.9996], [1.0, -1.0])),
    ):
        given = read_spec(spec, "A")

        def ours():
            eng = replayer(given)  # noqa: B023
            for i in range(0, N, CHUNK):
                eng.run(t[i : i + CHUNK], e[i : i + CHUNK])

        p = interleaved(lambda: lfilter(b, a, e), ours, pairs)  # noqa: B023
        out.append(
            figure_from_pairs(
                f"evidence: replay of 10^6 log rows, {label}",
                p,
                3.0,
                "replay in 65,536-row chunks",
                "lfilter of the same order",
            )
        )
    return out


def whole_pass_memory() -> tuple[float, float]:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "log.csv"
        t = np.arange(N) * 0.01
        e = np.sin(0.01 * t)
        u = 2 * e
        np.savetxt(
            path, np.column_stack([t, e, u]), delimiter=",", fmt="%.9g", header="time (s),error,output", comments=""
        )
        code = (
            f"import sys, time; sys.path.insert(0, {str(ROOT)!r})\n"
            "from convert.evidence.log import log_evidence\nfrom convert.given import read_spec\n"
            "t0 = time.perf_counter()\n"
            f"log_evidence({str(path)!r}, [('A', read_spec('2*(1 + 1/(30s))/(0.5s+1)', 'A')),"
            " ('B', read_spec('digital: b=2.0004,-1.9996 a=1,-1 fs=100Hz', 'B'))])\n"
            "print(time.perf_counter() - t0, file=sys.stderr)\n"
        )
        mb, code_, last = peak_rss([sys.executable, "-c", code])  # through a small launcher (see peak_rss)
        if code_:
            raise RuntimeError(f"log_evidence failed: {last}")
        seconds = float(last)
        return seconds, mb


def sweep_fit_times(runs: int) -> list[float]:
    from convert.evidence.fit import fit_sweep
    from convert.evidence.models import parametric_model
    from convert.given import read_spec

    card = ROOT / "tests" / "netlists" / "filtered_pi_card.cir"
    given = read_spec(str(card), "A")
    model = parametric_model(given)
    f = np.logspace(-2, 2, 41)
    meas = model.response({"R7": 14e3, "RV1": 80e3}, f)
    meas = meas * np.exp(
        0.01
        * (np.random.default_rng(3).standard_normal(f.size) + 1j * np.random.default_rng(4).standard_normal(f.size))
    )
    noise_db = np.full(f.size, 0.087)
    noise_deg = np.full(f.size, 0.57)
    return repeated(lambda: fit_sweep(model, f, meas, noise_db, noise_deg), runs)


def measure(quick: bool = False) -> list[Figure]:
    figures = replay_figures(2 if quick else 5)
    seconds, mb = whole_pass_memory()
    figures.append(
        Figure(
            "evidence: peak memory of a 10^6-row log pass",
            mb / 200.0,
            1.0,
            detail=f"log_evidence over a {N:,}-row CSV, two forms, reading included, fresh process: "
            f"peak resident {mb:.0f} MB as a ratio to the 200 MB limit ({seconds:.2f} s)",
        )
    )
    figures.append(
        seconds_figure(
            "evidence: sweep fit of a 5-part card", sweep_fit_times(2 if quick else 5), 2.0, "fit_sweep, 41 points"
        )
    )
    return figures


if __name__ == "__main__":
    sys.exit(run_script(measure))
