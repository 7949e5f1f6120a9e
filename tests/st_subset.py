"""A reader for the subset of IEC 61131-3 Structured Text that loopshift emits, and a Python
translation that executes it (test tooling, independent of the emitter).

Subset: ``(* comments *)``; one ``FUNCTION_BLOCK name`` with ``VAR_INPUT``/``VAR_OUTPUT``/``VAR``
blocks of ``name : TYPE;`` (TYPE one of REAL, LREAL, BOOL); statements ``name := expr;`` and
``IF name THEN statements END_IF;``; expressions with ``+ - *``, unary minus, parentheses,
identifiers and decimal literals (``1.5``, ``2.0E-3``). REAL arithmetic rounds every operation
to IEEE single (IEC 61131-3 REAL is 32-bit), LREAL to double.
"""

from __future__ import annotations

import re

import numpy as np

TOKEN = re.compile(r"\s*(?:(?P<num>\d+\.\d+(?:E[-+]?\d+)?)|(?P<id>[A-Za-z_][A-Za-z0-9_]*)|(?P<op>:=|[-+*();:]))", re.I)
KEYWORDS = {
    "FUNCTION_BLOCK",
    "END_FUNCTION_BLOCK",
    "VAR_INPUT",
    "VAR_OUTPUT",
    "VAR",
    "END_VAR",
    "IF",
    "THEN",
    "END_IF",
    "REAL",
    "LREAL",
    "BOOL",
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
                if ty not in ("REAL", "LREAL", "BOOL"):
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
        if len(types) != 1:
            raise STError(f"mixed number types {types}")
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
                cond = self._ident()
                self._expect("THEN")
                out.append(("if", cond, self._statements(("END_IF",))))
                self._expect("END_IF")
                self._expect(";")
            else:
                target = self._ident()
                if target not in self.vars or self.kind[target] == "VAR_INPUT":
                    raise STError(f"assignment to {target}, which is not an output or a local variable")
                self._expect(":=")
                out.append(("set", target, self._expr()))
                self._expect(";")
        return out

    def _expr(self):
        node = self._term()
        while self._peek() in ("+", "-"):
            node = (self._next(), node, self._term())
        return node

    def _term(self):
        node = self._factor()
        while self._peek() == "*":
            self._next()
            node = ("*", node, self._factor())
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
        if tok in self.vars:
            return ("var", tok)
        raise STError(f"unknown name or token {tok}")

    # -- execution
    def instance(self) -> dict:
        zero = np.float32(0.0) if self.real == "REAL" else 0.0
        return {n: (False if ty == "BOOL" else zero) for n, ty in self.vars.items()}

    def call(self, env: dict, **inputs) -> dict:
        cast = np.float32 if self.real == "REAL" else float
        for k, v in inputs.items():
            env[k] = v if self.vars[k] == "BOOL" else cast(v)
        self._run(self.body, env, cast)
        return env

    def _run(self, stmts, env, cast) -> None:
        for s in stmts:
            if s[0] == "if":
                if env[s[1]]:
                    self._run(s[2], env, cast)
            else:
                env[s[1]] = self._eval(s[2], env, cast)

    def _eval(self, node, env, cast):
        op = node[0]
        if op == "num":
            return cast(float(node[1])) if cast is float else np.float32(node[1])
        if op == "var":
            return env[node[1]]
        if op == "neg":
            return -self._eval(node[1], env, cast)
        a, b = self._eval(node[1], env, cast), self._eval(node[2], env, cast)
        with np.errstate(over="ignore", invalid="ignore"):
            return a + b if op == "+" else a - b if op == "-" else a * b
