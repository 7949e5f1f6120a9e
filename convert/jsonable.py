"""Plain JSON-ready values from numpy and complex results (used by the CLI and the report)."""

from __future__ import annotations

import math


def to_jsonable(value):
    """Convert numpy scalars/arrays, complex numbers and tuples into JSON-ready Python values.

    Complex numbers become ``{"re": x, "im": y}``; NaN and infinities become ``None``.
    """
    import numpy as np

    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return [to_jsonable(v) for v in value.tolist()]
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (np.floating, np.integer)):
        value = value.item()
    if isinstance(value, (complex, np.complexfloating)):
        return {"re": to_jsonable(float(value.real)), "im": to_jsonable(float(value.imag))}
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def roots_json(roots) -> list[dict]:
    """Roots (zeros or poles) as a list of ``{"re": x, "im": y}``, real ones included, so a reader
    of the JSON meets one shape whatever the roots are."""
    return [to_jsonable(complex(r)) for r in roots]


def non_finite_path(value, path: str = "") -> str | None:
    """The dotted path of the first NaN or infinite number inside nested dicts/lists/arrays (a
    result figure that must not be shown), or None when every number is finite."""
    import numpy as np

    if isinstance(value, dict):
        for k, v in value.items():
            found = non_finite_path(v, f"{path}.{k}" if path else str(k))
            if found:
                return found
        return None
    if isinstance(value, (list, tuple)):
        for i, v in enumerate(value):
            found = non_finite_path(v, f"{path}[{i}]")
            if found:
                return found
        return None
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "fc" and not np.all(np.isfinite(value)):
            return path or "value"
        return None
    if isinstance(value, (float, complex, np.floating, np.complexfloating)) and not np.isfinite(value):
        return path or "value"
    return None
