"""Batch months: ``python -m service select --group-by COL --out DIR [--cluster ...]``.

Segments run as tasks on Dask (a LocalCluster with two worker processes, and a scheduler and
worker started with Dask's own commands on 127.0.0.1), on this machine's pool, or inline;
whatever runs them, each segment's file holds the same result, and the same result as the
single-file output.  A job killed by a signal resumes without redoing finished segments.

Invented data: repair costs of water mains in districts, generated on the log scale, so an
incumbent on the identity scale loses to a log-scale model (known truth of the simulation).
"""

from __future__ import annotations

import io
import json
import math
import re
import signal
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from service.batch import BatchProgress, Task, run_dask, segment_file
from service.cli import select_main
from service.core.numbers import count_of
from service.settings import get_settings

ROOT = Path(__file__).resolve().parents[1]
OPTIONS = {
    "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
    "validation": {"folds": 4, "seed": 11},
    "top": 2,
}
PREDICTORS = "pipe_length_m,pipe_age_years,soil"
_ELAPSED = re.compile(r'"elapsed_s":\s*[-0-9.eE+]+')


def _table(segments: int, n: int, seed: int = 8) -> dict:
    rng = np.random.default_rng(seed)
    rows = segments * n
    length = np.round(np.exp(rng.uniform(math.log(5.0), math.log(400.0), rows)), 1)
    age = rng.integers(1, 70, rows)
    soil = rng.choice(["clay", "loam", "sand"], rows)
    district = np.repeat([f"district {i:02d}" for i in range(segments)], n)
    cost = np.exp(
        4.2
        + 0.7 * np.log(length)
        + 0.01 * age
        + np.where(soil == "clay", 0.2, 0.0)
        + rng.normal(0.0, 0.2, rows)
    )
    return {
        "repair_cost": np.round(cost, 2).tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": [int(a) for a in age],
        "soil": soil.tolist(),
        "district": district.tolist(),
    }


def _write(path: Path, table: dict) -> Path:
    pq.write_table(pa.table(table), path)
    return path


def _args(data: Path, out: Path, *extra: str, options: Path) -> list[str]:
    return [
        "--data",
        str(data),
        "--response",
        "repair_cost",
        "--predictors",
        PREDICTORS,
        "--group-by",
        "district",
        "--options",
        str(options),
        "--out",
        str(out),
        *extra,
    ]


def _command(*args: str) -> list[str]:
    return [sys.executable, "-m", "service", "select", *args]


def _results(out: Path) -> dict[str, str]:
    """Segment name -> its result JSON with the timing blanked, keys in a fixed order."""
    manifest = json.loads((out / "manifest.json").read_text())
    got = {}
    for e in manifest["segments"]:
        rec = json.loads((out / e["file"]).read_text())
        assert rec["segment"] == e["segment"]
        got[e["segment"]] = _canonical(rec["result"])
    return got


def _canonical(obj) -> str:
    return _ELAPSED.sub('"elapsed_s": 0', json.dumps(obj, sort_keys=True, ensure_ascii=False))


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    """Twelve districts run inline (no --cluster, one process) to a directory and to one file."""
    d = tmp_path_factory.mktemp("batch")
    data = _write(d / "mains.parquet", _table(12, 50))
    options = d / "options.json"
    options.write_text(json.dumps(OPTIONS))
    assert select_main(_args(data, d / "inline", options=options)) == 0
    assert select_main(_args(data, d / "single.json", options=options)) == 0
    return {"dir": d, "data": data, "options": options, "inline": _results(d / "inline")}


def test_directory_run_matches_the_single_file_output(job):
    d = job["dir"]
    single = json.loads((d / "single.json").read_text())
    assert (
        sorted(job["inline"])
        == sorted(single["groups"])
        == [f"district {i:02d}" for i in range(12)]
    )
    for name, text in job["inline"].items():
        assert text == _canonical(single["groups"][name])
    manifest = json.loads((d / "inline" / "manifest.json").read_text())
    assert manifest["seed"] == 11
    assert manifest["request"]["validation"] == OPTIONS["validation"]
    assert "data" not in manifest["request"]
    assert {"numpy", "scipy", "dask", "distributed"} <= set(manifest["versions"])
    assert [s["rows"] for s in manifest["segments"]] == [50] * 12
    summary = json.loads((d / "inline" / "summary.json").read_text())
    assert summary["counts"]["ok"] == 12 and summary["counts"]["failed"] == 0
    # nothing half-written or left behind
    assert not list((d / "inline" / "segments").glob(".*"))


def test_local_cluster_with_two_workers_gives_the_same_files(job, tmp_path, capsys):
    out = tmp_path / "cluster"
    argv = _args(job["data"], out, options=job["options"])
    argv += ["--cluster", "local", "--local-workers", "2", "--progress-every", "4"]
    assert select_main(argv) == 0
    err = capsys.readouterr().err
    assert _results(out) == job["inline"]
    assert "running on a local cluster: 2 workers" in err
    # small data: the rows travel with the tasks
    assert "segment rows go with the tasks" in err and "within the 256 MiB threshold" in err
    # not a terminal: a plain line every 4 segments
    assert "segments 4/12 done, 0 failed" in err and "segments 12/12 done" in err


@pytest.mark.parametrize("profile", [None, "true"])
def test_the_local_cluster_runs_without_the_worker_profiler_unless_asked(monkeypatch, profile):
    """Dask's statistical profiler samples every worker thread every 10 ms (about 9 % of a
    segment's CPU, tests/benchmarks/cluster.py --worker-profile): off in the workers of
    the LocalCluster the command line starts, on with BESTSCALE_DASK_WORKER_PROFILE."""
    import dask
    from service.batch import DaskSession
    from service.settings import get_settings

    if profile is not None:
        monkeypatch.setenv("BESTSCALE_DASK_WORKER_PROFILE", profile)
    get_settings.cache_clear()
    try:
        session = DaskSession("local", 1)
        try:
            seen = session.client.run(lambda: dask.config.get("distributed.worker.profile.enabled"))
        finally:
            session.close()
    finally:
        get_settings.cache_clear()
    assert list(seen.values()) == [profile is not None]


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_scheduler_and_worker_started_with_dask_commands(job, tmp_path, monkeypatch, capsys):
    """`dask scheduler` and `dask worker` as a site would start them, on loopback only;
    the address also comes from BESTSCALE_DASK_SCHEDULER."""
    dask_cli = Path(sys.executable).with_name("dask")
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs = []
    try:
        procs.append(
            subprocess.Popen(
                [
                    *(str(dask_cli), "scheduler", "--host", "127.0.0.1", "--port", str(port)),
                    *("--dashboard-address", "127.0.0.1:0"),
                ],
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
        )
        procs.append(
            subprocess.Popen(
                [
                    *(str(dask_cli), "worker", address, "--host", "127.0.0.1", "--nthreads", "1"),
                    *("--nworkers", "1", "--dashboard-address", "127.0.0.1:0", "--no-nanny"),
                    *("--local-directory", str(tmp_path / "worker")),
                ],
                cwd=ROOT,
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
        )
        # a site starts its workers before its jobs: wait until this one has joined, or the
        # first run may find the scheduler still without workers (its tasks would wait for one)
        from distributed import Client

        with Client(address, timeout="20s") as probe:
            probe.wait_for_workers(1, timeout=60)
        out = tmp_path / "remote"
        monkeypatch.setenv("BESTSCALE_DASK_SCHEDULER", address)
        get_settings.cache_clear()
        code = select_main(_args(job["data"], out, options=job["options"]))
        # one file at the end, the segments still computed on the cluster
        single = tmp_path / "remote.json"
        code_single = select_main(_args(job["data"], single, options=job["options"]))
    finally:
        get_settings.cache_clear()
        # the worker has no nanny and nothing to save: end it at once; then the scheduler
        procs[-1].kill()
        procs[0].send_signal(signal.SIGTERM)
        for p in reversed(procs):
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
    assert code == 0 and code_single == 0
    assert capsys.readouterr().err.count(f"running on {address}: 1 worker") == 2
    assert _results(out) == job["inline"]
    groups = json.loads(single.read_text())["groups"]
    assert {k: _canonical(v) for k, v in groups.items()} == job["inline"]


def test_killed_job_resumes_without_redoing_finished_segments(job, tmp_path, capsys):
    out = tmp_path / "killed"
    argv = _command(*_args(job["data"], out, options=job["options"]))
    proc = subprocess.Popen(argv, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    seg_dir = out / "segments"
    deadline = time.monotonic() + 120
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            if seg_dir.is_dir() and len(list(seg_dir.glob("*.json"))) >= 2:
                break
            time.sleep(0.05)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL, "the job ended before it could be killed"
    finished = {p.name: p.stat().st_mtime_ns for p in seg_dir.glob("*.json")}
    assert 2 <= len(finished) < 12
    for p in seg_dir.glob("*.json"):
        json.loads(p.read_text())  # every file that exists is whole

    # without --resume the directory is refused, not overwritten
    assert select_main(argv[4:]) == 2
    assert "--resume" in capsys.readouterr().err
    assert select_main([*argv[4:], "--resume"]) == 0
    assert f"{count_of(len(finished), 'segment')} already finished" in capsys.readouterr().err
    for name, mtime in finished.items():
        assert (seg_dir / name).stat().st_mtime_ns == mtime  # not redone
    assert _results(out) == job["inline"]
    summary = json.loads((out / "summary.json").read_text())
    assert summary["counts"]["reused"] == len(finished) and summary["counts"]["ok"] == 12
    assert not list(seg_dir.glob(".*"))


def test_resume_refuses_a_changed_request_or_changed_data(job, tmp_path, capsys):
    d = job["dir"]
    out = tmp_path / "run"
    data = _write(tmp_path / "small.parquet", _table(2, 40))
    assert select_main(_args(data, out, options=job["options"])) == 0
    changed = tmp_path / "changed.json"
    changed.write_text(json.dumps({**OPTIONS, "validation": {"folds": 4, "seed": 12}}))
    capsys.readouterr()
    assert select_main(_args(data, out, "--resume", options=changed)) == 2
    err = capsys.readouterr().err
    assert "--resume refused" in err and "request differs" in err and "validation" in err
    other = _write(tmp_path / "other.parquet", _table(2, 40, seed=9))
    assert select_main(_args(other, out, "--resume", options=job["options"])) == 2
    err = capsys.readouterr().err
    assert "--resume refused" in err and "data differ" in err
    # the same request on the same data resumes with nothing left to do
    assert select_main(_args(data, out, "--resume", options=job["options"])) == 0
    assert "2 segments: 2 ok" in capsys.readouterr().err
    assert d.exists()


def test_a_failing_segment_is_isolated(job, tmp_path, capsys):
    table = _table(3, 40)
    # district 01's response is constant: nothing to model there
    for i, g in enumerate(table["district"]):
        if g == "district 01":
            table["repair_cost"][i] = 100.0
    data = _write(tmp_path / "constant.parquet", table)
    out = tmp_path / "run"
    assert select_main(_args(data, out, options=job["options"])) == 3
    summary = json.loads((out / "summary.json").read_text())
    assert summary["counts"]["ok"] == 2 and summary["counts"]["failed"] == 1
    bad = next(s for s in summary["segments"] if s["status"] == "failed")
    assert bad["segment"] == "district 01" and "/response" in bad["reason"]
    assert "constant" in bad["reason"]
    # the segment's file holds the same problem object as a group of an HTTP selection
    problem = json.loads((out / bad["file"]).read_text())["result"]["problem"]
    detail = "response 'repair_cost' is constant (100) on the used rows; there is nothing to model"
    assert problem == {
        "type": "urn:bestscale:problem:invalid-input",
        "title": "Invalid request content",
        "status": 422,
        "detail": detail,
        "errors": [{"pointer": "/response", "detail": detail}],
    }
    assert "1 failed" in capsys.readouterr().err


def _explode(name, sub, opts, version, model):
    if name == "b":
        raise RuntimeError("worker lost its disk")
    return {"segment": name, "rows": sub}


def test_an_unexpected_task_error_stays_with_its_segment():
    from distributed import Client, LocalCluster

    tasks = [Task(n, i, None, "v") for i, n in enumerate("abc")]
    with (
        LocalCluster(n_workers=1, processes=False, dashboard_address=None) as cluster,
        Client(cluster) as client,
    ):
        got = dict(run_dask(tasks, client, fn=_explode, window=2))
    assert got["a"] == {"segment": "a", "rows": 0} and got["c"] == {"segment": "c", "rows": 2}
    assert got["b"]["problem"]["status"] == 500
    assert "RuntimeError: worker lost its disk" in got["b"]["problem"]["detail"]


def test_incumbents_per_segment_switch_and_drift(job, tmp_path, capsys):
    """Month two: one district keeps last month's model, one gets an identity-scale incumbent
    (the data are log-normal, so it should be replaced), and one district's pipes aged past
    the training range and gained a soil level the model never saw."""
    first = tmp_path / "month1"
    data1 = _write(tmp_path / "m1.parquet", _table(3, 60))
    assert select_main(_args(data1, first, options=job["options"])) == 0
    summary1 = json.loads((first / "summary.json").read_text())
    in_use = {s["segment"]: s["in_use"] for s in summary1["segments"]}
    identity = {
        "response": {"column": "repair_cost", "transform": {"name": "identity"}},
        "predictors": [
            {"column": "pipe_length_m"},
            {"column": "pipe_age_years"},
            {"column": "soil"},
        ],
    }
    lines = [
        {"segment": "district 00", "model": in_use["district 00"]["model"]},
        {"segment": "district 01", "specification": identity},
        {"segment": "district 02", "model": in_use["district 02"]["model"]},
        {"segment": "district 99", "specification": identity},
    ]
    inc = tmp_path / "incumbents.jsonl"
    inc.write_text("".join(json.dumps(x) + "\n" for x in lines))
    table = _table(3, 60, seed=21)
    for i, g in enumerate(table["district"]):
        if g == "district 02":
            table["pipe_age_years"][i] += 80
            if i % 4 == 0:
                table["soil"][i] = "gravel"
    data2 = _write(tmp_path / "m2.parquet", table)
    second = tmp_path / "month2"
    assert select_main(_args(data2, second, "--incumbents", str(inc), options=job["options"])) == 0
    s = json.loads((second / "summary.json").read_text())
    rows = {r["segment"]: r for r in s["segments"]}
    # known truth: log-normal errors, so the identity-scale incumbent loses
    assert rows["district 01"]["decision"] == "switch"
    switch = next(x for x in s["switches"] if x["segment"] == "district 01")
    assert switch["difference"]["value"] < 0 and switch["reason"]
    assert "log(repair_cost)" in switch["to"]
    assert s["counts"]["kept"] + s["counts"]["switched"] == 3
    # drift: only against a model artifact; district 00 drew from the same law
    assert rows["district 02"]["drift"]["flagged"]
    flags = " ".join(rows["district 02"]["drift"]["flags"])
    assert "'pipe_age_years'" in flags and "outside the training range" in flags
    assert "'gravel'" in flags
    assert "drift" not in rows["district 01"]
    assert any("'district 99'" in n for n in s["notes"])
    for x in s["switches"]:
        assert x["with_drift"] == rows[x["segment"]].get("drift", {}).get("flagged", False)
    # last month's run directory is itself an --incumbents source
    third = tmp_path / "month2b"
    assert select_main(_args(data2, third, "--incumbents", str(first), options=job["options"])) == 0
    s3 = json.loads((third / "summary.json").read_text())
    assert s3["counts"]["no_incumbent"] == 0
    assert all("drift" in r for r in s3["segments"])


def test_incumbents_file_errors_name_the_line(job, tmp_path, capsys):
    inc = tmp_path / "bad.jsonl"
    inc.write_text('{"segment": "district 00", "specification": {"response": {}}}\n')
    data = _write(tmp_path / "m.parquet", _table(2, 40))
    assert (
        select_main(_args(data, tmp_path / "o", "--incumbents", str(inc), options=job["options"]))
        == 2
    )
    err = capsys.readouterr().err
    assert "line 1" in err and "response" in err


def test_progress_lines_on_and_off_a_terminal():
    plain = io.StringIO()
    p = BatchProgress(5, stream=plain, every=2, tty=False)
    for i in range(5):
        p.step(failed=i == 3)
    lines = plain.getvalue().splitlines()
    assert [ln.split(" done")[0] for ln in lines] == [
        "segments 2/5",
        "segments 4/5",
        "segments 5/5",
    ]
    assert "1 failed" in lines[-1] and "/s" in lines[-1] and "left" in lines[0]
    term = io.StringIO()
    p = BatchProgress(3, stream=term, tty=True)
    for _ in range(3):
        p.step(failed=False)
    assert term.getvalue().count("\r") == 3 and term.getvalue().endswith("\n")


def test_segment_file_names_are_safe_and_distinct():
    names = ["North/1", "North 1", "A", "a", "..", "é" * 100, ""]
    files = [segment_file(n) for n in names]
    assert len({f.lower() for f in files}) == len(names)
    for f in files:
        assert "/" not in f and not f.startswith(".") and len(f) < 90


def test_scheduler_setting_and_argument_errors(monkeypatch, tmp_path, capsys):
    from pydantic import ValidationError

    try:
        monkeypatch.setenv("BESTSCALE_DASK_SCHEDULER", "tcp://127.0.0.1:8786")
        get_settings.cache_clear()
        assert get_settings().dask_scheduler == "tcp://127.0.0.1:8786"
        monkeypatch.setenv("BESTSCALE_DASK_SCHEDULER", "127.0.0.1:8786")  # no scheme
        get_settings.cache_clear()
        with pytest.raises(ValidationError, match="dask_scheduler"):
            get_settings()
    finally:
        monkeypatch.delenv("BESTSCALE_DASK_SCHEDULER")
        get_settings.cache_clear()
    data = _write(tmp_path / "m.parquet", _table(2, 30))
    base = ["--data", str(data), "--response", "repair_cost", "--predictors", PREDICTORS]
    for extra, message in [
        (["--out", str(tmp_path / "dir")], "needs --group-by"),
        (["--resume"], "need --group-by and --out DIR"),
        (["--group-by", "district", "--cluster", "somewhere"], "tcp://HOST:PORT"),
    ]:
        with pytest.raises(SystemExit) as exc:
            select_main(base + extra)
        assert exc.value.code == 2
        assert message in capsys.readouterr().err


# ---------------------------------------------------------------- segment rows via Parquet


def test_parquet_transport_gives_the_same_files(job, tmp_path, capsys):
    """The same month on a LocalCluster with 2 workers, each task reading its segment from the
    shared Parquet dataset: the same files as the inline run and as the rows sent with the
    tasks (test_local_cluster_with_two_workers_gives_the_same_files)."""
    shared = tmp_path / "shared"
    shared.mkdir()
    out = tmp_path / "parquet"
    # auto with a threshold of 0 MiB: any data are 'large'
    argv = _args(
        job["data"],
        out,
        "--cluster",
        "local",
        "--local-workers",
        "2",
        "--parquet-above-mb",
        "0",
        "--shared-dir",
        str(shared),
        options=job["options"],
    )
    assert select_main(argv) == 0
    err = capsys.readouterr().err
    assert f"segment rows go a Parquet dataset under {shared.resolve()}" in err
    assert "over the 0 MiB threshold" in err and "written for this run" in err
    assert _results(out) == job["inline"]
    assert list(shared.iterdir()) == []  # the finished job removed its dataset


def test_a_remote_cluster_without_a_shared_dir_is_refused_before_connecting(
    job, tmp_path, capsys, monkeypatch
):
    monkeypatch.delenv("BESTSCALE_SHARED_DIR", raising=False)
    get_settings.cache_clear()
    # port 9 (discard) on loopback: nothing listens; a connection attempt would take 20 s
    remote = ["--cluster", "tcp://127.0.0.1:9"]
    for extra in (["--transport", "parquet"], ["--parquet-above-mb", "0"]):
        t = time.perf_counter()
        code = select_main(
            _args(job["data"], tmp_path / "o", *remote, *extra, options=job["options"])
        )
        assert code == 2 and time.perf_counter() - t < 15
        err = capsys.readouterr().err
        assert "needs a directory every worker sees" in err and "--shared-dir" in err
        assert "--transport scatter" in err
    with pytest.raises(SystemExit):
        select_main(
            _args(
                job["data"], tmp_path / "one.json", "--transport", "parquet", options=job["options"]
            )
        )
    assert "need --group-by and --out DIR" in capsys.readouterr().err
    missing = tmp_path / "nowhere"
    code = select_main(
        _args(
            job["data"],
            tmp_path / "o2",
            "--transport",
            "parquet",
            "--shared-dir",
            str(missing),
            options=job["options"],
        )
    )
    assert code == 2 and "no such directory" in capsys.readouterr().err


def test_cluster_job_killed_with_its_workers_resumes_from_the_shared_dataset(job, tmp_path, capsys):
    """The job and its LocalCluster's worker processes killed by a signal mid-run: the finished
    segments and the shared dataset survive, and the resumed job (here in this process,
    reading the same dataset) reuses both and ends with the inline run's results."""
    import os

    shared = tmp_path / "shared"
    shared.mkdir()
    out = tmp_path / "killed"
    args = _args(
        job["data"],
        out,
        "--transport",
        "parquet",
        "--shared-dir",
        str(shared),
        options=job["options"],
    )
    cmd = _command(*args, "--cluster", "local", "--local-workers", "2")
    # its own process group, so the signal reaches the cluster's worker processes too
    proc = subprocess.Popen(
        cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True
    )
    seg_dir = out / "segments"
    deadline = time.monotonic() + 180
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            if seg_dir.is_dir() and len(list(seg_dir.glob("*.json"))) >= 2:
                break
            time.sleep(0.05)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL, "the job ended before it could be killed"
    finished = {p.name: p.stat().st_mtime_ns for p in seg_dir.glob("*.json")}
    assert 2 <= len(finished) < 12
    datasets = [p for p in shared.iterdir() if p.name.startswith("bestscale-segments-")]
    assert len(datasets) == 1  # kept for the resume

    assert select_main([*args, "--resume"]) == 0
    err = capsys.readouterr().err
    assert f"{count_of(len(finished), 'segment')} already finished" in err
    assert f"Parquet dataset {datasets[0]} (reused, written by an earlier run)" in err
    for name, mtime in finished.items():
        assert (seg_dir / name).stat().st_mtime_ns == mtime
    assert _results(out) == job["inline"]
    assert list(shared.iterdir()) == []


def test_the_time_limit_applies_to_each_segment_not_to_the_whole_job(tmp_path):
    """An HTTP request's options carry one deadline for the whole request; a month of
    segments runs far longer than one request, so each segment gets the time limit from its
    own start (options made long ago, deadline passed: every segment still runs)."""
    from service.api.options import search_options
    from service.api.schemas import SelectionRequest
    from service.batch import Job, run_inline, run_job
    from service.core.data import prepare
    from service.selection.deadline import Deadline

    table = _table(2, 30)
    body = {"response": "repair_cost", "predictors": PREDICTORS.split(","), **OPTIONS}
    req = SelectionRequest.model_validate({**body, "data": {"columns": table}})
    opts = search_options(req)
    assert opts.deadline is not None
    stale = replace(opts, deadline=Deadline(time.monotonic() - 1.0, opts.time_limit_s))
    prep = prepare(
        {"columns": table}, "repair_cost", body["predictors"], ["soil"], None, "district"
    )
    summary = run_job(Job(tmp_path / "out", body, prep, stale, "test"), run_inline)
    assert summary["counts"]["ok"] == 2 and summary["counts"]["failed"] == 0
