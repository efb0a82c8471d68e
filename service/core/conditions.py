"""Checks of the conditions behind an ordinary-least-squares regression.

:func:`assess_conditions` tests linearity, normality, equal variance, independence,
multicollinearity and influence on one candidate's model-scale residuals;
:func:`transform_hints` reads Tukey's bulging rule from each numeric predictor's partial
residuals.  The results are frozen and typed (:class:`ConditionReport`, one
:class:`Condition` per condition, :class:`TransformHint`); their contract form is written in
``service/api/render/conditions.py``.  Every condition reports ``holds``
(``True``/``False``/``None``), its ``tests``, a one-sentence ``note`` and the ``rule`` that
decided ``holds``.

Multiplicity: each condition reports several tests, but ``holds`` is decided by one primary
test per condition (RESET, Shapiro-Wilk or Jarque-Bera, Breusch-Pagan in Koenker's form,
Breusch-Godfrey), so the chance of a false alarm per condition stays at ``alpha``.  The
other tests are for reading, not deciding.  Cut-offs marked "common practice" are rules of
thumb, not tests.

References: Ramsey (1969); Utts (1982); Shapiro & Wilk (1965); Jarque & Bera (1980);
Anderson & Darling (1952); Breusch & Pagan (1979); Koenker (1981); White (1980); Durbin &
Watson (1950, 1951); Breusch (1978); Godfrey (1978); Ljung & Box (1978); Fox & Monette (1992);
Belsley, Kuh & Welsch (1980); Cook (1977); Hoaglin & Welsch (1978); Tukey (1977);
Mosteller & Tukey (1977).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace
from typing import ClassVar

import numpy as np

from service.core import _condition_tests as ct
from service.core import sources as src
from service.core.numbers import count_of, fmt, p_is
from service.core.spec import TermInfo

#: estimated seconds of White's test for n rows and k regressors (selection plans with it)
white_seconds = ct.white_seconds

#: common-practice VIF cut-offs (warn, fail)
VIF_WARN, VIF_FAIL = 5.0, 10.0
#: common-practice cut-off for the scaled condition number (Belsley, Kuh & Welsch 1980)
CONDITION_WARN = 30.0
#: at most this many flagged rows are listed
MAX_FLAGGED_ROWS = 50
#: significance level of the condition tests unless a request sets ``alpha``
DEFAULT_ALPHA = 0.05
#: above this many rows the normality note warns that trivial departures reach significance
LARGE_N = 1000


@dataclass(frozen=True, eq=False)
class ConditionInputs:
    """A fitted candidate: model-scale response, design and row bookkeeping."""

    z: np.ndarray  # (n,) response on the model scale
    X: np.ndarray  # (n, p) design as fitted, with the intercept column if has_intercept
    has_intercept: bool
    terms: tuple[TermInfo, ...]
    row_numbers: np.ndarray  # (n,) each used row's number in the request (1 = first data row)
    order: np.ndarray | None  # (n,) rows sorted by the caller's order column, or None
    alpha: float = DEFAULT_ALPHA


# ------------------------------------------------------------------------------ helpers
def _g(x: float | None, digits: int = 4) -> str:
    return "n/a" if x is None else fmt(x, digits)


def _p(p: float | None) -> str:
    """``p = 0.032`` or ``p < 0.0001`` (the shared rule of :mod:`.numbers`)."""
    return "p n/a" if p is None else p_is(p)


def validate(inp: ConditionInputs) -> tuple[np.ndarray, np.ndarray]:
    """Check shapes and values; return (z, X) as float arrays.  Raises ValueError."""
    z = np.asarray(inp.z, dtype=float)
    X = np.asarray(inp.X, dtype=float)
    if z.ndim != 1 or z.size == 0:
        raise ValueError(f"z must be a non-empty 1-d array; got shape {z.shape}")
    if X.ndim != 2 or X.shape[0] != z.shape[0] or X.shape[1] == 0:
        raise ValueError(f"X must have shape ({z.shape[0]}, p) with p >= 1; got {X.shape}")
    if not (np.all(np.isfinite(z)) and np.all(np.isfinite(X))):
        raise ValueError("z and X must be finite; drop or impute missing values first")
    if not 0 < inp.alpha < 1:
        raise ValueError(f"alpha must lie strictly between 0 and 1; got {inp.alpha}")
    if np.shape(inp.row_numbers) != z.shape:
        raise ValueError(f"row_numbers must have shape {z.shape}; got {np.shape(inp.row_numbers)}")
    if inp.order is not None:
        order = np.asarray(inp.order)
        if order.shape != z.shape or not np.array_equal(np.sort(order), np.arange(z.size)):
            raise ValueError(f"order must be a permutation of 0..{z.size - 1}")
    for term in inp.terms:
        if not term.indices or min(term.indices) < 0 or max(term.indices) >= X.shape[1]:
            raise ValueError(f"term {term.label!r} has column indices {term.indices} outside X")
        if term.raw is not None and np.shape(term.raw) != z.shape:
            raise ValueError(f"term {term.label!r}: raw must have shape {z.shape}")
    return z, X


# --------------------------------------------------------------------------- typed results
@dataclass(frozen=True)
class Condition:
    """One condition: whether it ``holds`` (``None``: not assessed), the ``tests`` read
    (the deciding one marked ``primary``), a one-sentence ``note`` and the ``rule`` that
    decided ``holds``."""

    holds: bool | None
    tests: tuple[ct.Check, ...]
    note: str
    rule: str


@dataclass(frozen=True)
class UnorderedIndependence(Condition):
    """Independence of rows sent without an order: ``holds`` is ``None`` and no test is run,
    since no test on unordered rows can settle it."""


@dataclass(frozen=True, kw_only=True)
class LargestVifCheck(ct.Check):
    """The largest variance inflation factor (GVIF^(1/df) for a dummy set) and its term."""

    threshold: ClassVar[tuple[float, float]] = (VIF_WARN, VIF_FAIL)  # (warn, fail)
    rule: ClassVar[str] = "common practice"
    source: ClassVar[str] = src.GVIF
    term: str | None = None


@dataclass(frozen=True, kw_only=True)
class ConditionNumberCheck(ct.Check):
    """Belsley, Kuh & Welsch's scaled condition number and the condition indices."""

    threshold: ClassVar[float] = CONDITION_WARN
    rule: ClassVar[str] = "common practice"
    source: ClassVar[str] = src.CONDITION_NUMBER
    condition_indices: tuple[float, ...] = ()


@dataclass(frozen=True, kw_only=True)
class ExtremeRowCheck(ct.Check):
    """The most extreme row by one influence measure, against its common-practice cut-off
    (``fail_threshold`` for Cook's distance); ``df`` for the outlier test's t."""

    rule: ClassVar[str] = "common practice"
    row: int | None = None
    threshold: float
    fail_threshold: float | None = None
    source: str
    df: float | None = None


@dataclass(frozen=True)
class VifRow:
    """One predictor's (generalised) variance inflation factor and its common-practice level."""

    term: str
    column: str
    df: int
    vif: float | None  # GVIF^(1/df), compared with the cut-offs
    gvif: float | None
    gvif_adjusted: float | None  # GVIF^(1/(2 df)) (Fox & Monette 1992)
    level: str  # "ok", "warn" or "fail"


@dataclass(frozen=True)
class MulticollinearityCondition(Condition):
    level: str
    vif: tuple[VifRow, ...]
    condition_number: float | None


@dataclass(frozen=True)
class Cutoffs:
    """The common-practice influence cut-offs for ``n`` rows and ``p`` coefficients."""

    cooks_flag: float  # 4/n
    cooks_fail: float  # 1
    leverage: float  # 2p/n
    dffits: float  # 2 sqrt(p/n)
    studentized: float  # 3


@dataclass(frozen=True)
class FlaggedRow:
    """A row over some screening cut-off, with its measures and the cut-offs it exceeds."""

    row: int
    reasons: tuple[str, ...]
    cooks_distance: float | None
    leverage: float | None
    dffits: float | None
    studentized_residual: float | None


@dataclass(frozen=True)
class InfluenceCondition(Condition):
    """``flagged_rows`` lists at most :data:`MAX_FLAGGED_ROWS` of the ``n_flagged`` rows;
    ``cutoffs`` is ``None`` when influence could not be measured."""

    flagged_rows: tuple[FlaggedRow, ...]
    n_flagged: int
    cutoffs: Cutoffs | None = None

    @property
    def flagged_rows_truncated(self) -> bool:
        return self.n_flagged > len(self.flagged_rows)


@dataclass(frozen=True, kw_only=True)
class TransformHint:
    """Tukey's bulging-rule reading of one numeric predictor (:func:`transform_hints`); the
    readings are ``None`` where the curve could not be read, the bulge and directions
    ``None`` unless the rule applies."""

    column: str
    label: str
    slope_sign: int | None = None
    curvature_sign: int | None = None
    bulge: str | None = None
    x_direction: str | None = None
    y_direction: str | None = None
    p_value: float | None = None
    monotone: bool | None = None
    sentence: str


@dataclass(frozen=True)
class ConditionReport:
    """The six conditions of one fit and its transform hints.  The contract's ``conditions``
    block holds the six conditions; the hints are the entry's ``transform_hints``."""

    linearity: Condition
    normality: Condition
    equal_variance: Condition
    independence: Condition
    multicollinearity: MulticollinearityCondition
    influence: InfluenceCondition
    hints: tuple[TransformHint, ...] = ()

    def named(self) -> tuple[tuple[str, Condition], ...]:
        """(name, condition) pairs in the order of :data:`CONDITION_NAMES`."""
        return tuple((c, self.of(c)) for c in CONDITION_NAMES)

    def of(self, name: str) -> Condition:
        """The condition called ``name`` (one of :data:`CONDITION_NAMES`)."""
        if name not in CONDITION_NAMES:
            raise KeyError(name)
        out: Condition = getattr(self, name)
        return out


#: the conditions, in the order every output lists them: the condition fields of
#: :class:`ConditionReport`, where they are written once
CONDITION_NAMES: tuple[str, ...] = tuple(
    f.name for f in fields(ConditionReport) if f.name != "hints"
)


def _numeric_terms(inp: ConditionInputs) -> list[TermInfo]:
    return [t for t in inp.terms if t.kind == "numeric" and len(t.indices) == 1]


def _not_assessed(reason: str) -> str:
    return f"Not assessed: {reason}."


def _decide(check: ct.Check, alpha: float) -> bool | None:
    p = check.p_value
    return None if p is None else bool(p >= alpha)


def _marked(tests: tuple[ct.Check, ...], primary: ct.Check) -> tuple[ct.Check, ...]:
    """``tests`` with the deciding one marked ``primary``."""
    return tuple(replace(t, primary=t is primary) for t in tests)


# ---------------------------------------------------------------------------- linearity
def _curvatures(
    fit: ct.Fit, inp: ConditionInputs
) -> list[tuple[TermInfo, ct.Curvature | Exception]]:
    """The partial-residual curvature reading of each numeric term (shared by checks and hints)."""
    out: list[tuple[TermInfo, ct.Curvature | Exception]] = []
    for term in _numeric_terms(inp):
        raw = None if term.raw is None else np.asarray(term.raw, dtype=float)
        try:
            with np.errstate(all="ignore"):  # degenerate columns surface as NotApplicable
                out.append((term, ct.curvature(fit, term.indices[0], raw)))
        except Exception as exc:
            out.append((term, exc))
    return out


def _curvature_checks(
    curves: list[tuple[TermInfo, ct.Curvature | Exception]],
) -> list[ct.CurvatureCheck]:
    out = []
    for term, c in curves:
        failed = ct.CurvatureCheck(
            name=f"Curvature of partial residuals: {term.label}",
            column=term.column,
            label=term.label,
        )

        def compute(
            c: ct.Curvature | Exception = c, failed: ct.CurvatureCheck = failed
        ) -> ct.CurvatureCheck:
            if isinstance(c, Exception):
                raise c
            return replace(
                failed,
                statistic=c.t,
                p_value=c.p_value,
                df=float(c.df),
                curvature_sign=int(np.sign(c.curvature)),
            )

        out.append(ct.guarded(failed, compute))
    return out


def _linearity(
    fit: ct.Fit, inp: ConditionInputs, curvatures: list[tuple[TermInfo, ct.Curvature | Exception]]
) -> Condition:
    a = inp.alpha
    rule = (
        f"holds = false when Ramsey's RESET (fitted^2 and fitted^3) rejects at alpha = {a}; "
        "the rainbow test and the per-predictor curvature checks are reported but do not "
        "decide, which keeps the false-alarm rate of the decision at alpha"
    )
    reset = ct.reset_test(fit)
    curves = _curvature_checks(curvatures)
    tests = _marked((reset, ct.rainbow_test(fit), *curves), reset)
    holds = _decide(reset, a)
    bent = [c for c in curves if c.p_value is not None and c.p_value < a]
    bent_txt = ", ".join(f"{c.label} ({_p(c.p_value)})" for c in bent[:3])
    if holds is None:
        note = f"Linearity could not be tested: {reset.reason or 'undefined'}."
    elif holds:
        note = (
            "No sign of a wrong functional form (RESET on fitted^2 and fitted^3, "
            f"{_p(reset.p_value)})"
        )
        note += f", though the partial residuals of {bent_txt} show curvature." if bent else "."
    else:
        note = (
            "The straight-line form looks wrong (RESET on fitted^2 and fitted^3, "
            f"F = {_g(reset.statistic)}, {_p(reset.p_value)})"
        )
        note += f"; curvature shows in the partial residuals of {bent_txt}." if bent else "."
    return Condition(holds, tests, note, rule)


# ---------------------------------------------------------------------------- normality
def _normality(fit: ct.Fit, inp: ConditionInputs) -> Condition:
    a = inp.alpha
    rule = (
        f"holds = false when the primary test rejects at alpha = {a}: Shapiro-Wilk for "
        "3 <= n <= 5000, otherwise Jarque-Bera; Anderson-Darling is reported only. "
        "Large samples flag departures too small to matter for OLS inference"
    )
    sw, jb, ad = ct.shapiro_test(fit), ct.jarque_bera_test(fit), ct.anderson_darling_test(fit)
    primary: ct.Check = sw if sw.p_value is not None else jb
    tests = _marked((sw, jb, ad), primary)
    holds = _decide(primary, a)
    name = primary.name
    if holds is None:
        note = f"Normality could not be tested: {primary.reason or 'undefined'}."
    elif holds:
        note = (
            f"Residuals are consistent with a normal distribution ({name} {_p(primary.p_value)})."
        )
    else:
        shape = ""
        if jb.skewness is not None and jb.kurtosis is not None:
            shape = f"; skewness {_g(jb.skewness, 3)}, kurtosis {_g(jb.kurtosis, 3)} vs 3"
        note = f"Residuals depart from a normal distribution ({name} {_p(primary.p_value)}{shape})"
        if fit.n > LARGE_N:
            note += (
                f", but with n = {fit.n} even a trivial departure is significant, so "
                "judge its size from the Q-Q plot."
            )
        else:
            note += "."
    return Condition(holds, tests, note, rule)


# ----------------------------------------------------------------------- equal variance
def _equal_variance(fit: ct.Fit, inp: ConditionInputs, white: bool) -> Condition:
    a = inp.alpha
    rule = (
        f"holds = false when the Breusch-Pagan test in Koenker's studentised form rejects at "
        f"alpha = {a}; White's test is reported only"
    )
    Z = None if fit.residual_reason else ct.standardized_regressors(fit)
    bp = ct.breusch_pagan_test(fit, Z)
    later = not white and fit.residual_reason is None  # without residuals: a reason at once
    tests = _marked((bp, WHITE_DEFERRED if later else ct.white_test(fit, Z)), bp)
    holds = _decide(bp, a)
    p = _p(bp.p_value)
    if holds is None:
        note = f"Equal variance could not be tested: {bp.reason or 'undefined'}."
    elif holds:
        note = (
            "No evidence that the residual spread changes with the predictors "
            f"(Breusch-Pagan, Koenker form, {p})."
        )
    elif not _numeric_terms(inp):
        note = f"Residual spread differs between groups (Breusch-Pagan, Koenker form, {p})."
    else:
        with np.errstate(all="ignore"):
            rho = np.corrcoef(np.abs(fit.resid), fit.fitted)[0, 1]
        trend = "grows with" if rho >= 0 else "shrinks as"
        tail = "the fitted values" if rho >= 0 else "the fitted values grow"
        note = f"Residual spread {trend} {tail} (Breusch-Pagan, Koenker form, {p})."
    return Condition(holds, tests, note, rule)


# ------------------------------------------------------------------------- independence
def _independence(fit: ct.Fit, inp: ConditionInputs) -> Condition:
    a = inp.alpha
    rule = (
        f"with an order: holds = false when the Breusch-Godfrey test rejects at alpha = {a}; "
        "Durbin-Watson (common-practice range 1.5-2.5) and Ljung-Box are reported only. "
        "Without an order: holds = null"
    )
    if inp.order is None:
        return UnorderedIndependence(
            None,
            (),
            "Independence is a matter of how the data were collected, and no test on unordered "
            "rows can settle it; send an order column (e.g. time) to test serial correlation.",
            rule,
        )
    if fit.residual_reason:
        return Condition(None, (), _not_assessed(fit.residual_reason), rule)
    order = np.asarray(inp.order, dtype=np.intp)
    e = fit.resid[order]
    dw, bg = ct.durbin_watson_test(e), ct.breusch_godfrey_test(fit, order)
    lb = ct.ljung_box_test(e)
    tests = _marked((dw, bg, lb), bg)
    holds = _decide(bg, a)
    dw_txt = f", Durbin-Watson {_g(dw.statistic, 3)}" if dw.statistic is not None else ""
    if holds is None:
        note = f"Independence could not be tested: {bg.reason or 'undefined'}."
    elif holds:
        note = (
            f"No serial correlation in the given order (Breusch-Godfrey {_p(bg.p_value)}{dw_txt})."
        )
    else:
        note = (
            "Residuals close together in the given order are correlated "
            f"(Breusch-Godfrey {_p(bg.p_value)}{dw_txt})."
        )
    return Condition(holds, tests, note, rule)


# -------------------------------------------------------------------- multicollinearity
def _vif_groups(X: np.ndarray, inp: ConditionInputs) -> list[tuple[str, str, list[int]]]:
    """(label, column, X-columns) per predictor; full dummy sets lose one column."""
    nonconst = set(np.flatnonzero(np.ptp(X, axis=0) > 0).tolist())
    groups: list[tuple[str, str, list[int]]] = []
    seen: set[int] = set()
    for term in inp.terms:
        cols = [j for j in term.indices if j in nonconst]
        seen.update(term.indices)
        if len(cols) > 1 and np.ptp(X[:, cols].sum(axis=1)) == 0:
            cols = cols[:-1]  # a full set of dummies sums to a constant; GVIF is invariant
        if cols:
            groups.append((term.label, term.column, cols))
    for j in sorted(nonconst - seen):
        groups.append((f"column {j}", f"column {j}", [j]))
    return groups


def _multicollinearity(
    fit: ct.Fit, X: np.ndarray, inp: ConditionInputs
) -> MulticollinearityCondition:
    rule = (
        f"common practice: a VIF above {VIF_WARN:g} warns and above {VIF_FAIL:g} fails "
        "(holds = false); for a predictor with several dummy columns GVIF^(1/df) is compared "
        "(Fox & Monette 1992: GVIF^(1/(2 df)) against the square roots of the cut-offs). "
        "Exactly collinear columns fail. The scaled condition number is reported (common "
        f"practice: above {CONDITION_WARN:g} signals a near-dependence) but does not decide"
    )
    groups = _vif_groups(X, inp)
    gvifs = ct.generalized_vif(X, [g[2] for g in groups]) if groups else []
    vif_rows: list[VifRow] = []
    for (label, column, cols), gvif in zip(groups, gvifs, strict=True):
        df = len(cols)
        comparable = None if gvif is None else gvif ** (1.0 / df)
        level = (
            "fail"
            if comparable is None or comparable > VIF_FAIL
            else "warn"
            if comparable > VIF_WARN
            else "ok"
        )
        vif_rows.append(
            VifRow(
                term=label,
                column=column,
                df=df,
                vif=comparable,
                gvif=gvif,
                gvif_adjusted=None if gvif is None else gvif ** (1.0 / (2 * df)),
                level=level,
            )
        )
    cond, indices = ct.scaled_condition_number(X)
    finite = [(r.vif, r) for r in vif_rows if r.vif is not None]
    worst = max(finite, key=lambda t: t[0], default=(None, None))[1]
    rank_deficient = fit.rank < X.shape[1] or any(r.gvif is None for r in vif_rows)
    tests: tuple[ct.Check, ...] = (
        LargestVifCheck(
            name="Largest variance inflation factor",
            statistic=None if worst is None else worst.vif,
            term=None if worst is None else worst.term,
        ),
        ConditionNumberCheck(
            name="Condition number (unit-length columns, BKW)",
            statistic=cond,
            condition_indices=tuple(indices),
        ),
    )
    levels = {r.level for r in vif_rows}
    holds = not (rank_deficient or "fail" in levels)
    cond_txt = f"; scaled condition number {_g(cond, 4)}" if cond is not None else ""
    if rank_deficient:
        names = ", ".join(r.term for r in vif_rows if r.gvif is None) or "some columns"
        note = (
            f"Predictor columns are exactly collinear ({names}; design rank {fit.rank} of "
            f"{X.shape[1]} columns), so their separate effects cannot be estimated."
        )
    elif not vif_rows:
        note = "The model has no predictors, so multicollinearity cannot arise."
    elif len(vif_rows) == 1:
        note = "Only one predictor, so multicollinearity cannot arise (VIF 1)."
    elif "fail" in levels:
        bad = sorted((r for r in vif_rows if r.level == "fail"), key=lambda r: -(r.vif or math.inf))
        names = ", ".join(r.term for r in bad[:4])
        note = (
            f"Predictors overlap strongly: {names} have VIF above {VIF_FAIL:g} (common "
            f"practice), largest {_g(worst.vif if worst else None, 5)} for "
            f"{worst.term if worst else 'n/a'}{cond_txt}."
        )
    elif "warn" in levels:
        assert worst is not None  # no "fail" level: every VIF is finite
        note = (
            f"Moderate overlap between predictors: largest VIF {_g(worst.vif, 3)} for "
            f"{worst.term}, above the common-practice warning level {VIF_WARN:g}{cond_txt}."
        )
    else:
        assert worst is not None  # predictors present and every VIF finite
        note = f"Predictors are not strongly related (largest VIF {_g(worst.vif, 3)}{cond_txt})."
    level = "fail" if not holds else ("warn" if "warn" in levels else "ok")
    return MulticollinearityCondition(holds, tests, note, rule, level, tuple(vif_rows), cond)


# ---------------------------------------------------------------------------- influence
def flag_rows(fit: ct.Fit) -> tuple[np.ndarray, dict[str, np.ndarray], Cutoffs]:
    """Indices of flagged rows (largest Cook's distance first), reason masks and cut-offs."""
    inf = fit.influence
    if inf is None:
        raise ValueError("flag_rows needs a fit with influence measures")
    n, p = fit.n, fit.rank
    cut = Cutoffs(
        cooks_flag=4.0 / n,
        cooks_fail=1.0,
        leverage=2.0 * p / n,
        dffits=2.0 * math.sqrt(p / n),
        studentized=3.0,
    )
    with np.errstate(invalid="ignore"):
        masks = {
            "Cook's distance > 1": inf.cooks > cut.cooks_fail,
            "Cook's distance > 4/n": inf.cooks > cut.cooks_flag,
            "leverage > 2p/n": inf.leverage > cut.leverage,
            "|DFFITS| > 2 sqrt(p/n)": np.abs(inf.dffits) > cut.dffits,
            "|studentised residual| > 3": np.abs(inf.studentized) > cut.studentized,
            "leverage 1 (the fit passes through this row)": inf.leverage >= 1 - ct.LEVERAGE_ONE_TOL,
        }
    any_flag = np.zeros(n, dtype=bool)
    for m in masks.values():
        any_flag |= m
    idx = np.flatnonzero(any_flag)
    key = np.where(np.isnan(inf.cooks[idx]), np.inf, inf.cooks[idx])
    return idx[np.argsort(-key, kind="stable")], masks, cut


def _influence(fit: ct.Fit, inp: ConditionInputs) -> InfluenceCondition:
    rule = (
        "common practice: holds = false when any Cook's distance exceeds 1 (or a row has "
        "leverage 1); rows are flagged for Cook's distance > 4/n, leverage > 2p/n, "
        "|DFFITS| > 2 sqrt(p/n) or |externally studentised residual| > 3"
    )
    if fit.influence is None:
        reason = fit.residual_reason or "influence undefined"
        return InfluenceCondition(None, (), _not_assessed(reason), rule, (), 0)
    inf, n = fit.influence, fit.n
    ids = np.asarray(inp.row_numbers)
    order, masks, cut = flag_rows(fit)
    listed = tuple(
        FlaggedRow(
            row=int(ids[i]),
            reasons=tuple(name for name, m in masks.items() if m[i]),
            cooks_distance=ct.num(inf.cooks[i]),
            leverage=ct.num(inf.leverage[i]),
            dffits=ct.num(inf.dffits[i]),
            studentized_residual=ct.num(inf.studentized[i]),
        )
        for i in order[:MAX_FLAGGED_ROWS]
    )
    undefined = (
        f"undefined: {count_of(int(fit.df_resid), 'residual degree')} of freedom, or "
        "every row has leverage 1"
    )

    def largest(
        name: str,
        values: np.ndarray,
        threshold: float,
        source: str,
        fail_threshold: float | None = None,
        df: float | None = None,
    ) -> ExtremeRowCheck:
        finite = np.isfinite(values)
        i = int(np.argmax(np.where(finite, values, -np.inf))) if finite.any() else None
        statistic = None if i is None else ct.num(values[i])
        p_value = None
        if df is not None and statistic is not None and fit.df_resid >= 2:
            # Bonferroni: n times the two-sided t_{n-p-1} tail probability of the largest |t_i|
            p_value = min(1.0, n * 2 * ct.t_sf(statistic, df))
        return ExtremeRowCheck(
            name=name,
            statistic=statistic,
            p_value=p_value,
            row=None if i is None else int(ids[i]),
            threshold=threshold,
            fail_threshold=fail_threshold,
            source=source,
            df=df,
            reason=undefined if statistic is None else None,
        )

    cook = largest(
        "Cook's distance (largest)",
        inf.cooks,
        cut.cooks_flag,
        src.COOKS_DISTANCE,
        fail_threshold=cut.cooks_fail,
    )
    lev = largest("Leverage (largest hat value)", inf.leverage, cut.leverage, src.LEVERAGE)
    dff = largest("DFFITS (largest absolute value)", np.abs(inf.dffits), cut.dffits, src.DFFITS)
    out = largest(
        "Outlier test (largest |externally studentised residual|, Bonferroni)",
        np.abs(inf.studentized),
        cut.studentized,
        src.OUTLIER_TEST,
        df=float(fit.df_resid - 1),
    )
    tests: tuple[ct.Check, ...] = (cook, lev, dff, out)
    n_fail = int(np.sum(masks["Cook's distance > 1"]))
    n_one = int(np.sum(masks["leverage 1 (the fit passes through this row)"]))
    holds = n_fail == 0 and n_one == 0
    d_max, d_row = cook.statistic, cook.row
    if n_one:
        note = (
            f"{count_of(n_one, 'row')} {'has' if n_one == 1 else 'have'} leverage 1, so the fit passes through them exactly and "
            "their influence cannot be measured."
        )
    elif not holds:
        note = (
            f"{count_of(n_fail, 'row')} {'has' if n_fail == 1 else 'have'} Cook's distance above 1 (largest {_g(d_max, 4)} at row "
            f"{d_row}); {count_of(int(order.size), 'row')} flagged in all."
        )
    else:
        note = (
            f"No single row dominates the fit (largest Cook's distance {_g(d_max, 3)} at "
            f"row {d_row}, below 1); {count_of(int(order.size), 'row')} "
            f"{'exceeds' if order.size == 1 else 'exceed'} a common-practice "
            "screening cut-off."
        )
    return InfluenceCondition(holds, tests, note, rule, listed, int(order.size), cut)


# --------------------------------------------------------------------------- public API
#: White's test of a report assessed with ``white=False``, until :func:`with_white` runs it
WHITE_DEFERRED = ct.WhiteCheck(
    name="White",
    reason="not computed: White's test is computed for listed entries only",
    primary=False,
)


def assess_conditions(inp: ConditionInputs, *, white: bool = True) -> ConditionReport:
    """Assess the conditions of the OLS fit of ``inp.z`` on ``inp.X``.

    Returns the six conditions (each ``holds``: bool or ``None``, its ``tests``, a ``note``
    and the ``rule``) and :func:`transform_hints`' hints.  Every number is a finite float or
    ``None``.  Raises ``ValueError`` only for malformed inputs.

    ``white=False`` leaves out White's test (:data:`WHITE_DEFERRED` stands in its place):
    it decides nothing (Breusch-Pagan decides equal variance), and its auxiliary regression
    on every square and cross-product is by far the dearest test of a wide design (O(n q^2)
    for q = k(k+1)/2 columns), so a search assesses the band's members without it and adds
    it to the entries it lists (:func:`with_white`).
    """
    z, X = validate(inp)
    fit = ct.fit_model(z, X, inp.has_intercept)
    curvatures = _curvatures(fit, inp)
    linearity = _linearity(fit, inp, curvatures)
    normality = _normality(fit, inp)
    equal_variance = _equal_variance(fit, inp, white)
    independence = _independence(fit, inp)
    influence = _influence(fit, inp)
    return ConditionReport(
        linearity=linearity,
        normality=normality,
        equal_variance=equal_variance,
        independence=independence,
        multicollinearity=_multicollinearity(fit, X, inp),
        influence=influence,
        hints=_hints(curvatures, inp.alpha),
    )


def with_white(
    report: ConditionReport,
    inp: ConditionInputs,
    seconds: float | None = None,
    resid: np.ndarray | None = None,
) -> ConditionReport:
    """``report`` (of ``inp``, assessed with ``white=False``) with White's test computed in
    the place :data:`WHITE_DEFERRED` held; the other tests are kept as they are, so none is
    computed twice.  ``seconds`` is the time the test may take: when its estimated cost
    (:func:`~service.core._condition_tests.white_seconds`) is larger, the check says so
    instead of running.  ``resid``: the least-squares residuals of ``inp.z`` on ``inp.X``
    where the caller has them (the entry's own fit), else they are fitted again; the two
    agree to rounding (about 1e-13 relative), as every least-squares route does.  A report
    whose White test is not deferred comes back unchanged.
    """
    ev = report.equal_variance
    if WHITE_DEFERRED not in ev.tests:
        return report
    z, X = validate(inp)
    if resid is None:
        resid = ct.fit_model(z, X, inp.has_intercept).resid
    white = replace(ct.white_test_of(resid, ct.standardized_columns(X), seconds), primary=False)
    tests = tuple(white if t == WHITE_DEFERRED else t for t in ev.tests)
    return replace(report, equal_variance=replace(ev, tests=tests))


#: Tukey's bulging rule: (slope sign, curvature sign) -> (bulge, x move, y move)
BULGING_RULE = {
    (1, -1): ("up-left", "down", "up"),  # increasing concave, e.g. y = sqrt(x)
    (1, 1): ("down-right", "up", "down"),  # increasing convex, e.g. y = x^2
    (-1, 1): ("down-left", "down", "down"),  # decreasing convex, e.g. y = 1/x
    (-1, -1): ("up-right", "up", "up"),  # decreasing concave
}


def _hints(
    curvatures: list[tuple[TermInfo, ct.Curvature | Exception]], alpha: float
) -> tuple[TransformHint, ...]:
    hints = []
    for term, c in curvatures:
        raw = None if term.raw is None else np.asarray(term.raw, dtype=float)
        if isinstance(c, Exception):
            reason = str(c) if isinstance(c, ct.NotApplicable) else type(c).__name__
            sentence = f"No curvature reading for {term.label}: {reason}."
            hints.append(TransformHint(column=term.column, label=term.label, sentence=sentence))
            continue
        slope, curv = int(np.sign(c.slope)), int(np.sign(c.curvature))
        p = ct.num(c.p_value)
        bulge = xd = yd = None
        if p is None or p >= alpha or curv == 0 or slope == 0:
            sentence = (
                f"The partial residuals of {term.label} show no significant "
                f"curvature ({_p(p)}); keep its current scale."
            )
        elif not c.monotone:
            sentence = (
                f"The partial residuals of {term.label} bend but do not move in "
                f"one direction ({_p(p)}), so no power of {term.column} "
                "straightens them; consider a quadratic term instead."
            )
        else:
            bulge, xd, yd = BULGING_RULE[(slope, curv)]
            sentence = (
                f"The partial residuals of {term.label} bulge {bulge} (curvature "
                f"{_p(p)}): by Tukey's bulging rule, move {term.column} one step "
                f"{xd} the ladder of powers from its current scale, or the response "
                f"one step {yd}"
            )
            if xd == "down" and raw is not None and np.min(raw) <= 0:
                sentence += (
                    f" ({term.column} has values <= 0, so shift it before a log or a "
                    "negative power)"
                )
            sentence += "."
        hints.append(
            TransformHint(
                column=term.column,
                label=term.label,
                slope_sign=slope,
                curvature_sign=curv,
                bulge=bulge,
                x_direction=xd,
                y_direction=yd,
                p_value=p,
                monotone=c.monotone,
                sentence=sentence,
            )
        )
    return tuple(hints)


def transform_hints(inp: ConditionInputs) -> tuple[TransformHint, ...]:
    """Tukey's bulging-rule hint for each numeric predictor (Mosteller & Tukey 1977).

    Each is a :class:`TransformHint` ending in a plain-language ``sentence``.  The partial residual
    e + b_j w_j is regressed on the centred predictor and its square, on the model's current
    scale of the predictor (so an already-right log term gives no hint); directions are
    ladder moves from that current scale.  ``bulge`` and the directions are ``None`` unless
    the curvature is significant at ``alpha`` and the curve is monotone.
    """
    z, X = validate(inp)
    return _hints(_curvatures(ct.fit_model(z, X, inp.has_intercept), inp), inp.alpha)
