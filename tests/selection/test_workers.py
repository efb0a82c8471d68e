"""The process-pool helper: input order, in-process fallback, errors, picklable work."""

from __future__ import annotations

import dataclasses
import os
import pickle

import numpy as np
import pytest
from service.api.encode import to_jsonable
from service.core.data import prepare
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from service.selection.workers import map_in_processes, process_mapper

from tests.typed import predictors, responses


def _square_and_pid(x: int) -> tuple[int, int]:
    return x * x, os.getpid()


def _fails_on_three(x: int) -> int:
    if x == 3:
        raise ValueError("three is not allowed")
    return x


def _square_pid_blas(x: int) -> tuple[int, int, list[int]]:
    from threadpoolctl import threadpool_info

    blas = sorted({i["num_threads"] for i in threadpool_info() if i.get("user_api") == "blas"})
    return x * x, os.getpid(), blas


def test_results_keep_input_order_and_come_from_other_processes():
    items = list(range(9, -1, -1))
    out = process_mapper(2, blas_threads=1)(_square_pid_blas, iter(items))
    assert [v for v, _, _ in out] == [x * x for x in items]
    pids = {p for _, p, _ in out}
    assert os.getpid() not in pids and 1 <= len(pids) <= 2
    # source: threadpoolctl reports the BLAS pool of the worker that ran the item
    assert all(b in ([], [1]) for _, _, b in out)


@pytest.mark.parametrize(
    "items,processes",
    [
        pytest.param([1, 2, 3], 1, id="one-process"),
        pytest.param([1, 2, 3], 0, id="zero-processes"),
        pytest.param([5], 4, id="single-item"),
        pytest.param([], 2, id="no-items"),
    ],
)
def test_small_work_runs_in_this_process(items, processes):
    out = map_in_processes(_square_and_pid, items, processes)
    assert [v for v, _ in out] == [x * x for x in items]
    assert all(p == os.getpid() for _, p in out)


def test_an_error_in_a_worker_is_raised_here():
    with pytest.raises(ValueError, match="three"):
        map_in_processes(_fails_on_three, [1, 2, 3, 4], processes=2)


def test_prepared_and_options_pickle_to_the_same_selection():
    rng = np.random.default_rng(2)
    x = rng.uniform(1, 50, 60)
    cols = {
        "y": np.exp(0.5 + 0.6 * np.log(x) + rng.normal(0, 0.1, 60)).tolist(),
        "x": x.tolist(),
        "kind": rng.choice(["cast", "ductile"], 60).tolist(),
        "t": list(range(60)),
    }
    prep = prepare({"columns": cols}, "y", ["x", "kind"], order="t")
    opts = SearchOptions(
        response_transforms=responses(["identity", "log"]),
        predictor_transforms=predictors(["identity", "log"]),
        top=1,
        units={"x": "m"},
    )
    prep2, opts2 = pickle.loads(pickle.dumps((prep, opts)))
    assert prep2.fingerprint() == prep.fingerprint()
    assert opts2 == opts
    a = run_selection(prep, opts, "t")
    b = run_selection(prep2, opts2, "t")
    a, b = (
        dataclasses.replace(x, search=dataclasses.replace(x.search, elapsed_s=0.0)) for x in (a, b)
    )
    assert to_jsonable(a) == to_jsonable(b)
