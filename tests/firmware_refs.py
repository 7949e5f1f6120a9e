"""Reference outputs from scipy.signal for a structure's layout (shared by the firmware tests)."""

from __future__ import annotations


def scipy_filter(layout, x):
    """scipy.signal.lfilter on b/a for the direct forms, sosfilt on the z-domain sections
    otherwise (δ-sections mapped back through their roots)."""
    from scipy.signal import lfilter, sosfilt

    from convert.digital.fixedpoint import sos_rows

    if layout.structure in ("direct1", "direct2t"):
        return lfilter(layout.sections[0].b, layout.sections[0].a, x)
    return sosfilt(sos_rows(layout), x)
