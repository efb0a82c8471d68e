"""Plain-language readings of a fitted specification, one per slope and per categorical level.

How each coefficient b (with its confidence interval [lo, hi]) reads depends
on the scales of the response and of the predictor:

* level response, level predictor: y is higher by b units per extra unit of x;
* log response, level predictor: the median of y is higher by 100(e^b - 1)%
  per unit of x, with the interval 100(e^lo - 1)% to 100(e^hi - 1)%.  The
  shortcut 100b is mentioned, as approximate, only where |b| <= 0.1 (common
  practice), which keeps it within a tenth of the exact figure (0.52 points
  at |b| = 0.1);
* level response, log predictor: 1% higher x goes with b ln(1.01) units more y,
  10% higher x with b ln(1.1) units;
* log-log: b is the elasticity; 1% higher x goes with a median y higher by
  100(1.01^b - 1)%, 10% higher x with 100(1.1^b - 1)%;
* a categorical level under a log response: 100(e^b - 1)% versus the reference
  level (Halvorsen & Palmquist 1980, Am. Econ. Rev. 70:474-475); under a
  level response: b units versus the reference;
* every other scale (sqrt, reciprocal, square, power, Box-Cox, Yeo-Johnson
  response, or a sqrt/reciprocal/square/power/Box-Cox/Yeo-Johnson predictor)
  has no constant-rate reading: the text says so and gives back-transformed
  predictions (medians, by the naive inverse) at the predictor's median and
  median + 1 unit and at its quartiles, the other predictors held at their
  medians and categorical ones at their reference level.

Percent readings under a log response refer to the median (the geometric
mean) of y, and to y + c when the log carries a shift c.  Sentences describe
associations in the data ("goes with", "higher by"), never effects.
"""

from __future__ import annotations

import math

import numpy as np

from .data import Prepared
from .fitting import OLSFit
from .spec import Design, Specification
from .transforms import Transform

SHORTCUT_MAX_ABS_B = 0.1  # common practice: 100b reads as a percent only for |b| <= 0.1
LN_1_01 = math.log(1.01)
LN_1_1 = math.log(1.1)


# ----------------------------------------------------------------- numbers
def fmt(v: float | None, sig: int = 4) -> str:
    """A number for a sentence: ``sig`` significant digits, plain notation from 1e-3 to 1e6."""
    if v is None or not math.isfinite(v):
        return "undefined"
    if v == 0:
        return "0"
    a = abs(v)
    if 1e-3 <= a < 1e6:
        digits = sig - 1 - math.floor(math.log10(a))
        r = round(v, digits)
        if r == 0:
            return "0"
        if digits > 0:
            s = f"{r:.{digits}f}".rstrip("0").rstrip(".")
        else:
            s = str(int(r))
        return "0" if s in ("-0", "") else s
    mant, exp = f"{v:.{sig - 1}e}".split("e")
    mant = mant.rstrip("0").rstrip(".") if "." in mant else mant
    return f"{mant}e{int(exp)}"


def exact_percent(b: float | None) -> float | None:
    """Percent change of the median of y for one unit of x under a log response: 100(e^b - 1).

    ``None`` when ``b`` is ``None`` or the value overflows a float.
    """
    if b is None:
        return None
    try:
        return 100.0 * math.expm1(b)
    except OverflowError:
        return None


def percent_for_ratio(ratio: float, b: float | None) -> float | None:
    """Percent change of y^b when x is multiplied by ``ratio``: 100(ratio^b - 1) (log-log)."""
    if b is None:
        return None
    try:
        return 100.0 * math.expm1(b * math.log(ratio))
    except OverflowError:
        return None


def shortcut_applies(b: float) -> bool:
    """Whether the 100b shortcut may be quoted beside the exact percent.

    Common practice allows it for |b| <= 0.1; there it is off by at most 0.52
    points and by less than a tenth of the exact percent (both are checked).
    """
    if abs(b) > SHORTCUT_MAX_ABS_B:
        return False
    exact = exact_percent(b)
    if exact is None or exact == 0:
        return False
    return abs(100.0 * b - exact) <= 0.1 * abs(exact)


def _change(v: float | None, unit: str = "") -> str:
    """'higher by 3.2 dollars' / 'lower by 5%'; a '%' unit is written without a space."""
    u = unit if unit == "%" else (f" {unit}" if unit else "")
    if v is None:
        return "by an amount too large to state (it overflows)"
    if v > 0:
        return f"higher by {fmt(v)}{u}"
    if v < 0:
        return f"lower by {fmt(-v)}{u}"
    return "no different"


def _comparative(v: float | None, unit: str = "") -> str:
    """'3.2 dollars higher' / '3.2 dollars lower' (for comparisons between levels)."""
    u = unit if unit == "%" else (f" {unit}" if unit else "")
    if v is None:
        return "different by an amount too large to state (it overflows)"
    if v > 0:
        return f"{fmt(v)}{u} higher"
    if v < 0:
        return f"{fmt(-v)}{u} lower"
    return "no different"


def _ci_text(lo, hi, level: float, suffix: str = "", what: str = "change", unit: str = "") -> str:
    """' (95% CI for the change: lo to hi unit)'; ``suffix`` follows each number (e.g. '%')."""
    if lo is None or hi is None:
        return ""
    u = f" {unit}" if unit else ""
    return (f" ({fmt(100 * level, 3)}% CI for the {what}: {fmt(lo)}{suffix} to "
            f"{fmt(hi)}{suffix}{u})")


# ----------------------------------------------------------------- scales
def _is_log(t: Transform) -> bool:
    return t.name == "log" or (t.name == "box_cox" and t.lam is not None and abs(t.lam) < 1e-12)


def _scale(t: Transform) -> str:
    if t.is_identity:
        return "level"
    if _is_log(t):
        return "log"
    return "other"


def _shift(t: Transform) -> float:
    return float(t.shift or 0.0) if t.name == "log" else 0.0


def _subject(column: str, t: Transform) -> str:
    """What a percent reading refers to: the column, or (column + c) for a shifted log."""
    c = _shift(t)
    return f"({column} + {fmt(c)})" if c else column


# ----------------------------------------------------------------- helpers
def _reference_point(spec: Specification, design: Design, prep: Prepared) -> dict:
    """Medians of numeric predictors and reference levels of categorical ones."""
    point = {}
    for p in spec.predictors:
        if p.column in design.levels:
            point[p.column] = design.levels[p.column]["reference"]
        else:
            point[p.column] = float(np.median(prep.numeric[p.column]))
    return point


def _row(spec: Specification, design: Design, point: dict) -> np.ndarray:
    x = []
    if spec.intercept:
        x.append(1.0)
    for p in spec.predictors:
        v = point[p.column]
        if p.column in design.levels:
            info = design.levels[p.column]
            x.extend(1.0 if lv == v else 0.0 for lv in info["levels"] if lv != info["reference"])
        else:
            with np.errstate(all="ignore"):
                x.append(float(p.transform.forward(np.array([v]))[0]))
    return np.array(x)


def _predict_median(spec: Specification, design: Design, coef: np.ndarray, point: dict) -> float | None:
    eta = float(_row(spec, design, point) @ coef)
    y = float(spec.response_transform.inverse(np.array([eta]))[0])
    return y if math.isfinite(y) else None


def _diff_ratio(a: float | None, b: float | None) -> tuple[float | None, float | None]:
    if a is None or b is None:
        return None, None
    ratio = b / a if a != 0 else None
    return b - a, ratio


# --------------------------------------------------------------- readings
def interpret_terms(spec: Specification, design: Design, fit: OLSFit, prep: Prepared,
                    units: dict[str, str] | None = None, level: float = 0.95) -> list[dict]:
    """One reading per slope and per categorical level, with its numbers and ``sentence``.

    ``spec`` is the concrete fitted specification (estimated parameters
    filled in), ``design`` and ``fit`` its full-data design and OLS fit,
    ``prep`` the rows it was fitted on.  Each dict has ``term``, ``column``,
    ``reading`` (level-level, log-level, level-log, log-log, categorical-level,
    categorical-log, two-point, categorical-two-point), ``estimate``,
    ``ci_low``/``ci_high`` (model scale, at ``level``), the derived numbers of
    that reading and ``sentence``.
    """
    units = dict(units or {})
    rt = spec.response_transform
    rscale = _scale(rt)
    response = spec.response
    y_unit = units.get(response, "")
    table = {row["term"]: row for row in fit.table(level)}
    several = len(spec.predictors) > 1
    hold = ", holding the other predictors fixed" if several else ""
    coef = np.asarray(fit.coef, dtype=float)
    point = _reference_point(spec, design, prep)
    out: list[dict] = []
    median_note_done = False

    def median_note() -> str:
        nonlocal median_note_done
        if median_note_done:
            return ""
        median_note_done = True
        return (f"; percent readings refer to the median (the geometric mean) of "
                f"{_subject(response, rt)}")

    def reverse_note(b: float, where: str) -> str:
        if rt.increasing:
            return ""
        lab = rt.label(response)
        if b > 0:
            return (f"; {lab} reverses order: a positive coefficient goes with lower {response} "
                    f"{where}")
        return (f"; {lab} reverses order: a positive coefficient would go with lower {response}, "
                f"so this negative one goes with higher {response} {where}")

    for p, term in zip(spec.predictors, design.terms):
        col = p.column
        x_unit = units.get(col, "")
        if term.kind == "categorical":
            ref = design.levels[col]["reference"]
            for k, lv in zip(term.indices,
                             [v for v in design.levels[col]["levels"] if v != ref]):
                name = design.names[k]
                row = table[name]
                b, lo, hi = row["estimate"], row["ci_low"], row["ci_high"]
                item = {"term": name, "column": col, "level": lv, "reference": ref,
                        "estimate": b, "ci_low": lo, "ci_high": hi}
                if rscale == "level":
                    item["reading"] = "categorical-level"
                    item["difference"] = b
                    item["sentence"] = (
                        f"Rows with {col} = {lv} have {response} {_comparative(b, y_unit)} on "
                        f"average than rows with {col} = {ref}"
                        f"{_ci_text(lo, hi, level, what='difference', unit=y_unit)}{hold}.")
                elif rscale == "log":
                    pct, plo, phi = exact_percent(b), exact_percent(lo), exact_percent(hi)
                    item.update(reading="categorical-log", percent=pct, percent_ci_low=plo,
                                percent_ci_high=phi)
                    item["sentence"] = (
                        f"Rows with {col} = {lv} have a median {_subject(response, rt)} "
                        f"{_comparative(pct, '%')} than rows with {col} = {ref}"
                        f"{_ci_text(plo, phi, level, '%', 'difference')}{hold}{median_note()}.")
                else:
                    at_level = dict(point, **{col: lv})
                    y_lv = _predict_median(spec, design, coef, at_level)
                    y_ref = _predict_median(spec, design, coef, dict(point, **{col: ref}))
                    diff, ratio = _diff_ratio(y_ref, y_lv)
                    item.update(reading="categorical-two-point", predicted_level=y_lv,
                                predicted_reference=y_ref, difference=diff, ratio=ratio)
                    others = (", holding the other predictors fixed at their medians (categorical "
                              "ones at their reference levels)") if several else ""
                    yu = f" {y_unit}" if y_unit else ""
                    item["sentence"] = (
                        f"On the {rt.label(response)} scale rows with {col} = {lv} differ from rows "
                        f"with {col} = {ref} by {fmt(b)}{_ci_text(lo, hi, level, what='difference')}"
                        f", which has no constant-rate reading for {response}; the predicted median "
                        f"{response} is {fmt(y_lv)}{yu} for {lv} and {fmt(y_ref)}{yu} for {ref}"
                        f"{_diff_text(diff, ratio, y_unit)}{others}{reverse_note(b, f'for {col} = {lv}')}.")
                out.append(item)
            continue

        name = design.names[term.indices[0]]
        row = table[name]
        b, lo, hi = row["estimate"], row["ci_low"], row["ci_high"]
        pt = p.transform
        pscale = _scale(pt)
        item = {"term": name, "column": col, "estimate": b, "ci_low": lo, "ci_high": hi}
        per = f"extra {x_unit}" if x_unit else "extra unit"
        if rscale == "level" and pscale == "level":
            item.update(reading="level-level", change_per_unit=b)
            item["sentence"] = (
                f"Each {per} of {col} goes with {response} {_change(b, y_unit)} on average"
                f"{_ci_text(lo, hi, level, unit=y_unit)}{hold}.")
        elif rscale == "log" and pscale == "level":
            pct, plo, phi = exact_percent(b), exact_percent(lo), exact_percent(hi)
            short = shortcut_applies(b)
            item.update(reading="log-level", percent=pct, percent_ci_low=plo, percent_ci_high=phi,
                        shortcut_percent=100.0 * b if short else None)
            shortcut = (f"; the quick reading 100·b = {fmt(100 * b)}% is close only because |b| is "
                        "small" if short else "")
            item["sentence"] = (
                f"Each {per} of {col} goes with a median {_subject(response, rt)} {_change(pct, '%')}"
                f"{_ci_text(plo, phi, level, '%')}{hold}{shortcut}{median_note()}.")
        elif rscale == "level" and pscale == "log":
            d1, d10 = b * LN_1_01, b * LN_1_1
            item.update(reading="level-log", change_per_1pct=d1, change_per_10pct=d10,
                        change_per_1pct_ci_low=None if lo is None else lo * LN_1_01,
                        change_per_1pct_ci_high=None if hi is None else hi * LN_1_01,
                        change_per_10pct_ci_low=None if lo is None else lo * LN_1_1,
                        change_per_10pct_ci_high=None if hi is None else hi * LN_1_1)
            xs = _subject(col, pt)
            item["sentence"] = (
                f"A 1% higher {xs} goes with {response} {_change(d1, y_unit)} on average"
                f"{_ci_text(item['change_per_1pct_ci_low'], item['change_per_1pct_ci_high'], level, unit=y_unit)}"
                f", and a 10% higher {xs} with {response} {_change(d10, y_unit)}{hold}.")
        elif rscale == "log" and pscale == "log":
            p1, p10 = percent_for_ratio(1.01, b), percent_for_ratio(1.1, b)
            item.update(reading="log-log", elasticity=b, percent_per_1pct=p1, percent_per_10pct=p10,
                        percent_per_1pct_ci_low=percent_for_ratio(1.01, lo),
                        percent_per_1pct_ci_high=percent_for_ratio(1.01, hi),
                        percent_per_10pct_ci_low=percent_for_ratio(1.1, lo),
                        percent_per_10pct_ci_high=percent_for_ratio(1.1, hi))
            xs, ys = _subject(col, pt), _subject(response, rt)
            ci = "" if lo is None else f" ({fmt(100 * level, 3)}% CI {fmt(lo)} to {fmt(hi)})"
            prop = ""
            if lo is not None and 0 < lo and hi < 1:
                prop = (f"; the interval lies between 0 and 1, so {ys} is higher by a smaller "
                        f"percentage than {xs} (less than proportional)")
            elif lo is not None and lo > 1:
                prop = (f"; the interval lies above 1, so {ys} is higher by a larger percentage "
                        f"than {xs} (more than proportional)")
            item["sentence"] = (
                f"The elasticity of the median {ys} with respect to {xs} is {fmt(b)}{ci}: a 1% "
                f"higher {xs} goes with a median {ys} {_change(p1, '%')}"
                f"{_ci_text(item['percent_per_1pct_ci_low'], item['percent_per_1pct_ci_high'], level, '%')}"
                f", and a 10% higher {xs} with a median {ys} {_change(p10, '%')}{hold}{prop}"
                f"{median_note()}.")
        else:
            item.update(_two_point(spec, design, coef, prep, point, p))
            item["reading"] = "two-point"
            stat = "mean" if rscale == "level" else "median"
            ci = _ci_text(lo, hi, level, what="coefficient")
            if rscale == "other":
                intro = (f"On the {rt.label(response)} scale {pt.label(col)} has coefficient "
                         f"{fmt(b)}{ci}, which has no constant-rate reading for {response}")
            else:
                intro = (f"{col} enters as {pt.label(col)}, with coefficient {fmt(b)}{ci}, which "
                         "has no constant-rate reading")
            u = f" {x_unit}" if x_unit else ""
            beyond = (f", beyond the largest observed {col}"
                      if item["at_median_plus_one"] > float(np.max(prep.numeric[col])) else "")
            yu = f" {y_unit}" if y_unit else ""
            others = (", holding the other predictors fixed at their medians (categorical ones at "
                      "their reference levels)") if several else ""
            item["sentence"] = (
                f"{intro}; the predicted {stat} {response} is {fmt(item['predicted_median'])}{yu} "
                f"at the median {col} ({fmt(item['at_median'])}) and "
                f"{fmt(item['predicted_median_plus_one'])}{yu} at one{u or ' unit'} more "
                f"({fmt(item['at_median_plus_one'])}{beyond})"
                f"{_diff_text(item['difference_plus_one'], None, y_unit)}, and "
                f"{fmt(item['predicted_q1'])}{yu} at the first quartile ({fmt(item['at_q1'])}) "
                f"against {fmt(item['predicted_q3'])}{yu} at the third quartile "
                f"({fmt(item['at_q3'])}){_diff_text(item['difference_q1_q3'], item['ratio_q1_q3'], y_unit)}"
                f"{others}{reverse_note(b, f'where {pt.label(col)} is higher')}.")
        out.append(item)
    return out


def _diff_text(diff: float | None, ratio: float | None, unit: str) -> str:
    if diff is None:
        return ""
    u = f" {unit}" if unit else ""
    r = f", ratio {fmt(ratio)}" if ratio is not None else ""
    return f" (difference {fmt(diff)}{u}{r})"


def _two_point(spec: Specification, design: Design, coef: np.ndarray, prep: Prepared,
               point: dict, p) -> dict:
    x = prep.numeric[p.column]
    q1, med, q3 = (float(v) for v in np.percentile(x, [25, 50, 75]))
    vals = {"at_median": med, "at_median_plus_one": med + 1.0, "at_q1": q1, "at_q3": q3}
    pred = {k.replace("at_", "predicted_"): _predict_median(spec, design, coef,
                                                             dict(point, **{p.column: v}))
            for k, v in vals.items()}
    d1, _ = _diff_ratio(pred["predicted_median"], pred["predicted_median_plus_one"])
    dq, rq = _diff_ratio(pred["predicted_q1"], pred["predicted_q3"])
    return {**vals, **pred, "difference_plus_one": d1, "difference_q1_q3": dq, "ratio_q1_q3": rq,
            "statistic": "mean" if _scale(spec.response_transform) == "level" else "median"}


def interpret_fit(spec: Specification, design: Design, fit: OLSFit, prep: Prepared,
                  units: dict[str, str] | None = None, level: float = 0.95) -> list[str]:
    """The sentences of :func:`interpret_terms`, one per slope and per categorical level."""
    return [item["sentence"] for item in interpret_terms(spec, design, fit, prep, units, level)]
