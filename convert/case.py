"""Case files: one job written as TOML — load, validate, explain errors.

A case names the controller that exists now (the **source**), the forms to produce (the
**targets**), optionally the **plant** and the **signals** of the loop, and the acceptance
**criteria**. The schema is documented in ``docs/case-files.md``.

Every error is one line ``file:line: key: what was expected, what was found``. ``tomllib``
gives no line numbers, so :func:`key_lines` scans the text for the line of each key itself.
Unknown keys are refused with a did-you-mean suggestion.

Values go through :func:`convert.values.parse_value` (``M`` is mega, ``m`` is milli);
expressions through :func:`convert.controller.from_expression`. Building the source controller
(:func:`source_controller`) imports the PID, circuit and netlist modules lazily, so loading a
case needs only the standard library and numpy.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from convert.errors import InputError, LoopshiftError
from convert.methods import METHODS
from convert.limits import MAX_DEGREE, MAX_RATE_METHOD_PAIRS, MAX_RATES, excerpt, read_input_text, file_kind
from convert.values import parse_value, parse_fraction, parse_delay
from convert.given import read_given_targets
from convert.evidence.casefile import read_evidence
from convert.controller import from_expression, Controller
from convert.digital.codegen import _check_name
from convert.circuit.tolerance import DEFAULT_DISTRIBUTION, DEFAULT_DRAWS, DISTRIBUTIONS, MAX_DRAWS, draws_problem
from convert.digital.scaling import signal_map
from convert.compare.frequency import band_width_problem, delay_problem
from convert.pid import pid_from_mapping
from convert.digital.printed import printed_integrators, printed_radii
from convert.circuit.topologies import get_topology
from convert.circuit.netlist import read_netlist
from convert.pipeline import read_card_source
from convert.circuit.card import two_input_hint
from convert.circuit.clamps import find_clamps, limits_text

SOURCE_FORMS = ("expression", "pid", "digital", "card", "netlist")
WORD_FORMATS = ("float64", "float32", "q15", "q31")
MAX_OPAMPS = 1000  # the largest op-amp cap a case file may give (far above any cascade loopshift plans)
STRUCTURE_NAMES = ("direct1", "direct2t", "sections", "delta", "direct", "pid_block")
PID_BLOCK_KEYS = ("pid_form", "anti_windup", "tracking_time", "setpoint_weights")

# Each table's allowed keys. A value of dict means a sub-table with its own keys;
# None means "any key" (e.g. part names, PID keys checked by convert.pid).
SCHEMA: dict[str, Any] = {
    "case": {"title": 1, "description": 1, "author": 1},
    "source": {
        "expression": 1,
        "pid": None,
        "digital": {"b": 1, "a": 1, "fs": 1, "method": 1},
        "card": {"topology": 1, "parts": None, "tolerances": None},
        "netlist": {"file": 1, "input": 1, "output": 1, "setpoint": 1, "measurement": 1},
    },
    "target": {
        "digital": {
            "fs": 1,
            "methods": 1,
            "prewarp": 1,
            "delay": 1,
            "delay_samples": 1,
            "output_limits": 1,
            "derivative_filter": 1,
            "word_format": 1,
            "structure": 1,
            "input_range": 1,
            "input_resolution": 1,
            "code_name": 1,
            "code_languages": 1,
            "input_signal": {"range": 1, "firmware": 1, "bits": 1, "converter": 1, "shunt": 1},
            "output_signal": {"range": 1, "firmware": 1, "bits": 1, "converter": 1, "shunt": 1},
            "pid_form": 1,
            "anti_windup": 1,
            "tracking_time": 1,
            "setpoint_weights": 1,
        },
        "circuit": {
            "topology": 1,
            "resistors": 1,
            "capacitors": 1,
            "tolerances": None,
            "resistor_range": 1,
            "capacitor_range": 1,
            "draws": 1,
            "seed": 1,
            "distribution": 1,
            "opamp_gbw": 1,
            "max_opamps": 1,
            "rail": 1,
            "input_amplitude": 1,
        },
        "given": None,  # forms that exist, one table per name: checked by convert.given
    },
    "plant": {"model": 1, "dead_time": 1},
    "evidence": None,  # [evidence.sweep] / [evidence.log]: checked by convert.evidence.casefile
    "signals": {"setpoint_step": 1, "disturbance_step": 1, "duration": 1, "output_range": 1},
    "criteria": {
        "band": 1,
        "max_gain_error_db": 1,
        "max_phase_error_deg": 1,
        "max_phase_margin_change_deg": 1,
        "max_gain_margin_change_db": 1,
        "max_sensitivity_peak_change_db": 1,
        "max_step_deviation": 1,
        "max_disturbance_deviation": 1,
    },
}


# ----------------------------------------------------------------------------- data model
@dataclass(frozen=True)
class Source:
    """The controller that exists now. ``form`` is one of :data:`SOURCE_FORMS`; ``data`` holds
    the parsed fields of that form (values in SI units); ``where`` is ``file:line`` of it."""

    form: str
    data: dict
    where: str


@dataclass(frozen=True)
class DigitalTarget:
    """Firmware target. ``fs_hz`` sample rates (Hz); ``methods`` discretization method names;
    ``delay_s`` computation delay (s) between sampling and output update (``delay_samples`` is
    resolved per rate: ``delay_samples / fs``); ``output_limits`` (low, high) clamp in controller
    output units or ``None``; ``derivative_filter`` N added to an improper source (the filter
    time constant is Td/N) or ``None``; ``word_format`` (float64, float32, q15, q31) and
    ``structure`` (:data:`convert.digital.structures.STRUCTURES`) of the firmware arithmetic;
    ``input_range`` (low, high) of the controller input (the error) in its units, which scales
    fixed-point words and bounds overflow; ``input_resolution`` the smallest error the integral
    must still act on (default: the input range / 2^15). ``input_signal``/``output_signal``: the
    card's signals mapped to firmware units (:func:`convert.digital.scaling.signal_map`); the
    code is written for the controller rescaled to them. ``structure = "pid_block"`` (a PID
    source): the firmware PID block of :mod:`convert.digital.pidblock` instead, with ``pid_form``
    (positional, velocity), ``anti_windup`` (clamp, track, none), ``tracking_time_s`` (Tt, s, or
    None for the rule of thumb) and ``setpoint_weights`` (b, c) or None for the source's; its
    ``input_range`` is the setpoint and measurement range."""

    fs_hz: tuple[float, ...]
    methods: tuple[str, ...]
    prewarp_hz: float | None = None
    delay_s: float = 0.0
    delay_samples: float | None = None
    output_limits: tuple[float, float] | None = None
    derivative_filter: float | None = None
    word_format: str = "float64"
    structure: str = "direct1"
    input_range: tuple[float, float] | None = None
    input_resolution: float | None = None
    code_name: str = "controller"
    code_languages: tuple[str, ...] = ("c",)
    pid_form: str = "positional"
    anti_windup: str = "clamp"
    tracking_time_s: float | None = None
    setpoint_weights: tuple[float, float] | None = None
    where: str = ""
    input_signal: Any = None  # convert.digital.scaling.SignalMap: card input signal -> firmware units
    output_signal: Any = None  # the same for the output
    signal_text: tuple[str, ...] = ()  # one line per map, as read

    @property
    def is_pid_block(self) -> bool:
        return self.structure == "pid_block"

    def delay_for(self, fs_hz: float) -> float:
        """Computation delay in seconds at the sample rate ``fs_hz``."""
        if self.delay_samples is not None:
            return self.delay_samples / fs_hz
        return self.delay_s


@dataclass(frozen=True)
class CircuitTarget:
    """Op-amp circuit target. Ranges are (min, max) in ohms / farads; ``tolerances`` maps a
    part class letter (``R``, ``C``) to a fraction (0.01 = 1 %); ``opamp_gbw_hz`` the op-amp
    gain-bandwidth product (Hz) or ``None`` for an ideal op-amp."""

    topology: str = "auto"
    resistors: str = "E96"
    capacitors: str = "E12"
    tolerances: dict = field(default_factory=lambda: {"R": 0.01, "C": 0.05})
    resistor_range: tuple[float, float] = (1e3, 1e6)
    capacitor_range: tuple[float, float] = (100e-12, 10e-6)
    draws: int = 10000  # convert.circuit.tolerance.DEFAULT_DRAWS
    seed: int = 1
    distribution: str = "uniform"  # convert.circuit.tolerance.DEFAULT_DISTRIBUTION
    opamp_gbw_hz: float | None = None
    max_opamps: int | None = None  # cap on op-amps, as loopshift circuit --max-opamps (None = no cap)
    rail_v: float | None = None  # largest output peak of the op-amps (V), as `circuit --rail`
    input_amplitude_v: float | None = None  # input peak (V) for the output-swing check, as `circuit --amplitude`
    where: str = ""


@dataclass(frozen=True)
class Plant:
    """The process the controller drives: ``model`` (analog Controller object, from the
    controller input to the measurement) followed by a pure ``dead_time_s`` (seconds)."""

    model: Any
    expression: str
    dead_time_s: float = 0.0


@dataclass(frozen=True)
class Signals:
    """Test signals: setpoint step size, load-disturbance step (added at the plant input, in
    controller output units), simulation duration (s, ``None`` = automatic) and the actuator
    range (low, high) that clamps every form's output."""

    setpoint_step: float = 1.0
    disturbance_step: float = 1.0
    duration_s: float | None = None
    output_range: tuple[float, float] | None = None


@dataclass(frozen=True)
class Criteria:
    """Acceptance criteria; ``None`` means the criterion is not set (not checked).

    ``band_hz`` (low, high) in Hz; gain errors in dB, phase errors in degrees; step and
    disturbance deviations as fractions (of the setpoint step / of the analog loop's peak
    disturbance deviation)."""

    band_hz: tuple[float, float]
    max_gain_error_db: float | None = None
    max_phase_error_deg: float | None = None
    max_phase_margin_change_deg: float | None = None
    max_gain_margin_change_db: float | None = None
    max_sensitivity_peak_change_db: float | None = None
    max_step_deviation: float | None = None
    max_disturbance_deviation: float | None = None

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


@dataclass(frozen=True)
class Case:
    path: Path
    name: str
    title: str
    description: str
    source: Source
    digital: DigitalTarget | None
    circuit: CircuitTarget | None
    plant: Plant | None
    signals: Signals
    criteria: Criteria
    lines: dict | None = field(default_factory=dict, compare=False, repr=False)  # None: built in Python
    given: tuple = ()  # convert.given.GivenForm, in file order
    evidence: Any = None  # convert.evidence.casefile.EvidenceSpec

    @property
    def base_dir(self) -> Path:
        return self.path.parent

    def where(self, key: str) -> str:
        """``file:line`` of a dotted key (or of its nearest enclosing table)."""
        return _where(self.path.name, self.lines, key)


# ----------------------------------------------------------------------------- line finder
_HEADER_RE = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY_RE = re.compile(
    r"""^\s*((?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'))*)\s*="""
)
_INLINE_KEY_RE = re.compile(r"""[{,]\s*([A-Za-z0-9_\-]+|"[^"]*"|'[^']*')\s*=""")


def _split_dotted(text: str) -> list[str]:
    parts = re.findall(r"""[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'""", text)
    return [p[1:-1] if p[:1] in "\"'" else p for p in parts]


def key_lines(text: str) -> dict[str, int]:
    """Map each dotted key path (``"target.digital.fs"``) and table header to its 1-based line.

    A small scanner, not a TOML parser: it understands table headers, dotted keys, inline
    tables on one line, and skips multi-line strings. Good enough to point at a line.
    """
    lines: dict[str, int] = {}
    prefix: list[str] = []
    in_multiline: str | None = None
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw
        if in_multiline:
            if line.count(in_multiline) % 2 == 1:
                in_multiline = None
            continue
        header = _HEADER_RE.match(line)
        if header and "=" not in header.group(2):
            prefix = _split_dotted(header.group(2))
            for i in range(1, len(prefix) + 1):
                lines.setdefault(".".join(prefix[:i]), number)
            continue
        m = _KEY_RE.match(line)
        if not m:
            continue
        path = prefix + _split_dotted(m.group(1))
        key = ".".join(path)
        lines.setdefault(key, number)
        for i in range(1, len(path)):
            lines.setdefault(".".join(path[:i]), number)
        rest = line[m.end() :]
        for inner in _INLINE_KEY_RE.finditer(rest):
            name = inner.group(1).strip("\"'")
            lines.setdefault(f"{key}.{name}", number)
        for quote in ('"""', "'''"):
            if rest.count(quote) % 2 == 1:
                in_multiline = quote
    return lines


def _where(file_name: str, lines: dict | None, key: str) -> str:
    if lines is None:  # a case built in Python: no text to point into
        return file_name
    probe = key
    while probe:
        if probe in lines:
            return f"{file_name}:{lines[probe]}"
        probe = probe.rpartition(".")[0]
    return f"{file_name}:1"


# ----------------------------------------------------------------------------- loading
class _Ctx:
    """Carries the file name and line map so every check can name file, line and key."""

    paths_relative_to = "the case file"  # where a relative file name is looked for, in messages

    def __init__(self, path: Path, text: str | None):
        self.path = path
        self.name = path.name
        self.lines = key_lines(text) if text is not None else None

    def where(self, key: str) -> str:
        return _where(self.name, self.lines, key)

    def error(self, key: str, message: str) -> InputError:
        return InputError(message, where=self.where(key), key=key)

    # -- typed readers -------------------------------------------------------------
    def value(self, table: dict, key: str, dotted: str, kind: str, default=None, *, positive=False, allow_zero=True):
        if key not in table:
            return default
        raw = table[key]
        if isinstance(raw, str) and kind == "number":
            raw = re.sub(r"\s*(dB|deg|°)\s*$", "", raw)
        try:
            value = parse_value(raw, kind, field=dotted)
        except InputError as exc:
            raise InputError(exc.message, where=self.where(dotted), key=dotted) from None
        if positive and not (value > 0 or (allow_zero and value == 0)):
            need = "zero or positive" if allow_zero else "positive"
            raise self.error(dotted, f"expected a {need} value, found {excerpt(raw)}")
        return value

    def fraction(self, table: dict, key: str, dotted: str, *, allow_one: bool = True) -> float | None:
        """A zero-or-positive percentage field ("3 %" or a fraction; a bare number above 1 is
        refused with both readings, see :func:`convert.values.parse_fraction`)."""
        if key not in table:
            return None
        try:
            value = parse_fraction(table[key], field=dotted, allow_one=allow_one)
        except InputError as exc:
            raise InputError(exc.message, where=self.where(dotted), key=dotted) from None
        if value < 0:
            raise self.error(dotted, f"expected a zero or positive value, found {table[key]!r}")
        return value

    def delay(self, table: dict, key: str, dotted: str) -> tuple[float, float | None]:
        """(delay_s, delay_samples) from a time ("20 ms") or a count of samples ("1 sample")."""
        if key not in table:
            return 0.0, None
        try:
            delay_s, delay_samples = parse_delay(table[key], field=dotted)
        except InputError as exc:
            raise InputError(exc.message, where=self.where(dotted), key=dotted) from None
        return (0.0 if delay_s is None else delay_s), delay_samples

    def pair(self, table: dict, key: str, dotted: str, kind: str, default=None, *, ordered=True, positive=False):
        if key not in table:
            return default
        raw = table[key]
        if not isinstance(raw, list) or len(raw) != 2:
            raise self.error(dotted, f"expected a list of two values [low, high], found {excerpt(raw)}")
        low = self.value({"v": raw[0]}, "v", dotted, kind)
        high = self.value({"v": raw[1]}, "v", dotted, kind)
        if positive and not (low > 0 and high > 0):
            raise self.error(dotted, f"expected two positive values, found {excerpt(raw)}")
        if ordered and not low < high:
            raise self.error(dotted, f"expected low < high, found {excerpt(raw)}")
        return (low, high)

    def text(self, table: dict, key: str, dotted: str, default=None, choices=None):
        if key not in table:
            return default
        raw = table[key]
        if not isinstance(raw, str) or not raw.strip():
            raise self.error(dotted, f"expected text, found {excerpt(raw)}")
        if choices is not None and raw not in choices:
            hint = _did_you_mean(raw, choices)
            raise self.error(dotted, f"expected one of {', '.join(choices)}, found {excerpt(raw)}{hint}")
        return raw

    def table(self, parent: dict, key: str, dotted: str) -> dict | None:
        if key not in parent:
            return None
        raw = parent[key]
        if not isinstance(raw, dict):
            raise self.error(dotted, f"expected a table ([{dotted}] or {{ ... }}), found {excerpt(raw)}")
        return raw

    def check_keys(self, table: dict, allowed: dict, dotted: str) -> None:
        for key in table:
            if key not in allowed:
                full = f"{dotted}.{key}" if dotted else key
                hint = _did_you_mean(key, list(allowed))
                where = f"[{dotted}]" if dotted else "the top level"
                raise InputError(f"unknown key {key!r} in {where}{hint}", where=self.where(full), key=full)


def _did_you_mean(word: str, choices) -> str:
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    if not close:
        lowered = {str(c).lower(): str(c) for c in choices}
        if str(word).lower() in lowered:
            close = [lowered[str(word).lower()]]
    return f" (did you mean {close[0]!r}?)" if close else ""


def load_case(path: str | Path) -> Case:
    """Read and validate the case file at ``path``. Raises :class:`InputError` naming
    ``file:line`` and the key for anything wrong."""
    path = Path(path)
    text = read_input_text(path, what="case file")
    return parse_case(text, path)


def parse_case(text: str, path: str | Path = "case.toml") -> Case:
    """Validate case-file ``text``; ``path`` names it in errors and anchors relative file names."""
    import tomllib

    path = Path(path)
    try:
        data = tomllib.loads(text)
    except RecursionError:  # tomllib reads nested arrays and inline tables recursively
        raise InputError(
            "not valid TOML for a case file: values are nested too deeply (arrays or inline tables "
            "inside each other hundreds of times)",
            where=path.name,
        ) from None
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        m = re.search(r"\(at line (\d+), column (\d+)\)", message)
        where = f"{path.name}:{m.group(1)}" if m else path.name
        message = re.sub(r"\s*\(at line \d+, column \d+\)", "", message)
        raise InputError(f"not valid TOML: {message}", where=where) from None
    except ValueError:  # tomllib's int() of an integer longer than Python's 4,300-digit limit
        raise InputError("not valid TOML for a case file: an integer of thousands of digits", where=path.name) from None
    return _case_from_data(data, _Ctx(path, text))


def case_from_dict(data: dict, *, name: str = "case", base_dir: str | Path = ".") -> Case:
    """Build a :class:`Case` from a dict shaped like a case file (the same keys and checks as
    the TOML file, see docs/case-files.md); ``name`` names it in errors and the report folder,
    ``base_dir`` anchors relative file names (a netlist source).

    Examples
    --------
    >>> from convert.case import case_from_dict
    >>> case = case_from_dict({"source": {"expression": "2*(1 + 1/(30*s))"},
    ...                        "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
    ...                        "criteria": {"band": ["1 mHz", "1 Hz"], "max_gain_error_db": 0.5}},
    ...                       name="tank-level")
    >>> case.name, case.digital.fs_hz
    ('tank-level', (10.0,))
    """
    if not isinstance(data, dict):
        raise InputError(f"expected a dict shaped like a case file, found {type(data).__name__}", where=name)
    return _case_from_data(data, _Ctx(Path(base_dir) / name, None))


def _case_from_data(data: dict, ctx: _Ctx) -> Case:
    path = ctx.path
    ctx.check_keys(data, SCHEMA, "")

    case_table = ctx.table(data, "case", "case") or {}
    ctx.check_keys(case_table, SCHEMA["case"], "case")
    title = ctx.text(case_table, "title", "case.title", default=path.stem)
    description = ctx.text(case_table, "description", "case.description", default="")

    source = _read_source(ctx, data)
    digital, circuit = _read_targets(ctx, data, source)
    plant = _read_plant(ctx, data)
    signals = _read_signals(ctx, data)
    criteria = _read_criteria(ctx, data)

    given = read_given_targets(ctx, data.get("target") or {}, path.parent)

    evidence = read_evidence(ctx, data, path.parent)
    return Case(
        path=path,
        name=path.stem,
        title=title,
        description=description,
        source=source,
        digital=digital,
        circuit=circuit,
        plant=plant,
        signals=signals,
        criteria=criteria,
        lines=ctx.lines,
        given=given,
        evidence=evidence,
    )


def _read_source(ctx: _Ctx, data: dict) -> Source:
    table = ctx.table(data, "source", "source")
    if table is None:
        raise InputError(
            "missing [source]: the controller that exists now (expression, pid, digital, card or netlist)",
            where=ctx.where(""),
            key="source",
        )
    ctx.check_keys(table, SCHEMA["source"], "source")
    given = [k for k in SOURCE_FORMS if k in table]
    if len(given) != 1:
        found = ", ".join(given) if given else "none"
        raise ctx.error("source", f"give exactly one of {', '.join(SOURCE_FORMS)}; found {found}")
    form = given[0]
    key = f"source.{form}"
    where = ctx.where(key)
    if form == "expression":
        text = ctx.text(table, "expression", key)

        try:
            controller = from_expression(text, label=f"{where}: {key}")
        except LoopshiftError as exc:
            raise exc.name_settings(SETTING_KEYS) from None
        if controller.is_digital:
            raise ctx.error(
                key, "a source expression is in s; give a digital source as [source.digital] with b, a and fs"
            )
        return Source(form, {"expression": text, "controller": controller}, where)
    if form == "pid":
        pid = ctx.table(table, "pid", key)
        if not pid:
            raise ctx.error(key, 'expected PID settings, e.g. pid = { kc = 2, ti = "30 s" }')
        return Source(form, {"settings": dict(pid)}, where)
    if form == "digital":
        dig = ctx.table(table, "digital", key)
        ctx.check_keys(dig, SCHEMA["source"]["digital"], key)
        out = {}
        for coef in ("b", "a"):
            raw = dig.get(coef)
            if not isinstance(raw, list) or not raw:
                raise ctx.error(
                    f"{key}.{coef}", f"expected a list of numbers (ascending powers of z^-1), found {excerpt(raw)}"
                )
            if len(raw) > MAX_DEGREE + 1:
                raise ctx.error(
                    f"{key}.{coef}",
                    f"{len(raw):,} coefficients; a controller here has at most {MAX_DEGREE + 1} (degree {MAX_DEGREE})",
                )
            out[coef] = [ctx.value({"v": v}, "v", f"{key}.{coef}", "number") for v in raw]
        for coef in ("b", "a"):  # the digits as written, for the printed precision of the coefficients
            out[f"{coef}_text"] = [v if isinstance(v, str) else float(v) for v in dig[coef]]
        if out["a"][0] == 0:
            raise ctx.error(f"{key}.a", "a[0] must be non-zero (it multiplies the newest output)")
        if "fs" not in dig:
            raise ctx.error(key, 'missing fs: the sample rate of these coefficients, e.g. fs = "1 kHz"')
        out["fs_hz"] = ctx.value(dig, "fs", f"{key}.fs", "hz", positive=True, allow_zero=False)
        out["method"] = ctx.text(dig, "method", f"{key}.method", default="tustin", choices=METHODS)
        return Source(form, out, where)
    if form == "card":
        card = ctx.table(table, "card", key)
        ctx.check_keys(card, SCHEMA["source"]["card"], key)
        topology = ctx.text(card, "topology", f"{key}.topology")
        if topology is None:
            raise ctx.error(key, "missing topology: the card's stage topology (see `loopshift card --help`)")
        parts_raw = ctx.table(card, "parts", f"{key}.parts") or {}
        if not parts_raw:
            raise ctx.error(key, 'missing parts: e.g. parts = { R1 = "47k", C1 = "1 uF" }')
        parts = {}
        for name, _value in parts_raw.items():
            kind = {"R": "ohm", "C": "farad", "L": "henry"}.get(name[:1].upper(), "number")
            parts[name] = ctx.value(parts_raw, name, f"{key}.parts.{name}", kind, positive=True, allow_zero=False)
        tols = _read_tolerances(ctx, card, f"{key}.tolerances", default={})
        return Source(form, {"topology": topology, "parts": parts, "tolerances": tols}, where)
    # netlist: a table, or a plain file name
    raw = table["netlist"]
    net = {"file": raw} if isinstance(raw, str) else ctx.table(table, "netlist", key)
    ctx.check_keys(net, SCHEMA["source"]["netlist"], key)
    file_name = ctx.text(net, "file", f"{key}.file")
    if file_name is None:
        raise ctx.error(key, "missing file: the netlist's path, relative to the case file")
    file_path = ctx.path.parent / file_name
    if not file_path.is_file():
        kind = file_kind(file_path)
        if kind is not None:
            raise ctx.error(f"{key}.file", f"{str(file_path)!r} is {kind}; a netlist must be a regular file")
        raise ctx.error(f"{key}.file", f"no such netlist file {str(file_path)!r} (paths are relative to the case file)")
    out = {
        "file": file_path,
        "input": ctx.text(net, "input", f"{key}.input", default="VIN"),
        "output": ctx.text(net, "output", f"{key}.output", default="out"),
        "setpoint": ctx.text(net, "setpoint", f"{key}.setpoint"),
        "measurement": ctx.text(net, "measurement", f"{key}.measurement"),
    }
    if (out["setpoint"] is None) != (out["measurement"] is None):
        raise ctx.error(key, "give both setpoint and measurement source names, or neither")
    return Source("netlist", out, where)


def _read_tolerances(ctx: _Ctx, table: dict, dotted: str, default) -> dict:
    raw = ctx.table(table, "tolerances", dotted)
    if raw is None:
        return dict(default)
    out = {}
    for name in raw:
        value = ctx.fraction(raw, name, f"{dotted}.{name}", allow_one=False)
        if value >= 1:
            raise ctx.error(f"{dotted}.{name}", f"a tolerance is a fraction below 100 %, found {excerpt(raw[name])}")
        out[name] = value
    return out


def _pid_block_options(ctx, dig: dict, key: str, structure: str) -> dict:
    """The PID block's keys of ``[target.digital]`` (only with ``structure = "pid_block"``)."""
    given = [k for k in PID_BLOCK_KEYS if k in dig]
    if structure != "pid_block":
        if given:
            raise ctx.error(f"{key}.{given[0]}", 'this key belongs to the PID block: add structure = "pid_block"')
        return {}
    for k in ("methods", "prewarp"):
        if k in dig:
            raise ctx.error(
                f"{key}.{k}",
                "the PID block discretizes by its own rule (integral by forward Euler, derivative by backward "
                f"difference); leave out {k}",
            )
    form = ctx.text(dig, "pid_form", f"{key}.pid_form", default="positional", choices=("positional", "velocity"))
    aw = ctx.text(dig, "anti_windup", f"{key}.anti_windup", default="clamp", choices=("clamp", "track", "none"))
    tt = ctx.value(dig, "tracking_time", f"{key}.tracking_time", "second", None, positive=True, allow_zero=False)
    if tt is not None and aw != "track":
        raise ctx.error(f"{key}.tracking_time", 'the tracking time constant belongs to anti_windup = "track"')
    weights = None
    if "setpoint_weights" in dig:
        raw = dig["setpoint_weights"]
        if not (isinstance(raw, list) and len(raw) == 2):
            raise ctx.error(f"{key}.setpoint_weights", f"expected [b, c], e.g. [0.5, 0], found {excerpt(raw)}")
        weights = tuple(ctx.value({"v": v}, "v", f"{key}.setpoint_weights", "number", None, positive=True) for v in raw)
    return dict(pid_form=form, anti_windup=aw, tracking_time_s=tt, setpoint_weights=weights)


def _refuse_repeats(ctx: _Ctx, dotted: str, raw: list, values: tuple, what: str) -> None:
    """A list of rates or methods names each entry once (a repeat doubled the work silently)."""
    seen: dict = {}
    for written, value in zip(raw, values):
        if value in seen:
            raise ctx.error(
                dotted,
                f"the {what} {excerpt(written, 30)} is given twice (as {excerpt(seen[value], 30)} too); give each once",
            )
        seen[value] = written


def _read_targets(ctx: _Ctx, data: dict, source: Source):
    table = ctx.table(data, "target", "target")
    if not table:
        raise InputError(
            "missing [target.digital], [target.circuit] or [target.given.NAME]: the form(s) to produce or check",
            where=ctx.where(""),
            key="target",
        )
    ctx.check_keys(table, SCHEMA["target"], "target")
    digital = circuit = None
    dig = ctx.table(table, "digital", "target.digital")
    if dig is not None:
        ctx.check_keys(dig, SCHEMA["target"]["digital"], "target.digital")
        key = "target.digital"
        if "fs" not in dig:
            raise ctx.error(key, 'missing fs: the sample rate(s), e.g. fs = "1 kHz" or fs = ["500 Hz", "2 kHz"]')
        raw_fs = dig["fs"] if isinstance(dig["fs"], list) else [dig["fs"]]
        if not raw_fs:
            raise ctx.error(f"{key}.fs", "expected at least one sample rate")
        if len(raw_fs) > MAX_RATES:
            raise ctx.error(
                f"{key}.fs",
                f"{len(raw_fs):,} sample rates; a case takes at most {MAX_RATES} (each is a "
                "full realization with its own loop checks and figures): split the study "
                "into several case files (loopshift batch runs them together)",
            )
        fs = tuple(ctx.value({"v": v}, "v", f"{key}.fs", "hz", positive=True, allow_zero=False) for v in raw_fs)
        _refuse_repeats(ctx, f"{key}.fs", raw_fs, fs, "sample rate")
        raw_methods = dig.get("methods", ["tustin"])
        if isinstance(raw_methods, str):
            raw_methods = [raw_methods]
        if not isinstance(raw_methods, list) or not raw_methods:
            raise ctx.error(f"{key}.methods", f"expected a list of method names, found {excerpt(raw_methods)}")
        known = METHODS
        if len(raw_methods) > len(known):
            raise ctx.error(
                f"{key}.methods",
                f"{len(raw_methods):,} methods, but there are {len(known)} "
                f"({', '.join(known)}): give each at most once",
            )
        methods = tuple(ctx.text({"v": m}, "v", f"{key}.methods", choices=known) for m in raw_methods)
        _refuse_repeats(ctx, f"{key}.methods", raw_methods, methods, "method")
        if len(fs) * len(methods) > MAX_RATE_METHOD_PAIRS:
            raise ctx.error(
                f"{key}.methods",
                f"{len(fs)} sample rates x {len(methods)} methods = "
                f"{len(fs) * len(methods)} realizations; a case takes at most "
                f"{MAX_RATE_METHOD_PAIRS}: split the study into several case files "
                "(loopshift batch runs them together)",
            )
        if "delay" in dig and "delay_samples" in dig:
            raise ctx.error(f"{key}.delay_samples", "give delay (seconds) or delay_samples, not both")
        delay_s, delay_samples = ctx.delay(dig, "delay", f"{key}.delay")
        if "delay_samples" in dig:
            delay_samples = ctx.value(dig, "delay_samples", f"{key}.delay_samples", "number", None, positive=True)
        for rate in fs:
            why = delay_problem(delay_samples / rate if delay_samples is not None else delay_s, rate)
            if why:
                raise ctx.error(f"{key}.delay_samples" if "delay_samples" in dig else f"{key}.delay", why)
        limits = _around_operating_point(
            ctx, ctx.pair(dig, "output_limits", f"{key}.output_limits", "number"), f"{key}.output_limits"
        )
        n_filter = ctx.value(
            dig, "derivative_filter", f"{key}.derivative_filter", "number", None, positive=True, allow_zero=False
        )
        word = ctx.text(dig, "word_format", f"{key}.word_format", default="float64", choices=WORD_FORMATS)
        structure = ctx.text(dig, "structure", f"{key}.structure", default="direct1", choices=STRUCTURE_NAMES)
        structure = "direct1" if structure == "direct" else structure
        in_range = ctx.pair(dig, "input_range", f"{key}.input_range", "number")
        if in_range is not None and max(abs(in_range[0]), abs(in_range[1])) == 0:
            raise ctx.error(f"{key}.input_range", "expected a range with a nonzero end, e.g. [-10, 10]")
        resolution = ctx.value(
            dig, "input_resolution", f"{key}.input_resolution", "number", None, positive=True, allow_zero=False
        )
        code_name = ctx.text(dig, "code_name", f"{key}.code_name", default="controller")
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]{0,30}", code_name):
            raise ctx.error(
                f"{key}.code_name",
                f"expected a C/ST identifier (letter or _, then letters, digits, _), found {code_name!r}",
            )
        raw_langs = dig.get("code_languages", ["c"])
        if isinstance(raw_langs, str):
            raw_langs = [raw_langs]
        if not isinstance(raw_langs, list):
            raise ctx.error(f"{key}.code_languages", f'expected a list such as ["c", "st"], found {raw_langs!r}')
        langs = tuple(
            dict.fromkeys(ctx.text({"v": v}, "v", f"{key}.code_languages", choices=("c", "st")) for v in raw_langs)
        )

        for lang in langs:
            try:
                _check_name(code_name, lang)
            except InputError as exc:
                raise ctx.error(f"{key}.code_name", exc.message) from None
        if "st" in langs and word in ("q15", "q31") and structure not in ("direct2t", "delta"):
            raise ctx.error(
                f"{key}.code_languages",
                f"Structured Text in {word} is written for the structures direct2t and delta, not {structure}",
            )
        if word in ("q15", "q31"):
            if in_range is None:
                raise ctx.error(
                    f"{key}.input_range",
                    f"word_format {word} needs input_range, the error's range in "
                    "controller input units that scales the words, e.g. input_range = [-10, 10]",
                )
        block = _pid_block_options(ctx, dig, key, structure)
        prewarp = ctx.value(dig, "prewarp", f"{key}.prewarp", "hz", None, positive=True, allow_zero=False)
        if prewarp is not None and prewarp >= min(fs) / 2:
            raise ctx.error(
                f"{key}.prewarp",
                f"the prewarp frequency must be below fs/2 = {min(fs) / 2:.6g} Hz "
                f"(of the lowest rate), found {dig['prewarp']!r}",
            )
        maps, signal_text = _read_signal_maps(ctx, dig, key, source)
        digital = DigitalTarget(
            input_signal=maps[0],
            output_signal=maps[1],
            signal_text=signal_text,
            fs_hz=fs,
            methods=methods,
            prewarp_hz=prewarp,
            delay_s=delay_s,
            delay_samples=delay_samples,
            output_limits=limits,
            derivative_filter=n_filter,
            word_format=word,
            structure=structure,
            input_range=in_range,
            input_resolution=resolution,
            code_name=code_name,
            code_languages=langs,
            **block,
            where=ctx.where(key),
        )
    cir = ctx.table(table, "circuit", "target.circuit")
    if cir is not None:
        key = "target.circuit"
        ctx.check_keys(cir, SCHEMA["target"]["circuit"], key)
        series = ("E6", "E12", "E24", "E48", "E96", "E192")

        draws = ctx.value(cir, "draws", f"{key}.draws", "number", float(DEFAULT_DRAWS), positive=True)
        seed = ctx.value(cir, "seed", f"{key}.seed", "number", 1.0, positive=True)
        for name, v in (("draws", draws), ("seed", seed)):
            if v != int(v):
                raise ctx.error(f"{key}.{name}", f"expected a whole number, found {excerpt(cir[name])}")
        if draws_problem(int(draws)):
            raise ctx.error(f"{key}.draws", draws_problem(int(draws)))
        max_opamps = None
        if "max_opamps" in cir:
            raw = cir["max_opamps"]
            number = None if isinstance(raw, bool) else ctx.value(cir, "max_opamps", f"{key}.max_opamps", "number")
            if number is None or not 1 <= number <= MAX_OPAMPS or number != int(number):
                raise ctx.error(
                    f"{key}.max_opamps",
                    f"expected a whole number of op-amps from 1 to {MAX_OPAMPS}, found {excerpt(raw)}",
                )
            max_opamps = int(number)
        if draws > MAX_DRAWS:
            raise ctx.error(
                f"{key}.draws",
                f"expected at most {MAX_DRAWS:,} Monte Carlo draws (the limit keeps a run "
                f"within about 1 GB), found {excerpt(cir['draws'])}",
            )
        circuit = CircuitTarget(
            topology=ctx.text(cir, "topology", f"{key}.topology", default="auto"),
            resistors=ctx.text(cir, "resistors", f"{key}.resistors", default="E96", choices=series),
            capacitors=ctx.text(cir, "capacitors", f"{key}.capacitors", default="E12", choices=series),
            tolerances=_read_tolerances(ctx, cir, f"{key}.tolerances", default={"R": 0.01, "C": 0.05}),
            resistor_range=ctx.pair(cir, "resistor_range", f"{key}.resistor_range", "ohm", (1e3, 1e6), positive=True),
            capacitor_range=ctx.pair(
                cir, "capacitor_range", f"{key}.capacitor_range", "farad", (100e-12, 10e-6), positive=True
            ),
            draws=int(draws),
            seed=int(seed),
            distribution=ctx.text(
                cir, "distribution", f"{key}.distribution", default=DEFAULT_DISTRIBUTION, choices=DISTRIBUTIONS
            ),
            opamp_gbw_hz=ctx.value(cir, "opamp_gbw", f"{key}.opamp_gbw", "hz", None, positive=True, allow_zero=False),
            max_opamps=max_opamps,
            rail_v=ctx.value(cir, "rail", f"{key}.rail", "volt", None, positive=True, allow_zero=False),
            input_amplitude_v=ctx.value(
                cir, "input_amplitude", f"{key}.input_amplitude", "volt", None, positive=True, allow_zero=False
            ),
            where=ctx.where(key),
        )
        if (circuit.rail_v is None) != (circuit.input_amplitude_v is None):
            missing = "input_amplitude" if circuit.input_amplitude_v is None else "rail"
            raise ctx.error(
                f"{key}.{missing}",
                'the output-swing check needs both rail and input_amplitude (volts), e.g. rail = "12 V" '
                'and input_amplitude = "1 V"',
            )
    if digital is None and circuit is None and not table.get("given"):
        raise ctx.error("target", "give [target.digital], [target.circuit] or [target.given.NAME]")
    if source.form == "digital" and digital is not None and circuit is None:
        pass  # a digital source moved to another rate or method is allowed
    return digital, circuit


def _read_signal_maps(ctx: _Ctx, dig: dict, key: str, source) -> tuple[list, tuple[str, ...]]:
    """``input_signal`` / ``output_signal`` sub-tables of the digital target: (maps, text lines)."""
    maps, text = [], []
    for side in ("input_signal", "output_signal"):
        table = ctx.table(dig, side, f"{key}.{side}")
        if table is None:
            maps.append(None)
            continue
        ctx.check_keys(table, SCHEMA["target"]["digital"][side], f"{key}.{side}")
        try:
            m, line = signal_map(table, f"{key}.{side}", card_volts=True)
        except InputError as exc:
            raise InputError(exc.message, where=ctx.where(exc.key or f"{key}.{side}"), key=exc.key) from None
        maps.append(m)
        text.append(f"{side.split('_')[0]}: {line}")
    return maps, tuple(text)


def _read_plant(ctx: _Ctx, data: dict) -> Plant | None:
    table = ctx.table(data, "plant", "plant")
    if table is None:
        return None
    ctx.check_keys(table, SCHEMA["plant"], "plant")
    text = ctx.text(table, "model", "plant.model")
    if text is None:
        raise ctx.error("plant", 'missing model: the plant\'s transfer function in s, e.g. model = "2/((10s+1)(2s+1))"')

    try:
        model = from_expression(text, label=f"{ctx.where('plant.model')}: plant.model")
    except InputError as exc:
        if exc.message.startswith("an expression in z"):  # not a missing rate: the plant is never in z
            raise ctx.error("plant.model", "the plant is a continuous process: write its model in s, not z") from None
        raise
    if model.is_digital:
        raise ctx.error("plant.model", "the plant is a continuous process: write its model in s")
    if not model.is_proper:
        raise ctx.error(
            "plant.model", f"the plant model must be proper (no more zeros than poles), found {excerpt(text)}"
        )
    dead = ctx.value(table, "dead_time", "plant.dead_time", "second", 0.0, positive=True)
    return Plant(model=model, expression=text, dead_time_s=dead)


def _read_signals(ctx: _Ctx, data: dict) -> Signals:
    table = ctx.table(data, "signals", "signals") or {}
    ctx.check_keys(table, SCHEMA["signals"], "signals")
    step = ctx.value(table, "setpoint_step", "signals.setpoint_step", "number", 1.0)
    dist = ctx.value(table, "disturbance_step", "signals.disturbance_step", "number", 1.0)
    for name, v in (("setpoint_step", step), ("disturbance_step", dist)):
        if v == 0:
            raise ctx.error(f"signals.{name}", "a step of size zero tests nothing; give a non-zero size")
    duration = ctx.value(table, "duration", "signals.duration", "second", None, positive=True, allow_zero=False)
    out_range = _around_operating_point(
        ctx, ctx.pair(table, "output_range", "signals.output_range", "number"), "signals.output_range"
    )
    return Signals(setpoint_step=step, disturbance_step=dist, duration_s=duration, output_range=out_range)


def _read_criteria(ctx: _Ctx, data: dict) -> Criteria:
    table = ctx.table(data, "criteria", "criteria")
    if table is None:
        raise InputError(
            'missing [criteria]: at least band = ["low Hz", "high Hz"] and one limit',
            where=ctx.where(""),
            key="criteria",
        )
    ctx.check_keys(table, SCHEMA["criteria"], "criteria")
    if "band" not in table:
        raise ctx.error("criteria", 'missing band: the frequency range compared, e.g. band = ["10 mHz", "1 Hz"]')
    band = ctx.pair(table, "band", "criteria.band", "hz", positive=True)

    if band_width_problem(*band):
        raise ctx.error("criteria.band", band_width_problem(*band))
    values = {}
    for key in SCHEMA["criteria"]:
        if key == "band":
            continue
        if key.endswith("deviation"):  # percentage fields: "3 %" or a fraction below 1
            values[key] = ctx.fraction(table, key, f"criteria.{key}", allow_one=False)
            continue
        values[key] = ctx.value(table, key, f"criteria.{key}", "number", None, positive=True)
    return Criteria(band_hz=band, **values)


#: The case-file keys that set the neutral settings library messages name (``LoopshiftError.settings``).
SETTING_KEYS = {
    "sample rate fs": "a digital source is [source.digital] with b, a and fs",
    "conversion method": "source.digital.method",
    "computation delay": "target.digital.delay",
    "derivative filter N": "target.digital.derivative_filter",
}


def circuit_key(neutral: str | None) -> str:
    """The case-file key of ``[target.circuit]`` that sets a neutral setting an error names
    ("resistor maximum" -> ``target.circuit.resistor_range``); ``target.circuit`` otherwise."""
    if not neutral:
        return "target.circuit"
    word = str(neutral)
    if word.startswith("target."):
        return word
    for part in ("resistor", "capacitor"):
        if word.startswith(f"{part} m") or word.startswith(f"{part} range"):
            return f"target.circuit.{part}_range"
    word = word.replace(" ", "_")
    if word in SCHEMA["target"]["circuit"]:
        return f"target.circuit.{word}"
    return "target.circuit"


# ----------------------------------------------------------------------------- source controller
@dataclass(frozen=True)
class SourceInfo:
    """The built source: the ``controller`` (error -> output), PID settings where known, and
    notes (e.g. clamps found in a netlist, the card's part list)."""

    controller: Any
    pid: Any = None
    parts: dict | None = None
    tolerances: dict | None = None
    topology: str | None = None
    notes: tuple[str, ...] = ()
    extra: dict = field(default_factory=dict)


def source_controller(case: Case) -> SourceInfo:
    """Build the source controller of ``case`` (imports PID, circuit or netlist code lazily).

    Errors from those modules are re-raised with the case file's line of the source."""
    src = case.source
    try:
        return _build_source(case, src)
    except LoopshiftError as exc:
        if exc.where and not exc.where.startswith(case.path.name):
            raise  # e.g. a netlist error already names the netlist file and its line
        key = str(exc.key or "")
        full = key if key.startswith("source") else f"source.{src.form}" + (f".{key}" if key else "")
        raise type(exc)(exc.message, where=case.where(full), key=full) from None


def build_form(src: Source, case: Case | None = None) -> SourceInfo:
    """The controller of one form written as a :class:`Source` (also used for given targets);
    ``case`` (optional) gives a netlist card's analysis the band and the sample rate."""
    return _build_source(case, src)


def _build_source(case: Case, src: Source) -> SourceInfo:
    if src.form == "expression":
        return SourceInfo(controller=src.data["controller"])
    if src.form == "pid":
        settings = pid_from_mapping(src.data["settings"], where=src.where)
        return SourceInfo(controller=settings.to_controller(), pid=settings)
    if src.form == "digital":
        ctrl = Controller.from_b_a(src.data["b"], src.data["a"], 1.0 / src.data["fs_hz"], name="firmware")
        # the rounding of each coefficient as written (a made monic; padding zeros are exact)
        written = src.data.get("a_text", src.data["a"])
        radius = [r / abs(src.data["a"][0]) for r in printed_radii(written, src.data.get("b_text", src.data["b"]))]
        radius += [0.0] * (len(ctrl.den) - len(radius))
        ctrl, notes = printed_integrators(ctrl, radius[: len(ctrl.den)])
        return SourceInfo(controller=ctrl, notes=tuple(f"source.digital: {n}" for n in notes))
    if src.form == "card":
        topo = get_topology(src.data["topology"])
        ctrl = topo.controller_from_parts(dict(src.data["parts"]))
        return SourceInfo(
            controller=ctrl,
            parts=dict(src.data["parts"]),
            tolerances=src.data["tolerances"],
            topology=src.data["topology"],
        )
    # netlist

    file_path: Path = src.data["file"]
    text = read_input_text(file_path, what="netlist")
    net = read_netlist(text, source=file_path.name)
    if src.data["setpoint"] is None and src.data["input"].upper() not in {e.name for e in net.sources}:
        hint = two_input_hint(net, None, spelling='setpoint = "{sp}", measurement = "{pv}"')
        if hint:
            raise InputError(f"input source {src.data['input']!r} not found in {file_path.name}; {hint}", key="input")
    fs = min(case.digital.fs_hz) if case is not None and case.digital else None
    card = read_card_source(  # the same reading as `loopshift card`
        net,
        input=src.data["input"],
        output=src.data["output"],
        setpoint=src.data["setpoint"],
        measurement=src.data["measurement"],
        band_hz=tuple(case.criteria.band_hz) if case is not None else None,
        fs_hz=fs,
    )
    extra: dict = {"netlist_file": str(file_path), "output_limits": card.output_limits, "reduction": card.reduction}
    across = [c for c in find_clamps(net) if c.role.startswith("across the feedback")]
    if card.output_limits is not None and across:  # the clamp stops an integrator: the card does not wind up
        extra["feedback_clamp"] = ", ".join(d for c in across for d in c.diodes)
    notes = [f"warning: {w}" for w in net.warnings] + list(card.notes)
    if card.output_limits is not None:
        notes.append(
            f"the card's clamps hold its output to {limits_text(card.output_limits)}: the source loop is simulated "
            "with these limits, and they are the firmware's output limits unless "
            "target.digital.output_limits says otherwise"
        )
    if card.structure is not None:
        extra["setpoint_structure"] = card.structure.description
        if card.structure.plain_error:
            text = (
                "two-input card: the loop checks use its feedback controller on the error, u = C·(r − y); "
                f"its setpoint path is the same ({card.structure.description})"
            )
        else:
            extra["setpoint_filter"] = card.structure.setpoint_filter
            extra["setpoint_path"] = card.results[card.inputs[0]].controller  # H_sp as the card runs (log replay)
            text = (
                f"two-input card: its setpoint path differs ({card.structure.description}); the setpoint step "
                "is simulated through it, u = H_sp·r − C·y, and the firmware must reproduce it"
            )
        notes.append(text)
    running = card.full_controller or card.controller  # the card as it runs, parasitics and all
    return SourceInfo(controller=running.with_name("card"), pid=card.pid, notes=tuple(notes), extra=extra)


def parsed_transfer_functions(case: Case) -> list[tuple[str, str, Any]]:
    """Every transfer function the case gave as text or coefficients, as ``(what, as given,
    Controller as read)``: the source (an expression, or firmware b/a) and the plant. The report
    and the terminal print each beside its canonical form, so a misreading shows at a glance."""
    out: list[tuple[str, str, Any]] = []
    src = case.source
    if src.form == "expression":
        out.append(("source", src.data["expression"], src.data["controller"]))
    elif src.form == "digital":
        given = f"b = {list(src.data['b'])}, a = {list(src.data['a'])}"
        out.append(("source", given, Controller.from_b_a(src.data["b"], src.data["a"], 1.0 / src.data["fs_hz"])))
    if case.plant is not None:
        out.append(("plant", case.plant.expression, case.plant.model))
    return out


def case_summary(case: Case) -> dict:
    """Plain data describing the case (for results.json)."""
    src = {"form": case.source.form}
    for k, v in case.source.data.items():
        if k == "controller":
            continue
        src[k] = str(v) if isinstance(v, Path) else v
    out = {
        "file": str(case.path),
        "title": case.title,
        "description": case.description,
        "source": src,
        "targets": {},
        "plant": None,
        "signals": case.signals.__dict__.copy(),
        "criteria": case.criteria.as_dict(),
    }
    if case.digital:
        out["targets"]["digital"] = {
            k: (v.__dict__ if k in ("input_signal", "output_signal") and v is not None else v)
            for k, v in case.digital.__dict__.items()
            if k != "where"
        }
    if case.circuit:
        out["targets"]["circuit"] = {k: v for k, v in case.circuit.__dict__.items() if k != "where"}
    if case.given:
        out["targets"]["given"] = [g.summary() for g in case.given]
    if case.plant:
        out["plant"] = {"model": case.plant.expression, "dead_time_s": case.plant.dead_time_s}
    return out


def _around_operating_point(ctx, limits, dotted: str):
    """Output limits are deviations from the operating point (0 = the output there): a pair
    that leaves out 0 cannot hold the loop at its operating point, so it is refused."""
    if limits is not None and not limits[0] <= 0.0 <= limits[1]:
        raise ctx.error(
            dotted,
            f"the limits {limits[0]:g} .. {limits[1]:g} leave out 0, the output at the operating point: they "
            "are deviations from it (a valve at 40 % of 0..100 % gives [-40, 60])",
        )
    return limits
