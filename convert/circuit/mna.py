"""Modified nodal analysis in s: from a read netlist to an exact rational transfer function.

The circuit equations are ``(G + s·C) x = b·u``: ``x`` holds the node voltages (ground left
out) and the branch currents of voltage sources, E sources, inductors and op-amp outputs; ``u``
is the input source's voltage. Every entry is linear in s, so det(G + sC) is a polynomial of
degree ≤ the number of reactive parts (capacitors, inductors, single-pole op-amps), and by
Cramer's rule so is the numerator N(s) = H(s)·det(G + sC).

How the polynomials are found (numerically sound, no symbolic algebra):

1. Row equilibration (constant factors; they cancel in N/D).
2. Frequency scaling: det and H are evaluated on circles |s| = ρ_j, one per decade (three on a
   retry),
   spanning the circuit's natural frequencies (from its R·C, R/L and op-amp gain-bandwidth
   products), at M points per circle offset from the real axis. The FFT of the samples gives
   the coefficients of p(ρ_j·z). For each coefficient the radius where it is best conditioned
   (smallest error bound ε·Σ|samples-coefficients| / ρ_j^k) is kept.
3. Coefficients below their error bound are zero (this finds the true degree and exact
   integrators).
4. Verification: N/D is re-evaluated against a direct complex solve at test frequencies off
   the sample circles; a disagreement raises :class:`~convert.errors.UnrealizableError`.
5. Common pole/zero pairs are cancelled and reported.

Part changes (sensitivity tables): inside :func:`reusing_nominal`, a copy of the circuit with
changed values is not factored afresh; the nominal inverses at the sample points are updated
(matrix determinant lemma, Woodbury identity) and the samples go through steps 2–5 as above, the
check including a direct solve of the changed circuit at a few frequencies.

Ideal op-amps are nullors: the output current is a free unknown and the inputs are forced to
the same voltage (no gain limit, no approximation). A single-pole op-amp adds the row
``(s/(2π·gbw) + 1/a0)·v_out − (v_+ − v_−) = 0``.
"""

from __future__ import annotations

from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from collections.abc import Sequence

import numpy as np

from convert.circuit.netlist import GROUND, Element, Netlist
from convert.controller import Controller
from convert.errors import InputError, UnrealizableError
from convert.polyroots import format_root

_FIT_RTOL = 1e-5  # allowed relative disagreement between fit and direct solve (1e-4 dB): op-amp poles at MHz beside time constants of seconds leave ~1e-6
_ZERO_FACTOR = 1e3  # a coefficient below this many error bounds is zero
_CANCEL_RTOL = 1e-5  # a zero and a pole this close (relative) cancel
_ATTEMPTS = ((1.0, 4), (3.0, 12))  # (sample circles per decade, points per circle beyond the degree)

#: Largest nodal-analysis system (unknowns: node voltages plus branch currents). The matrices are
#: kept dense for the structural checks (8·n² bytes each: 32 MB at the limit); the solves at the
#: sample points use a sparse LU beyond _DENSE_MAX unknowns.
MAX_UNKNOWNS = 2000
#: Most reactive parts (capacitors, inductors, single-pole op-amps): the degree the transfer
#: function may have. The result is a ratio of polynomials in double precision; a 40-section RC
#: ladder already needs coefficients beyond 1e-308 relative to each other (measured), so a
#: controller of higher degree cannot be held accurately in that form.
MAX_REACTIVE = 40
_ZERO_OUTPUT_V = 1e-9  # |V(out)| per volt of input below which the output does not depend on it (-180 dB)
_DENSE_MAX = 120  # up to this many unknowns the batched dense solve is faster than a sparse LU


def _check_size(netlist: Netlist, unknowns: int, reactive: int) -> None:
    if unknowns > MAX_UNKNOWNS:
        raise InputError(
            f"the circuit needs {unknowns:,} nodal-analysis unknowns (nodes and branch currents); the "
            f"limit is {MAX_UNKNOWNS:,} (convert.circuit.mna.MAX_UNKNOWNS)",
            where=netlist.source,
        )
    if reactive > MAX_REACTIVE:
        raise InputError(
            f"the circuit has {reactive:,} reactive parts (capacitors, inductors, single-pole op-amps), "
            f"so its transfer function could have degree {reactive:,}; the limit is {MAX_REACTIVE} "
            "(a ratio of polynomials of higher degree cannot be held accurately in double precision; "
            "convert.circuit.mna.MAX_REACTIVE)",
            where=netlist.source,
        )


@dataclass(frozen=True)
class MnaSystem:
    """The assembled equations ``(G + s·C) x = Σ b_input·u_input``.

    ``unknowns`` names each entry of x (``V(node)`` or ``I(element)``); ``rhs`` maps an input
    source's name to its column b; ``output`` is the index of the output node's voltage.
    """

    unknowns: tuple[str, ...]
    G: np.ndarray
    C: np.ndarray
    rhs: dict[str, np.ndarray]
    output: int
    reactive_count: int
    rates: tuple[float, float]  # (lowest, highest) natural-frequency estimate in rad/s
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class RationalResult:
    """A transfer function from one input, with what was cancelled and how well it checked."""

    controller: Controller
    cancelled: tuple[tuple[complex, complex], ...]  # (zero, pole) pairs removed
    max_fit_error: float  # relative, at the verification frequencies
    notes: tuple[str, ...] = field(default=())


# ----------------------------------------------------------------------------- structure
class _UnionFind:
    def __init__(self):
        self.parent: dict[str, str] = {}

    def find(self, a: str) -> str:
        self.parent.setdefault(a, a)
        while self.parent[a] != a:
            self.parent[a] = self.parent[self.parent[a]]
            a = self.parent[a]
        return a

    def join(self, a: str, b: str) -> None:
        self.parent[self.find(a)] = self.find(b)


def _connections(elements: Sequence[Element], *, dc: bool) -> _UnionFind:
    """Nodes joined by a conducting path (DC: capacitors left out). Op-amp and E/G outputs
    drive their node from ground; their inputs do not conduct."""
    uf = _UnionFind()
    uf.find(GROUND)
    for e in elements:
        if e.kind in ("R", "L", "V") or (e.kind == "C" and not dc):
            uf.join(e.nodes[0], e.nodes[1])
        elif e.kind == "E":
            uf.join(e.nodes[0], e.nodes[1])
        elif e.kind == "OPAMP":
            uf.join(e.nodes[2], GROUND)
        for n in e.nodes:
            uf.find(n)
    return uf


def _first_use(elements: Sequence[Element], node: str) -> Element:
    return next(e for e in elements if node in e.nodes)


def _check_structure(netlist: Netlist, elements: Sequence[Element], inputs: Sequence[str], output: str) -> None:
    for name in inputs:
        e = netlist.element(name)
        if e is None or e.kind != "V":
            found = ", ".join(s.name for s in netlist.sources) or "none"
            raise InputError(
                f"input source {name!r} not found; voltage sources in the file: {found}",
                where=netlist.source,
                key="input",
            )
        if e.nodes[0] == e.nodes[1]:
            raise InputError(f"input source {e.name} has both ends on node {e.nodes[0]}", where=e.where, key=e.name)
    all_nodes = {n for e in elements for n in e.nodes}
    if output.lower() in ("0", "gnd"):
        raise InputError("the output cannot be ground (0)", where=netlist.source, key="output")
    if output.lower() not in all_nodes:
        shown = ", ".join(sorted(n for n in all_nodes if n != GROUND)[:20])
        raise InputError(f"output node {output!r} not found; nodes: {shown}", where=netlist.source, key="output")
    ac = _connections(elements, dc=False)
    ground = ac.find(GROUND)
    for n in sorted(all_nodes):
        if ac.find(n) != ground:
            e = _first_use(elements, n)
            raise InputError(
                f"node {n!r} is floating: no element connects it to ground (0), directly or through other parts",
                where=e.where,
                key=e.name,
            )
    dcu = _connections(elements, dc=True)
    ground = dcu.find(GROUND)
    for e in elements:
        if e.kind == "OPAMP":
            for pin, label in ((e.nodes[0], "non-inverting"), (e.nodes[1], "inverting")):
                if dcu.find(pin) != ground:
                    raise InputError(
                        f"the op-amp's {label} input (node {pin!r}) has no DC path to ground; a real "
                        "op-amp would drift to a rail (add a resistor to bias it)",
                        where=e.where,
                        key=e.name,
                    )


# ----------------------------------------------------------------------------- assembly
def _stamps(e: Element, index: dict[str, int], branch: dict[str, int]) -> list[tuple[int, int, int, float]]:
    """The entries element ``e`` adds to the equations: ``(matrix, row, column, value)`` with
    matrix 0 = G, 1 = C (ground rows and columns left out). Entries add up (``+=``)."""
    out: list[tuple[int, int, int, float]] = []

    def add(m, r, c, v):
        if r is not None and c is not None:
            out.append((m, r, c, v))

    def idx(node):
        return None if node == GROUND else index[node]

    if e.kind in ("R", "C"):
        a, b = idx(e.nodes[0]), idx(e.nodes[1])
        m = 0 if e.kind == "R" else 1
        v = 1.0 / e.value if e.kind == "R" else e.value
        add(m, a, a, v)
        add(m, b, b, v)
        add(m, a, b, -v)
        add(m, b, a, -v)
    elif e.kind in ("V", "E", "L"):
        k = branch[e.name]
        a, b = idx(e.nodes[0]), idx(e.nodes[1])
        add(0, a, k, 1.0)
        add(0, b, k, -1.0)
        add(0, k, a, 1.0)
        add(0, k, b, -1.0)
        if e.kind == "E":
            add(0, k, idx(e.nodes[2]), -e.value)
            add(0, k, idx(e.nodes[3]), e.value)
        elif e.kind == "L":
            add(1, k, k, -e.value)
    elif e.kind == "G":
        a, b, cp, cm = (idx(n) for n in e.nodes)
        add(0, a, cp, e.value)
        add(0, a, cm, -e.value)
        add(0, b, cp, -e.value)
        add(0, b, cm, e.value)
    elif e.kind == "OPAMP":
        k = branch[e.name]
        p, n, o = (idx(x) for x in e.nodes)
        add(0, o, k, 1.0)
        add(0, k, p, 1.0)
        add(0, k, n, -1.0)
        gbw = e.param("gbw")
        if gbw is not None:
            add(1, k, o, -1.0 / (2 * np.pi * gbw))
            add(0, k, o, -1.0 / e.param("a0"))
    else:  # pragma: no cover - the reader admits no other kind
        raise InputError(f"element kind {e.kind} is not supported in the analysis", where=e.where, key=e.name)
    return out


def _numbering(elements: Sequence[Element]) -> tuple[dict[str, int], dict[str, int], list[str]]:
    """(node -> unknown index, element -> branch-current index, unknown names)."""
    nodes = [n for n in dict.fromkeys(n for e in elements for n in e.nodes) if n != GROUND]
    index = {n: i for i, n in enumerate(nodes)}
    unknowns = [f"V({n})" for n in nodes]
    branch: dict[str, int] = {}
    for e in elements:
        if e.kind in ("V", "E", "L", "OPAMP"):
            branch[e.name] = len(unknowns)
            unknowns.append(f"I({e.name})")
    return index, branch, unknowns


def build_system(netlist: Netlist, inputs: Sequence[str] = ("VIN",), output: str = "out") -> MnaSystem:
    """Check the circuit and assemble its MNA matrices (diodes left out; other sources zeroed)."""
    elements = netlist.linear_elements
    _check_structure(netlist, elements, inputs, output)
    input_names = [netlist.element(n).name for n in inputs]
    if len(set(input_names)) != len(input_names):
        raise InputError("the same source is named twice as an input", where=netlist.source, key="input")
    index, branch, unknowns = _numbering(elements)
    size = len(unknowns)
    _check_size(
        netlist,
        size,
        sum(1 for e in elements if e.kind in ("C", "L") or (e.kind == "OPAMP" and e.param("gbw") is not None)),
    )
    G = np.zeros((size, size))
    C = np.zeros((size, size))
    mats = (G, C)
    reactive = 0
    r_values, c_values, l_values, op_rates = [], [], [], []
    for e in elements:
        for m, r, c, v in _stamps(e, index, branch):
            mats[m][r, c] += v
        if e.kind in ("R", "C"):
            (r_values if e.kind == "R" else c_values).append(e.value)
            reactive += e.kind == "C"
        elif e.kind == "L":
            l_values.append(e.value)
            reactive += 1
        elif e.kind == "OPAMP" and e.param("gbw") is not None:
            gbw = e.param("gbw")
            op_rates += [2 * np.pi * gbw, 2 * np.pi * gbw / e.param("a0")]
            reactive += 1
    rhs = {}
    for name in input_names:
        b = np.zeros(size)
        b[branch[name]] = 1.0
        rhs[name] = b
    rates = [1.0 / (r * c) for r in r_values for c in c_values] + [r / l for r in r_values for l in l_values]  # noqa: E741
    rates += op_rates
    if l_values and c_values:
        rates += [1.0 / np.sqrt(l * c) for l in l_values for c in c_values]  # noqa: E741
    if not rates:
        rates = [1.0]
    notes = []
    zeroed = [s.name for s in netlist.sources if s.name not in input_names]
    if zeroed:
        notes.append(f"source(s) {', '.join(zeroed)} set to zero (shorted): only the input(s) drive the circuit")
    return MnaSystem(
        tuple(unknowns),
        G,
        C,
        rhs,
        index[output.lower()],
        reactive,
        (float(min(rates)), float(max(rates))),
        tuple(notes),
    )


# ----------------------------------------------------------------------------- numerics
def _row_factors(system: MnaSystem) -> np.ndarray:
    """The factor each equation (row) is multiplied by in equilibration."""
    rho = np.sqrt(system.rates[0] * system.rates[1])
    scale = np.abs(system.G).max(axis=1) + rho * np.abs(system.C).max(axis=1)
    scale[scale == 0] = 1.0
    return 1.0 / scale


def _equilibrate(system: MnaSystem) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    inv = _row_factors(system)
    return system.G * inv[:, None], system.C * inv[:, None], {k: v * inv for k, v in system.rhs.items()}


def _permutation_sign(perm: np.ndarray) -> int:
    """+1 or −1: the parity of a permutation, (n − number of cycles) mod 2. Cycles are found by
    pointer doubling: each index takes the smallest index on its cycle (log2 n numpy steps)."""
    p = np.asarray(perm)
    label = np.arange(p.size)
    for _ in range(int(np.ceil(np.log2(max(p.size, 2)))) + 1):
        label = np.minimum(label, label[p])
        p = p[p]
    cycles = np.unique(label).size
    return -1 if (perm.size - cycles) % 2 else 1


def _sparse_factors(G, C, s: np.ndarray):
    """Yield (s, SuperLU factorization or None when singular) of G + sC at each point, G and C as
    sparse CSC matrices (a fresh complex LU per point: memory O(fill), not O(points·n²))."""
    from scipy.sparse import csc_matrix
    from scipy.sparse.linalg import splu

    Gs, Cs = csc_matrix(G, dtype=complex), csc_matrix(C, dtype=complex)
    for x in s:
        try:
            with np.errstate(all="ignore"):
                yield x, splu((Gs + x * Cs).tocsc())
        except RuntimeError:  # "factor is exactly singular"
            yield x, None


def _lu_logdet(lu) -> tuple[complex, float]:
    """(phase factor, log|det|) from a SuperLU factorization (L has a unit diagonal)."""
    d = lu.U.diagonal()
    mag = np.abs(d)
    if np.any(mag == 0) or not np.all(np.isfinite(mag)):
        return 0j, -np.inf
    phase = complex(np.prod(d / mag)) * _permutation_sign(lu.perm_r) * _permutation_sign(lu.perm_c)
    return phase, float(np.sum(np.log(mag)))


def _solve_many_sparse(G, C, B, s: np.ndarray):
    sign = np.zeros(len(s), complex)
    logdet = np.full(len(s), -np.inf)
    X = np.zeros((len(s),) + B.shape, complex)
    for i, (_, lu) in enumerate(_sparse_factors(G, C, s)):
        if lu is None:
            return sign, logdet, None
        sign[i], logdet[i] = _lu_logdet(lu)
        X[i] = lu.solve(B.astype(complex))
    if np.any(sign == 0):
        return sign, logdet, None
    return sign, logdet, X


def _solve_many(G, C, B, s: np.ndarray):
    """(log|det|, det phase factor, solutions) of (G + sC) X = B at each s (batched dense for small
    systems; one sparse LU per point beyond _DENSE_MAX unknowns)."""
    if G.shape[0] > _DENSE_MAX:
        return _solve_many_sparse(G, C, B, s)
    Y = G[None, :, :] + s[:, None, None] * C[None, :, :]
    sign, logdet = np.linalg.slogdet(Y)
    if np.any(sign == 0) or not np.all(np.isfinite(logdet)):
        return sign, logdet, None
    try:
        with np.errstate(all="ignore"):
            X = np.linalg.solve(Y, np.broadcast_to(B, (len(s),) + B.shape))
    except np.linalg.LinAlgError:
        return np.zeros_like(sign), logdet, None
    return sign, logdet, X


def _dangling_error(netlist: Netlist) -> InputError | None:
    """A node that only one element terminal touches (a mistyped node name, most often) leaves the
    equations singular whenever it breaks a feedback path: name it, rather than "singular"."""
    import difflib

    uses: dict[str, list[Element]] = {}
    for e in netlist.linear_elements:
        for n in set(e.nodes):
            uses.setdefault(n, []).append(e)
    dangling = [
        (n, es[0])
        for n, es in uses.items()
        if n != GROUND and len(es) == 1 and sum(1 for m in es[0].nodes if m == n) == 1
    ]
    if not dangling:
        return None
    node, e = dangling[0]
    close = difflib.get_close_matches(node, [n for n in uses if n != node and n != GROUND], n=1, cutoff=0.5)
    hint = f"; did you mean {close[0]!r}?" if close else "; check the node's name"
    more = f" (also dangling: {', '.join(repr(n) for n, _ in dangling[1:4])})" if len(dangling) > 1 else ""
    return InputError(
        f"node {node!r} is dangling: only {e.name} connects to it, so no current can flow there and the "
        f"circuit equations have no solution{hint}{more}",
        where=e.where,
        key=e.name,
    )


def _singular_error(netlist: Netlist, system: MnaSystem, G, C) -> InputError:
    """An InputError naming the element most involved in the singularity (from the null vector),
    or the dangling node behind it when there is one."""
    dangling = _dangling_error(netlist)
    if dangling is not None:
        return dangling
    s0 = np.sqrt(system.rates[0] * system.rates[1]) * np.exp(0.7j)
    Y = G + s0 * C
    try:
        if Y.shape[0] > 4 * _DENSE_MAX:
            raise np.linalg.LinAlgError("too large for a dense SVD on an error path")
        _, _, vh = np.linalg.svd(Y)
        null = np.abs(vh[-1].conj())
        order = [i for i in np.argsort(null)[::-1][:3] if null[i] > 0.1 * null.max()]
    except np.linalg.LinAlgError:
        order = []
    involved = [system.unknowns[i] for i in order]
    element = None
    for u in involved:
        if u.startswith("I("):
            element = netlist.element(u[2:-1])
        else:
            node = u[2:-1]
            # the element that drives the node (an op-amp's or E source's output, a voltage source)
            # is the one to check, not the first passive part that touches it
            drivers = [
                e
                for e in netlist.linear_elements
                if (e.kind == "OPAMP" and e.nodes[2] == node) or (e.kind in ("E", "V") and node in e.nodes[:2])
            ]
            element = next(iter(drivers), None) or next((e for e in netlist.linear_elements if node in e.nodes), None)
        if element is not None:
            break
    text = (
        "the circuit equations are singular (voltage sources, E sources or op-amp outputs in a loop, an op-amp "
        f"without feedback, or a node only current sources reach); involved: {', '.join(involved) or 'unknown'}"
    )
    if element is None:
        return InputError(text, where=netlist.source)
    return InputError(text, where=element.where, key=element.name)


def transfer_functions(
    netlist: Netlist, inputs: Sequence[str] = ("VIN",), output: str = "out", *, system: MnaSystem | None = None
) -> dict[str, RationalResult]:
    """Exact rational transfer functions V(output)/V(input) for each input source (others zeroed).

    Returns ``{source name: RationalResult}`` (names upper-case as in the netlist).
    """
    reuse = _REUSE.get() if system is None else None
    key = None
    if reuse is not None:
        key = (tuple(e.name for e in (netlist.element(n) for n in inputs) if e is not None), output.lower())
        base = reuse.bases.get(key)
        if base is not None and netlist is not reuse.netlist:
            fast = _perturbed(base, netlist)
            if fast is not None:
                return fast
    if system is None:
        system = build_system(netlist, inputs, output)
    G, C, rhs = _equilibrate(system)
    names = list(rhs)
    B = np.stack([rhs[n] for n in names], axis=1)
    if _conditioning_check(G, C, system.rates):
        raise _singular_error(netlist, system, G, C)
    # First try one circle per decade; if the check against a direct solve fails (time constants
    # spread over very many decades), retry with three per decade and more points per circle.
    last: UnrealizableError | None = None
    for per_decade, extra in _ATTEMPTS:
        try:
            results = _fit_all(netlist, system, G, C, B, names, per_decade, extra)
        except UnrealizableError as exc:
            last = exc
            continue
        if reuse is not None and netlist is reuse.netlist and key not in reuse.bases:
            reuse.bases[key] = _prepare(netlist, system, G, C, B, names, per_decade, extra)
        return results
    raise last


def _fit_all(netlist, system, G, C, B, names, per_decade: float, extra: int) -> dict[str, RationalResult]:
    radii, m, s_all = _sample_points(system, per_decade, extra)
    sign, logdet, X = _solve_many(G, C, B, s_all)
    if X is None or not np.all(np.isfinite(X)):
        raise _singular_error(netlist, system, G, C)
    logdet = logdet.reshape(len(radii), m)
    sign = sign.reshape(len(radii), m)
    H = X[:, system.output, :].reshape(len(radii), m, len(names))
    # Common scale per radius (in logs) so nothing overflows; the same for D and every N.
    offset = logdet.max(axis=1)
    dvals = sign * np.exp(logdet - offset[:, None])
    den = _coefficients(dvals, radii, offset, system.reactive_count)
    results: dict[str, RationalResult] = {}
    for j, name in enumerate(names):
        nvals = dvals * H[:, :, j]
        num = _coefficients(nvals, radii, offset, system.reactive_count)
        results[name] = _finish(netlist, system, G, C, B[:, j], num, den, name, radii)
    return results


def _sample_points(system: MnaSystem, per_decade: float, extra: int) -> tuple[np.ndarray, int, np.ndarray]:
    """(circle radii in rad/s, points per circle M, every sample point s, radius-major)."""
    m = system.reactive_count + extra
    lo, hi = system.rates
    radii = np.logspace(
        np.log10(lo) - 1.0, np.log10(hi) + 1.0, max(2, int(np.ceil(per_decade * (np.log10(hi / lo) + 2.0))) + 1)
    )
    angles = np.exp(2j * np.pi * (np.arange(m) + 0.5) / m)
    return radii, m, (radii[:, None] * angles[None, :]).ravel()


def _conditioning_check(G, C, rates) -> bool:
    """True when G + sC is numerically singular at generic points across the circuit's range.

    A singular pencil (sources in a loop, an op-amp without feedback) is singular at every s, so
    it must fail at all three test points; columns are scaled first so that a wide spread of part
    values is not mistaken for singularity."""
    lo, hi = rates
    points = np.array([lo, np.sqrt(lo * hi), hi]) * np.exp(0.7j)
    if G.shape[0] > _DENSE_MAX:
        # sparse: singular when the LU fails, or its pivots span more than 1e14, at all three points
        col = np.maximum(np.abs(G).max(axis=0), np.abs(C).max(axis=0) * abs(points).max())
        col[col == 0] = 1.0
        for _, lu in _sparse_factors(G / col[None, :], C / col[None, :], points):
            if lu is None:
                continue
            d = np.abs(lu.U.diagonal())
            if d.min() > 1e-14 * d.max():
                return False
        return True
    for rho in (lo, np.sqrt(lo * hi), hi):
        Y = G + rho * np.exp(0.7j) * C
        col = np.abs(Y).max(axis=0)
        col[col == 0] = 1.0
        sv = np.linalg.svd(Y / col[None, :], compute_uv=False)
        if sv[-1] > 1e-12 * sv[0]:
            return False
    return True


def _coefficients(values: np.ndarray, radii: np.ndarray, offset: np.ndarray, degree: int) -> np.ndarray:
    """Polynomial coefficients (ascending powers of s, up to ``degree``) from samples on circles.

    ``values[j, i]`` = p(ρ_j e^{jθ_i}) / exp(offset_j) with θ_i = 2π(i + ½)/M. Returns the
    coefficients scaled by exp(−offset_max) (a common factor) with insignificant ones set to 0.
    """
    m = values.shape[1]
    k = np.arange(m)
    # Undo the half-step rotation: p(ρ e^{jθ_i}) = Σ c_k ρ^k e^{jπk/M} e^{j2πik/M}.
    fft = np.fft.fft(values, axis=1) / m  # index k -> c_k ρ^k e^{jπk/M}
    fft = fft * np.exp(-1j * np.pi * k / m)[None, :]
    base = offset.max()
    log_rho = np.log(radii)
    scale_log = (offset - base)[:, None] - k[None, :] * log_rho[:, None]  # log of factor to c_k
    size = np.abs(fft).sum(axis=1)  # error scale of each radius
    with np.errstate(divide="ignore"):
        err_log = np.log(np.finfo(float).eps * size)[:, None] + scale_log
    best = np.argmin(err_log, axis=0)
    coef = np.empty(m, dtype=complex)
    err = np.empty(m)
    for kk in range(m):
        j = best[kk]
        coef[kk] = fft[j, kk] * np.exp(scale_log[j, kk])
        err[kk] = np.exp(err_log[j, kk])
    out = coef.real[: degree + 1].copy()
    out[np.abs(coef[: degree + 1]) <= _ZERO_FACTOR * err[: degree + 1]] = 0.0
    return out


def _roots_asc(c: np.ndarray) -> tuple[np.ndarray, float]:
    """Roots and leading coefficient of an ascending-order coefficient vector."""
    nz = np.flatnonzero(c)
    if nz.size == 0:
        return np.zeros(0, complex), 0.0
    top = nz[-1]
    desc = c[: top + 1][::-1]
    return np.roots(desc).astype(complex), float(desc[0])


def _cancel(zeros: np.ndarray, poles: np.ndarray, floor: float):
    """Remove zero/pole pairs closer than _CANCEL_RTOL relative; ``floor`` (rad/s) is the magnitude
    below which the relative test is taken against ``floor`` instead (roots near the origin)."""
    zeros, poles = list(zeros), list(poles)
    pairs = []
    for z in list(zeros):
        best, best_d = None, None
        for i, p in enumerate(poles):
            d = abs(z - p)
            if d <= _CANCEL_RTOL * max(abs(p), abs(z), floor) and (best_d is None or d < best_d):
                best, best_d = i, d
        if best is not None:
            pairs.append((complex(z), complex(poles.pop(best))))
            zeros.remove(z)
    return np.array(zeros, complex), np.array(poles, complex), pairs


def _poly_from_roots(roots: np.ndarray, lead: float) -> np.ndarray:
    p = np.real_if_close(np.poly(roots), tol=1e6) if len(roots) else np.array([1.0])
    return lead * np.real(np.atleast_1d(p))


def _finish(netlist, system, G, C, b, num_asc, den_asc, name, radii, check=None) -> RationalResult:
    """The RationalResult from fitted coefficients: cancellation, then the check against the circuit
    (``check(controller) -> relative error``; default: a direct solve at the verification points)."""
    if not np.any(num_asc):
        # Say so only when a direct solve agrees: a fit that lost the numerator in rounding must
        # not report a false "does not depend" (issue 9: a 300-section ladder did).
        x = _direct_output(G, C, b, system.output, _verify_points(radii))
        if x is None or np.max(np.abs(x)) > _ZERO_OUTPUT_V:
            raise UnrealizableError(
                f"the transfer function from {name} could not be fitted (its numerator was lost "
                "in rounding), although a direct solve shows the output depends on it",
                where=netlist.source,
            )
        raise InputError(
            f"the output node does not depend on {name} (the transfer function is zero)",
            where=netlist.source,
            key="output",
        )
    if not np.any(den_asc):  # pragma: no cover - singular systems are refused before
        raise _singular_error(netlist, system, G, C)
    zeros, nlead = _roots_asc(num_asc)
    poles, dlead = _roots_asc(den_asc)
    # Below a millionth of the lowest sample circle a root counts as at the origin.
    z2, p2, pairs = _cancel(zeros, poles, 1e-6 * float(radii[0]))
    if pairs:
        num_desc = _poly_from_roots(z2, nlead)
        den_desc = _poly_from_roots(p2, dlead)
    else:
        num_desc = np.trim_zeros(num_asc[::-1], "f")
        den_desc = np.trim_zeros(den_asc[::-1], "f")
    label = netlist.title or netlist.source
    try:
        controller = Controller.analog(num_desc, den_desc, name=label)
    except InputError as exc:  # pragma: no cover - coefficients are finite by construction
        raise UnrealizableError(f"could not form the transfer function: {exc.message}", where=netlist.source) from None
    err = check(controller) if check is not None else _verify(controller, G, C, b, system.output, radii)
    if not err <= _FIT_RTOL:
        raise UnrealizableError(
            f"the rational transfer function from {name} disagrees with a direct solve by {err:.2g} (relative); the "
            "circuit's time constants may span too many decades for double precision",
            where=netlist.source,
        )
    notes = []
    for _z, p in pairs:
        notes.append(
            f"a pole at s = {format_root(p)} rad/s ({abs(p) / (2 * np.pi):.4g} Hz) is cancelled by a zero in "
            f"the path from {name}: that part of the circuit is not seen from this input"
        )
    return RationalResult(controller, tuple(pairs), float(err), tuple(notes))


def _verify_points(radii: np.ndarray) -> np.ndarray:
    """Test frequencies (rad/s) on the imaginary axis, off the sample circles."""
    return np.geomspace(radii[0], radii[-1], 4 * len(radii) + 3) * 1.0137


def _direct_output(G, C, b, out: int, w: np.ndarray) -> np.ndarray | None:
    """V(out) from a direct complex solve of (G + jωC) x = b at each ω (None if singular)."""
    s = 1j * w
    if G.shape[0] > _DENSE_MAX:
        values = []
        for _, lu in _sparse_factors(G, C, s):
            if lu is None:
                return None
            values.append(lu.solve(b.astype(complex))[out])
        return np.array(values)
    Y = G[None, :, :] + s[:, None, None] * C[None, :, :]
    try:
        with np.errstate(all="ignore"):
            return np.linalg.solve(Y, np.broadcast_to(b[:, None], (len(s), len(b), 1)))[:, out, 0]
    except np.linalg.LinAlgError:
        return None


def _fit_error(controller: Controller, w: np.ndarray, x: np.ndarray, peak: float | None = None) -> float:
    """Largest relative disagreement of the controller with solved values ``x`` at ω = ``w`` (values
    below 1e-9 of ``peak``, default max |x|, are compared against that floor)."""
    fit = controller.frequency_response(w / (2 * np.pi), via="zpk")
    peak = np.max(np.abs(x)) if peak is None else peak
    err = np.abs(fit - x) / (np.abs(x) + 1e-9 * peak)
    return float(np.max(err)) if np.all(np.isfinite(err)) else float("inf")


def _verify(controller: Controller, G, C, b, out: int, radii: np.ndarray) -> float:
    w = _verify_points(radii)
    x = _direct_output(G, C, b, out, w)
    return float("inf") if x is None else _fit_error(controller, w, x)


# ----------------------------------------------------------------------------- part changes
# A part's value change alters only the few matrix entries its stamp touches: ΔY(s) = P_R M(s) P_Kᵀ
# with M(s) = ΔG + s·ΔC restricted to the touched rows R and columns K (2×2 for a resistor or a
# capacitor, 4×4 for a pot's two halves). With the nominal inverse Y⁻¹ at every sample point the
# changed determinant and solution follow exactly (matrix determinant lemma and Woodbury identity):
#   det(Y + ΔY) = det(Y)·det(I + Y⁻¹[K, R] M),
#   x' = x − Y⁻¹[:, R] M (I + Y⁻¹[K, R] M)⁻¹ x[K],
# a few small solves per sample point instead of a fresh factorization. The samples then go
# through the same circle fit, cancellation and check as a fresh solve.
_MAX_INVERSE_BYTES = 256e6  # beyond this the nominal inverses are not kept (plain re-solves instead)
_UPDATE_RATIO_FLOOR = 1e-6  # |det ratio| below this: the change nearly singularizes Y; solve afresh
_DIRECT_CHECKS = 3  # verification frequencies per changed circuit solved directly as well


@dataclass
class _Reuse:
    netlist: Netlist
    bases: dict = field(default_factory=dict)  # (input names, output) -> _Nominal | None


_REUSE: ContextVar[_Reuse | None] = ContextVar("loopshift_mna_reuse", default=None)


@contextmanager
def reusing_nominal(netlist: Netlist):
    """Within this block, :func:`transfer_functions` on ``netlist`` keeps its factorization at every
    sample point, and on a copy of it with changed part values (``netlist.with_values(...)``: same
    elements and nodes) updates that factorization instead of solving afresh.

    Each updated result is checked as a fresh one is: its fit against the (updated) solution at every
    verification frequency, and against a direct solve of the changed circuit at a few of them; a
    result that fails, or a change that nearly singularizes the equations, is solved afresh.
    """
    token = _REUSE.set(_Reuse(netlist))
    try:
        yield
    finally:
        _REUSE.reset(token)


@dataclass(frozen=True)
class _Nominal:
    """The nominal circuit's equations and their inverses at the sample and verification points."""

    netlist: Netlist
    system: MnaSystem
    elements: tuple[Element, ...]
    index: dict
    branch: dict
    row_scale: np.ndarray  # equilibration factor of each row (G, C and b are already scaled)
    G: np.ndarray
    C: np.ndarray
    B: np.ndarray
    names: tuple[str, ...]
    radii: np.ndarray
    m: int
    s: np.ndarray  # sample points (radius-major)
    sign: np.ndarray
    logdet: np.ndarray
    inv: np.ndarray  # (points, n, n)
    X: np.ndarray  # (points, n, inputs)
    w_check: np.ndarray  # verification frequencies (rad/s)
    inv_check: np.ndarray
    X_check: np.ndarray


def _prepare(netlist, system, G, C, B, names, per_decade, extra) -> _Nominal | None:
    radii, m, s_all = _sample_points(system, per_decade, extra)
    w = _verify_points(radii)
    n = G.shape[0]
    if (len(s_all) + len(w)) * n * n * 16 > _MAX_INVERSE_BYTES:
        return None
    Y = G[None, :, :] + s_all[:, None, None] * C[None, :, :]
    Yc = G[None, :, :] + 1j * w[:, None, None] * C[None, :, :]
    try:
        with np.errstate(all="ignore"):
            sign, logdet = np.linalg.slogdet(Y)
            inv = np.linalg.inv(Y)
            inv_check = np.linalg.inv(Yc)
    except np.linalg.LinAlgError:
        return None
    if not (np.all(np.isfinite(inv)) and np.all(np.isfinite(inv_check)) and np.all(sign != 0)):
        return None
    elements = netlist.linear_elements
    index, branch, _ = _numbering(elements)
    return _Nominal(
        netlist,
        system,
        elements,
        index,
        branch,
        _row_factors(system),
        G,
        C,
        B,
        tuple(names),
        radii,
        m,
        s_all,
        sign,
        logdet,
        inv,
        inv @ B,
        w,
        inv_check,
        inv_check @ B,
    )


def _changed_stamps(base: _Nominal, netlist: Netlist) -> dict | None:
    """{(matrix, row, column): Δvalue} (rows equilibrated) from ``base`` to ``netlist``; None when the
    two differ in anything but values (elements, kinds, nodes)."""
    new = netlist.linear_elements
    if len(new) != len(base.elements):
        return None
    delta: dict[tuple[int, int, int], float] = {}
    for old, e in zip(base.elements, new):
        if old is e:
            continue
        if old.name != e.name or old.kind != e.kind or old.nodes != e.nodes:
            return None
        if old == e:
            continue
        for sign, el in ((1.0, e), (-1.0, old)):
            for m, r, c, v in _stamps(el, base.index, base.branch):
                delta[(m, r, c)] = delta.get((m, r, c), 0.0) + sign * v
    return {k: v * base.row_scale[k[1]] for k, v in delta.items() if v != 0.0}


def _updated(inv, X, s, rows, cols, MG, MC, out):
    """(det ratio, V(out) per input) at each point s after the change P_R (MG + s·MC) P_Kᵀ."""
    M = MG[None, :, :] + s[:, None, None] * MC[None, :, :]  # (points, |R|, |K|)
    A = inv[:, cols][:, :, rows]  # Y⁻¹[K, R]
    W = np.eye(len(cols))[None, :, :] + A @ M
    with np.errstate(all="ignore"):
        ratio = np.linalg.det(W)
        Z = np.linalg.solve(W, X[:, cols, :])
    x_out = X[:, out, :] - (inv[:, out, :][:, None, rows] @ M @ Z)[:, 0, :]
    return ratio, x_out


def _perturbed(base: _Nominal, netlist: Netlist) -> dict[str, RationalResult] | None:
    """Transfer functions of ``netlist`` (``base`` with changed values) by updating the nominal
    factorization; None when the update does not apply or its result does not check."""
    delta = _changed_stamps(base, netlist)
    if not delta:
        return None
    rows = sorted({r for _, r, _ in delta})
    cols = sorted({c for _, _, c in delta})
    MG = np.zeros((len(rows), len(cols)))
    MC = np.zeros((len(rows), len(cols)))
    ri = {r: i for i, r in enumerate(rows)}
    ci = {c: i for i, c in enumerate(cols)}
    for (m, r, c), v in delta.items():
        (MG if m == 0 else MC)[ri[r], ci[c]] += v
    out = base.system.output
    try:
        ratio, H = _updated(base.inv, base.X, base.s, rows, cols, MG, MC, out)
        _, H_check = _updated(base.inv_check, base.X_check, 1j * base.w_check, rows, cols, MG, MC, out)
    except np.linalg.LinAlgError:
        return None
    if not (
        np.all(np.isfinite(ratio))
        and np.all(np.isfinite(H))
        and np.all(np.isfinite(H_check))
        and np.min(np.abs(ratio)) > _UPDATE_RATIO_FLOOR
    ):
        return None
    G, C = base.G.copy(), base.C.copy()
    for (m, r, c), v in delta.items():
        (G if m == 0 else C)[r, c] += v
    # The changed circuit's determinant is the nominal one times the ratio: same scale per radius.
    nr, m_ = len(base.radii), base.m
    logdet = base.logdet.reshape(nr, m_)
    offset = logdet.max(axis=1)
    dvals = base.sign.reshape(nr, m_) * np.exp(logdet - offset[:, None]) * ratio.reshape(nr, m_)
    n = base.system.reactive_count
    den = _coefficients(dvals, base.radii, offset, n)
    pick = np.unique(np.linspace(0, len(base.w_check) - 1, _DIRECT_CHECKS).round().astype(int))
    results: dict[str, RationalResult] = {}
    for j, name in enumerate(base.names):
        num = _coefficients(dvals * H[:, j].reshape(nr, m_), base.radii, offset, n)
        x_all = H_check[:, j]
        peak = float(np.max(np.abs(x_all)))

        def check(controller, j=j, x_all=x_all, peak=peak):
            x_direct = _direct_output(G, C, base.B[:, j], out, base.w_check[pick])
            if x_direct is None:
                return float("inf")
            return max(
                _fit_error(controller, base.w_check, x_all, peak),
                _fit_error(controller, base.w_check[pick], x_direct, peak),
            )

        try:
            results[name] = _finish(netlist, base.system, G, C, base.B[:, j], num, den, name, base.radii, check)
        except (InputError, UnrealizableError):
            return None
    return results


# ----------------------------------------------------------------------------- public API
def transfer_function(netlist: Netlist, input: str = "VIN", output: str = "out") -> Controller:  # noqa: A002
    """The controller V(output)/V(input) of a read netlist (descending powers of s).

    Every other voltage source is zeroed; diodes are left out (see :mod:`convert.circuit.clamps`).
    """
    return transfer_functions(netlist, (input,), output)[netlist.element(input).name].controller


def transfer_function_result(netlist: Netlist, input: str = "VIN", output: str = "out") -> RationalResult:  # noqa: A002
    """Like :func:`transfer_function` but with the cancelled pairs and the fit check."""
    return transfer_functions(netlist, (input,), output)[netlist.element(input).name]
