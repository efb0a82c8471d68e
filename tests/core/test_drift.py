"""Drift of this month's rows against what a model artifact recorded (service/core/drift.py).

Simulated data with known truth: predictors drawn from the same law (no drift), shifted by
half a standard deviation, moved past the training range, with a level added and one removed.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import entropy, norm
from service.core.data import prepare
from service.core.drift import compare, numeric_profile, profile, psi


def _prep(rng, n, shift=0.0, soils=("clay", "loam", "sand"), age_offset=0):
    x = rng.normal(50.0 + shift * 10.0, 10.0, n)
    age = rng.integers(1, 60, n) + age_offset
    soil = rng.choice(list(soils), n)
    y = np.exp(1.0 + 0.02 * x + rng.normal(0, 0.1, n))
    cols = {"cost": y.tolist(), "load": x.tolist(), "age": age.tolist(), "soil": soil.tolist()}
    return prepare({"columns": cols}, "cost", ["load", "age", "soil"], ["soil"])


def _artifact(prep):
    spec = {
        "response": {"column": "cost", "transform": {"name": "log"}},
        "predictors": [{"column": c} for c in ("load", "age", "soil")],
    }
    return {
        "specification": spec,
        "n": prep.n,
        "training_range": {
            c: {"min": float(prep.numeric[c].min()), "max": float(prep.numeric[c].max())}
            for c in ("load", "age")
        },
        "levels": {"soil": {"levels": sorted(set(prep.categorical["soil"])), "reference": "clay"}},
        "data_profile": profile(prep, ["load", "age", "soil"]),
    }


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
    inner = np.asarray(then["edges"][1:-1])
    shares = np.bincount(np.searchsorted(inner, now, side="right"), minlength=10) / now.size
    # source: exact decile-binned PSI of N(0.5,1) against N(0,1) from scipy.stats.norm;
    # the unbinned Jeffreys divergence of two unit normals is delta^2 = 0.25 (closed form),
    # which binning can only lower (data-processing inequality)
    edges = np.r_[-np.inf, norm.ppf(np.linspace(0, 1, 11)[1:-1]), np.inf]
    exact = psi(np.diff(norm.cdf(edges - 0.5)), np.full(10, 0.1))
    assert exact < 0.25
    assert psi(shares, then["shares"]) == pytest.approx(exact, abs=0.02)


def test_same_law_is_not_flagged():
    rng = np.random.default_rng(11)
    art = _artifact(_prep(rng, 3000))
    d = compare(art, _prep(rng, 3000))
    assert not any("shifted" in f for f in d["flags"])
    assert d["predictors"]["load"]["shift"] == "none"
    assert d["response"]["shift"] == "none"
    assert d["predictors"]["soil"]["new_levels"] == []
    assert d["rows"] == {"then": 3000, "now": 3000}
    assert "common-practice" in d["rule"]


def test_shifted_predictor_new_and_vanished_levels_are_flagged():
    rng = np.random.default_rng(12)
    art = _artifact(_prep(rng, 2000))
    now = _prep(rng, 1500, shift=1.0, soils=("clay", "loam", "gravel"), age_offset=40)
    d = compare(art, now)
    load = d["predictors"]["load"]
    assert load["shift"] == "major" and load["psi"] >= 0.25  # one sd shift: about 1 (delta^2)
    age = d["predictors"]["age"]
    # ages 41..99 against a training range 1..59: every age above 59 is outside
    assert age["outside_range"]["above"] == int(np.sum(now.numeric["age"] > 59))
    assert age["outside_range"]["below"] == 0
    soil = d["predictors"]["soil"]
    assert soil["new_levels"] == ["gravel"] and soil["vanished_levels"] == ["sand"]
    text = " ".join(d["flags"])
    assert "'load' shifted (major" in text
    assert "'age'" in text and "outside the training range" in text
    assert "'gravel'" in text and "'sand'" in text
    assert d["response"]["shift"] != "none"  # the response follows the load
    assert d["flagged"]


def test_an_artifact_without_a_profile_still_compares_ranges_and_levels():
    rng = np.random.default_rng(13)
    art = _artifact(_prep(rng, 500))
    del art["data_profile"]
    d = compare(art, _prep(rng, 400, soils=("clay", "loam", "silt"), age_offset=30))
    assert d["response"] is None and "no data profile" in d["note"]
    assert "psi" not in d["predictors"]["load"]
    assert d["predictors"]["soil"]["new_levels"] == ["silt"]
    assert d["predictors"]["age"]["outside_range"]["above"] > 0
