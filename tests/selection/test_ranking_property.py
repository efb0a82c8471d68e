"""Dominance guarantee of the ranking rule, checked over random tables (hypothesis).

No entry may rank above another that is at least as simple on every count, has a lower
cross-validated error and fails no more regression conditions.  The ordering under test
is the service's own: the one band (lowest error plus the standard error of the
lowest-error candidate), simplicity then error inside it, error outside, then the
re-ordering of the leading band members by failed conditions.
"""

import itertools
import os
import tempfile

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.configuration import set_hypothesis_home_dir
from service.core import transforms as tr
from service.core.cvresult import CVResult, Metrics
from service.core.spec import PredictorSpec, Specification
from service.selection.search import (
    Band,
    Scored,
    band_order,
    condition_order,
    dominates,
    rank,
)

# keep hypothesis' cache out of the repository (see tests/api/test_selection_errors.py)
set_hypothesis_home_dir(os.path.join(tempfile.gettempdir(), "bestscale-hypothesis"))


def _violations(order, cv, simp, nfail):
    rows = {i: (cv[i], simp[i], nfail[i]) for i in order}
    return [
        (a, b)
        for k, a in enumerate(order)
        for b in order[k + 1 :]
        if dominates(rows[b], rows[a])  # b is listed below a but dominates it
    ]


def test_the_checker_finds_a_dominated_order():
    cv, simp, nfail = [1.0, 1.2], [(0, 1, 1), (0, 2, 1)], {0: 0, 1: 0}
    assert _violations([1, 0], cv, simp, nfail) == [(1, 0)]
    assert _violations([0, 1], cv, simp, nfail) == []


_entry = st.tuples(
    st.floats(1.0, 2.0, allow_nan=False),  # cv
    st.floats(0.0, 0.5, allow_nan=False),  # its standard error
    st.tuples(st.integers(0, 2), st.integers(0, 6), st.integers(0, 3)),  # simplicity
    st.integers(0, 6),  # failed conditions
)


@settings(max_examples=400, deadline=None)
@given(st.lists(_entry, min_size=1, max_size=40), st.integers(1, 40))
def test_no_entry_ranks_above_one_that_dominates_it(rows, lead):
    # source: the dominance requirement itself; the band is the one-standard-error rule of
    # Hastie, Tibshirani & Friedman (2009) sec. 7.10 with the lowest candidate's SE
    cv = [r[0] for r in rows]
    simp = [r[2] for r in rows]
    nfail = {i: r[3] for i, r in enumerate(rows)}
    low = min(range(len(rows)), key=lambda i: (cv[i], simp[i]))
    threshold = cv[low] + rows[low][1]
    order = band_order(cv, simp, threshold)
    assert sorted(order) == list(range(len(rows)))
    assert _violations(order, cv, simp, nfail) == []
    inside = [c <= threshold for c in cv]
    final = condition_order(order, inside, nfail, lead)
    assert sorted(final) == list(range(len(rows)))
    assert _violations(final, cv, simp, nfail) == []
    # nothing outside the band moves above a band member
    first_out = next((k for k, i in enumerate(final) if not inside[i]), len(final))
    assert all(not inside[i] for i in final[first_out:])


_TRANSFORMS = ["identity", "log", "sqrt", "reciprocal", "square"]
_SPECS = [
    Specification(
        "y",
        tr.Transform(r),
        (PredictorSpec("a", tr.Transform(a)), PredictorSpec("b", tr.Transform(b))),
    )
    for r, a, b in itertools.product(_TRANSFORMS, repeat=3)
]


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.integers(0, len(_SPECS) - 1),
            st.floats(1.0, 2.0, allow_nan=False),
            st.floats(0.0, 0.3, allow_nan=False),
        ),
        min_size=1,
        max_size=30,
        unique_by=lambda t: t[0],
    )
)
def test_rank_of_real_specifications_has_one_threshold_and_no_dominated_entry(rows):
    scored = [
        Scored(_SPECS[i], CVResult("rmse", v, se, np.array([v]), Metrics(v, v, None)))
        for i, v, se in rows
    ]
    ranked, lowest = rank(scored)
    band = Band.of(scored)
    assert {p["one_se_threshold"] for _, p in ranked} == {band.threshold}
    assert lowest == min(v for _, v, _ in rows)
    cv = [s.cv.value for s, _ in ranked]
    simp = [s.spec.simplicity() for s, _ in ranked]
    assert _violations(list(range(len(ranked))), cv, simp, dict.fromkeys(range(len(cv)), 0)) == []
    for s, p in ranked:
        assert p["within_one_se"] == (s.cv.value <= band.threshold)
