"""``python -m service select ...``: the selection in-process, writing the API's JSON.

The service's modules are imported inside the functions that use them, not here:
``python -m service`` imports this module (``whole_number``) before it sets the BLAS thread
variables, which numpy reads once, when it is first imported (see ``__main__._pin_blas``).
"""

from __future__ import annotations

import argparse
import json
import sys
from functools import partial
from pathlib import Path

from pydantic import ValidationError

from .core.numbers import count_of


def read_data_file(path: str) -> dict:
    """A CSV or Parquet file as the contract's Data object."""
    p = Path(path)
    if p.suffix.lower() in (".parquet", ".pq"):
        import pyarrow.parquet as pq  # deferred: about 0.3 s of CPU, paid by Parquet input only

        table = pq.read_table(p)
        return {"columns": {name: table.column(name).to_pylist() for name in table.column_names}}
    return {"csv": p.read_text(encoding="utf-8")}


class _Progress:
    def __init__(self, total: int, stream=sys.stderr):
        self.total, self.done, self.stream = total, 0, stream

    def step(self) -> None:
        self.done += 1
        width = 30
        filled = int(width * self.done / max(self.total, 1))
        self.stream.write(
            f"\rgroups [{'#' * filled}{'.' * (width - filled)}] {self.done}/{self.total}"
        )
        if self.done == self.total:
            self.stream.write("\n")
        self.stream.flush()


def _is_directory_out(out: str | None) -> bool:
    """``--out DIR`` (one file per segment) versus ``--out FILE.json`` (one file)."""
    if out is None:
        return False
    p = Path(out)
    return p.is_dir() or p.suffix.lower() != ".json"


def whole_number(text: str) -> int:
    """An ``argparse`` type: a whole number, refused in our words otherwise."""
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected a whole number such as 5, got {text!r}"
        ) from None


class CommandRefusal(Exception):
    """A flag's file cannot be used; the message names the flag, the file and the fix."""


_FLAG_FIELDS = ("data", "response", "predictors", "categorical", "order", "group_by", "incumbent")


def _json_file(flag: str, path: str) -> object:
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise CommandRefusal(f"{flag} {path}: cannot be read ({exc.strerror or exc})") from None
    except UnicodeDecodeError:
        raise CommandRefusal(f"{flag} {path}: is not UTF-8 text; save it as UTF-8 JSON") from None
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise CommandRefusal(
            f"{flag} {path}: is not JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})"
        ) from None


def _request_body(args: argparse.Namespace) -> dict:
    """The API body the flags describe; the flags' own fields may not also be in --options."""
    body = _json_file("--options", args.options) if args.options else {}
    if not isinstance(body, dict):
        raise CommandRefusal(
            f"--options {args.options}: holds {type(body).__name__}; it needs a JSON object of "
            'request fields such as {"top": 5}'
        )
    twice = sorted(k for k in body if k in _FLAG_FIELDS)
    if twice:
        raise CommandRefusal(
            f"--options {args.options}: sets {', '.join(twice)}, which the flags set; give "
            "each field once (remove it from the file or drop the flag)"
        )
    try:
        data = read_data_file(args.data)
    except OSError as exc:
        raise CommandRefusal(
            f"--data {args.data}: cannot be read ({exc.strerror or exc})"
        ) from None
    except UnicodeDecodeError:
        raise CommandRefusal(
            f"--data {args.data}: is neither UTF-8 CSV text nor a .parquet/.pq file"
        ) from None
    except ValueError as exc:  # pyarrow's ArrowInvalid: a damaged or foreign Parquet file
        raise CommandRefusal(f"--data {args.data}: cannot be read as Parquet ({exc})") from None
    body.update(
        data=data,
        response=args.response,
        predictors=[c for c in args.predictors.split(",") if c],
    )
    if args.categorical:
        body["categorical"] = [c for c in args.categorical.split(",") if c]
    if args.order:
        body["order"] = args.order
    if args.group_by:
        body["group_by"] = args.group_by
    if args.incumbent:
        body["incumbent"] = _json_file("--incumbent", args.incumbent)
    return body


def build_parser() -> argparse.ArgumentParser:
    """The flags of ``python -m service select``; each help text says what the flag does,
    its default and its unit."""
    ap = argparse.ArgumentParser(
        prog="python -m service select",
        description="Run a selection in-process (or one per segment, on a Dask cluster with "
        "--cluster) and write the JSON that POST /v1/selections returns. Options not listed "
        "here go in --options, as in the API body.",
        epilog="Rows are numbered from 1 (1 = first data row) in every output. Exit status: 0 "
        "done, 2 the request or a flag cannot be used (the message says which and how to fix "
        "it).",
    )
    ap.add_argument(
        "--data",
        required=True,
        metavar="FILE",
        help="the table: a CSV file with a header row, or a Parquet file (.parquet or .pq); "
        "required",
    )
    ap.add_argument(
        "--response",
        required=True,
        metavar="COLUMN",
        help="the numeric column to model; required",
    )
    ap.add_argument(
        "--predictors",
        required=True,
        metavar="A,B,...",
        help="comma-separated predictor column names; required",
    )
    ap.add_argument(
        "--categorical",
        default="",
        metavar="A,B,...",
        help="comma-separated predictors to treat as levels even when they hold numbers "
        "(default: none; a column of text is treated as levels anyway)",
    )
    ap.add_argument(
        "--order",
        default=None,
        metavar="COLUMN",
        help="column giving the rows' time or sequence order, used by the independence tests "
        "and blocked folds (default: none, so the rows are not taken as ordered)",
    )
    ap.add_argument(
        "--group-by",
        default=None,
        metavar="COLUMN",
        help="run one selection per value of this column (default: none, one selection on "
        "all rows)",
    )
    ap.add_argument(
        "--incumbent",
        default=None,
        metavar="FILE",
        help="JSON file holding the specification in use now, scored beside rank 1 with a "
        "keep/switch decision (default: none)",
    )
    ap.add_argument(
        "--incumbents",
        default=None,
        metavar="PATH",
        help="one incumbent per segment: an earlier run's --out directory or its "
        'summary.json, or JSON Lines of {"segment": ..., "specification"|"model": {...}} '
        "(default: none; needs --group-by and --out DIR)",
    )
    ap.add_argument(
        "--options",
        default=None,
        metavar="FILE",
        help="JSON file with further request fields (validation, limits, top, ...) as in the "
        "API body (default: none, the API's defaults)",
    )
    ap.add_argument(
        "--out",
        default=None,
        metavar="FILE.json|DIR",
        help="FILE.json: one file; DIR: one file per segment plus manifest.json and "
        "summary.json, needs --group-by (default: standard output)",
    )
    ap.add_argument(
        "--cluster",
        default=None,
        metavar="ADDRESS",
        help="run the segments on Dask: tcp://HOST:8786 (a running scheduler) or 'local' "
        "(a cluster on this machine); needs --group-by (default: BESTSCALE_DASK_SCHEDULER, "
        "else this machine's process pool)",
    )
    ap.add_argument(
        "--local-workers",
        type=whole_number,
        default=None,
        metavar="N",
        help="worker processes of --cluster local, 1 to 256 (default: the machine's cores, at "
        "most 4)",
    )
    ap.add_argument(
        "--transport",
        choices=("auto", "scatter", "parquet"),
        default="auto",
        help="how segment rows reach the Dask workers with --out DIR: 'scatter' sends them "
        "with each task (through the scheduler), 'parquet' writes them once as a Parquet "
        "dataset partitioned by segment under --shared-dir and each task reads only its own "
        "partition; 'auto' (default) takes parquet when the segment columns exceed "
        "--parquet-above-mb",
    )
    ap.add_argument(
        "--parquet-above-mb",
        type=float,
        default=None,
        metavar="MIB",
        help="the size in MiB above which --transport auto takes parquet, 0 to 1073741824 "
        "(default BESTSCALE_PARQUET_ABOVE_MB, else 256: below it the whole table crosses a "
        "1 Gbit/s link in about 2 s, less than one segment's default search)",
    )
    ap.add_argument(
        "--shared-dir",
        default=None,
        metavar="DIR",
        help="for the parquet transport: a directory every worker mounts at the same path "
        "(default BESTSCALE_SHARED_DIR; needed with a remote scheduler; with --cluster local "
        "a temporary directory). The job's dataset is removed when the job ends and kept for "
        "--resume when it is interrupted",
    )
    ap.add_argument(
        "--resume",
        action="store_true",
        help="finish an interrupted --out DIR run: keep its finished segments, run the rest "
        "(default: off, every segment runs)",
    )
    ap.add_argument(
        "--progress-every",
        type=whole_number,
        default=None,
        metavar="N",
        help="when standard error is not a terminal, one progress line every N segments "
        "(default: every 5%% of the segments)",
    )
    return ap


def select_main(argv: list[str]) -> int:
    from .api.encode import to_jsonable
    from .api.errors import with_group_problems
    from .api.options import selection_job, service
    from .api.schemas import SelectionRequest
    from .core.errors import BestscaleError
    from .selection.request import run_selection

    ap = build_parser()
    args = ap.parse_args(argv)
    to_dir = _is_directory_out(args.out)
    if to_dir and not args.group_by:
        ap.error("--out DIR writes one file per segment and needs --group-by")
    if (args.resume or args.incumbents) and not to_dir:
        ap.error("--resume and --incumbents need --group-by and --out DIR")
    if args.incumbent and args.incumbents:
        ap.error("give either --incumbent (one for all) or --incumbents (one per segment)")
    if args.local_workers is not None and not 1 <= args.local_workers <= 256:
        ap.error("--local-workers must be between 1 and 256")
    if args.progress_every is not None and args.progress_every < 1:
        ap.error("--progress-every must be 1 or more")
    if args.parquet_above_mb is not None and not 0 <= args.parquet_above_mb <= 2**30:
        ap.error("--parquet-above-mb must be between 0 and 1073741824")
    moved = args.transport != "auto" or args.parquet_above_mb is not None or args.shared_dir
    if moved and not to_dir:
        ap.error("--transport, --parquet-above-mb and --shared-dir need --group-by and --out DIR")
    from .settings import get_settings

    cluster = args.cluster or get_settings().dask_scheduler
    if cluster is not None and not (cluster == "local" or "://" in cluster):
        ap.error(f"--cluster {cluster!r}: give tcp://HOST:PORT of a scheduler, or 'local'")
    if cluster is not None and not args.group_by:
        ap.error("--cluster spreads the segments of --group-by; give --group-by")

    try:
        body = _request_body(args)
    except CommandRefusal as exc:
        sys.stderr.write(f"python -m service select: {exc}\n")
        return 2
    session = None
    try:
        req = SelectionRequest.model_validate(body)
        if to_dir:
            from .batch import BatchRefusal
            from .batch_parquet import SharedDirError

            try:
                return _batch(req, body, args, cluster)
            except (BatchRefusal, SharedDirError) as exc:
                sys.stderr.write(f"{exc}\n")
                return 2
        group_mapper = None
        if cluster is not None:
            session = _session(cluster, args.local_workers)
            group_mapper = _dask_mapper(session.client)
        progress = None
        if args.group_by:
            progress = _Progress(0)
        result = run_selection(
            selection_job(req),
            service(),
            progress=progress,
            group_mapper=group_mapper,
            per_group_time_limit=bool(args.group_by),
        )
        result = with_group_problems(result)
    except ValidationError as exc:
        from .api.errors import validation_items

        items = validation_items(exc.errors(), body)
        lines = [f"{i['pointer'] or '(the request)'}: {i['detail']}" for i in items]
        sys.stderr.write(
            f"python -m service select: the request cannot be used "
            f"({count_of(len(lines), 'problem')}):\n  " + "\n  ".join(lines) + "\n"
        )
        return 2
    except BestscaleError as exc:
        from .api.pointers import pointer_of

        problems = (
            "; ".join(f"{pointer_of(p.where)}: {p.detail}" for p in exc.problems) or exc.detail
        )
        sys.stderr.write(f"{exc.title}: {problems}\n")
        return 2
    finally:
        if session is not None:
            session.close()
    text = json.dumps(to_jsonable(result), ensure_ascii=False, allow_nan=False)
    if args.out:
        from .batch import atomic_write

        atomic_write(Path(args.out), text + "\n")
    else:
        sys.stdout.write(text + "\n")
    return 0


def _session(cluster: str, local_workers: int | None):
    from .batch import DaskSession

    session = DaskSession(cluster, local_workers)
    link = session.dashboard
    where = "a local cluster" if cluster == "local" else cluster
    sys.stderr.write(
        f"running on {where}: {count_of(len(session.client.nthreads()), 'worker')}"
        + (f", dashboard {link}" if link else "")
        + "\n"
    )
    return session


def _dask_mapper(client):
    """``mapper(fn, items)`` for run_grouped on a Dask cluster, results in input order."""

    def mapper(fn, items):
        futures = client.map(fn, list(items), pure=False)
        for f in futures:
            yield f.result()
            f.release()

    return mapper


def _batch(req, body: dict, args, cluster: str | None) -> int:
    """``--out DIR``: one file per segment, manifest, summary; exit 0 when every segment is
    ok, 3 when some failed (their files and the summary say why)."""
    from .api.options import check_predictor_choices, search_options, table_columns
    from .api.schemas import SpecificationIn
    from .batch import (
        BatchProgress,
        BatchRefusal,
        Job,
        digest,
        read_incumbents,
        run_dask,
        run_job,
        run_pool,
    )
    from .batch_parquet import SharedParquet, choose_transport, segment_bytes
    from .core.errors import InputError, Option
    from .settings import get_settings
    from .version import __version__

    # the request checks of options.selection_job except the limits on the table's size, the
    # columns used and the groups, which protect a shared server; a batch job is bounded by
    # its cluster's memory
    if req.trust.stability or req.trust.optimism:
        raise InputError.at(
            Option("trust"),
            "trust measures are computed for one selection; run the segment on its own "
            "(without --group-by) to measure them",
        )
    check_predictor_choices(req)
    prep = table_columns(req).prepare()
    opts = search_options(req)
    incumbents, inc_digest = {}, None
    if args.incumbents:

        def validate(spec, where):
            try:
                return SpecificationIn.model_validate(spec).as_dict()
            except ValidationError as exc:
                first = exc.errors()[0]
                loc = "/".join(str(x) for x in first["loc"])
                raise BatchRefusal(
                    f"--incumbents: {where}: the specification is not valid at '{loc}': "
                    f"{first['msg']}"
                ) from None

        incumbents = read_incumbents(args.incumbents, validate)
        inc_digest = digest(
            {
                k: [v.specification, v.model and v.model.get("checksum")]
                for k, v in incumbents.items()
            }
        )
    request = {k: v for k, v in body.items() if k != "data"}
    job = Job(Path(args.out), request, prep, opts, __version__, incumbents, inc_digest)
    progress = BatchProgress(0, every=args.progress_every)
    settings = get_settings()
    above = args.parquet_above_mb
    above = settings.parquet_above_mb if above is None else above
    shared_dir = args.shared_dir or settings.shared_dir
    transport, why = choose_transport(args.transport, segment_bytes(prep), above, cluster)
    if transport == "parquet" and cluster not in (None, "local") and not shared_dir:
        raise BatchRefusal(
            f"the segment rows would go to the workers as a Parquet dataset ({why}), and a "
            f"remote cluster ({cluster}) needs a directory every worker sees: give --shared-dir "
            "DIR (or BESTSCALE_SHARED_DIR), mounted at the same path on this machine and on every "
            "worker, or --transport scatter to send the rows with the tasks"
        )
    session = shared = None
    finished = False
    try:
        if transport == "parquet":
            shared = SharedParquet(shared_dir)
        if cluster is not None:
            session = _session(cluster, args.local_workers)
            runner = partial(run_dask, client=session.client)
            if shared is not None:
                shared.client = session.client
        else:
            runner = partial(run_pool, processes=settings.group_processes)
        if cluster is not None or shared is not None:
            where = f"a Parquet dataset under {shared.root}" if shared else "with the tasks"
            sys.stderr.write(f"segment rows go {where} ({why})\n")
        summary = run_job(job, runner, resume=args.resume, progress=progress, shared=shared)
        finished = True
    finally:
        if shared is not None:
            shared.close(finished)
        if session is not None:
            session.close()
    c = summary["counts"]
    sys.stderr.write(
        f"{c['segments']} segments: {c['ok']} ok, {c['failed']} failed, {c['kept']} kept, "
        f"{c['switched']} switched, {c['drifted']} with drift ({c['reused']} reused); "
        f"see {Path(args.out) / 'summary.json'}\n"
    )
    return 3 if c["failed"] else 0
