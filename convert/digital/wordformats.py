"""Word formats: how firmware stores coefficients and signals, one small definition each.

Floating point (``float64``, ``float32``): every multiply and every add is rounded to the
format (IEEE 754 round to nearest even), in the order the structure's model writes it — the
order the generated C uses (ISO C99 mode, no fused multiply-add).

Fixed point Q-format (``q15``: 16-bit words, 32-bit accumulator; ``q31``: 32-bit words, 64-bit
accumulator): a signal word ``v`` stands for ``v / 2^(W-1)`` of its node's full scale (the
scale is chosen per node from the stated input range, see :mod:`convert.digital.fixedpoint`).
Coefficients are stored as ``c · 2^(W-1-k)`` rounded to the nearest integer (ties away from
zero), with a per-section headroom shift ``k``. Products are summed exactly in the accumulator
(the shift ``k`` is chosen so the sum cannot overflow it), then shifted right by ``W-1-k`` with
rounding half up (add half an LSB, then floor), then saturated to the word. (A format with
``rounding="floor"`` truncates instead, as CMSIS-DSP's Q15/Q31 direct-form-I biquads do; the
tests use it to check the model against that library.) Inputs are rounded
the same way and saturated.
"""

from __future__ import annotations

from dataclasses import dataclass

from convert.errors import InputError


@dataclass(frozen=True)
class WordFormat:
    """``kind`` "float" or "fixed"; ``bits`` word length; ``accumulator_bits`` (fixed point);
    ``c_type`` the C type of a signal word; ``mantissa_bits`` (float: significand bits incl. the
    hidden one)."""

    name: str
    kind: str
    bits: int
    c_type: str
    accumulator_bits: int = 0
    accumulator_c_type: str = ""
    mantissa_bits: int = 0
    max_value: float = 0.0
    label: str = ""
    rounding: str = "half-up"  # fixed point after a shift: "half-up" (add half an LSB, floor) or "floor"

    @property
    def is_fixed(self) -> bool:
        return self.kind == "fixed"

    @property
    def word_min(self) -> int:
        return -(1 << (self.bits - 1))

    @property
    def word_max(self) -> int:
        return (1 << (self.bits - 1)) - 1


FORMATS: dict[str, WordFormat] = {
    "float64": WordFormat(
        "float64", "float", 64, "double", mantissa_bits=53, max_value=1.7976931348623157e308, label="IEEE 754 double"
    ),
    "float32": WordFormat(
        "float32", "float", 32, "float", mantissa_bits=24, max_value=3.4028234663852886e38, label="IEEE 754 single"
    ),
    "q15": WordFormat("q15", "fixed", 16, "int16_t", 32, "int32_t", label="Q15: 16-bit words, 32-bit accumulator"),
    "q31": WordFormat("q31", "fixed", 32, "int32_t", 64, "int64_t", label="Q31: 32-bit words, 64-bit accumulator"),
}


def get_format(name: str, *, key: str = "word_format") -> WordFormat:
    try:
        return FORMATS[str(name).lower()]
    except KeyError:
        raise InputError(f"unknown word format {name!r}; expected one of {', '.join(FORMATS)}", key=key) from None


def quantize_coefficient(c: float, frac_bits: int) -> int:
    """``c · 2^frac_bits`` rounded to the nearest integer, ties away from zero."""
    import math

    v = c * 2.0**frac_bits
    return int(math.copysign(math.floor(abs(v) + 0.5), v))
