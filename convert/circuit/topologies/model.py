"""What a catalog topology is, and the circuit solution every topology shares.

A topology is a :class:`Topology` instance holding

* its **parts** (name, resistor or capacitor, role) — resistor values in ohms, capacitors in farads;
* its **circuit** as a list of op-amp :class:`Stage` s and of the passive nodes between them
  (:class:`Junction` s, e.g. the middle node of a multiple-feedback section), used by the netlist
  writer, the schematic, the op-amp model and the output-swing check;
* its **transfer function in terms of the parts**, written out by hand as polynomial coefficients
  in s (descending powers), vectorized: every part may be a numpy array of shape ``(draws,)`` and
  the response comes back with shape ``(draws, freqs)``;
* its **design equations**: :meth:`Topology.fit` reads the design quantities from a target
  controller (or says why it cannot), :meth:`Topology.solve` turns them and the freely chosen
  parts (capacitors picked from a series) into all part values;
* the **targets it can represent**, in words (``represents``).

Sign convention
---------------
Every formula here gives the **positive form** F(s): the controller the stage realizes with its
gain taken positive. The stage's own sign is ``topology.sign`` (−1 when ``inverting``): the
circuit's output over its input is ``sign · F(s)``. :meth:`Topology.controller_from_parts` returns
F(s) — "+C(s) as the stage realizes it" — and :meth:`Topology.stage_controller_from_parts` returns
``sign · F(s)``. A netlist realizing +C(s) adds a unity inverter after an inverting stage.

Two-input stages (inputs ``sp`` setpoint and ``meas`` measurement) realize
``u = Cr(s)·sp − Cy(s)·meas`` (times the stage sign); F(s) is then Cy(s), the controller acting on
the error when the setpoint is zero, and :meth:`Topology.paths_from_parts` returns both paths.

All op-amps are ideal in these formulas; :func:`node_responses` evaluates the circuit itself, stage
by stage, optionally with a finite open-loop gain A(jω) (see :mod:`convert.circuit.opamp`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from collections.abc import Callable, Mapping

import numpy as np

from convert.circuit.topologies.networks import GROUND, Junction, Part, Stage, impedance, open_value
from convert.controller import Controller
from convert.errors import InputError, UnrealizableError
from convert.values import parse_value

# ----------------------------------------------------------------------------------- helpers


def polyval_jw(coeffs: list, w: np.ndarray) -> np.ndarray:
    """P(jω) for real coefficient arrays (descending powers of s, each of shape (draws,) or a
    scalar) at angular frequencies ``w`` (rad/s, shape (freqs,)) -> complex (draws, freqs).

    Real arithmetic: P(jω) = E(−ω²) + jω·O(−ω²), E and O the even and odd parts, each by Horner
    in x = −ω² in place (half the steps of a complex Horner in s, each a real multiply-add). For
    an RC network's polynomials (real roots) the error is a few units of float64 rounding times
    the degree, as for Horner in s."""
    w = np.asarray(w, dtype=float)
    cs = [np.asarray(c, dtype=float)[..., None] for c in coeffs]
    shape = np.broadcast_shapes(w.shape, *[c.shape for c in cs])
    x = -(w * w)
    deg = len(cs) - 1
    out = np.empty(shape + (2,))  # real and imaginary parts side by side: viewed as complex at the end
    acc = np.empty(shape)  # Horner runs in a contiguous buffer
    for k, first in ((0, deg), (1, deg - 1)):
        seq = cs[first::-2] if first >= 0 else []  # ascending powers of x
        if not seq:
            out[..., k] = 0.0
            continue
        if len(seq) == 1:
            acc[...] = seq[0]
        else:
            np.multiply(seq[-1], x, out=acc)
            acc += seq[-2]
            for c in reversed(seq[:-2]):
                acc *= x
                acc += c
        if k:
            acc *= w
        out[..., k] = acc
    return out.view(complex)[..., 0]


@dataclass(frozen=True)
class TargetShape:
    """A target read in time-constant form: C(s) = k · s^-n · Π(1 + s/z_i) / Π(1 + s/p_j).

    ``zeros``/``poles`` hold the corner frequencies (rad/s, positive) of real left-half-plane
    roots; ``irregular`` lists roots no RC stage places (complex, right-half-plane, zero at 0).
    """

    k: float
    integrators: int
    zeros: np.ndarray
    poles: np.ndarray
    irregular: tuple[str, ...]
    complex_zeros: int
    controller: Controller

    @property
    def sign(self) -> int:
        return -1 if self.k < 0 else 1

    def describe(self) -> str:
        bits = [
            f"{self.integrators} integrator(s)",
            f"{len(self.zeros)} real zero(s)",
            f"{len(self.poles)} real pole(s)",
        ]
        if self.irregular:
            bits.append(", ".join(self.irregular))
        return ", ".join(bits)


def analyse_target(controller: Controller) -> TargetShape:
    """Read an analog, proper controller into a :class:`TargetShape`."""
    if controller.is_digital:
        raise InputError("a circuit realizes an analog controller; convert the digital one first", key="target")
    num = np.array(controller.num, dtype=float)
    den = np.array(controller.den, dtype=float)
    zeros = np.roots(num) if num.size > 1 else np.zeros(0)
    poles = np.roots(den) if den.size > 1 else np.zeros(0)
    scale = max([1.0] + [abs(r) for r in np.concatenate([zeros, poles])])
    irregular: list[str] = []
    n_int = 0
    pz: list[float] = []
    pp: list[float] = []
    complex_zeros = 0
    for label, roots, out in (("zero", zeros, pz), ("pole", poles, pp)):
        for r in roots:
            if abs(r) <= 1e-9 * scale:
                if label == "pole":
                    n_int += 1
                else:
                    irregular.append("a zero at s = 0 (a pure differentiator)")
                continue
            if abs(r.imag) > 1e-9 * abs(r):
                if r.imag > 0:
                    irregular.append(f"complex {label}s at {r.real:.4g} ± {abs(r.imag):.4g}j rad/s")
                    if label == "zero":
                        complex_zeros += 2
                continue
            if r.real > 0:
                irregular.append(f"a right-half-plane {label} at +{r.real:.4g} rad/s")
                continue
            out.append(float(-r.real))
    # zpk gain times corner products gives the time-constant-form gain
    k = float(num[0] / den[0])
    roots_z = zeros[np.abs(zeros) > 1e-9 * scale]
    roots_p = poles[np.abs(poles) > 1e-9 * scale]
    k *= float(np.real(np.prod(-roots_z))) / float(np.real(np.prod(-roots_p))) if roots_p.size or roots_z.size else 1.0
    return TargetShape(
        k, n_int, np.sort(np.array(pz)), np.sort(np.array(pp)), tuple(irregular), complex_zeros, controller
    )


def refuse(topology: Topology, shape: TargetShape, needs: str) -> UnrealizableError:
    return UnrealizableError(f"{topology.name} realizes {needs}; the target has {shape.describe()}", key="topology")


# ----------------------------------------------------------------------------------- topology


@dataclass(frozen=True)
class Topology:
    """One catalog entry. See the module docstring for the conventions."""

    name: str
    description: str
    parts: tuple[Part, ...]
    stages: tuple[Stage, ...]
    inverting: bool
    represents: str
    inputs: tuple[str, ...] = ("in",)
    free_parts: tuple[str, ...] = ()
    fixed_parts: Mapping[str, float] = field(default_factory=dict)
    equal_parts: tuple[tuple[str, str], ...] = ()  # (copy, original): same value by design
    tunable: Mapping[str, tuple[str, int]] = field(default_factory=dict)  # param -> (part, exponent)
    equations: tuple[str, ...] = ()
    junctions: tuple[Junction, ...] = ()  # passive nodes inside stages (see networks.Junction)
    _coefficients: Callable | None = None
    _setpoint_coefficients: Callable | None = None
    _parameters: Callable | None = None
    _fit: Callable | None = None
    _solve: Callable | None = None

    # ------------------------------------------------------------- basic facts
    @property
    def sign(self) -> int:
        """−1 for an inverting stage (output = −F(s)·input), +1 otherwise."""
        return -1 if self.inverting else 1

    @property
    def amplifiers(self) -> int:
        return len(self.stages)

    @property
    def part_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parts)

    def part(self, name: str) -> Part:
        for p in self.parts:
            if p.name == name:
                return p
        raise InputError(f"{self.name} has no part {name!r}; its parts are {', '.join(self.part_names)}", key="part")

    @property
    def two_input(self) -> bool:
        return len(self.inputs) == 2

    # ------------------------------------------------------------- parts in, responses out
    def check_parts(self, parts: Mapping[str, object], *, where: str = "parts") -> dict[str, np.ndarray]:
        """Validate a part mapping (numbers or loopshift value strings) -> float arrays.

        Every non-optional part must be present; values must be positive and finite (an optional
        part may be absent = not fitted). Unknown names are refused.
        """
        known = set(self.part_names)
        for key in parts:
            if key not in known:
                raise InputError(
                    f"{self.name} has no part {key!r}; its parts are {', '.join(self.part_names)}", where=where, key=key
                )
        out: dict[str, np.ndarray] = {}
        for p in self.parts:
            if p.name not in parts:
                if p.optional:
                    out[p.name] = np.asarray(open_value(p))
                    continue
                raise InputError(f"{self.name} needs a value for {p.name} ({p.role})", where=where, key=p.name)
            raw = parts[p.name]
            if isinstance(raw, str):
                raw = parse_value(raw, p.unit_kind, field=p.name)
            arr = np.asarray(raw, dtype=float)
            open_ok = p.optional and np.all(arr == open_value(p))
            if not open_ok and (not np.all(np.isfinite(arr)) or np.any(arr <= 0)):
                bad = arr.ravel()[0] if arr.size else arr
                raise InputError(
                    f"{p.name} must be a positive finite {'resistance' if p.kind == 'R' else 'capacitance'}"
                    f", found {float(bad):g}",
                    where=where,
                    key=p.name,
                )
            out[p.name] = arr
        return out

    def coefficients(self, parts: Mapping[str, np.ndarray]) -> tuple[list, list]:
        """(num, den) of F(s): lists of coefficient arrays, descending powers of s."""
        return self._coefficients(parts)

    def setpoint_coefficients(self, parts: Mapping[str, np.ndarray]) -> tuple[list, list]:
        """(num, den) of the setpoint path Cr(s) (two-input stages only)."""
        if self._setpoint_coefficients is None:
            raise InputError(f"{self.name} has a single input", key="topology")
        return self._setpoint_coefficients(parts)

    def response(self, parts: Mapping[str, np.ndarray], f_hz, *, path: str = "controller") -> np.ndarray:
        """F(j2πf) for many part sets: parts of shape (draws,) -> complex (draws, freqs).

        ``path="setpoint"`` gives Cr(s) of a two-input stage.
        """
        w = 2 * np.pi * np.asarray(f_hz, dtype=float)
        num, den = self.setpoint_coefficients(parts) if path == "setpoint" else self.coefficients(parts)
        return polyval_jw(num, w) / polyval_jw(den, w)

    def controller_from_parts(self, parts: Mapping[str, object], *, name: str = "") -> Controller:
        """+C(s) as the stage realizes it (the positive form F(s)); the stage's sign is
        :attr:`sign` (``inverting``). Parts: name -> ohms / farads (numbers or "47k" strings)."""
        checked = self.check_parts(parts)
        num, den = self.coefficients(checked)
        return _controller(num, den, name or self.name)

    def stage_controller_from_parts(self, parts: Mapping[str, object]) -> Controller:
        """Output over input of the bare stage: ``sign · F(s)``."""
        return self.controller_from_parts(parts).scaled(self.sign)

    def paths_from_parts(self, parts: Mapping[str, object]) -> dict[str, Controller]:
        """Both paths of a two-input stage: u = Cr·sp − Cy·meas (times the stage sign).

        Returns {"setpoint": Cr, "measurement": Cy}; a one-input stage returns {"input": F}.
        """
        checked = self.check_parts(parts)
        if not self.two_input:
            return {"input": _controller(*self.coefficients(checked), self.name)}
        return {
            "setpoint": _controller(*self.setpoint_coefficients(checked), f"{self.name} setpoint path"),
            "measurement": _controller(*self.coefficients(checked), f"{self.name} measurement path"),
        }

    def parameters(self, parts: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """The design quantities (gains in V/V, times in s) the parts set, vectorized."""
        return self._parameters(parts)

    # ------------------------------------------------------------- design
    def fit(self, target: Controller, *, settings=None) -> list[dict[str, float]]:
        """Design quantities of F(s) realizing ``target`` exactly (its sign aside): one dict per
        alternative (e.g. which zero the derivative network takes). Raises UnrealizableError."""
        shape = analyse_target(target)
        return self._fit(self, shape, settings)

    def solve(self, params: Mapping[str, float], free: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """All part values from the design quantities and the freely chosen parts (arrays)."""
        out = self._solve(params, dict(free))
        for k, v in self.fixed_parts.items():
            out.setdefault(k, np.asarray(v, dtype=float))
        for copy, original in self.equal_parts:
            out[copy] = out[original]
        return {p.name: np.asarray(out[p.name], dtype=float) for p in self.parts}

    def summary(self) -> dict:
        return {
            "name": self.name,
            "description": self.description,
            "inverting": self.inverting,
            "amplifiers": self.amplifiers,
            "inputs": list(self.inputs),
            "represents": self.represents,
            "parts": {p.name: p.role for p in self.parts},
            "equations": list(self.equations),
            "internal_nodes": {j.name: j.role for j in self.junctions},
        }


def _controller(num: list, den: list, name: str) -> Controller:
    n = [float(np.asarray(c)) for c in num]
    d = [float(np.asarray(c)) for c in den]
    return Controller.analog(n, d, name)


# ----------------------------------------------------------------------------------- node solve


def node_responses(
    topology: Topology,
    parts: Mapping[str, np.ndarray],
    f_hz,
    *,
    drive: Mapping[str, complex] | None = None,
    open_loop_gain: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Voltages at every stage output and junction, solving the circuit stage by stage (stages that
    feed each other, such as a biquad's integrator loop, and a junction with the stages around it
    are solved together as one small linear system).

    ``drive`` maps input nodes to their (complex) amplitude (default: 1 on ``in``, or
    sp = 0, meas = −1 for two-input stages, i.e. a unit error). ``open_loop_gain`` is A(jω) over
    ``f_hz`` (None = ideal op-amps). Each stage:  out = A(V+·Yt − Σ Yk Vk) / (Yt + A·Yf), with
    Yt = Σ Yk + Yf, which tends to V+(1 + Zf ΣYk) − Zf Σ Yk Vk as A → ∞.
    """
    f = np.asarray(f_hz, dtype=float)
    s = 2j * np.pi * f
    if drive is None:
        drive = {"in": 1.0} if not topology.two_input else {"sp": 0.0, "meas": -1.0}
    nodes: dict[str, np.ndarray] = {k: np.asarray(v, dtype=complex) + 0 * s for k, v in drive.items()}
    p = {
        k: np.asarray(v, dtype=float)[..., None] if np.ndim(v) else np.asarray(v, dtype=float) for k, v in parts.items()
    }
    items = _solve_order(topology)
    i = 0
    while i < len(items):
        j = _loop_block_end(items, i, nodes)
        block = items[i : j + 1]
        if any(isinstance(x, Junction) for x in block):
            nodes.update(_mixed_block(block, nodes, p, s, open_loop_gain))
        elif j == i:
            nodes[items[i].output] = _stage_alone(items[i], nodes, p, s, open_loop_gain)
        else:
            nodes.update(_stage_block(block, nodes, p, s, open_loop_gain))
        i = j + 1
    return nodes


# ------------------------------------------------------------- the circuit as polynomials in s
# A rational function is (num, den), each a list of coefficients in ASCENDING powers of s, every
# coefficient a float or an array over the draws. Exact zeros are the float 0.0, so a product
# keeps them exact and a common factor s^k can be divided out.


class _NotPolynomial(Exception):
    """The circuit is one :func:`circuit_polynomials` does not write out (solved node by node)."""


def _p_add(a: list, b: list) -> list:
    if len(a) < len(b):
        a, b = b, a
    return [x + b[i] if i < len(b) else x for i, x in enumerate(a)]


def _zero(c) -> bool:
    return isinstance(c, float) and c == 0.0


def _p_mul(a: list, b: list) -> list:
    out: list = [0.0] * (len(a) + len(b) - 1)
    for i, x in enumerate(a):
        if _zero(x):
            continue
        for j, y in enumerate(b):
            if not _zero(y):
                out[i + j] = out[i + j] + x * y
    return out


def _r_add(x: tuple, y: tuple) -> tuple:
    (a, b), (c, d) = x, y
    if b is d:
        return _p_add(a, c), b
    return _p_add(_p_mul(a, d), _p_mul(c, b)), _p_mul(b, d)


def _r_mul(x: tuple, y: tuple) -> tuple:
    return _p_mul(x[0], y[0]), _p_mul(x[1], y[1])


def _r_neg(x: tuple) -> tuple:
    return [-c for c in x[0]], x[1]


_ONE = [1.0]
_R_ZERO = ([0.0], _ONE)


def _r_impedance(net, p: Mapping[str, np.ndarray]) -> tuple | None:
    """The impedance of ``net`` as a rational function of s; None for an open network."""
    from convert.circuit.topologies.networks import C, R, Series

    if isinstance(net, (R, C)):
        v = np.asarray(p[net.name], dtype=float)
        open_ = np.isinf(v) if isinstance(net, R) else v == 0
        if open_.all():
            return None
        if open_.any():  # some draws open, some not: not one polynomial shape
            raise _NotPolynomial
        return ([v], _ONE) if isinstance(net, R) else (_ONE, [0.0, v])
    if isinstance(net, Series):
        parts = [_r_impedance(i, p) for i in net.items]
        if any(z is None for z in parts):
            return None
        total = parts[0]
        for z in parts[1:]:
            total = _r_add(total, z)
        return total
    ys = [y for y in (_r_admittance(i, p) for i in net.items) if y is not _R_ZERO]
    if not ys:
        return None
    total = ys[0]
    for y in ys[1:]:
        total = _r_add(total, y)
    return total[1], total[0]


def _r_admittance(net, p) -> tuple:
    z = _r_impedance(net, p)
    return _R_ZERO if z is None else (z[1], z[0])


def _r_tidy(x: tuple) -> tuple:
    """Divide out a common factor s^k, drop zero top coefficients, and scale both by the size of
    the denominator (per draw), so products of many stages neither overflow nor underflow."""
    num, den = list(x[0]), list(x[1])
    while len(num) > 1 and len(den) > 1 and _zero(num[0]) and _zero(den[0]):
        num, den = num[1:], den[1:]
    for poly in (num, den):
        while len(poly) > 1 and _zero(poly[-1]):
            poly.pop()
    size = np.max(np.abs(np.broadcast_arrays(*[np.asarray(c, dtype=float) for c in den])), axis=0)
    if not (np.all(np.isfinite(size)) and np.all(size > 0)):
        raise _NotPolynomial
    return [c / size if not _zero(c) else c for c in num], [c / size if not _zero(c) else c for c in den]


def circuit_polynomials(
    topology: Topology, parts: Mapping[str, np.ndarray], open_loop: tuple[list, list] | None = None
) -> tuple[list, list] | None:
    """(num, den) of the circuit's output over the default drive (:func:`node_responses`) in
    DESCENDING powers of s, the coefficients arrays over the draws, with op-amps of open-loop gain
    ``open_loop`` = (num, den) in descending powers of s (None: ideal). The same equations as
    :func:`node_responses`, in the same blocks, written out as polynomials (one multiply-add per
    coefficient and draw instead of a complex network evaluation per frequency and draw): a stage
    alone by its formula, stages that feed each other and junctions with the stages around them
    by Cramer's rule on the block's equations (rows cleared of their denominators). None when a
    block has more than :data:`MAX_WRITTEN_OUT` unknowns, or parts are open in some draws and not
    in others (then the node solution is the one used)."""
    drive = {"in": 1.0} if not topology.two_input else {"sp": 0.0, "meas": -1.0}
    p = {k: np.asarray(v, dtype=float) for k, v in parts.items()}
    a = None if open_loop is None else ([float(c) for c in open_loop[0][::-1]], [float(c) for c in open_loop[1][::-1]])
    nodes: dict[str, tuple] = {k: ([float(v)], _ONE) for k, v in drive.items()}
    items = _solve_order(topology)
    try:
        i = 0
        while i < len(items):
            j = _loop_block_end(items, i, nodes)
            block = items[i : j + 1]
            if j == i and isinstance(block[0], Stage):
                nodes[block[0].output] = _r_tidy(_r_stage_alone(block[0], nodes, p, a))
            else:
                solved = _r_block(block, nodes, p, a)
                if solved is None:
                    return None
                nodes.update({k: _r_tidy(v) for k, v in solved.items()})
            i = j + 1
    except _NotPolynomial:
        return None
    num, den = nodes[output_node(topology)]
    return num[::-1], den[::-1]


#: Most unknowns of one block (stages in a loop, a junction with its stages) written out by
#: Cramer's rule; a larger block is solved node by node.
MAX_WRITTEN_OUT = 4


def _r_divider(st: Stage, p) -> tuple | None:
    """The + input divider ratio zb / (zt + zb) of a stage, or None (grounded + input)."""
    if st.plus is None:
        return None
    zt, zb = _r_impedance(st.plus[1], p), _r_impedance(st.plus[2], p)
    if zt is None or zb is None:
        raise _NotPolynomial
    total = _r_add(zt, zb)
    return _r_mul(zb, (total[1], total[0]))


def _r_stage_alone(st: Stage, nodes: Mapping, p, a) -> tuple:
    """out = A(V+·Yt − Σ Yk Vk) / (Yt + A·Yf), or (V+·Yt − Σ Yk Vk) / Yf for an ideal op-amp."""
    yf = _r_admittance(st.feedback, p)
    injected, yt = _R_ZERO, yf
    for src, net in st.inputs:
        y = _r_admittance(net, p)
        if y is _R_ZERO:
            continue
        injected = _r_add(injected, _r_mul(nodes[src], y))
        yt = _r_add(yt, y)
    x = _r_neg(injected)
    ratio = _r_divider(st, p)
    if ratio is not None:
        x = _r_add(_r_mul(_r_mul(nodes[st.plus[0]], ratio), yt), x)
    if a is None:
        return _r_mul(x, (yf[1], yf[0]))  # x / yf
    den = _r_add(_r_mul((a[1], _ONE), yt), _r_mul((a[0], _ONE), yf))
    return _r_mul(_r_mul((a[0], _ONE), x), (den[1], den[0]))


def _r_block(block: list, nodes: Mapping, p, a) -> dict | None:
    """The voltages a block drives, as rational functions: the equations of :func:`_stage_block`
    (stages only) or :func:`_mixed_block` (with junctions), each row multiplied by its entries'
    denominators, then Cramer's rule. None when the block has more than :data:`MAX_WRITTEN_OUT`
    unknowns."""
    inv_a = _R_ZERO if a is None else (a[1], a[0])
    if not any(isinstance(x, Junction) for x in block):
        index = {st.output: k for k, st in enumerate(block)}
        n = len(block)
        m = [[_R_ZERO] * n for _ in range(n)]
        rhs = [_R_ZERO] * n
        for k, st in enumerate(block):
            yf = _r_admittance(st.feedback, p)
            ys = [(src, _r_admittance(net, p)) for src, net in st.inputs]
            yt = yf
            for _, y in ys:
                yt = _r_add(yt, y)
            m[k][k] = _r_add(_r_add(m[k][k], _r_mul(yt, inv_a)), yf)
            for src, y in ys:
                if src in index:
                    m[k][index[src]] = _r_add(m[k][index[src]], y)
                else:
                    rhs[k] = _r_add(rhs[k], _r_neg(_r_mul(nodes[src], y)))
            ratio = _r_divider(st, p)
            if ratio is not None:
                src = st.plus[0]
                if src in index:
                    m[k][index[src]] = _r_add(m[k][index[src]], _r_neg(_r_mul(yt, ratio)))
                else:
                    rhs[k] = _r_add(rhs[k], _r_mul(_r_mul(nodes[src], yt), ratio))
        wanted = index
    else:
        index, minus, n = _mixed_unknowns(block)
        if n > MAX_WRITTEN_OUT:
            return None
        m = [[_R_ZERO] * n for _ in range(n)]
        rhs = [_R_ZERO] * n

        def put(row, node, coeff):
            if node == GROUND:
                return
            if node in index:
                m[row][index[node]] = _r_add(m[row][index[node]], coeff)
            else:
                rhs[row] = _r_add(rhs[row], _r_neg(_r_mul(coeff, nodes[node])))

        adm = {
            k: [(src, _r_admittance(net, p)) for src, net in x.inputs]
            for k, x in enumerate(block)
            if isinstance(x, Stage)
        }
        for k, x in enumerate(block):
            if isinstance(x, Junction):
                row = index[x.name]
                for node, net in x.branches:
                    y = _r_admittance(net, p)
                    m[row][row] = _r_add(m[row][row], y)
                    put(row, node, _r_neg(y))
                for kk, st in enumerate(block):
                    if not isinstance(st, Stage):
                        continue
                    for src, y in adm[kk]:
                        if src == x.name:
                            m[row][row] = _r_add(m[row][row], y)
                            m[row][minus[kk]] = _r_add(m[row][minus[kk]], _r_neg(y))
                    if st.plus is not None and st.plus[0] == x.name:
                        zt, zb = _r_impedance(st.plus[1], p), _r_impedance(st.plus[2], p)
                        if zt is None or zb is None:
                            raise _NotPolynomial
                        total = _r_add(zt, zb)
                        m[row][row] = _r_add(m[row][row], (total[1], total[0]))
                continue
            yf = _r_admittance(x.feedback, p)
            out, vm = index[x.output], minus[k]
            for src, y in adm[k]:
                put(out, src, y)
                m[out][vm] = _r_add(m[out][vm], _r_neg(y))
            m[out][out] = _r_add(m[out][out], yf)
            m[out][vm] = _r_add(m[out][vm], _r_neg(yf))
            m[vm][vm] = _r_add(m[vm][vm], (_ONE, _ONE))
            m[vm][out] = _r_add(m[vm][out], inv_a)
            ratio = _r_divider(x, p)
            if ratio is not None:
                put(vm, x.plus[0], _r_neg(ratio))
        wanted = index
    if n > MAX_WRITTEN_OUT:
        return None
    rows = [_cleared(m[r] + [rhs[r]]) for r in range(n)]
    mat = [row[:n] for row in rows]
    b = [row[n] for row in rows]
    det = _p_det(mat)
    out = {}
    for name, col in wanted.items():
        mc = [[b[r] if c == col else mat[r][c] for c in range(n)] for r in range(n)]
        out[name] = (_p_det(mc), det)
    return out


def _cleared(row: list) -> list:
    """Polynomials proportional to the rational entries of one equation: each times the product
    of the other entries' distinct denominators."""
    dens: list = []
    for _, d in row:
        if not (len(d) == 1 and not isinstance(d[0], np.ndarray) and d[0] == 1.0) and not any(d is e for e in dens):
            dens.append(d)
    out = []
    for num, d in row:
        poly = num
        for e in dens:
            if e is not d:
                poly = _p_mul(poly, e)
        out.append(poly)
    return out


def _p_det(mat: list) -> list:
    """Determinant of a small square matrix of polynomials (Laplace along the first row)."""
    n = len(mat)
    if n == 1:
        return mat[0][0]
    total = [0.0]
    for j in range(n):
        if all(_zero(c) for c in mat[0][j]):
            continue
        minor = [row[:j] + row[j + 1 :] for row in mat[1:]]
        term = _p_mul(mat[0][j], _p_det(minor))
        total = _p_add(total, term if j % 2 == 0 else [-c for c in term])
    return total


def _reads(st: Stage) -> set[str]:
    return {src for src, _ in st.inputs} | ({st.plus[0]} if st.plus else set())


def _drives(x) -> str:
    return x.name if isinstance(x, Junction) else x.output


def _needs(x) -> set[str]:
    if isinstance(x, Junction):
        return {node for node, _ in x.branches if node != GROUND}
    return _reads(x)


def _solve_order(topology: Topology) -> list:
    """Stages in their order, each junction placed just before the first stage that reads it."""
    out: list = []
    placed: set[str] = set()
    for st in topology.stages:
        for jn in topology.junctions:
            if jn.name in _reads(st) and jn.name not in placed:
                out.append(jn)
                placed.add(jn.name)
        out.append(st)
    out += [jn for jn in topology.junctions if jn.name not in placed]
    return out


def _loop_block_end(items: list, i: int, known: Mapping) -> int:
    """Index of the last item of the smallest run items[i..j] that reads no node outside what is
    known and what the run itself drives (j = i: item i reads only known nodes). A junction's run
    also holds every stage that reads it (their inputs load the junction)."""
    needed = set(_needs(items[i]))
    j = i
    while True:
        run = items[i : j + 1]
        driven = {_drives(x) for x in run}
        junctions = {x.name for x in run if isinstance(x, Junction)}
        readers = {_drives(x) for x in items if isinstance(x, Stage) and _reads(x) & junctions}
        missing = (needed - set(known) - driven) | (readers - driven)
        if not missing:
            return j
        j += 1
        if j >= len(items):
            raise InputError(
                f"the circuit reads node(s) {', '.join(sorted(missing))} that no stage drives", key="topology"
            )
        needed |= _needs(items[j])


def _mixed_unknowns(block) -> tuple[dict, dict, int]:
    """The unknowns of a block with junctions: (node -> index for each stage output and junction,
    block position of a stage -> index of its inverting input, count)."""
    index: dict[str, int] = {}
    minus: dict[int, int] = {}
    for k, x in enumerate(block):
        index[_drives(x)] = len(index) + len(minus)
        if isinstance(x, Stage):
            minus[k] = index[_drives(x)] + 1
    return index, minus, len(index) + len(minus)


def _mixed_block(block, nodes, p, s, open_loop_gain):
    """Stages and junctions solved together by nodal analysis (unknowns: each stage's output and
    inverting-input voltage, each junction's voltage).

    Rows: the current balance at each inverting input, Σ Yk (Vk − V−) + Yf (Vout − V−) = 0; each
    op-amp, V− + Vout/A − d·Vsrc = 0 (d the + input divider ratio, 1/A = 0 when ideal); each
    junction, Σ Yb (Vj − Vb) + Σ Yk (Vj − V−k) + Vj/(Zt + Zb) = 0 over its branches, the stage inputs
    it feeds and the + dividers it feeds. Known nodes move to the right-hand side.
    """
    index, minus, n = _mixed_unknowns(block)
    with np.errstate(divide="ignore", invalid="ignore"):
        adm = {}
        for k, x in enumerate(block):
            if isinstance(x, Stage):
                adm[k] = stage_admittances(x, p, s)
        branch_y = {
            k: [(node, 1.0 / impedance(net, p, s)) for node, net in x.branches]
            for k, x in enumerate(block)
            if isinstance(x, Junction)
        }
        plus_y = {
            k: 1.0 / (impedance(x.plus[1], p, s) + impedance(x.plus[2], p, s))
            for k, x in enumerate(block)
            if isinstance(x, Stage) and x.plus is not None
        }
    arrays = [s] + [y for t in adm.values() for y in [t[0]] + [v for _, v in t[1]]]
    arrays += [y for b in branch_y.values() for _, y in b] + list(plus_y.values())
    arrays += [nodes[name] for x in block for name in _needs(x) if name in nodes]
    shape = np.broadcast_shapes(*[np.shape(a) for a in arrays])
    m = np.zeros(shape + (n, n), dtype=complex)
    rhs = np.zeros(shape + (n,), dtype=complex)
    inv_a = 0.0 if open_loop_gain is None else 1.0 / np.asarray(open_loop_gain)

    def put(row, node, coeff):
        """coeff · V(node) on the left side of ``row`` (a known node goes to the right side)."""
        if node == GROUND:
            return
        if node in index:
            m[..., row, index[node]] += coeff
        else:
            rhs[..., row] -= coeff * nodes[node]

    for k, x in enumerate(block):
        if isinstance(x, Junction):
            row = index[x.name]
            for node, y in branch_y[k]:
                m[..., row, row] += y
                put(row, node, -y)
            for kk, st in enumerate(block):
                if not isinstance(st, Stage):
                    continue
                for src, y in adm[kk][1]:
                    if src == x.name:
                        m[..., row, row] += y
                        m[..., row, minus[kk]] -= y
                if st.plus is not None and st.plus[0] == x.name:
                    m[..., row, row] += plus_y[kk]
            continue
        yf, ys, ratio = adm[k]
        out, vm = index[x.output], minus[k]
        row = out  # the balance at the inverting input
        for src, y in ys:
            put(row, src, y)
            m[..., row, vm] -= y
        m[..., row, out] += yf
        m[..., row, vm] -= yf
        row = vm  # the op-amp
        m[..., row, vm] += 1.0
        m[..., row, out] += inv_a
        if ratio is not None:
            put(row, x.plus[0], -ratio)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.linalg.solve(m, rhs[..., None])[..., 0]
    return {name: v[..., i] for name, i in index.items()}


def stage_admittances(st, p, s):
    """(feedback admittance, [(source node, input admittance)], + input divider ratio or None) of a
    stage at complex frequencies ``s`` (rad/s), parts broadcast against s."""
    with np.errstate(divide="ignore", invalid="ignore"):
        yf = 1.0 / impedance(st.feedback, p, s)
        ys = [(src, 1.0 / impedance(net, p, s)) for src, net in st.inputs]
        ratio = None
        if st.plus is not None:
            _, top, bottom = st.plus
            zt, zb = impedance(top, p, s), impedance(bottom, p, s)
            ratio = zb / (zt + zb)
    return yf, ys, ratio


def _stage_alone(st, nodes, p, s, open_loop_gain):
    """One stage whose inputs are all known: out = A(V+·Yt − Σ Yk Vk) / (Yt + A·Yf)."""
    yf, ys, ratio = stage_admittances(st, p, s)
    ysum = sum(y for _, y in ys)
    injected = sum(nodes[src] * y for src, y in ys)
    vplus = 0.0 if ratio is None else nodes[st.plus[0]] * ratio
    yt = ysum + yf
    if open_loop_gain is None:
        return (vplus * yt - injected) / yf
    a = np.asarray(open_loop_gain)
    return a * (vplus * yt - injected) / (yt + a * yf)


def _stage_block(block, nodes, p, s, open_loop_gain):
    """Stages that feed each other (a loop, e.g. a biquad's integrators), solved together.

    Stage k's equation, divided by A:  (Yt/A + Yf)·Vk + Σ Yi·Vi − Yt·d·Vplus = 0, with d the
    + input divider ratio; 1/A = 0 for ideal op-amps. Known nodes move to the right-hand side.
    """
    index = {st.output: k for k, st in enumerate(block)}
    terms = []
    for st in block:
        yf, ys, ratio = stage_admittances(st, p, s)
        yt = sum(y for _, y in ys) + yf
        terms.append((yf, ys, ratio, yt))
    shape = np.broadcast_shapes(
        s.shape,
        *[np.shape(x) for t in terms for x in [t[0], t[3]] + [y for _, y in t[1]]],
        *[np.shape(nodes[src]) for st in block for src, _ in st.inputs if src in nodes],
    )
    n = len(block)
    m = np.zeros(shape + (n, n), dtype=complex)
    rhs = np.zeros(shape + (n,), dtype=complex)
    inv_a = 0.0 if open_loop_gain is None else 1.0 / np.asarray(open_loop_gain)
    for k, (st, (yf, ys, ratio, yt)) in enumerate(zip(block, terms)):
        m[..., k, k] += yt * inv_a + yf
        for src, y in ys:
            if src in index:
                m[..., k, index[src]] += y
            else:
                rhs[..., k] -= nodes[src] * y
        if ratio is not None:
            src = st.plus[0]
            if src in index:
                m[..., k, index[src]] -= yt * ratio
            else:
                rhs[..., k] += nodes[src] * yt * ratio
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.linalg.solve(m, rhs[..., None])[..., 0]
    return {st.output: v[..., k] for k, st in enumerate(block)}


def output_node(topology: Topology) -> str:
    return topology.stages[-1].output
