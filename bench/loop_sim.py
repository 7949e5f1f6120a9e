"""Benchmark: the loop simulation, 30,000 steps with an output clamp that acts, measured in one run.

Scenario (ours): a PI (Kc = 2, Ti = 5 s) in firmware at 100 Hz (Tustin), one sample of
computation delay, on 1/((3s+1)(s+1)) with 50 ms dead time; output clamped to [-1, 1.5] (the
clamp holds the output for the first seconds of the setpoint step); 300 s = 30,000 samples.

Target (issue 15): <= 10 ms, a fixed-seconds target: the figure is the median time over 10 ms.
For scale, two notes measured in the same run by interleaved pairs:
* ours / a plain-Python step loop of the same sampled loop (the technique the simulation used
  before: one Python iteration per sample), which also checks that both give the same response
  (a difference above 1e-9 of the step stops the benchmark);
* ours / python-control ``forced_response`` of the same sampled loop without the clamp (a
  general-purpose linear simulation of the same length).

Run: /work/venv/bin/python bench/loop_sim.py [--quick] [--json]   (exit 1 when the target is missed)
"""

from __future__ import annotations

import sys

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, interleaved, repeated, run_script, seconds_figure

FS = 100.0
DURATION = 300.0
THETA = 0.05
LIMITS = (-1.0, 1.5)


def python_loop(cd, plant, theta, delay, limits, samples):
    """One Python iteration per sample: plant ZOH-discretized at T, delays as whole samples
    (the scenario's delays are whole samples), controller in direct form II transposed."""
    import numpy as np
    from scipy.signal import cont2discrete, tf2ss

    t = cd.sample_period_s
    a, b, c, d = tf2ss(list(plant.num), list(plant.den))
    phi, gam, *_ = cont2discrete((a, b, c, d), t, method="zoh")
    phi, gam, cp = phi.tolist(), gam[:, 0].tolist(), c[0].tolist()
    bz, az = list(cd.b), list(cd.a)
    n = int(round((theta + delay) / t))
    lo, hi = limits
    x = [0.0] * len(phi)
    w = [0.0] * (len(az) - 1)
    hist = [0.0] * (n + 1)
    y_out = []
    for _ in range(samples):
        y = sum(ci * xi for ci, xi in zip(cp, x))
        y_out.append(y)
        e = 1.0 - y
        v = bz[0] * e + w[0]
        for i in range(len(w) - 1):
            w[i] = bz[i + 1] * e - az[i + 1] * v + w[i + 1]
        w[-1] = bz[-1] * e - az[-1] * v
        u = lo if v < lo else hi if v > hi else v
        hist.append(u)
        u_in = hist[-1 - n]
        x = [sum(p * xi for p, xi in zip(row, x)) + g * u_in for row, g in zip(phi, gam)]
    return np.array(y_out)


def measure(quick: bool = False) -> list[Figure]:
    import control
    import numpy as np

    from convert.compare.loop import simulate_loop
    from convert.controller import from_expression
    from convert.digital import discretize

    plant = from_expression("1/((3*s + 1)*(s + 1))")
    cd = discretize(from_expression("2*(1 + 1/(5*s))"), FS, "tustin").controller
    t = 1.0 / FS
    samples = int(round(DURATION * FS))

    def ours():
        return simulate_loop(cd, plant, THETA, duration_s=DURATION - t, delay_s=t, output_limits=LIMITS, sub_step_s=t)

    z = control.tf([1, 0], [1], t)
    n = int(round((THETA + t) / t))
    closed = control.feedback(cd.to_control() * (1 / z**n) * control.sample_system(plant.to_control(), t), 1)
    tk = np.arange(samples) * t

    def linear_ref():
        return control.forced_response(closed, T=tk, U=np.ones(samples))

    def loop_ref():
        return python_loop(cd, plant, THETA, t, LIMITS, samples)

    r = ours()
    y_loop = loop_ref()
    if not (r.y.size == samples and r.u.max() == LIMITS[1]):
        raise RuntimeError("loop_sim: the clamp must act in this scenario")
    diff = float(np.max(np.abs(r.y - y_loop)))
    if diff >= 1e-9:
        raise RuntimeError(f"loop_sim: the simulation differs from the plain-Python step loop by {diff:.2g}")
    times = repeated(ours, 5 if quick else 21)
    loop = interleaved(loop_ref, ours, 1 if quick else 3, warmup=False)
    lin = interleaved(linear_ref, ours, 3 if quick else 9)
    return [
        seconds_figure(
            f"loop simulation, {samples} steps with a clamp",
            times,
            0.010,
            "simulate_loop",
            notes=(
                f"vs a plain-Python step loop ({loop.reference_s * 1e3:.0f} ms): ratio {loop.median:.3f} "
                f"(interleaved pairs), same response within {diff:.1e} of the step",
                f"vs python-control forced_response, linear, no clamp ({lin.reference_s * 1e3:.1f} ms): "
                f"ratio {lin.median:.2f} [{lin.spread[0]:.2f}-{lin.spread[1]:.2f}]",
            ),
        )
    ]


if __name__ == "__main__":
    sys.exit(run_script(measure))
