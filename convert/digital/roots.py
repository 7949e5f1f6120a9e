"""Zeros/poles/gain form of a controller, kept beside the polynomial form.

The conversions compute roots directly (a pole p maps to e^{pT}, not to a root of a rounded
polynomial), so this form stays accurate where the direct-form coefficients lose digits at
high fs / corner ratios. Convention: ``C(x) = gain · Π(x − zeros) / Π(x − poles)`` with ``x``
= s (analog, ``sample_period_s is None``) or z (digital).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from convert.controller import Controller


@dataclass(frozen=True)
class RootForm:
    zeros: tuple[complex, ...]
    poles: tuple[complex, ...]
    gain: float
    sample_period_s: float | None = None

    @classmethod
    def of(cls, controller: Controller) -> RootForm:
        """Roots of the controller's polynomials (:meth:`Controller.zeros`/``poles``). Roots at s = 0
        (analog) or z = ±1 (digital) — integrators, washouts, Nyquist zeros — are exact, and a
        repeated root is found as one root with its multiplicity (:mod:`convert.polyroots`), since
        a repeated root found by an eigenvalue solver scatters by about the m-th root of the
        rounding error."""
        return _root_form_of(controller)

    @property
    def relative_degree(self) -> int:
        return len(self.poles) - len(self.zeros)

    def at(self, points) -> np.ndarray:
        """Value at complex points x (s or z)."""
        x = np.asarray(points, dtype=complex)
        out = np.full(x.shape, self.gain, dtype=complex)
        for r in self.zeros:
            out = out * (x - r)
        for r in self.poles:
            out = out / (x - r)
        return out

    def unit_gain_at(self, points) -> np.ndarray:
        """Π(x − zeros) / Π(x − poles) (the value with gain 1)."""
        return RootForm(self.zeros, self.poles, 1.0, self.sample_period_s).at(points)

    def frequency_response(self, f_hz) -> np.ndarray:
        """Response at f_hz (Hz): x = j2πf (analog) or e^{j2πfT} (digital)."""
        w = 2 * np.pi * np.asarray(f_hz, dtype=float)
        x = np.exp(1j * w * self.sample_period_s) if self.sample_period_s else 1j * w
        return self.at(x)

    def to_controller(self, name: str = "") -> Controller:
        domain = "digital" if self.sample_period_s else "analog"
        return Controller.from_zpk(
            _pairs(self.zeros), _pairs(self.poles), self.gain, domain, self.sample_period_s, name
        )


@lru_cache(maxsize=512)
def _root_form_of(controller: Controller) -> RootForm:
    # Controllers are immutable and hashable: a survey asks for the same roots many times.
    return RootForm(
        tuple(complex(r) for r in controller.zeros()),
        tuple(complex(r) for r in controller.poles()),
        float(controller.gain),
        controller.sample_period_s,
    )


def _pairs(roots) -> np.ndarray:
    """Roots with each complex root's partner made the exact conjugate, so the polynomial is real."""
    r = np.asarray(roots, dtype=complex)
    out = []
    used = np.zeros(r.size, bool)
    for i, x in enumerate(r):
        if used[i]:
            continue
        used[i] = True
        if abs(x.imag) <= 1e-12 * max(abs(x), 1e-300):
            out.append(complex(x.real))
            continue
        cand = [j for j in range(r.size) if not used[j]]
        if cand:
            j = min(cand, key=lambda k: abs(r[k] - np.conj(x)))
            used[j] = True
            mid = (x + np.conj(r[j])) / 2
            out.extend([mid, np.conj(mid)])
        else:
            out.append(complex(x.real))
    return np.array(out, dtype=complex)
