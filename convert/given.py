"""Given forms: controllers that already exist (firmware coefficients, a PID block as configured,
a card), named in a case file or on the command line, to be checked rather than made.

A given form is read into a :class:`GivenForm` (plain, validated data: values in SI units, the
place it was written) and built into a :class:`convert.controller.Controller` by
:func:`given_controller`. It then enters the comparison where a computed realization does
(``convert.compare.givenwork``).

Three kinds (``GivenForm.form``):

* ``digital`` — coefficients ``b``/``a`` in ascending powers of z^-1 (``a[0]`` ≠ 0, normalized to
  1) or second-order sections ``sos`` (rows ``[b0, b1, b2, a0, a1, a2]``, cascaded), the sample
  rate ``fs_hz``, the computation delay, the output limits, and — stored as written — the
  ``word_format`` and ``structure`` the firmware uses;
* ``pid`` — a firmware PID block as configured: its settings (the ``--pid`` keys), sample rate,
  the rule it integrates and differentiates by (``method``: ``backward-euler``, ``forward-euler``
  or ``tustin``, applied term by term), the algorithm (``positional`` or ``velocity``), output
  limits and delay;
* ``circuit`` — a SPICE netlist (``netlist`` file and its input/output names) or a catalog
  ``topology`` with its ``parts``, with ``tolerances`` where known.

Readers take a *context* with the typed-value helpers of :mod:`convert.case` (``value``,
``text``, ``pair``, ``delay``, ``table``, ``check_keys``, ``error``), so a case file and the
command line report errors at their own places.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from convert.errors import InputError

GIVEN_FORMS = ("digital", "pid", "circuit")
PID_BLOCK_METHODS = ("backward-euler", "forward-euler", "tustin")
PID_ALGORITHMS = ("positional", "velocity")
#: Word formats a given firmware may name. float64/float32 are evaluated here; fixed-point
#: names (Q15, Q31, Qm.n) are stored as written and evaluated by the word-format models of
#: ``convert.digital`` (see :func:`convert.compare.givenwork.quantized`).
_WORD_RE = re.compile(r"^(float64|float32|q\d{1,2}|q\d{1,2}\.\d{1,2})$", re.IGNORECASE)

#: Keys of each kind of given form (the case-file schema under ``[target.given.NAME]``).
KEYS: dict[str, tuple[str, ...]] = {
    "digital": ("form", "b", "a", "sos", "fs", "delay", "output_limits", "word_format", "structure"),
    "pid": ("form", "settings", "fs", "method", "algorithm", "delay", "output_limits", "word_format", "structure"),
    "circuit": ("form", "netlist", "input", "output", "setpoint", "measurement", "topology", "parts", "tolerances"),
}


@dataclass(frozen=True)
class GivenForm:
    """A form that exists. ``name`` labels it in the report; ``form`` is one of
    :data:`GIVEN_FORMS`; ``data`` holds the parsed fields (SI units: Hz, seconds, ohms, farads;
    ``b``/``a`` ascending in z^-1 with ``a[0] = 1``); ``where`` is where it was written."""

    name: str
    form: str
    data: dict = field(default_factory=dict)
    where: str = ""

    def delay_for(self) -> float:
        """Computation delay in seconds (a delay in samples resolved with the form's fs)."""
        d = self.data
        if d.get("delay_samples") is not None:
            return d["delay_samples"] / d["fs_hz"]
        return float(d.get("delay_s") or 0.0)

    def summary(self) -> dict:
        """Plain data for results.json."""
        out = {"name": self.name, "form": self.form}
        for k, v in self.data.items():
            if k == "pid":
                continue  # the settings as written are kept under "settings"
            out[k] = str(v) if isinstance(v, Path) else v
        return out


# ----------------------------------------------------------------------------- reading
def read_given(ctx, table: dict, dotted: str, name: str, base_dir: Path) -> GivenForm:
    """One given form from ``table`` (the keys of :data:`KEYS`); ``dotted`` is its key path
    (``target.given.firmware``) for error messages; paths are relative to ``base_dir``."""
    form = ctx.text(table, "form", f"{dotted}.form", choices=GIVEN_FORMS)
    if form is None:
        raise ctx.error(dotted, "missing form: say which kind of form exists, form = \"digital\", \"pid\" or \"circuit\"")
    ctx.check_keys(table, dict.fromkeys(KEYS[form], 1), dotted)
    where = ctx.where(dotted)
    reader = {"digital": _read_digital, "pid": _read_pid, "circuit": _read_circuit}[form]
    return GivenForm(name=name, form=form, data=reader(ctx, table, dotted, base_dir), where=where)


def _numbers(ctx, raw, dotted: str, what: str) -> list[float]:
    if not isinstance(raw, list) or not raw:
        raise ctx.error(dotted, f"expected a list of numbers ({what}), found {raw!r}")
    return [ctx.value({"v": v}, "v", dotted, "number") for v in raw]


def _firmware_common(ctx, table: dict, dotted: str, out: dict) -> None:
    out["fs_hz"] = ctx.value(table, "fs", f"{dotted}.fs", "hz", None, positive=True, allow_zero=False)
    if out["fs_hz"] is None:
        raise ctx.error(dotted, "missing fs: the sample rate the firmware runs at, e.g. fs = \"100 Hz\"")
    delay_s, delay_samples = ctx.delay(table, "delay", f"{dotted}.delay")
    out["delay_s"], out["delay_samples"] = delay_s, delay_samples
    out["output_limits"] = ctx.pair(table, "output_limits", f"{dotted}.output_limits", "number")
    word = ctx.text(table, "word_format", f"{dotted}.word_format", default="float64")
    if not _WORD_RE.match(word):
        raise ctx.error(f"{dotted}.word_format", "expected float64, float32 or a Q-format such as q15, q31 or q3.12, "
                                                 f"found {word!r}")
    out["word_format"] = word.lower()
    out["structure"] = ctx.text(table, "structure", f"{dotted}.structure", default="direct")


def _read_digital(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    out: dict[str, Any] = {}
    has_ba = "b" in table or "a" in table
    if has_ba and "sos" in table:
        raise ctx.error(f"{dotted}.sos", "give b and a, or sos, not both")
    if "sos" in table:
        raw = table["sos"]
        if not isinstance(raw, list) or not raw:
            raise ctx.error(f"{dotted}.sos", f"expected a list of sections [b0, b1, b2, a0, a1, a2], found {raw!r}")
        sections = []
        for i, row in enumerate(raw, start=1):
            values = _numbers(ctx, row, f"{dotted}.sos", "b0, b1, b2, a0, a1, a2")
            if len(values) != 6:
                raise ctx.error(f"{dotted}.sos", f"section {i}: expected six numbers b0, b1, b2, a0, a1, a2, "
                                                 f"found {len(values)}")
            if values[3] == 0:
                raise ctx.error(f"{dotted}.sos", f"section {i}: a0 must be non-zero")
            sections.append(values)
        out["sos"] = sections
        b, a = sos_to_b_a(sections)
    else:
        for coef in ("b", "a"):
            if coef not in table:
                raise ctx.error(dotted, f"missing {coef}: coefficients in ascending powers of z^-1 (or give sos)")
        b = _numbers(ctx, table["b"], f"{dotted}.b", "ascending powers of z^-1")
        a = _numbers(ctx, table["a"], f"{dotted}.a", "ascending powers of z^-1")
        if a[0] == 0:
            raise ctx.error(f"{dotted}.a", "a[0] must be non-zero (it multiplies the newest output)")
    out["b"] = [x / a[0] for x in b]
    out["a"] = [x / a[0] for x in a]
    _firmware_common(ctx, table, dotted, out)
    return out


def _read_pid(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    from convert.pid import pid_from_mapping

    settings = ctx.table(table, "settings", f"{dotted}.settings")
    if not settings:
        raise ctx.error(dotted, "missing settings: the block's PID settings, e.g. settings = { kc = 2, ti = \"30 s\" }")
    try:
        pid = pid_from_mapping(settings, where=ctx.where(f"{dotted}.settings"))
    except InputError as exc:
        key = f"{dotted}.settings" + (f".{exc.key}" if exc.key else "")
        raise InputError(exc.message, where=ctx.where(key), key=key) from None
    out: dict[str, Any] = {"settings": dict(settings), "pid": pid}
    out["method"] = ctx.text(table, "method", f"{dotted}.method", default="backward-euler", choices=PID_BLOCK_METHODS)
    out["algorithm"] = ctx.text(table, "algorithm", f"{dotted}.algorithm", default="positional",
                                choices=PID_ALGORITHMS)
    _firmware_common(ctx, table, dotted, out)
    if pid.kd > 0 and pid.tf == 0 and out["method"] != "backward-euler":
        raise ctx.error(f"{dotted}.method", f"an unfiltered derivative has a causal sampled form by backward-euler "
                                            f"only; give the block's filter (n or tf) or method = \"backward-euler\"")
    return out


def _read_circuit(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    out: dict[str, Any] = {}
    if ("netlist" in table) == ("topology" in table):
        raise ctx.error(dotted, "give netlist = \"card.cir\" or topology with parts (one of them)")
    if "netlist" in table:
        for key in ("parts",):
            if key in table:
                raise ctx.error(f"{dotted}.{key}", "parts belong to a catalog topology; a netlist carries its own")
        name = ctx.text(table, "netlist", f"{dotted}.netlist")
        path = base_dir / name
        if not path.is_file():
            raise ctx.error(f"{dotted}.netlist", f"no such netlist file {str(path)!r} (paths are relative to the "
                                                 "case file)")
        out.update(netlist=path, input=ctx.text(table, "input", f"{dotted}.input", default="VIN"),
                   output=ctx.text(table, "output", f"{dotted}.output", default="out"),
                   setpoint=ctx.text(table, "setpoint", f"{dotted}.setpoint"),
                   measurement=ctx.text(table, "measurement", f"{dotted}.measurement"))
        if (out["setpoint"] is None) != (out["measurement"] is None):
            raise ctx.error(dotted, "give both setpoint and measurement source names, or neither")
    else:
        for key in ("input", "output", "setpoint", "measurement"):
            if key in table:
                raise ctx.error(f"{dotted}.{key}", f"{key} names a netlist's node or source; a catalog topology has none")
        out["topology"] = ctx.text(table, "topology", f"{dotted}.topology")
        raw = ctx.table(table, "parts", f"{dotted}.parts") or {}
        if not raw:
            raise ctx.error(dotted, "missing parts: e.g. parts = { R1 = \"47k\", C1 = \"1 uF\" }")
        out["parts"] = {name: ctx.value(raw, name, f"{dotted}.parts.{name}", part_kind(name), positive=True,
                                        allow_zero=False) for name in raw}
    tol = ctx.table(table, "tolerances", f"{dotted}.tolerances")
    tols = {}
    for name in tol or {}:
        value = ctx.value(tol, name, f"{dotted}.tolerances.{name}", "ratio", positive=True)
        if value >= 1:
            raise ctx.error(f"{dotted}.tolerances.{name}", f"a tolerance is a fraction below 100 %, found {tol[name]!r}")
        tols[name] = value
    out["tolerances"] = tols
    return out


def part_kind(name: str) -> str:
    """The value kind of a part by its first letter (R ohm, C farad, L henry)."""
    return {"R": "ohm", "C": "farad", "L": "henry"}.get(name[:1].upper(), "number")


# ----------------------------------------------------------------------------- building
def sos_to_b_a(sections) -> tuple[list[float], list[float]]:
    """Second-order sections ``[[b0, b1, b2, a0, a1, a2], ...]`` (each ascending in z^-1)
    cascaded into one ``b``, ``a`` (ascending in z^-1; a is not normalized)."""
    import numpy as np

    b, a = np.array([1.0]), np.array([1.0])
    for row in sections:
        b = np.convolve(b, np.asarray(row[:3], dtype=float))
        a = np.convolve(a, np.asarray(row[3:], dtype=float))
    return list(_trim(b)), list(_trim(a))


def _trim(c):
    import numpy as np

    c = np.asarray(c, dtype=float)
    nz = np.flatnonzero(c)
    return c[: nz[-1] + 1] if nz.size else c[:1]


def pid_block_b_a(pid, fs_hz: float, method: str) -> tuple[list[float], list[float]]:
    """The sampled law of a firmware PID block, term by term (common practice for PID blocks):

    u = sign·(kp·e + I + D) with the integral ``ki/s`` and the filtered derivative
    ``kd·s/(tf·s + 1)`` each mapped by ``method``: backward-euler s → (1 − z⁻¹)/T, forward-euler
    s → (1 − z⁻¹)/(T·z⁻¹), tustin s → (2/T)(1 − z⁻¹)/(1 + z⁻¹). An unfiltered derivative is the
    backward difference kd·(1 − z⁻¹)/T. Returns ``b``, ``a`` ascending in z^-1 with ``a[0] = 1``.
    """
    import numpy as np

    t = 1.0 / fs_hz
    one = np.array([1.0])
    diff = np.array([1.0, -1.0])  # 1 - z^-1
    # s ~ num_s / den_s as polynomials in z^-1
    num_s, den_s = {"backward-euler": (diff / t, one), "forward-euler": (diff / t, np.array([0.0, 1.0])),
                    "tustin": (2 * diff / t, np.array([1.0, 1.0]))}[method]
    terms = [(np.array([pid.kp]), one)]
    if pid.ki > 0:  # ki / s = ki·den_s / num_s
        terms.append((pid.ki * den_s, num_s))
    if pid.kd > 0:  # kd·s/(tf·s + 1) = kd·num_s / (tf·num_s + den_s)
        if pid.tf > 0:
            terms.append((pid.kd * num_s, _padd(pid.tf * num_s, den_s)))
        else:
            terms.append((pid.kd * diff / t, one))
    b, a = np.array([0.0]), one
    for tn, td in terms:
        b = _padd(np.convolve(b, td), np.convolve(tn, a))
        a = np.convolve(a, td)
    b, a = _trim(b) * pid.sign, _trim(a)
    return list(b / a[0]), list(a / a[0])


def _padd(p, q):
    import numpy as np

    n = max(len(p), len(q))
    return np.pad(p, (0, n - len(p))) + np.pad(q, (0, n - len(q)))


def given_controller(given: GivenForm):
    """The controller of a given form (error -> output), with its PID settings and notes:
    returns a :class:`convert.case.SourceInfo`."""
    from convert.case import Source, SourceInfo, build_form
    from convert.controller import Controller

    d = given.data
    if given.form == "digital":
        ctrl = Controller.from_b_a(d["b"], d["a"], 1.0 / d["fs_hz"], name=given.name)
        return SourceInfo(controller=ctrl)
    if given.form == "pid":
        b, a = pid_block_b_a(d["pid"], d["fs_hz"], d["method"])
        ctrl = Controller.from_b_a(b, a, 1.0 / d["fs_hz"], name=given.name)
        return SourceInfo(controller=ctrl, pid=d["pid"])
    if "netlist" in d:
        src = Source("netlist", {"file": d["netlist"], "input": d["input"], "output": d["output"],
                                 "setpoint": d["setpoint"], "measurement": d["measurement"]}, given.where)
    else:
        src = Source("card", {"topology": d["topology"], "parts": d["parts"], "tolerances": d["tolerances"]},
                     given.where)
    info = build_form(src)
    return SourceInfo(controller=info.controller.with_name(given.name), pid=info.pid, parts=info.parts,
                      tolerances=d["tolerances"], topology=info.topology, notes=info.notes, extra=info.extra)


def read_given_targets(ctx, target_table: dict, base_dir: Path) -> tuple[GivenForm, ...]:
    """Every ``[target.given.NAME]`` table of a case, in file order."""
    raw = ctx.table(target_table, "given", "target.given")
    if raw is None:
        return ()
    out = []
    for name in raw:
        dotted = f"target.given.{name}"
        table = ctx.table(raw, name, dotted)
        if not table:
            raise ctx.error(dotted, "expected a table describing the form, e.g. [target.given.firmware] with "
                                    "form = \"digital\", b, a and fs")
        out.append(read_given(ctx, table, dotted, str(name), base_dir))
    return tuple(out)


def describe(given: GivenForm) -> str:
    """One line saying what the given form is, as written (for the report's inputs table)."""
    from convert.values import format_value

    d = given.data
    if given.form in ("digital", "pid"):
        if given.form == "digital":
            what = (f"{len(d['sos'])} second-order sections" if d.get("sos") else
                    f"b = {[float(f'{x:.10g}') for x in d['b']]}, a = {[float(f'{x:.10g}') for x in d['a']]}")
        else:
            what = (f"PID block ({d['algorithm']}, {d['method']}) " + ", ".join(f"{k} = {v}" for k, v in
                                                                                  d["settings"].items()))
        delay = given.delay_for()
        lim = d.get("output_limits")
        return (f"given firmware: {what} at {format_value(d['fs_hz'], 'hz')}; delay {format_value(delay, 'second')}"
                f"; {d['word_format']}, structure {d['structure']}"
                + (f"; output limits {lim[0]:g} … {lim[1]:g}" if lim else ""))
    tol = ", ".join(f"{k} {100 * v:g} %" for k, v in d["tolerances"].items()) or "none given"
    if "netlist" in d:
        return f"given card: netlist {Path(d['netlist']).name} (output {d['output']}); tolerances {tol}"
    parts = ", ".join(f"{k} = {format_value(v, part_kind(k))}" for k, v in d["parts"].items())
    return f"given card: topology {d['topology']}, {parts}; tolerances {tol}"
