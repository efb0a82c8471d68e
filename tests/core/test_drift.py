"""Drift of this month's rows against what a model recorded (service/core/drift.py).

Simulated data with known truth: predictors drawn from the same law (no drift), shifted by
half a standard deviation, moved past the training range, with a level added and one removed.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import entropy, norm
from service.core import transforms as tr
from service.core.data import prepare
from service.core.drift import (
    NO_PROFILE_NOTE,
    CategoricalDrift,
    DriftReport,
    MissingColumn,
    NumericDrift,
    compare,
    numeric_profile,
    profile,
    psi,
)
from service.core.model import Model
from service.core.spec import Levels, PredictorSpec, Specification


def _prep(rng, n, shift=0.0, soils=("clay", "loam", "sand"), age_offset=0):
    x = rng.normal(50.0 + shift * 10.0, 10.0, n)
    age = rng.integers(1, 60, n) + age_offset
    soil = rng.choice(list(soils), n)
    y = np.exp(1.0 + 0.02 * x + rng.normal(0, 0.1, n))
    cols = {"cost": y.tolist(), "load": x.tolist(), "age": age.tolist(), "soil": soil.tolist()}
    return prepare({"columns": cols}, "cost", ["load", "age", "soil"], ["soil"])


def _artifact(prep, with_profile=True, columns=("load", "age", "soil")):
    """A model recording what drift reads: its specification, training rows, ranges, levels
    and (``with_profile``) the training rows' profile."""
    spec = Specification(
        "cost",
        tr.Transform("log"),
        tuple(PredictorSpec(c, tr.Transform("identity")) for c in columns),
    )
    return Model(
        spec=spec,
        terms=(),
        coef=np.zeros(0),
        xtx_inverse=np.zeros((0, 0)),
        residual_variance=1.0,
        df_residual=1,
        levels={"soil": Levels(tuple(sorted(set(prep.categorical["soil"]))), "clay")},
        residuals=np.zeros(1),
        residual_kind="all",
        training_range={
            c: (float(prep.numeric[c].min()), float(prep.numeric[c].max())) for c in ("load", "age")
        },
        max_leverage=0.0,
        n=prep.n,
        profile=profile(prep, ["load", "age", "soil"]) if with_profile else None,
    )


def test_psi_is_the_jeffreys_divergence_of_the_binned_shares():
    rng = np.random.default_rng(3)
    a = rng.dirichlet(np.ones(10))
    e = rng.dirichlet(np.ones(10))
    # source: PSI = sum (a-e) ln(a/e) = KL(a||e) + KL(e||a) (algebra); scipy.stats.entropy is KL
    assert psi(a, e) == pytest.approx(entropy(a, e) + entropy(e, a), rel=1e-12)
    assert psi(a, a) == 0.0


def test_psi_of_a_half_sd_normal_shift_matches_the_exact_binned_value():
    rng = np.random.default_rng(5)
    then = numeric_profile(rng.normal(0.0, 1.0, 40_000))
    now = rng.normal(0.5, 1.0, 40_000)
    inner = np.asarray(then.edges[1:-1])
    shares = np.bincount(np.searchsorted(inner, now, side="right"), minlength=10) / now.size
    # source: exact decile-binned PSI of N(0.5,1) against N(0,1) from scipy.stats.norm;
    # the unbinned Jeffreys divergence of two unit normals is delta^2 = 0.25 (closed form),
    # which binning can only lower (data-processing inequality)
    edges = np.r_[-np.inf, norm.ppf(np.linspace(0, 1, 11)[1:-1]), np.inf]
    exact = psi(np.diff(norm.cdf(edges - 0.5)), np.full(10, 0.1))
    assert exact < 0.25
    assert psi(shares, then.shares) == pytest.approx(exact, abs=0.02)


def test_same_law_is_not_flagged():
    rng = np.random.default_rng(11)
    art = _artifact(_prep(rng, 3000))
    d = compare(art, _prep(rng, 3000))
    assert isinstance(d, DriftReport)
    assert not any("shifted" in f for f in d.flags)
    preds = dict(d.predictors)
    assert list(preds) == ["load", "age", "soil"]  # the specification's order
    assert preds["load"].shift.grade == "none"
    assert d.response.shift.grade == "none"
    assert preds["soil"].new_levels == ()
    assert (d.rows_then, d.rows_now) == (3000, 3000)
    assert d.note is None


def test_shifted_predictor_new_and_vanished_levels_are_flagged():
    rng = np.random.default_rng(12)
    art = _artifact(_prep(rng, 2000))
    now = _prep(rng, 1500, shift=1.0, soils=("clay", "loam", "gravel"), age_offset=40)
    d = compare(art, now)
    preds = dict(d.predictors)
    load = preds["load"]
    # one sd shift: about 1 (delta^2)
    assert load.shift.grade == "major" and load.shift.psi >= 0.25
    age = preds["age"]
    # ages 41..99 against a training range 1..59: every age above 59 is outside
    assert age.outside.above == int(np.sum(now.numeric["age"] > 59))
    assert age.outside.below == 0
    soil = preds["soil"]
    assert isinstance(soil, CategoricalDrift)
    assert soil.new_levels == ("gravel",) and soil.vanished_levels == ("sand",)
    text = " ".join(d.flags)
    assert "'load' shifted (major" in text
    assert "'age'" in text and "outside the training range" in text
    assert "'gravel'" in text and "'sand'" in text
    assert d.response.shift.grade != "none"  # the response follows the load
    assert d.flagged


def test_an_artifact_without_a_profile_still_compares_ranges_and_levels():
    rng = np.random.default_rng(13)
    art = _artifact(_prep(rng, 500), with_profile=False)
    d = compare(art, _prep(rng, 400, soils=("clay", "loam", "silt"), age_offset=30))
    assert d.response is None and d.note == NO_PROFILE_NOTE and "no data profile" in d.note
    preds = dict(d.predictors)
    assert isinstance(preds["load"], NumericDrift) and preds["load"].shift is None
    assert preds["soil"].new_levels == ("silt",) and preds["soil"].shift is None
    assert preds["age"].outside.above > 0
    assert d.rows_then == 500  # the artifact's row count stands in for the profile's


def test_a_predictor_missing_from_this_month_is_named():
    rng = np.random.default_rng(14)
    art = _artifact(_prep(rng, 300), columns=("load", "age", "soil", "depth"))
    d = compare(art, _prep(rng, 300))
    assert dict(d.predictors)["depth"] == MissingColumn()
    assert "'depth' is not in this data" in d.flags and d.flagged
