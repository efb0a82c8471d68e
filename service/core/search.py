"""Search response and predictor transformations, score each candidate, rank them.

Ranking (documented in DEVELOPERS.md): the primary criterion is the
cross-validated error on the original response scale.  Among the candidates
whose error is within one standard error of the lowest (the one-standard-error
rule: Breiman, Friedman, Olshen & Stone 1984, p. 80; Hastie, Tibshirani &
Friedman 2009, pp. 61 and 244) the simplest ranks first (simplicity order in
:meth:`Specification.simplicity`); the others follow by their error.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass, field

import numpy as np

from . import incumbent
from . import transforms as tr
from .crossval import CVPlan, CVResult, cross_validate, make_plan
from .data import Prepared
from .errors import BudgetError, CandidateFailure, InputError, ModelFailure, pointer
from .likelihood import estimate_lambda
from .diagnose import CONDITION_NAMES, failed
from .report import entry_for
from .spec import PredictorSpec, Specification, build_design, resolve_predictor_transforms

DEFAULT_RESPONSE = ("identity", "log", "sqrt", "reciprocal", "square", "box_cox", "yeo_johnson")
DEFAULT_PREDICTOR = ("identity", "log", "sqrt", "reciprocal", "square")
MAX_FAILURES_LISTED = 10


@dataclass
class SearchOptions:
    response_transforms: list | None = None  # names or contract Transform dicts
    predictor_transforms: list | dict | None = None
    folds: int = 5
    repeats: int = 1
    seed: int = 0
    metric: str = "rmse"
    alpha: float = 0.05
    top: int = 5
    max_candidates: int = 5000
    time_limit_s: float = 60.0
    intercept: bool = True
    units: dict = field(default_factory=dict)
    incumbent: dict | None = None  # contract Specification in use


@dataclass
class Scored:
    spec: Specification
    cv: CVResult


def _as_transform(item) -> tr.Transform:
    if isinstance(item, str):
        return tr.from_dict({"name": item})
    return tr.from_dict(item)


def _expand_name(item) -> list[tr.Transform]:
    """A bare name 'power' means the ladder rungs not covered by other names."""
    if isinstance(item, str) and item == "power":
        return [tr.Transform("power", exponent=-0.5), tr.Transform("power", exponent=1.0 / 3.0)]
    return [_as_transform(item)]


def response_candidates(prep: Prepared, opts: SearchOptions) -> list[tr.Transform]:
    y = prep.y
    explicit = opts.response_transforms is not None
    items = opts.response_transforms if explicit else list(DEFAULT_RESPONSE)
    out: list[tr.Transform] = []
    for i, item in enumerate(items):
        for t in _expand_name(item):
            if t.name == "categorical":
                raise InputError.at(pointer("transforms", "response", i),
                                    "the response cannot be categorical")
            msg = t.domain_problem(y, prep.response, "response")
            if msg:
                if explicit:
                    raise InputError.at(pointer("transforms", "response", i), msg)
                continue
            if t not in out:
                out.append(t)
    return out


def predictor_candidates(prep: Prepared, opts: SearchOptions) -> list[list[tr.Transform]]:
    spec = opts.predictor_transforms
    per: list[list[tr.Transform]] = []
    for j, col in enumerate(prep.predictors):
        if col in prep.categorical:
            per.append([tr.Transform("categorical")])
            continue
        x = prep.numeric[col]
        if isinstance(spec, dict) and col in spec:
            items, explicit, base = spec[col], True, pointer("transforms", "predictors", col)
        elif isinstance(spec, list):
            items, explicit, base = spec, False, "/transforms/predictors"
        else:
            items, explicit, base = list(DEFAULT_PREDICTOR), False, ""
        lst: list[tr.Transform] = []
        for i, item in enumerate(items):
            for t in _expand_name(item):
                if t.name in ("box_cox", "yeo_johnson") and t.lam is None:
                    raise InputError.at(f"{base}/{i}", f"{t.name} of a predictor needs an explicit "
                                        "'lambda' (predictor powers are not estimated here)")
                if t.name == "categorical":
                    raise InputError.at(f"{base}/{i}", f"'{col}' is numeric; list it in "
                                        "'categorical' to treat it as levels")
                msg = t.domain_problem(x, col, "predictor")
                if msg:
                    if explicit:
                        raise InputError.at(f"{base}/{i}", msg)
                    continue
                if t.name == "log" and t.shift is None:
                    t = tr.fit_transform(t, x)
                if t not in lst:
                    lst.append(t)
        if not lst:
            raise InputError.at(pointer("predictors", j), f"no requested transform applies to "
                                f"predictor '{col}'")
        per.append(lst)
    return per


def _simplicity_sorted(cands: list[Specification]) -> list[Specification]:
    return sorted(cands, key=lambda s: s.simplicity())


def run_selection(prep: Prepared, opts: SearchOptions, service_version: str,
                  entry_hook=None) -> dict:
    """Search, score and rank; returns the contract's selection body (without service_version).

    ``entry_hook(entry, context)`` lets later stages (conditions, interpretation)
    enrich each returned ranking entry.
    """
    t0 = time.perf_counter()
    deadline = t0 + opts.time_limit_s
    resp = response_candidates(prep, opts)
    if not resp:
        raise InputError.at("/transforms/response", "no response transform applies to "
                            f"'{prep.response}'")
    preds = predictor_candidates(prep, opts)
    n_params = 1 + sum(1 if p[0].name != "categorical" else
                       len(set(prep.categorical[c].tolist())) - 1
                       for p, c in zip(preds, prep.predictors))
    _check_rows(prep, opts, n_params)
    plan = make_plan(prep.n, opts.folds, opts.repeats, opts.seed, opts.metric)
    _check_levels(prep, plan)
    shift_needed = tr.needs_shift(prep.y)
    warnings: list[str] = []

    # Box-Cox lambda on the untransformed design: reported, and its ladder rung tried.
    box_cox_info = None
    if any(t.name == "box_cox" for t in resp):
        base = Specification(prep.response, tr.Transform("identity"),
                             tuple(PredictorSpec(c, tr.Transform("categorical") if c in prep.categorical
                                                 else tr.Transform("identity")) for c in prep.predictors),
                             opts.intercept)
        try:
            d0 = build_design(base, prep)
            est = estimate_lambda("box_cox", prep.y, d0.X)
            box_cox_info = {"design": "untransformed predictors", **est.to_dict()}
            if est.ladder is not None:
                rung = tr.ladder_transform(est.ladder)
                if rung not in resp and rung.domain_problem(prep.y, prep.response, "response") is None:
                    resp.append(rung)
            if est.ci_low is None or est.ci_high is None or (est.ci_high - est.ci_low) > 2.0:
                warnings.append("The data do not pin down a Box-Cox lambda for the response "
                                f"(estimate {est.lam:.3g}, 95% interval "
                                f"{_fmt_ci(est.ci_low, est.ci_high)}); prefer a simple scale.")
        except (CandidateFailure, ValueError):
            box_cox_info = None

    combos = itertools.product(resp, *preds)
    total = len(resp) * math.prod(len(p) for p in preds)
    cands = []
    for combo in combos:
        cands.append(Specification(prep.response, combo[0],
                                   tuple(PredictorSpec(c, t) for c, t in zip(prep.predictors, combo[1:])),
                                   opts.intercept))
        if len(cands) >= max(opts.max_candidates * 4, 20000):
            break
    cands = _simplicity_sorted(cands)[: opts.max_candidates]

    cache: dict = {}
    scored: list[Scored] = []
    failures: list[dict] = []
    n_fail = 0
    complete = len(cands) == total
    for spec in cands:
        if time.perf_counter() > deadline:
            complete = False
            break
        try:
            design = build_design(spec, prep, cache)
            res = cross_validate(design.X, prep.y, spec.response_transform, plan, shift_needed,
                                 design.names)
            scored.append(Scored(spec, res))
        except CandidateFailure as exc:
            n_fail += 1
            if len(failures) < MAX_FAILURES_LISTED:
                failures.append({"specification": spec.to_dict(), "reason": exc.reason})
    considered = len(scored) + n_fail
    if not scored:
        if considered == 0:
            raise BudgetError(f"no candidate finished within the time limit of "
                              f"{opts.time_limit_s:g} s; raise limits.time_limit_s or send fewer rows")
        reasons = sorted({f["reason"] for f in failures})
        raise ModelFailure("no candidate could be fitted: " + "; ".join(reasons[:3]))
    if n_fail:
        warnings.append(f"{n_fail} candidate(s) could not be scored (see search.failures); "
                        "they are left out of the ranking.")

    ranked, _ = rank(scored, plan.folds)
    cache: dict = {}

    def full(s: Scored, parts: dict) -> dict:
        key = s.spec.key
        if key not in cache:
            cache[key] = entry_for(s.spec, s.cv, plan, prep, parts, opts, service_version)
        return cache[key]

    ranked = _order_by_conditions(ranked, full, opts, warnings)
    best = min(scored, key=lambda s: s.cv.value)
    entries = []
    for s, parts in ranked:
        if len(entries) >= opts.top:
            break
        try:
            entry = dict(full(s, parts))
        except CandidateFailure as exc:
            warnings.append(f"A specification that scored in cross-validation could not be "
                            f"fitted on all rows and is left out: {exc.reason}")
            continue
        i = len(entries)
        entry["score"] = {"value": entry["score"]["value"], "parts": parts}
        if entry_hook is not None:
            entry_hook(entry, {"spec": s.spec, "prep": prep, "opts": opts})
        entries.append({"rank": i + 1, **entry})
    if not entries:
        raise ModelFailure("no scored specification could be fitted on all rows; "
                           "see the warnings of a smaller search")
    incumbent_block = None
    if opts.incumbent is not None:
        incumbent_block = _incumbent(opts, prep, plan, shift_needed, scored, ranked, entries,
                                     entry_hook)
    elapsed = time.perf_counter() - t0
    search = {
        "candidates_considered": int(total),
        "candidates_scored": len(scored),
        "candidates_failed": n_fail,
        "complete": bool(complete and len(scored) + n_fail == total),
        "elapsed_s": round(elapsed, 4),
        "response_transforms": [t.to_dict() for t in resp],
        "predictor_transforms": {c: [t.to_dict() for t in p] for c, p in zip(prep.predictors, preds)},
        "best_cv": {"value": best.cv.value, "std_error": best.cv.std_error,
                    "specification": best.spec.to_dict()},
        "failures": failures,
    }
    if box_cox_info is not None:
        search["box_cox"] = box_cox_info
    if not search["complete"]:
        warnings.append(f"The search stopped early ({len(scored) + n_fail} of {total} candidates "
                        "scored within the limits); the ranking is the best found so far.")
    body = {"data": prep.data_summary(), "search": search, "ranking": entries}
    if incumbent_block is not None:
        body["incumbent"] = incumbent_block
    body.update(warnings=warnings, _scored=scored, _plan=plan)
    return body


def _incumbent(opts, prep, plan, shift_needed, scored, ranked, entries, entry_hook) -> dict:
    spec, why = incumbent.incumbent_spec(opts.incumbent, prep, prep.predictors,
                                         set(prep.table_columns))
    inc_cv = None
    conditions = None
    if spec is not None:
        try:
            inc_cv = incumbent.score(spec, prep, plan, shift_needed)
        except CandidateFailure as exc:
            why = exc.reason
    position = None
    if inc_cv is not None:
        for i, (s, _) in enumerate(ranked):
            if s.spec.key == spec.key:
                position = i + 1
                break
        if position is None:
            again, _ = rank(scored + [Scored(spec, inc_cv)], plan.folds)
            position = next(i + 1 for i, (s, _) in enumerate(again) if s.spec is spec)
        try:
            conditions = entry_for(spec, inc_cv, plan, prep, ranked[0][1], opts, "")["conditions"]
        except CandidateFailure:
            conditions = None
    winner = ranked[0][0]
    return incumbent.decide(spec, inc_cv, why, position, entries[0], winner.cv.fold_values, plan,
                            conditions, opts.incumbent)


def rank(scored: list[Scored], folds: int | None = None) -> tuple[list[tuple[Scored, dict]], float]:
    """Order by the one-standard-error rule with paired fold differences.

    A candidate is inside the band when its CV error exceeds the lowest by no
    more than the standard error of its paired fold differences from the best
    (sd(d)/sqrt(K), the same convention as the CV standard error).  Pairing
    uses the shared folds: a candidate that loses on every fold is outside the
    band even if the fold errors themselves vary a lot.  With a single fold
    value the best candidate's own standard error is used.  Returns the
    ordered (scored, score parts) pairs and the lowest CV error.
    """
    best = min(scored, key=lambda s: s.cv.value)
    k = folds or max(len(best.cv.fold_values), 1)

    def paired(s: Scored) -> tuple[float, float]:
        d = s.cv.fold_values - best.cv.fold_values
        if s is best:
            return 0.0, 0.0
        if d.size < 2:
            return s.cv.value - best.cv.value, best.cv.std_error
        return s.cv.value - best.cv.value, float(np.std(d, ddof=1) / math.sqrt(k))

    info = {id(s): paired(s) for s in scored}
    inside = [s for s in scored if info[id(s)][0] <= info[id(s)][1]]
    outside = [s for s in scored if info[id(s)][0] > info[id(s)][1]]
    inside.sort(key=lambda s: (s.spec.simplicity(), s.cv.value))
    outside.sort(key=lambda s: s.cv.value)
    out = []
    for s in inside + outside:
        diff, se = info[id(s)]
        within = diff <= se
        parts = {
            "cv_value": s.cv.value,
            "cv_std_error": s.cv.std_error,
            "best_cv_value": best.cv.value,
            "difference_from_best": diff,
            "paired_std_error": se,
            "one_se_threshold": best.cv.value + se,
            "within_one_se": within,
            "simplicity": list(s.spec.simplicity()),
            "rule": ("within one paired standard error of the lowest CV error; ranked among "
                     "those by simplicity (estimated parameters, transform readability, "
                     "transformed columns)" if within else
                     "more than one paired standard error above the lowest CV error; "
                     "ranked by CV error"),
        }
        out.append((s, parts))
    return out, best.cv.value


def _order_by_conditions(ranked, full, opts: SearchOptions, warnings: list[str]):
    """Re-order the leading band members by failed conditions (see diagnose.py)."""
    band = [i for i, (_, p) in enumerate(ranked) if p["within_one_se"]]
    m = min(len(band), max(3 * opts.top, 15))
    lead = []
    for i in band[:m]:
        s, parts = ranked[i]
        try:
            entry = full(s, parts)
        except CandidateFailure as exc:
            parts = {**parts, "conditions_failed": None, "conditions_note": exc.reason}
            lead.append((len(CONDITION_NAMES) + 1, i, s, parts))
            continue
        bad = failed(entry.get("conditions"))
        parts = {**parts, "conditions_failed": bad,
                 "condition_rule": "within the one-standard-error band, fewer failed "
                                   "conditions rank first; CV error decides outside it"}
        lead.append((len(bad), i, s, parts))
    lead.sort(key=lambda t: (t[0], t[1]))
    rest = [(s, {**p, "conditions_failed": None} if "conditions_failed" not in p else p)
            for j, (s, p) in enumerate(ranked) if j not in set(band[:m])]
    out = [(s, p) for _, _, s, p in lead] + rest
    lowest = min(ranked, key=lambda t: t[0].cv.value)[0]
    if out and out[0][0] is not lowest:
        low_parts = next(p for s, p in out if s is lowest)
        if low_parts.get("conditions_failed"):
            warnings.append(
                "The specification with the lowest cross-validated error "
                f"({lowest.spec.response_label()} on "
                + ", ".join(p.transform.label(p.column) for p in lowest.spec.predictors)
                + f", {lowest.cv.metric} {lowest.cv.value:.4g}) fails "
                + ", ".join(c.replace("_", " ") for c in low_parts["conditions_failed"])
                + "; it ranks below specifications within one standard error that pass more "
                  "conditions.")
    return out


def _fmt_ci(lo, hi) -> str:
    a = "below -5" if lo is None else f"{lo:.3g}"
    b = "above 5" if hi is None else f"{hi:.3g}"
    return f"[{a}, {b}]"


def _check_rows(prep: Prepared, opts: SearchOptions, p: int) -> None:
    n = prep.n
    if opts.folds > n:
        raise InputError.at("/validation/folds", f"folds = {opts.folds} exceeds the {n} usable rows")
    n_train = n - math.ceil(n / opts.folds)
    if n_train < p + 2:
        need = math.ceil((p + 2) * opts.folds / (opts.folds - 1))
        raise InputError.at("/data", f"{n} usable rows are too few for {opts.folds}-fold "
                            f"cross-validation of a model with {p} coefficients; it needs at "
                            f"least {need} rows (or fewer folds/predictors)")
    if opts.metric == "mape" and np.any(prep.y == 0):
        raise InputError.at("/validation/metric", f"mape divides by the response and "
                            f"'{prep.response}' has zeros; use rmse or mae")


def _check_levels(prep: Prepared, plan: CVPlan) -> None:
    for j, col in enumerate(prep.predictors):
        if col not in prep.categorical:
            continue
        vals = prep.categorical[col]
        for a in plan.assignments:
            for k in range(plan.folds):
                train_levels = set(vals[a != k].tolist())
                missing = set(vals.tolist()) - train_levels
                if missing:
                    lv = sorted(missing)[0]
                    cnt = int(np.sum(vals == lv))
                    raise InputError.at(pointer("predictors", j), (
                        f"level '{lv}' of '{col}' has {cnt} row(s), so some cross-validation "
                        "training fold never sees it; merge rare levels or use fewer folds"))


def run_grouped(prep: Prepared, opts: SearchOptions, service_version: str, entry_hook=None,
                finish=None, mapper=map) -> dict:
    """One selection per value of the group column.

    ``finish(body)`` completes each group's body (cautions etc.); ``mapper`` may be a
    pool's map to spread the groups over workers.  A group that cannot be modelled
    gets a ``problem`` entry with its reason while the others go on.
    """
    from .data import split_groups
    from .errors import BestscaleError

    t0 = time.perf_counter()
    parts = split_groups(prep)
    names = list(parts)

    def one(name: str) -> dict:
        sub = parts[name]
        if isinstance(sub, BestscaleError):
            return {"problem": _problem_of(sub)}
        try:
            body = run_selection(sub, opts, service_version, entry_hook)
        except BestscaleError as exc:
            return {"problem": _problem_of(exc)}
        body.pop("_scored", None)
        body.pop("_plan", None)
        return finish(body) if finish is not None else body

    bodies = list(mapper(one, names))
    failed = sum(1 for b in bodies if "problem" in b)
    return {
        "data": prep.data_summary(),
        "search": {"groups": len(names), "groups_failed": failed,
                   "elapsed_s": round(time.perf_counter() - t0, 4), "complete": all(
                       b.get("search", {}).get("complete", True) for b in bodies)},
        "ranking": [],
        "groups": dict(zip(names, bodies)),
        "warnings": [f"One selection per value of the group column ({len(names)} groups); each "
                     "group's ranking is under 'groups'."] +
                    ([f"{failed} group(s) could not be modelled; see their 'problem'."] if failed else []),
    }


def _problem_of(exc) -> dict:
    status = 503 if isinstance(exc, BudgetError) else 422
    return {"type": f"urn:bestscale:problem:{exc.kind}", "title": exc.title, "status": status,
            "detail": exc.detail,
            "errors": [{"pointer": p.pointer, "detail": p.detail} for p in exc.problems]}
