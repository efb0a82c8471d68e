"""Contract form of the regression conditions: an entry's ``conditions`` block (one block per
condition with its tests, decision, rule and, for influence, the flagged rows) and its
``transform_hints``.

Key order follows the documented layout: a test starts with ``name``, ``statistic`` and
``p_value``, then what describes the test, then what its computation produced (only when it
ran), then ``reason`` (when the statistic is missing) and ``primary`` (when the test belongs
to a decision).
"""

from __future__ import annotations

from typing import Any

from ...core import _condition_tests as ct
from ...core import conditions as c
from .registry import contract


def _head(t: ct.Check) -> dict[str, Any]:
    return {"name": t.name, "statistic": t.statistic, "p_value": t.p_value}


def _tail(t: ct.Check, out: dict[str, Any]) -> dict[str, Any]:
    if t.reason is not None:
        out["reason"] = t.reason
    if t.primary is not None:
        out["primary"] = t.primary
    return out


@contract.register
def reset(t: ct.ResetCheck) -> dict[str, Any]:
    out = _head(t) | {"powers": list(t.powers), "form": t.form, "source": t.source}
    if t.ran:
        out["df"] = None if t.df is None else list(t.df)
    return _tail(t, out)


@contract.register
def rainbow(t: ct.RainbowCheck) -> dict[str, Any]:
    return _tail(t, _head(t) | {"frac": t.frac, "source": t.source})


@contract.register
def curvature(t: ct.CurvatureCheck) -> dict[str, Any]:
    out = _head(t) | {"column": t.column, "label": t.label, "form": t.form, "source": t.source}
    if t.ran:
        out |= {"df": t.df, "curvature_sign": t.curvature_sign}
    return _tail(t, out)


@contract.register
def shapiro(t: ct.ShapiroCheck) -> dict[str, Any]:
    return _tail(t, _head(t) | {"source": t.source})


@contract.register
def jarque_bera(t: ct.JarqueBeraCheck) -> dict[str, Any]:
    out = _head(t) | {"source": t.source}
    if t.ran:
        out |= {"df": t.df, "skewness": t.skewness, "kurtosis": t.kurtosis}
    return _tail(t, out)


@contract.register
def anderson_darling(t: ct.AndersonDarlingCheck) -> dict[str, Any]:
    return _tail(t, _head(t) | {"source": t.source})


@contract.register
def breusch_pagan(t: ct.BreuschPaganCheck) -> dict[str, Any]:
    out = _head(t) | {"robust": t.robust, "form": t.form, "source": t.source}
    if t.ran:
        out |= {"df": t.df, "f_statistic": t.f_statistic, "f_p_value": t.f_p_value}
    return _tail(t, out)


@contract.register
def white(t: ct.WhiteCheck) -> dict[str, Any]:
    out = _head(t) | {"source": t.source}
    if t.ran:
        out |= {"f_statistic": t.f_statistic, "f_p_value": t.f_p_value}
    return _tail(t, out)


@contract.register
def durbin_watson(t: ct.DurbinWatsonCheck) -> dict[str, Any]:
    out = _head(t) | {
        "common_practice_range": list(t.common_practice_range),
        "rule": t.rule,
        "source": t.source,
    }
    return _tail(t, out)


@contract.register
def breusch_godfrey(t: ct.BreuschGodfreyCheck) -> dict[str, Any]:
    out = _head(t) | {"lags": t.lags, "source": t.source}
    if t.ran:
        out |= {"df": t.df, "f_statistic": t.f_statistic, "f_p_value": t.f_p_value}
    return _tail(t, out)


@contract.register
def ljung_box(t: ct.LjungBoxCheck) -> dict[str, Any]:
    return _tail(t, _head(t) | {"lags": t.lags, "df": t.df, "source": t.source})


@contract.register
def largest_vif(t: c.LargestVifCheck) -> dict[str, Any]:
    warn, fail = t.threshold
    out = _head(t) | {
        "term": t.term,
        "threshold": {"warn": warn, "fail": fail},
        "rule": t.rule,
        "source": t.source,
    }
    return _tail(t, out)


@contract.register
def condition_number(t: c.ConditionNumberCheck) -> dict[str, Any]:
    out = _head(t) | {
        "threshold": t.threshold,
        "rule": t.rule,
        "condition_indices": list(t.condition_indices),
        "source": t.source,
    }
    return _tail(t, out)


@contract.register
def extreme_row(t: c.ExtremeRowCheck) -> dict[str, Any]:
    threshold: float | dict[str, float] = t.threshold
    if t.fail_threshold is not None:
        threshold = {"flag": t.threshold, "fail": t.fail_threshold}
    out = _head(t) | {"row": t.row, "threshold": threshold, "rule": t.rule, "source": t.source}
    if t.df is not None:
        out["df"] = t.df
    return _tail(t, out)


def _condition(cond: c.Condition) -> dict[str, Any]:
    return {
        "holds": cond.holds,
        "tests": [contract(t) for t in cond.tests],
        "note": cond.note,
        "rule": cond.rule,
    }


@contract.register
def condition(cond: c.Condition) -> dict[str, Any]:
    return _condition(cond)


@contract.register
def unordered_independence(cond: c.UnorderedIndependence) -> dict[str, Any]:
    # the rule (how an order would decide) comes before the note on why nothing was tested
    return {"holds": cond.holds, "tests": [], "rule": cond.rule, "note": cond.note}


@contract.register
def vif_row(r: c.VifRow) -> dict[str, Any]:
    return {
        "term": r.term,
        "column": r.column,
        "df": r.df,
        "vif": r.vif,
        "gvif": r.gvif,
        "gvif_adjusted": r.gvif_adjusted,
        "level": r.level,
    }


@contract.register
def multicollinearity(cond: c.MulticollinearityCondition) -> dict[str, Any]:
    return _condition(cond) | {
        "level": cond.level,
        "vif": [vif_row(r) for r in cond.vif],
        "condition_number": cond.condition_number,
    }


@contract.register
def flagged_row(r: c.FlaggedRow) -> dict[str, Any]:
    return {
        "row": r.row,
        "reasons": list(r.reasons),
        "cooks_distance": r.cooks_distance,
        "leverage": r.leverage,
        "dffits": r.dffits,
        "studentized_residual": r.studentized_residual,
    }


@contract.register
def cutoffs(k: c.Cutoffs) -> dict[str, Any]:
    return {
        "cooks_flag": k.cooks_flag,
        "cooks_fail": k.cooks_fail,
        "leverage": k.leverage,
        "dffits": k.dffits,
        "studentized": k.studentized,
    }


@contract.register
def influence(cond: c.InfluenceCondition) -> dict[str, Any]:
    out = _condition(cond) | {
        "flagged_rows": [flagged_row(r) for r in cond.flagged_rows],
        "n_flagged": cond.n_flagged,
    }
    if cond.cutoffs is not None:
        out |= {
            "flagged_rows_truncated": cond.flagged_rows_truncated,
            "thresholds": cutoffs(cond.cutoffs),
        }
    return out


@contract.register
def report(r: c.ConditionReport) -> dict[str, Any]:
    """The entry's ``conditions`` block; the hints are rendered as its ``transform_hints``."""
    return {name: contract(cond) for name, cond in r.named()}


@contract.register
def hint(h: c.TransformHint) -> dict[str, Any]:
    return {
        "column": h.column,
        "label": h.label,
        "slope_sign": h.slope_sign,
        "curvature_sign": h.curvature_sign,
        "bulge": h.bulge,
        "x_direction": h.x_direction,
        "y_direction": h.y_direction,
        "p_value": h.p_value,
        "monotone": h.monotone,
        "sentence": h.sentence,
    }
