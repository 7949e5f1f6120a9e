"""Benchmark: firmware structures and word formats, measured in one run.

1. The fixed-point bit-true model (Q15 and Q31, three cascaded sections of a PID with a lead
   and a roll-off) on 1e5 samples. Target: <= 0.2 s each. Reference printed beside it:
   scipy.signal.sosfilt on the same samples in float64 (ratio = ours / sosfilt).
2. The analysis of one controller in every structure x word format (16 combinations), plus
   the code of every combination the tool offers. Target: <= 0.5 s in-process (imports done).

Run: /work/venv/bin/python bench/firmware.py   (prints figures and ratios; exit 1 when a target is missed)
"""

from __future__ import annotations

import sys
import time

import numpy as np

EXPR = "2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))*(0.1*s+1)/(0.01*s+1)/((s/300)^2+s/300+1)"
FS = 2000.0


def best_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> int:
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
    ok = True
    sos = np.array([np.concatenate([np.pad(s.b, (0, 3 - len(s.b))), np.pad(s.a, (0, 3 - len(s.a)))])
                    for s in layout.sections])
    ref = best_of(lambda: sosfilt(sos, x), 5)

    def plain_loop():  # machine speed: 3e5 Python multiply-adds (one per section and sample)
        acc = 0
        for i in range(300_000):
            acc += i * 3

    base = best_of(plain_loop, 3)
    print(f"reference: 3e5 plain Python multiply-adds {base:.3f} s (the same machine, the same load)")
    for fmt in ("q15", "q31"):
        r = realize(layout, FORMATS[fmt], input_range=1.0, output_level=20.0)
        m = r.model()
        words = np.array([m.to_word(v) for v in x])

        def run(m=m, words=words):
            m.reset()
            m.run_int(words)

        t = best_of(run, 3)
        ok &= t <= 0.2
        print(f"{fmt} model, {len(layout.sections)} sections, 1e5 samples: {t:.3f} s (target 0.2 s); "
              f"{t / base:.2f}x the plain loop; sosfilt float64 {ref * 1e3:.2f} ms")
    band = log_grid(0.05, FS / 2 * 0.9, 100)

    def everything():
        from convert.digital.codegen import emit_c, emit_st

        res = analyze_all(real.roots, band, b=real.b, a=real.a, input_range=1.0, output_level=20.0)
        for a in res:
            if a.realized is not None:
                emit_c(a.realized, "ctl", source="bench", method="tustin")
                if not a.realized.word.is_fixed:
                    emit_st(a.realized, "ctl", source="bench", method="tustin")

    everything()
    t = best_of(everything, 3)
    ok &= t <= 0.5
    print(f"analysis and code, every structure x word format: {t:.3f} s (target 0.5 s)")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
