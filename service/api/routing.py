"""A route class that parses JSON strictly (no NaN/Infinity tokens) and checks the media type.

Routes listed in ``UPLOAD_PATHS`` also take ``multipart/form-data``: a ``file`` part holding
the table as CSV (with a header row) or Parquet, and an optional ``options`` part holding the
rest of the request as a JSON object (everything but ``data``).  The file becomes the
request's ``data`` -- CSV as ``data.csv`` (the same parsing and messages as CSV sent in JSON),
Parquet as ``data.columns`` (typed columns; a null or NaN cell is a missing value) -- so
validation, error pointers and results are those of the JSON request.
"""

from __future__ import annotations

import io
import math

import anyio
import numpy as np
import orjson
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from fastapi import Request
from fastapi.routing import APIRoute
from starlette.requests import ClientDisconnect

from ..core.data import DecodedColumns, NumberColumn
from . import jsonbody
from .errors import ProblemError
from .options import (
    UPLOADED_FILE,
    check_rows,
    check_table_columns,
    check_uncompressed,
)
from .pool import compute_slot

JSON_TYPES = ("application/json",)
MULTIPART = "multipart/form-data"
UPLOAD_PATHS = ("/v1/selections", "/v1/reports")
FILE_PART, OPTIONS_PART = "file", "options"
PARQUET_MAGIC = b"PAR1"
THREAD_PARSE_BYTES = 256 * 1024  # larger JSON bodies are parsed in a worker thread


class StrictJSONRequest(Request):
    """A request whose JSON body is parsed by :func:`jsonbody.parse` (strict, duplicate-aware).

    ``StrictRoute`` parses the body before the framework asks for it (off the event loop
    when it is large) and keeps a decode error to raise here: ``orjson.JSONDecodeError``
    subclasses ``json.JSONDecodeError``, which the framework maps to a "json_invalid"
    validation error (HTTP 400 in errors.py).
    """

    _decode_error: Exception | None = None

    async def json(self):
        if self._decode_error is not None:
            raise self._decode_error
        if not hasattr(self, "_json"):
            self._json = jsonbody.parse(await self.body())
        return self._json

    async def parse_body(self) -> None:
        try:
            body = await self.body()
        except ClientDisconnect:
            raise ProblemError(
                400,
                "malformed-body",
                "Incomplete request body",
                "the client disconnected before the body arrived whole",
            ) from None
        if not body:
            return
        try:
            if len(body) > THREAD_PARSE_BYTES:
                self._json = await anyio.to_thread.run_sync(jsonbody.parse, body)
            else:
                self._json = jsonbody.parse(body)
        except orjson.JSONDecodeError as exc:
            self._decode_error = exc


class _UploadedRequest(Request):
    """A request whose JSON body was assembled from multipart parts."""

    def __init__(self, scope, receive, body: dict):
        headers = [(k, v) for k, v in scope["headers"] if k.lower() != b"content-type"]
        headers.append((b"content-type", b"application/json"))
        super().__init__({**scope, "headers": headers}, receive)
        self._assembled = body

    async def body(self) -> bytes:
        return b"{}"  # non-empty, so the framework asks json() for the body

    async def json(self):
        return self._assembled


def _main_type(content_type: str) -> str:
    return content_type.split(";")[0].strip().lower()


def _is_json(content_type: str) -> bool:
    main = _main_type(content_type)
    return main in JSON_TYPES or main.endswith("+json")


def _problem(status: int, kind: str, title: str, pointer: str, detail: str) -> ProblemError:
    return ProblemError(status, kind, title, detail, [{"pointer": pointer, "detail": detail}])


def _parquet_limits(raw: bytes):
    """Open a Parquet file and check rows, columns and decoded size from its footer alone,
    before any page is decompressed; return the open file."""
    try:
        pf = pq.ParquetFile(io.BytesIO(raw))
        meta = pf.metadata
        rows, ncols = meta.num_rows, meta.num_columns
        size = sum(meta.row_group(i).total_byte_size for i in range(meta.num_row_groups))
    except (pa.ArrowException, OSError) as exc:
        raise _problem(
            422,
            "invalid-input",
            "Invalid request content",
            "/file",
            f"the uploaded file is not a readable Parquet file ({exc})",
        ) from None
    check_rows(rows, UPLOADED_FILE, "the Parquet file")
    check_table_columns(ncols, UPLOADED_FILE, "the Parquet file", uploaded=True)
    check_uncompressed(size)
    return pf


def _number_column(arr: pa.ChunkedArray) -> NumberColumn:
    """A numeric Parquet column as float64 with NaN for a missing value (a null cell, or NaN
    in a float column: the row is dropped and listed), without a Python object per cell;
    the cells as Python values (NaN as None) only when a path asks for them."""
    values = np.array(arr.cast(pa.float64(), safe=False).fill_null(math.nan), dtype=float)

    def cells() -> list:
        held = arr
        if pa.types.is_floating(held.type):
            held = pc.if_else(pc.is_nan(held), pa.scalar(None, held.type), held)
        return held.to_pylist()

    return NumberColumn(values, cells)


def _csv_limits(raw: bytes) -> None:
    """Rows counted on the raw bytes before the text is decoded (the columns are counted
    from the header with the JSON request's checks)."""
    rows = raw.count(b"\n") + (0 if raw.endswith(b"\n") else 1) - 1
    check_rows(rows, UPLOADED_FILE, "the CSV file")


def table_from_file(raw: bytes, filename: str | None) -> dict:
    """The contract's Data object for an uploaded CSV or Parquet file.

    Sizes are checked before anything is decoded: a Parquet file's rows, columns and
    uncompressed bytes from its footer, a CSV file's rows from its line count.
    """
    name = (filename or "").lower()
    if raw[:4] == PARQUET_MAGIC or name.endswith((".parquet", ".pq")):
        pf = _parquet_limits(raw)
        try:
            table = pf.read()
        except (pa.ArrowException, OSError) as exc:
            raise _problem(
                422,
                "invalid-input",
                "Invalid request content",
                "/file",
                f"the uploaded file is not a readable Parquet file ({exc})",
            ) from None
        cols = DecodedColumns()
        for col in table.column_names:
            arr = table.column(col)
            if pa.types.is_floating(arr.type) or pa.types.is_integer(arr.type):
                cols[str(col)] = _number_column(arr)
                continue
            if not (
                pa.types.is_string(arr.type)
                or pa.types.is_large_string(arr.type)
                or pa.types.is_boolean(arr.type)
                or pa.types.is_dictionary(arr.type)
            ):
                raise _problem(
                    422,
                    "invalid-input",
                    "Invalid request content",
                    "/file",
                    f"column '{col}' of the Parquet file has type {arr.type}; "
                    "send numbers, text or booleans",
                )
            cols[str(col)] = arr.to_pylist()
        return {"columns": cols}
    _csv_limits(raw)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise _problem(
            422,
            "invalid-input",
            "Invalid request content",
            "/file",
            f"the uploaded file is neither Parquet nor UTF-8 CSV text (byte "
            f"{exc.start} is not UTF-8)",
        ) from None
    return {"csv": text}


def _decode_in_slot(raw: bytes, filename: str | None) -> dict:
    with compute_slot():  # decoding a table is computation: it takes a slot (503 if none)
        return table_from_file(raw, filename)


def _closed(body: bytes, ctype: str) -> bool:
    """True when the multipart body ends with its closing boundary ('--boundary--')."""
    boundary = ""
    for param in ctype.split(";")[1:]:
        key, _, value = param.strip().partition("=")
        if key.strip().lower() == "boundary":
            boundary = value.strip().strip('"')
    if not boundary:
        return True  # the parser reports a missing boundary itself
    return body.rstrip(b"\r\n\t ").endswith(b"--" + boundary.encode("latin-1") + b"--")


async def assemble_upload(request: Request) -> dict:
    """The JSON request body of a multipart upload: options plus ``data`` from the file.

    The body is read whole first (its size is already bounded): a body without its closing
    boundary is refused rather than parsed into fewer parts, and a repeated part is refused
    rather than letting one copy win.
    """
    try:
        raw_body = await request.body()
    except ClientDisconnect:
        raise ProblemError(
            400,
            "malformed-body",
            "Incomplete request body",
            "the client disconnected before the body arrived whole",
        ) from None
    if not _closed(raw_body, request.headers.get("content-type", "")):
        raise ProblemError(
            400,
            "malformed-body",
            "Malformed multipart body",
            "the multipart/form-data body ends without its closing boundary "
            "('--<boundary>--'); it was cut off or built incorrectly, so parts may be missing",
        )
    try:
        form = await request.form(max_files=2, max_fields=4)
    except Exception as exc:  # python-multipart's parse errors have no common public base
        raise ProblemError(
            400,
            "malformed-body",
            "Malformed multipart body",
            f"the multipart/form-data body cannot be read ({exc})",
        ) from None
    try:
        for part in (FILE_PART, OPTIONS_PART):
            if len(form.getlist(part)) > 1:
                raise _problem(
                    422,
                    "invalid-input",
                    "Invalid request content",
                    f"/{part}",
                    f"the '{part}' part appears {len(form.getlist(part))} times; send it once",
                )
        extra = [k for k in form if k not in (FILE_PART, OPTIONS_PART)]
        if extra:
            raise _problem(
                422,
                "invalid-input",
                "Invalid request content",
                f"/{extra[0][:64]}",
                f"unknown part '{extra[0][:64]}'; send a '{FILE_PART}' part with the table "
                f"and an '{OPTIONS_PART}' part with the other request fields as JSON",
            )
        upload = form.get(FILE_PART)
        if upload is None or isinstance(upload, str):
            raise _problem(
                422,
                "invalid-input",
                "Invalid request content",
                f"/{FILE_PART}",
                f"a multipart request needs a '{FILE_PART}' part holding the table "
                "(CSV with a header row, or Parquet)",
            )
        raw = await upload.read()
        opts = form.get(OPTIONS_PART)
        if opts is None:
            body: dict = {}
        else:
            text = await opts.read() if not isinstance(opts, str) else opts.encode()
            try:
                body = jsonbody.parse(text)
            except orjson.JSONDecodeError as exc:
                raise _problem(
                    400,
                    "malformed-body",
                    "Malformed JSON body",
                    f"/{OPTIONS_PART}",
                    f"the '{OPTIONS_PART}' part is not valid JSON (near byte "
                    f"{exc.pos}); NaN and Infinity are not JSON",
                ) from None
            if not isinstance(body, dict):
                raise _problem(
                    400,
                    "malformed-body",
                    "Malformed JSON body",
                    f"/{OPTIONS_PART}",
                    f"the '{OPTIONS_PART}' part must be a JSON object",
                )
        if "data" in body:
            raise _problem(
                422,
                "invalid-input",
                "Invalid request content",
                f"/{OPTIONS_PART}/data",
                f"the table comes from the '{FILE_PART}' "
                f"part; leave 'data' out of '{OPTIONS_PART}'",
            )
        if not raw:
            raise _problem(
                422,
                "invalid-input",
                "Invalid request content",
                f"/{FILE_PART}",
                "the uploaded file is empty",
            )
        # off the event loop (a large file decodes for seconds) and inside a compute slot
        body["data"] = await anyio.to_thread.run_sync(
            _decode_in_slot, raw, getattr(upload, "filename", None)
        )
        return body
    finally:
        await form.close()


class StrictRoute(APIRoute):
    def get_route_handler(self):
        handler = super().get_route_handler()

        async def strict(request: Request):
            if request.method in ("POST", "PUT", "PATCH"):
                ctype = request.headers.get("content-type", "")
                if self._accepts_upload(ctype):
                    body = await assemble_upload(request)
                    return await handler(_UploadedRequest(request.scope, request.receive, body))
                if not _is_json(ctype):
                    also = (
                        " or multipart/form-data (a 'file' part and an 'options' JSON part)"
                        if self.path in UPLOAD_PATHS
                        else ""
                    )
                    raise ProblemError(
                        415,
                        "unsupported-media-type",
                        "Unsupported media type",
                        f"send the body as application/json{also} (got "
                        f"'{ctype or 'no content type'}' in the Content-Type header)",
                    )
                strict_request = StrictJSONRequest(request.scope, request.receive)
                await strict_request.parse_body()
                return await handler(strict_request)
            return await handler(StrictJSONRequest(request.scope, request.receive))

        return strict

    def _accepts_upload(self, ctype: str) -> bool:
        return self.path in UPLOAD_PATHS and _main_type(ctype) == MULTIPART
