"""``results.json``: the evaluation as plain JSON data (no arrays of responses).

Schema version 2 (docs/report.md, "results.json"): every key is snake_case; a mapping keyed by
names the user chose or by display labels (parts ``R1``, tolerances ``R``/``C``, quantities such
as "gain ×s^1 (low frequency)") is written as a list of records, each with ``name`` (an
identifier as the user wrote it) or ``key`` and ``label`` (a display label), and the value in
``value`` or the record's own fields; the budget is written once, at the top level.
"""

from __future__ import annotations

import re

from convert.compare.evaluate import CAUTIONS
from convert import __version__
from convert.case import case_summary

#: The version of the results.json layout; raised on any change a reader must know about.
SCHEMA_VERSION = 2

_SNAKE = re.compile(r"[a-z][a-z0-9_]*\Z")
_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_.:+-]*\Z")  # a part, source or element name as written


def snake_case_keys(value):
    """``value`` with every mapping whose keys are not all snake_case turned into a list of
    records: ``{"name": k, ...}`` for a name such as ``R1`` or ``X1.R2``, ``{"key": slug,
    "label": k, ...}`` for a display label; a mapping value is merged into its record, any other
    value goes into ``"value"``. Lists and snake_case mappings are walked."""
    if isinstance(value, dict):
        if all(isinstance(k, str) and _SNAKE.match(k) for k in value):
            return {k: snake_case_keys(v) for k, v in value.items()}
        out = []
        for k, v in value.items():
            text = str(k)
            rec: dict = {"name": text} if _NAME.match(text) else {"key": _slug(text), "label": text}
            v = snake_case_keys(v)
            if isinstance(v, dict) and not set(v) & set(rec):
                rec.update(v)
            else:
                rec["value"] = v
            out.append(rec)
        return out
    if isinstance(value, (list, tuple)):
        return [snake_case_keys(v) for v in value]
    return value


def _slug(text: str) -> str:
    """A snake_case key for a display label: "gain ×s^1 (low frequency)" -> "gain_s_1_low_frequency"."""
    slug = re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_")
    return slug if slug and slug[0].isalpha() else f"k_{slug}"


def _margins(m) -> dict | None:
    return None if m is None else m.as_dict()


def _response_summary(resp) -> dict | None:
    if resp is None:
        return None
    import numpy as np

    return {
        "kind": resp.kind,
        "duration_s": float(resp.t[-1]),
        "sub_step_s": resp.sub_step_s,
        "peak": float(np.max(np.abs(resp.y))),
        "final": float(resp.y[-1]),
    }


def results_dict(results) -> dict:
    """Everything a reader of the report needs as numbers: verdict, budget rows per
    realization, loop-check figures, rate advice, skipped checks, cautions."""
    real = []
    for r in results.realizations:
        real.append(
            {
                "name": r.name,
                "form": r.form,
                "num": list(r.controller.num),
                "den": list(r.controller.den),
                "sample_period_s": r.controller.sample_period_s,
                "details": r.details,
                "warnings": r.warnings,
                "loop": {
                    "stability": None if r.stability is None else r.stability.as_dict(),
                    "margins": _margins(r.margins),
                    "step": _response_summary(r.step),
                    "disturbance": _response_summary(r.disturbance),
                },
                "files": sorted(r.files),
            }
        )
    ref = results.reference
    data = {
        "schema_version": SCHEMA_VERSION,
        "tool": f"loopshift {__version__}",
        "verdict": results.verdict.overall,
        "unchecked_reason": results.verdict.unchecked_reason,
        "case": case_summary(results.case),
        "source": {
            "num": list(ref.num),
            "den": list(ref.den),
            "domain": ref.domain,
            "sample_period_s": ref.sample_period_s,
            "expression": ref.expression(),
            "notes": list(results.source.notes),
            "card_reduction": (
                None if results.source.extra.get("reduction") is None else results.source.extra["reduction"].as_dict()
            ),
            "card_output_limits": results.source.extra.get("output_limits"),
            "pid": None if results.source.pid is None else results.source.pid.table(),
        },
        "loop_check": {
            "plant": None
            if results.case.plant is None
            else {"model": results.case.plant.expression, "dead_time_s": results.case.plant.dead_time_s},
            "source_stability": (None if results.source_stability is None else results.source_stability.as_dict()),
            "source_margins": _margins(results.source_margins),
            "duration_s": results.duration_s,
            "source_step": _response_summary(results.source_step),
            "source_disturbance": _response_summary(results.source_disturbance),
            "skipped": list(results.skipped),
        },
        "realizations": real,
        "budget": [{"realization": r.name, "rows": [row.as_dict() for row in r.budget]} for r in results.realizations],
        "rate_advice": [a.as_dict() for a in results.rate_advice],
        "judgements": [j.as_dict() for j in results.verdict.judgements],
        "failures": [j.as_dict() for j in results.verdict.failures],
        "monte_carlo": {"draws": results.draws, "seed": results.seed} if results.draws else None,
        "notes": list(results.notes),
        "evidence": results.evidence.as_dict() if getattr(results, "evidence", None) is not None else None,
        "cautions": list(CAUTIONS),
    }
    return snake_case_keys(data)
