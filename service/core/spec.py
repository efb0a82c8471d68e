"""Specifications (which column, on which scale) and the design matrices they imply."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TypeAlias

import numpy as np

from . import transforms as tr
from .data import Prepared
from .errors import CandidateFailure, InputError, Location, SpecField
from .likelihood import fit_transform

# response transform, predictor transforms, intercept: identifies a specification
SpecKey: TypeAlias = tuple[tr.Transform, tuple[tr.Transform, ...], bool]


@dataclass(frozen=True)
class PredictorSpec:
    column: str
    transform: tr.Transform


@dataclass(frozen=True)
class Specification:
    response: str
    response_transform: tr.Transform
    predictors: tuple[PredictorSpec, ...]
    intercept: bool = True

    @property
    def key(self) -> SpecKey:
        return (
            self.response_transform,
            tuple(p.transform for p in self.predictors),
            self.intercept,
        )

    def simplicity(self) -> tuple[int, int, int]:
        """Sort key, smaller = simpler (design choice documented in DEVELOPERS.md).

        Fewer parameters estimated from the response first, then the summed
        readability cost of the transforms (identity < log < sqrt/reciprocal/square/
        power < estimated Box-Cox/Yeo-Johnson lambda or estimated predictor power <
        shifted log), then fewer transformed columns.  An estimated predictor power
        (Box-Tidwell, fitted by least squares on the response) counts as a
        parameter estimated from the response.
        """
        kept: tuple[int, int, int] | None = self.__dict__.get("_kept_simplicity")
        if kept is None:  # the instance keeps it: a search sorts and ranks the same ones
            kept = _simplicity(self.key)
            object.__setattr__(self, "_kept_simplicity", kept)
        return kept

    def response_label(self) -> str:
        return self.response_transform.label(self.response)

    def written_alike(self) -> Specification:
        """The specification as its object form shows it (each transform
        :func:`~.transforms.written_alike`): two specifications are written alike exactly
        when these are equal."""
        return Specification(
            self.response,
            tr.written_alike(self.response_transform),
            tuple(PredictorSpec(p.column, tr.written_alike(p.transform)) for p in self.predictors),
            self.intercept,
        )


@lru_cache(maxsize=1 << 14)
def _simplicity(key: SpecKey) -> tuple[int, int, int]:
    """:meth:`Specification.simplicity` of the transforms in ``key`` (response, predictors,
    intercept), kept for the specifications met again (a search sorts and ranks the same
    ones many times)."""
    response, predictors, _intercept = key
    ts = [response, *predictors]
    n_est = sum(1 for t in ts if t.name in tr.LAMBDA_NAMES and (t.lam is None or t.estimated))
    n_est += sum(1 for t in predictors if _estimated_power(t))
    cost = sum(3 if _estimated_power(t) else t.simplicity for t in ts if t.name != "categorical")
    n_tr = sum(1 for t in ts if t.name not in ("identity", "categorical"))
    return (n_est, cost, n_tr)


def _estimated_power(t: tr.Transform) -> bool:
    """A predictor power estimated from the data (open, or fitted and marked estimated)."""
    return t.estimated and (t.name == "power" or (t.name == "log" and t.shift == 0.0))


@dataclass
class TermInfo:
    column: str
    kind: str  # numeric | categorical
    indices: tuple[int, ...]
    raw: np.ndarray | None
    label: str


@dataclass(frozen=True)
class Levels:
    """A categorical predictor's levels (sorted, as the design holds them) and its
    reference level, the one without a dummy."""

    levels: tuple[str, ...]
    reference: str

    @property
    def others(self) -> tuple[str, ...]:
        """The levels with a dummy each, in order."""
        return tuple(lv for lv in self.levels if lv != self.reference)


@dataclass
class Design:
    X: np.ndarray
    names: list[str]
    terms: list[TermInfo]
    levels: dict[str, Levels] = field(default_factory=dict)  # categorical column -> its levels


def categorical_levels(
    values: np.ndarray, reference: str | None, column: str, where: Location | None = None
) -> tuple[list[str], str]:
    """Sorted levels and the reference (the first level unless ``reference`` names one);
    a reference that does not occur is refused at ``where``."""
    levels = sorted(set(values.tolist()))
    if reference is None:
        reference = levels[0]
    elif reference not in levels:
        detail = (
            f"reference level '{reference}' of '{column}' does not occur "
            f"in the data (levels: {levels[:20]})"
        )
        raise InputError.at(where, detail) if where is not None else InputError(detail)
    return levels, reference


def term_label(column: str, level: str) -> str:
    """The term name of the treatment dummy for ``level`` of a categorical ``column``.

    Written ``column=level`` (e.g. ``soil=loam``); the one place these names are built,
    shared by designs, the candidate space and model artifacts.
    """
    return f"{column}={level}"


@dataclass(frozen=True)
class Columns:
    """Typed predictor columns of rows that are not a request's prepared table (the new
    rows of a model): numeric columns as float arrays, categorical ones as object arrays
    of level strings."""

    n: int
    numeric: dict[str, np.ndarray]
    categorical: dict[str, np.ndarray]


StoredLevels: TypeAlias = Mapping[str, Levels]  # categorical column -> its levels


def term_names(spec: Specification, levels: StoredLevels) -> list[str]:
    """The design's column names, in the order :func:`build_design` makes them: the
    intercept, then per predictor its label or one treatment dummy per non-reference level."""
    names = ["intercept"] if spec.intercept else []
    for p in spec.predictors:
        if p.column in levels:
            names.extend(term_label(p.column, lv) for lv in levels[p.column].others)
        else:
            names.append(p.transform.label(p.column))
    return names


def build_design(
    spec: Specification,
    prep: Prepared | Columns,
    cache: dict[tuple[str, tr.Transform], np.ndarray] | None = None,
    levels: StoredLevels | None = None,
) -> Design:
    """Design matrix (n, p) for ``spec`` on the prepared rows.

    Numeric predictors enter through their transform (domain checked: a
    violation is a :class:`CandidateFailure`); categorical ones as treatment
    dummies against the reference level.  ``cache`` maps (column, transform) to
    already transformed columns so a search computes each column once.

    ``levels``: the levels and references a fitted model stored (new rows of that model:
    one dummy per stored non-reference level, whatever levels the rows hold; the caller
    has refused rows with a level the model never saw).  Without it the levels are the
    rows' own, the reference the transform's or the first in sorted order.
    """
    cols: list[np.ndarray] = []
    terms: list[TermInfo] = []
    used: dict[str, Levels] = {}
    n = prep.n
    if spec.intercept:
        cols.append(np.ones(n))
    for j, p in enumerate(spec.predictors):
        t = p.transform
        if p.column in prep.categorical:
            vals = prep.categorical[p.column]
            if levels is not None:
                lv, ref = list(levels[p.column].levels), levels[p.column].reference
            else:
                lv, ref = categorical_levels(
                    vals,
                    t.reference if t.name == "categorical" else None,
                    p.column,
                    SpecField.of_predictor(j, "transform", "reference"),
                )
            start = len(cols)
            cols.extend((vals == level).astype(float) for level in lv if level != ref)
            used[p.column] = Levels(tuple(lv), ref)
            terms.append(
                TermInfo(p.column, "categorical", tuple(range(start, len(cols))), None, p.column)
            )
            continue
        x = prep.numeric[p.column]
        key = (p.column, t)
        if cache is not None and key in cache:
            w = cache[key]
        else:
            msg = t.domain_problem(x, p.column, "predictor")
            if msg:
                raise CandidateFailure(msg)
            w = t.forward(x)
            if not np.all(np.isfinite(w)):
                raise CandidateFailure(f"{t.label(p.column)} is not finite for every row")
            if cache is not None:
                cache[key] = w
        terms.append(TermInfo(p.column, "numeric", (len(cols),), x, t.label(p.column)))
        cols.append(w)
    X = np.column_stack(cols) if cols else np.empty((n, 0))
    return Design(X, term_names(spec, used), terms, used)


def needs_explicit_lambda(t: tr.Transform) -> str:
    """Why a predictor's transform with its parameter left to estimate cannot be used where
    only given parameters are (a model sent by the caller, a diagnosis)."""
    return f"{t.name} of a predictor needs an explicit lambda"


def resolve_predictor_transforms(spec: Specification, prep: Prepared) -> Specification:
    """Fix data-chosen predictor parameters (the shift of a log of a column with zeros).

    These depend only on the predictor column, never on the response, so they
    are chosen once on all used rows.
    """
    new = []
    for p in spec.predictors:
        t = p.transform
        if p.column in prep.numeric and not t.is_fitted and t.name == "log":
            t = fit_transform(t, prep.numeric[p.column])
        elif p.column in prep.numeric and not t.is_fitted:
            raise CandidateFailure(needs_explicit_lambda(t))
        new.append(PredictorSpec(p.column, t))
    return Specification(spec.response, spec.response_transform, tuple(new), spec.intercept)
