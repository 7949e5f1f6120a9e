"""A bill of materials a buyer can order from: grouped lines, ratings, op-amp requirements.

:func:`buy_list` turns a :class:`~convert.circuit.design.CircuitDesign` into

* **part lines** in designator order (R1, R2, ..., R10, then C1, ...), parts of one kind, value,
  series, tolerance and ratings grouped on one line with their quantity;
* for **capacitors** the dielectric or type: C0G/NP0 ceramic up to :data:`C0G_MAX_F` (the sizes
  C0G is commonly made in), non-polarised film above (never a polarised electrolytic or tantalum
  part: the signal across a controller's capacitors reverses); and a **minimum voltage rating**;
* for **resistors** a **minimum power rating** and a **tempco class** (ppm/K) from the design's
  sensitivity to that part;
* an **op-amp requirements line** per amplifier: minimum gain-bandwidth, maximum input bias
  current, minimum slew rate, whether a rail-to-rail output is needed;
* for each part that **dominates the tolerance error** (resistor or capacitor, :func:`leading_parts`),
  a tighter tolerance for it alone and what it buys: the worst-case corners and the tolerance
  engine's Monte Carlo (same seed and draws as the design's own figures), before and after.

No brand or part number: requirements only. Rules (common practice; no single published source):

* Voltage across a part: every network of a stage sits between a source node and the op-amp's
  virtual ground (or ground), and in an RC network no element sees more than the whole network
  (impedances in the fourth quadrant add without cancelling); a source node is bounded by the rail
  (an op-amp output) or by the stated input amplitude (the input). Capacitor rating: the smallest
  standard rating at or above 1.5 × that voltage (derating to two thirds). Resistor power: the
  smallest standard rating at or above 2 × V²/R (derating to one half).
* Tempco: a part whose +1 % change moves the gain by S dB (worst over the band) may drift by
  tc · ΔT with ΔT = :data:`TEMPERATURE_SPAN_K`; the class is the loosest of
  :data:`TEMPCO_CLASSES` with S · tc · ΔT · 100 <= ``drift_db``.
* Gain-bandwidth: a stage with noise gain NG(f) = |Yt/Yf| (the inverting node's total admittance
  over the feedback admittance) has a relative error of about NG(f) · f / GBW from a single-pole
  op-amp, so GBW >= max over the band of NG(f) · f / ε with ε the stated relative error.
* Input bias: I_b <= offset / R_max with R_max the largest resistance on that amplifier.
* Slew rate: a sine of the stage's peak output at the band's top, SR >= 2π · f_top · V_peak.
* Rail-to-rail: needed when V_peak comes within :data:`HEADROOM_V` of the rail.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from collections.abc import Mapping

import numpy as np

from convert.circuit.topologies.model import node_responses, stage_admittances
from convert.circuit.topologies.networks import network_parts
from convert.errors import InputError
from convert.circuit.netlist_out import INVERTER_PARTS
from convert.circuit.tolerance import DEFAULT_TOLERANCES, tolerance_of, worst_case
from convert.circuit.design import tolerance_run

C0G_MAX_F = 100e-9  # C0G/NP0 ceramics are commonly made up to about 100 nF (common practice)
CAP_RATINGS_V = (6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 100.0, 250.0, 400.0, 630.0)
RES_RATINGS_W = (0.063, 0.1, 0.125, 0.25, 0.5, 1.0, 2.0)
TEMPCO_CLASSES = (200.0, 100.0, 50.0, 25.0, 15.0, 10.0, 5.0)  # ppm/K, loosest first
TEMPERATURE_SPAN_K = 50.0  # a cabinet's swing around its calibration temperature (common practice)
HEADROOM_V = 1.5  # a general-purpose op-amp output stays this far from each rail (common practice)
TIGHTER = {"R": (0.05, 0.02, 0.01, 0.005, 0.001), "C": (0.2, 0.1, 0.05, 0.02, 0.01)}
"""Tolerance steps (fractions) parts are commonly stocked in, loosest first."""

COLUMNS = (
    "line",
    "references",
    "quantity",
    "kind",
    "value",
    "unit",
    "series",
    "tolerance",
    "type",
    "min_voltage",
    "min_power",
    "tempco",
    "min_gbw",
    "max_input_bias",
    "min_slew_rate",
    "rail_to_rail_output",
    "note",
)
UNITS = ("", "", "pcs", "", "", "", "", "%", "", "V", "W", "ppm/K", "Hz", "A", "V/us", "", "")

_PREFIX = (
    (1e12, "T"),
    (1e9, "G"),
    (1e6, "M"),
    (1e3, "k"),
    (1.0, ""),
    (1e-3, "m"),
    (1e-6, "u"),
    (1e-9, "n"),
    (1e-12, "p"),
    (1e-15, "f"),
)


def ascii_value(value: float, digits: int = 4) -> str:
    """``value`` with an ASCII SI prefix (``u`` micro, ``k`` kilo, ``M`` mega), e.g. ``4.7u``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g}"
    for scale, prefix in _PREFIX:
        if abs(value) >= scale * 0.9999999:
            return f"{value / scale:.{digits}g}{prefix}"
    return f"{value:.{digits}g}"


def _next_at_least(x: float, steps) -> float | None:
    for s in steps:
        if s >= x * (1 - 1e-12):
            return s
    return None


def _designator_key(name: str):
    m = re.match(r"([A-Za-z]+)(\d*)(.*)", name)
    order = {"R": 0, "C": 1, "U": 2}
    letters = m.group(1).upper()
    return (order.get(letters[:1], 3), letters, int(m.group(2) or 0), m.group(3))


@dataclass(frozen=True)
class OpAmpNeed:
    """What one amplifier must offer (SI units: Hz, A, V/s)."""

    reference: str
    role: str
    min_gbw_hz: float
    max_input_bias_a: float
    min_slew_v_per_s: float
    peak_output_v: float
    rail_to_rail: bool

    def summary(self) -> dict:
        return {
            "reference": self.reference,
            "role": self.role,
            "min_gbw_hz": self.min_gbw_hz,
            "max_input_bias_a": self.max_input_bias_a,
            "min_slew_v_per_us": self.min_slew_v_per_s * 1e-6,
            "peak_output_v": self.peak_output_v,
            "rail_to_rail_output": self.rail_to_rail,
        }


@dataclass(frozen=True)
class Tightening:
    """The part that dominates the tolerance error and what a tighter tolerance for it alone buys."""

    part: str
    share: float  # its share of the summed first-order contributions (gain)
    tolerance: float  # now (fraction)
    suggested: float  # suggested (fraction)
    gain_db: tuple[float, float]  # worst-case gain spread (dB) before, after
    phase_deg: tuple[float, float]
    mc_gain_db: tuple[float, float] | None = None  # Monte Carlo 99th percentile gain error (dB) before, after
    mc_phase_deg: tuple[float, float] | None = None
    draws: int = 0  # draws of the Monte Carlo figures (same seed before and after); 0: not run
    seed: int = 1
    leaders: int = 1  # how many parts lead the tolerance error together (this one among them)

    def note(self) -> str:
        """One line for the buy list's note column and the terminal (ASCII)."""
        lead = (
            "dominates the tolerance error"
            if self.leaders == 1
            else f"one of the {self.leaders} parts that lead the tolerance error"
        )
        text = f"{lead} ({self.share:.0%}); at {self.suggested * 100:g} % "
        if self.mc_gain_db is not None:
            text += (
                f"the Monte Carlo p99 goes from {self.mc_gain_db[0]:.3g} dB / {self.mc_phase_deg[0]:.3g} deg to "
                f"{self.mc_gain_db[1]:.3g} dB / {self.mc_phase_deg[1]:.3g} deg ({self.draws} draws, seed "
                f"{self.seed}); worst case "
            )
        else:
            text += "the worst case goes "
        return text + (
            f"from {self.gain_db[0]:.3g} dB / {self.phase_deg[0]:.3g} deg to "
            f"{self.gain_db[1]:.3g} dB / {self.phase_deg[1]:.3g} deg"
        )

    def summary(self) -> dict:
        out = {
            "part": self.part,
            "share": self.share,
            "tolerance_pct": self.tolerance * 100,
            "suggested_pct": self.suggested * 100,
            "worst_case_gain_db": {"now": self.gain_db[0], "with_suggestion": self.gain_db[1]},
            "worst_case_phase_deg": {"now": self.phase_deg[0], "with_suggestion": self.phase_deg[1]},
        }
        if self.mc_gain_db is not None:
            out["monte_carlo"] = {
                "draws": self.draws,
                "seed": self.seed,
                "gain_error_db_p99": {"now": self.mc_gain_db[0], "with_suggestion": self.mc_gain_db[1]},
                "phase_error_deg_p99": {"now": self.mc_phase_deg[0], "with_suggestion": self.mc_phase_deg[1]},
            }
        return out


@dataclass(frozen=True)
class BuyList:
    lines: list
    opamps: list
    tightening: Tightening | None  # the first of ``tightenings`` (the largest contribution)
    assumptions: dict = field(default_factory=dict)
    tightenings: list = field(default_factory=list)  # one per leading part, largest contribution first

    def summary(self) -> dict:
        return {
            "lines": self.lines,
            "opamps": [o.summary() for o in self.opamps],
            "tightening": self.tightening.summary() if self.tightening else None,
            "tightenings": [t.summary() for t in self.tightenings],
            "assumptions": self.assumptions,
        }

    def csv(self) -> str:
        """ASCII-only CSV: a header, a units row, the part lines, then one line per op-amp."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(COLUMNS)
        w.writerow(UNITS)
        n = 0
        for line in self.lines:
            n += 1
            w.writerow(
                [
                    n,
                    " ".join(line["references"]),
                    line["quantity"],
                    line["kind"],
                    line["value"],
                    line["unit"],
                    line["series"],
                    f"{line['tolerance_pct']:g}",
                    line.get("type", ""),
                    _g(line.get("min_voltage_v")),
                    _g(line.get("min_power_w")),
                    _g(line.get("tempco_ppm_per_k")),
                    "",
                    "",
                    "",
                    "",
                    line.get("note", ""),
                ]
            )
        for o in self.opamps:
            n += 1
            w.writerow(
                [
                    n,
                    o.reference,
                    1,
                    "op-amp",
                    "",
                    "",
                    "",
                    "",
                    "",
                    "",
                    "",
                    "",
                    f"{o.min_gbw_hz:.3g}",
                    f"{o.max_input_bias_a:.3g}",
                    f"{o.min_slew_v_per_s * 1e-6:.3g}",
                    "yes" if o.rail_to_rail else "no",
                    o.role,
                ]
            )
        text = buf.getvalue()
        text.encode("ascii")  # raises on any non-ASCII character: a defect, not an input error
        return text


def _g(x) -> str:
    return "" if x is None else f"{x:g}"


def ascii_text(text: str) -> str:
    """``text`` in ASCII for a CSV cell: ``Ω`` -> ``ohm``, ``µ`` -> ``u``, ``·`` -> ``*``, ``²`` -> ``^2``, ..."""
    table = {
        "Ω": "ohm",
        "µ": "u",
        "·": "*",
        "′": "'",
        "−": "-",
        "–": "-",
        "≥": ">=",
        "≤": "<=",
        "τ": "tau",
        "²": "^2",
        "√": "sqrt",
        "∥": "||",
        "×": "x",
        "³": "^3",
        "±": "+/-",
        "°": " deg",
        "π": "pi",
        "ω": "w",
        "Δ": "delta",
        "→": "->",
        "…": "...",
        "≈": "~",
    }
    out = "".join(table.get(ch, ch) for ch in text)
    return out.encode("ascii", "replace").decode("ascii")


def buy_list(
    design,
    tolerances: Mapping[str, float] | None = None,
    *,
    rail_v: float = 15.0,
    amplitude_v: float | None = None,
    error: float = 0.01,
    offset_v: float = 1e-3,
    drift_db: float = 0.1,
    dominant_share: float = 0.5,
    draws: int = 0,
    seed: int = 1,
    distribution: str | None = None,
) -> BuyList:
    """The buyer's bill of materials of ``design`` (see the module docstring).

    ``rail_v``: the op-amps' supply rail (V, each side); ``amplitude_v``: the largest input peak (V;
    default the rail); ``error``: the relative error an op-amp's finite gain-bandwidth may cause
    (default 1 %); ``offset_v``: the output offset the input bias current may cause across the
    largest resistor (default 1 mV); ``drift_db``: the gain drift a part's tempco may cause over
    :data:`TEMPERATURE_SPAN_K` (default 0.1 dB); ``dominant_share``: see :func:`leading_parts`.
    ``draws``, ``seed``, ``distribution``: the Monte Carlo of the tolerance engine
    (:func:`convert.circuit.design.tolerance_run`) that prices each suggested tolerance, run before
    and after with the same seed and draws (0: worst-case corners only).
    """
    for name, v in (("rail", rail_v), ("error", error), ("offset", offset_v), ("drift", drift_db)):
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise InputError(f"the {name} must be a positive number, found {v!r}", key=name)
    amplitude = rail_v if amplitude_v is None else float(amplitude_v)
    tol = dict(DEFAULT_TOLERANCES if tolerances is None else tolerances)
    topo = design.topology
    rounded = {k: float(v) for k, v in design.rounded.items()}
    fitted = {k: v for k, v in rounded.items() if not (math.isinf(v) or v == 0.0)}
    f = design.f_grid(50)
    lo, hi = design.band_hz

    # voltage bound across every part: the bound of the node driving its network
    def node_bound(node: str) -> float:
        return amplitude if node in topo.inputs else rail_v

    bound: dict[str, float] = {}
    for st in topo.stages:
        nets = [(src, net) for src, net in st.inputs] + [(st.output, st.feedback)]
        if st.plus is not None:
            nets += [(st.plus[0], st.plus[1]), (st.plus[0], st.plus[2])]
        for src, net in nets:
            for name in network_parts(net):
                bound[name] = max(bound.get(name, 0.0), node_bound(src))
    for jn in topo.junctions:  # a passive node between stages: bounded by the rails
        for other, net in jn.branches:
            for name in network_parts(net):
                bound[name] = max(bound.get(name, 0.0), node_bound(other), rail_v)
    # sensitivity to each part (worst over the band, dB per +1 %) from the worst-case analysis
    wc = worst_case(topo, rounded, tol, f)
    sens_db = {k: float(np.max(np.abs(v))) for k, v in wc.sensitivity_db.items()}

    parts = []
    for p in topo.parts:
        if p.name not in fitted:
            continue
        value = fitted[p.name]
        t = tolerance_of(p, tol)
        row = {
            "reference": p.name,
            "kind": "resistor" if p.kind == "R" else "capacitor",
            "value": ascii_value(value),
            "unit": "ohm" if p.kind == "R" else "F",
            "series": design.options.series_for(p.kind),
            "tolerance_pct": round(t * 100, 6),
            "value_si": value,
        }
        v = bound.get(p.name, rail_v)
        s = sens_db.get(p.name, 0.0)
        need = drift_db / (s * TEMPERATURE_SPAN_K * 100) * 1e6 if s > 0 else math.inf  # ppm/K
        cls = next((c for c in TEMPCO_CLASSES if c <= need), TEMPCO_CLASSES[-1])
        if p.kind == "C":
            row["type"] = "C0G/NP0 ceramic" if value <= C0G_MAX_F * (1 + 1e-9) else "film, non-polarised"
            row["min_voltage_v"] = _next_at_least(1.5 * v, CAP_RATINGS_V) or 1.5 * v
            if cls < 100:  # a capacitor's drift matters as a resistor's does (C0G: 0 +/- 30 ppm/K)
                row["tempco_ppm_per_k"] = cls
        else:
            row["min_power_w"] = _next_at_least(2 * v * v / value, RES_RATINGS_W) or 2 * v * v / value
            row["tempco_ppm_per_k"] = cls
        if cls < 100:
            row["note"] = f"sensitive: {s:.3g} dB per 1 %"
        parts.append(row)
    if design.needs_inverter:
        for name, value in INVERTER_PARTS.items():
            parts.append(
                {
                    "reference": name,
                    "kind": "resistor",
                    "value": ascii_value(value),
                    "unit": "ohm",
                    "series": design.options.resistors,
                    "tolerance_pct": round(tol.get("R", 0.0) * 100, 6),
                    "value_si": value,
                    "min_power_w": _next_at_least(2 * rail_v**2 / value, RES_RATINGS_W),
                    "tempco_ppm_per_k": 100.0,
                    "note": "unity inverter (sets the sign only)",
                }
            )

    # the leading parts of the tolerance error and a tighter tolerance for each alone
    contrib = {k: sens_db.get(k, 0.0) * tolerance_of(topo.part(k), tol) * 100 for k in fitted}
    leading = leading_parts(contrib, dominant_share)
    tightenings = []
    if leading:
        before = wc.spread()
        mc_before = _drawn_spread(design, tol, draws, seed, distribution)
        total = sum(contrib.values())
        for top in leading:
            part = topo.part(top)
            now = tolerance_of(part, tol)
            tighter = [x for x in TIGHTER[part.kind] if x < now * (1 - 1e-9)]
            if not tighter:
                continue
            suggested = tighter[0]
            after = worst_case(topo, rounded, {**tol, top: suggested}, f).spread()
            mc_after = _drawn_spread(design, {**tol, top: suggested}, draws, seed, distribution)
            t = Tightening(
                top,
                contrib[top] / total,
                now,
                suggested,
                (before["gain_db"], after["gain_db"]),
                (before["phase_deg"], after["phase_deg"]),
                None if mc_before is None else (mc_before[0], mc_after[0]),
                None if mc_before is None else (mc_before[1], mc_after[1]),
                draws if mc_before is not None else 0,
                seed,
                len(leading),
            )
            tightenings.append(t)
            for row in parts:
                if row["reference"] == top:
                    row["note"] = t.note()

    # group identical lines
    groups: dict = {}
    for row in sorted(parts, key=lambda r: _designator_key(r["reference"])):
        key = tuple(
            (k, row.get(k))
            for k in (
                "kind",
                "value",
                "unit",
                "series",
                "tolerance_pct",
                "type",
                "min_voltage_v",
                "min_power_w",
                "tempco_ppm_per_k",
                "note",
            )
        )
        if key not in groups:
            groups[key] = {k: v for k, v in row.items() if k not in ("reference", "value_si")}
            groups[key]["references"] = []
        groups[key]["references"].append(row["reference"])
    lines = list(groups.values())
    for line in lines:
        line["quantity"] = len(line["references"])
        if "note" in line:
            line["note"] = ascii_text(line["note"])

    # op-amps
    s = 2j * np.pi * f
    p = {k: np.asarray(v, dtype=float) for k, v in rounded.items()}
    nodes = node_responses(topo, p, f, drive={"in": 1.0} if not topo.two_input else {"sp": 0.0, "meas": 1.0})
    opamps = []
    stages = list(topo.stages)
    for st in stages:
        # noise gain 1 + Zf·ΣYin; an input read from a junction counts as driven from a fixed node
        # (the junction's own path back from the output only raises the feedback: conservative)
        yf, ys, _ = stage_admittances(st, p, s)
        yt = sum(y for _, y in ys) + yf
        with np.errstate(divide="ignore", invalid="ignore"):
            ng = np.abs(yt / yf)
        gbw = float(np.nanmax(ng * f) / error)
        r_max = max([fitted[n] for n in _stage_parts(st, topo) if n in fitted and topo.part(n).kind == "R"] or [1e3])
        peak = min(rail_v, amplitude * float(np.max(np.abs(nodes[st.output]))))
        opamps.append(
            OpAmpNeed(
                st.amp,
                ascii_text(st.role),
                gbw,
                offset_v / r_max,
                2 * math.pi * hi * peak,
                peak,
                peak > rail_v - HEADROOM_V,
            )
        )
    if design.needs_inverter:
        peak = min(rail_v, amplitude * float(np.max(np.abs(nodes[stages[-1].output]))))
        opamps.append(
            OpAmpNeed(
                "UINV",
                "unity inverter",
                float(2 * hi / error),
                offset_v / INVERTER_PARTS["RINV2"],
                2 * math.pi * hi * peak,
                peak,
                peak > rail_v - HEADROOM_V,
            )
        )
    assumptions = {
        "rail_v": rail_v,
        "input_amplitude_v": amplitude,
        "gbw_relative_error": error,
        "offset_v": offset_v,
        "temperature_span_k": TEMPERATURE_SPAN_K,
        "tempco_drift_db": drift_db,
        "band_hz": [lo, hi],
        "c0g_max_f": C0G_MAX_F,
        "headroom_v": HEADROOM_V,
    }
    return BuyList(lines, opamps, tightenings[0] if tightenings else None, assumptions, tightenings)


def leading_parts(contributions: Mapping[str, float], share: float = 0.5, most: int = 3) -> list[str]:
    """The parts that dominate an error, largest first (empty when none does).

    ``contributions``: part -> its first-order share of the error (sensitivity × tolerance, any
    unit, >= 0). The leading parts are the fewest largest ones whose contributions reach ``share``
    of the total, provided they are at most ``most`` parts and at most half of the contributing
    parts, and the smallest of them is at least twice the largest of the rest (common practice:
    a part "dominates" when tightening it alone changes the figure; with the error spread evenly,
    no single part does)."""
    items = sorted(((v, k) for k, v in contributions.items() if v > 0), reverse=True)
    total = sum(v for v, _ in items)
    if not items or not total > 0:
        return []
    acc, chosen = 0.0, []
    for v, k in items:
        chosen.append((v, k))
        acc += v
        if acc >= share * total * (1 - 1e-12):
            break
    rest = items[len(chosen) :]
    if len(chosen) > most or (len(chosen) > 1 and 2 * len(chosen) > len(items)):
        return []
    if len(chosen) == len(items) and len(items) > 1:
        return []
    if rest and chosen[-1][0] < 2 * rest[0][0]:
        return []
    return [k for _, k in chosen]


def _drawn_spread(design, tolerances, draws: int, seed: int, distribution) -> tuple[float, float] | None:
    """(99th percentile gain error dB, phase error deg) of the tolerance engine's Monte Carlo, or None."""
    if not draws:
        return None

    fig = tolerance_run(design, tolerances, draws=draws, seed=seed, distribution=distribution).figures["tolerances"]
    return float(fig.max_gain_error_db), float(fig.max_phase_error_deg)


def _stage_parts(st, topo) -> list[str]:
    """Parts around one op-amp: its networks and those of the junctions its inputs read."""
    names = network_parts(st.feedback)
    for src, net in st.inputs:
        names += network_parts(net)
        for jn in topo.junctions:
            if jn.name == src:
                names += [n for _, b in jn.branches for n in network_parts(b)]
    if st.plus is not None:
        names += network_parts(st.plus[1]) + network_parts(st.plus[2])
    return names
