"""The catalog of op-amp stage topologies, each defined once.

A topology is a :class:`Topology` instance holding

* its **parts** (name, resistor or capacitor, role) — resistor values in ohms, capacitors in farads;
* its **circuit** as a list of op-amp :class:`Stage` s (used by the netlist writer, the schematic,
  the op-amp model and the output-swing check);
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

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np

from convert.controller import Controller
from convert.errors import InputError, UnrealizableError

# ----------------------------------------------------------------------------------- networks


@dataclass(frozen=True)
class R:
    """A resistor (part name)."""

    name: str


@dataclass(frozen=True)
class C:
    """A capacitor (part name)."""

    name: str


@dataclass(frozen=True)
class Series:
    items: tuple

    def __init__(self, *items):
        object.__setattr__(self, "items", tuple(items))


@dataclass(frozen=True)
class Parallel:
    items: tuple

    def __init__(self, *items):
        object.__setattr__(self, "items", tuple(items))


def network_parts(net) -> list[str]:
    """Part names in a network, in drawing order."""
    if isinstance(net, (R, C)):
        return [net.name]
    out: list[str] = []
    for item in net.items:
        out.extend(network_parts(item))
    return out


def is_open(net, parts: Mapping[str, float]) -> bool:
    """True when ``net`` conducts nothing with these part values: a resistor of ``inf`` ohms or a
    capacitor of 0 F (a part left off the board), through series and parallel combinations."""
    if isinstance(net, R):
        return math.isinf(parts[net.name])
    if isinstance(net, C):
        return parts[net.name] == 0
    if isinstance(net, Series):
        return any(is_open(i, parts) for i in net.items)
    return all(is_open(i, parts) for i in net.items)


def impedance(net, parts: Mapping[str, np.ndarray], s: np.ndarray) -> np.ndarray:
    """Impedance of ``net`` at complex frequencies ``s`` (rad/s); parts broadcast against s.

    An open resistor is ``inf`` ohms and an open (not fitted) capacitor is 0 F.
    """
    if isinstance(net, R):
        return parts[net.name] + 0 * s
    if isinstance(net, C):
        with np.errstate(divide="ignore"):
            return 1.0 / (s * parts[net.name])
    if isinstance(net, Series):
        total = 0
        for item in net.items:
            total = total + impedance(item, parts, s)
        return total
    admittance = 0
    for item in net.items:
        with np.errstate(divide="ignore"):
            admittance = admittance + 1.0 / impedance(item, parts, s)
    with np.errstate(divide="ignore"):
        return 1.0 / admittance


@dataclass(frozen=True)
class Stage:
    """One op-amp stage.

    ``inputs``: (source node, network into the inverting node) pairs. ``feedback``: the network
    from the output to the inverting node. ``plus``: ``None`` (non-inverting input grounded) or
    (source node, top network, bottom network to ground) forming a divider at the + input.
    """

    amp: str
    output: str
    feedback: object
    inputs: tuple
    plus: tuple | None = None
    role: str = ""


@dataclass(frozen=True)
class Part:
    name: str
    kind: str  # "R" or "C"
    role: str
    optional: bool = False  # may be left unfitted (open) in some designs

    @property
    def unit_kind(self) -> str:
        return "ohm" if self.kind == "R" else "farad"


def _open_value(part: Part) -> float:
    return math.inf if part.kind == "R" else 0.0


# ----------------------------------------------------------------------------------- helpers


def polyval_many(coeffs: list, s: np.ndarray) -> np.ndarray:
    """Horner over coefficient arrays of shape (draws,) at s of shape (freqs,) -> (draws, freqs)."""
    s = np.asarray(s)
    acc = np.asarray(coeffs[0], dtype=float)[..., None] * np.ones_like(s)
    for c in coeffs[1:]:
        acc = acc * s + np.asarray(c, dtype=float)[..., None]
    return acc


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
        bits = [f"{self.integrators} integrator(s)", f"{len(self.zeros)} real zero(s)", f"{len(self.poles)} real pole(s)"]
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
    return TargetShape(k, n_int, np.sort(np.array(pz)), np.sort(np.array(pp)), tuple(irregular), complex_zeros,
                       controller)


def _refuse(topology: "Topology", shape: TargetShape, needs: str) -> UnrealizableError:
    return UnrealizableError(
        f"{topology.name} realizes {needs}; the target has {shape.describe()}", key="topology")


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
        from convert.values import parse_value

        known = set(self.part_names)
        for key in parts:
            if key not in known:
                raise InputError(f"{self.name} has no part {key!r}; its parts are {', '.join(self.part_names)}",
                                 where=where, key=key)
        out: dict[str, np.ndarray] = {}
        for p in self.parts:
            if p.name not in parts:
                if p.optional:
                    out[p.name] = np.asarray(_open_value(p))
                    continue
                raise InputError(f"{self.name} needs a value for {p.name} ({p.role})", where=where, key=p.name)
            raw = parts[p.name]
            if isinstance(raw, str):
                raw = parse_value(raw, p.unit_kind, field=p.name)
            arr = np.asarray(raw, dtype=float)
            open_ok = p.optional and np.all(arr == _open_value(p))
            if not open_ok and (not np.all(np.isfinite(arr)) or np.any(arr <= 0)):
                bad = arr.ravel()[0] if arr.size else arr
                raise InputError(f"{p.name} must be a positive finite {'resistance' if p.kind == 'R' else 'capacitance'}"
                                 f", found {float(bad):g}", where=where, key=p.name)
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
        s = 2j * np.pi * np.asarray(f_hz, dtype=float)
        num, den = self.setpoint_coefficients(parts) if path == "setpoint" else self.coefficients(parts)
        return polyval_many(num, s) / polyval_many(den, s)

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
        return {"setpoint": _controller(*self.setpoint_coefficients(checked), f"{self.name} setpoint path"),
                "measurement": _controller(*self.coefficients(checked), f"{self.name} measurement path")}

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
        return {"name": self.name, "description": self.description, "inverting": self.inverting,
                "amplifiers": self.amplifiers, "inputs": list(self.inputs), "represents": self.represents,
                "parts": {p.name: p.role for p in self.parts}, "equations": list(self.equations)}


def _controller(num: list, den: list, name: str) -> Controller:
    n = [float(np.asarray(c)) for c in num]
    d = [float(np.asarray(c)) for c in den]
    return Controller.analog(n, d, name)


# ----------------------------------------------------------------------------------- node solve


def node_responses(topology: Topology, parts: Mapping[str, np.ndarray], f_hz, *,
                   drive: Mapping[str, complex] | None = None, open_loop_gain: np.ndarray | None = None
                   ) -> dict[str, np.ndarray]:
    """Voltages at every stage output, solving the circuit stage by stage.

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
    p = {k: np.asarray(v, dtype=float)[..., None] if np.ndim(v) else np.asarray(v, dtype=float)
         for k, v in parts.items()}
    for st in topology.stages:
        with np.errstate(divide="ignore", invalid="ignore"):
            yf = 1.0 / impedance(st.feedback, p, s)
            ys = [(nodes[src], 1.0 / impedance(net, p, s)) for src, net in st.inputs]
        ysum = sum(y for _, y in ys)
        injected = sum(v * y for v, y in ys)
        if st.plus is None:
            vplus = 0.0
        else:
            src, top, bottom = st.plus
            zt, zb = impedance(top, p, s), impedance(bottom, p, s)
            vplus = nodes[src] * zb / (zt + zb)
        yt = ysum + yf
        if open_loop_gain is None:
            out = (vplus * yt - injected) / yf
        else:
            a = np.asarray(open_loop_gain)
            out = a * (vplus * yt - injected) / (yt + a * yf)
        nodes[st.output] = out
    return nodes


def output_node(topology: Topology) -> str:
    return topology.stages[-1].output


# ----------------------------------------------------------------------------------- PID family


def pid_parameters_from_coefficients(num: list, den: list) -> dict[str, np.ndarray]:
    """Parallel-form kp, ki (1/s), kd (s), tf (s) of (n2 s² + n1 s + n0) / (d2 s² + d1 s).

    Valid for the PID family (den = d1·s·(tf·s + 1)); ti = kp/ki and td = kd/kp are added.
    """
    n = [np.asarray(c, dtype=float) for c in num]
    while len(n) < 3:
        n.insert(0, np.zeros(()))
    d = [np.asarray(c, dtype=float) for c in den]
    while len(d) < 3:
        d.insert(0, np.zeros(()))
    d2, d1 = d[0], d[1]
    tf = d2 / d1
    ki = n[2] / d1
    kp = n[1] / d1 - ki * tf
    kd = n[0] / d1 - kp * tf
    with np.errstate(divide="ignore", invalid="ignore"):
        return {"kp": kp, "ki": ki, "kd": kd, "tf": tf, "ti": kp / ki, "td": kd / kp}


def _pid_fit_numbers(shape: TargetShape) -> dict[str, float]:
    """kp, ki, kd, tf of a target with one integrator and one real pole (any zeros), in the
    positive form (a direct-acting target's sign is taken out: the design adds the inverter)."""
    c = shape.controller.scaled(shape.sign)
    num = np.array(c.num)
    den = np.array(c.den)
    if shape.integrators != 1 or len(shape.poles) != 1 or len(den) != 3 or len(num) > 3:
        raise ValueError
    params = pid_parameters_from_coefficients(list(num), list(den))
    return {k: float(v) for k, v in params.items()}


# ----------------------------------------------------------------------------------- catalog

RSUM = 10e3  # summing and reference resistors of the multi-amplifier stages (ohms), an E6 value


def _k(shape: TargetShape) -> float:
    return abs(shape.k)


def _fit_constant(topo, shape, settings):
    if shape.integrators or len(shape.zeros) or len(shape.poles) or shape.irregular:
        raise _refuse(topo, shape, "a constant gain")
    if topo.name == "unity-inverter" and not math.isclose(_k(shape), 1.0, rel_tol=1e-9):
        raise UnrealizableError(f"unity-inverter realizes a gain of exactly 1, the target's is {_k(shape):.6g}",
                                key="topology")
    return [{"k": _k(shape)}]


def _fit_integrator(topo, shape, settings):
    if shape.integrators != 1 or len(shape.zeros) or len(shape.poles) or shape.irregular:
        raise _refuse(topo, shape, "k/s (one integrator, nothing else)")
    return [{"ti": 1.0 / _k(shape)}]


def _fit_lag(topo, shape, settings):
    if shape.integrators or len(shape.zeros) or len(shape.poles) != 1 or shape.irregular:
        raise _refuse(topo, shape, "k/(tau·s + 1) (one real pole)")
    return [{"k": _k(shape), "tau": 1.0 / shape.poles[0]}]


def _fit_pi(topo, shape, settings):
    if shape.integrators != 1 or len(shape.zeros) != 1 or len(shape.poles) or shape.irregular:
        raise _refuse(topo, shape, "kp·(1 + 1/(ti·s)) (one integrator and one real zero)")
    ti = 1.0 / shape.zeros[0]
    return [{"kp": _k(shape) * ti, "ti": ti}]


def _fit_first_order(topo, shape, settings, *, lead_only: bool):
    if shape.integrators or len(shape.zeros) != 1 or len(shape.poles) != 1 or shape.irregular:
        raise _refuse(topo, shape, "k·(tz·s + 1)/(tp·s + 1) (one real zero and one real pole)")
    z, p = shape.zeros[0], shape.poles[0]
    if math.isclose(z, p, rel_tol=1e-9):
        raise _refuse(topo, shape, "a zero and a pole at different frequencies")
    if lead_only:
        if not z < p:
            raise UnrealizableError(
                f"{topo.name} needs the zero ({z / 2 / math.pi:.4g} Hz) below the pole ({p / 2 / math.pi:.4g} Hz); "
                "use lead-lag-rc for a lag", key="topology")
        kp = _k(shape)
        return [{"kp": kp, "kd": kp * (1 / z - 1 / p), "tf": 1 / p}]
    return [{"k": _k(shape), "tz": 1 / z, "tp": 1 / p}]


def _fit_pid_single(topo, shape, settings):
    if (shape.integrators != 1 or len(shape.zeros) != 2 or len(shape.poles) != 1 or shape.irregular):
        why = ("complex zeros (ti < 4·td in the ideal form): use pid-parallel"
               if shape.complex_zeros else shape.describe())
        raise UnrealizableError(f"{topo.name} realizes k·(1 + ti·s)(1 + td·s)/(ti·s·(1 + tf·s)) with real zeros "
                                f"and td > tf; the target has {why}", key="topology")
    tf = 1.0 / shape.poles[0]
    kint = _k(shape)  # low-frequency asymptote kint/s
    out = []
    for a, b in ((0, 1), (1, 0)):
        ti, td = 1.0 / shape.zeros[a], 1.0 / shape.zeros[b]
        if td > tf * (1 + 1e-9):
            out.append({"kc'": kint * ti, "ti'": ti, "td'": td, "tf": tf})
    if not out:
        raise UnrealizableError(f"{topo.name} needs one zero below the filter pole ({1 / tf / 2 / math.pi:.4g} Hz)",
                                key="topology")
    return out


def _fit_pid_parallel(topo, shape, settings):
    try:
        n = _pid_fit_numbers(shape)
    except ValueError:
        raise _refuse(topo, shape, "kp + ki/s + kd·s/(tf·s + 1) (one integrator, one real filter pole)") from None
    if n["kp"] < -1e-12 * abs(n["kd"] / n["tf"]) or n["ki"] <= 0 or n["kd"] <= 0:
        raise UnrealizableError(f"{topo.name} needs kp >= 0, ki > 0, kd > 0; the target has kp={n['kp']:.4g}, "
                                f"ki={n['ki']:.4g}, kd={n['kd']:.4g}", key="topology")
    return [{"kp": abs(n["kp"]), "ki": n["ki"], "kd": n["kd"], "tf": n["tf"]}]


def _fit_two_input(topo, shape, settings):
    if settings is None:
        raise UnrealizableError(f"{topo.name} needs PID settings with setpoint weights (--pid ... b=0.5 c=0)",
                                key="topology")
    if settings.ki <= 0:
        raise UnrealizableError(f"{topo.name} needs integral action (ki > 0)", key="topology")
    if settings.kd <= 0:
        raise UnrealizableError(f"{topo.name} builds its D amplifier from kd and tf; this {settings.kind} has no "
                                "derivative action (kd = 0), which the catalog has no weighted stage for: give kd and "
                                "tf, or b = 1 for a single-input PI", key="topology")
    if settings.tf <= 0:
        raise UnrealizableError(f"{topo.name} needs a derivative filter (tf > 0 or n=...) with kd > 0",
                                key="topology")
    if settings.kp <= 0:
        raise UnrealizableError(f"{topo.name} needs kp > 0", key="topology")
    return [{"kp": abs(settings.kp), "ki": abs(settings.ki), "kd": abs(settings.kd), "tf": settings.tf,
             "b": settings.b, "c": settings.c}]


def _pos(x):
    return np.asarray(x, dtype=float)


def _catalog() -> dict[str, Topology]:
    T: list[Topology] = []

    # -- unity inverter --------------------------------------------------------------------
    T.append(Topology(
        name="unity-inverter",
        description="inverting amplifier with equal resistors: output = −input",
        parts=(Part("R1", "R", "input resistor"), Part("R2", "R", "feedback resistor, equal to R1")),
        stages=(Stage("U1", "out", R("R2"), (("in", R("R1")),), role="inverter"),),
        inverting=True,
        represents="a gain of exactly 1 (used to correct an inverting stage's sign)",
        free_parts=("R1",), equal_parts=(("R2", "R1"),),
        equations=("F = R2/R1 = 1",),
        _coefficients=lambda p: ([p["R2"] / p["R1"]], [np.ones_like(_pos(p["R1"]))]),
        _parameters=lambda p: {"k": p["R2"] / p["R1"]},
        _fit=_fit_constant,
        _solve=lambda q, f: {"R1": f["R1"], "R2": f["R1"]},
    ))

    # -- inverting gain --------------------------------------------------------------------
    T.append(Topology(
        name="inverting-gain",
        description="inverting amplifier: proportional gain R2/R1",
        parts=(Part("R1", "R", "input resistor"), Part("R2", "R", "feedback resistor (gain = R2/R1)")),
        stages=(Stage("U1", "out", R("R2"), (("in", R("R1")),), role="proportional"),),
        inverting=True,
        represents="a constant gain k > 0",
        free_parts=("R1",),
        tunable={"k": ("R2", 1), "kp": ("R2", 1), "kc": ("R2", 1)},
        equations=("F = R2/R1", "R2 = k·R1"),
        _coefficients=lambda p: ([p["R2"] / p["R1"]], [np.ones_like(_pos(p["R1"]))]),
        _parameters=lambda p: {"k": p["R2"] / p["R1"]},
        _fit=_fit_constant,
        _solve=lambda q, f: {"R1": f["R1"], "R2": q["k"] * f["R1"]},
    ))

    # -- integrator ------------------------------------------------------------------------
    T.append(Topology(
        name="integrator-rc",
        description="inverting integrator: input resistor, feedback capacitor",
        parts=(Part("R1", "R", "input resistor (integral time R1·C1)"), Part("C1", "C", "feedback capacitor")),
        stages=(Stage("U1", "out", C("C1"), (("in", R("R1")),), role="integral"),),
        inverting=True,
        represents="k/s (pure integral action)",
        free_parts=("C1",),
        tunable={"ti": ("R1", 1)},
        equations=("F = 1/(R1·C1·s)", "R1 = ti/C1"),
        _coefficients=lambda p: ([np.ones_like(_pos(p["R1"]))], [p["R1"] * p["C1"], 0 * _pos(p["R1"])]),
        _parameters=lambda p: {"ti": p["R1"] * p["C1"]},
        _fit=_fit_integrator,
        _solve=lambda q, f: {"C1": f["C1"], "R1": q["ti"] / f["C1"]},
    ))

    # -- first-order lag -------------------------------------------------------------------
    T.append(Topology(
        name="first-order-lag",
        description="inverting low-pass: input resistor, feedback resistor parallel capacitor",
        parts=(Part("R1", "R", "input resistor"), Part("R2", "R", "feedback resistor (dc gain R2/R1)"),
               Part("C1", "C", "feedback capacitor (time constant R2·C1)")),
        stages=(Stage("U1", "out", Parallel(R("R2"), C("C1")), (("in", R("R1")),), role="lag"),),
        inverting=True,
        represents="k/(tau·s + 1) (a first-order lag / low-pass)",
        free_parts=("C1",),
        tunable={"k": ("R1", -1), "kp": ("R1", -1), "kc": ("R1", -1)},
        equations=("F = (R2/R1)/(R2·C1·s + 1)", "R2 = tau/C1", "R1 = R2/k"),
        _coefficients=lambda p: ([p["R2"] / p["R1"]], [p["R2"] * p["C1"], np.ones_like(_pos(p["R1"]))]),
        _parameters=lambda p: {"k": p["R2"] / p["R1"], "tau": p["R2"] * p["C1"]},
        _fit=_fit_lag,
        _solve=lambda q, f: {"C1": f["C1"], "R2": q["tau"] / f["C1"], "R1": q["tau"] / f["C1"] / q["k"]},
    ))

    # -- PI ---------------------------------------------------------------------------------
    T.append(Topology(
        name="pi-rc-feedback",
        description="PI: input resistor, feedback resistor in series with a capacitor",
        parts=(Part("R1", "R", "input resistor (kp = R2/R1)"), Part("R2", "R", "feedback resistor"),
               Part("C1", "C", "feedback capacitor (ti = R2·C1)")),
        stages=(Stage("U1", "out", Series(R("R2"), C("C1")), (("in", R("R1")),), role="PI"),),
        inverting=True,
        represents="kp·(1 + 1/(ti·s)) (PI)",
        free_parts=("C1",),
        tunable={"kp": ("R1", -1), "kc": ("R1", -1)},
        equations=("F = (R2·C1·s + 1)/(R1·C1·s) = kp·(1 + 1/(ti·s))", "kp = R2/R1, ti = R2·C1",
                   "R2 = ti/C1", "R1 = R2/kp"),
        _coefficients=lambda p: ([p["R2"] * p["C1"], np.ones_like(_pos(p["R1"]))], [p["R1"] * p["C1"], 0 * _pos(p["R1"])]),
        _parameters=lambda p: {"kp": p["R2"] / p["R1"], "ti": p["R2"] * p["C1"]},
        _fit=_fit_pi,
        _solve=lambda q, f: {"C1": f["C1"], "R2": q["ti"] / f["C1"], "R1": q["ti"] / f["C1"] / q["kp"]},
    ))

    # -- PD with derivative-limiting resistor -----------------------------------------------
    def pd_coef(p):
        kp, kd, tf = p["R2"] / p["R1"], p["R2"] * p["C1"], p["R3"] * p["C1"]
        return [kp * tf + kd, kp], [tf, np.ones_like(_pos(kp))]

    T.append(Topology(
        name="pd-limited",
        description="PD: input resistor parallel to (limiting resistor + capacitor), feedback resistor",
        parts=(Part("R1", "R", "input resistor (kp = R2/R1)"), Part("R2", "R", "feedback resistor"),
               Part("C1", "C", "derivative capacitor (kd = R2·C1)"),
               Part("R3", "R", "derivative-limiting resistor (tf = R3·C1)")),
        stages=(Stage("U1", "out", R("R2"), (("in", Parallel(R("R1"), Series(R("R3"), C("C1")))),), role="PD"),),
        inverting=True,
        represents="kp + kd·s/(tf·s + 1) (PD with derivative filter; any lead with the zero below the pole)",
        free_parts=("C1",),
        tunable={"kd": ("R2", 1)},
        equations=("F = R2/R1 + R2·C1·s/(R3·C1·s + 1)", "kp = R2/R1, kd = R2·C1, tf = R3·C1",
                   "R2 = kd/C1", "R3 = tf/C1", "R1 = R2/kp"),
        _coefficients=pd_coef,
        _parameters=lambda p: {"kp": p["R2"] / p["R1"], "kd": p["R2"] * p["C1"], "tf": p["R3"] * p["C1"]},
        _fit=lambda t, s, st: _fit_first_order(t, s, st, lead_only=True),
        _solve=lambda q, f: {"C1": f["C1"], "R2": q["kd"] / f["C1"], "R3": q["tf"] / f["C1"],
                             "R1": q["kd"] / f["C1"] / q["kp"]},
    ))

    # -- lead / lag network ------------------------------------------------------------------
    T.append(Topology(
        name="lead-lag-rc",
        description="lead or lag: input R1 parallel C1, feedback R2 parallel C2",
        parts=(Part("R1", "R", "input resistor"), Part("C1", "C", "input capacitor (zero: tz = R1·C1)"),
               Part("R2", "R", "feedback resistor (dc gain R2/R1)"), Part("C2", "C", "feedback capacitor (pole: tp = R2·C2)")),
        stages=(Stage("U1", "out", Parallel(R("R2"), C("C2")), (("in", Parallel(R("R1"), C("C1"))),), role="lead/lag"),),
        inverting=True,
        represents="k·(tz·s + 1)/(tp·s + 1): a lead (tz > tp) or a lag (tz < tp)",
        free_parts=("C1",),
        equations=("F = (R2/R1)·(R1·C1·s + 1)/(R2·C2·s + 1)", "R1 = tz/C1", "R2 = k·R1", "C2 = tp/R2"),
        _coefficients=lambda p: ([p["R2"] * p["C1"], p["R2"] / p["R1"]], [p["R2"] * p["C2"], np.ones_like(_pos(p["R1"]))]),
        _parameters=lambda p: {"k": p["R2"] / p["R1"], "tz": p["R1"] * p["C1"], "tp": p["R2"] * p["C2"]},
        _fit=lambda t, s, st: _fit_first_order(t, s, st, lead_only=False),
        _solve=lambda q, f: {"C1": f["C1"], "R1": q["tz"] / f["C1"], "R2": q["k"] * q["tz"] / f["C1"],
                             "C2": q["tp"] / (q["k"] * q["tz"] / f["C1"])},
    ))

    # -- single-amplifier PID (interacting / series form) -------------------------------------
    def pid1_coef(p):
        k = p["R2"] / p["R1"]
        ti = p["R2"] * p["C2"]
        td = (p["R1"] + p["R3"]) * p["C1"]
        tf = p["R3"] * p["C1"]
        return [k * ti * td, k * (ti + td), k], [ti * tf, ti, 0 * _pos(k)]

    def pid1_solve(q, f):
        c1 = f["C1"]
        r1 = (q["td'"] - q["tf"]) / c1
        r2 = q["kc'"] * r1
        return {"C1": c1, "R1": r1, "R3": q["tf"] / c1, "R2": r2, "C2": q["ti'"] / r2}

    T.append(Topology(
        name="pid-single-amp",
        description="PID on one amplifier (series/interacting form): input R1 parallel (R3 + C1), feedback R2 + C2",
        parts=(Part("R1", "R", "input resistor (K′ = R2/R1, series gain)"),
               Part("C1", "C", "derivative capacitor (Td′ = (R1+R3)·C1, series derivative time)"),
               Part("R3", "R", "derivative-limiting resistor (Tf = R3·C1 = Td′/N′)"),
               Part("R2", "R", "feedback resistor (K′ = R2/R1)"),
               Part("C2", "C", "integral capacitor (Ti′ = R2·C2, series integral time)")),
        stages=(Stage("U1", "out", Series(R("R2"), C("C2")), (("in", Parallel(R("R1"), Series(R("R3"), C("C1")))),),
                      role="PID"),),
        inverting=True,
        represents="K′·(1 + 1/(Ti′·s))·(1 + Td′·s)/(1 + Tf·s): series PID with real zeros and derivative filter "
                   "(Td′ > Tf); quantities kc', ti', td', tf",
        free_parts=("C1",),
        equations=("F = (1 + R2·C2·s)(1 + (R1+R3)·C1·s) / (R1·C2·s·(1 + R3·C1·s))",
                   "kc' = R2/R1, ti' = R2·C2, td' = (R1+R3)·C1, tf = R3·C1 (series form: K′, Ti′, Td′)",
                   "R1 = (td' − tf)/C1", "R3 = tf/C1", "R2 = kc'·R1", "C2 = ti'/R2"),
        _coefficients=pid1_coef,
        _parameters=lambda p: {**{"kc'": p["R2"] / p["R1"], "ti'": p["R2"] * p["C2"],
                                  "td'": (p["R1"] + p["R3"]) * p["C1"]},
                               **pid_parameters_from_coefficients(*pid1_coef(p))},
        _fit=_fit_pid_single,
        _solve=pid1_solve,
    ))

    # -- parallel PID: P, I, D amplifiers and a summing amplifier ------------------------------
    def pidp_terms(p):
        kp = p["R9"] / p["R6"] * p["R2"] / p["R1"]
        ki = p["R9"] / (p["R7"] * p["R3"] * p["C1"])
        kd = p["R9"] / p["R8"] * p["R5"] * p["C2"]
        tf = p["R4"] * p["C2"]
        return kp, ki, kd, tf

    def pidp_coef(p):
        kp, ki, kd, tf = pidp_terms(p)
        return [kp * tf + kd, kp + ki * tf, ki], [tf, np.ones_like(_pos(kp)), 0 * _pos(kp)]

    T.append(Topology(
        name="pid-parallel",
        description="parallel PID: separate P, I and D amplifiers added by an inverting summing amplifier",
        parts=(Part("R1", "R", "P amplifier input resistor"), Part("R2", "R", "P amplifier feedback (kp = R2/R1)"),
               Part("R3", "R", "I amplifier input resistor (ki = 1/(R3·C1))"), Part("C1", "C", "I amplifier capacitor"),
               Part("C2", "C", "D amplifier input capacitor (kd = R5·C2)"),
               Part("R4", "R", "D amplifier limiting resistor (tf = R4·C2)"), Part("R5", "R", "D amplifier feedback"),
               Part("R6", "R", "summing resistor, P"), Part("R7", "R", "summing resistor, I"),
               Part("R8", "R", "summing resistor, D"), Part("R9", "R", "summing feedback resistor")),
        stages=(Stage("U1", "np", R("R2"), (("in", R("R1")),), role="P"),
                Stage("U2", "ni", C("C1"), (("in", R("R3")),), role="I"),
                Stage("U3", "nd", R("R5"), (("in", Series(R("R4"), C("C2"))),), role="D"),
                Stage("U4", "out", R("R9"), (("np", R("R6")), ("ni", R("R7")), ("nd", R("R8"))), role="sum")),
        inverting=False,
        represents="kp + ki/s + kd·s/(tf·s + 1) with any kp >= 0, ki, kd > 0 (complex zeros too)",
        free_parts=("C1", "C2"),
        fixed_parts={"R1": RSUM, "R6": RSUM, "R7": RSUM, "R8": RSUM, "R9": RSUM},
        tunable={"kp": ("R2", 1), "kc": ("R2", 1), "ki": ("R3", -1), "kd": ("R5", 1)},
        equations=("F = (R9/R6)(R2/R1) + (R9/R7)/(R3·C1·s) + (R9/R8)·R5·C2·s/(R4·C2·s + 1)",
                   f"R1 = R6 = R7 = R8 = R9 = {RSUM:g} Ω", "R2 = kp·R1", "R3 = 1/(ki·C1)", "R5 = kd/C2", "R4 = tf/C2"),
        _coefficients=pidp_coef,
        _parameters=lambda p: pid_parameters_from_coefficients(*pidp_coef(p)),
        _fit=_fit_pid_parallel,
        _solve=lambda q, f: {"C1": f["C1"], "C2": f["C2"], "R2": q["kp"] * RSUM, "R3": 1.0 / (q["ki"] * f["C1"]),
                             "R5": q["kd"] / f["C2"], "R4": q["tf"] / f["C2"]},
    ))

    # -- two-input PID with setpoint weights ----------------------------------------------------
    def two_terms(p):
        with np.errstate(invalid="ignore"):
            return _two_terms(p)

    def _two_terms(p):
        g = p["R2"] / p["R1"]  # setpoint inverter gain (1 by design)
        meas = (p["R14"] / p["R11"] * p["R5"] / p["R4"], p["R14"] / (p["R12"] * p["R7"] * p["C1"]),
                p["R14"] / p["R13"] * p["R10"] * p["C3"], p["R9"] * p["C3"])
        sp = (g * p["R14"] / p["R11"] * p["R5"] / p["R3"], g * p["R14"] / (p["R12"] * p["R6"] * p["C1"]),
              g * p["R14"] / p["R13"] * p["R10"] * p["C2"], p["R8"] * p["C2"])
        return meas, sp

    def _pid_poly(kp, ki, kd, tf):
        tf = np.nan_to_num(np.asarray(tf, dtype=float), nan=0.0)
        return [kp * tf + kd, kp + ki * tf, ki], [tf, np.ones_like(_pos(kp)), 0 * _pos(kp)]

    def two_solve(q, f):
        c1, c3 = f["C1"], f["C3"]
        r7 = 1.0 / (q["ki"] * c1)
        out = {"C1": c1, "C3": c3, "R4": np.asarray(RSUM), "R5": q["kp"] * RSUM + 0 * c1, "R7": r7, "R6": r7,
               "R10": q["kd"] / c3, "R9": q["tf"] / c3}
        out["R3"] = (RSUM / q["b"] + 0 * c1) if q["b"] > 0 else np.inf + 0 * c1
        if q["c"] > 0:
            out["C2"] = q["c"] * c3
            out["R8"] = q["tf"] / (q["c"] * c3)
        else:
            out["C2"] = 0 * c3
            out["R8"] = np.inf + 0 * c3
        return out

    T.append(Topology(
        name="pid-two-input",
        description=("PID with setpoint weights: setpoint inverter, P, I and D amplifiers each summing setpoint and "
                     "measurement through their own networks, and a summing amplifier"),
        parts=(Part("R1", "R", "setpoint inverter input"), Part("R2", "R", "setpoint inverter feedback"),
               Part("R3", "R", "P amplifier, setpoint resistor (b·kp = R5/R3)", optional=True),
               Part("R4", "R", "P amplifier, measurement resistor (kp = R5/R4)"), Part("R5", "R", "P amplifier feedback"),
               Part("R6", "R", "I amplifier, setpoint resistor (equal to R7)"),
               Part("R7", "R", "I amplifier, measurement resistor (ki = 1/(R7·C1))"), Part("C1", "C", "I amplifier capacitor"),
               Part("C2", "C", "D amplifier, setpoint capacitor (c·kd = R10·C2)", optional=True),
               Part("R8", "R", "D amplifier, setpoint limiting resistor (tf = R8·C2)", optional=True),
               Part("C3", "C", "D amplifier, measurement capacitor (kd = R10·C3)"),
               Part("R9", "R", "D amplifier, measurement limiting resistor (tf = R9·C3)"),
               Part("R10", "R", "D amplifier feedback"),
               Part("R11", "R", "summing resistor, P"), Part("R12", "R", "summing resistor, I"),
               Part("R13", "R", "summing resistor, D"), Part("R14", "R", "summing feedback resistor")),
        stages=(Stage("U1", "spn", R("R2"), (("sp", R("R1")),), role="setpoint inverter"),
                Stage("U2", "np", R("R5"), (("spn", R("R3")), ("meas", R("R4"))), role="P"),
                Stage("U3", "ni", C("C1"), (("spn", R("R6")), ("meas", R("R7"))), role="I"),
                Stage("U4", "nd", R("R10"), (("spn", Series(R("R8"), C("C2"))), ("meas", Series(R("R9"), C("C3")))),
                      role="D"),
                Stage("U5", "out", R("R14"), (("np", R("R11")), ("ni", R("R12")), ("nd", R("R13"))), role="sum")),
        inverting=True,
        inputs=("sp", "meas"),
        represents="u = kp·(b·r − y) + ki/s·(r − y) + kd·s/(tf·s + 1)·(c·r − y) exactly (b, c >= 0; c = 0 is "
                   "derivative on measurement)",
        free_parts=("C1", "C3"),
        fixed_parts={"R1": RSUM, "R2": RSUM, "R4": RSUM, "R11": RSUM, "R12": RSUM, "R13": RSUM, "R14": RSUM},
        equal_parts=(("R6", "R7"),),
        tunable={"kp": ("R5", 1), "kc": ("R5", 1), "kd": ("R10", 1)},
        equations=("measurement path Cy = (R14/R11)(R5/R4) + (R14/R12)/(R7·C1·s) + (R14/R13)·R10·C3·s/(R9·C3·s + 1)",
                   "setpoint path Cr = (R2/R1)·[(R14/R11)(R5/R3) + (R14/R12)/(R6·C1·s) + (R14/R13)·R10·C2·s/(R8·C2·s + 1)]",
                   "R5 = kp·R4, R3 = R4/b, R7 = R6 = 1/(ki·C1), R10 = kd/C3, R9 = tf/C3, C2 = c·C3, R8 = tf/C2"),
        _coefficients=lambda p: _pid_poly(*two_terms(p)[0]),
        _setpoint_coefficients=lambda p: _pid_poly(*two_terms(p)[1]),
        _parameters=lambda p: {**pid_parameters_from_coefficients(*_pid_poly(*two_terms(p)[0])),
                               "b": two_terms(p)[1][0] / two_terms(p)[0][0],
                               "c": two_terms(p)[1][2] / two_terms(p)[0][2]},
        _fit=_fit_two_input,
        _solve=two_solve,
    ))

    # -- difference-amplifier error stage ------------------------------------------------------
    T.append(Topology(
        name="difference-error",
        description="difference amplifier forming k·(setpoint − measurement)",
        parts=(Part("R1", "R", "measurement input resistor"), Part("R2", "R", "feedback resistor (k = R2/R1)"),
               Part("R3", "R", "setpoint input resistor (equal to R1)"), Part("R4", "R", "setpoint divider to ground (equal to R2)")),
        stages=(Stage("U1", "out", R("R2"), (("meas", R("R1")),), plus=("sp", R("R3"), R("R4")), role="error"),),
        inverting=False,
        inputs=("sp", "meas"),
        represents="k·(setpoint − measurement), k > 0 (an error stage)",
        free_parts=("R1",),
        equal_parts=(("R3", "R1"),),
        equations=("u = R4/(R3+R4)·(1 + R2/R1)·sp − (R2/R1)·meas", "R3 = R1, R4 = R2 = k·R1"),
        _coefficients=lambda p: ([p["R2"] / p["R1"]], [np.ones_like(_pos(p["R1"]))]),
        _setpoint_coefficients=lambda p: ([p["R4"] / (p["R3"] + p["R4"]) * (1 + p["R2"] / p["R1"])],
                                          [np.ones_like(_pos(p["R1"]))]),
        _parameters=lambda p: {"k": p["R2"] / p["R1"],
                               "setpoint_gain": p["R4"] / (p["R3"] + p["R4"]) * (1 + p["R2"] / p["R1"])},
        _fit=_fit_constant,
        _solve=lambda q, f: {"R1": f["R1"], "R2": q["k"] * f["R1"], "R4": q["k"] * f["R1"]},
    ))
    return {t.name: t for t in T}


TOPOLOGIES: dict[str, Topology] = _catalog()
"""Catalog name -> Topology, in order of simplicity (amplifiers, then parts)."""

# Order that --topology auto tries (two-input and error stages are never picked automatically).
AUTO_ORDER = ("inverting-gain", "integrator-rc", "first-order-lag", "pi-rc-feedback", "lead-lag-rc",
              "pid-single-amp", "pid-parallel")


def get_topology(name: str, *, key: str = "topology") -> Topology:
    """The catalog entry ``name``; an unknown name is an InputError listing the catalog."""
    if isinstance(name, str) and name.strip().lower() in TOPOLOGIES:
        return TOPOLOGIES[name.strip().lower()]
    raise InputError(f"unknown topology {name!r}; the catalog has {', '.join(TOPOLOGIES)}", key=key)
