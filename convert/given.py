"""Given forms: controllers that already exist (firmware coefficients, a PID block as configured,
a card), named in a case file or on the command line, to be checked rather than made.

A given form is read into a :class:`GivenForm` (plain, validated data: values in SI units, the
place it was written) and built into a :class:`convert.controller.Controller` by
:func:`given_controller`. It then enters the comparison where a computed realization does
(``convert.compare.givenwork``).

Four kinds (``GivenForm.form``):

* ``analog`` — a transfer function in s (``expression``) or analog PID ``settings``;
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

from convert.errors import InputError, LoopshiftError
from convert.controller import from_expression, Controller
from convert.pid import pid_from_mapping
from convert.values import format_value
from convert.compare.frequency import delay_problem

GIVEN_FORMS = ("analog", "digital", "pid", "circuit")
PID_BLOCK_METHODS = ("backward-euler", "forward-euler", "tustin")
PID_ALGORITHMS = ("positional", "velocity")
#: Word formats a given firmware may name. float64/float32 are evaluated here; fixed-point
#: names (Q15, Q31, Qm.n) are stored as written and evaluated by the word-format models of
#: ``convert.digital`` (see :func:`convert.compare.givenwork.quantized`).
_WORD_RE = re.compile(r"^(float64|float32|q\d{1,2}|q\d{1,2}\.\d{1,2})$", re.IGNORECASE)

#: Keys of each kind of given form (the case-file schema under ``[target.given.NAME]``).
KEYS: dict[str, tuple[str, ...]] = {
    "analog": ("form", "expression", "settings"),
    "digital": ("form", "b", "a", "sos", "fs", "delay", "output_limits", "word_format", "structure"),
    "pid": ("form", "settings", "fs", "method", "algorithm", "delay", "output_limits", "word_format", "structure"),
    "circuit": ("form", "netlist", "input", "output", "setpoint", "measurement", "topology", "parts", "tolerances"),
}


@dataclass(frozen=True)
class GivenForm:
    """A form that exists. ``name`` labels it in the report; ``form`` is one of
    :data:`GIVEN_FORMS`; ``data`` holds the parsed fields (SI units: Hz, seconds, ohms, farads;
    ``b``/``a`` ascending in z^-1 with ``a[0] = 1``); ``where`` is where it was written;
    ``key_where`` maps a key of a case file's table to its own ``file:line`` (empty elsewhere)."""

    name: str
    form: str
    data: dict = field(default_factory=dict)
    where: str = ""
    key_where: dict = field(default_factory=dict, compare=False)

    def located(self, key: str) -> dict:
        """``where=`` and ``key=`` for an error about the field ``key`` (e.g. "fs", "word_format"):
        in a case file its own line and dotted key; in a command-line spec the spec's label and
        the word its user typed (``word=``, ``tol=``, ``fs=``), never a case-file key."""
        if self.key_where:
            return {"where": self.key_where.get(key, self.where), "key": f"target.given.{self.name}.{key}"}
        words = {v: k for k, v in _SPEC_WORDS.items()}
        return {"where": self.where, "key": words.get(key, key)}

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
            if k in ("pid", "controller"):
                continue  # the settings as written are kept under "settings"
            out[k] = str(v) if isinstance(v, Path) else v
        return out


# ----------------------------------------------------------------------------- reading
def read_given(ctx, table: dict, dotted: str, name: str, base_dir: Path) -> GivenForm:
    """One given form from ``table`` (the keys of :data:`KEYS`); ``dotted`` is its key path
    (``target.given.firmware``) for error messages; paths are relative to ``base_dir``."""
    form = ctx.text(table, "form", f"{dotted}.form", choices=GIVEN_FORMS)
    if form is None:
        raise ctx.error(dotted, 'missing form: say which kind of form exists, form = "digital", "pid" or "circuit"')
    ctx.check_keys(table, dict.fromkeys(KEYS[form], 1), dotted)
    where = ctx.where(dotted)
    reader = {"analog": _read_analog, "digital": _read_digital, "pid": _read_pid, "circuit": _read_circuit}[form]
    key_where = {k: ctx.where(f"{dotted}.{k}") for k in table}
    return GivenForm(name=name, form=form, data=reader(ctx, table, dotted, base_dir), where=where, key_where=key_where)


def _numbers(ctx, raw, dotted: str, what: str) -> list[float]:
    if not isinstance(raw, list) or not raw:
        raise ctx.error(dotted, f"expected a list of numbers ({what}), found {raw!r}")
    return [ctx.value({"v": v}, "v", dotted, "number") for v in raw]


def _firmware_common(ctx, table: dict, dotted: str, out: dict) -> None:
    out["fs_hz"] = ctx.value(table, "fs", f"{dotted}.fs", "hz", None, positive=True, allow_zero=False)
    if out["fs_hz"] is None:
        raise ctx.error(dotted, 'missing fs: the sample rate the firmware runs at, e.g. fs = "100 Hz"')
    delay_s, delay_samples = ctx.delay(table, "delay", f"{dotted}.delay")
    out["delay_s"], out["delay_samples"] = delay_s, delay_samples
    why = delay_problem(delay_samples / out["fs_hz"] if delay_samples is not None else delay_s, out["fs_hz"])
    if why:
        raise ctx.error(f"{dotted}.delay", why)
    out["output_limits"] = ctx.pair(table, "output_limits", f"{dotted}.output_limits", "number")
    word = ctx.text(table, "word_format", f"{dotted}.word_format", default="float64")
    if not _WORD_RE.match(word):
        raise ctx.error(
            f"{dotted}.word_format",
            f"expected float64, float32 or a Q-format such as q15, q31 or q3.12, found {word!r}",
        )
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
                raise ctx.error(
                    f"{dotted}.sos", f"section {i}: expected six numbers b0, b1, b2, a0, a1, a2, found {len(values)}"
                )
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


def _read_analog(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    if ("expression" in table) == ("settings" in table):
        raise ctx.error(dotted, 'give expression = "..." (in s) or settings = { kc = ..., ti = ... } (one of them)')
    if "expression" in table:
        text = ctx.text(table, "expression", f"{dotted}.expression")
        ctrl = from_expression(text, label=f"{ctx.where(f'{dotted}.expression')}: {dotted}.expression")
        if ctrl.is_digital:
            raise ctx.error(f"{dotted}.expression", 'an analog form is in s; give firmware as form = "digital"')
        return {"expression": text, "controller": ctrl}
    return {
        "settings": dict(ctx.table(table, "settings", f"{dotted}.settings") or {}),
        "pid": _pid_settings(ctx, table, dotted),
    }


def _pid_settings(ctx, table: dict, dotted: str):
    settings = ctx.table(table, "settings", f"{dotted}.settings")
    if not settings:
        raise ctx.error(dotted, 'missing settings: the PID settings, e.g. settings = { kc = 2, ti = "30 s" }')
    try:
        return pid_from_mapping(settings, where=ctx.where(f"{dotted}.settings"))
    except InputError as exc:
        key = f"{dotted}.settings" + (f".{exc.key}" if exc.key else "")
        raise InputError(exc.message, where=ctx.where(key), key=key) from None


def _read_pid(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    pid = _pid_settings(ctx, table, dotted)
    out: dict[str, Any] = {"settings": dict(table["settings"]), "pid": pid}
    out["method"] = ctx.text(table, "method", f"{dotted}.method", default="backward-euler", choices=PID_BLOCK_METHODS)
    out["algorithm"] = ctx.text(table, "algorithm", f"{dotted}.algorithm", default="positional", choices=PID_ALGORITHMS)
    _firmware_common(ctx, table, dotted, out)
    if pid.kd > 0 and pid.tf == 0 and out["method"] != "backward-euler":
        raise ctx.error(
            f"{dotted}.method",
            "an unfiltered derivative has a causal sampled form by backward-euler "
            'only; give the block\'s filter (n or tf) or method = "backward-euler"',
        )
    return out


def _read_circuit(ctx, table: dict, dotted: str, base_dir: Path) -> dict:
    out: dict[str, Any] = {}
    if ("netlist" in table) == ("topology" in table):
        raise ctx.error(dotted, 'give netlist = "card.cir" or topology with parts (one of them)')
    if "netlist" in table:
        for key in ("parts",):
            if key in table:
                raise ctx.error(f"{dotted}.{key}", "parts belong to a catalog topology; a netlist carries its own")
        name = ctx.text(table, "netlist", f"{dotted}.netlist")
        path = base_dir / name
        if not path.is_file():
            raise ctx.error(
                f"{dotted}.netlist",
                f"no such netlist file {str(path)!r} (paths are relative to {ctx.paths_relative_to})",
            )
        out.update(
            netlist=path,
            input=ctx.text(table, "input", f"{dotted}.input", default="VIN"),
            output=ctx.text(table, "output", f"{dotted}.output", default="out"),
            setpoint=ctx.text(table, "setpoint", f"{dotted}.setpoint"),
            measurement=ctx.text(table, "measurement", f"{dotted}.measurement"),
        )
        if (out["setpoint"] is None) != (out["measurement"] is None):
            raise ctx.error(dotted, "give both setpoint and measurement source names, or neither")
    else:
        for key in ("input", "output", "setpoint", "measurement"):
            if key in table:
                raise ctx.error(
                    f"{dotted}.{key}", f"{key} names a netlist's node or source; a catalog topology has none"
                )
        out["topology"] = ctx.text(table, "topology", f"{dotted}.topology")
        raw = ctx.table(table, "parts", f"{dotted}.parts") or {}
        if not raw:
            raise ctx.error(dotted, 'missing parts: e.g. parts = { R1 = "47k", C1 = "1 uF" }')
        out["parts"] = {
            name: ctx.value(raw, name, f"{dotted}.parts.{name}", part_kind(name), positive=True, allow_zero=False)
            for name in raw
        }
    tol = ctx.table(table, "tolerances", f"{dotted}.tolerances")
    tols = {}
    for name in tol or {}:
        value = ctx.fraction(tol, name, f"{dotted}.tolerances.{name}", allow_one=False)
        if value >= 1:
            raise ctx.error(
                f"{dotted}.tolerances.{name}", f"a tolerance is a fraction below 100 %, found {tol[name]!r}"
            )
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


def pid_block_b_a(pid, fs_hz: float, method: str, *, path: str = "error") -> tuple[list[float], list[float]]:
    """The sampled law of a firmware PID block, term by term (common practice for PID blocks):

    u = sign·(kp·e + I + D) with the integral ``ki/s`` and the filtered derivative
    ``kd·s/(tf·s + 1)`` each mapped by ``method``: backward-euler s → (1 − z⁻¹)/T, forward-euler
    s → (1 − z⁻¹)/(T·z⁻¹), tustin s → (2/T)(1 − z⁻¹)/(1 + z⁻¹). An unfiltered derivative is the
    backward difference kd·(1 − z⁻¹)/T. Returns ``b``, ``a`` ascending in z^-1 with ``a[0] = 1``.
    ``path="setpoint"``: the setpoint -> output path with the weights, sign·(kp·b + I + kd·c·D)
    (the feedback path, measurement -> −output, is the default ``"error"`` law).
    """
    import numpy as np

    kp, kd = (pid.kp * pid.b, pid.kd * pid.c) if path == "setpoint" else (pid.kp, pid.kd)

    t = 1.0 / fs_hz
    one = np.array([1.0])
    diff = np.array([1.0, -1.0])  # 1 - z^-1
    # s ~ num_s / den_s as polynomials in z^-1
    num_s, den_s = {
        "backward-euler": (diff / t, one),
        "forward-euler": (diff / t, np.array([0.0, 1.0])),
        "tustin": (2 * diff / t, np.array([1.0, 1.0])),
    }[method]
    terms = [(np.array([kp]), one)]
    if pid.ki > 0:  # ki / s = ki·den_s / num_s
        terms.append((pid.ki * den_s, num_s))
    if kd != 0:  # kd·s/(tf·s + 1) = kd·num_s / (tf·num_s + den_s)
        if pid.tf > 0:
            terms.append((kd * num_s, _padd(pid.tf * num_s, den_s)))
        else:
            terms.append((kd * diff / t, one))
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


def given_controller(given: GivenForm, case=None):
    """The controller of a given form (error -> output), with its PID settings and notes:
    returns a :class:`convert.case.SourceInfo`. Errors name where the form was written."""
    try:
        return _given_controller(given, case)
    except LoopshiftError as exc:
        import re

        if not exc.where or exc.where == given.where:
            where = given.where
        elif re.search(r":\d+$", exc.where):
            raise  # a netlist error naming the netlist file and line
        else:
            where = f"{given.where}: {exc.where}"
        raise type(exc)(exc.message, where=where, key=exc.key) from None


def _given_controller(given: GivenForm, case=None):
    # imported here, not at the top: import cycle (convert.given -> convert.case -> convert.given)
    from convert.case import Source, SourceInfo, build_form

    d = given.data
    if given.form == "analog":
        if "controller" in d:
            return SourceInfo(controller=d["controller"].with_name(given.name))
        return SourceInfo(controller=d["pid"].to_controller(given.name), pid=d["pid"])
    if given.form == "digital":
        ctrl = Controller.from_b_a(d["b"], d["a"], 1.0 / d["fs_hz"], name=given.name)
        return SourceInfo(controller=ctrl)
    if given.form == "pid":
        b, a = pid_block_b_a(d["pid"], d["fs_hz"], d["method"])
        ctrl = Controller.from_b_a(b, a, 1.0 / d["fs_hz"], name=given.name)
        return SourceInfo(controller=ctrl, pid=d["pid"])
    if "netlist" in d:
        src = Source(
            "netlist",
            {
                "file": d["netlist"],
                "input": d["input"],
                "output": d["output"],
                "setpoint": d["setpoint"],
                "measurement": d["measurement"],
            },
            given.where,
        )
    else:
        src = Source(
            "card", {"topology": d["topology"], "parts": d["parts"], "tolerances": d["tolerances"]}, given.where
        )
    info = build_form(src, case)
    return SourceInfo(
        controller=info.controller.with_name(given.name),
        pid=info.pid,
        parts=info.parts,
        tolerances=d["tolerances"],
        topology=info.topology,
        notes=info.notes,
        extra=info.extra,
    )


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
            raise ctx.error(
                dotted,
                'expected a table describing the form, e.g. [target.given.firmware] with form = "digital", b, a and fs',
            )
        out.append(read_given(ctx, table, dotted, str(name), base_dir))
    return tuple(out)


def describe(given: GivenForm) -> str:
    """One line saying what the given form is, as written (for the report's inputs table)."""
    d = given.data
    if given.form == "analog":
        what = d.get("expression") or ", ".join(f"{k} = {v}" for k, v in d["settings"].items())
        return f"given analog controller: {what}"
    if given.form in ("digital", "pid"):
        if given.form == "digital":
            what = (
                f"{len(d['sos'])} second-order sections"
                if d.get("sos")
                else f"b = {[float(f'{x:.10g}') for x in d['b']]}, a = {[float(f'{x:.10g}') for x in d['a']]}"
            )
        else:
            what = f"PID block ({d['algorithm']}, {d['method']}) " + ", ".join(
                f"{k} = {v}" for k, v in d["settings"].items()
            )
        delay = given.delay_for()
        lim = d.get("output_limits")
        return (
            f"given firmware: {what} at {format_value(d['fs_hz'], 'hz')}; delay {format_value(delay, 'second')}"
            f"; {d['word_format']}, structure {d['structure']}"
            + (f"; output limits {lim[0]:g} … {lim[1]:g}" if lim else "")
        )
    tol = ", ".join(f"{k} {100 * v:g} %" for k, v in d["tolerances"].items()) or "none given"
    if "netlist" in d:
        return f"given card: netlist {Path(d['netlist']).name} (output {d['output']}); tolerances {tol}"
    parts = ", ".join(f"{k} = {format_value(v, part_kind(k))}" for k, v in d["parts"].items())
    return f"given card: topology {d['topology']}, {parts}; tolerances {tol}"


# ----------------------------------------------------------------------------- command-line specs
#: Words of a command-line spec that name a case-file key of another spelling.
_SPEC_WORDS = {"limits": "output_limits", "word": "word_format", "tol": "tolerances"}
_BLOCK_WORDS = ("fs", "method", "algorithm", "delay", "limits", "word", "structure")
_NETLIST_SUFFIXES = (".cir", ".net", ".sp", ".spice", ".ckt")


def command_line_context(label: str):
    """The case reader's context for words written on the command line: errors name ``label``
    (``A``, ``B``, ``--plant``) instead of a file and line."""
    # imported here, not at the top: import cycle (convert.given -> convert.case -> convert.given)
    from convert.case import _Ctx

    class _CommandLine(_Ctx):
        def __init__(self):
            self.path = Path(label)
            self.name = label
            self.lines = {}
            self.paths_relative_to = "the current folder"

        def where(self, key: str) -> str:
            return label

    return _CommandLine()


def _spec_words(text: str, label: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for word in text.split():
        if "=" not in word:
            raise InputError(
                f"expected KEY=VALUE words after the kind, found {word!r} (a value with spaces: "
                "write it without them, e.g. ti=30s)",
                where=label,
            )
        key, _, value = word.partition("=")
        key = key.strip()
        if not key or not value:
            raise InputError(f"expected KEY=VALUE, found {word!r}", where=label)
        if key in out:
            raise InputError("given twice", where=label, key=key)
        out[key] = value
    return out


def _spec_list(text: str, label: str, key: str) -> list[str]:
    items = [x for x in text.split(",")]
    if any(not x.strip() for x in items):
        raise InputError(f"expected numbers separated by commas, found {text!r}", where=label, key=key)
    return items


def read_spec(text: str, label: str, *, fs_hz: float | None = None, base_dir: Path | None = None) -> GivenForm:
    """A controller written on the command line, as a :class:`GivenForm` named ``label``.

    Forms (words are ``KEY=VALUE``, no spaces inside a value):

    * an expression in s (``"2*(1 + 1/(30s))"``), or in z with ``fs_hz`` (``--fs``);
    * ``pid: kc=2 ti=30s td=5s n=10`` — analog PID settings (the ``--pid`` keys); adding any of
      ``fs= method= algorithm= delay= limits=LOW,HIGH word= structure=`` makes it a firmware PID
      block (fs from ``fs=`` or ``fs_hz``);
    * ``digital: b=0.51,-0.49 a=1,-1 [fs=10Hz] [delay=1sample] [limits=-40,60] [word=float32]``, or
      ``sos=b0,b1,b2,a0,a1,a2;b0,...`` instead of b and a;
    * ``card: topology=pi-rc-feedback R1=100k R2=200k C1=4.7u [tol=R:1%,C:5%]``;
    * ``netlist: card.cir [input=VIN] [output=out] [setpoint=VSP measurement=VPV]``, or just the
      netlist's path.

    Errors name ``label`` and the word.
    """
    import re

    base = Path.cwd() if base_dir is None else base_dir
    raw = text.strip()
    if not raw:
        raise InputError(
            "expected a controller: an expression, or pid:, digital:, card: or netlist: words", where=label
        )
    m = re.match(r"^(pid|digital|card|netlist)\s*:\s*(.*)$", raw, re.IGNORECASE | re.DOTALL)
    if m is None:
        if raw.lower().endswith(_NETLIST_SUFFIXES) or (base / raw).is_file():
            kind, rest = "netlist", raw
        else:
            return _expression_spec(raw, label, fs_hz)
    else:
        kind, rest = m.group(1).lower(), m.group(2)
    table: dict[str, Any] = {}
    if kind == "netlist":
        first, _, rest = rest.strip().partition(" ")
        if not first:
            raise InputError("expected the netlist's path after 'netlist:'", where=label)
        table = {"form": "circuit", "netlist": first, **_spec_words(rest, label)}
    else:
        words = _spec_words(rest, label)
        if kind == "pid":
            block = {k: words.pop(k) for k in list(words) if k in _BLOCK_WORDS}
            if block:
                table = {"form": "pid", "settings": words, **block}
                if "fs" not in table and fs_hz is not None:
                    table["fs"] = fs_hz
            else:
                table = {"form": "analog", "settings": words}
        elif kind == "digital":
            table = {"form": "digital", **words}
            for coef in ("b", "a"):
                if coef in table:
                    table[coef] = _spec_list(table[coef], label, coef)
            if "sos" in table:
                table["sos"] = [_spec_list(row, label, "sos") for row in table["sos"].split(";")]
            if "fs" not in table and fs_hz is not None:
                table["fs"] = fs_hz
        else:  # card
            table = {"form": "circuit"}
            parts = {}
            for k, v in words.items():
                if k in ("topology", "tol"):
                    table[k] = v
                else:
                    parts[k] = v
            table["parts"] = parts
        if "limits" in table:
            table["limits"] = _spec_list(table["limits"], label, "limits")
        if "tol" in table:
            tol = {}
            for item in _spec_list(table["tol"], label, "tol"):
                name, sep, value = item.partition(":")
                if not sep:
                    raise InputError(
                        f"expected NAME:VALUE pairs such as R:1%,C:5%, found {item!r}", where=label, key="tol"
                    )
                tol[name] = value
            table["tol"] = tol
    table = {_SPEC_WORDS.get(k, k): v for k, v in table.items()}
    ctx = command_line_context(label)
    try:
        from dataclasses import replace

        return replace(read_given(ctx, table, "spec", label, base), key_where={})  # errors name the spec's words
    except InputError as exc:
        raise InputError(exc.message, where=label, key=_spec_key(exc.key)) from None


def _spec_key(key: str | None) -> str | None:
    if not key:
        return None
    key = key.removeprefix("spec").lstrip(".").removeprefix("settings.")
    back = {v: k for k, v in _SPEC_WORDS.items()}
    head, _, tail = key.partition(".")
    head = back.get(head, head)
    return f"{head}.{tail}" if tail else (head or None)


def _expression_spec(text: str, label: str, fs_hz: float | None) -> GivenForm:
    ctrl = from_expression(text, fs_hz=None if not _mentions_z(text) else fs_hz, label=label)
    if ctrl.is_digital:
        a0 = ctrl.a[0]
        return GivenForm(
            name=label,
            form="digital",
            where=label,
            data={
                "b": [x / a0 for x in ctrl.b],
                "a": [x / a0 for x in ctrl.a],
                "fs_hz": ctrl.fs_hz,
                "delay_s": 0.0,
                "delay_samples": None,
                "output_limits": None,
                "word_format": "float64",
                "structure": "direct",
                "expression": text,
            },
        )
    return GivenForm(name=label, form="analog", where=label, data={"expression": text, "controller": ctrl})


def _mentions_z(text: str) -> bool:
    import re

    return re.search(r"(?<![A-Za-z])z(?![A-Za-z])", text) is not None


def as_source(given: GivenForm):
    """The given form as a case :class:`convert.case.Source` (the reference of a comparison).

    A reference is taken as written: a delay, output limits, a word format or part tolerances
    belong to the form being checked, so they are refused here."""
    # imported here, not at the top: import cycle (convert.given -> convert.case -> convert.given)
    from convert.case import Source

    d = given.data
    if given.form in ("digital", "pid"):
        for key, default in (("delay_s", 0.0), ("delay_samples", None), ("word_format", "float64")):
            if d.get(key, default) != default:
                word = {"delay_s": "delay", "delay_samples": "delay", "word_format": "word"}[key]
                raise InputError(
                    "the reference form is taken as written; give delays and word formats to the form "
                    "being checked (B)",
                    where=given.where,
                    key=word,
                )
        if given.form == "pid":
            b, a = pid_block_b_a(d["pid"], d["fs_hz"], d["method"])
        else:
            b, a = d["b"], d["a"]
        return Source("digital", {"b": list(b), "a": list(a), "fs_hz": d["fs_hz"], "method": "tustin"}, given.where)
    if given.form == "analog":
        if "controller" in d:
            return Source("expression", {"expression": d["expression"], "controller": d["controller"]}, given.where)
        return Source("pid", {"settings": d["settings"]}, given.where)
    if d.get("tolerances"):  # a catalog card or a netlist: one reference response, not a spread of them
        raise InputError(
            "the reference card is taken as drawn; give tolerances to the form being checked (B), "
            "e.g. swap A and B to see the spread of this card",
            where=given.where,
            key="tol",
        )
    if "netlist" in d:
        return Source(
            "netlist",
            {
                "file": d["netlist"],
                "input": d["input"],
                "output": d["output"],
                "setpoint": d["setpoint"],
                "measurement": d["measurement"],
            },
            given.where,
        )
    return Source("card", {"topology": d["topology"], "parts": d["parts"], "tolerances": {}}, given.where)


def given_from_source(src, name: str = "source") -> GivenForm:
    """A case's :class:`convert.case.Source` as a given form (to fit or replay it)."""
    d = src.data
    if src.form == "expression":
        return GivenForm(name, "analog", {"expression": d["expression"], "controller": d["controller"]}, src.where)
    if src.form == "pid":
        return GivenForm(
            name,
            "analog",
            {"settings": dict(d["settings"]), "pid": pid_from_mapping(d["settings"], where=src.where)},
            src.where,
        )
    if src.form == "digital":
        a0 = d["a"][0]
        return GivenForm(
            name,
            "digital",
            {
                "b": [x / a0 for x in d["b"]],
                "a": [x / a0 for x in d["a"]],
                "fs_hz": d["fs_hz"],
                "delay_s": 0.0,
                "delay_samples": None,
                "output_limits": None,
                "word_format": "float64",
                "structure": "direct",
            },
            src.where,
        )
    if src.form == "card":
        return GivenForm(
            name,
            "circuit",
            {"topology": d["topology"], "parts": dict(d["parts"]), "tolerances": dict(d.get("tolerances") or {})},
            src.where,
        )
    return GivenForm(
        name,
        "circuit",
        {
            "netlist": d["file"],
            "input": d["input"],
            "output": d["output"],
            "setpoint": d["setpoint"],
            "measurement": d["measurement"],
            "tolerances": {},
        },
        src.where,
    )
