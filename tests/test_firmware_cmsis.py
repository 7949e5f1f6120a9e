"""The fixed-point model of cascaded direct-form-I sections against CMSIS-DSP (the `cmsisdsp`
Python package: arm_biquad_cascade_df1_q15 / _q31, the biquads firmware on Arm
microcontrollers runs). CMSIS truncates after the shift, so the model runs with a word format
whose rounding is "floor", and without the extra numerator bits CMSIS does not have."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.fixedpoint import StoredSection, realize
from convert.digital.structures import build_layout
from convert.digital.wordformats import FORMATS

dsp = pytest.importorskip("cmsisdsp", reason="cmsisdsp not installed (pip install cmsisdsp; in the test extra)")

CONTROLLER = "(0.2s+1)/(0.02s+1)*100/((s/30)^2+0.8*s/30+1)/(s/3+1)"


def _cmsis_ready(fmt: str):
    """A floor-rounding realization of our controller, numerators at the feedback's scale."""
    real_d = discretize(from_expression(CONTROLLER), 1000, "tustin")
    lay = build_layout("sections", real_d.roots)
    word = dataclasses.replace(FORMATS[fmt], rounding="floor")
    real = realize(lay, word, input_range=1.0)
    secs = []
    for s in real.sections:
        b = tuple(round(c * 2**s.shift) for c in s.b)  # numerator re-quantized at the feedback's scale
        secs.append(StoredSection(tuple(v / 2**s.shift for v in b), s.a, b, s.a_int, s.shift, 0))
    return dataclasses.replace(real, sections=tuple(secs))


def _coefs(real, fmt):
    rows = []
    for s in real.sections:
        b = list(s.b_int) + [0] * (3 - len(s.b_int))
        a = [-v for v in s.a_int[1:]] + [0] * (3 - len(s.a_int))
        rows += [b[0], 0, b[1], b[2], a[0], a[1]] if fmt == "q15" else [b[0], b[1], b[2], a[0], a[1]]
    return rows


@pytest.mark.parametrize("fmt", ["q15", "q31"])
def test_fixed_model_matches_cmsis_dsp(fmt):
    real = _cmsis_ready(fmt)
    shifts = {s.shift for s in real.sections}
    w = real.word.bits
    if len(shifts) != 1:
        pytest.skip("CMSIS takes one post-shift for the whole cascade")
    post = w - 1 - shifts.pop()
    x = (np.random.default_rng(3).normal(size=3000) * 0.2 * 2 ** (w - 1)).astype(np.int16 if fmt == "q15" else np.int32)
    n = len(real.sections)
    if fmt == "q15":
        inst = dsp.arm_biquad_casd_df1_inst_q15()
        dsp.arm_biquad_cascade_df1_init_q15(
            inst, n, np.array(_coefs(real, fmt), dtype=np.int16), np.zeros(4 * n, dtype=np.int16), post
        )
        ref = dsp.arm_biquad_cascade_df1_q15(inst, x)
    else:
        inst = dsp.arm_biquad_casd_df1_inst_q31()
        dsp.arm_biquad_cascade_df1_init_q31(
            inst, n, np.array(_coefs(real, fmt), dtype=np.int32), np.zeros(4 * n, dtype=np.int32), post
        )
        ref = dsp.arm_biquad_cascade_df1_q31(inst, x)
    got = real.model().run_int(x.astype(np.int64))
    assert np.max(np.abs(ref)) > 2 ** (w - 8)  # a real signal went through
    assert list(np.asarray(ref, dtype=np.int64)) == list(got)
