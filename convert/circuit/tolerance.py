"""Part tolerances: one Monte Carlo engine (seeded, chunked, bounded memory) and worst-case corners.

Tolerances are fractions per part kind (``"R"``, ``"C"``) or per part name (``"R3"``), e.g.
``{"R": 0.01, "C": 0.05}``. A draw sets each part to ``nominal · (1 + t·u)``:

* ``distribution="uniform"`` (default): u uniform on [−1, 1] — every value inside the tolerance
  equally likely, the usual assumption when nothing is known of the maker's spread;
* ``distribution="normal"``: u normal with σ = 1/3, the tolerance read as a 3σ limit.

Every command that draws parts (``loopshift circuit``, ``loopshift report``) goes through
:func:`run_tolerances`, so one design, seed, draw count and distribution give one set of figures.
Defaults (:data:`DEFAULT_DRAWS` = 10,000, uniform, :data:`FIGURE_PERCENTILE` = 99 %) are the same
everywhere; :data:`MAX_DRAWS` = 1,000,000 is the cap on the command line and in case files.

The figures (one definition each, see docs/circuits.md "Part tolerances")
--------------------------------------------------------------------------
* **max gain error** / **max phase error** of a comparison: for each draw, the largest |gain
  error| (dB) and |phase error| (deg, unwrapped along frequency) over the band grid against the
  comparison's reference response; the figure is the 99th percentile of these per-draw maxima
  (linear interpolation between order statistics, numpy's default). ``*_at_hz`` is where the draw
  at that percentile (the nearer order statistic) has its largest error.
* **margin changes** (with a plant): per draw, the loop's phase margin, gain margin and sensitivity
  peak minus the reference loop's; the figure is the 99th percentile of |change| over the draws
  that have the figure, signed as the draw nearest that level.
* **band**: per frequency, the 0.5 % and 99.5 % percentiles of gain (dB) and phase (deg) across
  the draws — 99 % of draws lie inside. No median: it is the one percentile a streaming
  selection cannot keep in bounded memory, and the nominal curve is drawn instead.
* **design quantities**: 0.5 % and 99.5 % percentiles of each quantity the parts set.

How it runs in bounded memory
-----------------------------
Draws are made and reduced in chunks (:data:`DEFAULT_CHUNK` draws). Each part has its own random
stream (spawned from the seed), so the draws — and every figure — are the same whatever the chunk
size. A chunk is reduced at once to the per-draw figures; the percentiles need only the tail of
each distribution (e.g. the top 1 % + 2 values for a 99th percentile), kept by an exact streaming
selection (a threshold comparison, then a partition of the few values above it; no sort of all
draws). Memory is O(chunk × frequencies + draws / 100) — at 1e6 draws the tails hold about 1 %.
Chunks are drawn in order on the calling thread and may be shared among worker threads
(``workers``; one by default, as two measured no faster on this machine), each with its own
buffers and selections; the selections merge exactly, so neither the chunk size nor the number
of workers changes a figure (tested). By default a run of many draws shares its chunks with a
helper process on the second core instead (convert.sidework): both draw the same sequence, each
reduces every other chunk, and the helper's selections are merged the same exact way.

Arithmetic: without an op-amp model the responses come from the topology's polynomial
coefficients in float32 real arithmetic (each frequency scaled by the nominal denominator's size there),
as the ratio to the reference; the gain is taken on |ratio|² and the phase on a rational
"diamond" angle of the ratio, both monotone, so logarithms and arctangents run only on per-draw
figures and selected order statistics. Bound (tested against the float64 path in
tests/test_circuit_tolerance.py): 1e-3 dB and 1e-3° on every figure. With an op-amp model the
same path runs on the circuit written out as polynomials in s
(:func:`convert.circuit.topologies.model.circuit_polynomials`) when a trial on the nominal parts
agrees with float64 (``_Worker._opamp_grids``), else on the node-by-node solution in float64.
Loop margins and the stability count run in float64.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from collections.abc import Callable, Iterator, Mapping, Sequence

import numpy as np

from convert.errors import InputError
from convert.values import parse_fraction
from convert.compare.frequency import unwrapped_phase_error_deg
from convert.circuit.opamp import gbw_response
from convert.circuit.topologies.model import circuit_polynomials
from convert import sidework

DEFAULT_TOLERANCES = {"R": 0.01, "C": 0.05}
DEFAULT_DRAWS = 10_000
MAX_DRAWS = 1_000_000
DEFAULT_DISTRIBUTION = "uniform"
DISTRIBUTIONS = ("uniform", "normal")
FIGURE_PERCENTILE = 99.0
BAND_PERCENTILES = (0.5, 99.5)
DEFAULT_CHUNK = 2048
FLOAT32_BOUND = 1e-3  # dB and degrees: float32 figures against float64 (tested)

# The fewest Monte Carlo draws whose outer percentiles mean something: the figures shown are the
# 99th percentile (verdict, budget) and the 0.5 / 99.5 % envelope, and a 0.5 % tail holds at least
# one draw only from 1 / 0.005 = 200 draws; with fewer the "percentile" is the largest draw or an
# interpolation towards it. Used by the case file's draws and every --draws option.
MIN_DRAWS = math.ceil(100 / min(BAND_PERCENTILES[0], 100 - BAND_PERCENTILES[1]) - 1e-9)  # 200


def draws_problem(draws: int) -> str | None:
    """Why ``draws`` Monte Carlo draws are too few to report (None when enough)."""
    if draws >= MIN_DRAWS:
        return None
    return (
        f"expected at least {MIN_DRAWS} Monte Carlo draws, found {draws}: the 99th percentile and the "
        f"0.5-99.5 % envelope reported need {MIN_DRAWS} for a draw to lie beyond each"
    )


def parse_tolerances(
    words: Sequence[str] | None, *, part_names: Sequence[str] = (), where: str = "tolerance"
) -> dict[str, float]:
    """Read ``["R=1%", "C=5%", "R3=0.1%"]`` into fractions; defaults R 1 %, C 5 %."""
    out = dict(DEFAULT_TOLERANCES)
    for word in words or ():
        if "=" not in word:
            raise InputError(f"expected KIND=PERCENT such as R=1% or C=5%, found {word!r}", where=where)
        key, _, value = word.partition("=")
        key = key.strip()
        if key.upper() in ("R", "C"):
            key = key.upper()
        elif part_names and key not in part_names:
            raise InputError(f"unknown part {key!r}; give R, C or one of {', '.join(part_names)}", where=where, key=key)
        text = value.strip()
        try:
            frac = parse_fraction(text, field=key, allow_one=False)
        except InputError as exc:
            raise InputError(exc.message, where=where, key=key) from None
        if not (0 <= frac < 1):
            raise InputError(f"a tolerance must be from 0 % to below 100 %, found {text!r}", where=where, key=key)
        out[key] = frac
    return out


def tolerance_of(part, tolerances: Mapping[str, float]) -> float:
    return float(tolerances.get(part.name, tolerances.get(part.kind, 0.0)))


def check_draws(draws, key: str = "draws", *, allow_zero: bool = False) -> int:
    """``draws`` as an int in 1..MAX_DRAWS (0 allowed with ``allow_zero``), else InputError."""
    low = 0 if allow_zero else 1
    if isinstance(draws, bool) or not isinstance(draws, (int, np.integer)) or not (low <= draws <= MAX_DRAWS):
        raise InputError(
            f"the number of draws must be a whole number from {low} to {MAX_DRAWS:,} (the limit keeps a "
            f"run within about 1 GB), found {draws!r}",
            key=key,
        )
    return int(draws)


def _check_distribution(distribution: str) -> str:
    if distribution not in DISTRIBUTIONS:
        raise InputError(f"unknown distribution {distribution!r}; expected uniform or normal", key="distribution")
    return distribution


class PartDraws:
    """Seeded part draws delivered in chunks; the values do not depend on the chunk size.

    Each part with a tolerance has its own generator spawned from ``seed`` (numpy's
    ``SeedSequence.spawn``, in the topology's part order), read sequentially. Open parts (∞ or 0)
    and parts without tolerance stay at their nominal value."""

    def __init__(
        self,
        topology,
        parts: Mapping[str, float],
        tolerances: Mapping[str, float],
        seed: int,
        distribution: str = DEFAULT_DISTRIBUTION,
    ):
        _check_distribution(distribution)
        checked = topology.check_parts(parts)
        self.names = [p.name for p in topology.parts]
        self.nominal = {p.name: float(checked[p.name]) for p in topology.parts}
        self.tol = {p.name: tolerance_of(p, tolerances) for p in topology.parts}
        streams = np.random.SeedSequence(int(seed)).spawn(len(self.names))
        self.rng = {n: np.random.default_rng(s) for n, s in zip(self.names, streams)}
        self.distribution = distribution

    def take(self, n: int) -> dict[str, np.ndarray]:
        """The next ``n`` draws: name -> array (n,)."""
        out = {}
        for name in self.names:
            nominal, t = self.nominal[name], self.tol[name]
            if not math.isfinite(nominal) or nominal == 0 or t == 0:
                out[name] = np.full(n, nominal)
                continue
            rng = self.rng[name]
            u = rng.uniform(-1.0, 1.0, n) if self.distribution == "uniform" else rng.standard_normal(n) / 3.0
            out[name] = nominal * (1.0 + t * u)
        return out

    def chunks(self, draws: int, chunk: int) -> Iterator[dict[str, np.ndarray]]:
        for start in range(0, draws, chunk):
            yield self.take(min(chunk, draws - start))


def draw_parts(
    topology,
    parts: Mapping[str, float],
    tolerances: Mapping[str, float],
    draws: int,
    seed: int,
    distribution: str = DEFAULT_DISTRIBUTION,
) -> dict[str, np.ndarray]:
    """All ``draws`` part sets at once (name -> array (draws,)): the same values the engine draws in
    chunks. For small draw counts (tests, a python-control cross-check)."""
    return PartDraws(topology, parts, tolerances, seed, distribution).take(check_draws(draws))


# ----------------------------------------------------------------------------------- selection


class TailSelection:
    """Exact streaming selection of the ``m`` largest values in each row of a stream of blocks.

    ``add(x)`` takes (rows, n); values not above the row's m-th largest (as of the last merge)
    are dropped by one comparison; the rest wait and are merged by one partition of
    (rows, m + waiting) once about m have gathered. Non-finite values: NaN is never kept; +inf is
    kept (it ranks above everything) when ``keep_inf``. With ``payload`` each value carries an
    integer (the draw number, increasing along the stream) and ties rank the earlier payload
    higher, so the kept set is the same however the stream is cut."""

    def __init__(self, rows: int, m: int, *, keep_inf: bool = False, payload: bool = False, lower: bool = False):
        self.m = max(int(m), 1)
        self.vals = np.full((rows, self.m), -np.inf)  # lower tail: the negated values
        self.count = np.zeros(rows, dtype=np.int64)
        self.keep_inf = keep_inf
        self.lower = lower
        self.pay = np.full((rows, self.m), -1, dtype=np.int64) if payload else None
        self.aux = np.full((rows, self.m), np.nan) if payload else None  # a number carried with each value
        self._wait_aux: list = []
        self._thr = self.vals[:, :1].copy()
        self._wait: list = []
        self._wait_pay: list = []
        self._waiting = 0

    def add(self, x: np.ndarray, payload: np.ndarray | None = None, aux=None, *, finite: bool = False) -> None:
        """Take the block ``x`` (rows, n); ``finite=True`` when the caller knows every value is finite.
        With payloads, ``aux(columns)`` gives the number carried with each value that passed the
        threshold (computed for those columns only)."""
        x = np.asarray(x)
        rows, n = x.shape
        if self.vals.dtype != x.dtype and x.dtype == np.float32 and not self._wait and self.count.max() == 0:
            self.vals = self.vals.astype(np.float32)  # float32 data: float32 tails (exact, half the memory)
            self._thr = self._thr.astype(np.float32)
        if finite or np.isfinite(x.sum(axis=1)).all():  # a fast reduction finds blocks that need a look
            self.count += n
            bad = None
        else:
            bad = ~np.isfinite(x) if not self.keep_inf else np.isnan(x)
            if self.lower and self.keep_inf:
                bad |= np.isposinf(x)  # +inf is the bottom of a lower tail: never kept, still counted
                self.count += n - np.count_nonzero(np.isnan(x), axis=1)
            else:
                self.count += n - np.count_nonzero(bad, axis=1)
        thr = self._thr.astype(x.dtype)
        mask = (x < -thr) if self.lower else (x > thr)
        if bad is not None:
            mask &= ~bad
        if self.pay is None and self._thr.min() == -np.inf:  # the first block: everything is a candidate
            cand = np.where(mask, -x if self.lower else x, -np.inf).astype(self.vals.dtype)
            self._wait.append(cand)
            self._waiting += n
            if self._waiting >= self.m:
                self._merge()
            return
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            return
        r_idx = idx // n
        c_idx = idx - r_idx * n
        counts = np.bincount(r_idx, minlength=rows)
        c = int(counts.max())
        starts = np.cumsum(counts) - counts
        pos = np.arange(r_idx.size) - starts[r_idx]
        cand = np.full((rows, c), -np.inf, dtype=self.vals.dtype)
        vals = x.ravel()[idx]
        cand[r_idx, pos] = -vals if self.lower else vals
        if self.pay is not None:
            cp = np.full((rows, c), -1, dtype=np.int64)
            cp[r_idx, pos] = payload[c_idx]
            self._wait_pay.append(cp)
            ca = np.full((rows, c), np.nan)
            if aux is not None:
                ca[r_idx, pos] = aux(c_idx)
            self._wait_aux.append(ca)
        self._wait.append(cand)
        self._waiting += c
        if self._waiting >= self.m:
            self._merge()

    def _merge(self) -> None:
        if not self._wait:
            return
        merged = np.concatenate([self.vals] + self._wait, axis=1)
        self._wait, self._waiting = [], 0
        if self.pay is None:
            k = merged.shape[1] - self.m
            self.vals = np.partition(merged, k, axis=1)[:, k:]
        else:
            mp = np.concatenate([self.pay] + self._wait_pay, axis=1)
            ma = np.concatenate([self.aux] + self._wait_aux, axis=1)
            self._wait_pay, self._wait_aux = [], []
            big = np.iinfo(np.int64).max
            for r in range(merged.shape[0]):  # payload rows are few (scalar figures): a sort with a tie rule
                order = np.lexsort((np.where(mp[r] < 0, big, mp[r]), -merged[r]))[: self.m]
                self.vals[r], self.pay[r], self.aux[r] = merged[r, order], mp[r, order], ma[r, order]
        self._thr = self.vals.min(axis=1, keepdims=True)

    def merge(self, other: TailSelection) -> None:
        """Take in another selection over a different part of the same stream (exact)."""
        other._merge()
        if self.vals.dtype != other.vals.dtype:
            self.vals = self.vals.astype(float)
            self._thr = self._thr.astype(float)
        self.count += other.count
        self._wait.append(other.vals.astype(self.vals.dtype))
        if self.pay is not None:
            self._wait_pay.append(other.pay)
            self._wait_aux.append(other.aux)
        self._waiting += other.m
        self._merge()

    def sorted_desc(self) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
        """The kept values, largest first (rows, m), and their payloads and carried numbers."""
        self._merge()
        if self.pay is None:
            return -np.sort(-self.vals, axis=1), None, None
        order = np.lexsort((np.where(self.pay < 0, np.iinfo(np.int64).max, self.pay), -self.vals), axis=1)
        return (
            np.take_along_axis(self.vals, order, 1),
            np.take_along_axis(self.pay, order, 1),
            np.take_along_axis(self.aux, order, 1),
        )


def _upper_need(q: float, n: int) -> int:
    """How many of the largest values the q-th percentile of n values needs."""
    return n - int(math.floor(q / 100.0 * (n - 1))) if n else 1


def _upper_percentile(sel: TailSelection, q: float, transform=None):
    """The q-th percentile per row (numpy's linear method) from the kept top values, the
    transform applied to the two order statistics first; with the carried number of the nearer
    one (the value nearest the percentile). Rows with no value give NaN."""
    top, pay, aux = sel.sorted_desc()
    tf = transform or (lambda v: v)
    out, nearest = np.full(top.shape[0], np.nan), np.full(top.shape[0], np.nan)
    for r, n in enumerate(sel.count):
        if n == 0:
            continue
        h = q / 100.0 * (n - 1)
        lo = int(math.floor(h))
        hi = min(lo + 1, n - 1)
        a, b = tf(top[r, n - 1 - lo]), tf(top[r, n - 1 - hi])
        out[r] = a + (h - lo) * (b - a)
        if aux is not None:
            nearest[r] = aux[r, n - 1 - (lo if h - lo <= 0.5 else hi)]
    return out, nearest


class RowPercentiles:
    """Low and high percentiles (e.g. 0.5 and 99.5) of each row over a stream of (rows, n) blocks,
    exact, in memory O(rows × n_total × tail fraction)."""

    def __init__(self, rows: int, total: int, q: Sequence[float] = BAND_PERCENTILES):
        lo_q, hi_q = q
        self.q = (float(lo_q), float(hi_q))
        self.low = TailSelection(rows, _upper_need(100.0 - lo_q, total), lower=True)
        self.high = TailSelection(rows, _upper_need(hi_q, total))

    def add(self, x: np.ndarray, *, finite: bool = False) -> None:
        with np.errstate(over="ignore", invalid="ignore"):
            finite = finite or bool(np.isfinite(x.sum()))  # one fast reduction for both tails
        self.high.add(x, finite=finite)
        self.low.add(x, finite=finite)

    def merge(self, other: RowPercentiles) -> None:
        self.high.merge(other.high)
        self.low.merge(other.low)

    def result(self, transform=None) -> np.ndarray:
        """(2, rows): the low and high percentile, ``transform`` (monotone increasing) applied to the
        order statistics before the interpolation."""
        tf = transform or (lambda v: v)
        hi, _ = _upper_percentile(self.high, self.q[1], tf)
        lo, _ = _upper_percentile(self.low, 100.0 - self.q[0], lambda v: -tf(-v))
        return np.vstack([-lo, hi])


def percentiles(x: np.ndarray, q: Sequence[float]) -> np.ndarray:
    """Percentiles ``q`` (each below 50 or above 50, as a pair low/high) of x along its last axis
    by the streaming selection, in blocks of 4096 — equal to ``np.percentile(x, q, axis=-1)``."""
    x2 = np.asarray(x, dtype=float).reshape(-1, np.shape(x)[-1])
    sel = RowPercentiles(x2.shape[0], x2.shape[1], q)
    for i in range(0, x2.shape[1], 4096):
        sel.add(x2[:, i : i + 4096])
    return sel.result().reshape((2,) + np.shape(x)[:-1])


# ----------------------------------------------------------------------------------- responses


def _diamond(qr: np.ndarray, qi: np.ndarray) -> np.ndarray:
    """A rational angle of qr + j·qi, monotone in the true angle on (−180°, 180°] and odd:
    y/(|x|+|y|) on the right half plane, ±2 − that on the left (|d| ≤ 1 ⇔ |angle| ≤ 90°)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        d = qi / (np.abs(qr) + np.abs(qi))
    if np.any(qr < 0):
        d = np.where(qr < 0, np.where(qi >= 0, 2.0, -2.0).astype(d.dtype) - d, d)
    return d


def unwrapped_peak(d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Largest |phase| (degrees) of each column of diamond angles ``d`` (frequency along axis 0,
    draws along axis 1) unwrapped along frequency from the first point, and the row where it lies.

    The rule is :func:`numpy.unwrap`'s (a step of more than 180° is taken the short way round,
    exactly ±180° is kept), applied in the diamond's own units: it is monotone and odd, and a half
    turn is exactly 2 units (a step passes 180° exactly when it passes 2 units), so the turns are
    counted there and only the extreme of each column is turned into degrees. A column with
    non-finite points is unwrapped across its finite points
    (:func:`convert.compare.frequency.unwrapped_phase_error_deg`), its gaps counted as 180°.
    """
    d = np.asarray(d)
    peak = np.empty(d.shape[1])
    at = np.empty(d.shape[1], dtype=np.int64)
    gaps = ~np.isfinite(d).all(axis=0)
    if gaps.any():
        ratio = np.exp(1j * np.radians(diamond_to_deg(d[:, gaps].T)))
        err = np.nan_to_num(np.abs(unwrapped_phase_error_deg(ratio)), nan=180.0)
        peak[gaps], at[gaps] = err.max(axis=1), err.argmax(axis=1)
    cols = np.nonzero(~gaps)[0]
    if cols.size:
        x = d[:, cols]
        step = np.diff(x, axis=0)
        turns = np.zeros(x.shape, dtype=np.int32)
        np.cumsum((step < -2).astype(np.int32) - (step > 2), axis=0, out=turns[1:])
        u = x + (4 * turns).astype(x.dtype)  # unwrapped, in diamond units (4 = one turn)
        rows = np.argmax(np.abs(u), axis=0)
        pick = (rows, np.arange(cols.size))
        peak[cols] = np.abs(_turned_diamond_to_deg(x[pick].astype(float) + 4.0 * turns[pick]))  # float64 sum
        at[cols] = rows
    return peak, at


def _turned_diamond_to_deg(u: np.ndarray) -> np.ndarray:
    """Degrees of an unwrapped diamond angle ``u`` (any real: 4 units per turn)."""
    t = np.floor((u + 2.0) / 4.0)
    w = u - 4.0 * t  # in [−2, 2)
    return np.where(w <= -2.0, -180.0, diamond_to_deg(w)) + 360.0 * t


def diamond_to_deg(d: np.ndarray) -> np.ndarray:
    """Degrees of a :func:`_diamond` angle (exact inverse)."""
    d = np.asarray(d, dtype=float)
    r = np.where(np.abs(d) <= 1, d, np.sign(d) * 2 - d)
    x = np.where(np.abs(d) <= 1, 1.0 - np.abs(r), -(1.0 - np.abs(r)))
    return np.degrees(np.arctan2(r, x))


def _cmul(ar, ai, br, bi, out_r, out_i, tmp, *, conj: bool = False) -> None:
    """(ar + j·ai)·(br ± j·bi) into ``out_r``, ``out_i`` (``conj``: the minus sign), in place."""
    np.multiply(ar, br, out=out_r)
    np.multiply(ai, bi, out=tmp)
    if conj:
        out_r += tmp
    else:
        out_r -= tmp
    np.multiply(ai, br, out=out_i)
    np.multiply(ar, bi, out=tmp)
    if conj:
        out_i -= tmp
    else:
        out_i += tmp


class _PolyGrid:
    """|ratio|² and the diamond angle of ratio = N(jω)/(D(jω)·ref(ω)) for many coefficient sets,
    on one frequency grid, in real arithmetic (float32 by default).

    Scaling (so float32 neither overflows nor underflows, whatever the band): every power ω^k is
    divided, per frequency, by the size of the nominal denominator there (Σ|d_k|·ω^k, from
    ``den_nominal``), and the numerator's powers are multiplied by |1/ref| of the first
    reference — a common factor per frequency that cancels in the ratio, so N and D arrive near
    1 and the ratio near its true size. The work runs in blocks of frequency rows small enough to
    stay in cache; outputs and temporaries are buffers reused from chunk to chunk."""

    BLOCK = 16

    def __init__(self, f_hz: np.ndarray, dtype=np.float32, den_nominal: Sequence[float] | None = None):
        self.w = 2 * np.pi * np.asarray(f_hz, dtype=float)
        self.x = self.w  # powers of ω, scaled per row below
        d = [abs(float(np.ravel(c)[0])) for c in (den_nominal if den_nominal is not None else [1.0])]
        deg = len(d) - 1
        size = sum(c * self.w ** (deg - i) for i, c in enumerate(d))
        self.row_scale = np.where(np.isfinite(size) & (size > 0), size, 1.0)
        self.dtype = dtype
        self._buf: dict = {}

    def _take(self, name: str, shape) -> np.ndarray:
        arr = self._buf.get(name)
        if arr is None or arr.shape[1] < shape[1] or arr.shape[0] != shape[0]:
            arr = self._buf[name] = np.empty(shape, dtype=self.dtype)
        return arr[:, : shape[1]]

    def _terms(self, coeffs: list, n: int, col_scale: np.ndarray) -> tuple[list, list]:
        deg = len(coeffs) - 1
        re, im = [], []
        for i, c in enumerate(coeffs):
            row = np.broadcast_to(np.asarray(c, dtype=float), (n,))
            if not np.any(row):
                continue
            k = deg - i
            col = (self.w**k * col_scale * (1 if (k // 2) % 2 == 0 else -1)).astype(self.dtype)[:, None]
            (re if k % 2 == 0 else im).append((col, row.astype(self.dtype)[None, :]))
        return re, im

    def proxies(self, num: list, den: list, n: int, inv_refs: list[np.ndarray]) -> list[tuple[np.ndarray, np.ndarray]]:
        """[(|ratio|², diamond angle)] per reference (``inv_refs``: 1/ref per frequency), each
        (F, n); the arrays are reused by the next call."""
        nf, b = self.x.size, self.BLOCK
        c0 = np.abs(inv_refs[0])
        c0 = np.where(np.isfinite(c0) & (c0 > 0), c0, 1.0)
        terms = [self._terms(num, n, c0 / self.row_scale), self._terms(den, n, 1.0 / self.row_scale)]
        outs = [(self._take(f"g{j}", (nf, n)), self._take(f"d{j}", (nf, n))) for j in range(len(inv_refs))]
        cs = [((r / c0).real.astype(self.dtype)[:, None], (r / c0).imag.astype(self.dtype)[:, None]) for r in inv_refs]
        t = {k: self._take(k, (b, n)) for k in ("nr", "ni", "dr", "di", "pr", "pi", "d2", "qr", "qi", "tmp")}
        for f0 in range(0, nf, b):
            rows = slice(f0, min(nf, f0 + b))
            m = rows.stop - rows.start
            v = {k: a[:m] for k, a in t.items()}
            tmp = v["tmp"]
            for (re_t, im_t), (re_o, im_o) in zip(terms, (("nr", "ni"), ("dr", "di"))):
                for terms_x, out in ((re_t, v[re_o]), (im_t, v[im_o])):
                    if not terms_x:
                        out[...] = 0
                        continue
                    np.multiply(terms_x[0][0][rows], terms_x[0][1], out=out)
                    for col, row in terms_x[1:]:
                        np.multiply(col[rows], row, out=tmp)
                        out += tmp
            nr, ni, dr, di, pr, pi, d2, qr, qi = (v[k] for k in ("nr", "ni", "dr", "di", "pr", "pi", "d2", "qr", "qi"))
            _cmul(nr, ni, dr, di, pr, pi, tmp, conj=True)  # N·conj(D)
            np.multiply(dr, dr, out=d2)
            np.multiply(di, di, out=tmp)
            d2 += tmp
            for (cr, ci), (g_out, d_out) in zip(cs, outs):
                _cmul(pr, pi, cr[rows], ci[rows], qr, qi, tmp)
                g = g_out[rows]
                np.multiply(qr, qr, out=g)
                np.multiply(qi, qi, out=tmp)
                g += tmp
                with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
                    np.divide(g, d2, out=g)  # |q|²/|D|⁴ as two divisions: no |D|⁴ to overflow
                    np.divide(g, d2, out=g)
                    d = d_out[rows]
                    np.abs(qr, out=tmp)
                    np.abs(qi, out=d)
                    tmp += d
                    np.divide(qi, tmp, out=d)
                if np.any(qr < 0):
                    d[...] = np.where(qr < 0, np.where(qi >= 0, 2.0, -2.0).astype(self.dtype) - d, d)
        return outs


# ----------------------------------------------------------------------------------- figures


@dataclass(frozen=True)
class Comparison:
    """What a set of per-draw figures compares: the draws (with ``opamp``, None = ideal) against
    ``reference`` (complex, on the band grid) and, with a loop, against ``loop_reference``
    (complex controller response on the loop grid)."""

    key: str
    reference: np.ndarray
    opamp: object = None
    loop_reference: np.ndarray | None = None


@dataclass(frozen=True)
class DrawnFigures:
    """One comparison's figures over the draws (see the module docstring). dB, degrees, Hz."""

    key: str
    percentile: float
    max_gain_error_db: float
    max_gain_error_at_hz: float
    max_phase_error_deg: float
    max_phase_error_at_hz: float
    delta_phase_margin_deg: float | None = None
    delta_gain_margin_db: float | None = None
    delta_sensitivity_peak_db: float | None = None
    draws_without: dict = field(default_factory=dict)  # margin name -> draws whose loop lacks it
    unstable_draws: int | None = None  # draws whose closed loop with the plant is unstable (None: not counted)
    draws: int = 0

    @property
    def unstable_fraction(self) -> float | None:
        return None if self.unstable_draws is None or not self.draws else self.unstable_draws / self.draws

    def as_dict(self) -> dict:
        return dict(self.__dict__)


MARGIN_FIELDS = (
    ("phase_margin_deg", "delta_phase_margin_deg"),
    ("gain_margin_db", "delta_gain_margin_db"),
    ("sensitivity_peak_db", "delta_sensitivity_peak_db"),
)


class _FigureReducer:
    """Per-draw maxima over the band and margin changes of one comparison, reduced chunk by chunk.
    Where each kept draw's largest error lies, and each kept margin change's sign, travel with the
    selection (no per-draw bookkeeping beside it)."""

    def __init__(self, key: str, f_hz: np.ndarray, total: int, percentile: float, ref_margins: dict | None):
        self.key, self.f, self.q = key, f_hz, percentile
        need = _upper_need(percentile, total)
        self.gain = TailSelection(1, need, keep_inf=True, payload=True)
        self.phase = TailSelection(1, need, keep_inf=True, payload=True)
        self.ref_margins = ref_margins
        self.margins = {name: TailSelection(1, need, payload=True) for name, _ in MARGIN_FIELDS} if ref_margins else {}
        self.total = 0
        self.unstable: int | None = None  # counted draws (see LoopCount)

    def add_band(self, g: np.ndarray, d: np.ndarray, first: int) -> None:
        """``g`` |ratio|², ``d`` diamond angle, both (F, n). Draws whose phase error passes ±135°
        somewhere are unwrapped along frequency from their own wrapped angles (``d`` holds them
        exactly: :func:`unwrapped_peak`), so an error past ±180° is reported in full. Where each maximum lies is looked up only for the draws the selection keeps."""
        n = g.shape[1]
        ids = np.arange(first, first + n, dtype=np.int64)
        g_hi, g_lo = g.max(axis=0).astype(float), g.min(axis=0).astype(float)  # NaN propagates
        d_max = np.maximum(d.max(axis=0), -d.min(axis=0)).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            up = g_hi >= 1.0 / g_lo
            gain_db = np.where(up, 10 * np.log10(g_hi), -10 * np.log10(g_lo))
        gain_db = np.where(np.isnan(gain_db), np.inf, gain_db)
        phase_deg = np.abs(diamond_to_deg(d_max))
        far = np.nonzero(~(d_max <= 1.5))[0]  # beyond ±135° (or NaN): unwrap
        far_at = np.full(n, -1)
        if far.size:
            phase_deg[far], far_at[far] = unwrapped_peak(d[:, far])

        def gain_at(cols):
            with np.errstate(invalid="ignore"):
                gs = g[:, cols]
                return np.where(
                    up[cols],
                    np.argmax(np.where(np.isnan(gs), -np.inf, gs), axis=0),
                    np.argmin(np.where(np.isnan(gs), np.inf, gs), axis=0),
                )

        def phase_at(cols):
            at = np.argmax(np.abs(np.nan_to_num(d[:, cols], nan=np.inf)), axis=0)
            return np.where(far_at[cols] >= 0, far_at[cols], at)

        self.gain.add(gain_db[None, :], ids, gain_at)
        self.phase.add(phase_deg[None, :], ids, phase_at)
        self.total += n

    def add_margins(self, m: dict, first: int) -> None:
        n = len(next(iter(m.values())))
        ids = np.arange(first, first + n, dtype=np.int64)
        for name, _ in MARGIN_FIELDS:
            delta = np.asarray(m[name], dtype=float) - float(self.ref_margins[name][0])
            self.margins[name].add(np.abs(delta)[None, :], ids, lambda cols, delta=delta: delta[cols])

    def merge(self, other: _FigureReducer) -> None:
        self.gain.merge(other.gain)
        self.phase.merge(other.phase)
        for name, sel in self.margins.items():
            sel.merge(other.margins[name])
        self.total += other.total
        if other.unstable is not None:
            self.unstable = (self.unstable or 0) + other.unstable

    def result(self) -> DrawnFigures:
        g, g_at = _upper_percentile(self.gain, self.q)
        p, p_at = _upper_percentile(self.phase, self.q)
        out = dict(
            key=self.key,
            percentile=self.q,
            max_gain_error_db=float(g[0]),
            max_gain_error_at_hz=float(self.f[int(g_at[0])]),
            max_phase_error_deg=float(p[0]),
            max_phase_error_at_hz=float(self.f[int(p_at[0])]),
        )
        without = {}
        for name, attr in MARGIN_FIELDS:
            if name not in self.margins:
                continue
            sel = self.margins[name]
            _, signed = _upper_percentile(sel, self.q)  # the signed change of the draw nearest the level
            out[attr] = None if sel.count[0] == 0 else float(signed[0])
            if sel.count[0] < self.total:
                without[name] = int(self.total - sel.count[0])
        return DrawnFigures(**out, draws_without=without, unstable_draws=self.unstable, draws=self.total)


def figures_of_responses(
    key: str,
    f_hz,
    reference: np.ndarray,
    candidates: np.ndarray,
    *,
    percentile: float = FIGURE_PERCENTILE,
    loop_margins: Callable | None = None,
    loop_reference: np.ndarray | None = None,
    loop_candidates: np.ndarray | None = None,
) -> DrawnFigures:
    """The engine's figures for responses already evaluated (``candidates`` (N, F) complex against
    ``reference`` (F,)), in float64: the same definitions :func:`run_tolerances` uses."""
    f = np.asarray(f_hz, dtype=float)
    cand = np.atleast_2d(candidates)
    ref_m = loop_margins(np.atleast_2d(loop_reference)) if loop_margins is not None else None
    red = _FigureReducer(key, f, cand.shape[0], percentile, ref_m)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (cand / np.asarray(reference, dtype=complex)[None, :]).T
    red.add_band(np.abs(ratio) ** 2, _diamond(ratio.real, ratio.imag), 0)
    if ref_m is not None:
        red.add_margins(loop_margins(np.atleast_2d(loop_candidates)), 0)
    return red.result()


@dataclass(frozen=True)
class Band:
    """Per-frequency percentiles of gain (dB) and phase (deg) over the draws; rows of ``gain_db``
    and ``phase_deg`` are the ``percentiles`` (low, high). ``nominal_*``: the rounded parts."""

    f_hz: np.ndarray
    percentiles: tuple
    gain_db: np.ndarray
    phase_deg: np.ndarray
    nominal_gain_db: np.ndarray
    nominal_phase_deg: np.ndarray


@dataclass(frozen=True)
class ToleranceRun:
    """Everything one Monte Carlo run found (see :func:`run_tolerances`)."""

    draws: int
    seed: int
    distribution: str
    tolerances: dict
    chunk: int
    figures: dict  # comparison key -> DrawnFigures
    band: Band | None
    parameters: dict  # name -> {"nominal": x, "percentiles": [p0.5, p99.5]}

    def summary(self) -> dict:
        """Plain numbers for JSON (the `circuit` command's ``errors.tolerance.monte_carlo``)."""
        out = {
            "draws": self.draws,
            "seed": self.seed,
            "distribution": self.distribution,
            "tolerances": dict(self.tolerances),
            "figure_percentile": FIGURE_PERCENTILE,
            "figures": {k: v.as_dict() for k, v in self.figures.items()},
            "parameters": self.parameters,
        }
        if self.band is not None:
            out["band"] = {
                "percentiles": list(self.band.percentiles),
                "band_hz": [float(self.band.f_hz[0]), float(self.band.f_hz[-1])],
            }
        return out


SUB_BLOCK = 256  # draws per float64 evaluation inside a chunk (op-amp model, loop margins): caps temporaries


def _by_rows(fn: Callable[[dict], object], parts: dict, size: int = SUB_BLOCK):
    """``fn`` over the draws of ``parts`` in blocks of ``size``, results stacked along the first
    axis (arrays) or per key (dicts of arrays). Each draw's result is its own, so the blocks change
    nothing but the memory the temporaries take."""
    n = len(next(iter(parts.values())))
    if n <= size:
        return fn(parts)
    outs = [fn({k: v[i : i + size] for k, v in parts.items()}) for i in range(0, n, size)]
    if isinstance(outs[0], dict):
        return {k: np.concatenate([o[k] for o in outs]) for k in outs[0]}
    return np.concatenate(outs)


def _responses(topology, parts: dict, f: np.ndarray, opamp, sign: float) -> np.ndarray:
    """sign · F(j2πf) for the chunk's parts (n, F), float64; with a (non-ideal) op-amp model."""
    if opamp is None or getattr(opamp, "ideal", False):
        with np.errstate(invalid="ignore", divide="ignore"):
            return sign * topology.response(parts, f)

    return _by_rows(lambda p: sign * np.atleast_2d(gbw_response(topology, p, f, opamp)), parts)


def _chunk_proxies(
    topology,
    parts: dict,
    grid: _PolyGrid | None,
    f: np.ndarray,
    opamp,
    sign: float,
    refs: list[np.ndarray],
    cache: dict,
):
    """[(g, d)] per reference for one chunk on one grid: float32 from the coefficients (ideal
    op-amp), or float64 from the op-amp model's responses. Equal references share one result."""
    first: list[int] = []
    for i, r in enumerate(refs):
        same = [j for j in first if refs[j].shape == r.shape and np.array_equal(refs[j], r)]
        first.append(same[0] if same else i)
    distinct = sorted(set(first))
    out = _chunk_proxies_distinct(topology, parts, grid, f, opamp, sign, [refs[j] for j in distinct], cache)
    by = dict(zip(distinct, out))
    return [by[j] for j in first]


def _chunk_proxies_distinct(
    topology,
    parts: dict,
    grid: _PolyGrid | None,
    f: np.ndarray,
    opamp,
    sign: float,
    refs: list[np.ndarray],
    cache: dict,
):
    if grid is not None and "poly" in cache:  # the op-amp model written out (circuit_polynomials)
        num, den = cache["poly"]
        n = len(next(iter(parts.values())))
        factor = sign * topology.sign  # the written-out circuit's output carries the stage's own sign
        return grid.proxies(num, den, n, [1.0 / (factor * np.asarray(r, dtype=complex)) for r in refs])
    if (opamp is None or getattr(opamp, "ideal", False)) and grid is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            num, den = topology.coefficients(parts)
        n = len(next(iter(parts.values())))
        return grid.proxies(num, den, n, [1.0 / (sign * np.asarray(r, dtype=complex)) for r in refs])
    if "h" not in cache:
        cache["h"] = _responses(topology, parts, f, opamp, sign).T
    h = cache["h"]
    out = []
    for r in refs:
        with np.errstate(invalid="ignore", divide="ignore"):
            q = h / r[:, None]
        out.append((np.abs(q) ** 2, _diamond(q.real, q.imag)))
    return out


# ----------------------------------------------------------------------------------- stability


@dataclass(frozen=True)
class LoopCount:
    """What the per-draw closed-loop stability count needs (see :func:`count_unstable`).

    ``f_hz``: an increasing grid (Hz) from well below every corner of the loop (where the loops of
    all draws have the same low-frequency behaviour: the same integrators, |L| large, or L near
    its zero-frequency value) to where |L| has fallen below 1/2 (e.g.
    :func:`convert.compare.loop.margin_grid`); ``plant(f_hz)``: P(j2πf)·e^{−j2πfθ} with the dead
    time exact; ``nominal_unstable``: the closed-loop right-half-plane poles of the loop with the
    nominal (rounded) parts, counted exactly by the caller (0 for a stable nominal loop)."""

    f_hz: np.ndarray
    plant: Callable[[np.ndarray], np.ndarray]
    nominal_unstable: int = 0


STEP_LIMIT = math.pi / 3  # largest arg step of 1 + L between neighbouring points before a refinement
REFINE_POINTS = 32  # points inserted per refined interval, per level
REFINE_LEVELS = 4  # refinement levels (32^4 ≈ 1e6 times finer than the grid)


def _arg_change(one_plus_l: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of (N, F): the steps of arg(1 + L) between neighbouring points (radians), and where
    a step is too large to be followed without a finer grid."""
    with np.errstate(invalid="ignore", divide="ignore"):
        steps = np.angle(one_plus_l[:, 1:] / one_plus_l[:, :-1])
    return steps, ~(np.abs(steps) <= STEP_LIMIT)


def _refined_step(loop_at: Callable[[np.ndarray], np.ndarray], f0: float, f1: float, level: int) -> float:
    """The arg change of 1 + L from f0 to f1 (Hz) on a grid refined where it jumps; NaN when it
    cannot be followed within :data:`REFINE_LEVELS` (1 + L passes at or next to 0: marginal)."""
    f = np.geomspace(f0, f1, REFINE_POINTS + 2) if f0 > 0 else np.linspace(f0, f1, REFINE_POINTS + 2)
    v = 1.0 + loop_at(f)
    steps, bad = _arg_change(v[None, :])
    steps, bad = steps[0], bad[0]
    if not bad.any():
        return float(steps.sum())
    if level >= REFINE_LEVELS:
        return math.nan
    total = float(steps[~bad].sum())
    for i in np.flatnonzero(bad):
        total += _refined_step(loop_at, f[i], f[i + 1], level + 1)
    return total


def count_unstable(
    count: LoopCount,
    controller_responses: np.ndarray,
    controller_at: Callable[[int, np.ndarray], np.ndarray],
    nominal_change: float,
) -> np.ndarray:
    """Which draws give an unstable closed loop (bool (N,)), by the Nyquist criterion.

    ``controller_responses`` (N, F): the drawn controllers C(j2πf) on ``count.f_hz``;
    ``controller_at(i, f_hz)`` the response of draw i at other frequencies (for the refinement);
    ``nominal_change``: the arg change of 1 + L along the grid for the nominal parts
    (:func:`arg_change_along`).

    Method: the number of closed-loop right-half-plane poles is Z = P − W, W the
    counter-clockwise turns of 1 + L(s) around 0 as s runs up the imaginary axis (indented
    around poles at 0) and round the right half-plane. The drawn controllers are RC networks
    with positive parts: their poles are those of the nominal network moved a little, in the
    left half-plane or at 0 (integrators, which every draw keeps) — P and the indentation are
    the same for every draw — so a draw differs from the nominal loop only by the turns of
    1 + L(jω) along ω > 0: Z_draw = Z_nominal − (Δ_draw − Δ_nominal)/π, Δ the arg change of
    1 + L(jω) along the grid (dead time exact in L). The grid is refined where a step of
    arg(1 + L) exceeds 60° (where |L| passes 1 near the −180° phase, i.e. 1 + L passes near 0);
    a draw whose arg change cannot be followed (1 + L at or next to 0 on the axis, a marginal
    loop), or whose |L| has not fallen below 1/2 at the top of the grid, counts as unstable."""
    f = count.f_hz
    p = np.asarray(count.plant(f), dtype=complex)
    lvals = np.atleast_2d(controller_responses) * p[None, :]
    v = 1.0 + lvals
    steps, bad = _arg_change(v)
    steps = np.where(bad, 0.0, steps)
    for i, j in zip(*np.nonzero(bad)):
        steps[i, j] = _refined_step(lambda fx, i=i: controller_at(int(i), fx) * count.plant(fx), f[j], f[j + 1], 1)
    change = steps.sum(axis=1)
    with np.errstate(invalid="ignore"):
        d = (change - nominal_change) / math.pi
        turns = np.round(d)
        z = count.nominal_unstable - turns
        undecided = ~np.isfinite(d) | (np.abs(d - turns) > 0.4) | ~(np.abs(lvals[:, -1]) < 0.5)
    return undecided | (z != 0)


def _rhp_controller(topology, parts: dict) -> np.ndarray:
    """Draws whose controller (ideal op-amps) has a pole in the right half-plane (bool (n,)): the
    count above assumes none, as for an RC network with positive parts; a draw that breaks it is
    counted unstable. Poles at s = 0 (trailing zero coefficients of every draw) are the
    integrators every draw keeps. Batched eigenvalues of the companion matrices."""
    n = len(next(iter(parts.values())))
    with np.errstate(all="ignore"):
        _, den = topology.coefficients(parts)
    rows = np.vstack([np.broadcast_to(np.asarray(c, dtype=float), (n,)) for c in den]).T  # (n, deg+1)
    while rows.shape[1] > 1 and not np.any(rows[:, -1]):
        rows = rows[:, :-1]
    while rows.shape[1] > 1 and not np.any(rows[:, 0]):
        rows = rows[:, 1:]
    deg = rows.shape[1] - 1
    if deg < 1:
        return np.zeros(n, dtype=bool)
    with np.errstate(all="ignore"):
        comp = np.zeros((n, deg, deg))
        comp[:, 0, :] = -rows[:, 1:] / rows[:, :1]
        comp[:, np.arange(1, deg), np.arange(deg - 1)] = 1.0
        ok = np.isfinite(comp).all(axis=(1, 2))
        roots = np.linalg.eigvals(np.where(ok[:, None, None], comp, 0.0))
        size = np.maximum(np.abs(roots).max(axis=1), 1e-300)
    return ~ok | np.any(roots.real > 1e-9 * size[:, None], axis=1)


def arg_change_along(
    count: LoopCount, controller_response: np.ndarray, controller_at: Callable[[np.ndarray], np.ndarray]
) -> float:
    """The arg change of 1 + L along ``count.f_hz`` for one controller (radians), refined as in
    :func:`count_unstable`; NaN when it cannot be followed."""
    f = count.f_hz
    v = 1.0 + np.asarray(controller_response) * count.plant(f)
    steps, bad = _arg_change(v[None, :])
    steps, bad = steps[0], bad[0]
    total = float(steps[~bad].sum())
    for j in np.flatnonzero(bad):
        total += _refined_step(lambda fx: controller_at(fx) * count.plant(fx), f[j], f[j + 1], 1)
    return total


class _Worker:
    """The reductions of one share of the chunks (its own buffers and selections); shares are
    merged exactly at the end, so the figures do not depend on how chunks were shared out."""

    def __init__(self, run: dict):
        self.r = run
        dtype = run["dtype"]
        self.band_grid = _PolyGrid(run["band_f"], dtype, run["den_nominal"])
        self.reducers = [
            _FigureReducer(c.key, run["band_f"], run["draws"], run["percentile"], ref_m)
            for c, ref_m in zip(run["comparisons"], run["ref_margins"])
        ]
        self._grids: dict = {}  # per op-amp model: its float32 grids (see _opamp_grids)
        self.groups: dict = {}
        for c, red in zip(run["comparisons"], self.reducers):
            ideal = c.opamp is None or c.opamp.ideal
            self.groups.setdefault(None if ideal else id(c.opamp), []).append((c, red))
        self.disp_g = self.disp_d = self.par_sel = None
        if run["disp_f"] is not None:
            self.disp_grid = (
                self.band_grid if run["share_display"] else _PolyGrid(run["disp_f"], dtype, run["den_nominal"])
            )
            self.disp_g = RowPercentiles(run["disp_f"].size, run["draws"], run["band_percentiles"])
            self.disp_d = RowPercentiles(run["disp_f"].size, run["draws"], run["band_percentiles"])
        if run["p_names"]:
            self.par_sel = RowPercentiles(len(run["p_names"]), run["draws"], run["band_percentiles"])

    def process(self, drawn: dict, first: int) -> None:
        r = self.r
        topology, sign, band_f, loop_f, disp_f = r["topology"], r["sign"], r["band_f"], r["loop_f"], r["disp_f"]
        n = len(next(iter(drawn.values())))
        done_display = False
        for gkey, members in self.groups.items():
            opamp = None if gkey is None else members[0][0].opamp
            cache: dict = {}
            model_disp = self.disp_g is not None and opamp is not None and r["display_opamp"] is opamp
            band_grid = self.band_grid
            disp_grid = disp_cache = None
            if opamp is not None:
                refs_all = [c.reference for c, _ in members] + ([r["h_nom"]] if model_disp else [])
                grids = self._opamp_grids(opamp, model_disp, refs_all)
                with np.errstate(invalid="ignore", divide="ignore"):
                    poly = (
                        None if grids is None else circuit_polynomials(topology, drawn, opamp.open_loop_polynomials())
                    )
                if poly is not None:  # band and display from the written-out circuit, in the run's dtype
                    band_grid, disp_grid = grids
                    cache["poly"] = poly
                    disp_cache = cache
                    if loop_f is not None:
                        cache["loop"] = _responses(topology, drawn, loop_f, opamp, sign)
                else:  # one stage-by-stage solution over every grid this model needs, float64
                    band_grid = None
                    grids = [band_f] + ([loop_f] if loop_f is not None else []) + ([disp_f] if model_disp else [])
                    h_all = _responses(topology, drawn, np.concatenate(grids), opamp, sign)
                    parts_h = np.split(h_all, np.cumsum([g.size for g in grids])[:-1], axis=1)
                    cache["h"] = parts_h[0].T
                    if loop_f is not None:
                        cache["loop"] = parts_h[1]
                    if model_disp:
                        disp_cache = {"h": parts_h[-1].T}
            refs = [np.asarray(c.reference, dtype=complex) for c, _ in members]
            shared = r["share_display"] and gkey is None
            proxies = _chunk_proxies(
                topology, drawn, band_grid, band_f, opamp, sign, refs + ([r["h_nom"]] if shared else []), cache
            )
            if shared or model_disp:
                g, d = (
                    proxies.pop()
                    if shared
                    else _chunk_proxies(topology, drawn, disp_grid, disp_f, opamp, sign, [r["h_nom"]], disp_cache)[0]
                )
                # band tails in the run's dtype (float32: half the memory)
                self.disp_g.add(g.astype(r["dtype"], copy=False))
                self.disp_d.add(d.astype(r["dtype"], copy=False))
                done_display = True
            loop_m = None
            for (_c, red), (g, d) in zip(members, proxies):
                red.add_band(g, d, first)
                if red.ref_margins is not None:
                    if loop_m is None:
                        if "loop" in cache:
                            h_loop = cache["loop"]
                            loop_m = _by_rows(
                                lambda p: r["loop_margins"](h_loop[p["i"]]),  # noqa: B023 (called at once)
                                {"i": np.arange(h_loop.shape[0])},
                            )
                        else:
                            loop_m = _by_rows(
                                lambda p: r["loop_margins"](_responses(topology, p, loop_f, opamp, sign)),  # noqa: B023 (called at once)
                                drawn,
                            )
                    red.add_margins(loop_m, first)
            counted = [red for c, red in members if c.loop_reference is not None]
            if r["loop_count"] is not None and counted:
                unstable = self._count(drawn, opamp, gkey)
                for red in counted:
                    red.unstable = (red.unstable or 0) + unstable
        if self.disp_g is not None and not done_display:
            ((g, d),) = _chunk_proxies(
                topology, drawn, self.disp_grid, disp_f, r["display_opamp"], sign, [r["h_nom"]], {}
            )
            self.disp_g.add(g.astype(r["dtype"], copy=False))
            self.disp_d.add(d.astype(r["dtype"], copy=False))
        if self.par_sel is not None:
            with np.errstate(divide="ignore", invalid="ignore"):
                pv = topology.parameters(drawn)
            self.par_sel.add(np.vstack([np.broadcast_to(np.asarray(pv[k], dtype=float), (n,)) for k in r["p_names"]]))

    def _opamp_grids(self, opamp, display: bool, refs: list):
        """(band grid, display grid or None) for the op-amp model ``opamp`` written out as
        polynomials, each row scaled by the nominal parts' denominator with that model; None when
        the circuit is solved node by node (see :func:`circuit_polynomials`), or when the written-out
        form does not fit the run's dtype: a trial on the nominal parts against ``refs`` (the band's
        references, then the display's) overflows, or differs from the same in float64 by 1e-4
        (relative |ratio|², diamond units: about 1e-3 dB and 0.01°) anywhere, as a polynomial of
        high degree with coefficients far apart can in float32. Then the node solution in float64
        is used."""
        key = (id(opamp), display)
        if key not in self._grids:
            r = self.r
            topology, nominal = r["topology"], r["nominal"]
            with np.errstate(invalid="ignore", divide="ignore"):
                poly = circuit_polynomials(topology, nominal, opamp.open_loop_polynomials())
            grids = None
            if poly is not None:
                den = [float(np.ravel(c)[0]) for c in poly[1]]
                band = _PolyGrid(r["band_f"], r["dtype"], den)
                disp = _PolyGrid(r["disp_f"], r["dtype"], den) if display else None
                cache = {"poly": poly}
                checks = [(band, r["band_f"], refs[: len(refs) - display])]
                if disp is not None:
                    checks.append((disp, r["disp_f"], refs[-1:]))
                try:
                    ok = True
                    for grid, f, rs in checks:
                        exact = _PolyGrid(f, np.float64, den)
                        with np.errstate(over="raise", invalid="raise", divide="raise"):
                            got = _chunk_proxies_distinct(topology, nominal, grid, f, opamp, r["sign"], rs, cache)
                            want = _chunk_proxies_distinct(topology, nominal, exact, f, opamp, r["sign"], rs, cache)
                        for (g, d), (g0, d0) in zip(got, want):
                            ok = ok and bool(np.all(np.abs(g / g0 - 1) < 1e-4) and np.all(np.abs(d - d0) < 1e-4))
                    if ok:
                        grids = (band, disp)
                except FloatingPointError:
                    pass
            self._grids[key] = grids
        return self._grids[key]

    def _count(self, drawn: dict, opamp, gkey) -> int:
        """How many of the chunk's draws give an unstable closed loop (:func:`count_unstable`), in
        blocks of :data:`SUB_BLOCK` draws."""
        r = self.r
        lc, topology, sign = r["loop_count"], r["topology"], r["sign"]

        def block(p):
            def at(i, fx, p=p):
                return _responses(topology, {k: v[i : i + 1] for k, v in p.items()}, fx, opamp, sign)[0]

            h = _responses(topology, p, lc.f_hz, opamp, sign)
            return count_unstable(lc, h, at, r["nominal_change"][gkey]) | _rhp_controller(topology, p)

        return int(np.count_nonzero(_by_rows(block, drawn)))

    def merge(self, other: _Worker) -> None:
        for a, b in zip(self.reducers, other.reducers):
            a.merge(b)
        for a, b in ((self.disp_g, other.disp_g), (self.disp_d, other.disp_d), (self.par_sel, other.par_sel)):
            if a is not None:
                a.merge(b)


DEFAULT_WORKERS = 1  # two threads measured no faster here (bench/circuit.py; report at 30,000 draws 7.4 s vs 8.9 s)


def _workers(draws: int, chunk: int, workers: int | None) -> int:
    return max(1, min(int(DEFAULT_WORKERS if workers is None else workers), -(-draws // chunk)))


def run_tolerances(
    topology,
    parts: Mapping[str, float],
    tolerances: Mapping[str, float],
    *,
    band_f_hz,
    comparisons: Sequence[Comparison],
    draws: int = DEFAULT_DRAWS,
    seed: int = 1,
    distribution: str = DEFAULT_DISTRIBUTION,
    sign: float = 1.0,
    loop_f_hz=None,
    loop_margins: Callable | None = None,
    display_f_hz=None,
    display_opamp=None,
    percentile: float = FIGURE_PERCENTILE,
    band_percentiles: Sequence[float] = BAND_PERCENTILES,
    parameters: bool = True,
    chunk: int = DEFAULT_CHUNK,
    dtype=np.float32,
    workers: int | None = None,
    loop_count: LoopCount | None = None,
) -> ToleranceRun:
    """The Monte Carlo of a circuit's part tolerances, in chunks (see the module docstring).

    ``parts``: the rounded parts (ohms, farads); ``sign``: the realized sign (±1) applied to the
    topology's positive form. For each :class:`Comparison` the per-draw maxima over ``band_f_hz``
    (Hz) and, when ``loop_margins`` is given (``margins(responses (N, F_loop)) -> dict of
    arrays``, :func:`convert.compare.loop.margins_of_responses`), the margin changes on
    ``loop_f_hz``. ``display_f_hz``: where the gain/phase band is wanted (with
    ``display_opamp``). ``dtype``: arithmetic of the coefficient path (float32; np.float64 to
    check it). ``workers``: threads sharing the chunks (the draws are made in order on this thread and
    every selection merges exactly, so the figures are the same for any count); left at None,
    from :data:`HELPER_MIN_DRAWS` draws (:data:`HELPER_MIN_DRAWS_LIGHT` for a run with ideal op-amps
    and no loop) every other chunk goes to a helper process on the second
    core (:func:`_two_core_run`, :mod:`convert.sidework`), else :data:`DEFAULT_WORKERS` threads. ``loop_count``: count, for each comparison with a loop reference, the
    draws whose closed loop with the plant is unstable (:func:`count_unstable`, on the op-amp
    model of that comparison). Returns :class:`ToleranceRun`."""
    draws = check_draws(draws)
    chunk = max(1, int(chunk))
    source = PartDraws(topology, parts, tolerances, seed, distribution)
    band_f = np.asarray(band_f_hz, dtype=float)
    loop_f = None if loop_f_hz is None else np.asarray(loop_f_hz, dtype=float)
    nominal = {k: np.asarray([v]) for k, v in source.nominal.items()}
    ref_margins = [
        loop_margins(np.atleast_2d(c.loop_reference))
        if loop_margins is not None and c.loop_reference is not None
        else None
        for c in comparisons
    ]
    disp_f = h_nom = None
    share_display = False
    if display_f_hz is not None:
        disp_f = np.asarray(display_f_hz, dtype=float)
        ideal_display = display_opamp is None or display_opamp.ideal
        share_display = ideal_display and disp_f.shape == band_f.shape and np.array_equal(disp_f, band_f)
        h_nom = _responses(topology, nominal, disp_f, display_opamp, sign)[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        p_nom = (
            {k: float(np.asarray(v).ravel()[0]) for k, v in topology.parameters(nominal).items()} if parameters else {}
        )
    p_names = [k for k, v in p_nom.items() if math.isfinite(v)]
    with np.errstate(divide="ignore", invalid="ignore"):
        den_nominal = [float(np.ravel(c)[0]) for c in topology.coefficients(nominal)[1]]
    nominal_change = {}
    if loop_count is not None:
        for c in comparisons:
            ideal = c.opamp is None or c.opamp.ideal
            gkey = None if ideal else id(c.opamp)
            if c.loop_reference is not None and gkey not in nominal_change:
                nominal_change[gkey] = arg_change_along(
                    loop_count,
                    _responses(topology, nominal, loop_count.f_hz, c.opamp, sign)[0],
                    lambda fx, op=c.opamp: _responses(topology, nominal, fx, op, sign)[0],
                )
    run = dict(
        nominal=nominal,
        loop_count=loop_count,
        nominal_change=nominal_change,
        topology=topology,
        sign=sign,
        den_nominal=den_nominal,
        band_f=band_f,
        loop_f=loop_f,
        disp_f=disp_f,
        h_nom=h_nom,
        share_display=share_display,
        display_opamp=display_opamp,
        comparisons=list(comparisons),
        ref_margins=ref_margins,
        loop_margins=loop_margins,
        draws=draws,
        percentile=percentile,
        band_percentiles=band_percentiles,
        p_names=p_names,
        dtype=dtype,
    )
    lead = _two_core_run(run, source, draws, chunk) if workers is None else None
    if lead is not None:
        return _tolerance_run(run, lead, seed, distribution, tolerances, chunk, h_nom, p_nom)
    crew = [_Worker(run) for _ in range(_workers(draws, chunk, workers))]
    batch: list = []
    first = 0

    def flush(pool) -> None:
        if pool is None:
            for w, (drawn, at) in zip(crew, batch):
                w.process(drawn, at)
        else:
            for fut in [pool.submit(w.process, drawn, at) for w, (drawn, at) in zip(crew, batch)]:
                fut.result()
        batch.clear()

    pool = None
    if len(crew) > 1:
        from concurrent.futures import ThreadPoolExecutor

        pool = ThreadPoolExecutor(len(crew), thread_name_prefix="tolerance")
    try:
        for drawn in source.chunks(draws, chunk):
            batch.append((drawn, first))
            first += len(next(iter(drawn.values())))
            if len(batch) == len(crew):
                flush(pool)
        flush(pool)
    finally:
        if pool is not None:
            pool.shutdown()
    lead = crew[0]
    for w in crew[1:]:
        lead.merge(w)
    return _tolerance_run(run, lead, seed, distribution, tolerances, chunk, h_nom, p_nom)


#: Fewest draws for which the Monte Carlo is shared with a helper process (convert.sidework).
HELPER_MIN_DRAWS = 1000
#: The same for a run with nothing but the float32 coefficient path (ideal op-amps, no loop, no
#: stability count, e.g. the buy list's pricing runs): about 5 µs a draw, so below this many draws
#: the fork and the merge cost more than the second core saves (10,000 draws: 0.08 s alone,
#: 0.10-0.18 s with the helper, measured).
HELPER_MIN_DRAWS_LIGHT = 100_000


def _two_core_run(run: dict, source: PartDraws, draws: int, chunk: int) -> _Worker | None:
    """The reductions of every draw, every other chunk made in a helper process (the chunks
    evened out so that each side has the same number, of at most ``chunk`` draws): each side draws the whole sequence from the same
    seeded generators and processes its own chunks; the helper's selections travel back and are
    merged exactly (the figures do not depend on the chunk size or on who processed a chunk).
    None when no helper is used (too few draws, or none usable here)."""
    heavy = (
        run["loop_margins"] is not None
        or run["loop_count"] is not None
        or any(c.opamp is not None and not c.opamp.ideal for c in run["comparisons"])
        or (run["display_opamp"] is not None and not run["display_opamp"].ideal)
    )
    if draws < (HELPER_MIN_DRAWS if heavy else HELPER_MIN_DRAWS_LIGHT) or not sidework.helpers_usable():
        return None
    pairs = -(-draws // (2 * chunk))  # chunks of at most ``chunk``, an even count: each side gets the same share
    size = -(-draws // (2 * pairs))

    def share(part: int) -> _Worker:
        w = _Worker(run)
        first = 0
        for i, drawn in enumerate(source.chunks(draws, size)):
            if i % 2 == part:
                w.process(drawn, first)
            first += len(next(iter(drawn.values())))
        return w

    def helper_share():
        w = share(1)
        return w.reducers, w.disp_g, w.disp_d, w.par_sel

    pending = sidework.start(helper_share)  # forks now: the helper starts from the same generators
    try:
        lead = share(0)
    except BaseException:
        pending.discard()
        raise
    other = _Worker(run)
    other.reducers, other.disp_g, other.disp_d, other.par_sel = pending.result()
    lead.merge(other)
    return lead


def _tolerance_run(run, lead, seed, distribution, tolerances, chunk, h_nom, p_nom) -> ToleranceRun:
    """The :class:`ToleranceRun` from the merged reductions ``lead``."""
    disp_f, band_percentiles, p_names, draws = run["disp_f"], run["band_percentiles"], run["p_names"], run["draws"]
    band = None
    if lead.disp_g is not None:
        lohi_g, lohi_d = lead.disp_g.result(), lead.disp_d.result()
        nom_db = 20 * np.log10(np.abs(h_nom))
        nom_deg = np.degrees(np.unwrap(np.angle(h_nom)))
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = 10 * np.log10(lohi_g) + nom_db
        band = Band(disp_f, tuple(band_percentiles), gain, diamond_to_deg(lohi_d) + nom_deg, nom_db, nom_deg)
    params = {}
    if lead.par_sel is not None:
        res = lead.par_sel.result()
        for i, k in enumerate(p_names):
            params[k] = {"nominal": p_nom[k], "percentiles": [float(res[0, i]), float(res[1, i])]}
    return ToleranceRun(
        draws,
        int(seed),
        distribution,
        dict(tolerances),
        chunk,
        {red.key: red.result() for red in lead.reducers},
        band,
        params,
    )


# ----------------------------------------------------------------------------------- worst case


@dataclass(frozen=True)
class WorstCase:
    """Worst-case corners: at each frequency every part at the tolerance edge that pushes the gain
    (or phase) furthest, chosen from the sign of its sensitivity, then evaluated exactly.

    ``sensitivity_db[part]`` / ``sensitivity_deg[part]``: change of gain (dB) / phase (deg) per
    +1 % change of that part, over ``f_hz``. ``parameters[name] = (low, high)``.
    """

    f_hz: np.ndarray
    gain_db_low: np.ndarray
    gain_db_high: np.ndarray
    phase_deg_low: np.ndarray
    phase_deg_high: np.ndarray
    nominal_gain_db: np.ndarray
    nominal_phase_deg: np.ndarray
    sensitivity_db: dict
    sensitivity_deg: dict
    parameters: dict

    def spread(self) -> dict:
        return {
            "gain_db": float(
                max(np.max(self.gain_db_high - self.nominal_gain_db), np.max(self.nominal_gain_db - self.gain_db_low))
            ),
            "phase_deg": float(
                max(
                    np.max(self.phase_deg_high - self.nominal_phase_deg),
                    np.max(self.nominal_phase_deg - self.phase_deg_low),
                )
            ),
        }

    def summary(self) -> dict:
        return {
            "spread": self.spread(),
            "parameters": {k: list(v) for k, v in self.parameters.items()},
            "largest_gain_sensitivity_db_per_percent": {
                k: float(np.max(np.abs(v))) for k, v in self.sensitivity_db.items()
            },
        }


def worst_case(topology, parts: Mapping[str, float], tolerances: Mapping[str, float], f_hz) -> WorstCase:
    """Worst-case corners of gain, phase and design quantities (see :class:`WorstCase`)."""
    f = np.asarray(f_hz, dtype=float)
    checked = {k: float(v) for k, v in topology.check_parts(parts).items()}
    names = [
        p.name
        for p in topology.parts
        if math.isfinite(checked[p.name]) and checked[p.name] > 0 and tolerance_of(p, tolerances) > 0
    ]
    tol = {p.name: tolerance_of(p, tolerances) for p in topology.parts}
    base = {k: np.array([v]) for k, v in checked.items()}
    h0 = topology.response(base, f)[0]
    delta = 1e-4
    sens_log = {}
    for name in names:
        up = dict(base)
        dn = dict(base)
        up[name] = base[name] * math.exp(delta)
        dn[name] = base[name] * math.exp(-delta)
        sens_log[name] = (np.log(topology.response(up, f)[0] / topology.response(dn, f)[0])) / (2 * delta)
    nf = f.size

    def corner(sign_of: dict) -> np.ndarray:
        p = {k: np.full(nf, v[0]) for k, v in base.items()}
        for name in names:
            p[name] = checked[name] * (1 + tol[name] * sign_of[name])
        num, den = topology.coefficients(p)
        s = 2j * np.pi * f
        n = sum(np.asarray(c) * s ** (len(num) - 1 - i) for i, c in enumerate(num))
        d = sum(np.asarray(c) * s ** (len(den) - 1 - i) for i, c in enumerate(den))
        return n / d

    nom_db = 20 * np.log10(np.abs(h0))
    nom_deg = np.degrees(np.unwrap(np.angle(h0)))
    results = {}
    for label, part_of in (("gain", lambda z: z.real), ("phase", lambda z: z.imag)):
        for direction in (1, -1):
            h = corner({n: direction * np.sign(part_of(sens_log[n])) for n in names})
            results[(label, direction)] = h
    g_hi = 20 * np.log10(np.abs(results[("gain", 1)]))
    g_lo = 20 * np.log10(np.abs(results[("gain", -1)]))
    ph_hi = nom_deg + np.degrees(np.angle(results[("phase", 1)] / h0))
    ph_lo = nom_deg + np.degrees(np.angle(results[("phase", -1)] / h0))
    params = {}
    pnom = {k: float(np.asarray(v).ravel()[0]) for k, v in topology.parameters(base).items()}
    for pname, pv in pnom.items():
        if not math.isfinite(pv) or pv == 0:
            continue
        sens = {}
        for name in names:
            up = dict(base)
            up[name] = base[name] * math.exp(delta)
            with np.errstate(divide="ignore", invalid="ignore"):
                v = float(np.asarray(topology.parameters(up)[pname]).ravel()[0])
            sens[name] = np.sign(v - pv) if math.isfinite(v) else 0.0
        vals = []
        for direction in (1, -1):
            p = dict(base)
            for name in names:
                p[name] = base[name] * (1 + tol[name] * direction * sens[name])
            with np.errstate(divide="ignore", invalid="ignore"):
                vals.append(float(np.asarray(topology.parameters(p)[pname]).ravel()[0]))
        params[pname] = (min(vals), max(vals))
    ln10 = math.log(10)
    return WorstCase(
        f,
        np.minimum(g_lo, g_hi),
        np.maximum(g_lo, g_hi),
        np.minimum(ph_lo, ph_hi),
        np.maximum(ph_lo, ph_hi),
        nom_db,
        nom_deg,
        {k: v.real * 20 / ln10 * 0.01 for k, v in sens_log.items()},
        {k: np.degrees(v.imag) * 0.01 for k, v in sens_log.items()},
        params,
    )
