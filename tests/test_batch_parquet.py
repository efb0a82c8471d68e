"""Segment rows through a shared Parquet dataset (service/batch_parquet.py): what a task
carries, what the worker reads back, and the refusals.  The end-to-end runs (LocalCluster,
a killed job resumed from the dataset, a remote cluster without a shared directory) are in
tests/test_batch.py.

Invented data: repair costs of water mains in districts (tests/test_batch.py)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from tests.test_batch import OPTIONS, PREDICTORS, _table


def test_each_parquet_task_carries_a_reference_and_reads_only_its_segment(tmp_path):
    """What travels to a worker is a reference of a few hundred bytes; the worker's read
    yields exactly the segment the in-process split gives (values, row numbers, order)."""
    import pickle

    from service.api.options import search_options
    from service.api.schemas import SelectionRequest
    from service.batch import Job, run_inline, run_job
    from service.batch_parquet import SegmentRef, SharedParquet
    from service.core.data import prepare
    from service.selection.groups import group_parts

    table = _table(5, 30, seed=4)
    table["day"] = [float(i % 17) for i in range(len(table["district"]))]  # an order column
    table["pipe_age_years"][7] = None  # a dropped row: row numbers of later rows shift
    body = {"response": "repair_cost", "predictors": PREDICTORS.split(","), **OPTIONS}
    req = SelectionRequest.model_validate({**body, "data": {"columns": table}})
    prep = prepare(
        {"columns": table}, "repair_cost", body["predictors"], ["soil"], "day", "district"
    )
    parts = group_parts(prep)
    seen: list = []

    def spy(tasks):
        seen.extend(tasks)
        return run_inline(tasks)

    shared = SharedParquet(str(tmp_path))
    job_ = Job(tmp_path / "out", body, prep, search_options(req), "test")
    run_job(job_, spy, shared=shared)
    assert len(seen) == 5
    for t in seen:
        assert isinstance(t.sub, SegmentRef) and len(pickle.dumps(t.sub)) < 2000
        assert Path(t.sub.directory).parent == shared.path
        got, want = t.sub.load(), parts[t.name]
        assert got.fingerprint() == want.fingerprint()
        np.testing.assert_array_equal(got.row_ids, want.row_ids)
        np.testing.assert_array_equal(got.order_values, want.order_values)
        np.testing.assert_array_equal(got.order, want.order)
        assert got.categorical["soil"].tolist() == want.categorical["soil"].tolist()
        assert (got.table_columns, got.source) == (want.table_columns, want.source)
    # hive partitions by segment index, one per segment, readable as a dataset by any tool
    import pyarrow.dataset as ds

    dirs = sorted(p.name for p in shared.path.iterdir() if p.is_dir())
    assert dirs == [f"segment={i}" for i in range(5)]
    whole = ds.dataset(shared.path, format="parquet", partitioning="hive").to_table()
    assert whole.num_rows == prep.n
    # a second publish of the same rows reuses the dataset; other rows get their own
    again = SharedParquet(str(tmp_path))
    again.publish(prep, parts, "same fingerprint as before")
    assert not again.reused  # the key hashes the data fingerprint too
    reused = SharedParquet(str(tmp_path))
    reused.publish(
        prep,
        parts,
        json.loads((tmp_path / "out" / "manifest.json").read_text())["data_fingerprint"],
    )
    assert reused.reused and reused.path == shared.path


def test_a_changed_shared_file_fails_its_segment_with_the_reason(tmp_path):
    from service.batch import run_segment
    from service.batch_parquet import SharedParquet
    from service.core.data import prepare
    from service.selection.groups import group_parts

    table = _table(2, 30)
    prep = prepare(
        {"columns": table}, "repair_cost", PREDICTORS.split(","), ["soil"], None, "district"
    )
    parts = group_parts(prep)
    shared = SharedParquet(str(tmp_path))
    refs = shared.publish(prep, parts, "fp")
    ref = refs["district 01"]
    # another segment's rows put in its place
    import shutil

    target = Path(ref.directory) / "part-0.parquet"
    shutil.copy(Path(refs["district 00"].directory) / "part-0.parquet", target)
    body = run_segment(ref.name, ref, None, "test", None)
    assert body["problem"]["type"] == "urn:bestscale:problem:segment-data"
    assert "not the rows the job wrote" in body["problem"]["detail"]
    shutil.rmtree(ref.directory)
    body = run_segment(ref.name, ref, None, "test", None)
    assert "cannot read" in body["problem"]["detail"]
    assert "same path on every worker" in body["problem"]["detail"]


def test_workers_that_cannot_see_the_shared_dir_are_named(tmp_path):
    from distributed import Client, LocalCluster
    from service.batch_parquet import SegmentRef, SharedDirError, SharedParquet

    ref = SegmentRef(
        str(tmp_path / "not-mounted"), 0, "a", "y", ("x",), (), ("x", "y"), "columns", False, 3, ""
    )
    with (
        LocalCluster(n_workers=1, processes=False, dashboard_address=None) as cluster,
        Client(cluster) as client,
    ):
        shared = SharedParquet(str(tmp_path), client=client)
        with pytest.raises(SharedDirError, match="1 of 1 Dask workers cannot see"):
            shared._check_workers(ref)
