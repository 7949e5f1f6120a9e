"""Read a SPICE netlist of an analog controller card into plain data (a documented subset).

What is read (docs/netlists.md has the full description and examples):

* The first line is the title, as in every SPICE. ``*`` starts a comment line; ``;`` and
  ``$`` (after a blank) start an inline comment; a line starting with ``+`` continues the
  previous one. Names of elements, nodes, models and parameters are case-insensitive.
* Elements: ``R`` (Ω), ``C`` (F), ``L`` (H), ``V`` independent voltage sources (one of them
  is the input; the others are zeroed, i.e. shorted, in the analysis), ``E`` voltage-controlled
  voltage source, ``G`` voltage-controlled current source, ``D`` diode / zener (left out of the
  linear analysis and reported as a clamp), ``X`` subcircuit instance.
* Built-in op-amps (pins ``non-inverting inverting output``)::

      X1 inp inn out OPAMP                       ideal op-amp (nullor)
      X2 inp inn out OPAMP1P gbw=1meg a0=100k    single pole: A(s) = a0 / (1 + s a0 / (2π gbw))

  ``gbw`` is the gain-bandwidth product in Hz (default 1meg), ``a0`` the DC open-loop gain
  (default 100k, i.e. 100 dB). A ``.subckt`` in the file with the same name takes precedence.
* Directives: ``.param``, ``.subckt``/``.ends`` (flattened: element ``R1`` inside instance
  ``X2`` becomes ``X2.R1``, internal node ``n`` becomes ``X2.n``), ``.model NAME D(BV=..)``,
  ``.title``, ``.end``. Analysis and output directives (``.ac``, ``.tran``, ``.op``, ``.print``,
  ...) and ``.control`` blocks are ignored with a note; any other directive is refused.
* Values: SPICE numbers (``meg`` mega, ``m`` milli, case-insensitive; ``4k7`` is refused) read by
  :func:`convert.values.parse_spice_number`, ``{expression}`` with ``+ - * / ^``, parentheses and
  parameter names, or a bare parameter name. Nothing is passed to ``eval``.

Every error is an :class:`~convert.errors.InputError` whose text starts ``file:line: element:``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace

from convert.errors import InputError
from convert.limits import MAX_NESTING, excerpt, read_input_text
from convert.values import parse_spice_number

GROUND = "0"
GROUND_ALIASES = {"0", "gnd"}

#: Built-in op-amp subcircuit names -> (pin names, parameter defaults).
BUILTIN_OPAMPS: dict[str, tuple[tuple[str, ...], dict[str, float]]] = {
    "OPAMP": (("inp", "inn", "out"), {}),
    "OPAMP1P": (("inp", "inn", "out"), {"gbw": 1e6, "a0": 1e5}),
}

#: Default forward drop of a silicon diode (V); the usual range is 0.6–0.7 V (common practice).
DIODE_FORWARD_V = 0.65
# R, C and L values read from a netlist: far wider than any real part (1e-24 F .. 1e24 ohm), narrow
# enough that conductances and capacitances stay well inside double range in the nodal analysis.
PART_VALUE_RANGE = (1e-24, 1e24)

# Directives that only steer a simulation: ignored with a note.
_IGNORED_DIRECTIVES = {
    ".ac",
    ".tran",
    ".op",
    ".dc",
    ".noise",
    ".tf",
    ".pz",
    ".sens",
    ".disto",
    ".four",
    ".print",
    ".plot",
    ".probe",
    ".save",
    ".meas",
    ".measure",
    ".options",
    ".option",
    ".opt",
    ".temp",
    ".width",
    ".ic",
    ".nodeset",
    ".csparam",
}
_TRANSIENT_FUNCTIONS = {"sin", "pulse", "pwl", "exp", "sffm", "am", "trrandom", "trnoise"}
_MAX_DEPTH = 20
#: Most elements after flattening subcircuits, counted before any is built (ten-fold nested
#: subcircuits instantiating ten of the next would expand to 10^10). Beyond this the nodal
#: analysis would also exceed its own matrix-size limit (convert.circuit.mna.MAX_UNKNOWNS).
MAX_ELEMENTS = 10_000

SUPPORTED_ELEMENTS = "R, C, L, V, E, G, D, X"


# ----------------------------------------------------------------------------- data
@dataclass(frozen=True)
class Element:
    """One element of the flattened circuit.

    ``kind`` is ``R``, ``C``, ``L``, ``V``, ``E``, ``G``, ``D`` or ``OPAMP``. ``nodes`` are
    lower-case node names with ground written ``"0"``: two nodes for R/C/L/V/D (D: anode,
    cathode), four for E/G (out+, out−, control+, control−), three for OPAMP (non-inverting,
    inverting, output). ``value`` is in SI units (Ω, F, H, V/V gain, S) or ``None`` (V, D,
    OPAMP). ``params`` holds ``gbw`` (Hz) and ``a0`` for a single-pole op-amp and ``bv`` (V,
    zener voltage; absent for a plain diode) and ``vf`` (V) for a diode.
    """

    name: str
    kind: str
    nodes: tuple[str, ...]
    value: float | None
    line: int
    source: str = "netlist"
    model: str = ""
    params: tuple[tuple[str, float], ...] = ()

    @property
    def where(self) -> str:
        return f"{self.source}:{self.line}"

    def param(self, key: str, default: float | None = None) -> float | None:
        return dict(self.params).get(key, default)

    @property
    def is_reactive(self) -> bool:
        return self.kind in ("C", "L") or (self.kind == "OPAMP" and self.param("gbw") is not None)


@dataclass(frozen=True)
class Netlist:
    """A flattened netlist: elements in file order, the title, and notes for the user;
    ``warnings`` are readings that may not be what the writer meant (``1M`` is milli in SPICE),
    which a front end prints before its results."""

    title: str
    source: str
    elements: tuple[Element, ...]
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    _index: dict = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        self._index.clear()
        self._index.update({e.name: e for e in self.elements})

    def element(self, name: str) -> Element | None:
        """The element called ``name`` (case-insensitive), or None."""
        return self._index.get(name.upper())

    def of_kind(self, *kinds: str) -> tuple[Element, ...]:
        return tuple(e for e in self.elements if e.kind in kinds)

    @property
    def sources(self) -> tuple[Element, ...]:
        return self.of_kind("V")

    @property
    def diodes(self) -> tuple[Element, ...]:
        return self.of_kind("D")

    @property
    def linear_elements(self) -> tuple[Element, ...]:
        return tuple(e for e in self.elements if e.kind != "D")

    def nodes(self) -> tuple[str, ...]:
        """Every node name except ground, in order of first appearance."""
        seen: dict[str, None] = {}
        for e in self.elements:
            for n in e.nodes:
                if n != GROUND:
                    seen.setdefault(n, None)
        return tuple(seen)

    @property
    def parts(self) -> tuple[Element, ...]:
        """Elements with a value a person can change: R, C, L (and E/G gains)."""
        return self.of_kind("R", "C", "L", "E", "G")

    def with_values(self, values: dict[str, float]) -> Netlist:
        """A copy with some element values replaced (``{"R1": 1.1e5}``; names case-insensitive).
        ``"X1.gbw"``-style keys change an op-amp parameter."""
        wanted = {k.upper(): v for k, v in values.items()}
        new = []
        for e in self.elements:
            if e.name in wanted:
                e = replace(e, value=float(wanted.pop(e.name)))
            else:
                for key in [
                    k for k in wanted if k.startswith(e.name + ".") and k[len(e.name) + 1 :].lower() in dict(e.params)
                ]:
                    p = dict(e.params)
                    p[key[len(e.name) + 1 :].lower()] = float(wanted.pop(key))
                    e = replace(e, params=tuple(sorted(p.items())))
            new.append(e)
        if wanted:
            raise InputError(f"no element called {', '.join(sorted(wanted))}", where=self.source)
        return Netlist(self.title, self.source, tuple(new), self.notes, self.warnings)


# ----------------------------------------------------------------------------- lines
@dataclass(frozen=True)
class _Line:
    number: int
    text: str  # comments removed, continuations joined


def _strip_comment(text: str) -> str:
    cut = len(text)
    i = text.find(";")
    if i >= 0:
        cut = i
    m = re.search(r"(^|\s)\$", text)
    if m and m.start() < cut:
        cut = m.start()
    return text[:cut].rstrip()


def _logical_lines(text: str, source: str) -> tuple[str, list[_Line]]:
    """(title, logical lines after the title) with comments stripped and '+' lines joined."""
    raw = text.splitlines()
    title = raw[0].strip() if raw else ""
    lines: list[_Line] = []
    for number, physical in enumerate(raw[1:], start=2):
        stripped = physical.strip()
        if not stripped or stripped.startswith("*"):
            continue
        body = _strip_comment(stripped)
        if body.startswith("+"):
            if not lines:
                raise InputError("a continuation line ('+') has no line to continue", where=f"{source}:{number}")
            last = lines[-1]
            lines[-1] = _Line(last.number, f"{last.text} {body[1:].strip()}")
            continue
        if body.strip():
            lines.append(_Line(number, body.strip()))
    return title, lines


_BRACE_RE = re.compile(r"\{[^{}]*\}")


def _tokens(text: str, where: str) -> list[str]:
    """Split a line into fields: {..} groups stay whole, 'a = b' becomes 'a=b', ( ) , are blanks."""
    if text.count("{") != text.count("}"):
        raise InputError(f"unbalanced braces in {text!r}", where=where)
    groups: list[str] = []

    def keep(m: re.Match) -> str:
        groups.append(m.group(0))
        return f"\x00{len(groups) - 1}\x00"

    masked = _BRACE_RE.sub(keep, text)
    if "{" in masked or "}" in masked:
        raise InputError(f"nested or unbalanced braces in {text!r}", where=where)
    masked = re.sub(r"\s*=\s*", "=", masked)
    masked = re.sub(r"[(),]", " ", masked)
    out = []
    for tok in masked.split():
        out.append(re.sub(r"\x00(\d+)\x00", lambda m: groups[int(m.group(1))], tok))
    return out


# ----------------------------------------------------------------------------- expressions
_EXPR_TOKEN = re.compile(
    r"\s*(?:(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[A-Za-zµ0-9]*)|(?P<name>[A-Za-z_][A-Za-z_0-9]*)"
    r"|(?P<op>\*\*|[-+*/^()]))"
)


class _Scope:
    """Parameter values visible at one place: local raw texts, then the parent scope."""

    def __init__(self, raw: dict[str, tuple[str, str]], parent: _Scope | None = None):
        self.raw = raw  # name -> (text, where)
        self.parent = parent
        self.values: dict[str, float] = {}
        self.busy: set[str] = set()

    def lookup(self, name: str, where: str) -> float:
        key = name.lower()
        if key in self.raw:
            if key not in self.values:
                self._resolve(key)
            return self.values[key]
        if self.parent is not None:
            return self.parent.lookup(name, where)
        raise InputError(f"unknown parameter {name!r}", where=where)

    def _resolve(self, key: str) -> None:
        """Evaluate ``key`` after the parameters it names, depth first with an explicit stack:
        a chain of 1,000 parameters each defined by the next exhausted Python's recursion."""
        stack = [key]
        while stack:
            k = stack[-1]
            if k in self.values:
                stack.pop()
                continue
            text, pwhere = self.raw[k]
            if k not in self.busy:  # first visit: its own parameters first
                self.busy.add(k)
                for d in _names_in(text):
                    if d in self.busy:
                        raise InputError(f"parameter {d!r} is defined in terms of itself", where=pwhere, key=".param")
                    if d in self.raw and d not in self.values:
                        stack.append(d)
                continue
            self.values[k] = evaluate(text, self, pwhere, f"parameter {k}")  # every name it uses is known now
            self.busy.discard(k)
            stack.pop()

    def knows(self, name: str) -> bool:
        return name.lower() in self.raw or (self.parent is not None and self.parent.knows(name))


def _names_in(text: str) -> list[str]:
    """Parameter names (lower case) an expression field uses, in order; numbers with suffix
    letters (``1k``) are numbers, not names."""
    t = text.strip()
    if t.startswith("{") and t.endswith("}"):
        t = t[1:-1]
    out, pos = [], 0
    while pos < len(t):
        m = _EXPR_TOKEN.match(t, pos)
        if not m or m.end() == pos:
            break  # the calculator reports what it cannot read
        if m.lastgroup == "name":
            out.append(m.group("name").lower())
        pos = m.end()
    return out


_PLAIN_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[A-Za-zµ0-9]*$")


def evaluate(text: str, scope: _Scope, where: str, what: str = "value") -> float:
    """Value of a SPICE value field: a number, ``{expression}``, a bare parameter name, or (in
    ``.param``) an unbraced expression. Units: whatever the field holds (Ω, F, H, V/V, Hz)."""
    t = text.strip()
    if t.startswith("{") and t.endswith("}"):
        return _Arith(t[1:-1], scope, where, what).run()
    if _PLAIN_NUMBER.match(t):
        return parse_spice_number(t, where=where, field=what)
    if re.fullmatch(r"[A-Za-z_][A-Za-z_0-9]*", t) and not scope.knows(t):
        raise InputError(
            f"expected a SPICE number (e.g. 4.7k, 2.2n, 1meg), {{expression}} or parameter name, "
            f"found {t!r} (no parameter of that name)",
            where=where,
            key=what,
        )
    return _Arith(t, scope, where, what).run()


class _Arith:
    """A tiny recursive-descent calculator: + - * / ^ (or **), unary signs, parentheses."""

    def __init__(self, text: str, scope: _Scope, where: str, what: str):
        self.text, self.scope, self.where, self.what = text, scope, where, what
        self.tokens: list[tuple[str, str]] = []
        pos = 0
        while pos < len(text):
            if text[pos:].strip() == "":
                break
            m = _EXPR_TOKEN.match(text, pos)
            if not m or m.end() == pos:
                raise InputError(
                    f"cannot read the expression {text!r} at {text[pos:].strip()[:10]!r}", where=where, key=what
                )
            kind = m.lastgroup
            self.tokens.append((kind, m.group(kind)))
            pos = m.end()
        self.tokens.append(("end", ""))
        self.i = 0
        self.depth = 0  # parentheses and unary signs open (bounded: MAX_NESTING)

    def enter(self) -> None:
        self.depth += 1
        if self.depth > MAX_NESTING:
            raise InputError(
                f"parentheses and signs are nested more than {MAX_NESTING} deep in "
                f"{excerpt(self.text)} (the limit of the calculator); write it flatter",
                where=self.where,
                key=self.what,
            )

    def fail(self, expected: str):
        kind, tok = self.tokens[self.i]
        found = "the end" if kind == "end" else repr(tok)
        raise InputError(
            f"in expression {self.text.strip()!r}: expected {expected}, found {found}", where=self.where, key=self.what
        )

    def peek(self) -> tuple[str, str]:
        return self.tokens[self.i]

    def run(self) -> float:
        value = self.sum()
        if self.peek()[0] != "end":
            self.fail("an operator or the end")
        if not math.isfinite(value):
            raise InputError(
                f"the expression {self.text.strip()!r} is not a finite number", where=self.where, key=self.what
            )
        return value

    def sum(self) -> float:
        value = self.product()
        while self.peek() in (("op", "+"), ("op", "-")):
            op = self.peek()[1]
            self.i += 1
            rhs = self.product()
            value = value + rhs if op == "+" else value - rhs
        return value

    def product(self) -> float:
        value = self.unary()
        while self.peek() in (("op", "*"), ("op", "/")):
            op = self.peek()[1]
            self.i += 1
            rhs = self.unary()
            if op == "/" and rhs == 0:
                raise InputError(f"division by zero in {self.text.strip()!r}", where=self.where, key=self.what)
            value = value * rhs if op == "*" else value / rhs
        return value

    def unary(self) -> float:
        if self.peek() in (("op", "+"), ("op", "-")):
            sign = -1.0 if self.peek()[1] == "-" else 1.0
            self.i += 1
            self.enter()
            value = sign * self.unary()
            self.depth -= 1
            return value
        return self.power()

    def power(self) -> float:
        base = self.atom()
        if self.peek() in (("op", "^"), ("op", "**")):
            self.i += 1
            self.enter()
            exponent = self.unary()
            self.depth -= 1
            try:
                value = base**exponent
            except (OverflowError, ZeroDivisionError):
                raise InputError(
                    f"{base!r} ^ {exponent!r} cannot be computed", where=self.where, key=self.what
                ) from None
            if isinstance(value, complex):
                raise InputError(f"{base!r} ^ {exponent!r} is not a real number", where=self.where, key=self.what)
            return value
        return base

    def atom(self) -> float:
        kind, tok = self.peek()
        if kind == "num":
            self.i += 1
            return parse_spice_number(tok, where=self.where, field=self.what)
        if kind == "name":
            self.i += 1
            return self.scope.lookup(tok, self.where)
        if (kind, tok) == ("op", "("):
            self.i += 1
            self.enter()
            value = self.sum()
            self.depth -= 1
            if self.peek() != ("op", ")"):
                self.fail("')'")
            self.i += 1
            return value
        self.fail("a number, a parameter name or '('")
        raise AssertionError  # pragma: no cover


# ----------------------------------------------------------------------------- reader
@dataclass
class _Subckt:
    name: str
    pins: tuple[str, ...]
    defaults: dict[str, tuple[str, str]]
    body: list[_Line]
    line: int


@dataclass
class _Model:
    name: str
    kind: str
    params: dict[str, str]
    line: int


def _split_params(tokens: list[str], where: str, what: str) -> tuple[list[str], dict[str, str]]:
    """Separate plain fields from key=value fields (a 'params:' marker is skipped)."""
    plain: list[str] = []
    params: dict[str, str] = {}
    for tok in tokens:
        if tok.lower() == "params:":
            continue
        if "=" in tok and not tok.startswith("{"):
            key, _, value = tok.partition("=")
            if not re.fullmatch(r"[A-Za-z_][A-Za-z_0-9]*", key) or not value:
                raise InputError(f"expected NAME=VALUE, found {tok!r}", where=where, key=what)
            if key.lower() in params:
                raise InputError(f"parameter {key!r} is given twice", where=where, key=what)
            params[key.lower()] = value
        else:
            if params:
                raise InputError(f"expected NAME=VALUE after the first parameter, found {tok!r}", where=where, key=what)
            plain.append(tok)
    return plain, params


def _param_assignments(text: str, where: str) -> dict[str, str]:
    """`.param a=1k b = {a*2} c=a/2` -> {'a': '1k', 'b': '{a*2}', 'c': 'a/2'}."""
    body = text.split(None, 1)[1] if len(text.split(None, 1)) > 1 else ""
    pairs = re.findall(
        r"([A-Za-z_][A-Za-z_0-9]*)\s*=\s*(.*?)(?=\s+[A-Za-z_][A-Za-z_0-9]*\s*=|\s*,\s*[A-Za-z_]\w*\s*=|$)", body.strip()
    )
    rebuilt = " ".join(f"{k}={v}" for k, v in pairs)
    if not pairs or re.sub(r"\s|,", "", rebuilt) != re.sub(r"\s|,", "", body):
        raise InputError(f"expected .param NAME=VALUE [NAME=VALUE ...], found {text!r}", where=where, key=".param")
    out: dict[str, str] = {}
    for key, value in pairs:
        if not value.strip():
            raise InputError(f"parameter {key!r} has no value", where=where, key=".param")
        out[key.lower()] = value.strip().rstrip(",")
    return out


class _Reader:
    def __init__(self, source: str):
        self.source = source
        self.notes: list[str] = []
        self.warnings: list[str] = []
        self.subckts: dict[str, _Subckt] = {}
        self.models: dict[str, _Model] = {}
        self.elements: list[Element] = []
        self.names: set[str] = set()

    def where(self, line: _Line) -> str:
        return f"{self.source}:{line.number}"

    # --- pass 1: structure ------------------------------------------------------------
    def collect(self, lines: list[_Line]) -> tuple[list[_Line], dict[str, tuple[str, str]]]:
        top: list[_Line] = []
        params: dict[str, tuple[str, str]] = {}
        current: _Subckt | None = None
        in_control = False
        ignored: dict[str, int] = {}
        for line in lines:
            word = line.text.split()[0].lower()
            where = self.where(line)
            if in_control:
                if word == ".endc":
                    in_control = False
                continue
            if word == ".control":
                in_control = True
                self.notes.append(f"{where}: the .control block is ignored (it only steers a simulator)")
                continue
            if word == ".end":
                break
            if word == ".subckt":
                if current is not None:
                    raise InputError(
                        f"a .subckt inside .subckt {current.name} (line {current.line}) is not supported;"
                        " define subcircuits one after another",
                        where=where,
                        key=".subckt",
                    )
                current = self._subckt_header(line)
                continue
            if word == ".ends":
                if current is None:
                    raise InputError("found .ends without a matching .subckt", where=where, key=".ends")
                parts = line.text.split()
                if len(parts) > 1 and parts[1].upper() != current.name:
                    raise InputError(
                        f".ends names {parts[1]!r} but the open subcircuit is {current.name!r}",
                        where=where,
                        key=".ends",
                    )
                self.subckts[current.name] = current
                current = None
                continue
            if word == ".param":
                target = current.defaults if current is not None else params
                for key, value in _param_assignments(line.text, where).items():
                    if key in target and current is None:
                        raise InputError(
                            f"parameter {key!r} is defined twice (first at {target[key][1]})", where=where, key=".param"
                        )
                    target[key] = (value, where)
                continue
            if word == ".model":
                self._model(line)
                continue
            if word == ".title":
                continue
            if word in (".include", ".inc", ".lib"):
                raise InputError(f"{word} is not supported; copy the definitions into this file", where=where, key=word)
            if word == ".endc":
                raise InputError("found .endc without .control", where=where, key=".endc")
            if word in _IGNORED_DIRECTIVES:
                ignored.setdefault(word, line.number)
                continue
            if word.startswith("."):
                raise InputError(
                    f"unsupported directive {word}; this reader knows .param .subckt .ends .model "
                    ".title .end and ignores analysis directives (.ac .tran .op ...)",
                    where=where,
                    key=word,
                )
            if current is not None:
                current.body.append(line)
            else:
                top.append(line)
        if current is not None:
            raise InputError(
                f".subckt {current.name} is not closed with .ends", where=f"{self.source}:{current.line}", key=".subckt"
            )
        if in_control:
            raise InputError("a .control block is not closed with .endc", where=self.source, key=".control")
        for word, number in ignored.items():
            self.notes.append(f"{self.source}:{number}: {word} ignored: the transfer function is computed directly")
        return top, params

    def _subckt_header(self, line: _Line) -> _Subckt:
        where = self.where(line)
        tokens = _tokens(line.text, where)[1:]
        plain, defaults = _split_params(tokens, where, ".subckt")
        if not plain:
            raise InputError("expected .subckt NAME PIN [PIN ...], found no name", where=where, key=".subckt")
        name = plain[0].upper()
        pins = tuple(p.lower() for p in plain[1:])
        if not pins:
            raise InputError(f"subcircuit {name} has no pins", where=where, key=".subckt")
        if len(set(pins)) != len(pins):
            raise InputError(f"subcircuit {name} lists a pin twice: {' '.join(pins)}", where=where, key=".subckt")
        if any(p in GROUND_ALIASES for p in pins):
            raise InputError(f"subcircuit {name}: ground (0) cannot be a pin", where=where, key=".subckt")
        if name in self.subckts:
            raise InputError(
                f"subcircuit {name} is defined twice (first at line {self.subckts[name].line})",
                where=where,
                key=".subckt",
            )
        if name in BUILTIN_OPAMPS:
            self.notes.append(f"{where}: .subckt {name} replaces the built-in op-amp of that name")
        return _Subckt(name, pins, {k: (v, where) for k, v in defaults.items()}, [], line.number)

    def _model(self, line: _Line) -> None:
        where = self.where(line)
        tokens = _tokens(line.text, where)[1:]
        if len(tokens) < 2:
            raise InputError("expected .model NAME TYPE(PARAM=VALUE ...)", where=where, key=".model")
        name, kind = tokens[0].upper(), tokens[1].upper()
        _, params = _split_params(tokens[2:], where, f".model {name}")
        if name in self.models:
            raise InputError(
                f"model {name} is defined twice (first at line {self.models[name].line})", where=where, key=".model"
            )
        self.models[name] = _Model(name, kind, params, line.number)

    # --- the size after flattening, before flattening -----------------------------------
    def flat_count(self, lines: list[_Line], depth: int = 0, memo: dict | None = None, chain: tuple = ()) -> int:
        """How many elements ``lines`` expand to (subcircuits counted recursively, memoized per
        subcircuit; a subcircuit that contains itself or nests too deep is refused here)."""
        memo = {} if memo is None else memo
        total = 0
        for line in lines:
            text = line.text.strip()
            if not text or text[0].upper() != "X":
                total += 1
                continue
            plain = [t for t in text.split() if "=" not in t and t.lower() != "params:"]
            sub_name = plain[-1].upper() if len(plain) >= 3 else ""
            sub = self.subckts.get(sub_name)
            if sub is None:  # built-in op-amp, or an error the expansion reports with its line
                total += 1
                continue
            if sub_name in chain or depth >= _MAX_DEPTH:
                raise InputError(
                    f"subcircuits nest deeper than {_MAX_DEPTH} levels (is {sub_name} instantiating itself?)",
                    where=self.where(line),
                    key=plain[0],
                )
            if sub_name not in memo:
                memo[sub_name] = self.flat_count(sub.body, depth + 1, memo, chain + (sub_name,))
            total += memo[sub_name]
            if total > MAX_ELEMENTS:
                break
        return total

    # --- pass 2: elements, flattened -------------------------------------------------
    def expand(
        self, lines: list[_Line], scope: _Scope, prefix: str, nodemap: dict[str, str], depth: int, local_names: set[str]
    ) -> None:
        for line in lines:
            self.element(line, scope, prefix, nodemap, depth, local_names)

    def _node(self, name: str, prefix: str, nodemap: dict[str, str]) -> str:
        n = name.lower()
        if n in GROUND_ALIASES:
            return GROUND
        if n in nodemap:
            return nodemap[n]
        return f"{prefix.lower()}{n}"

    def element(
        self, line: _Line, scope: _Scope, prefix: str, nodemap: dict[str, str], depth: int, local_names: set[str]
    ) -> None:
        where = self.where(line)
        tokens = _tokens(line.text, where)
        if not tokens:
            raise InputError(f"expected an element line such as 'R1 in out 10k', found {line.text!r}", where=where)
        raw_name = tokens[0]
        if not re.fullmatch(r"[A-Za-z][A-Za-z0-9_.\-+#]*", raw_name):
            raise InputError(f"expected an element name such as R1 or C2, found {raw_name!r}", where=where)
        letter = raw_name[0].upper()
        local = raw_name.upper()
        if local in local_names:
            raise InputError(
                f"the name {raw_name} is used twice (names are case-insensitive)", where=where, key=raw_name
            )
        local_names.add(local)
        name = f"{prefix.upper()}{local}"
        kinds = {
            "R": self._two_terminal,
            "C": self._two_terminal,
            "L": self._two_terminal,
            "V": self._vsource,
            "E": self._controlled,
            "G": self._controlled,
            "D": self._diode,
        }
        if letter == "X":
            self._instance(line, tokens, scope, prefix, nodemap, depth, name)
            return
        if letter not in kinds:
            raise InputError(
                f"unknown element type {letter!r}; supported: {SUPPORTED_ELEMENTS} "
                "(op-amps as X instances of OPAMP or OPAMP1P)",
                where=where,
                key=raw_name,
            )
        kinds[letter](line, tokens, scope, prefix, nodemap, name)

    def _add(self, element: Element) -> None:
        if element.name in self.names:
            raise InputError(
                f"the name {element.name} is used twice after flattening subcircuits",
                where=element.where,
                key=element.name,
            )
        self.names.add(element.name)
        self.elements.append(element)

    def _two_terminal(self, line, tokens, scope, prefix, nodemap, name) -> None:
        where = self.where(line)
        letter = name.split(".")[-1][0]
        unit = {"R": "ohms", "C": "farads", "L": "henries"}[letter]
        plain, extra = _split_params(tokens[1:], where, tokens[0])
        if len(plain) != 3:
            raise InputError(
                f"expected {tokens[0]} NODE NODE VALUE ({unit}), found {len(plain)} field(s) {' '.join(plain)!r}",
                where=where,
                key=tokens[0],
            )
        allowed = {"ic"} if letter in "CL" else set()
        for key in extra:
            if key not in allowed:
                raise InputError(
                    f"unsupported option {key}= (only the value in {unit} is read)", where=where, key=tokens[0]
                )
        if extra:
            self.notes.append(
                f"{where}: {tokens[0]}: ic= is ignored (initial conditions do not change the transfer function)"
            )
        value = evaluate(plain[2], scope, where, tokens[0])
        if re.fullmatch(r"[+-]?[\d.]+(?:[eE][+-]?\d+)?M(?!EG|eg|Eg|IL|il)[A-Za-z]*", plain[2]):
            self.warnings.append(
                f"{where}: {tokens[0]}: {plain[2]!r} is read as milli ({value:g}), as every SPICE "
                "does; write meg for mega"
            )
        if not value > 0:
            raise InputError(
                f"expected a positive value in {unit}, found {plain[2]!r} = {value:g}", where=where, key=tokens[0]
            )
        if not PART_VALUE_RANGE[0] <= value <= PART_VALUE_RANGE[1]:
            # far beyond any real part, and the nodal analysis would overflow or underflow in double
            raise InputError(
                f"expected a value in {unit} between {PART_VALUE_RANGE[0]:g} and {PART_VALUE_RANGE[1]:g}, "
                f"found {plain[2]!r} = {value:g}",
                where=where,
                key=tokens[0],
            )
        nodes = tuple(self._node(n, prefix, nodemap) for n in plain[:2])
        self._add(Element(name, letter, nodes, value, line.number, self.source))

    def _vsource(self, line, tokens, scope, prefix, nodemap, name) -> None:
        where = self.where(line)
        if len(tokens) < 3:
            raise InputError(
                f"expected {tokens[0]} NODE+ NODE- [DC value] [AC mag], found {' '.join(tokens)!r}",
                where=where,
                key=tokens[0],
            )
        rest = tokens[3:]
        i = 0
        while i < len(rest):
            word = rest[i].lower()
            if word in ("dc", "ac"):
                i += 1
                count = 0
                while i < len(rest) and count < (2 if word == "ac" else 1) and _is_value(rest[i], scope):
                    evaluate(rest[i], scope, where, tokens[0])
                    i += 1
                    count += 1
                if word == "dc" and count == 0:
                    raise InputError("expected a value after DC", where=where, key=tokens[0])
            elif word in _TRANSIENT_FUNCTIONS:
                i += 1
                while i < len(rest) and _is_value(rest[i], scope):
                    i += 1
            elif _is_value(rest[i], scope) and i == 0:
                evaluate(rest[i], scope, where, tokens[0])
                i += 1
            else:
                raise InputError(
                    f"expected DC value, AC magnitude or a transient function, found {rest[i]!r}",
                    where=where,
                    key=tokens[0],
                )
        nodes = tuple(self._node(n, prefix, nodemap) for n in tokens[1:3])
        self._add(Element(name, "V", nodes, None, line.number, self.source))

    def _controlled(self, line, tokens, scope, prefix, nodemap, name) -> None:
        where = self.where(line)
        letter = name.split(".")[-1][0]
        what = "gain (V/V)" if letter == "E" else "transconductance (S)"
        if len(tokens) != 6:
            raise InputError(
                f"expected {tokens[0]} OUT+ OUT- IN+ IN- {what.split(' ')[0]}, found {len(tokens) - 1} "
                f"field(s) after the name (only the linear four-node form is supported)",
                where=where,
                key=tokens[0],
            )
        value = evaluate(tokens[5], scope, where, tokens[0])
        nodes = tuple(self._node(n, prefix, nodemap) for n in tokens[1:5])
        self._add(Element(name, letter, nodes, value, line.number, self.source))

    def _diode(self, line, tokens, scope, prefix, nodemap, name) -> None:
        where = self.where(line)
        plain, _extra = _split_params(tokens[1:], where, tokens[0])
        if len(plain) < 3:
            raise InputError(
                f"expected {tokens[0]} ANODE CATHODE MODEL, found {' '.join(tokens)!r}", where=where, key=tokens[0]
            )
        model_name = plain[2].upper()
        model = self.models.get(model_name)
        if model is None:
            raise InputError(
                f"diode model {plain[2]!r} is not defined; add .model {plain[2]} D (or D(BV=5.1) for a zener)",
                where=where,
                key=tokens[0],
            )
        if model.kind != "D":
            raise InputError(
                f"model {model_name} is of type {model.kind}, a diode needs type D", where=where, key=tokens[0]
            )
        params = {"vf": DIODE_FORWARD_V}
        mwhere = f"{self.source}:{model.line}"
        if "bv" in model.params:
            bv = evaluate(model.params["bv"], scope, mwhere, f".model {model_name} BV")
            if not bv > 0:
                raise InputError(f"BV must be positive, found {bv:g}", where=mwhere, key=f".model {model_name}")
            params["bv"] = bv
        nodes = tuple(self._node(n, prefix, nodemap) for n in plain[:2])
        self._add(Element(name, "D", nodes, None, line.number, self.source, model_name, tuple(sorted(params.items()))))

    def _instance(self, line, tokens, scope, prefix, nodemap, depth, name) -> None:
        where = self.where(line)
        plain, args = _split_params(tokens[1:], where, tokens[0])
        if len(plain) < 2:
            raise InputError(
                f"expected {tokens[0]} NODE ... SUBCIRCUIT, found {' '.join(tokens)!r}", where=where, key=tokens[0]
            )
        sub_name = plain[-1].upper()
        pins = [self._node(n, prefix, nodemap) for n in plain[:-1]]
        sub = self.subckts.get(sub_name)
        if sub is None and sub_name in BUILTIN_OPAMPS:
            pin_names, defaults = BUILTIN_OPAMPS[sub_name]
            if len(pins) != len(pin_names):
                raise InputError(
                    f"{sub_name} has {len(pin_names)} pins ({' '.join(pin_names)}: non-inverting input, "
                    f"inverting input, output), found {len(pins)}",
                    where=where,
                    key=tokens[0],
                )
            values = dict(defaults)
            for key, text in args.items():
                if key not in defaults:
                    known = ", ".join(defaults) or "none"
                    raise InputError(
                        f"{sub_name} has no parameter {key!r} (parameters: {known})", where=where, key=tokens[0]
                    )
                values[key] = evaluate(text, scope, where, f"{tokens[0]} {key}")
                if not values[key] > 0:
                    raise InputError(f"{key} must be positive, found {values[key]:g}", where=where, key=tokens[0])
            if pins[2] == GROUND:
                raise InputError("the op-amp output cannot be ground (0)", where=where, key=tokens[0])
            self._add(
                Element(
                    name, "OPAMP", tuple(pins), None, line.number, self.source, sub_name, tuple(sorted(values.items()))
                )
            )
            return
        if sub is None:
            known = ", ".join(sorted(set(self.subckts) | set(BUILTIN_OPAMPS)))
            raise InputError(f"unknown subcircuit {plain[-1]!r}; known: {known}", where=where, key=tokens[0])
        if depth >= _MAX_DEPTH:
            raise InputError(
                f"subcircuits nest deeper than {_MAX_DEPTH} levels (is {sub_name} instantiating itself?)",
                where=where,
                key=tokens[0],
            )
        if len(pins) != len(sub.pins):
            raise InputError(
                f"subcircuit {sub_name} has {len(sub.pins)} pins ({' '.join(sub.pins)}), found {len(pins)}",
                where=where,
                key=tokens[0],
            )
        for key in args:
            if key not in sub.defaults:
                raise InputError(f"subcircuit {sub_name} has no parameter {key!r}", where=where, key=tokens[0])
        local_raw = dict(sub.defaults)
        for key, text in args.items():
            # Evaluate instance arguments in the caller's scope, then freeze them as numbers.
            local_raw[key] = (repr(evaluate(text, scope, where, f"{tokens[0]} {key}")), where)
        global_scope = scope
        while global_scope.parent is not None:
            global_scope = global_scope.parent
        inner = _Scope(local_raw, global_scope)
        inner_map = dict(zip(sub.pins, pins))
        self.expand(sub.body, inner, f"{name}.", inner_map, depth + 1, set())


def _is_value(tok: str, scope: _Scope) -> bool:
    t = tok.strip()
    return bool(t) and (t[0].isdigit() or t[0] in "+-.{" or scope.knows(t))


def read_netlist(text: str, source: str = "netlist") -> Netlist:
    """Read a netlist (the whole file as text; the first line is the title) into a :class:`Netlist`.

    ``source`` names the file in error messages (``source:line: element: ...``). Raises
    :class:`~convert.errors.InputError` for anything outside the documented subset.
    """
    if not isinstance(text, str):
        raise InputError(f"expected the netlist as text, found {type(text).__name__}", where=source)
    if "\x00" in text:
        raise InputError("the netlist contains a NUL character (is it a binary file?)", where=source)
    title, lines = _logical_lines(text, source)
    reader = _Reader(source)
    first = title.split()[0].upper() if title.split() else ""
    if first[:1] in "RCLVEGDX" and len(title.split()) >= 3 and first[:1].isalpha():
        reader.notes.append(f"{source}:1: the first line is read as the title, as in every SPICE: {title[:40]!r}")
    if title.lower().startswith(".title"):
        title = title[len(".title") :].strip()
    top, params = reader.collect(lines)
    scope = _Scope(params)
    for key in params:  # evaluate every parameter once, so errors surface even if unused
        scope.lookup(key, params[key][1])
    count = reader.flat_count(top)
    if count > MAX_ELEMENTS:
        raise InputError(
            f"the netlist expands to more than {MAX_ELEMENTS:,} elements after flattening subcircuits; the limit is "
            f"{MAX_ELEMENTS:,} (convert.circuit.netlist.MAX_ELEMENTS)",
            where=source,
        )
    reader.expand(top, scope, "", {}, 0, set())
    if not reader.elements:
        raise InputError("the netlist has no elements (the first line is the title; elements follow it)", where=source)
    return Netlist(title, source, tuple(reader.elements), tuple(reader.notes), tuple(reader.warnings))


def read_netlist_file(path: str) -> Netlist:
    """Read a netlist file; errors name the file."""
    import os

    text = read_input_text(path, what="netlist")
    return read_netlist(text, source=os.path.basename(path) or path)
