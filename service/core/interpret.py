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
from dataclasses import dataclass
from typing import Any, ClassVar, NamedTuple

import numpy as np

from .data import Prepared
from .fitting import CoefficientRow, Inference, OLSFit
from .numbers import fmt
from .spec import Design, Specification
from .transforms import Transform

SHORTCUT_MAX_ABS_B = 0.1  # common practice: 100b reads as a percent only for |b| <= 0.1
LN_1_01 = math.log(1.01)
LN_1_1 = math.log(1.1)


# ----------------------------------------------------------------- numbers
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


def _ci_text(
    lo: float | None,
    hi: float | None,
    level: float,
    suffix: str = "",
    what: str = "change",
    unit: str = "",
    signed: bool = False,
) -> str:
    """' (95% CI for the change: lower by a% to b%)', in the words of the estimate.

    Bounds are written unsigned with "higher"/"lower", the same words the estimate uses, never
    an unsigned "lower" next to signed bounds: both above 0 read "higher by lo to hi" (a
    difference between levels: "lo to hi higher", as its estimate reads), both below 0
    "lower by |hi| to |lo|", an interval across 0 "from |lo| lower to hi higher".
    An estimate given as a signed number (a coefficient, ``signed``) gets signed bounds,
    "lo to hi".  ``suffix`` follows each number (e.g. '%').
    """
    if lo is None or hi is None:
        return ""
    u = f" {unit}" if unit else ""
    a, b = min(lo, hi), max(lo, hi)
    if signed or what == "coefficient":
        body = f"{fmt(a)}{suffix} to {fmt(b)}{suffix}{u}"
    elif a >= 0:
        body = f"{fmt(a)}{suffix} to {fmt(b)}{suffix}{u}"
        body = f"{body} higher" if what == "difference" else f"higher by {body}"
    elif b <= 0:
        body = f"{fmt(-b)}{suffix} to {fmt(-a)}{suffix}{u}"
        body = f"{body} lower" if what == "difference" else f"lower by {body}"
    else:
        body = f"from {fmt(-a)}{suffix}{u} lower to {fmt(b)}{suffix}{u} higher"
    return f" ({fmt(100 * level, 3, trailing_zeros=False)}% CI for the {what}: {body})"


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
def _reference_point(spec: Specification, design: Design, prep: Prepared) -> dict[str, Any]:
    """Medians of numeric predictors and reference levels of categorical ones."""
    point: dict[str, Any] = {}
    for p in spec.predictors:
        if p.column in design.levels:
            point[p.column] = design.levels[p.column].reference
        else:
            point[p.column] = float(np.median(prep.numeric[p.column]))
    return point


def _row(spec: Specification, design: Design, point: dict[str, Any]) -> np.ndarray:
    x = []
    if spec.intercept:
        x.append(1.0)
    for p in spec.predictors:
        v = point[p.column]
        if p.column in design.levels:
            x.extend(1.0 if lv == v else 0.0 for lv in design.levels[p.column].others)
        else:
            with np.errstate(all="ignore"):
                x.append(float(p.transform.forward(np.array([v]))[0]))
    return np.array(x)


def _predict_median(
    spec: Specification, design: Design, coef: np.ndarray, point: dict[str, Any]
) -> float | None:
    eta = float(_row(spec, design, point) @ coef)
    y = float(spec.response_transform.inverse(np.array([eta]))[0])
    return y if math.isfinite(y) else None


def _diff_ratio(a: float | None, b: float | None) -> tuple[float | None, float | None]:
    if a is None or b is None:
        return None, None
    ratio = b / a if a != 0 else None
    return b - a, ratio


# --------------------------------------------------------------- readings
@dataclass(frozen=True)
class Reading:
    """One slope's or one categorical level's reading: the term, its column, the
    coefficient on the model scale with its interval (``ci_low``/``ci_high``, under the
    standard errors the readings use) and the ``sentence``; the kinds below add the numbers
    the sentence states.  ``kind`` names the reading (level-level, log-level, level-log,
    log-log, two-point, categorical-level, categorical-log, categorical-two-point)."""

    kind: ClassVar[str]
    term: str
    column: str
    estimate: float
    ci_low: float | None
    ci_high: float | None
    sentence: str


@dataclass(frozen=True)
class LevelLevel(Reading):
    """y is higher by ``change_per_unit`` units per extra unit of x."""

    kind: ClassVar[str] = "level-level"
    change_per_unit: float


@dataclass(frozen=True)
class LogLevel(Reading):
    """The median of y is higher by ``percent`` per unit of x (with its interval); the
    100b shortcut where it may be quoted, else None."""

    kind: ClassVar[str] = "log-level"
    percent: float | None
    percent_ci_low: float | None
    percent_ci_high: float | None
    shortcut_percent: float | None


@dataclass(frozen=True)
class LevelLog(Reading):
    """Units of y per 1% and per 10% higher x, with their intervals."""

    kind: ClassVar[str] = "level-log"
    change_per_1pct: float
    change_per_10pct: float
    change_per_1pct_ci_low: float | None
    change_per_1pct_ci_high: float | None
    change_per_10pct_ci_low: float | None
    change_per_10pct_ci_high: float | None


@dataclass(frozen=True)
class LogLog(Reading):
    """The elasticity and the percent change of the median of y per 1% and 10% higher x."""

    kind: ClassVar[str] = "log-log"
    elasticity: float
    percent_per_1pct: float | None
    percent_per_10pct: float | None
    percent_per_1pct_ci_low: float | None
    percent_per_1pct_ci_high: float | None
    percent_per_10pct_ci_low: float | None
    percent_per_10pct_ci_high: float | None


class Points(NamedTuple):
    """A numeric predictor's reading points: its median, median + 1 and its quartiles (or
    the predictions there)."""

    median: float
    median_plus_one: float
    q1: float
    q3: float


class Predicted(NamedTuple):
    """Back-transformed predictions at the reading points (None where undefined)."""

    median: float | None
    median_plus_one: float | None
    q1: float | None
    q3: float | None


@dataclass(frozen=True)
class TwoPoint(Reading):
    """No constant-rate reading: predictions (``statistic``: mean under a level response,
    median otherwise) at the predictor's reading points, and their differences."""

    kind: ClassVar[str] = "two-point"
    at: Points
    predicted: Predicted
    statistic: str
    difference_plus_one: float | None
    difference_q1_q3: float | None
    ratio_q1_q3: float | None


@dataclass(frozen=True)
class CategoricalReading(Reading):
    """A level of a categorical predictor read against its reference level."""

    kind: ClassVar[str] = "categorical"
    level: Any
    reference: Any


@dataclass(frozen=True)
class CategoricalLevel(CategoricalReading):
    """Rows at the level differ by ``difference`` units of y from the reference."""

    kind: ClassVar[str] = "categorical-level"
    difference: float


@dataclass(frozen=True)
class CategoricalLog(CategoricalReading):
    """The median of y at the level differs by ``percent`` from the reference."""

    kind: ClassVar[str] = "categorical-log"
    percent: float | None
    percent_ci_low: float | None
    percent_ci_high: float | None


@dataclass(frozen=True)
class CategoricalTwoPoint(CategoricalReading):
    """No constant-rate reading: the predicted median at the level and at the reference."""

    kind: ClassVar[str] = "categorical-two-point"
    predicted_level: float | None
    predicted_reference: float | None
    difference: float | None
    ratio: float | None


@dataclass
class _Context:
    spec: Specification
    design: Design
    prep: Prepared
    coef: np.ndarray
    table: dict[str, Inference]  # by term: the inference the readings use
    estimates: dict[str, float]  # by term
    units: dict[str, str]
    level: float
    point: dict[str, Any]  # medians of numeric predictors, reference levels of categorical ones
    median_noted: bool = False

    @property
    def rt(self) -> Transform:
        return self.spec.response_transform

    @property
    def response(self) -> str:
        return self.spec.response

    @property
    def y_unit(self) -> str:
        return self.units.get(self.spec.response, "")

    @property
    def several(self) -> bool:
        return len(self.spec.predictors) > 1

    @property
    def hold(self) -> str:
        return ", holding the other predictors fixed" if self.several else ""

    def hold_at_medians(self, column: str) -> str:
        """Where the other predictors sit for a two-point reading."""
        others = [p.column for p in self.spec.predictors if p.column != column]
        if not others:
            return ""
        cats = [c for c in others if c in self.design.levels]
        if len(cats) == len(others):
            return ", holding the other predictors fixed at their reference levels"
        tail = " (categorical ones at their reference levels)" if cats else ""
        return f", holding the other predictors fixed at their medians{tail}"

    def ci(
        self,
        lo: float | None,
        hi: float | None,
        suffix: str = "",
        what: str = "change",
        unit: str = "",
        signed: bool = False,
    ) -> str:
        return _ci_text(lo, hi, self.level, suffix, what, unit, signed)

    def median_note(self) -> str:
        """Said once per fit: percent readings under a log response are about the median."""
        if self.median_noted:
            return ""
        self.median_noted = True
        return (
            f"; percent readings refer to the median (the geometric mean) of "
            f"{_subject(self.response, self.rt)}"
        )

    def reverse_note(self, b: float, where: str) -> str:
        """For an order-reversing response scale (1/y, negative powers)."""
        if self.rt.increasing:
            return ""
        lab, y = self.rt.label(self.response), self.response
        if b > 0:
            return f"; {lab} reverses order: a positive coefficient goes with lower {y} {where}"
        return (
            f"; {lab} reverses order: a positive coefficient would go with lower {y}, so "
            f"this negative one goes with higher {y} {where}"
        )

    def median_at(self, column: str, value: float) -> float | None:
        """Naive back-transform with ``column`` at ``value``, the others at the reference point."""
        return _predict_median(self.spec, self.design, self.coef, {**self.point, column: value})

    def term(self, name: str) -> tuple[float, float | None, float | None]:
        """(estimate, ci_low, ci_high) of the term ``name``."""
        inf = self.table[name]
        return self.estimates[name], inf.ci_low, inf.ci_high


def _categorical_readings(
    ctx: _Context, column: str, indices: tuple[int, ...]
) -> list[CategoricalReading]:
    info = ctx.design.levels[column]
    ref: Any = info.reference  # a level, read where the other readings take a value
    others: list[Any] = list(info.others)
    rscale = _scale(ctx.rt)
    y, yu = ctx.response, ctx.y_unit
    out: list[CategoricalReading] = []
    for k, lv in zip(indices, others, strict=True):
        name = ctx.design.names[k]
        b, lo, hi = ctx.term(name)
        if rscale == "level":
            sentence = (
                f"Rows with {column} = {lv} have {y} {_comparative(b, yu)} on average than rows "
                f"with {column} = {ref}{ctx.ci(lo, hi, what='difference', unit=yu)}{ctx.hold}."
            )
            out.append(CategoricalLevel(name, column, b, lo, hi, sentence, lv, ref, difference=b))
        elif rscale == "log":
            pct, plo, phi = exact_percent(b), exact_percent(lo), exact_percent(hi)
            sentence = (
                f"Rows with {column} = {lv} have a median {_subject(y, ctx.rt)} "
                f"{_comparative(pct, '%')} than rows with {column} = {ref}"
                f"{ctx.ci(plo, phi, '%', 'difference')}{ctx.hold}{ctx.median_note()}."
            )
            out.append(
                CategoricalLog(
                    name,
                    column,
                    b,
                    lo,
                    hi,
                    sentence,
                    lv,
                    ref,
                    percent=pct,
                    percent_ci_low=plo,
                    percent_ci_high=phi,
                )
            )
        else:
            y_lv, y_ref = ctx.median_at(column, lv), ctx.median_at(column, ref)
            diff, ratio = _diff_ratio(y_ref, y_lv)
            u = f" {yu}" if yu else ""
            sentence = (
                f"On the {ctx.rt.label(y)} scale rows with {column} = {lv} differ from rows with "
                f"{column} = {ref} by {fmt(b)}{ctx.ci(lo, hi, what='difference', signed=True)}, which has no "
                f"constant-rate reading for {y}; the predicted median {y} is {fmt(y_lv)}{u} for "
                f"{lv} and {fmt(y_ref)}{u} for {ref}{_diff_text(diff, ratio, yu)}"
                f"{ctx.hold_at_medians(column)}{ctx.reverse_note(b, f'for {column} = {lv}')}."
            )
            out.append(
                CategoricalTwoPoint(
                    name,
                    column,
                    b,
                    lo,
                    hi,
                    sentence,
                    lv,
                    ref,
                    predicted_level=y_lv,
                    predicted_reference=y_ref,
                    difference=diff,
                    ratio=ratio,
                )
            )
    return out


def _level_level(ctx: _Context, name: str, col: str, per: str) -> LevelLevel:
    b, lo, hi = ctx.term(name)
    sentence = (
        f"Each {per} of {col} goes with {ctx.response} {_change(b, ctx.y_unit)} on average"
        f"{ctx.ci(lo, hi, unit=ctx.y_unit)}{ctx.hold}."
    )
    return LevelLevel(name, col, b, lo, hi, sentence, change_per_unit=b)


def _log_level(ctx: _Context, name: str, col: str, per: str) -> LogLevel:
    b, lo, hi = ctx.term(name)
    pct = exact_percent(b)
    plo, phi = exact_percent(lo), exact_percent(hi)
    short = shortcut_applies(b)
    shortcut = (
        f"; the quick reading 100·b = {fmt(100 * b)}% is close only because |b| is small"
        if short
        else ""
    )
    sentence = (
        f"Each {per} of {col} goes with a median {_subject(ctx.response, ctx.rt)} "
        f"{_change(pct, '%')}{ctx.ci(plo, phi, '%')}{ctx.hold}{shortcut}{ctx.median_note()}."
    )
    return LogLevel(
        name,
        col,
        b,
        lo,
        hi,
        sentence,
        percent=pct,
        percent_ci_low=plo,
        percent_ci_high=phi,
        shortcut_percent=100.0 * b if short else None,
    )


def _level_log(ctx: _Context, name: str, col: str, pt: Transform) -> LevelLog:
    b, lo, hi = ctx.term(name)
    d1, d10 = b * LN_1_01, b * LN_1_1
    lo1 = None if lo is None else lo * LN_1_01
    hi1 = None if hi is None else hi * LN_1_01
    xs, y, yu = _subject(col, pt), ctx.response, ctx.y_unit
    ci = ctx.ci(lo1, hi1, unit=yu)
    sentence = (
        f"A 1% higher {xs} goes with {y} {_change(d1, yu)} on average{ci}, and a 10% higher {xs} "
        f"with {y} {_change(d10, yu)}{ctx.hold}."
    )
    return LevelLog(
        name,
        col,
        b,
        lo,
        hi,
        sentence,
        change_per_1pct=d1,
        change_per_10pct=d10,
        change_per_1pct_ci_low=lo1,
        change_per_1pct_ci_high=hi1,
        change_per_10pct_ci_low=None if lo is None else lo * LN_1_1,
        change_per_10pct_ci_high=None if hi is None else hi * LN_1_1,
    )


def _log_log(ctx: _Context, name: str, col: str, pt: Transform) -> LogLog:
    b, lo, hi = ctx.term(name)
    p1, p10 = percent_for_ratio(1.01, b), percent_for_ratio(1.1, b)
    p1_lo, p1_hi = percent_for_ratio(1.01, lo), percent_for_ratio(1.01, hi)
    xs, ys = _subject(col, pt), _subject(ctx.response, ctx.rt)
    ci = (
        ""
        if lo is None
        else f" ({fmt(100 * ctx.level, 3, trailing_zeros=False)}% CI {fmt(lo)} to {fmt(hi)})"
    )
    prop = ""
    if lo is not None and hi is not None and lo > 0 and hi < 1:
        prop = (
            f"; the interval lies between 0 and 1, so {ys} is higher by a smaller percentage "
            f"than {xs} (less than proportional)"
        )
    elif lo is not None and lo > 1:
        prop = (
            f"; the interval lies above 1, so {ys} is higher by a larger percentage than {xs} "
            "(more than proportional)"
        )
    ci1 = ctx.ci(p1_lo, p1_hi, "%")
    sentence = (
        f"The elasticity of the median {ys} with respect to {xs} is {fmt(b)}{ci}: a 1% higher "
        f"{xs} goes with a median {ys} {_change(p1, '%')}{ci1}, and a 10% higher {xs} with a "
        f"median {ys} {_change(p10, '%')}{ctx.hold}{prop}{ctx.median_note()}."
    )
    return LogLog(
        name,
        col,
        b,
        lo,
        hi,
        sentence,
        elasticity=b,
        percent_per_1pct=p1,
        percent_per_10pct=p10,
        percent_per_1pct_ci_low=p1_lo,
        percent_per_1pct_ci_high=p1_hi,
        percent_per_10pct_ci_low=percent_for_ratio(1.1, lo),
        percent_per_10pct_ci_high=percent_for_ratio(1.1, hi),
    )


def _two_point(ctx: _Context, name: str, col: str, pt: Transform) -> TwoPoint:
    """No constant-rate reading: back-transformed predictions at chosen predictor values."""
    b, lo, hi = ctx.term(name)
    x = ctx.prep.numeric[col]
    q1, med, q3 = (float(v) for v in np.percentile(x, [25, 50, 75]))
    at = Points(med, med + 1.0, q1, q3)
    pred = Predicted(*(ctx.median_at(col, v) for v in at))
    d1, _ = _diff_ratio(pred.median, pred.median_plus_one)
    dq, rq = _diff_ratio(pred.q1, pred.q3)
    stat = "mean" if _scale(ctx.rt) == "level" else "median"
    y, yu = ctx.response, ctx.y_unit
    ci = ctx.ci(lo, hi, what="coefficient")
    if _scale(ctx.rt) == "other":
        intro = (
            f"On the {ctx.rt.label(y)} scale {pt.label(col)} has coefficient {fmt(b)}{ci}, "
            f"which has no constant-rate reading for {y}"
        )
    else:
        intro = (
            f"{col} enters as {pt.label(col)}, with coefficient {fmt(b)}{ci}, which has no "
            "constant-rate reading"
        )
    x_unit = ctx.units.get(col, "")
    one = f"one {x_unit}" if x_unit else "one unit"
    beyond = f", beyond the largest observed {col}" if med + 1.0 > float(np.max(x)) else ""
    u = f" {yu}" if yu else ""
    sentence = (
        f"{intro}; the predicted {stat} {y} is {fmt(pred.median)}{u} at the median {col} "
        f"({fmt(med)}) and {fmt(pred.median_plus_one)}{u} at {one} more ({fmt(med + 1.0)}"
        f"{beyond}){_diff_text(d1, None, yu)}, and {fmt(pred.q1)}{u} at the first quartile "
        f"({fmt(q1)}) against {fmt(pred.q3)}{u} at the third quartile ({fmt(q3)})"
        f"{_diff_text(dq, rq, yu)}{ctx.hold_at_medians(col)}"
        f"{ctx.reverse_note(b, f'where {pt.label(col)} is higher')}."
    )
    return TwoPoint(
        name,
        col,
        b,
        lo,
        hi,
        sentence,
        at=at,
        predicted=pred,
        statistic=stat,
        difference_plus_one=d1,
        difference_q1_q3=dq,
        ratio_q1_q3=rq,
    )


def interpret_terms(
    spec: Specification,
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    units: dict[str, str] | None = None,
    level: float = 0.95,
    table: list[CoefficientRow] | None = None,
    standard_errors: str = "classical",
) -> list[Reading]:
    """One reading per slope and per categorical level, with its numbers and ``sentence``.

    ``spec`` is the concrete fitted specification (estimated parameters
    filled in), ``design`` and ``fit`` its full-data design and OLS fit,
    ``prep`` the rows it was fitted on; ``units`` maps column names to unit
    text ("metre"); ``level`` is the confidence level of the intervals;
    ``table`` replaces ``fit.table(level)`` (rows with robust inference too) and
    ``standard_errors`` says whose intervals the readings use ("classical", or a robust
    kind the table holds).
    """
    rows = fit.table(level) if table is None else table
    ctx = _Context(
        spec,
        design,
        prep,
        np.asarray(fit.coef, dtype=float),
        {row.term: row.under(standard_errors) for row in rows},
        {row.term: row.estimate for row in rows},
        dict(units or {}),
        level,
        _reference_point(spec, design, prep),
    )
    rscale = _scale(spec.response_transform)
    out: list[Reading] = []
    for p, term in zip(spec.predictors, design.terms, strict=True):
        col = p.column
        if term.kind == "categorical":
            out.extend(_categorical_readings(ctx, col, term.indices))
            continue
        name = design.names[term.indices[0]]
        x_unit = ctx.units.get(col, "")
        per = f"extra {x_unit}" if x_unit else "extra unit"
        kind = (rscale, _scale(p.transform))
        if kind == ("level", "level"):
            out.append(_level_level(ctx, name, col, per))
        elif kind == ("log", "level"):
            out.append(_log_level(ctx, name, col, per))
        elif kind == ("level", "log"):
            out.append(_level_log(ctx, name, col, p.transform))
        elif kind == ("log", "log"):
            out.append(_log_log(ctx, name, col, p.transform))
        else:
            out.append(_two_point(ctx, name, col, p.transform))
    return out


def _diff_text(diff: float | None, ratio: float | None, unit: str) -> str:
    if diff is None:
        return ""
    u = f" {unit}" if unit else ""
    r = f", ratio {fmt(ratio)}" if ratio is not None else ""
    return f" (difference {fmt(diff)}{u}{r})"


def interpret_fit(
    spec: Specification,
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    units: dict[str, str] | None = None,
    level: float = 0.95,
    table: list[CoefficientRow] | None = None,
    clause: str = "",
    standard_errors: str = "classical",
) -> list[str]:
    """The sentences of :func:`interpret_terms`, one per slope and per categorical level;
    a non-empty ``clause`` (how the intervals were computed) is added to each sentence."""
    items = interpret_terms(spec, design, fit, prep, units, level, table, standard_errors)
    if not clause:
        return [item.sentence for item in items]
    return [f"{item.sentence.rstrip('.')}; {clause}." for item in items]
