"""How far this month's data moved from what a model artifact recorded about its training rows.

The artifact (core/model.py) keeps, for the response and every predictor of its
specification, a profile of the training rows: for a numeric column its deciles and the
share of rows between consecutive ones, for a categorical column the share of each level.
:func:`compare` puts this month's rows of the same columns into the same bins and reports

- rows then and now;
- per numeric predictor, how many rows lie below the training minimum or above the
  training maximum (predictions there are extrapolations);
- per categorical predictor, new levels (the model has no coefficient for them) and
  vanished ones;
- a shift measure per column and for the response: the population stability index
  ``PSI = sum_i (now_i - then_i) * ln(now_i / then_i)`` over the bins, which is the
  Jeffreys divergence (KL both ways) between the two binned distributions.

Rule (common practice, not a test with a known error rate): PSI below 0.1 is no material
shift, 0.1 to 0.25 a moderate shift, 0.25 or more a major shift.  Empty bins count as a
share of 0.0001 (common practice) so the logarithm stays finite.  A column is flagged when
rows fall outside its training range, when levels appear or vanish, or when its PSI is 0.1
or more.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .data import Prepared

PSI_MODERATE = 0.1  # common practice cut-offs
PSI_MAJOR = 0.25
EMPTY_SHARE = 1e-4  # common practice floor for empty bins
DECILES = np.linspace(0.0, 1.0, 11)
RULE = (
    "population stability index over the training deciles (levels for categorical columns): "
    "below 0.1 no material shift, 0.1 to 0.25 moderate, 0.25 or more major (common-practice "
    "cut-offs); empty bins count as a share of 0.0001"
)


def _lv(names: list[str]) -> str:
    return "level" if len(names) == 1 else "levels"


def numeric_profile(x: np.ndarray) -> dict[str, Any]:
    """Deciles of ``x`` and the share of rows in each bin between them (ties merge bins)."""
    x = np.asarray(x, dtype=float)
    q = np.quantile(x, DECILES)
    inner = np.unique(q[1:-1])
    shares = np.bincount(np.searchsorted(inner, x, side="right"), minlength=inner.size + 1)
    return {
        "edges": [float(q[0]), *(float(v) for v in inner), float(q[-1])],
        "shares": [float(v) for v in shares / x.size],
        "mean": float(np.mean(x)),
        "median": float(np.median(x)),
    }


def categorical_profile(values: np.ndarray) -> dict[str, Any]:
    levels, counts = np.unique(np.asarray(values).astype(str), return_counts=True)
    return {
        "shares": {str(lv): float(c / counts.sum()) for lv, c in zip(levels, counts, strict=True)}
    }


def profile(prep: Prepared, columns: list[str]) -> dict[str, Any]:
    """The artifact's ``data_profile``: training rows, response and predictor profiles."""
    preds: dict[str, Any] = {}
    out = {"rows": int(prep.n), "response": numeric_profile(prep.y), "predictors": preds}
    for c in columns:
        if c in prep.numeric:
            preds[c] = {"kind": "numeric", **numeric_profile(prep.numeric[c])}
        elif c in prep.categorical:
            preds[c] = {
                "kind": "categorical",
                **categorical_profile(prep.categorical[c]),
            }
    return out


def psi(now: ArrayLike, then: ArrayLike) -> float:
    """Population stability index of two share vectors over the same bins."""
    a = np.maximum(np.asarray(now, dtype=float), EMPTY_SHARE)
    e = np.maximum(np.asarray(then, dtype=float), EMPTY_SHARE)
    return float(np.sum((a - e) * np.log(a / e)))


def grade(value: float) -> str:
    if value >= PSI_MAJOR:
        return "major"
    if value >= PSI_MODERATE:
        return "moderate"
    return "none"


def _binned_shares(x: np.ndarray, edges: list[float]) -> np.ndarray:
    inner = np.asarray(edges[1:-1], dtype=float)
    counts = np.bincount(np.searchsorted(inner, x, side="right"), minlength=inner.size + 1)
    return counts / max(x.size, 1)


def _numeric(
    x: np.ndarray, prof: dict[str, Any] | None, rng: dict[str, Any] | None
) -> dict[str, Any]:
    lo = prof["edges"][0] if prof else (rng or {}).get("min")
    hi = prof["edges"][-1] if prof else (rng or {}).get("max")
    out: dict[str, Any] = {"kind": "numeric", "training_min": lo, "training_max": hi}
    if lo is not None and hi is not None:
        below, above = int(np.sum(x < lo)), int(np.sum(x > hi))
        out["outside_range"] = {
            "below": below,
            "above": above,
            "share": (below + above) / max(x.size, 1),
            "now_min": float(np.min(x)),
            "now_max": float(np.max(x)),
        }
    if prof:
        v = psi(_binned_shares(x, prof["edges"]), prof["shares"])
        out.update(
            psi=v, shift=grade(v), median_then=prof["median"], median_now=float(np.median(x))
        )
    return out


def _categorical(
    values: np.ndarray, prof: dict[str, Any] | None, levels: dict[str, Any] | None
) -> dict[str, Any]:
    now_lv, counts = np.unique(np.asarray(values).astype(str), return_counts=True)
    now = dict(zip(now_lv.tolist(), (counts / counts.sum()).tolist(), strict=True))
    then: dict[str, Any] = (
        prof["shares"] if prof else dict.fromkeys((levels or {}).get("levels", []), 0.0)
    )
    out: dict[str, Any] = {
        "kind": "categorical",
        "new_levels": sorted(set(now) - set(then)),
        "vanished_levels": sorted(set(then) - set(now)),
    }
    if prof:
        keys = sorted(set(now) | set(then))
        v = psi([now.get(k, 0.0) for k in keys], [then.get(k, 0.0) for k in keys])
        out.update(psi=v, shift=grade(v))
    return out


def _names(xs: list[str]) -> str:
    shown = ", ".join(f"'{x}'" for x in xs[:10])
    return shown + (f" and {len(xs) - 10} more" if len(xs) > 10 else "")


def compare(artifact: dict[str, Any], prep: Prepared) -> dict[str, Any]:
    """The ``drift`` block of one segment: this month's rows against the artifact's record."""
    prof = artifact.get("data_profile") or {}
    pprof = prof.get("predictors", {})
    ranges = artifact.get("training_range", {})
    levels = artifact.get("levels", {})
    spec = artifact.get("specification", {})
    columns = [p["column"] for p in spec.get("predictors", [])]
    flags: list[str] = []
    preds: dict[str, Any] = {}
    for c in columns:
        if c in prep.numeric:
            d = _numeric(np.asarray(prep.numeric[c], dtype=float), pprof.get(c), ranges.get(c))
            o = d.get("outside_range")
            if o and o["below"] + o["above"]:
                flags.append(
                    f"'{c}': {o['below'] + o['above']} of {prep.n} rows ({o['share']:.0%}) lie "
                    f"outside the training range {d['training_min']:.6g} to "
                    f"{d['training_max']:.6g} (now {o['now_min']:.6g} to {o['now_max']:.6g}); "
                    "predictions there are extrapolations"
                )
        elif c in prep.categorical:
            d = _categorical(prep.categorical[c], pprof.get(c), levels.get(c))
            if d["new_levels"]:
                flags.append(
                    f"'{c}' has {_lv(d['new_levels'])} the model never saw: {_names(d['new_levels'])}"
                )
            if d["vanished_levels"]:
                flags.append(
                    f"'{c}' no longer has {_lv(d['vanished_levels'])} {_names(d['vanished_levels'])}"
                )
        else:
            preds[c] = {"kind": "missing"}
            flags.append(f"'{c}' is not in this data")
            continue
        if d.get("shift") in ("moderate", "major"):
            flags.append(f"'{c}' shifted ({d['shift']}: PSI {d['psi']:.3g})")
        preds[c] = d
    out: dict[str, Any] = {
        "rows": {"then": prof.get("rows", artifact.get("n")), "now": int(prep.n)},
        "predictors": preds,
        "rule": RULE,
    }
    rprof = prof.get("response")
    if rprof:
        v = psi(_binned_shares(np.asarray(prep.y, dtype=float), rprof["edges"]), rprof["shares"])
        out["response"] = {
            "psi": v,
            "shift": grade(v),
            "median_then": rprof["median"],
            "median_now": float(np.median(prep.y)),
            "mean_then": rprof["mean"],
            "mean_now": float(np.mean(prep.y)),
        }
        if grade(v) != "none":
            flags.append(
                f"the response level moved ({grade(v)}: PSI {v:.3g}; median "
                f"{rprof['median']:.6g} then, {float(np.median(prep.y)):.6g} now)"
            )
    else:
        out["response"] = None
        out["note"] = (
            "the model records no data profile (issued before profiles were kept); only "
            "ranges and levels are compared"
        )
    out["flags"] = flags
    out["flagged"] = bool(flags)
    return out
