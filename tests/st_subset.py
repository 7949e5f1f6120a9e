"""A reader for the subset of IEC 61131-3 Structured Text that loopshift emits, and a Python
translation that executes it (test tooling, independent of the emitter).

Subset: ``(* comments *)``; one ``FUNCTION_BLOCK name`` with ``VAR_INPUT``/``VAR_OUTPUT``/``VAR``
blocks of ``name : TYPE;`` (TYPE one of REAL, LREAL, BOOL); statements ``name := expr;`` and
``IF cond THEN statements {ELSIF cond THEN statements} [ELSE statements] END_IF;``; expressions
with ``+ - *``, unary minus, parentheses, identifiers and decimal literals (``1.5``, ``2.0E-3``);
conditions: a BOOL name, comparisons ``< > <= >= = <>`` of expressions, ``AND``, ``OR``, ``NOT``
(precedence NOT, then AND, then OR, as IEC 61131-3 orders them). REAL arithmetic rounds every operation
to IEEE single (IEC 61131-3 REAL is 32-bit), LREAL to double.

Integers (the fixed-point blocks): types INT (16 bits), DINT (32), LINT (64); typed literals
``DINT#-5``; the conversions ``INT_TO_DINT``, ``DINT_TO_INT``, ``DINT_TO_LINT``,
``LINT_TO_DINT`` (a narrowing conversion of a value out of range is an error here); ``/`` on
integers truncates toward zero (IEC 61131-3). Typing is strict: both operands of an operator or
a comparison, and an assignment's two sides, have the same type (no implicit conversion); a result outside its type's range is an
error (the emitted code must never overflow).
"""

from __future__ import annotations

import re

import numpy as np

TOKEN = re.compile(
    r"\s*(?:(?P<int>(?:INT|DINT|LINT)#-?\d+)|(?P<num>\d+\.\d+(?:E[-+]?\d+)?)|(?P<id>[A-Za-z_][A-Za-z0-9_]*)"
    r"|(?P<op>:=|>=|<=|<>|[-+*/();:<>=]))",
    re.I,
)
INT_BITS = {"INT": 16, "DINT": 32, "LINT": 64}
CONVERSIONS = {f"{a}_TO_{b}": (a, b) for a in INT_BITS for b in INT_BITS if a != b}
KEYWORDS = {
    "FUNCTION_BLOCK",
    "END_FUNCTION_BLOCK",
    "VAR_INPUT",
    "VAR_OUTPUT",
    "VAR",
    "END_VAR",
    "IF",
    "THEN",
    "ELSIF",
    "ELSE",
    "END_IF",
    "AND",
    "OR",
    "NOT",
    "REAL",
    "LREAL",
    "BOOL",
    "INT",
    "DINT",
    "LINT",
}


class STError(ValueError):
    pass


def tokens(text: str) -> list[str]:
    text = re.sub(r"\(\*.*?\*\)", " ", text, flags=re.S)
    out, pos = [], 0
    while pos < len(text):
        if text[pos:].strip() == "":
            break
        m = TOKEN.match(text, pos)
        if not m:
            raise STError(f"unexpected text at {pos}: {text[pos : pos + 20]!r}")
        out.append(m.group(m.lastgroup))
        pos = m.end()
    return out


class FunctionBlock:
    def __init__(self, text: str):
        self.t = tokens(text)
        self.i = 0
        self.vars: dict[str, str] = {}
        self.kind: dict[str, str] = {}
        self._expect("FUNCTION_BLOCK")
        self.name = self._ident()
        while self._peek().upper() in ("VAR_INPUT", "VAR_OUTPUT", "VAR"):
            block = self._next().upper()
            while self._peek().upper() != "END_VAR":
                n = self._ident()
                self._expect(":")
                ty = self._next().upper()
                if ty not in ("REAL", "LREAL", "BOOL", *INT_BITS):
                    raise STError(f"type {ty} outside the subset")
                self._expect(";")
                if n in self.vars:
                    raise STError(f"{n} declared twice")
                self.vars[n], self.kind[n] = ty, block
            self._expect("END_VAR")
        self.body = self._statements(("END_FUNCTION_BLOCK",))
        self._expect("END_FUNCTION_BLOCK")
        if self.i != len(self.t):
            raise STError("text after END_FUNCTION_BLOCK")
        types = {v for v in self.vars.values() if v != "BOOL"}
        if types <= set(INT_BITS):
            self.real = None
            self.word = self.vars.get("x")
        elif len(types) != 1:
            raise STError(f"mixed number types {types}")
        else:
            self.real = types.pop()

    # -- parsing
    def _peek(self) -> str:
        return self.t[self.i] if self.i < len(self.t) else ""

    def _next(self) -> str:
        if self.i >= len(self.t):
            raise STError("unexpected end")
        self.i += 1
        return self.t[self.i - 1]

    def _expect(self, tok: str) -> None:
        got = self._next()
        if got.upper() != tok.upper():
            raise STError(f"expected {tok}, found {got}")

    def _ident(self) -> str:
        tok = self._next()
        if not re.fullmatch(r"[A-Za-z_]\w*", tok) or tok.upper() in KEYWORDS:
            raise STError(f"expected a name, found {tok}")
        return tok

    def _statements(self, stop) -> list:
        out = []
        while self._peek().upper() not in stop:
            if self._peek().upper() == "IF":
                self._next()
                branches = []
                cond = self._cond()
                self._expect("THEN")
                body = self._statements(("ELSIF", "ELSE", "END_IF"))
                branches.append((cond, body))
                while self._peek().upper() == "ELSIF":
                    self._next()
                    cond = self._cond()
                    self._expect("THEN")
                    branches.append((cond, self._statements(("ELSIF", "ELSE", "END_IF"))))
                other = []
                if self._peek().upper() == "ELSE":
                    self._next()
                    other = self._statements(("END_IF",))
                out.append(("if", branches, other))
                self._expect("END_IF")
                self._expect(";")
            else:
                target = self._ident()
                if target not in self.vars or self.kind[target] == "VAR_INPUT":
                    raise STError(f"assignment to {target}, which is not an output or a local variable")
                self._expect(":=")
                node, ty = self._typed(self._expr())
                if not _same(ty, self.vars[target]):
                    raise STError(f"{target} ({self.vars[target]}) := a {ty} expression")
                out.append(("set", target, node))
                self._expect(";")
        return out

    def _cond(self):
        """OR of ANDs of (NOT) comparisons or BOOL names."""
        node = self._and()
        while self._peek().upper() == "OR":
            self._next()
            node = ("or", node, self._and())
        return node

    def _and(self):
        node = self._not()
        while self._peek().upper() == "AND":
            self._next()
            node = ("and", node, self._not())
        return node

    def _not(self):
        if self._peek().upper() == "NOT":
            self._next()
            return ("not", self._not())
        if self._peek() == "(" and self._parenthesised_condition():
            self._next()
            node = self._cond()
            self._expect(")")
            return node
        if self._peek() in self.vars and self.vars[self._peek()] == "BOOL":
            return ("var", self._next())
        left, lt = self._typed(self._expr())
        op = self._next()
        if op not in ("<", ">", "<=", ">=", "=", "<>"):
            raise STError(f"expected a comparison, found {op}")
        right, rt = self._typed(self._expr())
        if not _same(lt, rt):
            raise STError(f"comparison of {lt} with {rt}")
        return ("cmp", op, left, right)

    def _parenthesised_condition(self) -> bool:
        """Whether the '(' at the cursor opens a condition (its matching ')' is not followed by an
        arithmetic operator or a comparison) rather than an arithmetic group."""
        depth, j = 0, self.i
        while j < len(self.t):
            if self.t[j] == "(":
                depth += 1
            elif self.t[j] == ")":
                depth -= 1
                if depth == 0:
                    break
            j += 1
        nxt = self.t[j + 1] if j + 1 < len(self.t) else ""
        return nxt not in ("+", "-", "*", "/", "<", ">", "<=", ">=", "=", "<>")

    def _typed(self, node):
        return node, self._type(node)

    def _type(self, node) -> str:
        """The type of an expression (strict: both operands of an operator the same type)."""
        cache = self.__dict__.setdefault("_types", {})
        key = id(node)
        if key not in cache:
            cache[key] = (node, self._type_of(node))  # the node is kept so its id stays its own
        return cache[key][1]

    def _type_of(self, node) -> str:
        op = node[0]
        if op == "num":
            return "ANY_REAL"
        if op == "int":
            return node[1]
        if op == "var":
            return self.vars[node[1]]
        if op == "conv":
            got = self._type(node[2])
            if got != CONVERSIONS[node[1]][0]:
                raise STError(f"{node[1]} applied to a {got}")
            return CONVERSIONS[node[1]][1]
        if op == "neg":
            return self._type(node[1])
        a, b = self._type(node[1]), self._type(node[2])
        if not _same(a, b):
            raise STError(f"{a} {op} {b}: mixed types need an explicit conversion")
        if op == "/" and (a not in INT_BITS or b not in INT_BITS):
            raise STError("division is in the subset for integers only")
        return b if a == "ANY_REAL" else a

    def _expr(self):
        node = self._term()
        while self._peek() in ("+", "-"):
            node = (self._next(), node, self._term())
        return node

    def _term(self):
        node = self._factor()
        while self._peek() in ("*", "/"):
            node = (self._next(), node, self._factor())
        return node

    def _factor(self):
        tok = self._next()
        if tok == "(":
            node = self._expr()
            self._expect(")")
            return node
        if tok == "-":
            return ("neg", self._factor())
        if re.fullmatch(r"\d+\.\d+(?:E[-+]?\d+)?", tok, re.I):
            return ("num", tok)
        if "#" in tok:
            ty, val = tok.upper().split("#")
            return ("int", ty, _in_range(int(val), ty))
        if tok.upper() in CONVERSIONS:
            self._expect("(")
            inner = self._expr()
            self._expect(")")
            return ("conv", tok.upper(), inner)
        if tok in self.vars:
            if self.vars[tok] == "BOOL":
                raise STError(f"BOOL {tok} used in arithmetic")
            return ("var", tok)
        raise STError(f"unknown name or token {tok}")

    # -- execution
    def instance(self) -> dict:
        zero = np.float32(0.0) if self.real == "REAL" else 0 if self.real is None else 0.0
        return {n: (False if ty == "BOOL" else zero) for n, ty in self.vars.items()}

    def call(self, env: dict, **inputs) -> dict:
        cast = np.float32 if self.real == "REAL" else float
        for k, v in inputs.items():
            ty = self.vars[k]
            env[k] = v if ty == "BOOL" else _in_range(int(v), ty) if ty in INT_BITS else cast(v)
        self._run(self.body, env, cast)
        return env

    def _run(self, stmts, env, cast) -> None:
        for s in stmts:
            if s[0] == "if":
                for cond, body in s[1]:
                    if self._test(cond, env, cast):
                        self._run(body, env, cast)
                        break
                else:
                    self._run(s[2], env, cast)
            else:
                env[s[1]] = self._eval(s[2], env, cast)

    def _test(self, node, env, cast) -> bool:
        op = node[0]
        if op == "var":
            return bool(env[node[1]])
        if op == "not":
            return not self._test(node[1], env, cast)
        if op == "and":
            return self._test(node[1], env, cast) and self._test(node[2], env, cast)
        if op == "or":
            return self._test(node[1], env, cast) or self._test(node[2], env, cast)
        a, b = self._eval(node[2], env, cast), self._eval(node[3], env, cast)
        return {"<": a < b, ">": a > b, "<=": a <= b, ">=": a >= b, "=": a == b, "<>": a != b}[node[1]]

    def _eval(self, node, env, cast):
        op = node[0]
        if op == "int":
            return node[2]
        if op == "conv":
            return _in_range(self._eval(node[2], env, cast), CONVERSIONS[node[1]][1])
        if op in ("+", "-", "*", "/") and self._type(node) in INT_BITS:
            a, b = self._eval(node[1], env, cast), self._eval(node[2], env, cast)
            if op == "/":
                q = abs(a) // abs(b)  # truncation toward zero
                v = q if (a >= 0) == (b > 0) else -q
            else:
                v = a + b if op == "+" else a - b if op == "-" else a * b
            return _in_range(v, self._type(node))
        if op == "neg" and self._type(node) in INT_BITS:
            return _in_range(-self._eval(node[1], env, cast), self._type(node))
        if op == "num":
            return cast(float(node[1])) if cast is float else np.float32(node[1])
        if op == "var":
            return env[node[1]]
        if op == "neg":
            return -self._eval(node[1], env, cast)
        a, b = self._eval(node[1], env, cast), self._eval(node[2], env, cast)
        with np.errstate(over="ignore", invalid="ignore"):
            return a + b if op == "+" else a - b if op == "-" else a * b


def _same(a: str, b: str) -> bool:
    return a == b or (a == "ANY_REAL" and b in ("REAL", "LREAL")) or (b == "ANY_REAL" and a in ("REAL", "LREAL"))


def _in_range(v: int, ty: str) -> int:
    bits = INT_BITS[ty]
    if not -(1 << (bits - 1)) <= v < (1 << (bits - 1)):
        raise STError(f"{v} overflows {ty}")
    return v
