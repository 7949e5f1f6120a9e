"""The closed-loop run with a firmware model compiled into one function (the model's kernel()
source inside the loop: float models, and Q15/Q31 direct form I) against the same loop calling
the model's step each sample: every output float must be the same bit for bit (the step is the
model the C tests check). Q15/Q31 direct2t and delta have no kernel and run stepwise in both."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.loop import simulate_loop
from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.fixedpoint import realize
from convert.digital.structures import build_layout
from convert.digital.wordformats import FORMATS


class _Stepwise:
    """A model seen only through step/unguarded_step (no kernel): the sample-by-sample loop."""

    def __init__(self, model):
        self.model = model
        self.step = model.step
        self.unguarded_step = getattr(model, "unguarded_step", model.step)


class _Realized:
    def __init__(self, real, stepwise):
        self.real, self.stepwise, self.made = real, stepwise, []

    def model(self):
        m = self.real.model()
        self.made.append(m)
        return _Stepwise(m) if self.stepwise else m


def _model_of(structure, word):
    real = discretize(from_expression("1.2*(1+1/(3*s))"), 20.0, "tustin")
    return realize(build_layout(structure, real.roots), FORMATS[word], input_range=4.0, output_level=3.0).model()


PLANTS = ("2", "1/(4s+1)", "1/((4s+1)*(s+1))", "(0.2s+1)/((4s+1)*(s+1)*(0.3s+1))", "1/(s*(0.5s+1))")


@pytest.mark.parametrize("structure", ["direct1", "sections", "direct2t", "delta"])
@pytest.mark.parametrize("word", ["float64", "float32", "q15", "q31"])
def test_compiled_loop_equals_the_stepwise_loop(structure, word):
    """Plants of 0 to 3 states (an integrating one too), dead time and computation delay,
    forced and natural sub-steps (several plant steps per sample), a clamp that acts: y, u and
    the model's final state are identical."""
    if word in ("q15", "q31") and structure in ("direct2t", "delta"):
        assert not hasattr(_model_of(structure, word), "kernel")
    real = discretize(from_expression("1.2*(1+1/(3*s))*(0.5s+1)/(0.05s+1)"), 20.0, "tustin")
    rz = realize(build_layout(structure, real.roots), FORMATS[word], input_range=4.0, output_level=3.0)
    for plant_text in PLANTS:
        plant = from_expression(plant_text)
        for kind, sub in (("setpoint", None), ("disturbance", 0.01), ("setpoint", 0.0125)):
            runs, models = [], []
            for stepwise in (False, True):
                holder = _Realized(rz, stepwise)
                runs.append(
                    simulate_loop(real.controller, plant, 0.3, duration_s=20.0, kind=kind, step=1.0, delay_s=0.02,
                                  output_limits=(-2.0, 3.0), realized=holder, sub_step_s=sub)
                )  # fmt: skip
                models.append(holder.made[0])
            fast, slow = runs
            assert fast.y.view(np.int64).tolist() == slow.y.view(np.int64).tolist()
            assert fast.u.view(np.int64).tolist() == slow.u.view(np.int64).tolist()
            assert repr(models[0].state) == repr(models[1].state)
            if kind == "setpoint" and plant_text != "2":
                assert np.max(fast.u) >= 3.0 - 1e-3  # the clamp acted (fixed point: the word one LSB below it)
