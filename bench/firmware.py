"""Benchmark: firmware structures and word formats, measured in one run.

1. The fixed-point bit-true model (Q15 and Q31, three cascaded sections of a PID with a lead
   and a roll-off) on 1e5 samples. Target: <= 0.2 s each, a fixed-seconds target (the figure is
   the median over 0.2 s). Notes beside it, by interleaved pairs in the same run: the ratio to
   scipy.signal.sosfilt on the same samples in float64 and to 3e5 plain Python multiply-adds.
2. The analysis of one controller in every structure x word format (16 combinations), plus
   the code of every combination the tool offers. Target: <= 0.5 s in-process (imports done),
   the figure is the median over 0.5 s.

Run: /work/venv/bin/python bench/firmware.py [--quick] [--json]   (exit 1 when a target is missed)
"""

from __future__ import annotations

import sys

import numpy as np

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, interleaved, repeated, run_script, seconds_figure

EXPR = "2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))*(0.1*s+1)/(0.01*s+1)/((s/300)^2+s/300+1)"
FS = 2000.0


def measure(quick: bool = False) -> list[Figure]:
    from scipy.signal import sosfilt

    from convert.compare.frequency import log_grid
    from convert.controller import from_expression
    from convert.digital import discretize
    from convert.digital.fixedpoint import realize
    from convert.digital.quantized import analyze_all
    from convert.digital.structures import build_layout
    from convert.digital.wordformats import FORMATS

    real = discretize(from_expression(EXPR), FS, "tustin")
    layout = build_layout("sections", real.roots)
    x = 0.3 * np.sin(np.arange(100_000) * 0.003) + 0.01 * np.random.default_rng(1).normal(size=100_000)
    out = []
    sos = np.array(
        [np.concatenate([np.pad(s.b, (0, 3 - len(s.b))), np.pad(s.a, (0, 3 - len(s.a)))]) for s in layout.sections]
    )

    def plain_loop():  # machine speed: 3e5 Python multiply-adds (one per section and sample)
        acc = 0
        for i in range(300_000):
            acc += i * 3

    for fmt in ("q15", "q31"):
        r = realize(layout, FORMATS[fmt], input_range=1.0, output_level=20.0)
        m = r.model()
        words = np.array([m.to_word(v) for v in x])

        def run(m=m, words=words):
            m.reset()
            m.run_int(words)

        times = repeated(run, 2 if quick else 5)
        vs_sos = interleaved(lambda: sosfilt(sos, x), run, 2 if quick else 5, warmup=False)
        vs_loop = interleaved(plain_loop, run, 1 if quick else 3, warmup=False)
        out.append(
            seconds_figure(
                f"firmware: {fmt} bit-true model, 1e5 samples",
                times,
                0.2,
                f"{len(layout.sections)} sections, run_int",
                notes=(
                    f"{vs_sos.median:.1f}x scipy sosfilt in float64 ({vs_sos.reference_s * 1e3:.2f} ms); "
                    f"{vs_loop.median:.2f}x 3e5 plain Python multiply-adds ({vs_loop.reference_s * 1e3:.0f} ms) "
                    "(interleaved pairs)",
                ),
            )
        )
    band = log_grid(0.05, FS / 2 * 0.9, 100)

    def everything():
        from convert.digital.codegen import emit_c, emit_st

        res = analyze_all(real.roots, band, b=real.b, a=real.a, input_range=1.0, output_level=20.0)
        for a in res:
            if a.realized is not None:
                emit_c(a.realized, "ctl", source="bench", method="tustin")
                if not a.realized.word.is_fixed:
                    emit_st(a.realized, "ctl", source="bench", method="tustin")

    out.append(
        seconds_figure(
            "firmware: analysis and code, every structure x word format",
            repeated(everything, 2 if quick else 5),
            0.5,
            "analyze_all + emit_c/emit_st",
        )
    )
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
