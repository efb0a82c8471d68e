"""Segment rows for batch tasks through a shared Parquet dataset instead of with each task.

Which way the rows travel (see :func:`choose_transport`):

- ``scatter``: a task carries its segment's arrays (sent through the scheduler; a segment
  over ``batch.SCATTER_BYTES`` is scattered to a worker first).  Nothing to set up, and right
  while the whole table crosses the client's link in seconds.
- ``parquet``: the job writes every usable segment once to ``SHARED/bestscale-segments-<key>/``
  as a hive-partitioned dataset (``segment=<index>/part-0.parquet``) and each task carries
  only a :class:`SegmentRef` (paths, column names, the segment's fingerprint).  The worker
  reads its own partition with a pyarrow dataset filter on the partition key and rebuilds the
  segment with the same constructor as the in-process split (``core.data.segment_of``), then
  checks the segment's fingerprint against the manifest's.  The scheduler and the client's
  link then carry no rows at all, any number of workers read in parallel from the shared
  storage, and a task run again (a worker lost, ``--resume``) reads its file again.

The dataset's name hashes the data fingerprint, the used row numbers and the column layout, so
a resumed job reuses a dataset it finished writing (``_complete.json`` marks it) and never one
of other data.  Columns are positional (``response``, ``predictor_<k>``, ``row_id``,
``order``), so no caller column name can collide with ours; ``_complete.json`` maps them to
the caller's names.  Only usable segments are written (an unusable one carries its problem).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa

from .core.data import segment_of
from .selection.groups import GroupFailure

FORMAT = "bestscale-segments"
MARKER = "_complete.json"
PARTITION = "segment"
MIB = 1 << 20
_PART = re.compile(r"part-(\d+)\.parquet")


def _part_number(name: str) -> int:
    m = _PART.fullmatch(name)
    return int(m.group(1)) if m else -1


class SharedDirError(Exception):
    """The shared directory cannot serve the job (not writable, not seen by a worker); the
    command refuses with the message, as it does a ``batch.BatchRefusal``."""


@dataclass(frozen=True)
class SegmentRef:
    """What a task needs to read one segment's rows from the shared dataset (a few hundred
    bytes, whatever the segment's size)."""

    root: str
    index: int
    name: str
    response: str
    predictors: tuple[str, ...]
    categorical: tuple[str, ...]
    table_columns: tuple[str, ...]
    source: str
    has_order: bool
    rows: int
    fingerprint: str

    @property
    def directory(self) -> str:
        return os.path.join(self.root, f"{PARTITION}={self.index}")

    def load(self):
        """The segment's Prepared, read from its own partition only and checked."""
        import pyarrow.dataset as ds  # deferred: see _write

        part = self.directory
        try:
            # part-0, part-1, ... in the order they were written (rows keep their order)
            names = [f for f in os.listdir(part) if _PART.fullmatch(f)]
            files = [os.path.join(part, f) for f in sorted(names, key=_part_number)]
        except OSError as exc:
            raise SharedDirError(
                f"segment '{self.name}': this worker cannot read {part} ({exc.strerror}); the "
                "shared directory must be mounted at the same path on every worker"
            ) from None
        dataset = ds.dataset(
            files,
            format="parquet",
            partitioning=ds.partitioning(pa.schema([(PARTITION, pa.int32())]), flavor="hive"),
            partition_base_dir=self.root,
        )
        table = dataset.to_table(filter=ds.field(PARTITION) == self.index)
        if table.num_rows != self.rows:
            raise SharedDirError(
                f"segment '{self.name}': {part} holds {table.num_rows} rows, the job wrote "
                f"{self.rows}; the shared dataset was changed while the job ran"
            )

        def column(key: str) -> np.ndarray:
            return table.column(key).to_numpy(zero_copy_only=False)

        numeric, cats = {}, {}
        for k, name in enumerate(self.predictors):
            (cats if name in self.categorical else numeric)[name] = column(f"predictor_{k}")
        sub = segment_of(
            self.response,
            list(self.predictors),
            column("response"),
            numeric,
            cats,
            column("row_id"),
            column("order") if self.has_order else None,
            self.table_columns,
            self.source,
        )
        if sub.fingerprint() != self.fingerprint:
            raise SharedDirError(
                f"segment '{self.name}': the rows in {part} are not the rows the job wrote "
                "(fingerprints differ); the shared dataset was changed while the job ran"
            )
        return sub


def segment_bytes(sub) -> int:
    """Bytes a segment's rows take on their way to a task (strings at their UTF-8 length)."""
    if not hasattr(sub, "numeric"):  # a problem entry
        return 0
    total = sub.y.nbytes + sub.row_ids.nbytes + sum(v.nbytes for v in sub.numeric.values())
    for v in sub.categorical.values():
        total += sum(len(s) for s in v.tolist()) + 4 * len(v)
    if sub.order_values is not None:
        ov = sub.order_values
        total += ov.nbytes if ov.dtype != object else sum(len(str(s)) + 4 for s in ov.tolist())
    return total


def choose_transport(
    asked: str, data_bytes: int, above_mb: float, cluster: str | None
) -> tuple[str, str]:
    """``(transport, why)``: ``parquet`` or ``scatter`` (rows with the tasks)."""
    size = f"{data_bytes / MIB:.1f} MiB of segment columns"
    if cluster is None:
        if asked == "parquet":
            return "parquet", f"--transport parquet; {size}"
        return "scatter", "this machine's processes"
    if asked != "auto":
        return asked, f"--transport {asked}; {size}"
    if data_bytes > above_mb * MIB:
        return "parquet", f"{size}, over the {above_mb:g} MiB threshold"
    return "scatter", f"{size}, within the {above_mb:g} MiB threshold"


def dataset_key(prep, data_fingerprint: str) -> str:
    """Names the dataset: the used rows' values, their row numbers and the column layout."""
    h = hashlib.sha256(data_fingerprint.encode())
    h.update(np.ascontiguousarray(prep.row_ids, dtype=np.int64).tobytes())
    layout = [prep.response, list(prep.predictors), sorted(prep.categorical), prep.source]
    h.update(json.dumps([layout, list(prep.table_columns)]).encode())
    return h.hexdigest()[:24]


class SharedParquet:
    """The shared dataset of one job: written (or reused) once, read by every task.

    ``root`` is the shared directory; ``None`` makes a private temporary one, which only
    workers on this machine can see (``--cluster local``) and which :meth:`close` removes.
    ``client`` (a ``distributed.Client``) is asked, after writing, whether every worker reads
    the dataset at the same path.
    """

    def __init__(self, root: str | None, client=None):
        self.temporary = root is None
        if root is None:
            root = tempfile.mkdtemp(prefix="bestscale-shared-")
        self.root = Path(root).resolve()
        if not self.root.is_dir():
            raise SharedDirError(f"--shared-dir {root}: no such directory")
        if not os.access(self.root, os.W_OK | os.X_OK):
            raise SharedDirError(f"--shared-dir {root}: this process cannot write there")
        self.client = client
        self.path: Path | None = None
        self.reused = False

    def publish(self, prep, parts: dict, data_fingerprint: str) -> dict[str, SegmentRef]:
        """Write the usable segments (or reuse a finished dataset of the same rows) and return
        one reference per segment name."""
        key = dataset_key(prep, data_fingerprint)
        final = self.root / f"{FORMAT}-{key}"
        index = {name: i for i, name in enumerate(parts)}
        usable = [name for name, sub in parts.items() if not isinstance(sub, GroupFailure)]
        if not self._finished(final, key, len(usable)):
            self._write(final, key, prep, parts, index, usable)
        else:
            self.reused = True
        self.path = final
        refs = {
            name: SegmentRef(
                root=str(final),
                index=index[name],
                name=name,
                response=prep.response,
                predictors=tuple(prep.predictors),
                categorical=tuple(prep.categorical),
                table_columns=tuple(prep.table_columns),
                source=prep.source,
                has_order=prep.order_values is not None,
                rows=int(parts[name].n),
                fingerprint=parts[name].fingerprint(),
            )
            for name in usable
        }
        if self.client is not None and refs:
            self._check_workers(next(iter(refs.values())))
        return refs

    @staticmethod
    def _finished(final: Path, key: str, segments: int) -> bool:
        try:
            marker = json.loads((final / MARKER).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return False
        return marker.get("key") == key and marker.get("segments") == segments

    def _write(self, final: Path, key: str, prep, parts, index, usable) -> None:
        # pyarrow.dataset costs about 0.5 s of CPU to import, paid only by the shared-Parquet
        # transport (not by every importer of this module, the worker processes among them)
        import pyarrow.dataset as ds

        # rows of the usable segments, grouped by segment, each segment in its input order
        names = np.array(list(parts), dtype=object)
        labels, inverse = np.unique(prep.groups, return_inverse=True)
        seg_of_label = np.array([index[g] for g in labels.tolist()], dtype=np.int32)
        seg = seg_of_label[inverse]
        ok = np.isin(seg, np.array([index[n] for n in usable], dtype=np.int32))
        rows = np.flatnonzero(ok)
        rows = rows[np.argsort(seg[rows], kind="stable")]
        cols: dict[str, Any] = {
            PARTITION: pa.array(seg[rows], type=pa.int32()),
            "response": pa.array(prep.y[rows]),
        }
        for k, name in enumerate(prep.predictors):
            v = (prep.numeric[name] if name in prep.numeric else prep.categorical[name])[rows]
            cols[f"predictor_{k}"] = pa.array(v, type=pa.string() if v.dtype == object else None)
        cols["row_id"] = pa.array(np.asarray(prep.row_ids[rows], dtype=np.int64))
        if prep.order_values is not None:
            ov = prep.order_values[rows]
            cols["order"] = pa.array(ov, type=pa.string() if ov.dtype == object else None)
        table = pa.table(cols)
        staging = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=self.root))
        try:
            ds.write_dataset(
                table,
                staging,
                format="parquet",
                partitioning=ds.partitioning(pa.schema([(PARTITION, pa.int32())]), flavor="hive"),
                basename_template="part-{i}.parquet",
                preserve_order=True,
                max_partitions=max(1024, len(usable) + 1),
                max_open_files=1024,
                existing_data_behavior="overwrite_or_ignore",
            )
            # written inside the staging directory, which appears whole under its final name
            (staging / MARKER).write_text(
                json.dumps(
                    {
                        "format": FORMAT,
                        "key": key,
                        "segments": len(usable),
                        "columns": {
                            "response": prep.response,
                            **{f"predictor_{k}": p for k, p in enumerate(prep.predictors)},
                            "row_id": "row number in the job's input",
                            **({"order": "order column"} if prep.order_values is not None else {}),
                        },
                        "segment_names": {str(index[n]): n for n in names.tolist()},
                    },
                    ensure_ascii=False,
                ),
                encoding="utf-8",
            )
            if final.exists():  # a dataset a killed run left half-written: ours replaces it
                shutil.rmtree(final)
            os.rename(staging, final)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise

    def _check_workers(self, ref: SegmentRef) -> None:
        """Every worker must read the dataset at the path this process wrote it to."""
        seen = self.client.run(os.path.isfile, os.path.join(ref.root, MARKER))
        blind = sorted(w for w, ok in seen.items() if not ok)
        if blind:
            shown = ", ".join(blind[:5]) + (" ..." if len(blind) > 5 else "")
            raise SharedDirError(
                f"{len(blind)} of {len(seen)} Dask workers cannot see {ref.root} ({shown}); "
                "give --shared-dir a directory mounted at the same path on every worker "
                "(a network file system), or --transport scatter to send the rows with the tasks"
            )

    def describe(self) -> str:
        how = "reused, written by an earlier run" if self.reused else "written for this run"
        return f"segment rows: Parquet dataset {self.path} ({how})"

    def close(self, finished: bool) -> None:
        """Remove the dataset once the job finished (and a temporary root always); a job that
        was interrupted keeps it for ``--resume``."""
        if self.temporary:
            shutil.rmtree(self.root, ignore_errors=True)
        elif finished and self.path is not None:
            shutil.rmtree(self.path, ignore_errors=True)
