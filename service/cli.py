"""``python -m service select ...``: the selection in-process, writing the API's JSON."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from pydantic import ValidationError


def read_data_file(path: str) -> dict:
    """A CSV or Parquet file as the contract's Data object."""
    p = Path(path)
    if p.suffix.lower() in (".parquet", ".pq"):
        import pyarrow.parquet as pq

        table = pq.read_table(p)
        return {"columns": {name: table.column(name).to_pylist() for name in table.column_names}}
    return {"csv": p.read_text()}


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


def select_main(argv: list[str]) -> int:
    from .api.encode import to_jsonable
    from .api.routes import run_selection_request
    from .api.schemas import SelectionRequest
    from .core.errors import BestscaleError

    ap = argparse.ArgumentParser(
        prog="python -m service select",
        description="Run a selection in-process and write the API's JSON.",
    )
    ap.add_argument("--data", required=True, help="CSV (with header) or Parquet file")
    ap.add_argument("--response", required=True)
    ap.add_argument("--predictors", required=True, help="comma-separated column names")
    ap.add_argument("--categorical", default="", help="comma-separated columns to treat as levels")
    ap.add_argument("--order", default=None)
    ap.add_argument("--group-by", default=None)
    ap.add_argument("--incumbent", default=None, help="JSON file holding a Specification")
    ap.add_argument(
        "--options",
        default=None,
        help="JSON file with further request fields (validation, limits, top, ...)",
    )
    ap.add_argument("--out", default=None, help="output file (default: standard output)")
    args = ap.parse_args(argv)

    body = json.loads(Path(args.options).read_text()) if args.options else {}
    body.update(
        data=read_data_file(args.data),
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
        body["incumbent"] = json.loads(Path(args.incumbent).read_text())
    try:
        req = SelectionRequest.model_validate(body)
        progress = None
        if args.group_by:
            progress = _Progress(0)
        result = run_selection_request(req, progress=progress)
    except ValidationError as exc:
        sys.stderr.write(f"invalid request: {exc}\n")
        return 2
    except BestscaleError as exc:
        problems = "; ".join(f"{p.pointer}: {p.detail}" for p in exc.problems) or exc.detail
        sys.stderr.write(f"{exc.title}: {problems}\n")
        return 2
    text = json.dumps(to_jsonable(result), ensure_ascii=False, allow_nan=False)
    if args.out:
        Path(args.out).write_text(text + "\n")
    else:
        sys.stdout.write(text + "\n")
    return 0
