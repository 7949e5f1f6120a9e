"""Printed coefficients: how many digits a digital controller was given with, and the poles
that lie within that rounding of z = 1 (integrators written with finite digits).

A tool that prints a PID's coefficients to six digits turns the integrator's exact pole at
z = 1 into a pole a few 1e-7 inside or outside the unit circle. Read literally, the analog
equivalent then has a pole at a picohertz corner, in the right half plane half of the time.
The rule (docs/digital.md, "Printed coefficients"):

* **Printed precision.** Each denominator coefficient is known to half a unit in its last
  written decimal place: ``0.818182`` to ±5e-7, ``-1.9802`` to ±5e-5 — but no worse than the
  printout's precision: a value written shorter than the longest coefficient printed with it
  (``1.5`` beside ``0.980198``; tools drop trailing zeros) is known to as many significant
  digits as that one. Whole numbers (``1``, ``-2``, a float equal to an integer) are exact.
  Text keeps its digits as written (``"1.000000"`` is ±5e-7); a float given in Python is
  taken at its shortest round-trip decimal form (``repr``), so computed floats (16–17 digits)
  are trusted to about 1e-17 and nothing but a pole already at z = 1 to within rounding of the
  arithmetic is moved.
* **Within rounding of z = 1.** The denominator D(z) has m poles at z = 1 within its printed
  precision when coefficients, each moved by no more than its own rounding, make D and its
  first m − 1 derivatives vanish at z = 1 (for m = 1 this is exactly |D(1)| ≤ Σ radius). The
  controller is then read with those coefficients: m integrators, and a note says so.
"""

from __future__ import annotations

import math
from decimal import Decimal, InvalidOperation
from collections.abc import Sequence

import numpy as np

from convert.controller import Controller, from_expression
from convert.errors import LoopshiftError
from convert.expr import number_spans
from convert.digital.roots import RootForm


def _decimal(value) -> Decimal | None:
    """The value as written: text as given, a number at its shortest round-trip form; None for
    whole numbers (exact) and what is not a decimal number."""
    if isinstance(value, str):
        text = value.strip()
        if not any(c in text for c in ".eE"):
            return None
    else:
        number = float(value)
        if not math.isfinite(number) or number == int(number):
            return None
        text = repr(number)
    try:
        out = Decimal(text)
    except InvalidOperation:
        return None
    return out if out.is_finite() and out != 0 else None


def significant_digits(value) -> int:
    """Significant digits ``value`` was written with (0 for whole numbers): ``"0.980198"`` 6."""
    d = _decimal(value)
    return 0 if d is None else len(d.normalize().as_tuple().digits)


def printed_radius(value, digits: int | None = None) -> float:
    """Half a unit in the last decimal place of ``value`` as written (0 for whole numbers).

    ``value`` is the text as given (``"0.818182"``, ``"1.000000"``, ``"2.5e-3"``) or a number,
    taken at its shortest round-trip decimal form (``repr``). ``digits``: the significant digits
    of the printout it came from; a value written shorter (``1.5`` beside ``0.980198``: a tool
    printing to 6 digits drops trailing zeros) is known to that many digits, not fewer."""
    d = _decimal(value)
    if d is None:
        return 0.0
    exponent = d.as_tuple().exponent
    if not isinstance(exponent, int):
        return 0.0
    radius = 0.5 * 10.0**exponent
    if digits:
        lead = d.adjusted()  # decimal exponent of the leading digit
        radius = min(radius, 0.5 * 10.0 ** (lead - digits + 1))
    return radius


def printed_radii(values: Sequence, printout: Sequence = ()) -> list[float]:
    """:func:`printed_radius` of each of ``values``, the printout's digits being the most
    significant digits any of ``values`` or ``printout`` (the other coefficients printed with
    them) was written with."""
    digits = max([significant_digits(v) for v in [*values, *printout]] + [0])
    return [printed_radius(v, digits) for v in values]


def expression_den_radius(text: str, fs_hz: float) -> list[float] | None:
    """The rounding of each denominator coefficient (descending powers of z, monic) of the
    expression ``text`` in z, from the digits each number in it was written with: every number
    moved by its own rounding changes the coefficients, and each coefficient's rounding is the sum
    of those changes (first order; exact when each number is one coefficient, as in b/a form).
    ``None`` when the expression cannot be read that way (then the stored floats decide)."""
    try:
        base = from_expression(text, fs_hz=fs_hz)
    except LoopshiftError:
        return None
    den = np.asarray(base.den, dtype=float)
    total = np.zeros_like(den)
    spans = number_spans(text)
    digits = max([significant_digits(text[a:b]) for a, b in spans] + [0])
    for start, end in spans:
        token = text[start:end]
        r = printed_radius(token, digits)
        if r == 0:
            continue
        bumped = text[:start] + format(Decimal(token) + Decimal(repr(r)), "f") + text[end:]
        try:
            other = from_expression(bumped, fs_hz=fs_hz)
        except LoopshiftError:
            return None
        if len(other.den) != den.size:  # an exact cancellation the rounding undoes: no first-order picture
            return None
        total += np.abs(np.asarray(other.den) - den)
    return list(total)


def _falling(power: int, order: int) -> float:
    out = 1.0
    for i in range(order):
        out *= power - i
    return out


def snap_to_integrators(den: Sequence[float], radius: Sequence[float]) -> tuple[np.ndarray, int]:
    """``(den', m)``: the coefficients (descending powers of z) moved, each within its
    ``radius``, so that D has m poles exactly at z = 1 — the largest such m; ``den`` unchanged
    and m = 0 when even one is out of reach. The move is the least one weighted by the radii
    (for m = 1: each coefficient moved by D(1)·radius/Σradius)."""
    d = np.asarray(den, dtype=float)
    r = np.asarray(radius, dtype=float)
    n = d.size - 1
    best, best_m = d, 0
    for m in range(1, n + 1):
        # rows: the i-th derivative of D at z = 1, as a linear form in the coefficients
        a = np.array([[_falling(n - k, i) for k in range(n + 1)] for i in range(m)])
        w = r
        lhs = (a * w) @ a.T
        if np.linalg.matrix_rank(lhs) < m:
            break
        delta = -w * (a.T @ np.linalg.solve(lhs, a @ d))
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(r > 0, np.abs(delta) / np.where(r > 0, r, 1.0), np.where(delta == 0, 0.0, np.inf))
        if not np.all(ratio <= 1.0 + 1e-9):
            break
        best, best_m = d + delta, m
    return best, best_m


def printed_integrators(digital: Controller, den_radius: Sequence[float] | None = None) -> tuple[Controller, list[str]]:
    """The digital controller with poles that lie within the rounding of its printed
    coefficients of z = 1 read as integrators, and a note for each move (empty when nothing moved).

    ``den_radius``: the rounding of each denominator coefficient (descending powers of z, the
    denominator made monic), when the caller has the text as written; default: from the stored
    floats (:func:`printed_radius`)."""
    if not digital.is_digital or len(digital.den) < 2:
        return digital, []
    den = np.asarray(digital.den, dtype=float)
    radius = (
        np.array(printed_radii(list(den), list(digital.num)))
        if den_radius is None
        else np.asarray(den_radius, dtype=float)
    )
    if radius.shape != den.shape:
        raise ValueError("den_radius must have one entry per denominator coefficient")
    before = _exact_integrators(digital)
    snapped, m = snap_to_integrators(den, radius)
    if m <= before:
        return digital, []
    moved = Controller.digital(digital.num, tuple(snapped), digital.sample_period_s, digital.name)
    if _exact_integrators(moved) <= before:  # pragma: no cover - the move is exact to rounding of the sum
        return digital, []
    roots = np.roots(den)
    near = sorted(roots, key=lambda z: abs(z - 1))[: m - before]
    t = digital.sample_period_s
    shown = ", ".join(_near_one(z) for z in near)
    corners = []
    for z in near:
        s = np.log(complex(z)) / t
        side = "right" if s.real > 0 else "left"
        corners.append(f"a {side}-half-plane pole at {abs(s) / (2 * math.pi):.2g} Hz")
    largest = float(np.max(np.abs(snapped - den) / np.where(radius > 0, radius, 1.0)))
    count = m - before
    what = "an integrator" if count == 1 else f"{count} integrators"
    note = (
        f"the pole{'s' if count > 1 else ''} at z = {shown} lie{'' if count > 1 else 's'} within the rounding of "
        f"the printed coefficients (±{_radii_text(radius)}) of z = 1: read as {what}, each coefficient moved by at "
        f"most {largest:.2g} of its rounding (taken literally: {', '.join(corners)})"
    )
    notes = [note]
    num = np.asarray(digital.num, dtype=float)
    at_one, spread = float(np.sum(num)), float(np.sum(printed_radii(list(num), list(den))))
    if abs(at_one) <= spread:
        notes.append(
            f"the numerator sums to {at_one:.3g} (±{spread:.2g} from its printed digits): the integral gain "
            "(the numerator at z = 1) is not carried by these digits and the integrator may cancel against a "
            "zero at z = 1; print the coefficients with more digits"
        )
    return moved, notes


def _exact_integrators(digital: Controller) -> int:
    """Poles the conversions take as exactly z = 1 (the root form divides them out)."""
    return sum(1 for p in RootForm.of(digital).poles if p == 1.0)


def _near_one(z: complex) -> str:
    z = complex(z)
    if abs(z.imag) > 1e-15:
        return f"1 {'+' if z.real >= 1 else '−'} {abs(z.real - 1):.2g} {'+' if z.imag >= 0 else '−'} {abs(z.imag):.2g}j"
    return f"1 {'+' if z.real >= 1 else '−'} {abs(z.real - 1):.2g}"


def _radii_text(radius: np.ndarray) -> str:
    nonzero = sorted({float(f"{r:.3g}") for r in radius if r > 0})
    return " / ".join(f"{r:g}" for r in nonzero[-3:]) if nonzero else "0"
