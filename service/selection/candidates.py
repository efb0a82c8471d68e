"""The candidate space of a search: response scales, predictor options, and their columns.

Options per numeric predictor: the requested (or default) transforms that
apply to its values, plus, for a predictor with values > 0, a power estimated
from the data (Box & Tidwell 1962, see boxtidwell.py) and the ladder power
nearest that estimate inside its 95% interval when it is not already an
option.  The estimated power enters by default; in an explicit list the bare
name ``power`` asks for it (with the ladder rungs -1/2 and 1/3), as does
``{"name": "power", "estimated": true}``.  An estimated predictor power is
combined with the fixed response scales only (a joint estimate with a
response lambda is not offered), and a candidate estimates at most
``MAX_ESTIMATED_POWERS`` powers (design choice: each is a parameter fitted to
the response, and the joint iteration grows costly and fragile).

Every transformed column is computed once into a :class:`bank.ColumnBank`.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..core import boxtidwell as bt
from ..core import transforms as tr
from ..core._types import FloatArray
from ..core.bank import ColumnBank, FoldIndex
from ..core.data import Prepared
from ..core.errors import (
    CandidateFailure,
    FieldProblem,
    InputError,
    Location,
    Predictor,
    PredictorChoice,
    ResponseChoice,
)
from ..core.likelihood import fit_transform
from ..core.numbers import count_of, rows_named
from ..core.spec import (
    PredictorSpec,
    Specification,
    categorical_levels,
    needs_explicit_lambda,
    term_label,
)
from .deadline import Deadline
from .search_setup import PredictorChoices, TransformChoice

DEFAULT_RESPONSE = ("identity", "log", "sqrt", "reciprocal", "square", "box_cox", "yeo_johnson")
DEFAULT_PREDICTOR = ("identity", "log", "sqrt", "reciprocal", "square")
MAX_ESTIMATED_POWERS = 2  # estimated predictor powers in one candidate (design choice)
BT_SCREEN_ROWS = 50_000  # the screening power estimates use at most this many rows (seeded)
MIN_DISTINCT_FOR_POWER = 5


def _expand(choice: TransformChoice, role: str) -> list[tr.Transform]:
    """The transforms a listed choice stands for: the bare name power means the ladder rungs
    not covered by other names (and, for a predictor, the power estimated from the data); a
    power without an exponent the estimated power."""
    if choice.ladder:
        rungs = [tr.Transform("power", exponent=-0.5), tr.Transform("power", exponent=1.0 / 3.0)]
        return rungs + ([bt.ESTIMATED] if role == "predictor" else [])
    if bt.is_open(choice.transform):
        return [bt.ESTIMATED]
    return [choice.transform]


def check_predictor_transform(
    prep: Prepared,
    t: tr.Transform,
    column: str,
    where: Location,
    auto_shift: bool = False,
    lambda_at: Location | None = None,
    hint: str = "",
) -> None:
    """The rules a transform the caller named for a numeric predictor must meet, for a
    search's list and a diagnosed specification alike (one place, one set of messages):
    a parameter left to estimate is refused (at ``lambda_at`` when given; ``hint`` says
    what to send instead where there is such an option), a categorical coding of a numeric
    column is refused, and every row must be in the transform's domain
    (:func:`check_explicit`, then the family's own domain rule)."""
    if t.needs_lambda:
        raise InputError.at(lambda_at or where, needs_explicit_lambda(t) + hint)
    if t.name == "categorical":
        raise InputError.at(
            where, f"'{column}' is numeric; list it in 'categorical' to treat it as levels"
        )
    x = prep.numeric[column]
    check_explicit(prep, t, x, column, "predictor", where, auto_shift)
    msg = t.domain_problem(x, column, "predictor")
    if msg:
        raise InputError.at(where, msg)


def check_explicit(
    prep: Prepared,
    t: tr.Transform,
    x: FloatArray,
    column: str,
    role: str,
    where: Location,
    auto_shift: bool = False,
) -> None:
    """An explicitly requested transform is applied as asked or refused (422), never changed.

    The problem points first at the first row whose value the transform cannot take,
    then at the transform; its detail lists the fixes.  A log whose shift was left to the
    service (``auto_shift``) may add a shift chosen from the data (reported in the
    specification).
    """
    if t.name == "power" and t.exponent is None:
        return
    as_sent = not auto_shift
    bad = np.flatnonzero(~t.domain_mask(x, as_sent=as_sent))
    if bad.size == 0:
        return
    i = int(bad[0])
    lab = t.label(column)
    detail = (
        f"{role} '{column}' is {float(x[i]):.6g} in {rows_named([int(prep.row_ids[i])])} of "
        f"the data ({count_of(int(bad.size), 'row')} in all) and the requested {lab} needs "
        f"{t.domain_text(as_sent=as_sent)}; a requested transform is used as sent, so "
        f"{t.domain_fixes()}"
    )
    raise InputError(
        detail,
        [
            FieldProblem(prep.cell(column, i), detail),
            FieldProblem(where, f"{lab} cannot take every value of '{column}'"),
        ],
    )


def _defaults(names: tuple[str, ...]) -> tuple[TransformChoice, ...]:
    return tuple(TransformChoice(tr.Transform(name)) for name in names)


def response_candidates(
    prep: Prepared, response_transforms: tuple[TransformChoice, ...] | None
) -> list[tr.Transform]:
    y = prep.y
    explicit = response_transforms is not None
    items = response_transforms if response_transforms is not None else _defaults(DEFAULT_RESPONSE)
    out: list[tr.Transform] = []
    for i, item in enumerate(items):
        for t in _expand(item, "response"):
            if t.name == "categorical":
                raise InputError.at(ResponseChoice(i), "the response cannot be categorical")
            if bt.is_open(t):
                raise InputError.at(
                    ResponseChoice(i),
                    "a response power needs an 'exponent' (or use box_cox to estimate one)",
                )
            if explicit:
                check_explicit(
                    prep,
                    t,
                    y,
                    prep.response,
                    "response",
                    ResponseChoice(i),
                    item.auto_shift,
                )
            msg = t.domain_problem(y, prep.response, "response")
            if msg:
                if explicit:
                    raise InputError.at(ResponseChoice(i), msg)
                continue
            if t not in out:
                out.append(t)
    if not explicit and np.min(y) > 0 and any(t.name == "box_cox" for t in out):
        # on a strictly positive response Yeo-Johnson is Box-Cox of y + 1: one family suffices
        out = [t for t in out if t.name != "yeo_johnson"]
    return out


def _power_applies(x: np.ndarray) -> bool:
    return bool(
        np.min(x) > 0 and np.unique(x[: min(x.size, 100_000)]).size >= MIN_DISTINCT_FOR_POWER
    )


def predictor_candidates(
    prep: Prepared,
    predictor_transforms: PredictorChoices | None,
) -> list[list[tr.Transform]]:
    spec = predictor_transforms
    per: list[list[tr.Transform]] = []
    for j, col in enumerate(prep.predictors):
        if col in prep.categorical:
            per.append([tr.Transform("categorical")])
            continue
        x = prep.numeric[col]
        listed_for: str | None  # whose list of transforms (None: the one shared by all)
        items: tuple[TransformChoice, ...]
        if isinstance(spec, Mapping):
            if col in spec:
                items, explicit, listed_for = spec[col], True, col
            else:
                items, explicit, listed_for = _defaults(DEFAULT_PREDICTOR), False, None
        elif spec is not None:
            items, explicit, listed_for = spec, False, None
        else:
            items, explicit, listed_for = _defaults(DEFAULT_PREDICTOR), False, None
        lst: list[tr.Transform] = []
        for i, item in enumerate(items):
            for t in _expand(item, "predictor"):
                if bt.is_open(t):
                    if _power_applies(x):
                        if not any(bt.is_open(u) for u in lst):
                            lst.append(t)
                    elif explicit and not item.ladder:
                        raise InputError.at(
                            PredictorChoice(listed_for, i),
                            f"an estimated power of '{col}' needs "
                            "values > 0 with at least "
                            f"{MIN_DISTINCT_FOR_POWER} distinct values",
                        )
                    continue
                if explicit or t.needs_lambda or t.name == "categorical":
                    check_predictor_transform(
                        prep,
                        t,
                        col,
                        PredictorChoice(listed_for, i),
                        item.auto_shift,
                        hint=" (for an estimated predictor power use 'power')",
                    )
                elif t.domain_problem(x, col, "predictor"):
                    continue  # a default that does not apply to this column
                if t.name == "log" and t.shift is None:
                    t = fit_transform(t, x)
                if t not in lst:
                    lst.append(t)
        if spec is None and _power_applies(x) and not any(bt.is_open(t) for t in lst):
            lst.append(bt.ESTIMATED)
        if not lst:
            raise InputError.at(
                Predictor(j), f"no requested transform applies to predictor '{col}'"
            )
        per.append(lst)
    return per


# ----------------------------------------------------------------------------- the bank
@dataclass
class Space:
    """Columns of every option in one bank, and how a specification maps onto them."""

    prep: Prepared
    bank: ColumnBank
    intercept: bool
    # (column, transform) -> bank indices; ("", "intercept") for the constant column
    index: dict[tuple[Any, ...], tuple[int, ...]] = field(default_factory=dict)
    # (column, transform) -> reason it cannot be used
    bad: dict[tuple[str, tr.Transform], str] = field(default_factory=dict)

    def design_of(self, spec: Specification) -> tuple[list[int], list[str], list[int]]:
        """(bank columns, names, positions of estimated powers) for ``spec``."""
        cols: list[int] = []
        names: list[str] = []
        dyn: list[int] = []
        pos = 0
        if self.intercept:
            cols.append(self.index[("", "intercept")][0])
            names.append("intercept")
            pos = 1
        for p in spec.predictors:
            t = p.transform
            if bt.is_open(t):
                dyn.append(pos)
                names.append(tr.Transform("power").label(p.column))
                pos += 1
                continue
            key = (p.column, t)
            if key in self.bad:
                raise CandidateFailure(self.bad[key])
            idx = self.index[key]
            cols.extend(idx)
            if t.name == "categorical":
                names.extend(self._dummy_names(p.column))
            else:
                names.append(t.label(p.column))
            pos += len(idx)
        return cols, names, dyn

    def _dummy_names(self, column: str) -> list[str]:
        lv, ref = categorical_levels(self.prep.categorical[column], None, column)
        return [term_label(column, level) for level in lv if level != ref]


def build_space(
    prep: Prepared,
    preds: list[list[tr.Transform]],
    index: FoldIndex,
    intercept: bool,
    extra: dict[tuple[Any, ...], np.ndarray] | None = None,
) -> Space:
    """Compute every option's column once; ``extra`` adds screening columns {key: values}."""
    bank = ColumnBank(prep.n, index)
    space = Space(prep, bank, intercept)
    if intercept:
        space.index[("", "intercept")] = (bank.add(("", "intercept"), np.ones(prep.n)),)
    for col, opts in zip(prep.predictors, preds, strict=True):
        if col in prep.categorical:
            vals = prep.categorical[col]
            lv, ref = categorical_levels(vals, None, col)
            idx = tuple(
                bank.add((col, "level", level), (vals == level).astype(float))
                for level in lv
                if level != ref
            )
            space.index[(col, tr.Transform("categorical"))] = idx
            continue
        x = prep.numeric[col]
        for t in opts:
            if bt.is_open(t):
                continue
            msg = t.domain_problem(x, col, "predictor")
            if msg:
                space.bad[(col, t)] = msg
                continue
            with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
                w = t.forward(x)
            if not np.all(np.isfinite(w)):
                space.bad[(col, t)] = f"{t.label(col)} is not finite for every row"
                continue
            space.index[(col, t)] = (bank.add((col, t), w),)
    for key, values in (extra or {}).items():
        space.index[key] = (bank.add(key, values),)
    bank.freeze()
    return space


def inputs_key(tag: bytes, *arrays: np.ndarray) -> bytes:
    """A digest of ``tag`` and the shapes and float64 bytes of ``arrays``: equal only for
    identical inputs (a kept estimate is reused for nothing else)."""
    h = hashlib.blake2b(tag, digest_size=20)
    for a in arrays:
        arr = np.ascontiguousarray(a, dtype=float)
        h.update(repr(arr.shape).encode())
        h.update(arr.tobytes())
    return h.digest()


class PowerFits:
    """All-rows power estimates of one request by their inputs: the screening step's
    estimates are kept here, and a candidate whose all-rows estimate has the very same
    inputs (the response on the same scale, the same fixed columns, the same predictor
    values, the same form) takes the kept fit instead of estimating it again.  Inputs are
    matched by a digest of their shapes and bytes, so only identical arrays share a fit;
    a failure is kept too and raised again."""

    def __init__(self) -> None:
        self._fits: dict[bytes, bt.PowerFit | CandidateFailure] = {}
        self.hits = 0

    @staticmethod
    def key(
        z: np.ndarray,
        Xf: np.ndarray,
        x: np.ndarray,
        boxcox_form: bool,
        seen: dict[int, bytes] | None = None,
    ) -> bytes:
        """The digest of one problem's inputs: the digest of the form and of each array's
        own digest.  ``seen`` (array id -> digest, for arrays alive while it is used) lets
        problems that share an array (the screening step's fixed columns on every response
        scale) hash it once."""
        parts = []
        for a in (z, Xf, x):  # memoised by the id of the object passed in (kept alive)
            d = seen.get(id(a)) if seen is not None else None
            if d is None:
                arr = np.asarray(a, dtype=float)
                d = inputs_key(b"", arr[:, None] if a is x and arr.ndim == 1 else arr)
                if seen is not None:
                    seen[id(a)] = d
            parts.append(d)
        h = hashlib.blake2b(b"boxcox" if boxcox_form else b"plain", digest_size=20)
        for d in parts:
            h.update(d)
        return h.digest()

    def _take(self, key: bytes) -> bt.PowerFit | CandidateFailure | None:
        got = self._fits.get(key)
        if got is not None:
            self.hits += 1
        return got

    def get(
        self, z: np.ndarray, Xf: np.ndarray, x: np.ndarray, boxcox_form: bool
    ) -> bt.PowerFit | CandidateFailure | None:
        """The kept fit (or failure) of these inputs, or None when none is kept."""
        return self._take(self.key(z, Xf, x, boxcox_form))

    def put(
        self,
        z: np.ndarray,
        Xf: np.ndarray,
        x: np.ndarray,
        boxcox_form: bool,
        fit: bt.PowerFit | CandidateFailure,
    ) -> None:
        self._fits[self.key(z, Xf, x, boxcox_form)] = fit

    def estimate_many(
        self, problems: list[tuple[np.ndarray, np.ndarray, np.ndarray]], boxcox_form: bool
    ) -> list[bt.PowerFit | CandidateFailure]:
        """:func:`boxtidwell.estimate_many_powers` of ``problems`` ``(z, X_f, x)``: the kept
        fit (or failure) of each whose inputs were estimated before, the others in one
        batch, kept for later.  Each problem's inputs are hashed once, an array shared by
        several problems once in all."""
        seen: dict[int, bytes] = {}  # ids stay valid: ``problems`` holds every array
        keys = [self.key(z, Xf, x, boxcox_form, seen) for z, Xf, x in problems]
        out = [self._take(k) for k in keys]
        missing = [i for i, fit in enumerate(out) if fit is None]
        if missing:
            made = bt.estimate_many_powers([problems[i] for i in missing], boxcox_form)
            for i, fit in zip(missing, made, strict=True):
                out[i] = fit
                self._fits[keys[i]] = fit
        return [fit for fit in out if fit is not None]

    def estimate(
        self, z: np.ndarray, Xf: np.ndarray, x: np.ndarray, boxcox_form: bool
    ) -> bt.PowerFit:
        """:func:`boxtidwell.estimate_powers` (started at 1, with standard errors) of these
        inputs: the kept fit, or estimated now and kept."""
        key = self.key(z, Xf, x, boxcox_form)
        got = self._take(key)
        if got is None:
            try:
                got = bt.estimate_powers(z, Xf, x, boxcox_form=boxcox_form)
            except CandidateFailure as exc:
                got = exc
            self._fits[key] = got
        if isinstance(got, CandidateFailure):
            raise got
        return got


def screening_powers(
    prep: Prepared,
    preds: list[list[tr.Transform]],
    responses: list[tr.Transform],
    intercept: bool,
    seed: int,
    deadline: Deadline | None = None,
    fits: PowerFits | None = None,
    skipped: list[str] | None = None,
) -> tuple[dict[tuple[tr.Transform, str], bt.PowerSummary], dict[tuple[tr.Transform, str], float]]:
    """All-rows (or seeded-subsample) Box-Tidwell power of each predictor per fixed response.

    For each fixed response scale and each predictor offering an estimated power, the
    power is estimated with the other predictors untransformed (one power at a time, so a
    predictor without effect cannot stall the others); one predictor's powers on every
    response scale take their steps together (:meth:`PowerFits.estimate_many`).  Past the
    request's ``deadline`` no further predictor is estimated: the search then runs
    without the missing estimates' ladder rungs, and the predictors not reached are added
    to ``skipped`` (when given).  Each estimate is kept in ``fits`` (when
    given), where a candidate with the same inputs finds it.  Returns
    ({(response, column): estimate summary}, {(response, column): power}).
    """
    cols = [c for c, o in zip(prep.predictors, preds, strict=True) if any(bt.is_open(t) for t in o)]
    if not cols:
        return {}, {}
    n = prep.n
    rows = np.arange(n)
    if n > BT_SCREEN_ROWS:
        rows = np.sort(np.random.RandomState(seed).choice(n, BT_SCREEN_ROWS, replace=False))
    base = {}
    for c in prep.predictors:
        if c in prep.categorical:
            vals = prep.categorical[c][rows]
            lv, ref = categorical_levels(prep.categorical[c], None, c)
            base[c] = [(vals == level).astype(float) for level in lv if level != ref]
        else:
            base[c] = [prep.numeric[c][rows]]
    scales: list[tuple[tr.Transform, np.ndarray]] = []  # (response scale, z on its rows)
    for t in responses:
        if t.needs_lambda:
            continue
        t0 = fit_transform(t, prep.y)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            z = t0.forward(prep.y[rows])
        if np.all(np.isfinite(z)):
            scales.append((t, z))
    kept = fits if fits is not None else PowerFits()
    got: dict[tuple[tr.Transform, str], bt.PowerFit] = {}
    for i, c in enumerate(cols):
        if deadline is not None and deadline.passed():
            if skipped is not None:
                skipped.extend(cols[i:])
            break
        fixed = ([np.ones(rows.size)] if intercept else []) + [
            v for other in prep.predictors if other != c for v in base[other]
        ]
        Xf = np.column_stack(fixed) if fixed else np.empty((rows.size, 0))
        x = prep.numeric[c][rows]
        # this predictor's power on every response scale: one batch of steps
        for (t, _z), fit in zip(
            scales, kept.estimate_many([(z, Xf, x) for _t, z in scales], intercept), strict=True
        ):
            if not isinstance(fit, CandidateFailure):
                got[(t, c)] = fit
    # in the order of the response scales, then the predictors (as the ladder rungs are added)
    order = sorted(got, key=lambda k: (responses.index(k[0]), cols.index(k[1])))
    info = {k: got[k].summary(0) for k in order}
    powers = {k: float(got[k].powers[0]) for k in order}
    return info, powers


def add_ladder_rungs(
    prep: Prepared,
    preds: list[list[tr.Transform]],
    info: dict[tuple[tr.Transform, str], bt.PowerSummary],
) -> list[list[tr.Transform]]:
    out = [list(o) for o in preds]
    for (t, col), summ in info.items():
        lad = summ.ladder
        if lad is None:
            continue
        j = prep.predictors.index(col)
        rung = tr.ladder_transform(lad)
        if rung.name == "log":
            rung = fit_transform(rung, prep.numeric[col])
        if rung.domain_problem(prep.numeric[col], col, "predictor") is None and rung not in out[j]:
            out[j].insert(
                len(out[j]) - 1 if any(bt.is_open(t) for t in out[j]) else len(out[j]), rung
            )
    return out


def grid_size(resp: list[tr.Transform], preds: list[list[tr.Transform]]) -> int:
    """Candidates in the space: estimated powers only with fixed response scales, at most
    MAX_ESTIMATED_POWERS of them per candidate."""
    fixed = [t for t in resp if not t.needs_lambda]
    ways = [1] + [0] * MAX_ESTIMATED_POWERS  # ways[c]: combinations with c estimated powers
    for o in preds:
        n_open = sum(1 for t in o if bt.is_open(t))
        n_fixed = len(o) - n_open
        ways = [ways[c] * n_fixed + (ways[c - 1] * n_open if c else 0) for c in range(len(ways))]
    no_est = math.prod(len([t for t in o if not bt.is_open(t)]) for o in preds)
    return len(fixed) * sum(ways) + (len(resp) - len(fixed)) * no_est


def allowed(spec: Specification) -> bool:
    t = spec.response_transform
    n_open = sum(1 for p in spec.predictors if bt.is_open(p.transform))
    if t.needs_lambda:
        return n_open == 0
    return n_open <= MAX_ESTIMATED_POWERS


def make_spec(
    prep: Prepared, rt: tr.Transform, ts: Iterable[tr.Transform], intercept: bool
) -> Specification:
    return Specification(
        prep.response,
        rt,
        tuple(PredictorSpec(c, t) for c, t in zip(prep.predictors, ts, strict=True)),
        intercept,
    )
