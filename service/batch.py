"""Batch months: one selection per segment, written one file per segment as each finishes.

``python -m service select --group-by COL --out DIR`` (see service/cli.py) lands here.
The segments are independent tasks; where they run is the runner's business:

- ``inline``: this process, one after the other;
- ``pool``: this machine's worker processes (``BESTSCALE_GROUP_PROCESSES``), as before;
- ``dask``: a Dask distributed cluster, a running scheduler (``tcp://HOST:8786``) or a
  ``LocalCluster`` started for the job.  Tasks are submitted in a sliding window, so each
  segment's rows travel with its own task (scattered first when they are large) and the
  scheduler never holds the whole table; or, for large data, each task carries only a
  reference to its partition of a shared Parquet dataset (:mod:`service.batch_parquet`).

Every result goes to ``DIR/segments/<file>.json`` through a temporary name and a rename, so a
killed job leaves only whole files.  ``DIR/manifest.json`` records the request, seed,
versions, the data fingerprint and the segment list; ``--resume`` reuses every finished
segment whose file matches it and refuses when the request or the data changed.
``DIR/summary.json`` counts segments ok / failed / kept / switched and lists every switch
with its paired difference, reason and whether it coincides with drift.
"""

from __future__ import annotations

import hashlib
import json
import os
import platform
import re
import sys
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures import as_completed as finished_futures
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from threadpoolctl import threadpool_limits

from .api.artifact import load_model
from .api.encode import to_jsonable
from .api.errors import group_problem, problem_object
from .api.options import service
from .api.render import contract
from .batch_parquet import SegmentRef, SharedDirError, SharedParquet
from .core.data import Prepared
from .core.drift import compare
from .core.errors import InputError
from .core.model import Model, library_versions
from .core.numbers import count_of
from .selection.groups import GroupFailure, GroupTask, group_parts, select_group
from .selection.request import finish_body
from .selection.search_setup import SearchOptions
from .selection.workers import _context, _init_worker
from .settings import get_settings

MANIFEST = "manifest.json"
SUMMARY = "summary.json"
SEGMENTS = "segments"
FORMAT = "bestscale-batch"
FORMAT_VERSION = 1
# a segment whose arrays exceed this many bytes is scattered to the cluster before its task
SCATTER_BYTES = 1 << 20


class BatchRefusal(Exception):
    """The job cannot start as asked (a resume that does not match, an unusable directory)."""


# ---------------------------------------------------------------- files


def atomic_write(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` so that a reader sees the old file or the whole new one."""
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    with open(tmp, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def dumps(obj) -> str:
    return json.dumps(obj, ensure_ascii=False, allow_nan=False) + "\n"


def segment_file(name: str) -> str:
    """A file name for a segment value: readable, safe on every file system, unique.

    The readable part keeps letters, digits, '-', '_' and '.', so two values can share it
    ('North/1' and 'North 1', or 'A' and 'a' on a case-blind disk); the hash of the value
    keeps the names apart.
    """
    slug = re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("._")[:60] or "segment"
    return f"{slug}-{hashlib.sha256(name.encode()).hexdigest()[:10]}.json"


def digest(obj) -> str:
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()


def data_fingerprint(prep) -> str:
    """The used rows of the whole table, including the segment labels and order column."""
    h = hashlib.sha256(prep.fingerprint().encode())
    h.update("\x1f".join(str(g) for g in prep.groups.tolist()).encode())
    if prep.order_values is not None:
        h.update(repr(prep.order_values.tolist()).encode())
    return h.hexdigest()


# ---------------------------------------------------------------- one segment


_blas_pinned = False


def _pin_blas_once() -> None:
    """Pin this process's BLAS threads once (a `dask worker` started by hand did not)."""
    global _blas_pinned
    if not _blas_pinned:
        n = int(os.environ.get("BESTSCALE_BLAS_THREADS", "1") or 1)
        threadpool_limits(limits=max(1, n))
        _blas_pinned = True


def run_segment(name: str, sub, opts, service_version: str, incumbent_model: Model | None):
    """The finished selection body of one segment (module-level: it runs on any worker).

    ``sub`` is the segment's Prepared, a :class:`batch_parquet.SegmentRef` to read it from
    the shared Parquet dataset, or its ``GroupFailure`` when it was already known to be
    unusable.  An incumbent's model artifact adds the ``drift`` block.
    """
    _pin_blas_once()
    if isinstance(sub, SegmentRef):
        try:
            sub = sub.load()
        except (SharedDirError, OSError) as exc:
            return {
                "problem": problem_object(
                    500,
                    "segment-data",
                    "The segment's rows could not be read from the shared directory",
                    str(exc)[:2000],
                )
            }
    selected = select_group(GroupTask(sub, opts, service_version))
    if isinstance(selected, GroupFailure):
        body = group_problem(selected)
    else:
        # in contract form: the summary reads it as the files hold it
        body = _jsonable(finish_body(selected, opts, service()))
    if incumbent_model is not None and not isinstance(sub, GroupFailure):
        body["drift"] = compare(incumbent_model, sub)
    return _jsonable(body)


def unexpected_problem(exc: BaseException) -> dict:
    """A segment that raised something the core did not raise on purpose: its own failure."""
    return {
        "problem": problem_object(
            500,
            "segment-error",
            "The segment's task failed",
            f"{type(exc).__name__}: {exc}"[:2000],
        )
    }


# ---------------------------------------------------------------- runners


@dataclass
class Task:
    name: str
    sub: Any  # Prepared | SegmentRef | GroupFailure
    opts: Any
    version: str
    incumbent_model: Model | None = None  # typed: drift is measured against it

    def nbytes(self) -> int:
        p = self.sub
        if not hasattr(p, "numeric"):  # a problem entry
            return 0
        total = p.y.nbytes + sum(v.nbytes for v in p.numeric.values())
        return total + sum(8 * len(v) for v in p.categorical.values())


def _call(fn, task: Task):
    return fn(task.name, task.sub, task.opts, task.version, task.incumbent_model)


def _call_guarded(fn, task: Task):
    try:
        return _call(fn, task)
    except Exception as exc:  # isolate the segment: the others go on
        return unexpected_problem(exc)


def run_inline(tasks: list[Task], fn=run_segment) -> Iterator[tuple[str, dict]]:
    for t in tasks:
        yield t.name, _call_guarded(fn, t)


def run_pool(tasks: list[Task], processes: int, fn=run_segment) -> Iterator[tuple[str, dict]]:
    """This machine's worker processes (the pool of service/selection/workers.py)."""
    if processes <= 1 or len(tasks) <= 1:
        yield from run_inline(tasks, fn)
        return
    blas = int(os.environ.get("BESTSCALE_BLAS_THREADS", "1") or 1)
    with ProcessPoolExecutor(
        max_workers=min(processes, len(tasks)),
        mp_context=_context(),
        initializer=_init_worker,
        initargs=(blas,),
    ) as pool:
        futures = {pool.submit(_call_guarded, fn, t): t.name for t in tasks}
        for fut in finished_futures(futures):
            try:
                yield futures[fut], fut.result()
            except Exception as exc:  # a worker process died (killed, out of memory)
                yield futures[fut], unexpected_problem(exc)


def run_dask(
    tasks: list[Task], client, fn=run_segment, window: int | None = None
) -> Iterator[tuple[str, dict]]:
    """Segments as tasks on a Dask cluster, results in the order they finish.

    At most ``window`` tasks are in flight (default: four per worker thread, at least 8):
    enough to keep every worker busy, few enough that the scheduler holds only the rows of
    the segments being worked on.  A segment larger than SCATTER_BYTES is scattered to a
    worker first and its task refers to it.
    """
    from distributed import as_completed  # deferred: see DaskSession

    if window is None:
        threads = sum(client.nthreads().values()) or 1
        window = max(8, 4 * threads)
    pending = iter(tasks)

    def submit(t: Task):
        sub = t.sub
        if t.nbytes() > SCATTER_BYTES:
            sub = client.scatter(sub, hash=False)
        return client.submit(
            fn, t.name, sub, t.opts, t.version, t.incumbent_model, key=f"segment-{t.name!r}-{id(t)}"
        )

    names = {}
    ac = as_completed()
    for t in (t for _, t in zip(range(window), pending, strict=False)):
        f = submit(t)
        names[f.key] = t.name
        ac.add(f)
    for fut in ac:
        name = names.pop(fut.key)
        done = fut.status == "finished"
        body = fut.result() if done else unexpected_problem(fut.exception())
        fut.release()
        nxt = next(pending, None)
        if nxt is not None:
            f = submit(nxt)
            names[f.key] = nxt.name
            ac.add(f)
        yield name, body


class DaskSession:
    """A client on a running scheduler (an address) or on a LocalCluster started here."""

    def __init__(self, where: str, workers: int | None = None):
        # dask and distributed are imported where a job uses them (a cluster, the manifest's
        # versions): about 1 s of CPU that every other importer of this module (the worker
        # processes of the pool, the command line) would pay for nothing
        from distributed import Client, LocalCluster

        self.cluster = None
        if where == "local":
            import dask

            n = workers or max(1, min(os.cpu_count() or 1, 4))
            # the workers inherit this configuration (the Nanny hands it on): Dask's own
            # profiler samples every thread every 10 ms, about 9 % of a segment's CPU
            profile = get_settings().dask_worker_profile
            with dask.config.set({"distributed.worker.profile.enabled": profile}):
                self.cluster = LocalCluster(
                    n_workers=n,
                    threads_per_worker=1,
                    processes=True,
                    host="127.0.0.1",
                    dashboard_address="127.0.0.1:0",
                )
            self.client = Client(self.cluster)
        else:
            self.client = Client(where, timeout="20s")

    @property
    def dashboard(self) -> str | None:
        try:
            return self.client.dashboard_link
        except Exception:
            return None

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


# ---------------------------------------------------------------- progress


class BatchProgress:
    """Segments done / failed, rate and time left: one redrawn line on a terminal, else a
    plain line every ``every`` segments (and at the end)."""

    def __init__(self, total: int, stream=None, every: int | None = None, tty: bool | None = None):
        self.stream = stream if stream is not None else sys.stderr
        self.tty = self.stream.isatty() if tty is None else tty
        self.given_every = every
        self.start(total)

    def start(self, total: int) -> None:
        self.total, self.done, self.failed = total, 0, 0
        self.every = self.given_every or max(1, total // 20)
        self.t0 = time.perf_counter()

    def line(self) -> str:
        dt = max(time.perf_counter() - self.t0, 1e-9)
        rate = self.done / dt
        left = (self.total - self.done) / rate if rate > 0 else float("nan")
        eta = "" if left != left else f", about {_duration(left)} left"
        return (
            f"segments {self.done}/{self.total} done, {self.failed} failed, "
            f"{rate:.2f}/s{eta if self.done < self.total else ''}"
        )

    def step(self, failed: bool) -> None:
        self.done += 1
        self.failed += bool(failed)
        if self.tty:
            self.stream.write("\r" + self.line() + ("\n" if self.done == self.total else ""))
        elif self.done % self.every == 0 or self.done == self.total:
            self.stream.write(self.line() + "\n")
        self.stream.flush()

    def note(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()


def _duration(s: float) -> str:
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


# ---------------------------------------------------------------- incumbents


@dataclass
class Incumbent:
    specification: dict
    model: dict | None = None  # the artifact as read, when known (written back as in use)
    loaded: Model | None = None  # the same, checked and typed: drift is measured against it


def read_incumbents(path: str, validate_spec: Callable[[dict, str], dict]) -> dict:
    """``{segment: Incumbent}`` from an earlier run's directory or summary.json, or a JSON
    Lines file with one ``{"segment": ..., "specification": {...}}`` or
    ``{"segment": ..., "model": {...}}`` object a line.

    ``validate_spec(spec, where)`` checks a specification and returns it normalised (or
    raises BatchRefusal naming the place).
    """
    p = Path(path)
    if p.is_dir():
        p = p / SUMMARY
    if not p.is_file():
        raise BatchRefusal(f"--incumbents: '{path}' is neither a file nor a run directory")
    text = p.read_text(encoding="utf-8")
    entries: list[tuple[str, dict]] = []
    try:
        whole = json.loads(text)
    except json.JSONDecodeError:
        whole = None
    if isinstance(whole, dict) and whole.get("format") == f"{FORMAT}-summary":
        for i, seg in enumerate(whole.get("segments", [])):
            if seg.get("in_use"):
                entries.append(
                    (f"{p}: segments[{i}]", {"segment": seg["segment"], **seg["in_use"]})
                )
    else:
        for n, line in enumerate(text.splitlines(), 1):
            if not line.strip():
                continue
            try:
                obj = json.loads(line)
            except json.JSONDecodeError as exc:
                raise BatchRefusal(
                    f"--incumbents: {p} line {n} is not JSON ({exc.msg}); give one object a line "
                    'such as {"segment": "north", "specification": {...}}'
                ) from None
            entries.append((f"{p} line {n}", obj))
    out: dict[str, Incumbent] = {}
    for where, obj in entries:
        if not isinstance(obj, dict) or not isinstance(obj.get("segment"), str | int | float):
            raise BatchRefusal(f"--incumbents: {where} has no 'segment' value")
        seg = str(obj["segment"])
        if seg in out:
            raise BatchRefusal(f"--incumbents: segment '{seg}' appears twice ({where})")
        model = obj.get("model")
        spec = obj.get("specification")
        loaded = None
        if model is not None:
            try:
                loaded = load_model(model)
            except InputError as exc:
                raise BatchRefusal(f"--incumbents: {where}: the model {exc.detail}") from None
            spec = spec or model.get("specification")
        if spec is None:
            raise BatchRefusal(f"--incumbents: {where} has neither 'specification' nor 'model'")
        out[seg] = Incumbent(validate_spec(spec, where), model, loaded)
    return out


# ---------------------------------------------------------------- the job


@dataclass
class Job:
    out: Path
    request: dict  # the request without its data
    prep: Prepared
    opts: SearchOptions
    version: str
    incumbents: dict = field(default_factory=dict)
    incumbents_digest: str | None = None

    @property
    def request_digest(self) -> str:
        return digest({"request": self.request, "incumbents": self.incumbents_digest})


def versions() -> dict:
    import dask  # deferred: see DaskSession
    import distributed

    return {
        "python": platform.python_version(),
        **contract(library_versions()),
        "dask": dask.__version__,
        "distributed": distributed.__version__,
    }


def is_failed_segment(sub) -> bool:
    """True for a segment already known to be unusable (a ``GroupFailure`` of the split)."""
    return isinstance(sub, GroupFailure)


def _segment_fingerprint(sub) -> str | None:
    return None if is_failed_segment(sub) else sub.fingerprint()


def build_manifest(job: Job, parts: dict) -> dict:
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "service_version": job.version,
        "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "request": job.request,
        "request_digest": job.request_digest,
        "incumbents_digest": job.incumbents_digest,
        "seed": job.opts.seed,
        "versions": versions(),
        "data_fingerprint": data_fingerprint(job.prep),
        "rows_used": int(job.prep.n),
        "segments": [
            {
                "segment": name,
                "file": f"{SEGMENTS}/{segment_file(name)}",
                "rows": None if is_failed_segment(sub) else int(sub.n),
                "fingerprint": _segment_fingerprint(sub),
            }
            for name, sub in parts.items()
        ],
    }


def check_resume(old: dict, new: dict, out: Path) -> None:
    """Refuse a resume whose request or data differ from the manifest's."""
    where = out / MANIFEST
    if old.get("format") != FORMAT:
        raise BatchRefusal(f"{where} is not a manifest of this command; use a new --out directory")
    if old.get("request") != new["request"]:
        a, b = old.get("request") or {}, new["request"]
        keys = sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))
        raise BatchRefusal(
            f"--resume refused: the request differs from the one recorded in {where} "
            f"(changed: {', '.join(keys)}); run it without --resume into a new --out directory"
        )
    if old.get("incumbents_digest") != new["incumbents_digest"]:
        raise BatchRefusal(
            f"--resume refused: the --incumbents input differs from the one recorded in {where}; "
            "run it without --resume into a new --out directory"
        )
    if old.get("data_fingerprint") != new["data_fingerprint"]:
        raise BatchRefusal(
            f"--resume refused: the data differ from the run recorded in {where} "
            f"({old.get('rows_used')} rows then, {new['rows_used']} now; fingerprint "
            f"{str(old.get('data_fingerprint'))[:12]} then, {new['data_fingerprint'][:12]} now); "
            "run it without --resume into a new --out directory"
        )


def _finished(path: Path, request_digest: str, fingerprint: str | None) -> dict | None:
    """A segment file's record when it is whole, ok and made by this request on these rows."""
    try:
        rec = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if (
        isinstance(rec, dict)
        and rec.get("status") == "ok"
        and rec.get("request_digest") == request_digest
        and fingerprint is not None
        and rec.get("fingerprint") == fingerprint
    ):
        return rec
    return None


def run_job(
    job: Job,
    runner: Callable[[list[Task]], Iterable[tuple[str, dict]]],
    resume: bool = False,
    progress: BatchProgress | None = None,
    shared: SharedParquet | None = None,
) -> dict:
    """Run every unfinished segment, write its file as it arrives, then the summary.

    With ``shared`` the segments' rows go to the shared Parquet dataset (written once, or
    reused when a finished one holds the same rows) and each task carries a reference to its
    own partition instead of the rows."""
    out = job.out
    seg_dir = out / SEGMENTS
    parts = group_parts(job.prep)
    manifest = build_manifest(job, parts)
    mpath = out / MANIFEST
    if mpath.exists():
        if not resume:
            raise BatchRefusal(
                f"{out} already holds a run ({MANIFEST}); add --resume to finish it, or give a "
                "new --out directory"
            )
        try:
            old = json.loads(mpath.read_text(encoding="utf-8"))
        except ValueError:
            raise BatchRefusal(f"{mpath} is not readable JSON; use a new --out directory") from None
        check_resume(old, manifest, out)
        manifest = old
    elif out.exists() and any(out.iterdir()):
        raise BatchRefusal(
            f"{out} is not empty and holds no {MANIFEST}; give a new or empty --out directory"
        )
    seg_dir.mkdir(parents=True, exist_ok=True)
    for stale in seg_dir.glob(".*.tmp"):  # a write a killed run never renamed
        stale.unlink()
    if not mpath.exists():
        atomic_write(mpath, dumps(manifest))

    records: dict[str, dict] = {}
    tasks: list[Task] = []
    for entry in manifest["segments"]:
        name = entry["segment"]
        sub = parts[name]
        rec = (
            _finished(out / entry["file"], job.request_digest, entry["fingerprint"])
            if resume
            else None
        )
        if rec is not None:
            records[name] = rec
            continue
        inc = job.incumbents.get(name)
        # limits.time_limit_s bounds each segment from its own start: the request-wide
        # deadline of one HTTP request would fail every segment reached after it
        opts = replace(job.opts, deadline=None)
        if inc:
            opts = replace(opts, incumbent=inc.specification)
        tasks.append(Task(name, sub, opts, job.version, inc.loaded if inc else None))
    reused = len(records)
    if shared is not None and tasks:
        refs = shared.publish(job.prep, parts, manifest["data_fingerprint"])
        for t in tasks:
            if t.name in refs:
                t.sub = refs[t.name]
        if progress is not None:
            progress.note(shared.describe())
    files = {e["segment"]: e for e in manifest["segments"]}
    if progress is not None:
        progress.start(len(tasks))
        if reused:
            progress.note(
                f"resuming: {count_of(reused, 'segment')} already finished, {len(tasks)} to run"
            )
    t0 = time.perf_counter()
    for name, body in runner(tasks) if tasks else ():
        entry = files[name]
        # rendered once (typed results -> contract JSON): the file and the summary read the
        # same record, as a resumed run reads it back from the file
        rec = _jsonable(
            {
                "segment": name,
                "status": "failed" if "problem" in body else "ok",
                "request_digest": job.request_digest,
                "fingerprint": entry["fingerprint"],
                "rows": entry["rows"],
                "result": body,
            }
        )
        atomic_write(out / entry["file"], dumps(rec))
        records[name] = rec
        if progress is not None:
            progress.step("problem" in body)
    summary = build_summary(manifest, records, job.incumbents, reused, time.perf_counter() - t0)
    atomic_write(out / SUMMARY, dumps(summary))
    return summary


def _jsonable(obj):
    return to_jsonable(obj)


# ---------------------------------------------------------------- summary


def _in_use(body: dict, inc: Incumbent | None) -> dict | None:
    """The specification (and artifact) a job should run after this month's decision."""
    ranking = body.get("ranking") or []
    if not ranking:
        return None
    block = body.get("incumbent")
    if block is not None and block.get("decision") == "keep":
        rank = block.get("rank")
        model = None
        if rank is not None:
            model = next((e.get("model") for e in ranking if e.get("rank") == rank), None)
        if model is None and inc is not None:
            model = inc.model
        return {"specification": block["specification"], "model": model}
    return {"specification": ranking[0]["specification"], "model": ranking[0].get("model")}


def build_summary(
    manifest: dict, records: dict, incumbents: dict, reused: int, elapsed_s: float
) -> dict:
    segs, switches = [], []
    counts = {"segments": 0, "ok": 0, "failed": 0, "kept": 0, "switched": 0, "no_incumbent": 0}
    drifted = 0
    for entry in manifest["segments"]:
        name = entry["segment"]
        rec = records.get(name)
        counts["segments"] += 1
        row = {"segment": name, "file": entry["file"], "rows": entry["rows"]}
        if rec is None:
            row["status"] = "missing"
            segs.append(row)
            continue
        body = rec["result"]
        if rec["status"] != "ok":
            counts["failed"] += 1
            prob = body.get("problem", {})
            details = "; ".join(f"{e['pointer']}: {e['detail']}" for e in prob.get("errors", []))
            row.update(status="failed", reason=details or prob.get("detail") or prob.get("title"))
            segs.append(row)
            continue
        counts["ok"] += 1
        row["status"] = "ok"
        row["rank_1"] = body["ranking"][0]["equation"]
        drift = body.get("drift")
        if drift is not None:
            row["drift"] = {"flagged": drift["flagged"], "flags": drift["flags"]}
            drifted += bool(drift["flagged"])
        block = body.get("incumbent")
        if block is None:
            counts["no_incumbent"] += 1
            row["decision"] = None
        else:
            row["decision"] = block["decision"]
            row["reason"] = block["reason"]
            row["difference"] = block.get("difference")
            if block["decision"] == "keep":
                counts["kept"] += 1
            else:
                counts["switched"] += 1
                switches.append(
                    {
                        "segment": name,
                        "to": body["ranking"][0]["equation"],
                        "difference": block.get("difference"),
                        "reason": block["reason"],
                        "with_drift": bool(drift and drift["flagged"]),
                        "drift_flags": drift["flags"] if drift else [],
                    }
                )
        row["in_use"] = _in_use(body, incumbents.get(name))
        segs.append(row)
    unknown = sorted(set(incumbents) - {e["segment"] for e in manifest["segments"]})
    notes = []
    if unknown:
        shown = ", ".join(f"'{s}'" for s in unknown[:20])
        notes.append(
            f"{count_of(len(unknown), 'segment')} with an incumbent "
            f"{'has' if len(unknown) == 1 else 'have'} no rows in this data: {shown}"
            + (" ..." if len(unknown) > 20 else "")
        )
    return {
        "format": f"{FORMAT}-summary",
        "format_version": FORMAT_VERSION,
        "counts": {**counts, "drifted": drifted, "reused": reused},
        "elapsed_s": round(elapsed_s, 3),
        "switches": switches,
        "notes": notes,
        "segments": segs,
    }
