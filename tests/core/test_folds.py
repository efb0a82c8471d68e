"""Fold plans (service/core/folds.py) against scikit-learn's KFold and a published fold list.

References: sklearn.model_selection.KFold (shuffle=True with the seed for random plans,
shuffle=False on the rows in the order column's order for blocked plans); the fold of every
Engel row under KFold(5, shuffle=True, random_state=0) as listed in the shared reference
checks.
"""

from __future__ import annotations

import numpy as np
import pytest
from service.core.folds import make_plan
from sklearn.model_selection import KFold

# source: shared reference checks (CHECKS_PUBLIC, engel): fold id of rows 0, 1, 2, ... under
# KFold(n_splits=5, shuffle=True, random_state=0), n = 235
ENGEL_FOLDS = (
    "2321103004230120130124131412341341334034123201242221131013421121131432404211143414413224"
    "4003022210243034030011112234042333111004321333220002434320044003021020102223342400204144"
    "04233003240313104434443334131114121420004023400422142024332"
)


def _kfold_ids(n: int, folds: int, random_state) -> np.ndarray:
    out = np.empty(n, dtype=int)
    splits = KFold(folds, shuffle=True, random_state=random_state).split(np.zeros(n))
    for k, (_, test) in enumerate(splits):
        out[test] = k
    return out


@pytest.mark.parametrize("n, folds, seed", [(10, 5, 0), (23, 4, 7), (235, 5, 0), (97, 10, 12345)])
def test_repeat_zero_equals_kfold_with_the_seed(n, folds, seed):
    plan = make_plan(n, folds, 3, seed)
    # source: sklearn KFold(folds, shuffle=True, random_state=seed)
    assert np.array_equal(plan.assignments[0], _kfold_ids(n, folds, seed))
    assert plan.n_splits == folds * 3 and plan.scheme == "random"


def test_engel_fold_list_is_reproduced():
    (a,) = make_plan(235, 5, 1, 0).assignments
    # source: the published fold list above (independent of this code)
    assert "".join(map(str, a)) == ENGEL_FOLDS


def test_a_different_seed_gives_a_different_plan():
    assert not np.array_equal(
        make_plan(50, 5, 1, 1).assignments[0], make_plan(50, 5).assignments[0]
    )


@pytest.mark.parametrize(
    "n, folds, repeats, seed",
    [(10, 5, 1, 0), (23, 5, 4, 7), (101, 10, 3, 99), (16, 2, 2, 2**32 - 1)],
)
def test_make_plan_equals_kfold_for_every_repeat(n, folds, repeats, seed):
    plan = make_plan(n, folds, repeats, seed)
    rs = np.random.RandomState(seed)
    for a in plan.assignments:
        # source: sklearn KFold driven by one shared RandomState (successive permutations)
        assert np.array_equal(a, _kfold_ids(n, folds, rs))
        sizes = np.bincount(a, minlength=folds)
        assert sizes.max() - sizes.min() <= 1


@pytest.mark.parametrize("n, folds", [(10, 5), (23, 5), (101, 10), (16, 2)])
def test_blocked_folds_are_contiguous_and_cover_every_row_once(n, folds):
    order = np.random.default_rng(n).permutation(n)  # rows arrive shuffled
    plan = make_plan(n, folds, 1, 0, scheme="blocked", order=order)
    (a,) = plan.assignments
    assert plan.scheme == "blocked"
    sizes = np.bincount(a, minlength=folds)
    assert sizes.min() >= 1 and sizes.max() - sizes.min() <= 1
    assert a.shape == (n,) and set(a.tolist()) == set(range(folds))  # every row one fold
    in_order = a[order]
    assert np.all(np.diff(in_order) >= 0)  # fold ids never go back: contiguous runs
    # source: sklearn KFold(shuffle=False) on the rows sorted by the order column
    for k, (_, test) in enumerate(KFold(folds).split(np.zeros(n))):
        assert np.array_equal(np.sort(order[test]), np.flatnonzero(a == k))
    # the same request gives the same folds whatever the seed (nothing is shuffled)
    assert np.array_equal(
        make_plan(n, folds, 1, 99, scheme="blocked", order=order).assignments[0], a
    )


def test_blocked_without_order_uses_row_order():
    (a,) = make_plan(7, 3, 1, 0, scheme="blocked").assignments
    assert a.tolist() == [0, 0, 0, 1, 1, 2, 2]


def test_blocked_folds_refuse_repeats():
    with pytest.raises(ValueError, match="repeats"):
        make_plan(20, 4, 2, 0, scheme="blocked")
