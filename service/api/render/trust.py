"""Contract form of the trust measures (``trust``: stability and optimism of a selection)."""

from __future__ import annotations

from typing import Any

from ...selection import trust as t
from .registry import contract


@contract.register
def trust(r: t.Trust) -> dict[str, Any]:
    st = r.stability
    out: dict[str, Any] = {
        "stability": None if st is None else st.share,
        "resamples": None if st is None else st.usable,
        "runner_up": None if st is None or st.runner_up is None else contract(st.runner_up),
        "optimism": None if r.optimism is None else contract(r.optimism),
    }
    if st is not None:
        out["stability_details"] = contract(st)
    out["time_limit_s"] = r.time_limit_s
    out["warnings"] = list(r.warnings)
    out["elapsed_s"] = r.elapsed_s
    return out


@contract.register
def runner_up(r: t.RunnerUp) -> dict[str, Any]:
    return {
        "specification": r.spec.to_dict(),
        "label": t.label(r.spec),
        "first_share": r.first_share,
        "basis": r.basis,
    }


@contract.register
def stability_details(s: t.Stability) -> dict[str, Any]:
    """The stability block's details (its share and runner-up sit in ``trust`` itself)."""
    interval = s.interval
    return {
        "method": t.STABILITY_METHOD,
        "source": t.STABILITY_SOURCE,
        "requested": s.requested,
        "usable": s.usable,
        "failed": s.failed,
        "not_run": s.not_run,
        "complete": s.complete,
        "wins": s.wins,
        "interval": None if interval is None else list(interval),
        "interval_level": t.INTERVAL_LEVEL,
        "first": [
            {"label": t.label(f.spec), "specification": f.spec.to_dict(), "share": f.share}
            for f in s.first
        ],
        "contenders": s.contenders,
        "contender_rule": t.CONTENDER_RULE,
        "folds": s.folds,
        "seed": s.seed,
        "conditions": t.CONDITIONS_HELD,
        "estimated_powers_left_out": s.estimated_powers_left_out,
        "held_fixed": t.HELD_FIXED + (t.HELD_FIXED_RANK_1 if s.rank_1_power_held else ""),
        "rule_reproduces_rank_1": s.rule_reproduces_rank_1,
        "problems": [{"reason": p.reason, "resamples": p.resamples} for p in s.problems],
    }


@contract.register
def optimism(o: t.Optimism) -> dict[str, Any]:
    out: dict[str, Any] = {
        "metric": o.metric,
        "scale": "original",
        "outer_folds": o.outer_folds,
        "inner_folds": o.inner_folds,
        "seed": o.seed,
    }
    if o.problem is not None:  # no outer fold could be assessed
        out.update(
            selected_cv=None,
            nested_cv=None,
            gap=None,
            gap_std_error=None,
            ratio=None,
            complete=False,
        )
        if o.folds is not None:
            out["folds"] = [contract(f) for f in o.folds]
        out["problem"] = o.problem
        return out
    out.update(
        selected_cv=o.selected_cv,
        nested_cv=o.nested_cv,
        gap=o.gap,
        gap_std_error=o.gap_std_error,
        ratio=o.ratio,
        outer_folds_used=o.outer_folds_used,
        winner_selected=o.winner_selected,
        complete=o.complete,
        folds=[contract(f) for f in o.folds or ()],
        source=t.OPTIMISM_SOURCE,
        meaning=t.OPTIMISM_MEANING,
    )
    return out


@contract.register
def outer_fold(f: t.OuterFold) -> dict[str, Any]:
    out: dict[str, Any] = {"fold": f.fold, "rows_held_out": f.rows_held_out}
    if f.problem is not None:
        if f.selected is not None:
            out["selected"] = t.label(f.selected)
        out["problem"] = f.problem
        return out
    assert f.selected is not None  # an assessed fold names what its inner search selected
    out.update(
        selected=t.label(f.selected),
        selected_specification=f.selected.to_dict(),
        same_as_winner=f.same_as_winner,
        inner_complete=f.inner_complete,
        nested_error=f.nested_error,
        winner_error=f.winner_error,
    )
    return out
