"""``results.json``: the evaluation as plain JSON data (no arrays of responses)."""

from __future__ import annotations

from convert.compare.evaluate import CAUTIONS


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
    from convert import __version__
    from convert.case import case_summary

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
                "budget": [row.as_dict() for row in r.budget],
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
    return {
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
        "budget": [{"realization": r["name"], "rows": r["budget"]} for r in real],
        "rate_advice": [a.as_dict() for a in results.rate_advice],
        "judgements": [j.as_dict() for j in results.verdict.judgements],
        "failures": [j.as_dict() for j in results.verdict.failures],
        "monte_carlo": {"draws": results.draws, "seed": results.seed} if results.draws else None,
        "notes": list(results.notes),
        "evidence": results.evidence.as_dict() if getattr(results, "evidence", None) is not None else None,
        "cautions": list(CAUTIONS),
    }
