"""Plot-ready data for the diagnostic panels of one OLS candidate.

:func:`diagnostic_plots` returns a frozen :class:`DiagnosticPlots`: one typed panel per
question a reader asks of a fitted scale, each holding named numeric series (tuples of
finite floats and row numbers; ``service.api.render.plots`` writes them as the
``plots`` JSON of ``/v1/diagnostics`` and ``service.report.figures`` draws them):

- ``residuals_fitted`` -- is the scale straight?  Residuals against fitted values with a
  LOWESS smoother (Cleveland 1979).
- ``spread_fitted`` -- is the spread even?  |standardised residual| against fitted values, with
  its smoother and the size expected under even normal spread, E|Z| = sqrt(2/pi).
- ``normal_quantiles`` -- are the residuals close to normal?  Ordered standardised residuals
  against normal quantiles (Blom 1958) with a 95% envelope (Atkinson 1981).
- ``influence`` -- which rows pull the fit?  Cook's distance (Cook 1977) by row, with the
  service's flag and fail cut-offs and the reason each flagged row was flagged.
- ``partial_residuals`` -- is each predictor's scale right?  One partial-residual series per
  numeric predictor (Ezekiel 1924; Larsen & McCleary 1972).

Row numbers are the request's, counted from 1 (``numbers.ROW_RULE``: 1 = first data row).  Large data sets are
thinned for drawing only: a seeded random subset of the rows, always including the flagged
rows that are labelled.  The statistics behind every series use all rows; the LOWESS curves
use all rows up to :data:`SMOOTHER_MAX_ROWS` and a seeded sample beyond that.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from service.core import _condition_tests as ct
from service.core import sources as src
from service.core.conditions import MAX_FLAGGED_ROWS, ConditionInputs, flag_rows, validate
from service.core.folds import DEFAULT_SEED
from service.core.lowess import lowess

#: LOWESS is fitted to at most this many rows (a seeded sample beyond it)
SMOOTHER_MAX_ROWS = 20_000
#: points returned per smoother or reference curve
CURVE_POINTS = 200
#: flagged rows labelled per panel (largest Cook's distance first)
MAX_LABELS = 10
#: simulated samples for the normal-quantile envelope
ENVELOPE_SIMULATIONS = 199
#: above this many rows the envelope uses exact order-statistic quantiles instead
ENVELOPE_SIMULATION_MAX_N = 10_000


# ------------------------------------------------------------------------ typed results
Floats = tuple[float, ...]


@dataclass(frozen=True)
class Heading:
    """What a panel asks and how to read it: its title, the code of its question, a one-line
    reading and the axis labels (prose for a person; every panel has one)."""

    title: str
    question: str
    reading: str
    x_label: str
    y_label: str


@dataclass(frozen=True)
class Scatter:
    """Points of a panel: x and y, and the request's row number of each point."""

    x: Floats
    y: Floats
    row: tuple[int, ...]

    @classmethod
    def empty(cls) -> Scatter:
        return cls((), (), ())


@dataclass(frozen=True)
class InfluencePoints:
    """Cook's distance (``y``) by row number (``x``); the leverage and externally
    studentised residual of each row (None where undefined: leverage 1), absent when the
    fit has no influence measures; ``flag`` the reason a row is flagged ("cooks", "other"
    or "")."""

    x: Floats
    y: Floats
    row: tuple[int, ...]
    leverage: tuple[float | None, ...] | None
    studentized: tuple[float | None, ...] | None
    flag: tuple[str, ...]


@dataclass(frozen=True)
class Curve:
    """A line through the points (x, y) in order of x."""

    x: Floats
    y: Floats


@dataclass(frozen=True)
class Smoother:
    """A smoothing curve and the method that drew it, with its published source."""

    x: Floats
    y: Floats
    method: str
    source: str


@dataclass(frozen=True)
class ReferenceLine:
    """A named reference line from (x[0], y[0]) to (x[1], y[1])."""

    name: str
    x: Floats
    y: Floats


@dataclass(frozen=True)
class Label:
    """A flagged row to label at (x, y)."""

    row: int
    x: float
    y: float


@dataclass(frozen=True)
class QuartileLine:
    """The line through the quartiles of a normal-quantile panel, drawn between its ends."""

    x: Floats
    y: Floats
    slope: float
    intercept: float
    method: str
    source: str


@dataclass(frozen=True)
class Envelope:
    """Pointwise band of the ordered standardised residuals at the normal quantiles ``x``
    for a normal sample, and the share of the shown points inside it."""

    x: Floats
    lower: Floats
    upper: Floats
    level: float
    method: str
    source: str
    simulations: int | None  # None for the exact order-statistic quantiles
    share_inside: float


@dataclass(frozen=True)
class Cutoff:
    """A named horizontal line of the influence panel (a flag or fail cut-off)."""

    name: str
    value: float


@dataclass(frozen=True)
class ResidualsPanel:
    """Is the scale straight? Residuals against fitted values."""

    heading: Heading
    points: Scatter
    smoother: Smoother | None
    reference_lines: tuple[ReferenceLine, ...]
    labels: tuple[Label, ...]
    n_total: int


@dataclass(frozen=True)
class SpreadPanel:
    """Is the spread even? |standardised residual| against fitted values; ``note`` says
    why the panel is empty (no standardised residuals), else None."""

    heading: Heading
    n_total: int
    points: Scatter
    smoother: Smoother | None
    reference_lines: tuple[ReferenceLine, ...]
    labels: tuple[Label, ...]
    note: str | None


@dataclass(frozen=True)
class NormalPanel:
    """Are the residuals close to normal? Ordered standardised residuals against normal
    quantiles; ``note`` says why the panel is empty, else None (and the panel has its
    reference line, envelope and plotting positions)."""

    heading: Heading
    n_total: int
    points: Scatter
    reference_line: QuartileLine | None
    envelope: Envelope | None
    labels: tuple[Label, ...]
    note: str | None
    plotting_positions: str | None


@dataclass(frozen=True)
class InfluencePanel:
    """Which rows pull the fit? Cook's distance by row; ``note`` says why the panel is
    empty, else None (and the panel has its cut-offs and flag rule)."""

    heading: Heading
    n_total: int
    points: InfluencePoints
    cutoffs: tuple[Cutoff, ...]
    flag_rule: str | None
    labels: tuple[Label, ...]
    note: str | None


@dataclass(frozen=True)
class PartialResidualsPanel:
    """Is the scale of one numeric predictor right? Its partial residuals against the
    predictor as sent, with its fitted effect (``component``) and a smoother."""

    column: str
    label: str
    heading: Heading
    points: Scatter
    component: Curve
    smoother: Smoother | None
    coefficient: float | None
    n_total: int


@dataclass(frozen=True)
class DiagnosticPlots:
    """The five diagnostic panels of one fitted specification."""

    residuals_fitted: ResidualsPanel
    normal_quantiles: NormalPanel
    spread_fitted: SpreadPanel
    influence: InfluencePanel
    partial_residuals: tuple[PartialResidualsPanel, ...]


#: plotting positions of the normal-quantile panel
PLOTTING_POSITIONS = "Blom (1958): (i - 0.375) / (n + 0.25)"
#: the rule by which the influence panel flags a row
FLAG_RULE = (
    "a row is flagged for Cook's distance > 4/n, leverage > 2p/n, |DFFITS| > 2 sqrt(p/n) "
    "or |externally studentised residual| > 3 (common practice)"
)


# ------------------------------------------------------------------------------ series
def _floats(values: ArrayLike) -> Floats:
    out: list[float] = np.asarray(values, dtype=float).tolist()
    return tuple(out)


def _ints(values: ArrayLike) -> tuple[int, ...]:
    return tuple(int(v) for v in np.asarray(values).tolist())


def _even(k_total: int, k: int) -> np.ndarray:
    """At most ``k`` evenly spaced indices into range(k_total), ends included."""
    if k_total <= k:
        return np.arange(k_total)
    return np.unique(np.linspace(0, k_total - 1, k).round().astype(int))


def _smoother(x: np.ndarray, y: np.ndarray, rng: np.random.Generator) -> Smoother | None:
    """LOWESS curve of y on x (frac 2/3, 3 robustness steps), thinned to CURVE_POINTS."""
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if x.size > SMOOTHER_MAX_ROWS:
        pick = rng.choice(x.size, SMOOTHER_MAX_ROWS, replace=False)
        x, y = x[pick], y[pick]
    if np.unique(x).size < 5:
        return None
    try:
        # Heavily tied x can give 0/0 in the local fits; such points are dropped below.
        with np.errstate(all="ignore"):
            curve = lowess(y, x, frac=2 / 3, it=3, delta=0.01 * float(np.ptp(x)))
    except (ValueError, np.linalg.LinAlgError):
        return None
    curve = curve[np.all(np.isfinite(curve), axis=1)]
    if curve.shape[0] < 2:
        return None
    curve = curve[_even(curve.shape[0], CURVE_POINTS)]
    return Smoother(
        _floats(curve[:, 0]),
        _floats(curve[:, 1]),
        "LOWESS, frac = 2/3, 3 robustness iterations",
        src.LOWESS,
    )


def _shown(x: np.ndarray, y: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """The rows of ``keep`` where both x and y are finite."""
    ok: np.ndarray = keep[np.isfinite(x[keep]) & np.isfinite(y[keep])]
    return ok


def _scatter(x: np.ndarray, y: np.ndarray, ids: np.ndarray, keep: np.ndarray) -> Scatter:
    ok = _shown(x, y, keep)
    return Scatter(_floats(x[ok]), _floats(y[ok]), _ints(ids[ok]))


def _labels(
    x: np.ndarray, y: np.ndarray, ids: np.ndarray, flagged: np.ndarray
) -> tuple[Label, ...]:
    return tuple(
        Label(int(ids[i]), float(x[i]), float(y[i]))
        for i in flagged[:MAX_LABELS]
        if np.isfinite(x[i]) and np.isfinite(y[i])
    )


def _thin(n: int, max_points: int, must: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Sorted row indices to draw: every row of ``must`` plus a seeded sample of the rest."""
    if n <= max_points:
        return np.arange(n)
    room = max(max_points - must.size, 0)
    free = np.ones(n, dtype=bool)
    free[must] = False
    pool = np.flatnonzero(free)
    sample = rng.choice(pool, size=min(room, pool.size), replace=False)
    return np.sort(np.concatenate([must, sample]).astype(np.intp))


def _residuals_fitted(
    fit: ct.Fit,
    ids: np.ndarray,
    keep: np.ndarray,
    flagged: np.ndarray,
    rng: np.random.Generator,
) -> ResidualsPanel:
    f, e = fit.fitted, fit.resid
    lo, hi = float(f.min()), float(f.max())
    return ResidualsPanel(
        heading=Heading(
            title="Is the scale straight?",
            question="straight",
            reading="residuals should scatter around 0 with no curve in the smoother",
            x_label="Fitted value (model scale)",
            y_label="Residual (model scale)",
        ),
        points=_scatter(f, e, ids, keep),
        smoother=_smoother(f, e, rng),
        reference_lines=(ReferenceLine("zero", (lo, hi), (0.0, 0.0)),),
        labels=_labels(f, e, ids, flagged),
        n_total=fit.n,
    )


def _envelope(
    fit: ct.Fit, ranks: np.ndarray, m: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, str, str, int | None]:
    """Pointwise 2.5%/97.5% envelope of the ordered standardised residuals at ``ranks``:
    (lower, upper, method, source, simulations)."""
    if fit.n <= ENVELOPE_SIMULATION_MAX_N:
        # Atkinson (1981): simulate N(0, 1) responses on the same design and standardise
        # their residuals exactly as the observed ones.
        assert fit.influence is not None  # the caller has standardised residuals
        h = fit.influence.leverage
        ok = h < 1 - ct.LEVERAGE_ONE_TOL
        Y = rng.standard_normal((fit.n, ENVELOPE_SIMULATIONS))
        E = fit.ls.residual(Y)
        s2 = np.sum(E**2, axis=0) / fit.df_resid
        R = np.sort(E[ok] / np.sqrt(np.outer(1 - h[ok], s2)), axis=0)
        lower, upper = np.percentile(R[ranks], [2.5, 97.5], axis=1)
        return (
            lower,
            upper,
            f"simulation ({ENVELOPE_SIMULATIONS} samples, seeded)",
            src.ENVELOPE_SIMULATED,
            ENVELOPE_SIMULATIONS,
        )
    # The k-th of m ordered uniforms is Beta(k, m + 1 - k): exact quantiles of normal
    # order statistics, accurate for standardised residuals when n is this large.
    k = ranks + 1
    lower = stats.norm.ppf(stats.beta.ppf(0.025, k, m + 1 - k))
    upper = stats.norm.ppf(stats.beta.ppf(0.975, k, m + 1 - k))
    return (
        lower,
        upper,
        "exact normal order-statistic quantiles (large n)",
        src.ENVELOPE_EXACT,
        None,
    )


def _normal_quantiles(
    fit: ct.Fit,
    ids: np.ndarray,
    max_points: int,
    flagged: np.ndarray,
    rng: np.random.Generator,
) -> NormalPanel:
    heading = Heading(
        title="Are the residuals close to normal?",
        question="normal",
        reading=(
            "ordered standardised residuals should follow their normal quantiles, inside the "
            "95% envelope"
        ),
        x_label="Normal quantile",
        y_label="Standardised residual",
    )
    r = None if fit.influence is None else fit.influence.standardized
    rows = np.flatnonzero(np.isfinite(r)) if r is not None else np.array([], dtype=int)
    if rows.size < 3:
        return NormalPanel(
            heading=heading,
            n_total=fit.n,
            points=Scatter.empty(),
            reference_line=None,
            envelope=None,
            labels=(),
            note=fit.residual_reason or "too few standardised residuals",
            plotting_positions=None,
        )
    assert r is not None  # rows is empty without standardised residuals
    m = rows.size
    order = rows[np.argsort(r[rows], kind="stable")]
    theo_all = stats.norm.ppf((np.arange(1, m + 1) - 0.375) / (m + 0.25))  # Blom (1958)
    if m <= max_points:
        ranks = np.arange(m)
    else:
        tail = max(max_points // 10, 1)
        rank_of = np.empty(fit.n, dtype=np.intp)
        rank_of[order] = np.arange(m)
        flagged_rows = np.unique(flagged)  # intersect1d(flagged, rows) without sorting all rows
        must = rank_of[flagged_rows[np.isfinite(r[flagged_rows])]]
        ranks = np.unique(
            np.concatenate(
                [np.arange(tail), np.arange(m - tail, m), _even(m, max_points - 2 * tail), must]
            )
        )
    lower, upper, method, source, sims = _envelope(fit, ranks, m, rng)
    y, theo = r[order[ranks]], theo_all[ranks]
    q1, q3 = np.percentile(r[rows], [25, 75])
    t1, t3 = stats.norm.ppf([0.25, 0.75])
    slope = (q3 - q1) / (t3 - t1)
    intercept = q1 - slope * t1
    ends = np.array([theo_all[0], theo_all[-1]])
    inside = float(np.mean((y >= lower) & (y <= upper)))
    rank_at = {int(order[k]): int(k) for k in ranks}
    labels = tuple(
        Label(int(ids[i]), float(theo_all[rank_at[i]]), float(r[i]))
        for i in flagged[:MAX_LABELS].tolist()
        if i in rank_at
    )  # priority order
    theo_x = _floats(theo)
    return NormalPanel(
        heading=heading,
        n_total=fit.n,
        points=Scatter(theo_x, _floats(y), _ints(ids[order[ranks]])),
        reference_line=QuartileLine(
            x=_floats(ends),
            y=_floats(intercept + slope * ends),
            slope=float(slope),
            intercept=float(intercept),
            method="line through the quartiles",
            source=src.QUARTILE_LINE,
        ),
        envelope=Envelope(
            x=theo_x,
            lower=_floats(lower),
            upper=_floats(upper),
            level=0.95,
            method=method,
            source=source,
            simulations=sims,
            share_inside=inside,
        ),
        labels=labels,
        note=None,
        plotting_positions=PLOTTING_POSITIONS,
    )


#: E|Z| for Z ~ N(0, 1): the mean size of a standardised residual under even normal spread
EXPECTED_ABS_NORMAL = math.sqrt(2.0 / math.pi)


def _spread_fitted(
    fit: ct.Fit,
    ids: np.ndarray,
    keep: np.ndarray,
    flagged: np.ndarray,
    rng: np.random.Generator,
) -> SpreadPanel:
    heading = Heading(
        title="Is the spread even?",
        question="spread",
        reading="the smoother should stay level; a rise or fall means uneven spread",
        x_label="Fitted value (model scale)",
        y_label="|standardised residual|",
    )
    if fit.influence is None:
        return SpreadPanel(heading, fit.n, Scatter.empty(), None, (), (), fit.residual_reason)
    f, s = fit.fitted, np.abs(fit.influence.standardized)
    lo, hi = float(f.min()), float(f.max())
    return SpreadPanel(
        heading=heading,
        n_total=fit.n,
        points=_scatter(f, s, ids, keep),
        smoother=_smoother(f, s, rng),
        # source: E|Z| = sqrt(2/pi) for a standard normal Z (half-normal mean)
        reference_lines=(
            ReferenceLine(
                "expected size under even normal spread, sqrt(2/pi) = 0.80",
                (lo, hi),
                (EXPECTED_ABS_NORMAL, EXPECTED_ABS_NORMAL),
            ),
        ),
        labels=_labels(f, s, ids, flagged),
        note=None,
    )


def _flag_reason(masks: dict[str, np.ndarray], n: int) -> np.ndarray:
    """Per row: "cooks" when flagged for Cook's distance, "other" when flagged for another
    reason only (leverage, DFFITS, studentised residual), "" when not flagged."""
    by_cooks = np.zeros(n, dtype=bool)
    other = np.zeros(n, dtype=bool)
    for name, mask in masks.items():
        if name.startswith("Cook's distance"):
            by_cooks |= mask
        else:
            other |= mask
    return np.where(by_cooks, "cooks", np.where(other, "other", ""))


def _nums(values: np.ndarray) -> tuple[float | None, ...]:
    return tuple(ct.num(v) for v in values)  # None where undefined (leverage 1)


def _influence_panel(
    fit: ct.Fit, ids: np.ndarray, keep: np.ndarray, flagged: np.ndarray
) -> InfluencePanel:
    heading = Heading(
        title="Which rows pull the fit?",
        question="influence",
        reading=(
            "Cook's distance of each row; rows above the flag line move the fit noticeably, "
            "above the fail line they dominate it"
        ),
        x_label="Row (1 = first data row)",
        y_label="Cook's distance",
    )
    if fit.influence is None:
        nothing = InfluencePoints((), (), (), None, None, ())
        return InfluencePanel(heading, fit.n, nothing, (), None, (), fit.residual_reason)
    inf = fit.influence
    _, masks, cut = flag_rows(fit)
    cooks = np.nan_to_num(inf.cooks, nan=0.0)
    rows = np.asarray(ids, dtype=float)
    reason = _flag_reason(masks, fit.n)
    ok = _shown(rows, cooks, keep)
    points = InfluencePoints(
        x=_floats(rows[ok]),
        y=_floats(cooks[ok]),
        row=_ints(ids[ok]),
        leverage=_nums(inf.leverage[ok]),
        studentized=_nums(inf.studentized[ok]),
        flag=tuple(str(r) for r in reason[ok]),
    )
    return InfluencePanel(
        heading=heading,
        n_total=fit.n,
        points=points,
        cutoffs=(
            Cutoff("flag: Cook's distance > 4/n (common practice)", cut.cooks_flag),
            Cutoff("fail: Cook's distance > 1 (common practice)", cut.cooks_fail),
        ),
        flag_rule=FLAG_RULE,
        labels=_labels(rows, cooks, ids, flagged),
        note=None,
    )


def _partial_residuals(
    fit: ct.Fit,
    inp: ConditionInputs,
    ids: np.ndarray,
    keep: np.ndarray,
    rng: np.random.Generator,
) -> tuple[PartialResidualsPanel, ...]:
    out = []
    params = fit.params
    for term in inp.terms:
        if term.kind != "numeric" or len(term.indices) != 1:
            continue
        j = term.indices[0]
        w = fit.X[:, j]
        x = w if term.raw is None else np.asarray(term.raw, dtype=float)
        comp = params[j] * w
        y = comp + fit.resid
        # the component b_j w_j is a curve in x: draw it through the shown rows and the ends
        rows = np.union1d(keep, [int(np.argmin(x)), int(np.argmax(x))])
        rows = rows[np.argsort(x[rows], kind="stable")]
        srt = rows[_even(rows.size, CURVE_POINTS * 5)]
        out.append(
            PartialResidualsPanel(
                column=term.column,
                label=term.label,
                heading=Heading(
                    title=f"Is the scale of {term.column} right?",
                    question="predictor_scale",
                    reading=(
                        f"the smoother should follow the fitted effect of {term.label}; a "
                        "systematic bend means another scale fits better"
                    ),
                    x_label=f"{term.column} (as sent)",
                    y_label=f"fitted effect of {term.label} + residual",
                ),
                points=_scatter(x, y, ids, keep),
                component=Curve(_floats(x[srt]), _floats(comp[srt])),
                smoother=_smoother(x, y, rng),
                coefficient=ct.num(params[j]),
                n_total=fit.n,
            )
        )
    return tuple(out)


def diagnostic_plots(
    inp: ConditionInputs, max_points: int = 2000, seed: int = DEFAULT_SEED
) -> DiagnosticPlots:
    """Plot-ready data for the five diagnostic panels.

    Each panel holds its :class:`Heading` (title, axis labels), its ``points`` (x, y and the
    caller's row number of each point) and its reference lines, smoother or envelope;
    ``partial_residuals`` holds one panel per numeric predictor.  At most about
    ``max_points`` points per panel are returned (flagged rows are always kept); randomness
    comes only from ``seed``.  No NaN or infinity (None where a value is undefined).
    """
    if max_points < 10:
        raise ValueError(f"max_points must be at least 10; got {max_points}")
    z, X = validate(inp)
    fit = ct.fit_model(z, X, inp.has_intercept)
    ids = np.asarray(inp.row_numbers)
    flagged = (
        flag_rows(fit)[0][:MAX_FLAGGED_ROWS]
        if fit.influence is not None
        else np.array([], dtype=np.intp)
    )
    rng = np.random.default_rng(seed)
    keep = _thin(fit.n, max_points, flagged.astype(np.intp), rng)
    return DiagnosticPlots(
        residuals_fitted=_residuals_fitted(fit, ids, keep, flagged, rng),
        normal_quantiles=_normal_quantiles(fit, ids, max_points, flagged, rng),
        spread_fitted=_spread_fitted(fit, ids, keep, flagged, rng),
        influence=_influence_panel(fit, ids, keep, flagged),
        partial_residuals=_partial_residuals(fit, inp, ids, keep, rng),
    )
