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

:func:`compare` returns a frozen :class:`DriftReport` (``service.api.render.drift`` writes
it as the ``drift`` block); :func:`profile` returns the frozen :class:`DataProfile` a model
keeps (``service.api.render.model`` writes it into the artifact).

Rule (common practice, not a test with a known error rate): PSI below 0.1 is no material
shift, 0.1 to 0.25 a moderate shift, 0.25 or more a major shift.  Empty bins count as a
share of 0.0001 (common practice) so the logarithm stays finite.  A column is flagged when
rows fall outside its training range, when levels appear or vanish, or when its PSI is 0.1
or more.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

from .data import Prepared
from .spec import Levels, Specification

PSI_MODERATE = 0.1  # common practice cut-offs
PSI_MAJOR = 0.25
EMPTY_SHARE = 1e-4  # common practice floor for empty bins
DECILES = np.linspace(0.0, 1.0, 11)
RULE = (
    "population stability index over the training deciles (levels for categorical columns): "
    "below 0.1 no material shift, 0.1 to 0.25 moderate, 0.25 or more major (common-practice "
    "cut-offs); empty bins count as a share of 0.0001"
)


#: said when the artifact has no data profile
NO_PROFILE_NOTE = (
    "the model records no data profile (issued before profiles were kept); only "
    "ranges and levels are compared"
)


@dataclass(frozen=True)
class Shift:
    """The population stability index of a column's binned shares, now against then, and
    its grade ("none", "moderate" or "major")."""

    psi: float
    grade: str


@dataclass(frozen=True)
class OutsideRange:
    """Rows of this month below the training minimum and above the training maximum, their
    share of the rows, and this month's range."""

    below: int
    above: int
    share: float
    now_min: float
    now_max: float


@dataclass(frozen=True)
class NumericDrift:
    """One numeric predictor: its training range (None when the artifact records none),
    the rows outside it, and, when the artifact has a profile, the shift and the medians."""

    training_min: float | None
    training_max: float | None
    outside: OutsideRange | None
    shift: Shift | None
    median_then: float | None
    median_now: float | None


@dataclass(frozen=True)
class CategoricalDrift:
    """One categorical predictor: levels new this month, levels no longer present, and,
    when the artifact has a profile, the shift of the level shares."""

    new_levels: tuple[str, ...]
    vanished_levels: tuple[str, ...]
    shift: Shift | None


@dataclass(frozen=True)
class MissingColumn:
    """A predictor of the specification that this month's data do not have."""


ColumnDrift = NumericDrift | CategoricalDrift | MissingColumn


@dataclass(frozen=True)
class ResponseDrift:
    """The response's shift and its median and mean, then and now."""

    shift: Shift
    median_then: float
    median_now: float
    mean_then: float
    mean_now: float


@dataclass(frozen=True)
class DriftReport:
    """This month's rows against what a model artifact recorded about its training rows:
    the rows then (None when unknown) and now, one result per predictor of the
    specification (in its order), the response (None without a data profile, when
    ``note`` says so) and the sentences of what moved."""

    rows_then: int | None
    rows_now: int
    predictors: tuple[tuple[str, ColumnDrift], ...]
    response: ResponseDrift | None
    note: str | None
    flags: tuple[str, ...]

    @property
    def flagged(self) -> bool:
        return bool(self.flags)


def _lv(names: list[str] | tuple[str, ...]) -> str:
    return "level" if len(names) == 1 else "levels"


@dataclass(frozen=True)
class NumericProfile:
    """A numeric column of the training rows: its deciles (``edges``, ties merged), the share
    of rows between consecutive edges, its mean and median."""

    edges: tuple[float, ...]
    shares: tuple[float, ...]
    mean: float
    median: float


@dataclass(frozen=True)
class CategoricalProfile:
    """A categorical column of the training rows: the share of each level, in sorted order."""

    shares: tuple[tuple[str, float], ...]


@dataclass(frozen=True)
class DataProfile:
    """What a model records of its training rows: how many, the response's profile and one
    profile per predictor of the specification (in its order)."""

    rows: int
    response: NumericProfile
    predictors: tuple[tuple[str, NumericProfile | CategoricalProfile], ...]

    def predictor(self, column: str) -> NumericProfile | CategoricalProfile | None:
        return next((p for c, p in self.predictors if c == column), None)


def numeric_profile(x: np.ndarray) -> NumericProfile:
    """Deciles of ``x`` and the share of rows in each bin between them (ties merge bins)."""
    x = np.asarray(x, dtype=float)
    q = np.quantile(x, DECILES)
    inner = np.unique(q[1:-1])
    shares = np.bincount(np.searchsorted(inner, x, side="right"), minlength=inner.size + 1)
    return NumericProfile(
        edges=(float(q[0]), *(float(v) for v in inner), float(q[-1])),
        shares=tuple(float(v) for v in shares / x.size),
        mean=float(np.mean(x)),
        median=float(np.median(x)),
    )


def categorical_profile(values: np.ndarray) -> CategoricalProfile:
    levels, counts = np.unique(np.asarray(values).astype(str), return_counts=True)
    return CategoricalProfile(
        tuple((str(lv), float(c / counts.sum())) for lv, c in zip(levels, counts, strict=True))
    )


def profile(prep: Prepared, columns: list[str]) -> DataProfile:
    """What a model records of its training rows: their number, the response's and every
    predictor's profile."""
    preds: list[tuple[str, NumericProfile | CategoricalProfile]] = []
    for c in columns:
        if c in prep.numeric:
            preds.append((c, numeric_profile(prep.numeric[c])))
        elif c in prep.categorical:
            preds.append((c, categorical_profile(prep.categorical[c])))
    return DataProfile(int(prep.n), numeric_profile(prep.y), tuple(preds))


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


def _binned_shares(x: np.ndarray, edges: tuple[float, ...]) -> np.ndarray:
    inner = np.asarray(edges[1:-1], dtype=float)
    counts = np.bincount(np.searchsorted(inner, x, side="right"), minlength=inner.size + 1)
    return counts / max(x.size, 1)


def _shift(now: ArrayLike, then: ArrayLike) -> Shift:
    v = psi(now, then)
    return Shift(v, grade(v))


def _numeric(
    x: np.ndarray, prof: NumericProfile | None, rng: tuple[float, float] | None
) -> NumericDrift:
    lo = prof.edges[0] if prof else (rng[0] if rng else None)
    hi = prof.edges[-1] if prof else (rng[1] if rng else None)
    outside = None
    if lo is not None and hi is not None:
        below, above = int(np.sum(x < lo)), int(np.sum(x > hi))
        outside = OutsideRange(
            below=below,
            above=above,
            share=(below + above) / max(x.size, 1),
            now_min=float(np.min(x)),
            now_max=float(np.max(x)),
        )
    if not prof:
        return NumericDrift(lo, hi, outside, None, None, None)
    shift = _shift(_binned_shares(x, prof.edges), prof.shares)
    return NumericDrift(lo, hi, outside, shift, prof.median, float(np.median(x)))


def _categorical(
    values: np.ndarray, prof: CategoricalProfile | None, levels: tuple[str, ...]
) -> CategoricalDrift:
    now_lv, counts = np.unique(np.asarray(values).astype(str), return_counts=True)
    now = dict(zip(now_lv.tolist(), (counts / counts.sum()).tolist(), strict=True))
    then: dict[str, float] = dict(prof.shares) if prof else dict.fromkeys(levels, 0.0)
    shift = None
    if prof:
        keys = sorted(set(now) | set(then))
        shift = _shift([now.get(k, 0.0) for k in keys], [then.get(k, 0.0) for k in keys])
    return CategoricalDrift(
        new_levels=tuple(sorted(set(now) - set(then))),
        vanished_levels=tuple(sorted(set(then) - set(now))),
        shift=shift,
    )


def _names(xs: tuple[str, ...]) -> str:
    shown = ", ".join(f"'{x}'" for x in xs[:10])
    return shown + (f" and {len(xs) - 10} more" if len(xs) > 10 else "")


class Recorded(Protocol):
    """What a model (:class:`service.core.model.Model`) records of its training rows."""

    @property
    def spec(self) -> Specification: ...
    @property
    def n(self) -> int | None: ...
    @property
    def training_range(self) -> Mapping[str, tuple[float, float]]: ...
    @property
    def levels(self) -> Mapping[str, Levels]: ...
    @property
    def profile(self) -> DataProfile | None: ...


def compare(model: Recorded, prep: Prepared) -> DriftReport:
    """The drift of one segment: this month's rows against what ``model`` records."""
    prof = model.profile
    flags: list[str] = []
    preds: list[tuple[str, ColumnDrift]] = []
    for c in (p.column for p in model.spec.predictors):
        d: NumericDrift | CategoricalDrift
        pprof = prof.predictor(c) if prof is not None else None
        if c in prep.numeric:
            d = _numeric(
                np.asarray(prep.numeric[c], dtype=float),
                pprof if isinstance(pprof, NumericProfile) else None,
                model.training_range.get(c),
            )
            o = d.outside
            if o and o.below + o.above:
                flags.append(
                    f"'{c}': {o.below + o.above} of {prep.n} rows ({o.share:.0%}) lie "
                    f"outside the training range {d.training_min:.6g} to "
                    f"{d.training_max:.6g} (now {o.now_min:.6g} to {o.now_max:.6g}); "
                    "predictions there are extrapolations"
                )
        elif c in prep.categorical:
            info = model.levels.get(c)
            d = _categorical(
                prep.categorical[c],
                pprof if isinstance(pprof, CategoricalProfile) else None,
                info.levels if info else (),
            )
            if d.new_levels:
                flags.append(
                    f"'{c}' has {_lv(d.new_levels)} the model never saw: {_names(d.new_levels)}"
                )
            if d.vanished_levels:
                flags.append(
                    f"'{c}' no longer has {_lv(d.vanished_levels)} {_names(d.vanished_levels)}"
                )
        else:
            preds.append((c, MissingColumn()))
            flags.append(f"'{c}' is not in this data")
            continue
        if d.shift is not None and d.shift.grade in ("moderate", "major"):
            flags.append(f"'{c}' shifted ({d.shift.grade}: PSI {d.shift.psi:.3g})")
        preds.append((c, d))
    response = None
    if prof is not None:
        rprof = prof.response
        y = np.asarray(prep.y, dtype=float)
        shift = _shift(_binned_shares(y, rprof.edges), rprof.shares)
        response = ResponseDrift(
            shift=shift,
            median_then=rprof.median,
            median_now=float(np.median(prep.y)),
            mean_then=rprof.mean,
            mean_now=float(np.mean(prep.y)),
        )
        if shift.grade != "none":
            flags.append(
                f"the response level moved ({shift.grade}: PSI {shift.psi:.3g}; median "
                f"{rprof.median:.6g} then, {float(np.median(prep.y)):.6g} now)"
            )
    return DriftReport(
        rows_then=prof.rows if prof is not None else model.n,
        rows_now=int(prep.n),
        predictors=tuple(preds),
        response=response,
        note=None if prof is not None else NO_PROFILE_NOTE,
        flags=tuple(flags),
    )
