"""The model artifact sent back (``/v1/predictions``, the command line's incumbents): its
checks and the typed :class:`~service.core.model.Model` it becomes.

An artifact is the JSON form :mod:`service.api.render.model` writes; this module reads it
back, refusing one that was damaged, edited or forged with an RFC 9457 problem that names
the field (:class:`~service.core.errors.ModelField`, rendered as a JSON Pointer under
``/model``).
"""

from __future__ import annotations

import hmac
import math
from itertools import pairwise
from typing import Any, TypeGuard

import numpy as np

from ..core import cvplus
from ..core import transforms as tr
from ..core.conditions import CONDITION_NAMES
from ..core.data import MAX_LEVEL_CHARS, shown
from ..core.drift import CategoricalProfile, DataProfile, NumericProfile
from ..core.errors import InputError, ModelField
from ..core.model import FORMAT_VERSION, MAX_STORED_RESIDUALS, Model
from ..core.spec import Levels, PredictorSpec, Specification, term_names
from .render.model import SIGNATURE_ALGORITHM, checksum, signature_value
from .render.specs import transform_of

KNOWN_FORMAT_VERSIONS = (FORMAT_VERSION,)
MODEL = ModelField()  # the artifact itself: errors name its fields with MODEL.at(...)
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
    t = transform_of(d)
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


def _levels(d: object, spec: Specification) -> dict[str, Levels]:
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
        out[col] = Levels(tuple(lv), str(ref))
    for p in spec.predictors:
        if p.transform.name == "categorical" and p.column not in out:
            raise InputError.at(
                MODEL.at("levels"), f"categorical predictor '{p.column}' has no level list"
            )
    return out


def load_model(d: dict[str, Any], keys: tuple[str, dict[str, bytes]] | None = None) -> Model:
    """Validate an artifact and return the typed :class:`Model` it holds.

    Checks, in order: ``format_version`` is one this service reads; every
    number is finite; the SHA-256 checksum matches (a mismatch means the model
    was modified after it was issued); the HMAC-SHA-256 signature verifies under
    one of ``keys`` (``(current id, {id: key})``; None: unsigned models accepted);
    the specification, levels, terms and array shapes agree with each other and
    every value lies within the bounds an issued artifact satisfies, so even a
    correctly signed but damaged model cannot overflow; the training rows' profile
    (for drift) has the shape an issued one has.  Every failure is an
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
    return Model(
        spec=spec,
        terms=tuple(want),
        coef=np.array(coef, dtype=float),
        xtx_inverse=Va,
        residual_variance=s2,
        df_residual=df,
        levels=levels,
        residuals=e,
        residual_kind=res["kind"],
        training_range=ranges,
        max_leverage=hmax,
        format_version=int(fv),
        n=n_train,
        cv_store=_cv_plus(d.get("cv_plus"), spec, p, n_train, levels),
        conditions_failed=_conditions_failed(d.get("conditions_failed")),
        profile=_data_profile(d.get("data_profile"), spec, levels),
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


def _conditions_failed(v: object) -> tuple[str, ...] | None:
    if v is None:
        return None
    if not isinstance(v, list) or not all(isinstance(c, str) and c in CONDITION_NAMES for c in v):
        raise InputError.at(
            MODEL.at("conditions_failed"),
            "conditions_failed must be a list of condition names ("
            + ", ".join(CONDITION_NAMES)
            + "); send the model exactly as the service issued it",
        )
    return tuple(v)


def _fold_powers(
    d: object, spec: Specification, levels: dict[str, Levels], K: int
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
        pos += len(levels[pr.column].others) if pr.column in levels else 1
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
    levels: dict[str, Levels],
) -> cvplus.StoredFits | cvplus.NoStoredFits | None:
    """The ``cv_plus`` block checked against the model: the fits, or why there are none
    (None: the model records nothing about them)."""
    ptr = MODEL.at("cv_plus")
    if block is None:
        return None
    damaged = "; the model was damaged or forged"
    if not isinstance(block, dict) or not isinstance(block.get("available"), bool):
        raise InputError.at(ptr, "cv_plus must be an object with a boolean 'available'" + damaged)
    if not block["available"]:
        why = block.get("reason")
        if not isinstance(why, str) or not 1 <= len(why) <= MAX_REASON_CHARS:
            raise InputError.at(
                ptr.at("reason"), "an unavailable cv_plus needs its reason" + damaged
            )
        return cvplus.NoStoredFits(why)
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
    rows = block.get("rows")
    return cvplus.StoredFits(
        coefficients=np.array(coefs, dtype=float),
        transforms=tuple(transforms),
        fold=np.array(fold, dtype=np.int64),
        abs_resid=np.array(vals, dtype=float),
        kind=res["kind"],
        scheme=scheme,
        rows=rows if isinstance(rows, int) and not isinstance(rows, bool) else len(vals),
        fold_powers=None if powers is None else _fold_powers(powers, spec, levels, K),
    )


PROFILE_SHAPE = (
    "data_profile must be {rows, response, predictors} with, per numeric column, ascending "
    "'edges', their bins' 'shares', 'mean' and 'median', and per categorical column its "
    "level 'shares', as the service issued it; the model was damaged or forged"
)
MAX_EDGES = 11  # the deciles: at most 11 edges


def _numeric_profile(d: object, ptr: ModelField) -> NumericProfile:
    edges = d.get("edges") if isinstance(d, dict) else None
    shares = d.get("shares") if isinstance(d, dict) else None
    if (
        not isinstance(d, dict)
        or not isinstance(edges, list)
        or not 2 <= len(edges) <= MAX_EDGES
        or not all(_is_number(v) and abs(v) <= MAX_ABS for v in edges)
        or any(a > b for a, b in pairwise(edges))
        or not isinstance(shares, list)
        or len(shares) != len(edges) - 1
        or not all(_is_number(v) and 0.0 <= v <= 1.0 for v in shares)
        or not all(_is_number(d.get(k)) and abs(d[k]) <= MAX_ABS for k in ("mean", "median"))
    ):
        raise InputError.at(ptr, PROFILE_SHAPE)
    return NumericProfile(
        tuple(float(v) for v in edges),
        tuple(float(v) for v in shares),
        float(d["mean"]),
        float(d["median"]),
    )


def _data_profile(d: object, spec: Specification, levels: dict[str, Levels]) -> DataProfile | None:
    """The training rows' profile (None when the model records none)."""
    if not d:
        return None
    ptr = MODEL.at("data_profile")
    rows = d.get("rows") if isinstance(d, dict) else None
    preds = d.get("predictors") if isinstance(d, dict) else None
    if (
        not isinstance(d, dict)
        or not isinstance(rows, int)
        or isinstance(rows, bool)
        or not 1 <= rows <= MAX_TRAINING_ROWS
        or not isinstance(preds, dict)
    ):
        raise InputError.at(ptr, PROFILE_SHAPE)
    response = _numeric_profile(d.get("response"), ptr.at("response"))
    columns = {pr.column for pr in spec.predictors}
    out: list[tuple[str, NumericProfile | CategoricalProfile]] = []
    for col, prof in preds.items():
        pp = ptr.at("predictors", col)
        kind = prof.get("kind") if isinstance(prof, dict) else None
        if col not in columns or kind != ("categorical" if col in levels else "numeric"):
            raise InputError.at(pp, PROFILE_SHAPE)
        if kind == "numeric":
            out.append((col, _numeric_profile(prof, pp)))
            continue
        shares = prof.get("shares")
        if (
            not isinstance(shares, dict)
            or len(shares) > MAX_LEVELS
            or not all(_is_number(v) and 0.0 <= v <= 1.0 for v in shares.values())
        ):
            raise InputError.at(pp.at("shares"), PROFILE_SHAPE)
        out.append((col, CategoricalProfile(tuple((k, float(v)) for k, v in shares.items()))))
    return DataProfile(rows, response, tuple(out))
