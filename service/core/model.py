"""The fitted model: everything needed to predict later without the data.

:func:`build_model` returns a frozen :class:`Model`; the artifact's JSON form (its field
names, the canonical bytes, the checksum and the signature) and the parsing of an artifact
sent back both live in the web floor (``service.api.render.model``,
``service.api.artifact``), which hands the same typed :class:`Model` to
:mod:`service.core.predict` and :mod:`service.core.drift`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy
import statsmodels

from . import transforms as tr
from .cvplus import NoStoredFits, StoredFits
from .data import Prepared
from .drift import DataProfile, profile
from .fitting import OLSFit
from .folds import CVPlan
from .spec import Design, Levels, Specification

FORMAT_VERSION = 1
MAX_STORED_RESIDUALS = 2000
#: why a model has no CV+ fits when it records nothing about them (issued before they were
#: stored)
NO_CV_PLUS = "the model was issued before CV+ intervals were stored; refit it to get them"


def stored_residuals(resid: np.ndarray) -> tuple[str, np.ndarray]:
    """All residuals for small n; otherwise MAX_STORED_RESIDUALS equally spaced order statistics.

    The smearing estimate is a mean over residuals, so a set of evenly spaced
    quantiles reproduces it to within the spacing of the empirical distribution.
    """
    if resid.size <= MAX_STORED_RESIDUALS:
        return "all", np.array(resid, dtype=float)
    s = np.sort(resid)
    pos = (np.arange(MAX_STORED_RESIDUALS) + 0.5) * s.size / MAX_STORED_RESIDUALS
    return "quantiles", np.interp(pos - 0.5, np.arange(s.size), s)


@dataclass(frozen=True)
class LibraryVersions:
    """Versions of the numerical libraries that produced a model."""

    numpy: str
    scipy: str
    statsmodels: str


def library_versions() -> LibraryVersions:
    """Versions of the numerical libraries in this process."""
    return LibraryVersions(np.__version__, scipy.__version__, statsmodels.__version__)


@dataclass(frozen=True)
class FitOptions:
    """How the entry the model belongs to was cross-validated."""

    folds: int
    repeats: int
    seed: int
    metric: str

    @classmethod
    def of(cls, plan: CVPlan) -> FitOptions:
        return cls(plan.folds, plan.repeats, plan.seed, plan.metric)


@dataclass(frozen=True)
class Issued:
    """What the service records of its own making of a model (None in the fields of a
    model read back from an artifact, which the prediction does not need)."""

    service_version: str
    library_versions: LibraryVersions
    response_range: tuple[float, float]
    data_fingerprint: str
    options: FitOptions | None


@dataclass(frozen=True, eq=False)
class Model:
    """A fitted model.  ``coef``: (p,); ``xtx_inverse``: (p, p) (X'X)^-1; ``residuals``: the
    stored model-scale residuals (``residual_kind`` "all", or "quantiles" past
    MAX_STORED_RESIDUALS rows); ``training_range``: (min, max) of each numeric predictor;
    ``levels``: the levels and reference of each categorical predictor; ``cv_store``: the
    CV+ fold fits, or why there are none, or None when the model records nothing about
    them; ``conditions_failed``: the entry's conditions that do not hold (None: not
    recorded); ``profile``: the training rows' profile for drift (None: not recorded);
    ``n``: the training rows (None: not recorded); ``issued``: what the service records of
    its making (None for a model read back)."""

    spec: Specification
    terms: tuple[str, ...]
    coef: np.ndarray
    xtx_inverse: np.ndarray
    residual_variance: float
    df_residual: int
    levels: dict[str, Levels]
    residuals: np.ndarray
    residual_kind: str
    training_range: dict[str, tuple[float, float]]
    max_leverage: float
    format_version: int = FORMAT_VERSION
    n: int | None = None
    cv_store: StoredFits | NoStoredFits | None = None
    conditions_failed: tuple[str, ...] | None = None
    profile: DataProfile | None = None
    issued: Issued | None = None

    @property
    def response_transform(self) -> tr.Transform:
        return self.spec.response_transform

    @property
    def cv_plus(self) -> StoredFits | None:
        """The CV+ fold fits, or None (:attr:`cv_plus_missing` says why)."""
        return self.cv_store if isinstance(self.cv_store, StoredFits) else None

    @property
    def cv_plus_missing(self) -> str:
        """Why there are no CV+ fold fits ("" when there are)."""
        if self.cv_store is None:
            return NO_CV_PLUS
        return self.cv_store.reason

    def is_categorical(self, column: str) -> bool:
        return column in self.levels


@dataclass(frozen=True)
class Signing:
    """A model as it leaves the service: signed with ``keys`` (the current key id and the
    key ring), or issued unsigned when the service holds no key (None)."""

    model: Model
    keys: tuple[str, dict[str, bytes]] | None


def build_model(
    spec: Specification,
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    service_version: str,
    options: FitOptions | None = None,
    cv_plus: StoredFits | NoStoredFits | None = None,
    conditions_failed: list[str] | None = None,
) -> Model:
    """The model of an entry.  ``cv_plus``: :func:`cvplus.stored_block` (fold fits and
    out-of-fold residuals, or why there are none); ``conditions_failed``: the entry's
    conditions that do not hold, which decide the default prediction interval."""
    kind, res = stored_residuals(fit.resid)
    hat = np.einsum("ij,jk,ik->i", design.X, fit.cov_unscaled, design.X)
    ranges = {
        t.column: (float(np.min(t.raw)), float(np.max(t.raw)))
        for t in design.terms
        if t.kind == "numeric" and t.raw is not None
    }
    return Model(
        spec=spec,
        terms=tuple(design.names),
        coef=np.array(fit.coef, dtype=float),
        xtx_inverse=np.array(fit.cov_unscaled, dtype=float),
        residual_variance=float(fit.sigma**2),
        df_residual=int(fit.df_resid),
        levels=design.levels,
        residuals=res,
        residual_kind=kind,
        training_range=ranges,
        max_leverage=float(np.max(hat)),
        n=int(fit.n),
        cv_store=cv_plus,
        conditions_failed=None if conditions_failed is None else tuple(conditions_failed),
        # what the training rows looked like, so a later run can measure drift (core/drift.py)
        profile=profile(prep, [p.column for p in spec.predictors]),
        issued=Issued(
            service_version,
            library_versions(),
            (float(np.min(prep.y)), float(np.max(prep.y))),
            prep.fingerprint(),
            options,
        ),
    )
