"""Predictions on the original response scale from a fitted-model artifact.

The artifact (built by :func:`service.core.model.build_model`) carries the
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

import hmac
import math
from dataclasses import dataclass
from typing import Any, TypeGuard

import numpy as np
from scipy import stats

from . import cvplus, retransform
from . import sources as src
from . import transforms as tr
from .conditions import CONDITION_NAMES
from .data import MAX_LEVEL_CHARS, RawColumn, as_categorical, as_numeric, read_table, shown
from .errors import (
    Cell,
    DataColumn,
    DataRow,
    FieldProblem,
    InputError,
    Location,
    ModelField,
    Option,
    Table,
)
from .model import (
    FORMAT_VERSION,
    MAX_STORED_RESIDUALS,
    SIGNATURE_ALGORITHM,
    checksum,
    signature_value,
)
from .numbers import fmt, rows_named
from .spec import Columns, PredictorSpec, Specification, build_design, term_names

KNOWN_FORMAT_VERSIONS = (FORMAT_VERSION,)
MAX_PROBLEMS = 20
MODEL = ModelField()  # the artifact itself: errors name its fields with MODEL.at(...)
ROWS_LISTED = 5
LEVERAGE_RTOL = 1e-9  # a training row recomputed may exceed the stored maximum by rounding
# bounds an issued artifact always satisfies; the same as a request's where one exists
MAX_NAME_CHARS = MAX_LEVEL_CHARS  # column names and level strings, as a request's
MAX_LEVELS = 10_000  # levels of one categorical predictor
MAX_PREDICTORS = 1000
MAX_TRAINING_ROWS = 2**40
MAX_ABS = 1e300  # coefficients, variances, ranges: finite with room for arithmetic
SHIFT_BOUND, EXPONENT_BOUND, LAMBDA_BOUND = tr.SHIFT_BOUND, tr.EXPONENT_BOUND, tr.LAMBDA_BOUND
VARIANCE_RTOL = 1e-6  # stored residual variance vs the stored residuals ('all')
MAX_FOLDS = 50  # validation.folds allows at most this many
MAX_REASON_CHARS = 1000
INTERVAL_METHODS = ("normal", "cv_plus")
NO_CV_PLUS = "the model was issued before CV+ intervals were stored; refit it to get them"


@dataclass(frozen=True)
class CVPlusFits:
    """The artifact's ``cv_plus`` block in array form (see :mod:`cvplus`)."""

    coefficients: np.ndarray  # (K, p)
    transforms: list[tr.Transform]
    fold: np.ndarray  # (n,) fold ids of the stored residuals
    abs_resid: np.ndarray  # (n,)
    kind: str  # "all" or "quantiles"
    scheme: str
    fold_powers: cvplus.FoldPowers | None = None  # predictor powers estimated per fold


@dataclass(frozen=True)
class LoadedModel:
    """A validated artifact in array form.  ``coef``: (p,); ``xtx_inverse``: (p, p)."""

    spec: Specification
    terms: tuple[str, ...]
    coef: np.ndarray
    xtx_inverse: np.ndarray
    residual_variance: float
    df_residual: int
    levels: dict[str, dict[str, Any]]
    residuals: np.ndarray
    residual_kind: str
    training_range: dict[str, tuple[float, float]]
    max_leverage: float
    format_version: int
    cv_plus: CVPlusFits | None = None
    cv_plus_missing: str = NO_CV_PLUS  # why cv_plus is None
    conditions_failed: list[str] | None = None  # None: not recorded (older artifact)

    @property
    def response_transform(self) -> tr.Transform:
        return self.spec.response_transform

    def is_categorical(self, column: str) -> bool:
        return column in self.levels


# ------------------------------------------------------------------ loading
def _is_number(v: object) -> TypeGuard[int | float]:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _first_non_finite(d: object) -> ModelField | None:
    """Field (of the artifact) of the first NaN/Infinity, walking iteratively."""
    stack: list[tuple[object, tuple[str | int, ...]]] = [(d, ())]
    while stack:
        node, path = stack.pop()
        if isinstance(node, dict):
            stack.extend((v, (*path, k)) for k, v in node.items())
        elif isinstance(node, (list, tuple)):
            stack.extend((v, (*path, i)) for i, v in enumerate(node))
        elif isinstance(node, float) and not math.isfinite(node):
            return MODEL.at(*path)
    return None


QUOTED_CHARS = 2000  # a damaged field quoted in a message is cut after this many characters


def _cut(v: object) -> str:
    text = repr(v)
    if len(text) <= QUOTED_CHARS:
        return text
    return text[:QUOTED_CHARS] + f"... ({len(text)} characters)"


def _is_name(v: object) -> bool:
    return isinstance(v, str) and 1 <= len(v) <= MAX_NAME_CHARS


def _check_signature(d: dict[str, Any], keys: tuple[str, dict[str, bytes]] | None) -> None:
    """Refuse a model whose HMAC does not verify under a key this service holds.

    With no key configured, unsigned models are accepted (the checksum alone guards
    against accidents, not forgery) and a signed one cannot be verified, so it is refused.
    """
    sig = d.get("signature")
    algo = sig.get("algorithm") if isinstance(sig, dict) else None
    if sig is None or algo == "none":
        if keys is not None:
            raise InputError.at(
                MODEL.at("signature"),
                "the model is not signed, and this service accepts only models signed with "
                "its key; refit it with this service to get a signed model",
            )
        return
    if algo != SIGNATURE_ALGORITHM:
        raise InputError.at(
            MODEL.at("signature", "algorithm"),
            f"signature algorithm {shown(algo)} is not one this service uses "
            f"('{SIGNATURE_ALGORITHM}'); send the model exactly as the service issued it",
        )
    kid, value = sig.get("key_id"), sig.get("value")
    if not isinstance(kid, str) or not isinstance(value, str):
        raise InputError.at(
            MODEL.at("signature"),
            "the signature needs a string 'key_id' and 'value'; send the model exactly as "
            "the service issued it",
        )
    if keys is None:
        raise InputError.at(
            MODEL.at("signature", "key_id"),
            f"the model is signed with key '{kid[:64]}', but this service holds no model key "
            "(setting BESTSCALE_MODEL_KEY), so it cannot verify it",
        )
    ring = keys[1]
    if kid not in ring:
        raise InputError.at(
            MODEL.at("signature", "key_id"),
            f"the model is signed with key '{kid[:64]}', which this service does not hold "
            "(retired or never issued); refit the model with this service",
        )
    if not hmac.compare_digest(value, signature_value(d, kid, ring[kid])):
        raise InputError.at(
            MODEL.at("signature", "value"),
            "the model's signature does not match its content: it was modified or forged "
            "after it was issued; send it back unchanged or refit it",
        )


def _need(d: dict[str, Any], key: str, ptr: ModelField) -> Any:
    if key not in d:
        raise InputError.at(
            ptr, f"the model has no '{key}'; send the model object exactly as the service issued it"
        )
    return d[key]


def _number(v: object, ptr: ModelField, what: str) -> float:
    if not _is_number(v):
        raise InputError.at(ptr, f"{what} must be a number, not {type(v).__name__}")
    return float(v)


def _transform(d: object, ptr: ModelField, role: str) -> tr.Transform:
    if not isinstance(d, dict) or not isinstance(d.get("name"), str):
        raise InputError.at(ptr, f"the {role} transform must be an object with a 'name'")
    name = d["name"]
    if name not in (tr.ALL_NAMES if role == "predictor" else tr.NUMERIC_NAMES):
        raise InputError.at(
            ptr.at("name"),
            f"'{name}' is not a {role} transform this service fits",
        )
    if name == "power":
        q = d.get("exponent")
        if not _is_number(q) or not tr.EXPONENT_FLOOR <= abs(q) <= EXPONENT_BOUND:
            raise InputError.at(
                ptr.at("exponent"),
                f"a power transform needs a numeric 'exponent' with {tr.EXPONENT_FLOOR:g} <= "
                f"|exponent| <= {EXPONENT_BOUND:g}; the model was damaged or forged",
            )
    if name in tr.LAMBDA_NAMES:
        lam = d.get("lambda")
        if not _is_number(lam) or abs(lam) > LAMBDA_BOUND:
            raise InputError.at(
                ptr.at("lambda"),
                f"the model's {name} transform needs a numeric 'lambda' within "
                f"[-{LAMBDA_BOUND:g}, {LAMBDA_BOUND:g}]",
            )
    if (
        name == "log"
        and "shift" in d
        and (not _is_number(d["shift"]) or abs(d["shift"]) > SHIFT_BOUND)
    ):
        raise InputError.at(
            ptr.at("shift"),
            f"the log 'shift' must be a number within [-{SHIFT_BOUND:g}, {SHIFT_BOUND:g}]",
        )
    t = tr.from_dict(d)
    if t.name == "log" and t.shift is None:
        # issued artifacts omit a zero shift; a fitted log without one is log(x + 0)
        t = tr.Transform("log", shift=0.0, estimated=t.estimated)
    return t


def _specification(d: object) -> Specification:
    ptr = MODEL.at("specification")
    if not isinstance(d, dict):
        raise InputError.at(ptr, "the model's specification must be an object")
    resp = _need(d, "response", ptr)
    if not isinstance(resp, dict) or not _is_name(resp.get("column")):
        raise InputError.at(
            ptr.at("response"),
            f"the response must be an object with a 'column' of 1 to {MAX_NAME_CHARS} characters",
        )
    rt = _transform(
        resp.get("transform", {"name": "identity"}), ptr.at("response", "transform"), "response"
    )
    preds = _need(d, "predictors", ptr)
    if not isinstance(preds, list) or not preds or len(preds) > MAX_PREDICTORS:
        raise InputError.at(
            ptr.at("predictors"),
            f"the model needs a predictor list of 1 to {MAX_PREDICTORS} entries",
        )
    out = []
    seen = set()
    for j, p in enumerate(preds):
        pp = MODEL.at("specification", "predictors", j)
        if not isinstance(p, dict) or not _is_name(p.get("column")):
            raise InputError.at(
                pp,
                f"each predictor must be an object with a 'column' of 1 to {MAX_NAME_CHARS} "
                "characters",
            )
        if p["column"] in seen:
            raise InputError.at(pp, f"predictor '{p['column']}' appears twice")
        seen.add(p["column"])
        out.append(
            PredictorSpec(
                p["column"],
                _transform(
                    p.get("transform", {"name": "identity"}), pp.at("transform"), "predictor"
                ),
            )
        )
    intercept = d.get("intercept", True)
    if not isinstance(intercept, bool):
        raise InputError.at(ptr.at("intercept"), "intercept must be true or false")
    return Specification(resp["column"], rt, tuple(out), intercept)


def _levels(d: object, spec: Specification) -> dict[str, dict[str, Any]]:
    if not isinstance(d, dict):
        raise InputError.at(MODEL.at("levels"), "the model's levels must be an object")
    cols = {p.column for p in spec.predictors}
    out = {}
    for col, info in d.items():
        ptr = MODEL.at("levels", col)
        if col not in cols:
            raise InputError.at(ptr, f"levels are given for '{col}', which is not a predictor")
        lv = info.get("levels") if isinstance(info, dict) else None
        ref = info.get("reference") if isinstance(info, dict) else None
        if (
            not isinstance(lv, list)
            or not 2 <= len(lv) <= MAX_LEVELS
            or not all(isinstance(v, str) and len(v) <= MAX_NAME_CHARS for v in lv)
            or len(set(lv)) != len(lv)
        ):
            raise InputError.at(
                ptr.at("levels"),
                f"'{col}' needs a list of 2 to {MAX_LEVELS} distinct level names of at most "
                f"{MAX_NAME_CHARS} characters",
            )
        if ref not in lv:
            raise InputError.at(
                ptr.at("reference"), f"the reference level of '{col}' is not one of its levels"
            )
        out[col] = {"levels": list(lv), "reference": ref}
    for p in spec.predictors:
        if p.transform.name == "categorical" and p.column not in out:
            raise InputError.at(
                MODEL.at("levels"), f"categorical predictor '{p.column}' has no level list"
            )
    return out


def load_model(d: dict[str, Any], keys: tuple[str, dict[str, bytes]] | None = None) -> LoadedModel:
    """Validate an artifact and return it in array form.

    Checks, in order: ``format_version`` is one this service reads; every
    number is finite; the SHA-256 checksum matches (a mismatch means the model
    was modified after it was issued); the HMAC-SHA-256 signature verifies under
    one of ``keys`` (``(current id, {id: key})``; None: unsigned models accepted);
    the specification, levels, terms and array shapes agree with each other and
    every value lies within the bounds an issued artifact satisfies, so even a
    correctly signed but damaged model cannot overflow.  Every failure is an
    :class:`InputError` naming a field of the artifact (:class:`ModelField`).
    """
    if not isinstance(d, dict):
        raise InputError.at(MODEL, "the model must be a JSON object as issued by the service")
    fv = d.get("format_version")
    if not _is_number(fv) or fv not in KNOWN_FORMAT_VERSIONS:
        known = ", ".join(str(v) for v in KNOWN_FORMAT_VERSIONS)
        raise InputError.at(
            MODEL.at("format_version"),
            f"model format_version {shown(fv)} is not one "
            f"this service reads ({known}); refit the model with this service",
        )
    res = d.get("residuals")
    values = res.get("values") if isinstance(res, dict) else None
    if isinstance(values, list) and len(values) > MAX_STORED_RESIDUALS:
        # before any walk over the content: an issued model never holds more
        raise InputError.at(
            MODEL.at("residuals"),
            f"the model holds {len(values)} residuals; an issued model holds at most "
            f"{MAX_STORED_RESIDUALS}; send the model exactly as the service issued it",
        )
    _cv_plus_sizes(d.get("cv_plus"))
    bad = _first_non_finite(d)
    if bad:
        raise InputError.at(bad, "the model holds a non-finite number")
    given = d.get("checksum")
    if not isinstance(given, str):
        raise InputError.at(
            MODEL.at("checksum"),
            "the model has no checksum; send the model object exactly as the service issued it",
        )
    try:
        actual = checksum(d)
    except (TypeError, ValueError):
        raise InputError.at(MODEL, "the model holds values that are not plain JSON") from None
    if not hmac.compare_digest(given, actual):
        raise InputError.at(
            MODEL.at("checksum"),
            "the model was modified after it was issued "
            "(its checksum does not match its content); send it back unchanged",
        )
    _check_signature(d, keys)

    spec = _specification(_need(d, "specification", MODEL))
    levels = _levels(d.get("levels", {}), spec)
    terms = _need(d, "terms", MODEL)
    want = term_names(spec, levels)
    if terms != want:
        raise InputError.at(
            MODEL.at("terms"),
            f"the model's terms {_cut(terms)} do not match its "
            f"specification (expected {_cut(want)})",
        )
    p = len(want)
    coef = _need(d, "coefficients", MODEL)
    if (
        not isinstance(coef, list)
        or len(coef) != p
        or not all(_is_number(v) and abs(v) <= MAX_ABS for v in coef)
    ):
        raise InputError.at(
            MODEL.at("coefficients"),
            f"coefficients must be {p} numbers of magnitude at most {MAX_ABS:g}, one per term",
        )
    V = _need(d, "xtx_inverse", MODEL)
    if (
        not isinstance(V, list)
        or len(V) != p
        or not all(
            isinstance(r, list)
            and len(r) == p
            and all(_is_number(v) and abs(v) <= MAX_ABS for v in r)
            for r in V
        )
    ):
        raise InputError.at(
            MODEL.at("xtx_inverse"),
            f"xtx_inverse must be a {p} x {p} matrix of numbers of magnitude at most {MAX_ABS:g}",
        )
    Va = np.array(V, dtype=float)
    scale = float(np.max(np.abs(Va))) if Va.size else 0.0
    if np.any(np.diag(Va) < 0) or not np.allclose(Va, Va.T, rtol=1e-8, atol=1e-10 * scale):
        raise InputError.at(
            MODEL.at("xtx_inverse"),
            "xtx_inverse must be symmetric with a non-negative diagonal, as (X'X)^-1 is",
        )
    s2 = _number(
        _need(d, "residual_variance", MODEL), MODEL.at("residual_variance"), "residual_variance"
    )
    if not 0 <= s2 <= MAX_ABS:
        raise InputError.at(
            MODEL.at("residual_variance"),
            f"residual_variance must lie in [0, {MAX_ABS:g}]",
        )
    df = _need(d, "df_residual", MODEL)
    if not isinstance(df, int) or isinstance(df, bool) or not 1 <= df <= MAX_TRAINING_ROWS:
        raise InputError.at(MODEL.at("df_residual"), "df_residual must be a positive integer")
    n_train = d.get("n")
    if n_train is not None and (
        not isinstance(n_train, int)
        or isinstance(n_train, bool)
        or not df < n_train <= MAX_TRAINING_ROWS
    ):
        raise InputError.at(MODEL.at("n"), f"n must be an integer larger than df_residual ({df})")
    res = _need(d, "residuals", MODEL)
    values = res.get("values") if isinstance(res, dict) else None
    if (
        not isinstance(res, dict)
        or res.get("kind") not in ("all", "quantiles")
        or not isinstance(values, list)
        or not 1 <= len(values) <= MAX_STORED_RESIDUALS
        or not all(_is_number(v) and abs(v) <= MAX_ABS for v in values)
    ):
        raise InputError.at(
            MODEL.at("residuals"),
            "residuals must be {kind: 'all' | 'quantiles', values: [numbers]} with 1 to "
            f"{MAX_STORED_RESIDUALS} values (the most an issued model holds)",
        )
    e = np.array(values, dtype=float)
    if res["kind"] == "quantiles" and (
        len(values) != MAX_STORED_RESIDUALS
        or (n_train is not None and n_train <= MAX_STORED_RESIDUALS)
    ):
        raise InputError.at(
            MODEL.at("residuals"),
            f"a model keeps residual quantiles only past {MAX_STORED_RESIDUALS} rows, "
            f"exactly {MAX_STORED_RESIDUALS} of them; the model was damaged or forged",
        )
    if res["kind"] == "all":
        if n_train is not None and len(values) != n_train:
            raise InputError.at(
                MODEL.at("residuals", "values"),
                f"an 'all' residual list must hold n = {n_train} values, not {len(values)}",
            )
        with np.errstate(all="ignore"):
            s2_res = float(np.sum(e * e)) / df
        if not abs(s2_res - s2) <= VARIANCE_RTOL * max(s2_res, s2) + 1e-300:
            raise InputError.at(
                MODEL.at("residual_variance"),
                f"residual_variance {s2:.6g} does not agree with the stored residuals "
                f"({s2_res:.6g}); the model was damaged or forged",
            )
    rng_in = _need(d, "training_range", MODEL)
    if not isinstance(rng_in, dict):
        raise InputError.at(MODEL.at("training_range"), "training_range must be an object")
    ranges = {}
    for pr in spec.predictors:
        if pr.column in levels:
            continue
        r = rng_in.get(pr.column)
        ptr = MODEL.at("training_range", pr.column)
        if (
            not isinstance(r, dict)
            or not _is_number(r.get("min"))
            or not _is_number(r.get("max"))
            or r["min"] > r["max"]
        ):
            raise InputError.at(
                ptr,
                f"the training range of '{pr.column}' must be {{min, max}} numbers with min <= max",
            )
        ranges[pr.column] = (float(r["min"]), float(r["max"]))
    for col in rng_in:
        if col not in ranges:
            raise InputError.at(
                MODEL.at("training_range", col),
                f"a training range is given for '{col[:MAX_NAME_CHARS]}', which is not a "
                "numeric predictor",
            )
    hmax = _number(_need(d, "max_leverage", MODEL), MODEL.at("max_leverage"), "max_leverage")
    if not 0.0 <= hmax <= 1.0 + 1e-9:
        raise InputError.at(MODEL.at("max_leverage"), "max_leverage must lie in [0, 1]")
    fits, missing = _cv_plus(d.get("cv_plus"), spec, p, n_train, levels)
    return LoadedModel(
        spec,
        tuple(want),
        np.array(coef, dtype=float),
        Va,
        s2,
        df,
        levels,
        e,
        res["kind"],
        ranges,
        hmax,
        int(fv),
        fits,
        missing,
        _conditions_failed(d.get("conditions_failed")),
    )


def _cv_plus_sizes(block: object) -> None:
    """Refuse oversized CV+ lists before any walk over the content."""
    if not isinstance(block, dict):
        return
    res = block.get("residuals")
    fits = block.get("fold_fits")
    powers = block.get("fold_powers")
    if isinstance(powers, dict):
        for key, most in (("columns", MAX_PREDICTORS), ("values", MAX_FOLDS)):
            v = powers.get(key)
            if isinstance(v, list) and len(v) > most:
                raise InputError.at(
                    MODEL.at("cv_plus", "fold_powers", key),
                    f"the model holds {len(v)} entries in fold_powers/{key}; an issued model "
                    f"holds at most {most}; send the model exactly as the service issued it",
                )
    if isinstance(fits, list) and len(fits) > MAX_FOLDS:
        raise InputError.at(
            MODEL.at("cv_plus", "fold_fits"),
            f"the model holds {len(fits)} fold fits; an issued model holds at most {MAX_FOLDS}",
        )
    if isinstance(res, dict):
        for key in ("fold", "values"):
            v = res.get(key)
            if isinstance(v, list) and len(v) > cvplus.MAX_ROWS:
                raise InputError.at(
                    MODEL.at("cv_plus", "residuals", key),
                    f"the model holds {len(v)} CV+ residuals; an issued model holds at most "
                    f"{cvplus.MAX_ROWS}; send the model exactly as the service issued it",
                )


def _conditions_failed(v: object) -> list[str] | None:
    if v is None:
        return None
    if not isinstance(v, list) or not all(isinstance(c, str) and c in CONDITION_NAMES for c in v):
        raise InputError.at(
            MODEL.at("conditions_failed"),
            "conditions_failed must be a list of condition names ("
            + ", ".join(CONDITION_NAMES)
            + "); send the model exactly as the service issued it",
        )
    return list(v)


def _fold_powers(
    d: object, spec: Specification, levels: dict[str, dict[str, Any]], K: int
) -> cvplus.FoldPowers:
    """The ``fold_powers`` of a cv_plus block: each named column a numeric predictor on an
    estimated-power scale (power, or log where the estimate was 0), in specification order,
    the form the intercept implies, and K rows of powers within the estimation bounds."""
    ptr = MODEL.at("cv_plus", "fold_powers")
    damaged = "; the model was damaged or forged"
    form = cvplus.POWER_FORMS[0] if spec.intercept else cvplus.POWER_FORMS[1]
    if not isinstance(d, dict) or d.get("form") != form:
        raise InputError.at(
            ptr, f"fold_powers must be an object with form '{form}' for this model" + damaged
        )
    cols, vals = d.get("columns"), d.get("values")
    positions: list[int] = []
    order: list[str] = []
    pos = 1 if spec.intercept else 0
    for pr in spec.predictors:
        if isinstance(cols, list) and pr.column in cols:
            t = pr.transform
            if pr.column in levels or not (t.name == "power" or (t.name == "log" and not t.shift)):
                raise InputError.at(
                    ptr.at("columns"),
                    f"'{pr.column[:MAX_NAME_CHARS]}' is not on an estimated-power scale in "
                    "the model's specification" + damaged,
                )
            positions.append(pos)
            order.append(pr.column)
        pos += len(levels[pr.column]["levels"]) - 1 if pr.column in levels else 1
    j = len(order)
    if not isinstance(cols, list) or not cols or cols != order:
        raise InputError.at(
            ptr.at("columns"),
            "fold_powers columns must name the model's estimated-power predictors once each, "
            "in the specification's order" + damaged,
        )
    if (
        not isinstance(vals, list)
        or len(vals) != K
        or not all(
            isinstance(row, list)
            and len(row) == j
            and all(_is_number(a) and abs(a) <= cvplus.MAX_ABS_POWER for a in row)
            for row in vals
        )
    ):
        raise InputError.at(
            ptr.at("values"),
            f"fold_powers values must be {K} rows (one per fold) of {j} powers within "
            f"[-{cvplus.MAX_ABS_POWER:g}, {cvplus.MAX_ABS_POWER:g}]" + damaged,
        )
    return cvplus.FoldPowers(
        tuple(order), tuple(positions), np.array(vals, dtype=float), spec.intercept
    )


def _cv_plus(
    block: object,
    spec: Specification,
    p: int,
    n_train: object,
    levels: dict[str, dict[str, Any]],
) -> tuple[CVPlusFits | None, str]:
    """The ``cv_plus`` block checked against the model: (fits or None, why not)."""
    ptr = MODEL.at("cv_plus")
    if block is None:
        return None, NO_CV_PLUS
    damaged = "; the model was damaged or forged"
    if not isinstance(block, dict) or not isinstance(block.get("available"), bool):
        raise InputError.at(ptr, "cv_plus must be an object with a boolean 'available'" + damaged)
    if not block["available"]:
        why = block.get("reason")
        if not isinstance(why, str) or not 1 <= len(why) <= MAX_REASON_CHARS:
            raise InputError.at(
                ptr.at("reason"), "an unavailable cv_plus needs its reason" + damaged
            )
        return None, why
    K = block.get("folds")
    fits = block.get("fold_fits")
    if (
        not isinstance(K, int)
        or isinstance(K, bool)
        or not 2 <= K <= MAX_FOLDS
        or not isinstance(fits, list)
        or len(fits) != K
    ):
        raise InputError.at(
            ptr.at("fold_fits"),
            f"cv_plus needs 'folds' K (2 to {MAX_FOLDS}) and K fold fits" + damaged,
        )
    family = spec.response_transform.name
    coefs, transforms = [], []
    for k, f in enumerate(fits):
        fp = MODEL.at("cv_plus", "fold_fits", k)
        if not isinstance(f, dict):
            raise InputError.at(fp, "a fold fit must be an object" + damaged)
        t = _transform(f.get("response_transform"), fp.at("response_transform"), "response")
        if t.name != family:
            raise InputError.at(
                fp.at("response_transform"),
                f"fold {k + 1} is on the '{t.name}' scale, not the model's '{family}'" + damaged,
            )
        c = f.get("coefficients")
        if (
            not isinstance(c, list)
            or len(c) != p
            or not all(_is_number(v) and abs(v) <= MAX_ABS for v in c)
        ):
            raise InputError.at(
                fp.at("coefficients"),
                f"a fold fit needs {p} coefficients of magnitude at most {MAX_ABS:g}" + damaged,
            )
        coefs.append(c)
        transforms.append(t)
    res = block.get("residuals")
    rp = ptr.at("residuals")
    fold = res.get("fold") if isinstance(res, dict) else None
    vals = res.get("values") if isinstance(res, dict) else None
    if (
        not isinstance(res, dict)
        or res.get("kind") not in ("all", "quantiles")
        or not isinstance(fold, list)
        or not isinstance(vals, list)
        or not 1 <= len(vals) <= cvplus.MAX_ROWS
        or len(fold) != len(vals)
        or not all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v < K for v in fold)
        or not all(_is_number(v) and 0 <= v <= MAX_ABS for v in vals)
    ):
        raise InputError.at(
            rp,
            "cv_plus residuals must be {kind: 'all' | 'quantiles', fold: [fold ids], values: "
            f"[non-negative numbers]}} of equal length, 1 to {cvplus.MAX_ROWS}" + damaged,
        )
    if isinstance(n_train, int) and (
        (res["kind"] == "all" and len(vals) != n_train)
        or (
            res["kind"] == "quantiles"
            and (n_train <= cvplus.MAX_ROWS or len(vals) != cvplus.MAX_ROWS)
        )
    ):
        raise InputError.at(
            rp,
            f"the model keeps every CV+ residual up to {cvplus.MAX_ROWS} rows and exactly "
            f"{cvplus.MAX_ROWS} quantiles past that" + damaged,
        )
    scheme = block.get("scheme")
    if scheme not in ("random", "blocked"):
        raise InputError.at(
            ptr.at("scheme"), "cv_plus scheme must be 'random' or 'blocked'" + damaged
        )
    powers = block.get("fold_powers")
    return (
        CVPlusFits(
            np.array(coefs, dtype=float),
            transforms,
            np.array(fold, dtype=np.int64),
            np.array(vals, dtype=float),
            res["kind"],
            scheme,
            None if powers is None else _fold_powers(powers, spec, levels, K),
        ),
        "",
    )


# -------------------------------------------------------------- new design
def _missing_column(source: str, col: str) -> DataColumn:
    return DataColumn(col, source)


def _record_cell(where: Location, column: str) -> Location:
    """Where a record lacks ``column``: that record's cell (other places stay as they are)."""
    if isinstance(where, DataRow) and where.layout == "records":
        return Cell(column, where.row, "records")
    return where


def new_design(
    model: LoadedModel, data: dict[str, Any]
) -> tuple[np.ndarray, dict[str, np.ndarray], int]:
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
            allowed = set(info["levels"])
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
                        f"occur in the training data (levels: {', '.join(info['levels'][:20])}); "
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


def model_scale_interval(
    model: LoadedModel, X: np.ndarray, interval: float = 0.95
) -> ModelScaleInterval:
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


def interval_method(model: LoadedModel, asked: object) -> tuple[str, str]:
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
    return str(asked), cvplus.REASON_ASKED


def predict(
    model: LoadedModel,
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
    if not (_is_number(interval) and 0.0 < interval < 1.0):
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
