"""What a search is given (service/selection/search_setup.py): options, scored candidates and
the check that the rows can carry the requested cross-validation.

References: the K-fold training size n - ceil(n / K) (the largest test fold of a K-fold split,
as scikit-learn's KFold makes it) and the rule that an OLS fit with p coefficients needs at
least p + 2 training rows to leave residual degrees of freedom for a variance and a test.
"""

from __future__ import annotations

import math
import pickle
import time
from dataclasses import replace

import numpy as np
import pytest
from service.core import transforms as tr
from service.core.data import prepare
from service.core.errors import InputError, Option, Table
from service.core.spec import PredictorSpec, Specification
from service.selection.deadline import Deadline
from service.selection.search_setup import Scored, SearchOptions, check_rows
from sklearn.model_selection import KFold


def _prep(n, zero=False):
    x = np.arange(1.0, n + 1)
    y = x * 1.5 + np.sin(x)
    if zero:
        y[0] = 0.0
    return prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])


def _smallest_training_fold(n, k):
    # source: scikit-learn KFold (the fold sizes it makes), not the module's own arithmetic
    return min(len(train) for train, _ in KFold(k).split(np.zeros(n)))


@pytest.mark.parametrize("folds, p", [(5, 4), (10, 8), (3, 4), (4, 7)])
def test_the_fewest_rows_accepted_leave_p_plus_2_training_rows(folds, p):
    ok = [n for n in range(folds, 80) if _smallest_training_fold(n, folds) >= p + 2]
    least = ok[0]
    check_rows(_prep(least), SearchOptions(folds=folds), p)
    with pytest.raises(InputError) as exc:
        check_rows(_prep(least - 1), SearchOptions(folds=folds), p)
    assert exc.value.problems[0].where == Table("columns")  # the table that is short
    # the message names the number of rows needed, which is the least accepted count or fewer
    need = int(exc.value.detail.split("at least ")[1].split(" ")[0])
    assert need <= least and need == math.ceil((p + 2) * folds / (folds - 1))


def test_more_folds_than_rows_and_mape_with_zeros():
    with pytest.raises(InputError) as exc:
        check_rows(_prep(6), SearchOptions(folds=10), 2)
    assert exc.value.problems[0].where == Table("columns")  # the data, not the folds field
    with pytest.raises(InputError) as exc:
        check_rows(_prep(40, zero=True), SearchOptions(metric="mape"), 2)
    assert exc.value.problems[0].where == Option("validation.metric")
    check_rows(_prep(40, zero=True), SearchOptions(metric="mae"), 2)


def test_the_clock_is_the_request_deadline_or_the_limit_from_now():
    before = time.monotonic()
    own = SearchOptions(time_limit_s=30).clock()
    assert before + 30 <= own.at <= time.monotonic() + 30 and own.limit_s == 30
    shared = Deadline.after(5)
    opts = SearchOptions(time_limit_s=30, deadline=shared)
    assert opts.clock() is shared and replace(opts, top=1).clock() is shared


def test_options_cross_processes_without_the_stop_callback():
    opts = SearchOptions(seed=7, stop=lambda: True)
    assert opts.stopped()
    again = pickle.loads(pickle.dumps(opts))
    assert again.seed == 7 and again.stop is None and not again.stopped()


def test_scored_keeps_the_searched_specification():
    spec = Specification("y", tr.Transform("identity"), (PredictorSpec("x", tr.Transform("log")),))
    assert Scored(spec, cv=None).open_spec is spec
