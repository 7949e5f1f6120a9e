"""Transfer-function expressions: a small grammar of our own, read into exact polynomials.

Grammar (whitespace is free)::

    expression := term (("+" | "-") term)*
    term       := factor (("*" | "/")? factor)*        # juxtaposition multiplies: 0.02s, 2(s+1)
                                                    # but not right after a divisor: 1/30s is refused
    factor     := ("+" | "-") factor | power
    power      := atom (("^" | "**") exponent)?
    exponent   := ["+" | "-"] integer | "(" ["+" | "-"] integer ")"
    atom       := number | "s" | "z" | "(" expression ")"
    number     := digits ["." digits] [("e" | "E") ["+" | "-"] digits]

``s`` makes the expression analog; ``z`` (including ``z^-1``) makes it digital and needs a
sample rate. Numbers are read exactly (``0.1`` is the fraction 1/10), arithmetic is done on
exact rational polynomials, common factors of numerator and denominator are cancelled
exactly, and only the final coefficients become floats. Nothing is ever passed to ``eval``.

Errors name the column (1-based) of the offending character.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from fractions import Fraction

from convert.errors import InputError
from convert.limits import MAX_DEGREE, MAX_EXPONENT, MAX_EXPRESSION_CHARS, MAX_NESTING, MAX_NUMBER_DIGITS, excerpt

Poly = tuple[Fraction, ...]  # ascending powers of the variable, no trailing zeros (zero poly = ())

_TOKEN_RE = re.compile(
    r"(?P<ws>\s+)|(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)|(?P<name>[A-Za-z_µ][A-Za-z_0-9µ]*)"
    r"|(?P<op>\*\*|[-+*/^()])"
)


@dataclass(frozen=True)
class _Token:
    kind: str  # "num", "name", "op", "end"
    text: str
    column: int  # 1-based


# ----------------------------------------------------------------------------- polynomials
def _trim(p: list[Fraction]) -> Poly:
    while p and p[-1] == 0:
        p.pop()
    return tuple(p)


def _padd(a: Poly, b: Poly) -> Poly:
    n = max(len(a), len(b))
    return _trim([(a[i] if i < len(a) else 0) + (b[i] if i < len(b) else 0) for i in range(n)])


def _pneg(a: Poly) -> Poly:
    return tuple(-c for c in a)


def _pmul(a: Poly, b: Poly) -> Poly:
    if not a or not b:
        return ()
    out = [Fraction(0)] * (len(a) + len(b) - 1)
    for i, ca in enumerate(a):
        if ca:
            for j, cb in enumerate(b):
                out[i + j] += ca * cb
    return _trim(out)


def _pdivmod(a: Poly, b: Poly) -> tuple[Poly, Poly]:
    rem = list(a)
    quot = [Fraction(0)] * max(len(a) - len(b) + 1, 0)
    lead = b[-1]
    for shift in range(len(a) - len(b), -1, -1):
        coef = rem[shift + len(b) - 1] / lead
        quot[shift] = coef
        if coef:
            for j, cb in enumerate(b):
                rem[shift + j] -= coef * cb
    return _trim(quot), _trim(rem[: len(b) - 1])


def _pgcd(a: Poly, b: Poly) -> Poly:
    """Monic greatest common divisor of two exact polynomials (ascending coefficients).

    Euclid's algorithm over the rationals lets the coefficients of the remainders grow
    explosively (a sum of 30 first-order terms with 20-digit constants took 30 s), so the
    remainders are computed over the integers as a primitive remainder sequence: each pseudo-
    remainder is divided by the gcd of its coefficients, which keeps them at the size of the
    subresultants (common practice; from memory: Knuth, TAOCP vol. 2, 4.6.1).
    """
    x, y = _primitive(a), _primitive(b)
    if len(x) < len(y):
        x, y = y, x
    if y and _coprime_modulo_primes(x, y):
        return (Fraction(1),)
    size = len(x) * max(abs(c).bit_length() for c in x + y)
    if size > _MAX_GCD_SIZE:
        raise _TooLarge(size)
    while y:
        x, y = y, _primitive(_pseudo_remainder(x, y))
    if not x:
        return (Fraction(1),)
    lead = x[-1]
    return tuple(Fraction(c, lead) for c in x)


#: degree x coefficient bits above which the exact common-factor search is refused (about 2 s)
_MAX_GCD_SIZE = 60_000


class _TooLarge(Exception):
    """The exact polynomials are too large to search for a common factor quickly."""


_PRIMES = (2**61 - 1, 2**31 - 1, 1_000_000_007)


def _coprime_modulo_primes(a: tuple[int, ...], b: tuple[int, ...]) -> bool:
    """True when a and b (integer coefficients) certainly have no common factor.

    Modulo a prime p that divides neither leading coefficient, the gcd of the images has at
    least the degree of the true gcd; so a constant gcd modulo one such prime proves that a
    and b are coprime (the usual case, decided in a few thousand small operations)."""
    for p in _PRIMES:
        if a[-1] % p == 0 or b[-1] % p == 0:
            continue
        x = [c % p for c in a]
        y = [c % p for c in b]
        while True:
            while y and y[-1] == 0:
                y.pop()
            if not y:
                break
            if len(y) == 1:
                return True
            inv = pow(y[-1], -1, p)
            while len(x) >= len(y):
                f = x[-1] * inv % p
                shift = len(x) - len(y)
                for j, cy in enumerate(y):
                    x[shift + j] = (x[shift + j] - f * cy) % p
                x.pop()
                while x and x[-1] == 0:
                    x.pop()
                if not x:
                    break
            x, y = y, x
        # a non-trivial gcd modulo p: a common factor is likely; let the exact sequence find it
        return False
    return False


def _primitive(p) -> tuple[int, ...]:
    """Integer coefficients proportional to ``p`` with no common factor (ascending)."""
    if not p:
        return ()
    scale = 1
    for c in p:
        d = Fraction(c).denominator
        scale = scale * d // math.gcd(scale, d)
    ints = [int(Fraction(c) * scale) for c in p]
    g = 0
    for c in ints:
        g = math.gcd(g, c)
    return tuple(c // g for c in ints)


def _pseudo_remainder(a: tuple[int, ...], b: tuple[int, ...]) -> tuple[int, ...]:
    """Remainder of lead(b)^k · a divided by b over the integers (ascending coefficients)."""
    rem = list(a)
    lead = b[-1]
    n = len(b) - 1
    while len(rem) - 1 >= n and rem:
        shift = len(rem) - 1 - n
        top = rem[-1]
        rem = [c * lead for c in rem]
        for j, cb in enumerate(b):
            rem[shift + j] -= top * cb
        while rem and rem[-1] == 0:
            rem.pop()
    return tuple(rem)


ONE: Poly = (Fraction(1),)
VAR: Poly = (Fraction(0), Fraction(1))


@dataclass(frozen=True)
class Rational:
    """An exact rational function num/den in one variable; coefficients ascending."""

    num: Poly
    den: Poly

    def __add__(self, o: Rational) -> Rational:
        return Rational(_padd(_pmul(self.num, o.den), _pmul(o.num, self.den)), _pmul(self.den, o.den))

    def __neg__(self) -> Rational:
        return Rational(_pneg(self.num), self.den)

    def __sub__(self, o: Rational) -> Rational:
        return self + (-o)

    def __mul__(self, o: Rational) -> Rational:
        return Rational(_pmul(self.num, o.num), _pmul(self.den, o.den))

    def reduced(self, g: Poly | None = None) -> Rational:
        """Cancel common factors exactly (``g``: their product, when already known) and make the
        denominator monic."""
        if not self.num:
            return Rational((), ONE)
        if g is None:
            g = _pgcd(self.num, self.den)
        num, den = self.num, self.den
        if len(g) > 1:
            num = _pdivmod(num, g)[0]
            den = _pdivmod(den, g)[0]
        lead = den[-1]
        return Rational(tuple(c / lead for c in num), tuple(c / lead for c in den))


def _const(value: Fraction) -> Rational:
    return Rational(_trim([value]), ONE)


# ----------------------------------------------------------------------------- parser
@dataclass(frozen=True)
class ParsedExpression:
    """Result of :func:`parse_rational`.

    ``num`` and ``den`` are exact coefficients in *descending* powers of ``variable``
    (``"s"``, ``"z"``, or ``None`` for a constant); ``den`` is monic. ``cancelled`` is the
    exact common factor removed from both (descending, monic), or ``None``.
    """

    num: tuple[Fraction, ...]
    den: tuple[Fraction, ...]
    variable: str | None
    cancelled: tuple[Fraction, ...] | None


class _Parser:
    def __init__(self, text: str, label: str):
        self.text = text
        self.label = label
        self.depth = 0  # parentheses and unary signs open around the current position
        self.tokens = self._tokenize()
        self.pos = 0
        self.variables: set[str] = set()
        self.first_var_column: dict[str, int] = {}

    # -- errors
    def error(self, column: int, message: str) -> InputError:
        return InputError(f"{message} (in {excerpt(self.text)})", where=f"{self.label} column {column}")

    # -- bounds (docs/reliability.md): checked as the expression is read, before the work grows
    def _enter(self, tok: _Token) -> None:
        self.depth += 1
        if self.depth > MAX_NESTING:
            raise self.error(
                tok.column,
                f"parentheses and signs are nested more than {MAX_NESTING} deep "
                "(the limit of the expression reader); write the expression flatter",
            )

    def _bounded(self, value: Rational, tok: _Token) -> Rational:
        degree = max(len(value.num), len(value.den)) - 1
        if degree > MAX_DEGREE:
            raise self.error(
                tok.column,
                f"the expression reaches degree {degree} here; the reader stops at degree "
                f"{MAX_DEGREE} (a controller has a handful of poles and zeros)",
            )
        return value

    # -- lexing
    def _tokenize(self) -> list[_Token]:
        if len(self.text) > MAX_EXPRESSION_CHARS:
            raise InputError(
                f"the expression has {len(self.text):,} characters; the reader takes at most "
                f"{MAX_EXPRESSION_CHARS:,} (in {excerpt(self.text)})",
                where=self.label,
            )
        out: list[_Token] = []
        i = 0
        while i < len(self.text):
            m = _TOKEN_RE.match(self.text, i)
            if not m:
                ch = self.text[i]
                raise self.error(i + 1, f"unexpected character {ch!r}; allowed: numbers, s, z, + - * / ^ ( )")
            kind = m.lastgroup
            if kind != "ws":
                out.append(_Token(kind, m.group(), i + 1))
            i = m.end()
        out.append(_Token("end", "", len(self.text) + 1))
        return out

    def peek(self) -> _Token:
        return self.tokens[self.pos]

    def take(self) -> _Token:
        tok = self.tokens[self.pos]
        self.pos += 1
        return tok

    def describe(self, tok: _Token) -> str:
        return "the end of the expression" if tok.kind == "end" else repr(tok.text)

    # -- grammar
    def parse(self) -> Rational:
        if self.peek().kind == "end":
            raise self.error(1, "expected an expression, found nothing")
        value = self.expression()
        tok = self.peek()
        if tok.kind != "end":
            raise self.error(tok.column, f"expected an operator or the end, found {self.describe(tok)}")
        return value

    def expression(self) -> Rational:
        value = self.term()
        while self.peek().kind == "op" and self.peek().text in "+-":
            op = self.take()
            rhs = self.term()
            value = self._bounded(value + rhs if op.text == "+" else value - rhs, op)
        return value

    def _starts_factor(self, tok: _Token) -> bool:
        # Juxtaposition multiplies only before a name or "(": "0.02s", "2(s+1)", "s(s+1)".
        # Two numbers side by side ("3 4") are refused as an error instead.
        return tok.kind == "name" or (tok.kind == "op" and tok.text == "(")

    def term(self) -> Rational:
        start = self.peek().column
        value = self.factor()
        divided = None  # (column of '/', first column of its divisor) while the divisor is the last factor
        while True:
            tok = self.peek()
            if tok.kind == "op" and tok.text in ("*", "/"):
                self.take()
                divisor_column = self.peek().column
                rhs = self.factor()
                divided = (tok.column, divisor_column) if tok.text == "/" else None
                if tok.text == "*":
                    value = self._bounded(value * rhs, tok)
                else:
                    if not rhs.num:
                        raise self.error(tok.column, "division by zero (the divisor is identically 0)")
                    value = self._bounded(value * Rational(rhs.den, rhs.num), tok)
            elif self._starts_factor(tok):
                if divided is not None:
                    self._refuse_ambiguous(start, *divided, tok.column)
                value = self._bounded(value * self.factor(), tok)
            else:
                return value

    def _refuse_ambiguous(self, start: int, slash: int, divisor: int, after: int) -> None:
        """Juxtaposition right after a divisor (``1/30s``, ``0.2/(40s+1)(8s+1)``) reads two ways:
        left to right (``(1/30)*s``) or as one product under the bar (``1/(30*s)``). Refused with both."""
        self.factor()
        end = self.peek().column
        text = self.text
        head, under, extra = (
            text[start - 1 : slash - 1].strip(),
            text[divisor - 1 : after - 1].strip(),
            text[after - 1 : end - 1].strip(),
        )
        written = text[start - 1 : end - 1].strip()
        raise self.error(
            after,
            f"{written!r} is ambiguous: a product written without '*' after a division reads "
            f"as ({head}/{under})*{extra} or as {head}/({under}*{extra}); write the one you "
            "mean with '*' and parentheses",
        )

    def factor(self) -> Rational:
        tok = self.peek()
        if tok.kind == "op" and tok.text in "+-":
            self.take()
            self._enter(tok)
            inner = self.factor()
            self.depth -= 1
            return -inner if tok.text == "-" else inner
        return self.power()

    def power(self) -> Rational:
        base = self.atom()
        tok = self.peek()
        if tok.kind == "op" and tok.text in ("^", "**"):
            self.take()
            exponent = self.exponent()
            if exponent < 0:
                if not base.num:
                    raise self.error(tok.column, "zero raised to a negative power")
                base = Rational(base.den, base.num)
                exponent = -exponent
            grown = max(len(base.num), len(base.den), 1) - 1
            if grown * exponent > MAX_DEGREE:  # refused before the work
                raise self.error(
                    tok.column,
                    f"this power reaches degree {grown * exponent}; the reader stops at "
                    f"degree {MAX_DEGREE} (a controller has a handful of poles and zeros)",
                )
            result = _const(Fraction(1))
            for _ in range(exponent):
                result = result * base
            return result
        return base

    def exponent(self) -> int:
        tok = self.peek()
        paren = tok.kind == "op" and tok.text == "("
        if paren:
            self.take()
        sign = 1
        tok = self.peek()
        if tok.kind == "op" and tok.text in "+-":
            self.take()
            sign = -1 if tok.text == "-" else 1
        tok = self.take()
        if tok.kind != "num" or not tok.text.isdigit():
            raise self.error(tok.column, f"expected a whole-number power, found {self.describe(tok)}")
        if len(tok.text) > 3:
            raise self.error(
                tok.column, f"power {tok.text[:20]}{'…' if len(tok.text) > 20 else ''} is too large (64 at most)"
            )
        value = int(tok.text)
        if value > 64:
            raise self.error(tok.column, f"power {value} is too large (64 at most)")
        if paren:
            close = self.take()
            if not (close.kind == "op" and close.text == ")"):
                raise self.error(close.column, f"expected ')', found {self.describe(close)}")
        return sign * value

    def _number(self, tok: _Token) -> Fraction:
        # Bound the size so a typo such as 1e999999999 is an error, not a huge exact integer.
        mantissa, _, exp = tok.text.lower().partition("e")
        digits = exp.lstrip("+-").lstrip("0")
        if len(mantissa) > MAX_NUMBER_DIGITS or len(digits) > 4 or (digits and int(digits) > MAX_EXPONENT):
            raise self.error(
                tok.column,
                f"the number {excerpt(tok.text, 20)} is out of range (at most "
                f"{MAX_NUMBER_DIGITS} digits, exponent ±{MAX_EXPONENT})",
            )
        return Fraction(tok.text)

    def atom(self) -> Rational:
        tok = self.take()
        if tok.kind == "num":
            return _const(self._number(tok))
        if tok.kind == "name":
            name = tok.text
            if name in ("s", "z"):
                self.variables.add(name)
                self.first_var_column.setdefault(name, tok.column)
                return Rational(VAR, ONE)
            hint = ""
            if len(name) > 1 and name[0] in "sz" and all(c in "sz" for c in name):
                hint = f"; write products with '*' (e.g. {'*'.join(name)})"
            elif name.startswith("s") or name.startswith("z"):
                hint = "; put '*' between a variable and what follows (e.g. s*2)"
            raise self.error(tok.column, f"unknown name {name!r}; use s (analog) or z / z^-1 (digital){hint}")
        if tok.kind == "op" and tok.text == "(":
            self._enter(tok)
            inner = self.expression()
            self.depth -= 1
            close = self.take()
            if not (close.kind == "op" and close.text == ")"):
                raise self.error(
                    close.column, f"expected ')' to close the '(' at column {tok.column}, found {self.describe(close)}"
                )
            return inner
        raise self.error(tok.column, f"expected a number, s, z or '(', found {self.describe(tok)}")


def parse_rational(text: str, *, label: str = "expression") -> ParsedExpression:
    """Parse ``text`` into exact num/den coefficients (descending powers), cancelling common factors.

    ``label`` names the source in errors, e.g. ``"expression"`` or ``"case.toml:7: source.expression"``.
    """
    if not isinstance(text, str):
        raise InputError(f"expected an expression as text, found {type(text).__name__}", where=label)
    parser = _Parser(text, label)
    value = parser.parse()
    if len(parser.variables) > 1:
        col = max(parser.first_var_column.values())
        raise parser.error(col, "an expression uses s (analog) or z (digital), not both")
    if not value.den:
        raise parser.error(1, "division by zero")
    if not value.num:
        raise parser.error(1, "the expression is identically zero; a transfer function needs a non-zero gain")
    try:
        g = _pgcd(value.num, value.den)
    except _TooLarge:
        raise parser.error(
            1,
            "the exact coefficients are too large to cancel common factors quickly (degree "
            f"{len(value.den) - 1} with numbers of thousands of digits); round the constants "
            "or multiply out fewer factors",
        ) from None
    reduced = value.reduced(g)
    cancelled = tuple(reversed(g)) if len(g) > 1 else None
    variable = next(iter(parser.variables)) if parser.variables else None
    return ParsedExpression(tuple(reversed(reduced.num)), tuple(reversed(reduced.den)), variable, cancelled)


def number_spans(text: str) -> list[tuple[int, int]]:
    """``(start, end)`` offsets (0-based, end exclusive) of every number in ``text`` as the
    grammar reads it; used to learn how many digits each coefficient was written with."""
    return [(m.start(), m.end()) for m in _TOKEN_RE.finditer(text) if m.lastgroup == "num"]


def format_polynomial(coefs_desc, variable: str = "s", digits: int = 6) -> str:
    """Write coefficients (descending powers) as text this grammar reads back, e.g. ``0.5*s^2 + 3*s + 1``.

    Coefficients that are :class:`fractions.Fraction` are written exactly; floats with
    ``digits`` significant digits (``repr`` when ``digits`` is ``None``).
    """
    coefs = list(coefs_desc)
    degree = len(coefs) - 1
    terms: list[tuple[str, str]] = []
    for i, c in enumerate(coefs):
        if c == 0:
            continue
        power = degree - i
        if isinstance(c, Fraction):
            mag = abs(c)
            mag_text = str(mag.numerator) if mag.denominator == 1 else f"({mag.numerator}/{mag.denominator})"
        else:
            mag = abs(float(c))
            mag_text = repr(mag) if digits is None else f"{mag:.{digits}g}"
        var = "" if power == 0 else (variable if power == 1 else f"{variable}^{power}")
        if var and mag == 1:
            body = var
        elif var:
            body = f"{mag_text}*{var}"
        else:
            body = mag_text
        sign = "-" if c < 0 else "+"
        terms.append((sign, body))
    if not terms:
        return "0"
    first_sign, first = terms[0]
    text = ("-" if first_sign == "-" else "") + first
    for sign, body in terms[1:]:
        text += f" {sign} {body}"
    return text
