"""Generated C and Structured Text against the Python model of the same structure and word
format: the C is compiled with gcc -std=c99 -Wall -Wextra -Werror -pedantic and run on test
vectors (steps, ramps, noise, saturation, a switch from manual to automatic)."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest

from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.codegen import emit
from convert.digital.fixedpoint import realize
from convert.digital.structures import STRUCTURES, build_layout
from convert.digital.wordformats import FORMATS

GCC = shutil.which("gcc")
needs_gcc = pytest.mark.skipif(GCC is None, reason="gcc not installed (.ci/run installs it)")

PI_LEADLAG = "2*(1+1/(0.5*s))*(0.2s+1)/(0.02s+1)*100/((s/30)^2+0.8*s/30+1)"
STABLE = "(0.2s+1)/(0.02s+1)*100/((s/30)^2+0.8*s/30+1)/(s/3+1)"

HARNESS = r"""
#include <stdio.h>
#include "{name}.h"
int main(void)
{{
    {name}_state st;
    char cmd;
    {name}_reset(&st);
    while (scanf(" %c", &cmd) == 1) {{
        if (cmd == 'r') {{ {name}_reset(&st); continue; }}
        {{
            {read}
            if (cmd == 'o') {{ {set_output} continue; }}
            {{ {t} y = {name}_step(&st, ({t})v); {write} }}
        }}
    }}
    return 0;
}}
"""


def _vectors(fixed: bool, full: int, rng) -> list[tuple[str, float]]:
    """Steps, a ramp, noise, a long saturating push, a reset and a manual-to-auto switch."""
    n = 400
    amp = full * 0.9 if fixed else 0.5
    seq = [("x", amp * 0.3)] * n + [("x", -amp * 0.6)] * n
    seq += [("x", amp * (k / n - 0.5)) for k in range(n)]
    seq += [("x", amp * 0.4 * v) for v in rng.normal(size=n).clip(-2.4, 2.4)]
    seq += [("x", amp if fixed else 50.0)] * (2 * n)  # drive into saturation (fixed) / large values
    seq += [("r", 0.0)] + [("x", -amp * 0.2)] * 50
    seq += [("o", 0.25 * full if fixed else 3.0)] + [("x", amp * 0.05)] * n
    if fixed:
        return [(c, float(round(v))) for c, v in seq]
    return seq


def _run_c(tmp_path, real, name, seq) -> list:
    files = emit(real, name, "c", source="test", method="tustin")
    for fname, text in files.items():
        (tmp_path / fname).write_text(text)
    w = real.word
    t = w.c_type
    integ = f"{name}_set_output" in files[f"{name}.h"]
    if w.is_fixed:
        read = "long v = 0; if (cmd != 'r' && scanf(\"%ld\", &v) != 1) return 1;"
        write = 'printf("%ld\\n", (long)y);'
    else:
        read = "double v = 0; if (cmd != 'r' && scanf(\"%la\", &v) != 1) return 1;"
        write = 'printf("%a\\n", (double)y);'
    set_output = f"{name}_set_output(&st, ({t})v);" if integ else "(void)v;"
    from tests.firmware_refs import compile_c

    main = HARNESS.format(name=name, t=t, read=read, write=write, set_output=set_output)
    exe = compile_c(tmp_path, {}, name, main)
    lines = []
    for c, v in seq:
        if c == "r":
            lines.append("r")
        elif w.is_fixed:
            lines.append(f"{c} {int(v)}")
        else:
            lines.append(f"{c} {float(np.float32(v) if w.bits == 32 else v).hex()}")
    out = subprocess.run([str(exe)], input="\n".join(lines) + "\n", capture_output=True, text=True, check=True)
    vals = out.stdout.split()
    return [int(x) for x in vals] if w.is_fixed else [float.fromhex(x) for x in vals]


def _run_model(real, seq) -> list:
    m = real.model()
    out = []
    for c, v in seq:
        if c == "r":
            m.reset()
        elif c == "o":
            if real.word.is_fixed:
                m.set_level_word(int(v))
            else:
                m.set_level(float(np.float32(v)) if real.word.bits == 32 else v)
        elif real.word.is_fixed:
            out.append(m.step_int(int(v)))
        else:
            out.append(m.step(float(np.float32(v)) if real.word.bits == 32 else v))
    return out


CASES = [
    (s, f)
    for s in STRUCTURES
    for f in ("float64", "float32", "q15", "q31")
    if not (f.startswith("q") and s not in ("direct1", "sections"))
]


@needs_gcc
@pytest.mark.parametrize("structure,fmt", CASES)
def test_c_matches_model(tmp_path, structure, fmt):
    """Fixed point bit-exact; float32 bit-exact (ISO C float arithmetic, no contraction: the
    float32 rounding bound is then zero); double within 1e-12 relative of the model."""
    real_d = discretize(from_expression(PI_LEADLAG), 1000, "tustin")
    lay = build_layout(structure, real_d.roots, real_d.b, real_d.a)
    real = realize(lay, FORMATS[fmt], input_range=1.0, output_level=50.0)
    full = 1 << (real.word.bits - 1) if real.word.is_fixed else 0
    seq = _vectors(real.word.is_fixed, full - 1, np.random.default_rng(7))
    c_out = _run_c(tmp_path, real, f"ctl_{structure}_{fmt}", seq)
    model = _run_model(real, seq)
    assert len(c_out) == len(model) > 2000
    if fmt in ("q15", "q31", "float32"):
        assert c_out == model
    else:
        a, b = np.array(c_out), np.array(model)
        assert np.all(np.abs(a - b) <= 1e-12 * np.maximum(np.abs(b), 1e-300) + 1e-300)
    if real.word.is_fixed:  # the saturation vectors did reach the word's end
        assert max(abs(v) for v in model) >= full - 1


@needs_gcc
@pytest.mark.parametrize("structure", list(STRUCTURES))
def test_c_double_matches_scipy(tmp_path, structure):
    """Reference library: scipy.signal.lfilter (direct forms, on b/a) and sosfilt (sections, on
    the z-domain sections) fed the same vectors; the compiled double code agrees to 1e-9 of the
    peak (a stable controller: operation orders differ, rounding does not accumulate)."""
    from tests.firmware_refs import scipy_filter

    real_d = discretize(from_expression(STABLE), 500, "tustin")
    lay = build_layout(structure, real_d.roots, real_d.b, real_d.a)
    real = realize(lay, FORMATS["float64"])
    x = np.concatenate([np.full(300, 0.3), np.linspace(-1, 1, 300), np.random.default_rng(2).normal(size=600)])
    c_out = np.array(_run_c(tmp_path, real, "ref", [("x", v) for v in x]))
    ref = scipy_filter(lay, x)
    assert np.max(np.abs(c_out - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_bad_name_is_refused():
    from convert.errors import InputError

    real_d = discretize(from_expression(STABLE), 500, "tustin")
    real = realize(build_layout("sections", real_d.roots), FORMATS["float64"])
    with pytest.raises(InputError, match="identifier"):
        emit(real, "3bad-name", "c")


# ----------------------------------------------------------------------------- Structured Text
@pytest.mark.parametrize("structure,fmt", [(s, f) for s in STRUCTURES for f in ("float64", "float32")])
def test_structured_text_runs_like_the_model(structure, fmt):
    """The emitted function block is read by a parser for the subset (tests/st_subset.py) and its
    statements executed in Python with IEC 61131-3 REAL as IEEE single and LREAL as double, on
    the same vectors as the C test: bit-exact with the model, tracking (bumpless) included."""
    from tests.st_subset import FunctionBlock

    real_d = discretize(from_expression(PI_LEADLAG), 1000, "tustin")
    real = realize(build_layout(structure, real_d.roots, real_d.b, real_d.a), FORMATS[fmt], output_level=50.0)
    (text,) = emit(real, "ctl", "st", source="test", method="tustin").values()
    fb = FunctionBlock(text)
    assert fb.name == "ctl" and fb.real == ("REAL" if fmt == "float32" else "LREAL")
    env = fb.instance()
    cast = np.float32 if fmt == "float32" else float
    model = real.model()
    got, want = [], []
    for c, v in _vectors(False, 0, np.random.default_rng(7)):
        if c == "r":
            fb.call(env, reset=True, track=False, x=0.0)  # a reset call also steps once, on x = 0 from rest
            model.reset()
            model.step(0.0)
            continue
        if c == "o":
            fb.call(env, track=True, track_value=cast(v), x=0.0)
            model.set_level(float(cast(v)))
            model.step(0.0)
            continue
        got.append(float(fb.call(env, x=cast(v), reset=False, track=False)["y"]))
        want.append(model.step(float(cast(v))))
    assert got == want


@pytest.mark.parametrize(
    "bad",
    [
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR y := x; END_FUNCTION_BLOCK",  # y undeclared
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : REAL; END_VAR y := x / 2.0; END_FUNCTION_BLOCK",
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : LREAL; END_VAR y := x; END_FUNCTION_BLOCK",
        "FUNCTION_BLOCK f VAR_INPUT x : REAL; END_VAR VAR_OUTPUT y : REAL; END_VAR x := 1.0; END_FUNCTION_BLOCK",
    ],
)
def test_structured_text_reader_refuses_outside_the_subset(bad):
    """The subset reader is strict (so the emitted text passing it means something)."""
    from tests.st_subset import FunctionBlock, STError

    with pytest.raises(STError):
        FunctionBlock(bad)


def test_structured_text_refuses_fixed_point():
    from convert.errors import InputError

    real_d = discretize(from_expression(STABLE), 500, "tustin")
    real = realize(build_layout("sections", real_d.roots), FORMATS["q15"], input_range=1.0)
    with pytest.raises(InputError, match="Structured Text"):
        emit(real, "ctl", "st")
