"""The ``[evidence.sweep]`` and ``[evidence.log]`` tables of a case file.

Keys (documented in docs/case-files.md):

* ``[evidence.sweep]``: ``file`` (CSV, relative to the case file), ``of`` (``"source"``, the
  default, or the name of a given target: the form the bench measured), ``columns``, ``units``
  (tables mapping a role to a header / a unit), ``decimal``, ``averages``, ``min_coherence``,
  ``inverted``, ``fit`` (true for every value of the form, or a list of names);
* ``[evidence.log]``: ``file``, ``columns``, ``units``, ``decimal``, ``output_limits``, ``fit``
  (true: the source's PID parameters), ``max_residual_rms``, ``max_residual_peak`` (fractions of
  the logged output's range).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

SWEEP_KEYS = ("file", "of", "columns", "units", "decimal", "averages", "min_coherence", "inverted", "fit")
LOG_KEYS = ("file", "columns", "units", "decimal", "output_limits", "fit", "max_residual_rms", "max_residual_peak")
SCHEMA = {"sweep": dict.fromkeys(SWEEP_KEYS, 1), "log": dict.fromkeys(LOG_KEYS, 1)}


@dataclass(frozen=True)
class EvidenceSpec:
    """What a case says about its measurements (plain data; paths resolved)."""

    sweep: dict | None = None
    log: dict | None = None
    where: dict | None = None  # "sweep"/"log" -> file:line of the table


def read_evidence(ctx, data: dict, base_dir: Path) -> EvidenceSpec | None:
    table = ctx.table(data, "evidence", "evidence")
    if table is None:
        return None
    ctx.check_keys(table, SCHEMA, "evidence")
    out: dict = {}
    where = {}
    for kind in ("sweep", "log"):
        t = ctx.table(table, kind, f"evidence.{kind}")
        if t is None:
            continue
        key = f"evidence.{kind}"
        ctx.check_keys(t, SCHEMA[kind], key)
        where[kind] = ctx.where(key)
        name = ctx.text(t, "file", f"{key}.file")
        if name is None:
            raise ctx.error(key, f"missing file: the {kind} as CSV, relative to the case file")
        path = base_dir / name
        if not path.is_file():
            raise ctx.error(f"{key}.file", f"no such file {str(path)!r} (paths are relative to the case file)")
        spec = {
            "file": path,
            "columns": _mapping(ctx, t, "columns", key),
            "units": _mapping(ctx, t, "units", key),
            "decimal": ctx.text(t, "decimal", f"{key}.decimal", default=".", choices=(".", ",")),
        }
        fit = t.get("fit", False)
        if kind == "sweep":
            spec["of"] = ctx.text(t, "of", f"{key}.of", default="source")
            avg = ctx.value(t, "averages", f"{key}.averages", "number", None, positive=True, allow_zero=False)
            if avg is not None and avg != int(avg):
                raise ctx.error(f"{key}.averages", f"expected a whole number, found {t['averages']!r}")
            spec["averages"] = None if avg is None else int(avg)
            coh = ctx.value(t, "min_coherence", f"{key}.min_coherence", "ratio", None, positive=True)
            if coh is not None and coh > 1:
                raise ctx.error(f"{key}.min_coherence", f"coherence lies between 0 and 1, found {t['min_coherence']!r}")
            spec["min_coherence"] = coh
            spec["inverted"] = _flag(ctx, t, "inverted", key)
            if isinstance(fit, list):
                if not fit or not all(isinstance(x, str) and x for x in fit):
                    raise ctx.error(f"{key}.fit", f"expected true or a list of part/parameter names, found {fit!r}")
                spec["fit"] = tuple(fit)
            elif not isinstance(fit, bool):
                raise ctx.error(f"{key}.fit", f"expected true or a list of part/parameter names, found {fit!r}")
            else:
                spec["fit"] = fit
        else:
            spec["output_limits"] = ctx.pair(t, "output_limits", f"{key}.output_limits", "number")
            spec["fit"] = _flag(ctx, t, "fit", key)
            for limit in ("max_residual_rms", "max_residual_peak"):
                spec[limit] = ctx.fraction(t, limit, f"{key}.{limit}", allow_one=False)
                if spec[limit] == 0:
                    raise ctx.error(f"{key}.{limit}", f"expected a positive value, found {t[limit]!r}")
        out[kind] = spec
    if not out:
        raise ctx.error("evidence", "give [evidence.sweep] and/or [evidence.log]")
    return EvidenceSpec(sweep=out.get("sweep"), log=out.get("log"), where=where)


def _flag(ctx, table: dict, name: str, key: str) -> bool:
    value = table.get(name, False)
    if not isinstance(value, bool):
        raise ctx.error(f"{key}.{name}", f"expected true or false, found {value!r}")
    return value


def _mapping(ctx, table: dict, name: str, key: str) -> dict:
    raw = ctx.table(table, name, f"{key}.{name}") or {}
    for k, v in raw.items():
        if not isinstance(v, str) or not v.strip():
            raise ctx.error(f"{key}.{name}.{k}", f"expected text, found {v!r}")
    return {str(k): v for k, v in raw.items()}
