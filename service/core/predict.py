"""Predictions on the original response scale from a fitted model.

The :class:`~service.core.model.Model` (built by :func:`service.core.model.build_model`,
or read back from an artifact by :mod:`service.api.artifact`) carries the
specification, the coefficients b, (X'X)^-1, s^2, the residual degrees of
freedom, the categorical level encodings, the z-scale residuals and the
training ranges.  For a new row x0 with linear predictor eta0 = x0'b on the
model scale z = g(y):

* ``median`` = g^-1(eta0): a monotone g maps the median of z to the median of y
  when the z-scale errors are symmetric;
* ``mean``   = (1/n) sum_i g^-1(eta0 + e_i), the smearing estimate of Duan
  (1983) "Smearing estimate: a nonparametric retransformation method", JASA
  78:605-610, over the stored residuals;
* ``lower``/``upper``: the prediction interval on the model scale,
  eta0 -/+ t_{df, (1+level)/2} s sqrt(1 + x0'(X'X)^-1 x0), mapped through g^-1
  at its end points (swapped when g decreases).  Because g is strictly
  monotone the back-transformed interval has exactly the z-scale coverage; it
  brackets the median, not the mean.

A row is an extrapolation when a numeric predictor lies outside its training
range or its leverage x0'(X'X)^-1 x0 exceeds the largest training leverage.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from . import cvplus, retransform
from . import sources as src
from .data import RawColumn, as_categorical, as_numeric, read_table, shown
from .errors import (
    Cell,
    DataColumn,
    DataRow,
    FieldProblem,
    InputError,
    Location,
    Option,
    Table,
)
from .model import Model
from .numbers import fmt, rows_named
from .spec import Columns, build_design

MAX_PROBLEMS = 20
ROWS_LISTED = 5
LEVERAGE_RTOL = 1e-9  # a training row recomputed may exceed the stored maximum by rounding
INTERVAL_METHODS = tuple(cvplus.IntervalMethod)


# -------------------------------------------------------------- new design
def _missing_column(source: str, col: str) -> DataColumn:
    return DataColumn(col, source)


def _record_cell(where: Location, column: str) -> Location:
    """Where a record lacks ``column``: that record's cell (other places stay as they are)."""
    if isinstance(where, DataRow) and where.layout == "records":
        return Cell(column, where.row, "records")
    return where


def new_design(model: Model, data: dict[str, Any]) -> tuple[np.ndarray, dict[str, np.ndarray], int]:
    """Design matrix (m, p) for the rows of ``data`` in input order.

    Returns ``(X, numeric raw values by column, m)``.  Raises one
    :class:`InputError` listing (up to MAX_PROBLEMS) cells that cannot be used:
    a missing predictor column, a missing value, a non-numeric value in a
    numeric column, a value outside the transform's domain, or a level the
    model never saw.
    """
    table = read_table(data)
    m = table.n_rows
    if m == 0:
        raise InputError.at(Table(), "the data have no rows to predict")
    spec = model.spec
    problems: list[FieldProblem] = []
    known = set(table.names)
    for p in spec.predictors:
        if p.column not in known:
            problems.append(
                FieldProblem(
                    _missing_column(table.source, p.column),
                    f"predictor column '{p.column}' is missing from the data; "
                    "the model needs " + ", ".join(f"'{q.column}'" for q in spec.predictors),
                )
            )
    if problems:
        raise InputError(
            problems[0].detail
            if len(problems) == 1
            else f"{len(problems)} predictor columns are missing from the data",
            problems,
        )

    raw_numeric: dict[str, np.ndarray] = {}
    categorical_values: dict[str, np.ndarray] = {}

    def add(where: Location, detail: str) -> None:
        if len(problems) < MAX_PROBLEMS:
            problems.append(FieldProblem(where, detail))

    n_bad = 0
    for p in spec.predictors:
        try:
            raw: RawColumn = table.get(p.column)
        except InputError as exc:  # a record without the field
            where = exc.problems[0].where if exc.problems else Table()
            add(
                _record_cell(where, p.column),
                f"a row has no value for predictor '{p.column}'; every row needs one",
            )
            n_bad += 1
            continue
        if model.is_categorical(p.column):
            typed = as_categorical(raw)
            info = model.levels[p.column]
            allowed = set(info.levels)
            for i in np.flatnonzero(typed.missing):
                n_bad += 1
                add(
                    raw.cell(int(i)),
                    f"predictor '{p.column}' is missing (null) in {rows_named([int(i)])}; "
                    "a prediction needs every predictor value",
                )
            for row, v in enumerate(typed.values):
                if v is not None and v not in allowed:
                    n_bad += 1
                    add(
                        raw.cell(row),
                        f"level '{v}' of '{p.column}' in {rows_named([row])} did not "
                        f"occur in the training data (levels: {', '.join(info.levels[:20])}); "
                        "the model cannot predict for it",
                    )
            categorical_values[p.column] = typed.values
            continue
        try:
            typed = as_numeric(raw, "predictor")
        except InputError as exc:
            for fp in exc.problems:
                add(fp.where, fp.detail)
            n_bad += 1
            continue
        x = typed.values
        for i in np.flatnonzero(typed.missing):
            n_bad += 1
            add(
                raw.cell(int(i)),
                f"predictor '{p.column}' is missing (null) in {rows_named([int(i)])}; "
                "a prediction needs every predictor value",
            )
        t = p.transform
        ok = ~typed.missing
        bad = np.zeros(m, dtype=bool)
        if np.any(ok):
            with np.errstate(all="ignore"):  # outside the domain, or where the map overflows
                bad[ok] = ~t.domain_mask(x[ok]) | ~np.isfinite(t.forward(x[ok]))
        label = t.label(p.column)
        for i in np.flatnonzero(bad):
            n_bad += 1
            add(
                raw.cell(int(i)),
                f"predictor '{p.column}' is {x[i]:.6g} in {rows_named([int(i)])}, "
                f"where {label} (the model's scale for '{p.column}') is not defined; it needs "
                f"{t.domain_text()}",
            )
        raw_numeric[p.column] = x
    if problems:
        detail = (
            problems[0].detail
            if n_bad == 1
            else (f"{n_bad} cells cannot be used for prediction; the first: {problems[0].detail}")
        )
        raise InputError(detail, problems)
    # every cell is usable now: the one design builder, with the model's stored levels
    rows = Columns(m, raw_numeric, categorical_values)
    return build_design(spec, rows, levels=model.levels).X, raw_numeric, m


# ------------------------------------------------------------------ numbers
@dataclass(frozen=True, eq=False)
class ModelScaleInterval:
    """Linear predictor ``fit``, ``leverage`` and prediction limits on the model scale."""

    fit: np.ndarray
    leverage: np.ndarray
    lower: np.ndarray
    upper: np.ndarray


def model_scale_interval(model: Model, X: np.ndarray, interval: float = 0.95) -> ModelScaleInterval:
    """Linear predictor and prediction interval on the model (z) scale.

    ``X``: (m, p).  Returns arrays ``fit`` = X b, ``leverage`` h0 =
    x0'(X'X)^-1 x0, and ``lower``/``upper`` = fit -/+ t s sqrt(1 + h0) with
    t the (1 + interval)/2 quantile of Student's t on ``df_residual`` degrees
    of freedom (the textbook OLS prediction interval; statsmodels calls it
    ``obs_ci_lower``/``obs_ci_upper``).
    """
    with np.errstate(all="ignore"):
        fit = X @ model.coef
        h0 = np.einsum("ij,jk,ik->i", X, model.xtx_inverse, X)
        tq = float(stats.t.ppf(0.5 + interval / 2.0, model.df_residual))
        half = tq * np.sqrt(model.residual_variance * (1.0 + np.maximum(h0, 0.0)))
    return ModelScaleInterval(fit, h0, fit - half, fit + half)


def _rows_text(idx: np.ndarray) -> str:
    return rows_named(idx.tolist(), ROWS_LISTED)


def _num(v: float) -> str:
    return fmt(v)


@dataclass(frozen=True, eq=False)
class Predictions:
    """Predictions for the rows of a table, in input order: ``mean`` (smeared), ``median``
    (naive back-transform) and the prediction limits ``lower`` / ``upper`` on the original
    scale, ``leverage``, the linear predictor ``eta`` and its limits on the model scale
    (NaN where a value cannot be computed: ``warnings`` says why); each row's
    ``extrapolation_reasons``; the ``interval`` level and the ``method`` used, with the
    ``method_reason`` it was chosen for."""

    mean: np.ndarray
    median: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    leverage: np.ndarray
    eta: np.ndarray
    eta_lower: np.ndarray
    eta_upper: np.ndarray
    extrapolation_reasons: tuple[tuple[str, ...], ...]
    interval: float
    method: str
    method_reason: str
    warnings: tuple[str, ...]

    @property
    def extrapolation(self) -> np.ndarray:
        return np.array([bool(r) for r in self.extrapolation_reasons], dtype=bool)

    @property
    def source(self) -> str:
        return src.PREDICTION_INTERVAL[self.method]


def interval_method(model: Model, asked: object) -> tuple[cvplus.IntervalMethod, str]:
    """(method, clause): the caller's choice, checked, or the model's default
    (:func:`cvplus.default_method`: CV+ when normality fails on the entry)."""
    if asked is None:
        return cvplus.default_method(
            model.conditions_failed, model.cv_plus is not None, model.cv_plus_missing
        )
    if asked not in INTERVAL_METHODS:
        raise InputError.at(
            Option("interval_method"),
            f"interval_method {shown(asked)} is not one this service computes; send 'normal' "
            "(normal-theory interval) or 'cv_plus' (from the out-of-fold residuals), or leave "
            "it out to let the model's condition results choose",
        )
    if asked == "cv_plus" and model.cv_plus is None:
        raise InputError.at(
            Option("interval_method"),
            "interval_method 'cv_plus' needs the out-of-fold fits stored in the model, and "
            f"this model has none ({model.cv_plus_missing}); send 'normal' or leave "
            "interval_method out",
        )
    return cvplus.IntervalMethod(str(asked)), cvplus.REASON_ASKED


def predict(
    model: Model,
    data: dict[str, Any],
    interval: float = 0.95,
    method: str | None = None,
) -> Predictions:
    """Predictions for every row of ``data`` (contract Data object), in input order.

    ``method``: "normal" (t interval on the model scale), "cv_plus" (CV+ from the stored
    out-of-fold residuals, :mod:`cvplus`) or None (the model's default).
    Returns :class:`Predictions`: every number on the ORIGINAL response scale except
    ``leverage`` and the model-scale ``eta`` and its limits.  A value that cannot be
    computed (an inverse that does not exist or overflows) is NaN there, rendered as null,
    and explained in ``warnings``.
    """
    if not (isinstance(interval, (int, float)) and not isinstance(interval, bool)) or not (
        0.0 < interval < 1.0
    ):
        raise InputError.at(
            Option("interval"),
            f"interval must lie strictly between 0 and 1 (got "
            f"{interval!r}); 0.95 gives a 95% prediction interval",
        )
    used, why = interval_method(model, method)
    X, raw, m = new_design(model, data)
    t = model.response_transform
    zs = model_scale_interval(model, X, interval)
    z_lower, z_upper = zs.lower, zs.upper
    cvp = model.cv_plus if used == "cv_plus" else None
    fp = cvp.fold_powers if cvp is not None else None
    x_pow = None if fp is None else np.column_stack([raw[c] for c in fp.columns])
    eta = zs.fit
    ok_eta = np.isfinite(eta)
    safe = np.where(ok_eta, eta, 0.0)
    with np.errstate(all="ignore"):
        median = np.where(ok_eta, retransform.naive(t, safe), np.nan)
        mean = np.where(ok_eta, retransform.smeared_mean(t, safe, model.residuals), np.nan)
        if cvp is None:
            lo = t.inverse(z_lower)
            hi = t.inverse(z_upper)
        else:
            lo, hi, z_lower, z_upper = cvplus.intervals(
                cvp.coefficients,
                cvp.transforms,
                cvp.fold,
                cvp.abs_resid,
                X,
                interval,
                t,
                fp,
                x_pow,
            )
        # the undefined part of every inverse is a half-line, so the extreme residuals tell
        # whether any smearing term is undefined
        e_lo, e_hi = float(model.residuals.min()), float(model.residuals.max())
        partial = np.isnan(t.inverse(safe + e_lo)) | np.isnan(t.inverse(safe + e_hi))
    if cvp is None and not t.increasing:
        lo, hi = hi, lo
    label = t.label(model.spec.response)
    warnings: list[str] = []
    unbounded = False
    no_fold_power = np.zeros(m, dtype=bool)
    if fp is not None and x_pow is not None:
        no_fold_power = fp.undefined_rows(x_pow)
    if cvp is not None:
        n_res = cvp.abs_resid.size
        k_lo, k_hi = cvplus.ranks(n_res, interval)
        if k_lo < 1 or k_hi > n_res:
            unbounded = True
            warnings.append(
                f"With {n_res} out-of-fold residuals a {interval:g} CV+ interval has no finite "
                f"limits (it needs a level of at most {n_res / (n_res + 1):.4g}); the lower and "
                "upper limits are null. Ask for a lower interval level."
            )
        if cvp.scheme == "blocked":
            warnings.append(
                "The CV+ intervals come from blocked folds of ordered rows; their coverage "
                "rests on exchangeable rows, which serially correlated rows are not."
            )

    # extrapolation
    reasons: dict[int, list[str]] = {}
    for col, (a, b) in model.training_range.items():
        x = raw[col]
        for i in np.flatnonzero((x < a) | (x > b)).tolist():
            reasons.setdefault(i, []).append(
                f"'{col}' = {_num(x[i])} is outside the training range [{_num(a)}, {_num(b)}]"
            )
    h0 = zs.leverage
    over = h0 > model.max_leverage * (1.0 + LEVERAGE_RTOL) + 1e-12
    for i in np.flatnonzero(over).tolist():
        reasons.setdefault(i, []).append(
            f"leverage {_num(h0[i])} exceeds the largest training "
            f"leverage {_num(model.max_leverage)}"
        )
    extrap = np.zeros(m, dtype=bool)
    extrap[list(reasons)] = True
    if np.any(extrap):
        k = int(extrap.sum())
        warnings.append(
            f"{k} of {m} rows {'is an extrapolation' if k == 1 else 'are extrapolations'}: "
            f"{_rows_text(np.flatnonzero(extrap))}, outside the training range of a "
            "predictor or beyond the largest training leverage; the fit does not "
            + (
                "support it and back-transforms magnify its error."
                if k == 1
                else "support them and back-transforms magnify their error."
            )
        )

    def report(mask: np.ndarray, text: str) -> None:
        if np.any(mask):
            warnings.append(f"For {_rows_text(np.flatnonzero(mask))} {text}")

    report(~np.isfinite(eta), "the linear predictor overflows; every number is null.")
    report(
        ok_eta & ~np.isfinite(median),
        f"the median is null: the inverse of {label} does not "
        "exist at the fitted value or overflows.",
    )
    report(
        ok_eta & ~np.isfinite(mean),
        "the mean is null: the smearing terms have no finite inverse or their average overflows.",
    )
    report(
        ok_eta & np.isfinite(mean) & partial,
        "some smearing terms have no finite inverse (the response would be unbounded) and are "
        "left out of the mean, which is therefore only indicative.",
    )
    if unbounded:
        lo, hi = np.full(m, np.nan), np.full(m, np.nan)
        z_lower, z_upper = lo, hi
    report(
        ok_eta & no_fold_power & (not unbounded),
        "the CV+ limits are null: the power of "
        + ", ".join(f"'{c}'" for c in (fp.columns if fp is not None else ()))
        + " estimated in some fold is not defined at the row's value (0 with a power at or "
        "below 0); ask for interval_method 'normal' for these rows.",
    )
    report(
        ok_eta & ~no_fold_power & ~np.isfinite(lo) & (not unbounded),
        f"the lower prediction limit is null: the interval on the "
        f"{label} scale reaches beyond the range of its inverse (unbounded or overflowing).",
    )
    report(
        ok_eta & ~no_fold_power & ~np.isfinite(hi) & (not unbounded),
        f"the upper prediction limit is null: the interval on the "
        f"{label} scale reaches beyond the range of its inverse (unbounded or overflowing).",
    )

    return Predictions(
        mean,
        median,
        lo,
        hi,
        h0,
        eta,
        z_lower,
        z_upper,
        tuple(tuple(reasons.get(i, ())) for i in range(m)),
        float(interval),
        used,
        why,
        tuple(warnings),
    )
