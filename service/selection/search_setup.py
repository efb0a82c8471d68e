"""What a search is given and what it keeps per candidate: the options of one request
(:class:`SearchOptions`), a scored candidate (:class:`Scored`), and the check that the
table can carry the requested cross-validation (:func:`check_rows`)."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..core.conditions import DEFAULT_ALPHA
from ..core.cvresult import CVResult
from ..core.data import Prepared
from ..core.errors import InputError, Option
from ..core.folds import DEFAULT_SEED
from ..core.numbers import count_of
from ..core.spec import Specification
from .deadline import Deadline
from .defaults import (
    DEFAULT_FOLDS,
    DEFAULT_MAX_CANDIDATES,
    DEFAULT_METRIC,
    DEFAULT_REPEATS,
    DEFAULT_SCHEME,
    DEFAULT_STRATEGY,
    DEFAULT_TIME_LIMIT_S,
    DEFAULT_TOP,
)


@dataclass(frozen=True)
class SearchOptions:
    """What a search is given; frozen (``dataclasses.replace`` makes a changed copy)."""

    response_transforms: list[Any] | None = None  # names or contract Transform dicts
    predictor_transforms: list[Any] | dict[str, Any] | None = None
    folds: int = DEFAULT_FOLDS
    repeats: int = DEFAULT_REPEATS
    seed: int = DEFAULT_SEED
    metric: str = DEFAULT_METRIC
    alpha: float = DEFAULT_ALPHA
    top: int = DEFAULT_TOP
    max_candidates: int = DEFAULT_MAX_CANDIDATES
    time_limit_s: float = DEFAULT_TIME_LIMIT_S
    intercept: bool = True
    units: dict[str, Any] = field(default_factory=dict)
    incumbent: dict[str, Any] | None = None  # contract Specification in use
    # auto: exhaustive up to EXHAUSTIVE_LIMIT candidates, else screened
    strategy: str = DEFAULT_STRATEGY
    scheme: str = DEFAULT_SCHEME  # CV folds: "random" K-fold or "blocked" (contiguous in order)
    # the request's one deadline: search, entries, stability, optimism and groups share it;
    # None: each call of run_selection / assess_trust starts its own from time_limit_s
    deadline: Deadline | None = None
    # () -> bool, True once the caller has gone; checked between candidates (in-process only)
    stop: Callable[[], bool] | None = None

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["stop"] = None  # a callable of the request's thread does not cross processes
        return state

    def clock(self) -> Deadline:
        """The request's deadline, or one ``time_limit_s`` from now when none was set."""
        return self.deadline if self.deadline is not None else Deadline.after(self.time_limit_s)

    def stopped(self) -> bool:
        return self.stop is not None and bool(self.stop())


@dataclass
class Scored:
    spec: Specification
    cv: CVResult
    open_spec: Specification | None = None  # as searched (estimated powers not yet fitted)

    def __post_init__(self) -> None:
        if self.open_spec is None:
            self.open_spec = self.spec


def _usable(prep: Prepared) -> str:
    n = prep.n
    text = f"{count_of(n, 'usable row')}"
    if prep.rows_dropped:
        text += (
            f" ({prep.rows_received} received, {prep.rows_dropped} dropped for a missing value, "
            "listed in data.dropped of a successful answer)"
        )
    return text


def check_rows(prep: Prepared, opts: SearchOptions, p: int) -> None:
    """Refuse a table too short for the requested folds or for ``p`` coefficients; the
    problem points at the data, names both numbers and the fix."""
    n = prep.n
    if opts.folds > n:
        fewer = f", or set validation.folds to {n} or fewer (at least 2)" if n >= 2 else ""
        raise InputError.at(
            prep.table(),
            f"the data have {_usable(prep)}, fewer than the {opts.folds} cross-validation "
            f"folds (validation.folds, default {DEFAULT_FOLDS}); send at least {opts.folds} complete "
            f"rows{fewer}",
        )
    n_train = n - math.ceil(n / opts.folds)
    if n_train < p + 2:
        need = math.ceil((p + 2) * opts.folds / (opts.folds - 1))
        raise InputError.at(
            prep.table(),
            f"the data have {_usable(prep)}, too few for {opts.folds}-fold "
            f"cross-validation of a model with {count_of(p, 'coefficient')}: it needs at "
            f"least {need} rows; send more complete rows, or use fewer folds "
            "(validation.folds) or fewer predictors",
        )
    if opts.metric == "mape" and np.any(prep.y == 0):
        raise InputError.at(
            Option("validation.metric"),
            f"mape divides by the response and '{prep.response}' has zeros; use rmse or mae",
        )
