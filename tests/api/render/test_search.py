"""Contract form of the search summary's band, from a real selection."""

import numpy as np
import pytest
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core.conditions import CONDITION_NAMES
from service.core.data import prepare
from service.core.numbers import failure_text
from service.selection.search import (
    BAND_RULE,
    Band,
    BandReport,
    select,
)
from service.selection.search_setup import SearchOptions
from service.selection.strategy import EXHAUSTIVE_LIMIT

from tests.typed import predictors, responses


def test_band_block_states_the_one_standard_error_threshold():
    # source: Hastie, Tibshirani & Friedman (2009) sec. 7.10: the band is the lowest CV
    # error plus the standard error of the lowest-error candidate
    rng = np.random.default_rng(3)
    x = rng.uniform(1, 10, 120)
    y = np.exp(0.3 * x + rng.normal(0, 0.2, 120))
    prep = prepare({"columns": {"x": x.tolist(), "y": y.tolist()}}, "y", ["x"])
    result = select(prep, SearchOptions(), "test")
    band = to_jsonable(result.body)["search"]["band"]
    best = min(result.scored, key=lambda s: s.cv.value)
    assert band["lowest_cv_value"] == pytest.approx(best.cv.value, rel=1e-15)
    assert band["threshold"] == pytest.approx(best.cv.value + best.cv.std_error, rel=1e-15)
    assert band["rule"] == BAND_RULE
    assert set(band["conditions"]["conditions_ordering"]) <= set(CONDITION_NAMES)


def test_conditions_ordering_follows_the_condition_list_order():
    last, first = CONDITION_NAMES[-1], CONDITION_NAMES[0]
    out = contract(BandReport.of(Band(1.0, 0.1, 1.1), 3, 0.01, frozenset({last, first})))
    assert out["conditions"]["conditions_ordering"] == [first, last]
    assert out["conditions"]["members_compared"] == 3
    assert out["conditions"]["alpha"] == 0.01


def test_failure_reasons_and_strategy_render_as_the_contract_states():
    # the failures of a reciprocal response whose held-out back-transforms are undefined
    rng = np.random.default_rng(1)
    x, z = rng.uniform(0, 5, 80), rng.uniform(0, 5, 80)
    y = np.exp(1.5 * x + rng.normal(0, 2.0, 80))
    prep = prepare(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "z": z.tolist()}}, "y", ["x", "z"]
    )
    opts = SearchOptions(
        response_transforms=responses(["identity", "reciprocal", "sqrt"]),
        predictor_transforms=predictors(["identity", "log", "square", "reciprocal"]),
    )
    body = to_jsonable(select(prep, opts, "t").body)
    search = body["search"]
    groups = search["failure_reasons"]
    assert groups and all(set(g) == {"reason", "candidates", "wordings"} for g in groups)
    assert sum(g["candidates"] for g in groups) <= search["candidates_failed"]
    assert search["strategy"] == {
        "name": "exhaustive",
        "exhaustive_limit": EXHAUSTIVE_LIMIT,
        "description": "every candidate scored, simplest first, until a limit",
        "stopped_by": None,
    }
    # the warning counts the first group in the words the rendered group gives
    first = groups[0]
    assert failure_text(first["reason"], first["candidates"], first["wordings"]) in " ".join(
        body["warnings"]
    )


def test_a_candidate_space_past_64_bits_is_written_as_a_json_number():
    import orjson
    from service.api.render.search import EXACT_INT, count

    # 30 predictors with 6 scales each and 5 response scales: 5 * 6**30, past 2**63
    space = 5 * 6**30
    assert space > 2**63
    assert orjson.loads(orjson.dumps(count(space))) == pytest.approx(space, rel=1e-15)
    assert count(EXACT_INT) == EXACT_INT and type(count(EXACT_INT)) is int
    assert type(count(EXACT_INT + 1)) is float and count(12) == 12
