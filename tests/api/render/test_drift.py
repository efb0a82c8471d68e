"""Contract form of the drift block of a batch segment.

References: scipy.stats.entropy (the PSI is the Jeffreys divergence, KL both ways, of the
binned shares), numpy counts and medians of the rows, and the layout the README states
(rows then and now, per predictor its range, levels and shift, the response, the rule).
"""

from __future__ import annotations

import functools
import json

import numpy as np
import pytest
from scipy.stats import entropy
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core.drift import RULE, compare

from tests.core import test_drift as core_drift_cases

# the same invented rows and model as the core's drift tests (one place that builds them)
_artifact = functools.partial(core_drift_cases._artifact, columns=("load", "age", "soil", "depth"))
_prep = core_drift_cases._prep


@pytest.fixture(scope="module")
def case():
    rng = np.random.default_rng(21)
    then = _prep(rng, 2000)
    now = _prep(rng, 1500, shift=1.0, soils=("clay", "loam", "gravel"), age_offset=40)
    art = _artifact(then)
    return then, now, art, contract(compare(art, now))


def test_the_block_has_the_stated_layout(case):
    *_, out = case
    json.dumps(out, allow_nan=False)
    assert list(out) == ["rows", "predictors", "rule", "response", "flags", "flagged"]
    assert out["rule"] == RULE
    assert list(out["predictors"]) == ["load", "age", "soil", "depth"]  # specification order
    load = out["predictors"]["load"]
    assert list(load) == [
        "kind",
        "training_min",
        "training_max",
        "outside_range",
        "psi",
        "shift",
        "median_then",
        "median_now",
    ]
    assert list(load["outside_range"]) == ["below", "above", "share", "now_min", "now_max"]
    assert list(out["predictors"]["soil"]) == [
        "kind",
        "new_levels",
        "vanished_levels",
        "psi",
        "shift",
    ]
    assert out["predictors"]["depth"] == {"kind": "missing"}
    assert list(out["response"]) == [
        "psi",
        "shift",
        "median_then",
        "median_now",
        "mean_then",
        "mean_now",
    ]
    assert out["flagged"] is True and out["flags"]


def test_rendered_numbers_match_numpy_and_scipy(case):
    then, now, art, out = case
    assert out["rows"] == {"then": 2000, "now": 1500}
    age = now.numeric["age"]
    lo, hi = art.profile.predictor("age").edges[::10]
    rng_out = out["predictors"]["age"]["outside_range"]
    # source: numpy counts of this month's ages outside the training range
    assert rng_out["below"] == int(np.sum(age < lo)) and rng_out["above"] == int(np.sum(age > hi))
    assert rng_out["share"] == pytest.approx((rng_out["below"] + rng_out["above"]) / 1500)
    assert (rng_out["now_min"], rng_out["now_max"]) == (float(age.min()), float(age.max()))
    load = out["predictors"]["load"]
    assert load["median_now"] == pytest.approx(np.median(now.numeric["load"]), rel=1e-12)
    assert load["median_then"] == pytest.approx(np.median(then.numeric["load"]), rel=1e-12)
    # source: scipy.stats.entropy (KL); PSI = KL(now||then) + KL(then||now) over the bins
    edges = np.asarray(art.profile.predictor("load").edges)
    counts = np.bincount(
        np.searchsorted(edges[1:-1], now.numeric["load"], side="right"),
        minlength=edges.size - 1,
    )
    a = np.maximum(counts / counts.sum(), 1e-4)  # common practice: empty bins as 0.0001
    e = np.maximum(art.profile.predictor("load").shares, 1e-4)
    assert load["psi"] == pytest.approx(entropy(a, e) + entropy(e, a), rel=1e-9)
    assert load["shift"] == "major"  # common practice: PSI 0.25 or more
    soil = out["predictors"]["soil"]
    assert soil["new_levels"] == ["gravel"] and soil["vanished_levels"] == ["sand"]
    resp = out["response"]
    assert resp["mean_now"] == pytest.approx(np.mean(now.y), rel=1e-12)
    assert resp["mean_then"] == pytest.approx(np.mean(then.y), rel=1e-12)


def test_without_a_profile_only_ranges_and_levels_are_written_and_a_note_says_so():
    rng = np.random.default_rng(22)
    then = _prep(rng, 300)
    out = contract(compare(_artifact(then, with_profile=False), _prep(rng, 200)))
    assert out["response"] is None and "no data profile" in out["note"]
    assert list(out) == ["rows", "predictors", "rule", "response", "note", "flags", "flagged"]
    assert out["rows"] == {"then": 300, "now": 200}
    assert list(out["predictors"]["load"]) == [
        "kind",
        "training_min",
        "training_max",
        "outside_range",
    ]
    assert list(out["predictors"]["soil"]) == ["kind", "new_levels", "vanished_levels"]


def test_a_body_holding_the_typed_block_is_written_in_its_contract_form(case):
    _, now, art, out = case
    report = compare(art, now)
    assert to_jsonable({"result": {"drift": report}}) == {"result": {"drift": out}}
