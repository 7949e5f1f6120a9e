"""Plant log evidence: the controller's input and output logged on the running plant, replayed
through each form and compared; the running PID's parameters fitted from the log.

The log is CSV with ``time (s)`` and either ``error`` or ``setpoint`` and ``measurement`` (the
controller's input e = setpoint − measurement) and ``output``. It is read in chunks
(:data:`convert.evidence.csvtable.CHUNK_ROWS` rows) and every result is accumulated as it
streams, so a log of millions of rows is replayed in bounded memory.

Replay (each form from rest at the first row):

* an analog form is propagated **exactly** between samples for an input that is linear
  between them (first-order hold, the assumption python-control's ``forced_response`` makes),
  at each row's own time step, so uneven sampling is handled as logged: the controller is split
  into first-order modes (partial fractions; distinct poles) and each mode's recursion
  x[k+1] = e^{p·h_k}·x[k] + (I0 − I1)·u[k] + I1·u[k+1] is run as a linear filter
  (:func:`convert.digital.linearfilter.run_filter`: scipy.signal.lfilter's recursion, in blocks) over
  evenly sampled stretches and by an associative scan elsewhere;
* a digital form runs at its own rate and word format: its sample instants t0 + n/fs, the input
  interpolated linearly at them, filtered with its coefficients as stored, the output held
  (zero-order) and delayed by its computation delay, read at the logged times.

The residual (logged − replayed output) is reported as its mean (the **offset**: the state the
running controller had at the first row, a bias, or a tracking difference — estimated and
reported, never silently removed), and its RMS and peak about that offset, relative to the
logged output's range. Rows are left out of the figures, and counted, where the log cannot
judge the linear law: a row whose logged output sits at a limit (the given limits; without
them, held flat while the input moved, for two steps or more, at the logged output's own highest
or lowest level) **and** where the form's replay, with its offset, is at or beyond that limit
too (a second pass, the offset taken from the other rows); rows with an empty or NaN cell; and
the first five time constants of the slowest decaying mode (the unknown initial state). A form
with more than half of its rows left out is not judged. Gaps (a time step more than five times
the median step) are stated; the input is interpolated across them.

A form whose setpoint path differs from its error path (PID weights b, c ≠ 1; a two-input card)
is a :class:`TwoPathReplay`: setpoint and measurement each through its own path when the log has
both; from an error-only log it is not judged.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from convert.errors import InputError, UnrealizableError
from convert.evidence.csvtable import CHUNK_ROWS, Role, chunks, layout, require_rising
from convert.compare.givenwork import quantized
from convert.given import given_controller, pid_block_b_a
from convert.controller import Controller
from convert.digital.linearfilter import run_filter
from convert.polyroots import closest_roots, partial_fractions

LOG_ROLES = (
    Role("time", ("time", "t", "timestamp"), ("time",), "s"),
    Role("setpoint", ("setpoint", "sp", "sv"), ("plain",), "", required=False),
    Role("measurement", ("measurement", "pv", "process"), ("plain",), "", required=False),
    Role("error", ("error", "err", "e", "deviation"), ("plain",), "", required=False),
    Role("output", ("output", "out", "u", "mv", "co", "controller output"), ("plain",), ""),
)
GAP_FACTOR = 5.0
SETTLE_TIME_CONSTANTS = 5.0
SKETCH_POINTS = 4000
#: poles closer than this (rad/s, absolute) count as one repeated pole, which the modal replay
#: refuses (the grouping distance scipy.signal.residue applies by default, kept as the rule)
REPEATED_POLE_S = 1e-3


# ----------------------------------------------------------------------------- replay engines
def _scan(a: np.ndarray, b: np.ndarray, x0: np.ndarray) -> np.ndarray:
    """x[k+1] = a[k]·x[k] + b[k] for k = 0..n-1 along the last axis, from x0; returns x[1..n].
    Associative scan by doubling (log2 n vectorized passes)."""
    A, B = a.copy(), b.copy()
    n = A.shape[-1]
    d = 1
    while d < n:
        B[..., d:] = A[..., d:] * B[..., :-d] + B[..., d:]
        A[..., d:] = A[..., d:] * A[..., :-d]
        d *= 2
    return A * x0[..., None] + B


class AnalogReplay:
    """Exact first-order-hold propagation of an analog controller through logged samples."""

    def __init__(self, controller):
        if not controller.is_proper:
            raise UnrealizableError(
                "an improper controller (an unfiltered derivative) has no response to a logged "
                "input; give its derivative filter",
                key="derivative_filter",
            )
        num, den = np.asarray(controller.num, float), np.asarray(controller.den, float)
        r, p, k = partial_fractions(num, den)
        if p.size and closest_roots(p) <= max(REPEATED_POLE_S, 1e-9 * max(1.0, float(np.max(np.abs(p))))):
            raise UnrealizableError(
                "the controller has a repeated pole; its replay needs distinct poles", key="controller"
            )
        p = p.astype(complex)
        r = r.astype(complex)
        # one mode per real pole and per conjugate pair (the pair's output is twice the real part)
        real = np.abs(p.imag) <= 1e-12 * np.maximum(1.0, np.abs(p))
        upper = p.imag > 0
        keep = real | upper
        self.p = np.where(real, p.real + 0j, p)[keep]
        self.r = np.where(real, r.real + 0j, r)[keep]
        self.weight = np.where(real[keep], 1.0, 2.0)
        self.is_real = real[keep]
        self.k = float(np.real(k[0])) if len(k) else 0.0
        self.x = np.zeros(self.p.size, dtype=complex)
        self.last = None  # (t, u) of the previous row
        self._cache = (None, None)
        decaying = [-1 / z.real for z in p if z.real < -1e-12 * max(1.0, abs(z))]
        self.settle_s = SETTLE_TIME_CONSTANTS * max(decaying) if decaying else 0.0

    def _coefficients(self, h: np.ndarray):
        """e^{p·h}, I0 − I1 and I1 per mode (rows) and step (columns)."""
        z = self.p[:, None] * h[None, :]
        E = np.exp(z)
        small = np.abs(z) < 1e-4
        zs = np.where(small, 1.0, z)
        em1 = np.expm1(zs)
        i0 = np.where(small, h * (1 + z / 2 + z * z / 6), h * em1 / zs)
        i1 = np.where(small, h * (0.5 + z / 6 + z * z / 24), h * (em1 - zs) / (zs * zs))
        return E, i0 - i1, i1

    def run(self, t: np.ndarray, u: np.ndarray) -> np.ndarray:
        """Outputs at the rows ``t`` (s) for inputs ``u``; the state carries over between calls."""
        if self.p.size == 0:
            self.last = (t[-1], u[-1])
            return self.k * u
        first = self.last is None
        inner = np.diff(t)
        h0 = float(inner[0]) if inner.size else (float(t[0] - self.last[0]) if not first else 0.0)
        even = inner.size == 0 or inner.max() - inner.min() <= 1e-9 * h0
        if not first:
            even = even and abs(float(t[0] - self.last[0]) - h0) <= 1e-9 * h0
        if h0 > 0 and even:
            y = self._uniform(h0, u, first)
        elif h0 > 0:
            h = inner if first else np.r_[t[0] - self.last[0], inner]
            y = self._uneven(h, u if first else np.r_[self.last[1], u], first)
        else:  # a lone first row: the state is zero there
            y = np.zeros(u.size)
        self.last = (t[-1], u[-1])
        return y + self.k * u if self.k else y

    def _uniform(self, h: float, u: np.ndarray, first: bool) -> np.ndarray:
        """Even steps: each mode is the first-order filter g·(I1 + (I0 − I1)·z⁻¹)/(1 − e^{ph}·z⁻¹)
        (g its output gain) on the input rows (:func:`convert.digital.linearfilter.run_filter`),
        started from the carried state; the output is the modes' sum."""
        if self._cache[0] is None or abs(self._cache[0] - h) > 1e-9 * h:  # steps equal to rounding share one set
            E, c0, c1 = self._coefficients(np.array([h]))
            self._cache = (h, (E[:, 0], c0[:, 0], c1[:, 0]))
        E, c0, c1 = self._cache[1]
        out = None
        for i in range(self.p.size):
            g = self.weight[i] * self.r[i]  # the mode's output gain
            if g == 0:  # a mode the output never sees (a cancelled pole): its state stays at rest
                continue
            # x at the first row is zero (c1·u0 + zi = 0); later the state carried from the last row
            zi = -c1[i] * u[0] if first else E[i] * self.x[i] + c0[i] * self.last[1]
            if self.is_real[i]:
                ys, _ = run_filter([(g * c1[i]).real, (g * c0[i]).real], [1.0, -E[i].real], u, [(g * zi).real])
                self.x[i] = ys[-1] / g.real
            else:
                yc, _ = run_filter([g * c1[i], g * c0[i]], [1.0, -E[i]], u, [g * zi])
                self.x[i] = yc[-1] / g
                ys = yc.real
            if out is None:
                out = ys
            else:
                out += ys
        return np.zeros(u.size) if out is None else out

    def _uneven(self, h: np.ndarray, uu: np.ndarray, first: bool) -> np.ndarray:
        """Uneven steps: each row's own coefficients, the recursion run by an associative scan."""
        E, c0, c1 = self._coefficients(h)
        b = c0 * uu[None, :-1] + c1 * uu[None, 1:]
        xs = _scan(E, b, self.x)
        states = np.concatenate([self.x[:, None], xs], axis=1) if first else xs
        self.x = xs[:, -1]
        return np.real((self.weight * self.r) @ states)


class DigitalReplay:
    """A digital controller at its own rate: input sampled at t0 + n/fs (linear interpolation of
    the log), coefficients as stored, output held and delayed, read at the logged times."""

    def __init__(self, b, a, fs_hz: float, delay_s: float = 0.0):
        self.b, self.a = np.asarray(b, float), np.asarray(a, float)
        self.fs = float(fs_hz)
        self.delay = float(delay_s)
        self.zi = np.zeros(max(len(self.a), len(self.b)) - 1)
        self.t0 = None
        self.n_next = 0  # index of the next firmware sample instant
        self.prev = None  # (t, u) last log row
        # (instant + delay, output) of the latest firmware outputs before this chunk: enough of them to
        # cover the computation delay
        self.keep = int(np.ceil(self.delay * self.fs)) + 2
        self.held_t = np.array([-np.inf])
        self.held_y = np.array([0.0])
        poles = np.roots(self.a) if len(self.a) > 1 else np.empty(0)
        decaying = [-1 / (self.fs * np.log(abs(z))) for z in poles if 1e-12 < abs(z) < 1 - 1e-9]
        self.settle_s = SETTLE_TIME_CONSTANTS * max(decaying) if decaying else 0.0

    def run(self, t: np.ndarray, u: np.ndarray) -> np.ndarray:
        if self.t0 is None:
            self.t0 = float(t[0])
        period = 1.0 / self.fs
        eps = 1e-9 * period
        last = t[-1] if self.prev is None else max(t[-1], self.prev[0])
        n_last = int(np.floor((last - self.t0) / period + 1e-9))
        inst = self.t0 + np.arange(self.n_next, n_last + 1) * period
        aligned = inst.size == t.size and inst.size > 0 and np.max(np.abs(inst - t)) <= eps
        if aligned:
            ui = u  # the log holds the firmware's own samples
        elif inst.size:
            tt, uu = (t, u) if self.prev is None else (np.r_[self.prev[0], t], np.r_[self.prev[1], u])
            ui = np.interp(inst, tt, uu)
        if inst.size:
            y, self.zi = run_filter(self.b, self.a, ui, self.zi) if self.zi.size else (self.b[0] * ui, self.zi)
        else:
            y = np.empty(0)
        self.n_next = n_last + 1
        if aligned and self.delay == 0:
            out = y  # the firmware samples at the logged rows and answers at once
            times, values = inst[-self.keep :], y[-self.keep :]
        else:
            # output at a logged time: the newest firmware output whose instant + delay <= t
            times = np.r_[self.held_t, inst + self.delay]
            values = np.r_[self.held_y, y]
            idx = np.searchsorted(times, t + eps, side="right") - 1
            out = values[np.clip(idx, 0, None)]
        self.held_t, self.held_y = times[-self.keep :], values[-self.keep :]
        self.prev = (t[-1], u[-1])
        return out


def controller_replayer(controller, delay_s: float = 0.0):
    """The replay engine of a :class:`convert.controller.Controller` (digital: as stored, with
    ``delay_s`` computation delay)."""
    if controller.is_digital:
        return DigitalReplay(controller.b, controller.a, controller.fs_hz, delay_s)
    return AnalogReplay(controller)


def replayer(given):
    """The replay engine of a :class:`convert.given.GivenForm` as it runs (a
    :class:`TwoPathReplay` when its setpoint path differs from its error path)."""
    info = given_controller(given)
    ctrl = info.controller
    firmware = given.form in ("digital", "pid")
    delay = given.delay_for() if firmware else 0.0
    engine = controller_replayer(quantized(given, ctrl) if firmware else ctrl, delay)
    sp = given_setpoint_path(given, info)
    if sp is None:
        return engine
    sp_engine = controller_replayer(quantized(given, sp) if firmware else sp, delay)
    return TwoPathReplay(sp_engine, engine, setpoint_words(info.pid, info.extra), _same_integral(sp, ctrl))


def given_setpoint_path(given, info=None):
    """The setpoint -> output path of a given form where it is not its error path (a PID, analog
    or block, with setpoint weights b, c ≠ 1; a two-input card whose setpoint path differs), as a
    :class:`Controller` in the form's own domain; None for u = C·(r − y)."""
    info = info if info is not None else given_controller(given)
    pid = info.pid
    if given.form == "pid":
        if pid.b == 1 and pid.c == 1:
            return None
        d = given.data
        b, a = pid_block_b_a(pid, d["fs_hz"], d["method"], path="setpoint")
        return Controller.from_b_a(b, a, 1.0 / d["fs_hz"], name=f"{given.name} setpoint path")
    return analog_setpoint_path(pid, info.extra)


def analog_setpoint_path(pid=None, extra=None):
    """The setpoint -> output path of an analog form (a two-input card's H_sp, ``extra["setpoint_path"]``
    from its analysis; a PID's with weights b, c ≠ 1), or None when it is the error path."""
    if extra and extra.get("setpoint_path") is not None:
        return extra["setpoint_path"]
    if pid is None or (pid.b == 1 and pid.c == 1):
        return None
    return pid.setpoint_controller()


def setpoint_words(pid=None, extra=None) -> str:
    if extra and extra.get("setpoint_path") is not None:
        return f"a setpoint path of its own, {extra.get('setpoint_structure') or 'two-input card'}"
    return f"setpoint weights b = {pid.b:g}, c = {pid.c:g}"


def _integral_action(ctrl) -> tuple[int, float]:
    """(integrators, lim (s or 1 − z⁻¹)^k · C): the integral action of a controller."""
    from numpy.polynomial import polynomial as P

    k = ctrl.integrator_count()
    if k == 0:
        return 0, 0.0
    if ctrl.is_digital:
        a = np.asarray(ctrl.a, float)
        for _ in range(k):
            a, _rem = P.polydiv(a, [1.0, -1.0])
        return k, float(np.sum(ctrl.b) / np.sum(a))
    num, den = np.asarray(ctrl.num, float), np.asarray(ctrl.den, float)
    return k, float(num[-1] / den[-1 - k])


def _same_integral(sp, fb) -> bool:
    """True when C_sp − C has no integrator (the same single integral action, or none): then a
    constant setpoint r0 through C_sp − C settles to a constant."""
    (k1, g1), (k2, g2) = _integral_action(sp), _integral_action(fb)
    return k1 == k2 and k1 <= 1 and abs(g1 - g2) <= 1e-9 * max(abs(g1), abs(g2), 1e-300)


class TwoPathReplay:
    """A form whose setpoint path differs from its error path: u = C_sp·r − C·y, each path run by
    its own engine (``setpoint``, ``feedback``). Both inputs enter as their change from the first
    row's setpoint r0, C_sp·(r − r0) − C·(y − r0): what that leaves out, (C_sp − C)·r0 from rest,
    settles to a constant (it joins the reported offset) when C_sp − C has no integrator, which
    ``shift`` says (always so for weights b, c); otherwise the paths run on r and y as logged.
    :meth:`run` (the error only) replays C·e: a log without the setpoint cannot judge the form."""

    two_paths = True

    def __init__(self, setpoint, feedback, weights: str, shift: bool = True):
        self.setpoint, self.feedback = setpoint, feedback
        self.weights = weights
        self.shift = shift
        self.r0 = None
        self.settle_s = max(getattr(setpoint, "settle_s", 0.0), getattr(feedback, "settle_s", 0.0))

    def run(self, t: np.ndarray, e: np.ndarray) -> np.ndarray:
        return self.feedback.run(t, e)

    def run_paths(self, t: np.ndarray, r: np.ndarray, y: np.ndarray) -> np.ndarray:
        if self.r0 is None:
            self.r0 = float(r[0]) if self.shift else 0.0
        return self.setpoint.run(t, r - self.r0) - self.feedback.run(t, y - self.r0)


def weighted_replayer(controller, setpoint_path=None, delay_s: float = 0.0, weights: str = ""):
    """:func:`controller_replayer`, or a :class:`TwoPathReplay` when ``setpoint_path`` (the
    setpoint -> output path, same domain) is given."""
    engine = controller_replayer(controller, delay_s)
    if setpoint_path is None:
        return engine
    return TwoPathReplay(
        controller_replayer(setpoint_path, delay_s), engine, weights, _same_integral(setpoint_path, controller)
    )


# ----------------------------------------------------------------------------- accumulators
class _Stats:
    """Running figures of the residual: offset (mean), RMS and peak about it, combined chunk by
    chunk with the pairwise mean/variance update (no cancellation when the offset is large)."""

    def __init__(self):
        self.n = 0
        self.mean = 0.0
        self.m2 = 0.0
        self.lo = np.inf
        self.hi = -np.inf
        self.raw_peak = 0.0
        self.raw_ss = 0.0

    def add(self, r: np.ndarray) -> None:
        if not r.size:
            return
        n_b = r.size
        mean_b = float(r.mean())
        m2_b = float(np.sum((r - mean_b) ** 2))
        n = self.n + n_b
        delta = mean_b - self.mean
        self.mean += delta * n_b / n
        self.m2 += m2_b + delta * delta * self.n * n_b / n
        self.n = n
        self.lo = min(self.lo, float(r.min()))
        self.hi = max(self.hi, float(r.max()))
        self.raw_peak = max(self.raw_peak, float(np.abs(r).max()))
        self.raw_ss += float(np.dot(r, r))

    def figures(self) -> dict:
        if self.n == 0:
            return {"n": 0, "offset": None, "rms": None, "peak": None, "rms_raw": None, "peak_raw": None}
        return {
            "n": self.n,
            "offset": self.mean,
            "rms": float(np.sqrt(self.m2 / self.n)),
            "peak": max(self.hi - self.mean, self.mean - self.lo),
            "rms_raw": float(np.sqrt(self.raw_ss / self.n)),
            "peak_raw": self.raw_peak,
        }


class _Sketch:
    """At most about SKETCH_POINTS rows kept for figures: every stride-th row, the stride
    doubling whenever the buffer fills (bounded memory for any log length)."""

    def __init__(self, width: int):
        self.stride = 1
        self.rows: list[np.ndarray] = []
        self.count = 0
        self.width = width
        self.next = 0

    def add(self, block: np.ndarray) -> None:
        n = block.shape[0]
        idx = np.arange(self.next, n, self.stride)
        if idx.size:
            self.rows.append(block[idx])
            self.count += idx.size
            self.next = idx[-1] + self.stride - n
        else:
            self.next -= n
        if self.count > 2 * SKETCH_POINTS:
            data = np.concatenate(self.rows)[::2]
            self.rows, self.count = [data], data.shape[0]
            self.stride *= 2
            self.next = self.next  # keeps phase approximately; a figure only

    def array(self) -> np.ndarray:
        return np.concatenate(self.rows) if self.rows else np.empty((0, self.width))


class _Normal:
    """Streaming normal equations for y ≈ X·θ."""

    def __init__(self, p: int):
        self.xtx = np.zeros((p, p))
        self.xty = np.zeros(p)
        self.yty = 0.0
        self.n = 0

    def add(self, X: np.ndarray, y: np.ndarray) -> None:
        self.xtx += X.T @ X
        self.xty += X.T @ y
        self.yty += float(y @ y)
        self.n += y.size


@dataclass(frozen=True)
class FormReplay:
    name: str
    figures: dict  # n, offset, rms, peak, rms_raw, peak_raw (output units); rms_rel, peak_rel (of range)


@dataclass(frozen=True)
class PidLogFit:
    """PID parameters fitted from a log by linear least squares: u ≈ kp·e + ki·I(e) + kd·D(e) + c
    from an error-only log; with setpoint and measurement u ≈ kp·(b·r − y) + ki·I(r − y) +
    kd·D(c·r − y) + c, the weights ``b`` and ``c`` fitted too (names then include them; their
    intervals by the delta method). The terms are built as the form computes them (tf fixed at
    the form's value)."""

    names: tuple[str, ...]
    values: dict
    ci95: dict  # name -> half-width (same unit)
    offset: float
    residual_rms: float
    rows: int
    form: str
    tf_s: float
    notes: tuple[str, ...] = ()

    def as_dict(self) -> dict:
        return {
            "names": list(self.names),
            "values": self.values,
            "ci95": self.ci95,
            "offset": self.offset,
            "residual_rms": self.residual_rms,
            "rows": self.rows,
            "form": self.form,
            "tf_s": self.tf_s,
            "notes": list(self.notes),
        }


@dataclass
class LogEvidence:
    path: Path
    rows: int
    t_span_s: tuple[float, float]
    step_s: float  # median time step of the first chunk
    uneven: bool
    gaps: list  # (t_start, t_end)
    gap_count: int
    saturated_rows: int
    saturated_spans: list  # (t_start, t_end), at most 20 listed
    missing_rows: int
    settle_rows: int
    input_kind: str
    output_range: tuple[float, float]
    replays: list
    fit: PidLogFit | None
    sketch: dict
    notes: list = field(default_factory=list)
    columns: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {
            "file": str(self.path),
            "rows": self.rows,
            "t_span_s": list(self.t_span_s),
            "step_s": self.step_s,
            "uneven": self.uneven,
            "gaps": [list(g) for g in self.gaps],
            "gap_count": self.gap_count,
            "saturated_rows": self.saturated_rows,
            "saturated_spans": [list(s) for s in self.saturated_spans],
            "missing_rows": self.missing_rows,
            "settle_rows": self.settle_rows,
            "input": self.input_kind,
            "output_range": list(self.output_range),
            "columns": self.columns,
            "replays": [{"name": r.name, **r.figures} for r in self.replays],
            "fit": self.fit.as_dict() if self.fit else None,
            "notes": list(self.notes),
        }


# ----------------------------------------------------------------------------- PID regressors
class _PidTerms:
    """The regressors of a PID form as it computes them (analog exact FOH, or the block's own
    sampled terms), run through the log in chunks.

    With the error only (``paths`` False): u = sign·(kp·e + ki·I(e) + kd·D(e)) + offset, which
    assumes b = c = 1. With setpoint and measurement: each weighted term on its own input,
    u = sign·(kp·b·r − kp·y + ki·I(r − y) + kd·c·D(r) − kd·D(y)) + offset, so the weights b and c
    are fitted too (kp·b and kd·c are columns of their own). r and y enter as their change from
    the first row's setpoint r0; the constants that leaves out go into the fitted offset and the
    settling rows."""

    def __init__(self, given, paths: bool):
        d = given.data
        pid = d["pid"]
        self.sign = pid.sign
        self.paths = paths
        self.tf = pid.tf
        self.weights = (pid.b, pid.c)
        self.weighted = pid.b != 1 or pid.c != 1
        self.r0 = None
        self.block = given.form == "pid"
        has_i, has_d = pid.ki > 0, pid.kd > 0
        if self.block:
            from dataclasses import replace

            fs, method, delay = d["fs_hz"], d["method"], given.delay_for()

            def unit(kind):
                if kind == "p":
                    return DigitalReplay([1.0], [1.0], fs, delay)
                one = dict(kp=0.0, ki=1.0, kd=0.0, tf=0.0) if kind == "i" else dict(kp=0.0, ki=0.0, kd=1.0)
                b, a = pid_block_b_a(replace(pid, action="reverse", **one), fs, method)
                return DigitalReplay(b, a, fs, delay)

        else:
            if has_d and pid.tf <= 0:
                raise UnrealizableError(
                    "fitting an unfiltered derivative from a log needs the form's derivative filter (n or tf)",
                    key="fit",
                )

            def unit(kind):
                if kind == "p":
                    return None
                if kind == "i":
                    return AnalogReplay(Controller.analog([1.0], [1.0, 0.0]))
                return AnalogReplay(Controller.analog([1.0, 0.0], [pid.tf, 1.0]))

        # (column name, unit engine, input: "r", "y" or "e", sign of the column in u)
        cols = []
        if paths:
            cols += [("kp_b", unit("p"), "r", 1.0), ("kp", unit("p"), "y", -1.0)]
        else:
            cols += [("kp", unit("p"), "e", 1.0)]
        if has_i:
            cols.append(("ki", unit("i"), "e", 1.0))
        if has_d:
            cols += (
                [("kd_c", unit("d"), "r", 1.0), ("kd", unit("d"), "y", -1.0)]
                if paths
                else [("kd", unit("d"), "e", 1.0)]
            )
        self.columns = [c[0] for c in cols]
        self._cols = cols
        self.terms = [c[1] for c in cols if c[1] is not None]
        self.multipliers = np.array([self.sign * c[3] for c in cols] + [1.0])

    def run(self, t, e, r=None, y=None) -> np.ndarray:
        """The regressor columns (and a column of ones) for the rows ``t``."""
        if self.paths:
            if self.r0 is None:
                self.r0 = float(r[0])
            inputs = {"e": e, "r": r - self.r0, "y": y - self.r0}
        else:
            inputs = {"e": e}
        out = [inputs[src] if eng is None else eng.run(t, inputs[src]) for _, eng, src, _ in self._cols]
        return np.column_stack(out + [np.ones_like(e)])


# ----------------------------------------------------------------------------- the pass
#: above this share of the rows left out (saturated or with an empty cell) a form's residual
#: criteria are not judged: what is left does not show the law (our judgement, stated in the output)
MAX_LEFT_OUT = 0.5
#: a replayed output this close to a limit (as a share of the limits' span) counts as at the limit
REPLAY_AT_LIMIT = 1e-3


@dataclass
class _Saturation:
    """How the final pass leaves rows out as saturated: ``levels`` (low, high) are the given
    output limits, or without them the logged output's extremes (a held row counts only at
    them); ``offsets`` per form: the mean residual of the rows not at a level (the running
    controller's unknown state), added to the replay before it is compared with the level (None:
    no such row, nothing can be decided, every row at a level is left out)."""

    levels: tuple[float, float]
    given: bool
    offsets: list


def _tolerance(lo: float, hi: float) -> float:
    return 1e-6 * max(1.0, abs(hi - lo))


class _Pass:
    """One streamed pass over the log: each form replayed, its residual accumulated over the rows
    it can be judged on, and the PID fit's normal equations."""

    def __init__(self, lay, path, kind, engines, terms, settle, output_limits, rule, two_paths):
        self.lay, self.path, self.kind = lay, path, kind
        self.engines, self.terms, self.settle = engines, terms, settle
        self.output_limits, self.rule, self.two_paths = output_limits, rule, two_paths
        self.stats = [_Stats() for _ in engines]
        self.left_out = [0] * len(engines)  # rows at a level left out, per form
        self.kept_at_level = [0] * len(engines)  # rows at a level the replay does not reach, judged
        self.normal = _Normal(len(terms.columns) + 1) if terms is not None else None
        self.sketch = _Sketch(2 + len(engines))
        self.rows = self.missing = self.settle_rows = self.at_level = self.gap_count = 0
        self.gaps, self.spans = [], []
        self.t_first = self.t_last = self.step = None
        self.uneven = False
        self.lo_out, self.hi_out = np.inf, -np.inf

    def run(self, chunk_rows: int):
        run_val = span_open = None
        path, lay = self.path, self.lay
        for lines, data in chunks(
            lay, chunk_rows=chunk_rows, allow_missing=("setpoint", "measurement", "error", "output")
        ):
            t = data["time"]
            e = data["error"] if self.kind == "error" else data["setpoint"] - data["measurement"]
            r, y = (data["setpoint"], data["measurement"]) if self.two_paths else (None, None)
            out = data["output"]
            require_rising(t, lay.first("time"), "time", path, lines, self.t_last)
            ok = np.isfinite(e) & np.isfinite(out)
            if self.two_paths:
                ok &= np.isfinite(r) & np.isfinite(y)
                r, y = r[ok], y[ok]
            self.missing += int((~ok).sum())
            t, e, out = t[ok], e[ok], out[ok]
            if t.size == 0:
                continue
            self.rows += t.size
            if self.t_first is None:
                self.t_first = float(t[0])
                dts = np.diff(t)
                self.step = float(np.median(dts)) if dts.size else 0.0
            h = np.diff(np.r_[self.t_last, t]) if self.t_last is not None else np.diff(t)
            if self.step and h.size:
                self.uneven |= bool(np.ptp(h) > 1e-6 * self.step)
                gi = np.flatnonzero(h > GAP_FACTOR * self.step)
                self.gap_count += gi.size
                ts = np.r_[self.t_last, t] if self.t_last is not None else t
                for i in gi[: max(0, 20 - len(self.gaps))]:
                    self.gaps.append((float(ts[i]), float(ts[i + 1])))
            self.t_last = float(t[-1])
            self.lo_out, self.hi_out = min(self.lo_out, float(out.min())), max(self.hi_out, float(out.max()))
            lo_at, hi_at, run_val = self._at_levels(out, e, run_val)
            at = lo_at | hi_at
            self.at_level += int(at.sum())
            span_open = _spans(t, at, self.spans, span_open)
            late = t >= self.t_first + self.settle
            replayed = []
            for i, ((_, eng), st) in enumerate(zip(self.engines, self.stats)):
                ys = eng.run_paths(t, r, y) if self.two_paths and getattr(eng, "two_paths", False) else eng.run(t, e)
                out_f = self._left_out(i, ys, lo_at, hi_at)
                self.left_out[i] += int(out_f.sum())
                self.kept_at_level[i] += int((at & ~out_f).sum())
                st.add((out - ys)[late & ~out_f])
                replayed.append(ys)
            self.settle_rows += int((~late & ~at).sum())
            if self.terms is not None:
                X = self.terms.run(t, e, r, y)
                use = late & ~at
                self.normal.add(X[use] * self.terms.multipliers, out[use])
            self.sketch.add(np.column_stack([t, out] + replayed))
        if span_open is not None:
            self.spans.append((span_open, self.t_last))
        return self

    def _at_levels(self, out, e, run_val):
        """Rows whose logged output sits at the low / high level: at the given limits; without
        them, held still while the input moved (two steps or more), and in the final pass only at
        the logged output's own extremes."""
        if self.output_limits is not None:
            lo, hi = self.output_limits
            tol = _tolerance(lo, hi)
            return out <= lo + tol, out >= hi - tol, None
        held = _held_while_input_moves(out, e, run_val)
        run_val = (out[-1], e[-1])
        if self.rule is None:  # first pass: every held row (the extremes are not known yet)
            return held, np.zeros_like(held), run_val
        lo, hi = self.rule.levels
        tol = _tolerance(lo, hi)
        return held & (out <= lo + tol), held & (out >= hi - tol), run_val

    def _left_out(self, i, ys, lo_at, hi_at):
        """Rows of form ``i`` left out as saturated: in the first pass every row at a level (to
        find the free rows' offset); in the final pass only where the replayed form, with that
        offset, is itself at or beyond the level."""
        if self.rule is None:
            return lo_at | hi_at
        off = self.rule.offsets[i]
        if off is None:
            return lo_at | hi_at
        lo, hi = self.rule.levels
        tol = REPLAY_AT_LIMIT * (hi - lo)
        v = ys + off
        return (lo_at & (v <= lo + tol)) | (hi_at & (v >= hi - tol))


def log_evidence(
    path: str | Path,
    forms: list,
    *,
    columns: dict | None = None,
    units: dict | None = None,
    decimal: str = ".",
    output_limits: tuple[float, float] | None = None,
    fit=None,
    chunk_rows: int = CHUNK_ROWS,
    option: str = "columns",
) -> LogEvidence:
    """Replay the log at ``path`` through each ``(name, GivenForm or replay engine)`` of ``forms``;
    ``fit``: a GivenForm with PID settings whose parameters to fit from the log (or None).
    ``output_limits`` (low, high): the output's limits, to find saturated rows.

    A row is left out of a form's figures as saturated only where the logged output is at a limit
    (the given limits; without them, held still at the logged output's own highest or lowest
    level) **and** the form's replay, with its offset, is itself at or beyond that limit: a logged
    output pinned or frozen where the law does not go is a mismatch, and counts. Rows are read
    twice when some sit at a limit (the first pass finds each form's offset from the other rows).
    A form with more than :data:`MAX_LEFT_OUT` of its rows left out, or that weighs the setpoint
    while the log has only the error, gets ``figures["unjudged"]``: the reason it is not judged."""
    import copy

    path = Path(path)
    lay = layout(path, LOG_ROLES, columns=columns, units=units, decimal=decimal, option=option)
    have = set(lay.columns)
    both = {"setpoint", "measurement"} <= have
    if "error" in have:
        kind = "error"
    elif both:
        kind = "setpoint − measurement"
    else:
        raise InputError(
            "the log needs the controller's input: an 'error' column, or 'setpoint' and 'measurement' "
            f"columns (map other names with {option})",
            where=f"{path.name}:1",
        )
    notes = []
    engines = [(name, g if hasattr(g, "run") else replayer(g)) for name, g in forms]
    weighted = [name for name, eng in engines if getattr(eng, "two_paths", False)]
    if "error" in have and ({"setpoint", "measurement"} & have):
        notes.append(
            "the log has an error column and setpoint/measurement; the error column is used"
            + (
                f" (and setpoint and measurement for {', '.join(weighted)}: a setpoint path of its own)"
                if weighted and both
                else ""
            )
        )
    spare = copy.deepcopy(engines)  # fresh engines for a second pass
    # setpoint and measurement are read as such (rows where either is empty skipped) only where used
    paths = both and (bool(weighted) or fit is not None)
    terms = _PidTerms(fit, paths) if fit is not None else None
    if terms is not None and terms.weighted and not both:
        raise InputError(
            f"the PID weighs the setpoint (b = {terms.weights[0]:g}, c = {terms.weights[1]:g}): its law "
            "u = kp·(b·r − y) + ki·∫(r − y) + kd·D(c·r − y) cannot be fitted from the error alone; log "
            "'setpoint' and 'measurement' columns",
            key="fit",
        )
    settle = max([getattr(e, "settle_s", 0.0) for _, e in engines] + [0.0])
    if terms is not None:
        settle = max([settle] + [getattr(x, "settle_s", 0.0) for x in terms.terms])
    first = _Pass(lay, path, kind, engines, terms, settle, output_limits, None, paths).run(chunk_rows)
    if first.rows == 0:
        raise InputError("no data rows with all values after the header", where=f"{path.name}:2")
    if first.hi_out == first.lo_out:  # nothing to replay against: every figure would be about a constant
        col = lay.first("output")
        raise InputError(
            f"column {col.header!r} never moves: {first.lo_out / getattr(col, 'factor', 1.0):g} in all "
            f"{first.rows:,} rows, so the log shows nothing of how the controller responds (in manual, held or "
            "saturated throughout); log a period in automatic where the output moves",
            where=f"{path.name}:2",
        )
    done = first
    if first.at_level:
        levels = tuple(output_limits) if output_limits is not None else (first.lo_out, first.hi_out)
        offsets = [st.mean if st.n else None for st in first.stats]
        rule = _Saturation(levels, output_limits is not None, offsets)
        terms2 = _PidTerms(fit, paths) if fit is not None else None
        done = _Pass(lay, path, kind, spare, terms2, settle, output_limits, rule, paths).run(chunk_rows)
        terms = terms2
        if output_limits is None and done.at_level:
            notes.append(
                "no output limits given: rows where the output held still while the input moved, at the "
                "logged output's own highest or lowest level, are taken as saturated (give the output "
                "limits to find it exactly)"
            )
        if output_limits is None and first.at_level > done.at_level:
            notes.append(
                f"{first.at_level - done.at_level:,} rows where the output held still while the input moved, "
                "away from the logged output's extremes, are judged (a frozen output is not a saturated one)"
            )
    rows, missing = done.rows, done.missing
    rng = done.hi_out - done.lo_out
    replays = []
    for i, ((name, eng), st) in enumerate(zip(engines, done.stats)):
        fig = st.figures()
        fig["rms_rel"] = fig["rms"] / rng if fig["rms"] is not None and rng > 0 else None
        fig["peak_rel"] = fig["peak"] / rng if fig["peak"] is not None and rng > 0 else None
        fig["offset_rel"] = fig["offset"] / rng if fig["offset"] is not None and rng > 0 else None
        fig["saturated"] = done.left_out[i]
        fig["at_limit_judged"] = done.kept_at_level[i]
        share = (done.left_out[i] + missing) / (rows + missing)
        fig["left_out_share"] = share
        fig["input"] = (
            "setpoint and measurement, each through its own path" if getattr(eng, "two_paths", False) and both else kind
        )
        fig["unjudged"] = None
        if getattr(eng, "two_paths", False) and not both:
            fig["unjudged"] = (
                f"it weighs the setpoint ({eng.weights}), and the log has the error only: its setpoint path "
                "cannot be replayed (log 'setpoint' and 'measurement' columns)"
            )
        elif share > MAX_LEFT_OUT:
            fig["unjudged"] = (
                f"{100 * share:.3g} % of the rows were left out (saturated {done.left_out[i]:,}, with an empty "
                f"cell {missing:,}); above {100 * MAX_LEFT_OUT:g} % the rest does not show the law"
            )
        replays.append(FormReplay(name, fig))
    fit_result = _solve_fit(done.normal, terms, fit) if terms is not None else None
    sk = done.sketch.array()
    sketch_data = {
        "t": sk[:, 0],
        "output": sk[:, 1],
        "replayed": {name: sk[:, 2 + i] for i, (name, _) in enumerate(engines)},
    }
    if settle:
        notes.append(
            f"the first {settle:.4g} s (five time constants of the slowest decaying mode) are left out of "
            "the figures: the running controller's state at the first row is unknown"
        )
    return LogEvidence(
        path,
        rows,
        (done.t_first, done.t_last),
        done.step or 0.0,
        done.uneven,
        done.gaps,
        done.gap_count,
        done.at_level,
        done.spans[:20],
        missing,
        done.settle_rows,
        kind,
        (done.lo_out, done.hi_out),
        replays,
        fit_result,
        sketch_data,
        notes,
        {k: [c.header for c in v] for k, v in lay.columns.items()},
    )


def _held_while_input_moves(out: np.ndarray, e: np.ndarray, prev) -> np.ndarray:
    """Rows where the output holds still while the input moves, for two steps or more in a row
    (a clamped output), and the row where such a hold begins (the output reached the level there);
    ``prev`` is the (output, input) of the row before this chunk."""
    o = out if prev is None else np.r_[prev[0], out]
    x = e if prev is None else np.r_[prev[1], e]
    step = (o[1:] == o[:-1]) & (x[1:] != x[:-1])
    row = np.r_[False, step] if prev is None else step
    before = np.r_[False, row[:-1]]
    after = np.r_[row[1:], False]
    held = row & (before | after)
    return held | np.r_[held[1:], False]


def _spans(t, sat, spans, open_at):
    if not sat.any() and open_at is None:
        return None
    edges = np.diff(np.r_[0, sat.astype(np.int8), 0])
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    for s, e in zip(starts, ends):
        if s == 0 and open_at is not None:
            start = open_at
            open_at = None
        else:
            if open_at is not None:
                spans.append((open_at, float(t[0])))
                open_at = None
            start = float(t[s])
        if e == t.size - 1:
            open_at = start
        elif len(spans) < 1000:
            spans.append((start, float(t[e])))
    if not sat[0] and open_at is not None and not starts.size:
        spans.append((open_at, float(t[0])))
        open_at = None
    return open_at


def _solve_fit(normal: _Normal, terms: _PidTerms, given) -> PidLogFit:
    notes = []
    cols = list(terms.columns)
    keep = np.arange(len(cols) + 1)
    if terms.paths:
        # a setpoint that never moved leaves its columns (kp·b, kd·c) zero: the weights are not seen
        diag = np.diag(normal.xtx)
        scale = max(float(diag[:-1].max()), 1e-300)
        unseen = [i for i, n in enumerate(cols) if n in ("kp_b", "kd_c") and diag[i] <= 1e-20 * scale]
        if unseen:
            notes.append(
                "the setpoint did not move in the log: the setpoint weights b and c cannot be seen, and "
                "kp, ki, kd are fitted on the measurement alone"
            )
            keep = np.array([i for i in range(len(cols) + 1) if i not in unseen])
            cols = [n for i, n in enumerate(cols) if i not in unseen]
    xtx, xty = normal.xtx[np.ix_(keep, keep)], normal.xty[keep]
    p = xtx.shape[0]
    if normal.n <= p:
        raise InputError(f"too few usable rows to fit {p} values ({normal.n})", key="fit")
    try:
        theta = np.linalg.solve(xtx, xty)
        inv = np.linalg.inv(xtx)
    except np.linalg.LinAlgError:
        raise InputError(
            "the log does not excite the controller enough to tell its terms apart (the input is "
            "constant or too smooth)",
            key="fit",
        ) from None
    rss = max(normal.yty - 2 * theta @ xty + theta @ xtx @ theta, 0.0)
    sigma2 = rss / (normal.n - p)
    cov = inv * sigma2
    at = {n: i for i, n in enumerate(cols)}
    values, ci = {}, {}
    z95 = 1.959963984540054
    for n in ("kp", "ki", "kd"):
        if n in at:
            values[n] = float(theta[at[n]])
            ci[n] = float(z95 * np.sqrt(max(cov[at[n], at[n]], 0.0)))
    for w, num, den in (("b", "kp_b", "kp"), ("c", "kd_c", "kd")):
        if num in at and den in at:
            # the weight is a ratio of two fitted columns: its interval by the delta method
            i, j = at[num], at[den]
            q = theta[i] / theta[j]
            g = np.array([1.0 / theta[j], -theta[i] / theta[j] ** 2])
            var = g @ cov[np.ix_([i, j], [i, j])] @ g
            values[w], ci[w] = float(q), float(z95 * np.sqrt(max(var, 0.0)))
    if terms.paths and ("b" in values or "c" in values):
        notes.append(
            "setpoint and measurement each through its own path: the setpoint weights b and c are fitted "
            f"too (A has b = {terms.weights[0]:g}, c = {terms.weights[1]:g})"
        )
    elif not terms.paths:
        notes.append(
            "the log has the error only: the fit assumes the law acts on the error (b = c = 1); setpoint "
            "weights would need setpoint and measurement columns"
        )
    notes.append(
        "intervals assume independent residuals; a slowly wandering residual (unmeasured disturbance, "
        "a plant that drifts) makes them too narrow"
    )
    cond = np.linalg.cond(xtx)
    if cond > 1e12:
        notes.append(
            f"the terms are nearly indistinguishable in this log (condition number {cond:.2g}); the values "
            "are poorly determined"
        )
    names = tuple(n for n in ("kp", "ki", "kd", "b", "c") if n in values)
    return PidLogFit(
        names,
        values,
        ci,
        float(theta[-1]),
        float(np.sqrt(rss / normal.n)),
        normal.n,
        "PID block" if terms.block else "PID law",
        terms.tf,
        tuple(notes),
    )
