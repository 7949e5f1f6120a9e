"""The zero-input searches (limit cycles, integrator drift) run the fixed-point recursions in
place over many trials; they must give, trial by trial, the words of the bit-true models that
tests/test_firmware_code.py and tests/test_firmware_cmsis.py check against gcc-compiled C and
CMSIS-DSP."""

from __future__ import annotations

import numpy as np

from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.fixedpoint import realize
from convert.digital.quantized import zero_input_words
from convert.digital.structures import build_layout
from convert.digital.wordformats import FORMATS

EXPRESSIONS = (
    ("40 * (s/30 + 1)/(s/300 + 1) * (s/3 + 1)/(s/0.3 + 1)", 5000.0),
    ("5*(s^2+2*0.3*20*s+400)/((s+2)*(s^2+2*0.5*60*s+3600))", 2000.0),
    ("2*(1+1/(0.5*s))*(0.1s+1)/(0.01s+1)", 200.0),
)


def _realized(expr, fs, structure, word):
    real = discretize(from_expression(expr), fs, "tustin")
    lay = build_layout(structure, real.roots)
    return realize(lay, FORMATS[word], input_range=3.0, output_level=10.0)


def test_direct_form_one_zero_input_matches_the_step_model():
    """zero_input_words (all trials at once, in place) equals FixedModel.step_int with zero
    input from the same output history, every sample of every trial, Q15 and Q31."""
    rng = np.random.default_rng(5)
    for expr, fs in EXPRESSIONS:
        for word in ("q15", "q31"):
            rz = _realized(expr, fs, "sections", word)
            model = rz.model()
            w = rz.word
            for i, s in enumerate(rz.sections):
                a = list(s.a_int[1:])
                if not a:
                    continue
                y = rng.integers(w.word_min // 2, w.word_max // 2, size=(len(a), 6), dtype=np.int64)
                outs = zero_input_words(a, s.shift, 1 << (s.shift - 1), y, 300, 300, w.word_min, w.word_max)
                for t in range(6):
                    model.reset()
                    xh, _ = model.state[i]
                    model.state[i] = (xh, [int(v) for v in y[:, t]])
                    want = [_section_step(model, i) for _ in range(300)]  # this section alone, zero input
                    assert outs[0, t] == y[0, t]
                    assert outs[1:, t].tolist() == want


def _section_step(model, i):
    """One zero-input sample of section i of a FixedModel (its own step_int arithmetic)."""
    secs, state = model.secs, model.state
    model.secs, model.state = [secs[i]], [state[i]]
    try:
        return model.step_int(0)
    finally:
        state[i] = model.state[0]
        model.secs, model.state = secs, state


def test_state_form_zero_input_matches_step_section():
    """statewords._zero_input_section equals step_section on Python ints (the model's own
    step, checked against C elsewhere) for direct2t and delta sections in Q15 and Q31: the
    largest |y| over the window for each trial."""
    from convert.digital.statewords import _zero_input_section, step_section

    rng = np.random.default_rng(9)
    for expr, fs in EXPRESSIONS[:2]:
        for structure in ("direct2t", "delta"):
            for word in ("q15", "q31"):
                rz = _realized(expr, fs, structure, word)
                w = rz.word
                for s in rz.sections:
                    m = len(s.p_int)
                    if m == 0:
                        continue
                    sec = (
                        s.shift,
                        list(s.b_int),
                        [0] + list(s.a_int[1:]),
                        list(s.p_int),
                        structure == "delta",
                        list(s.b_shifts),
                    )
                    st = [rng.integers(w.word_min // 2, w.word_max // 2, size=5, dtype=np.int64) for _ in range(m)]
                    got = _zero_input_section(
                        sec, [v.copy() for v in st], 250, 100, False, np.int64(w.word_min), np.int64(w.word_max)
                    )

                    def clip(v, lo=w.word_min, hi=w.word_max):
                        return lo if v < lo else hi if v > hi else v

                    for t in range(5):
                        s_t = [int(v[t]) for v in st]
                        ys = [step_section(sec, 0, s_t, clip) for _ in range(250)]
                        assert got[t] == max(abs(v) for v in ys[150:])
