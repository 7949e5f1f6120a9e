"""The Python model of each structure's arithmetic in each word format: the reference the
generated code is checked against (bit for bit in fixed point and float32).

A model is stateful: ``reset()``, ``step(x) -> y`` (user units), ``run(xs) -> ys`` (the same
arithmetic over an array, from the current state), ``set_level(u)`` (the state of an
integrating controller holding output u with zero input; df2t: s_k = u·(−Σ_{j>k} a_j), the
factor a stored constant; delta: s_0 = u, s_k = a_k·u; each one product in the format). Fixed-point models also have
``step_int``/``run_int`` on words (the generated C's interface).

Operation order per section (the generated C follows it):

* ``df1``: ``acc = b0·x; acc += b1·x1; …; acc −= a1·y1; …`` then the histories shift (fixed
  point: the feed-forward sum is rounded down by the section's extra numerator bits first).
* ``df2t``: ``y = b0·x + s0; s_k = (b_{k+1}·x − a_{k+1}·y) + s_{k+1}; s_{m−1} = b_m·x − a_m·y``.
* ``delta``: ``y = b0·x + s0; w_k = (b_{k+1}·x − a_{k+1}·y) + s_{k+1}; s_k = s_k + Δ·w_k``
  (k ascending; ``s_m`` is 0).
Floating point rounds after every operation (numpy float32 scalars round as C float does in
ISO C mode without fused multiply-add).
"""

from __future__ import annotations

import numpy as np

from convert.digital.fixedpoint import Realized
from convert.digital.statewords import FixedStateModel, words_of


def model_of(real: Realized):
    if real.word.is_fixed and real.form != "df1":
        return FixedStateModel(real)
    return FixedModel(real) if real.word.is_fixed else FloatModel(real)


def saturating_cumsum(d: np.ndarray, y0: int, lo: int, hi: int) -> np.ndarray:
    """``y[n] = clip(y[n−1] + d[n], lo, hi)`` from ``y[−1] = y0`` for int64 ``d``, vectorized over
    samples: each step is the map y → min(H, max(L, y + D)), and such maps compose into one of
    the same kind (clamp(clamp(x, a, b), c, d) = clamp(x, min(max(a, c), d), max(min(b, d), c))),
    so a prefix scan (Hillis–Steele, log2 n passes) gives every y[n] exactly."""
    n = d.size
    plain = np.cumsum(d, dtype=np.int64) + np.int64(y0)
    if n == 0 or (plain.min() >= lo and plain.max() <= hi and lo <= y0 <= hi):
        return plain  # never reaches a limit: the plain running sum (the common case)
    dd = np.asarray(d, dtype=np.int64).copy()
    low = np.full(n, lo, dtype=np.int64)
    high = np.full(n, hi, dtype=np.int64)
    step = 1
    while step < n:
        # compose: the earlier map (index i − step) first, then the later one (index i)
        e_d, e_l, e_h = dd[:-step], low[:-step], high[:-step]
        g_d, g_l, g_h = dd[step:], low[step:], high[step:]
        a = e_l + g_d
        b = e_h + g_d
        new_l = np.minimum(np.maximum(a, g_l), g_h)
        new_h = np.maximum(np.minimum(b, g_h), g_l)
        dd[step:] = e_d + g_d
        low[step:], high[step:] = new_l, new_h
        step *= 2
    return np.minimum(np.maximum(dd + np.int64(y0), low), high)


def level_factor(a, k: int, cast=float):
    """DF2T state k per unit of held output: −(a_{k+1} + … + a_m), summed in double, then stored
    in the format (the generated code holds it as a constant)."""
    return cast(-sum(float(v) for v in a[k + 1 :]))


class FloatModel:
    def __init__(self, real: Realized):
        self.real = real
        self.cast = np.float32 if real.word.bits == 32 else float
        c = self.cast
        self.form = real.form
        self.coefs = [([c(v) for v in s.b], [c(v) for v in s.a]) for s in real.sections]
        self.delta = c(real.layout.delta_step) if real.layout.delta_step else None
        self._df1 = [(b[0], tuple(b[1:]), tuple(a[1:])) for b, a in self.coefs]
        self.reset()

    def reset(self) -> None:
        z = self.cast(0.0)
        if self.form == "df1":
            self.state = [([z] * (len(b) - 1), [z] * (len(a) - 1)) for b, a in self.coefs]
        else:
            self.state = [[z] * (len(a) - 1) for b, a in self.coefs]

    def set_level(self, u: float) -> None:
        """Steady state with zero input and output ``u``: only the last section (which holds the
        poles at z = 1) carries it."""
        self.reset()
        u = self.cast(u)
        a = self.coefs[-1][1]
        if self.form == "df1":
            xh, yh = self.state[-1]
            self.state[-1] = (xh, [u] * len(yh))
        elif self.form == "df2t":
            m = len(a) - 1
            with np.errstate(over="ignore", invalid="ignore"):
                self.state[-1] = [u * level_factor(a, k, self.cast) for k in range(m)]
        else:
            m = len(a) - 1
            with np.errstate(over="ignore", invalid="ignore"):
                self.state[-1] = [u] + [a[k] * u for k in range(1, m)]

    def _store(self, v):
        """A value (or an array of trials' values) stored in the format."""
        if isinstance(v, np.ndarray):
            return v.astype(np.float32 if self.cast is np.float32 else np.float64)
        return self.cast(v)

    def load(self, states) -> None:
        """Per-section states in user values (df1: (x history, y history); df2t/delta: s list),
        stored in the format; a value may be an array (one entry per trial, for
        :meth:`step_batch`)."""
        c = self._store
        if self.form == "df1":
            self.state = [([c(v) for v in xh], [c(v) for v in yh]) for xh, yh in states]
        else:
            self.state = [[c(v) for v in st] for st in states]

    def step(self, x) -> float:
        with np.errstate(over="ignore", invalid="ignore"):
            return self._step(x)

    def kernel(self) -> tuple[list[str], dict, list[tuple[str, object]]]:
        """The step as straight-line Python source, for a caller that compiles it into its own
        loop (the closed-loop run, :func:`convert.compare.loop._simulate_realized`):
        ``(lines, constants, states)``. The lines take the input in ``v`` and leave the output
        (in the format's type) in ``v``, with the operations of :meth:`step` in its order;
        ``constants`` maps the names they use to the stored coefficients (and ``_C``, the cast);
        ``states`` lists (name, value) of the current state, in the order
        :meth:`store_kernel_states` takes them back."""
        lines = ["v = _C(v)"]
        consts: dict = {"_C": self.cast}
        states: list[tuple[str, object]] = []
        for i, (b, a) in enumerate(self.coefs):
            consts.update({f"b{i}_{k}": c for k, c in enumerate(b)})
            consts.update({f"a{i}_{k}": c for k, c in enumerate(a)})
            if self.form == "df1":
                xh, yh = self.state[i]
                states += [(f"xh{i}_{j}", val) for j, val in enumerate(xh)]
                states += [(f"yh{i}_{j}", val) for j, val in enumerate(yh)]
                lines.append(f"acc = b{i}_0 * v")
                lines += [f"acc = acc + b{i}_{k} * xh{i}_{k - 1}" for k in range(1, len(b))]
                lines += [f"acc = acc - a{i}_{k} * yh{i}_{k - 1}" for k in range(1, len(a))]
                if xh:  # the histories shift (as insert(0, ·), pop())
                    lines += [f"xh{i}_{j} = xh{i}_{j - 1}" for j in range(len(xh) - 1, 0, -1)] + [f"xh{i}_0 = v"]
                    lines += [f"yh{i}_{j} = yh{i}_{j - 1}" for j in range(len(yh) - 1, 0, -1)]
                    lines += [f"yh{i}_0 = acc"] if yh else []
                lines.append("v = acc")
                continue
            st = self.state[i]
            states += [(f"s{i}_{k}", val) for k, val in enumerate(st)]
            m = len(a) - 1
            lines.append(f"yy = b{i}_0 * v + s{i}_0" if m else f"yy = b{i}_0 * v")
            for k in range(m):
                lines.append(f"t = b{i}_{k + 1} * v - a{i}_{k + 1} * yy")
                nxt = f"t + s{i}_{k + 1}" if k + 1 < m else "t"
                if self.form == "df2t":
                    lines.append(f"s{i}_{k} = {nxt}")
                else:
                    consts["dl"] = self.delta
                    lines += [f"w = {nxt}", f"s{i}_{k} = s{i}_{k} + dl * w"]
            lines.append("v = yy")
        return lines, consts, states

    def store_kernel_states(self, values) -> None:
        """The state after a compiled run: ``values`` in the order of :meth:`kernel`'s states."""
        it = iter(values)
        if self.form == "df1":
            self.state = [([next(it) for _ in xh], [next(it) for _ in yh]) for xh, yh in self.state]
        else:
            self.state = [[next(it) for _ in st] for st in self.state]

    def unguarded_step(self, x) -> float:
        """:meth:`step` for a caller that holds ``np.errstate(over="ignore", invalid="ignore")``
        (entering that context costs about a microsecond, as much as a step)."""
        return self._step(x)

    def _step(self, x) -> float:
        # the caller holds np.errstate (overflow to inf is the format's behaviour)
        if self.form == "df1":
            return float(self._step_df1(self.cast(x)))
        return float(self._step_states(self.cast(x)))

    def step_batch(self, x: np.ndarray) -> np.ndarray:
        """:meth:`step` vectorized over trials: ``x`` one input per trial (user units), the
        states loaded as arrays (:meth:`load`); the same operations in the same order, each
        rounded to the format elementwise. Returns the outputs (float64 array)."""
        with np.errstate(over="ignore", invalid="ignore"):
            v = self._store(np.asarray(x, dtype=float))
            return np.asarray(self._step_df1(v) if self.form == "df1" else self._step_states(v), dtype=float)

    def _step_states(self, v):
        """Direct form II transposed and delta sections (module doc), ``v`` stored in the format."""
        for i, (b, a) in enumerate(self.coefs):
            if self.form == "df2t":
                s = self.state[i]
                m = len(a) - 1
                y = b[0] * v + s[0] if m else b[0] * v
                for k in range(m):
                    t = b[k + 1] * v - a[k + 1] * y
                    s[k] = t + s[k + 1] if k + 1 < m else t
                v = y
            else:
                s = self.state[i]
                m = len(a) - 1
                y = b[0] * v + s[0] if m else b[0] * v
                for k in range(m):
                    t = b[k + 1] * v - a[k + 1] * y
                    w = t + s[k + 1] if k + 1 < m else t
                    s[k] = s[k] + self.delta * w
                v = y
        return v

    def _step_df1(self, v):
        """``acc = b0·x; acc += b1·x1; …; acc −= a1·y1; …`` per section, then the histories shift
        (``v`` stored in the format)."""
        for (b0, b_rest, a_rest), (xh, yh) in zip(self._df1, self.state):
            acc = b0 * v
            for bk, xk in zip(b_rest, xh):
                acc = acc + bk * xk
            for ak, yk in zip(a_rest, yh):
                acc = acc - ak * yk
            if xh:
                xh.insert(0, v)
                xh.pop()
                yh.insert(0, acc)
                yh.pop()
            v = acc
        return v

    def run(self, xs) -> np.ndarray:
        with np.errstate(over="ignore", invalid="ignore"):
            return np.array([self._step(x) for x in np.asarray(xs, dtype=float)])


class FixedModel:
    """Direct form I sections on words (see :mod:`convert.digital.wordformats` for rounding and
    saturation). User units: input word = round(x / R · 2^(W−1)), output = word · S_last / 2^(W−1)."""

    def __init__(self, real: Realized):
        self.real = real
        w = real.word
        self.lo, self.hi = w.word_min, w.word_max
        self.full = 1 << (w.bits - 1)
        self.secs = [(list(s.b_int), list(s.a_int[1:]), s.shift) for s in real.sections]
        self.b_shifts = [s.b_shift for s in real.sections]
        self.round_half = w.rounding == "half-up"
        self.reset()

    def reset(self) -> None:
        self.state = [([0] * (len(b) - 1), [0] * len(a)) for b, a, _ in self.secs]

    def to_word(self, x: float) -> int:
        import math

        v = math.floor(float(x) / self.real.input_range * self.full + 0.5)
        return self.lo if v < self.lo else self.hi if v > self.hi else int(v)

    def step_batch(self, x: np.ndarray) -> np.ndarray:
        """:meth:`step` vectorized over trials (``x`` one input per trial, user units; the states
        loaded as arrays by :meth:`load`): the same integer operations on int64 words."""
        v = words_of(x, self.real.input_range, self.full, self.lo, self.hi)
        return self.step_int(v).astype(float) * (self.real.node_scales[-1] / self.full)

    def kernel(self) -> tuple[list[str], dict, list[tuple[str, object]]]:
        """:meth:`step` as straight-line Python source (to_word, :meth:`step_int`, from_word, in
        their order), as :meth:`FloatModel.kernel` describes: the input in ``v``, the output
        (user units) left in ``v``."""
        import math

        consts: dict = {"_floor": math.floor, "R": self.real.input_range, "FULL": self.full}
        consts.update({"LO": self.lo, "HI": self.hi, "SCALE": self.real.node_scales[-1]})
        lines = ["v = _floor(float(v) / R * FULL + 0.5)", "v = LO if v < LO else HI if v > HI else int(v)"]
        states: list[tuple[str, object]] = []
        for i, ((b, a, sh), (xh, yh)) in enumerate(zip(self.secs, self.state)):
            consts.update({f"b{i}_{k}": c for k, c in enumerate(b)})
            consts.update({f"a{i}_{k}": c for k, c in enumerate(a)})
            states += [(f"xh{i}_{j}", val) for j, val in enumerate(xh)]
            states += [(f"yh{i}_{j}", val) for j, val in enumerate(yh)]
            lines.append(f"acc = b{i}_0 * v")
            lines += [f"acc = acc + b{i}_{k} * xh{i}_{k - 1}" for k in range(1, len(b))]
            e = self.b_shifts[i]
            if e:
                lines.append(f"acc = (acc + {(1 << (e - 1)) if self.round_half else 0}) >> {e}")
            lines += [f"acc = acc - a{i}_{k} * yh{i}_{k}" for k in range(len(a))]
            lines.append(f"yy = (acc + {(1 << (sh - 1)) if self.round_half else 0}) >> {sh}")
            lines.append("yy = LO if yy < LO else HI if yy > HI else yy")
            if xh:
                lines += [f"xh{i}_{j} = xh{i}_{j - 1}" for j in range(len(xh) - 1, 0, -1)] + [f"xh{i}_0 = v"]
            if yh:
                lines += [f"yh{i}_{j} = yh{i}_{j - 1}" for j in range(len(yh) - 1, 0, -1)] + [f"yh{i}_0 = yy"]
            lines.append("v = yy")
        lines.append("v = float(v) * SCALE / FULL")
        return lines, consts, states

    def store_kernel_states(self, values) -> None:
        """The state after a compiled run: ``values`` in the order of :meth:`kernel`'s states."""
        it = iter(values)
        self.state = [([next(it) for _ in xh], [next(it) for _ in yh]) for xh, yh in self.state]

    def from_word(self, v) -> float:
        return float(v) * self.real.node_scales[-1] / self.full

    def set_level(self, u: float) -> None:
        import math

        self.reset()
        v = math.floor(u / self.real.node_scales[-1] * self.full + 0.5)
        self.set_level_word(self.lo if v < self.lo else self.hi if v > self.hi else int(v))

    def load(self, states) -> None:
        """Per-section (x history, y history) in user values, rounded to words of each node."""
        import math

        sc = self.real.node_scales

        def word(v, scale):
            if isinstance(v, np.ndarray):
                return words_of(v, scale, self.full, self.lo, self.hi)
            w = math.floor(v / scale * self.full + 0.5)
            return self.lo if w < self.lo else self.hi if w > self.hi else int(w)

        self.state = [
            ([word(v, sc[i]) for v in xh], [word(v, sc[i + 1]) for v in yh]) for i, (xh, yh) in enumerate(states)
        ]

    def set_level_word(self, v: int) -> None:
        """:meth:`set_level` with the output word given (the generated C's ``set_output``)."""
        self.reset()
        xh, yh = self.state[-1]
        self.state[-1] = (xh, [int(v)] * len(yh))

    def step_int(self, v: int) -> int:
        lo, hi = self.lo, self.hi
        for i, (b, a, sh) in enumerate(self.secs):
            xh, yh = self.state[i]
            acc = b[0] * v
            for k in range(1, len(b)):
                acc += b[k] * xh[k - 1]
            e = self.b_shifts[i]
            if e:
                acc = (acc + ((1 << (e - 1)) if self.round_half else 0)) >> e
            for k in range(len(a)):
                acc -= a[k] * yh[k]
            y = (acc + ((1 << (sh - 1)) if self.round_half else 0)) >> sh
            y = np.clip(y, lo, hi) if isinstance(y, np.ndarray) else lo if y < lo else hi if y > hi else y
            if xh:
                xh.insert(0, v)
                xh.pop()
            if yh:
                yh.insert(0, y)
                yh.pop()
            v = y
        return v

    def step(self, x: float) -> float:
        return self.from_word(self.step_int(self.to_word(x)))

    def run(self, xs) -> np.ndarray:
        words = [self.to_word(x) for x in np.asarray(xs, dtype=float)]
        return self.run_int(words).astype(float) * (self.real.node_scales[-1] / self.full)

    def run_int(self, words) -> np.ndarray:
        """The same arithmetic as :meth:`step_int` over a sequence of words, one section at a
        time: the feed-forward sums as an exact integer convolution, the feedback in a loop."""
        v = np.asarray(words, dtype=np.int64)
        lo, hi = self.lo, self.hi
        for i, (b, a, sh) in enumerate(self.secs):
            xh, yh = self.state[i]
            nb = len(b)
            ext = np.concatenate([np.asarray(xh[::-1], dtype=np.int64), v]) if xh else v
            ff = np.convolve(ext, np.asarray(b, dtype=np.int64))[nb - 1 : nb - 1 + v.size] if nb > 1 else v * b[0]
            e = self.b_shifts[i]
            if e:
                ff = (ff + ((1 << (e - 1)) if self.round_half else 0)) >> e
            half = (1 << (sh - 1)) if self.round_half else 0
            ffl = (ff + half).tolist()  # the rounding half added once, vectorized
            m = len(a)
            if m == 0:
                out = [lo if y < lo else hi if y > hi else y for y in (f >> sh for f in ffl)]
            elif m == 1 and a[0] == -(1 << sh):
                # an integrator alone: y = clip(y1 + ((f + half) >> sh)) exactly (2^sh·y1 is a
                # multiple of 2^sh), a saturating running sum, computed as a prefix scan
                (y1,) = yh
                out_arr = saturating_cumsum((ff + half) >> sh, y1, lo, hi)
                out = out_arr.tolist()
                yh = [out[-1]] if out else [y1]
            elif m == 1:
                out = []
                append = out.append
                (a1,) = a
                (y1,) = yh
                for f in ffl:
                    y1 = (f - a1 * y1) >> sh
                    if y1 > hi:
                        y1 = hi
                    elif y1 < lo:
                        y1 = lo
                    append(y1)
                yh = [y1]
            elif m == 2:
                out = []
                append = out.append
                a1, a2 = a
                y1, y2 = yh
                for f in ffl:
                    y = (f - a1 * y1 - a2 * y2) >> sh
                    if y > hi:
                        y = hi
                    elif y < lo:
                        y = lo
                    y2 = y1
                    y1 = y
                    append(y)
                yh = [y1, y2]
            else:
                out = []
                hist = list(yh)
                for f in ffl:
                    acc = f
                    for k in range(m):
                        acc -= a[k] * hist[k]
                    y = acc >> sh
                    y = lo if y < lo else hi if y > hi else y
                    hist.insert(0, y)
                    hist.pop()
                    out.append(y)
                yh = hist
            allx = list(xh[::-1]) + v.tolist()
            newx = allx[::-1][: len(xh)] if xh else []
            self.state[i] = (newx, list(yh))
            v = np.asarray(out, dtype=np.int64)
        return v
