"""Streaming a multipart upload to the spool folder, stopping at the size cap.

Starlette's own form parsing would buffer the whole file in a temporary file before the handler
could look at its size, so a huge upload would fill the disk first. Here the body is parsed as it
arrives and only the `file` part's bytes are written, under a name the server chooses; past the
cap nothing more is written and the answer is 413.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO

from fastapi import Request
from python_multipart.exceptions import FormParserError
from python_multipart.multipart import MultipartParser, parse_options_header
from starlette.concurrency import run_in_threadpool

from service.errors import BadInput
from service.http.problems import ProblemError

UPLOAD_FIELD = "file"
UPLOAD_SUFFIXES = (".csv", ".parquet", ".pq")
# A body this far past the cap is refused from its Content-Length without reading it.
_DRAIN_FACTOR = 4


@dataclass(frozen=True)
class SpooledUpload:
    """An uploaded file on disk under a server-chosen name, with the name the client gave."""

    path: Path
    filename: str


def check_filename(filename: str) -> str:
    """The file name's extension if the name is a plain .csv/.parquet/.pq name; else BadInput."""
    if not filename.strip():
        raise BadInput(UPLOAD_FIELD, "the upload has no file name; send one such as pumps.csv.")
    if ".." in filename or "/" in filename or "\\" in filename or "\x00" in filename:
        raise BadInput(
            UPLOAD_FIELD,
            f"the file name {filename!r} holds a path ('..' or a separator); "
            "send a plain file name such as pumps.csv.",
        )
    suffix = Path(filename).suffix.lower()
    if suffix not in UPLOAD_SUFFIXES:
        raise BadInput(
            UPLOAD_FIELD,
            f"the file name {filename!r} does not end in .csv, .parquet or .pq; "
            "upload a CSV or Parquet file with its usual extension.",
        )
    return suffix


def _too_large(limit: int) -> ProblemError:
    return ProblemError(
        413,
        f"the upload is larger than this server accepts ({limit // (1024 * 1024)} MiB, "
        "FOLDWISE_MAX_UPLOAD_MB); send a smaller file or a sample of the rows.",
        field=UPLOAD_FIELD,
    )


@dataclass
class _Reader:
    """Parser callbacks: collect the file part's bytes and note the first problem seen."""

    spool_dir: Path
    limit: int
    headers: dict[bytes, bytes] = field(default_factory=dict)
    header_name: bytes = b""
    header_value: bytes = b""
    in_file: bool = False
    filename: str | None = None
    path: Path | None = None
    stream: IO[bytes] | None = None
    pending: list[bytes] = field(default_factory=list)
    size: int = 0
    finished: bool = False
    problem: Exception | None = None

    def callbacks(self) -> dict[str, object]:
        return {
            "on_part_begin": self.on_part_begin,
            "on_part_data": self.on_part_data,
            "on_part_end": self.on_part_end,
            "on_header_field": self.on_header_field,
            "on_header_value": self.on_header_value,
            "on_header_end": self.on_header_end,
            "on_headers_finished": self.on_headers_finished,
        }

    def on_part_begin(self) -> None:
        self.headers, self.in_file = {}, False

    def on_header_field(self, data: bytes, start: int, end: int) -> None:
        self.header_name += data[start:end]

    def on_header_value(self, data: bytes, start: int, end: int) -> None:
        self.header_value += data[start:end]

    def on_header_end(self) -> None:
        self.headers[self.header_name.lower()] = self.header_value
        self.header_name = self.header_value = b""

    def on_headers_finished(self) -> None:
        _, options = parse_options_header(self.headers.get(b"content-disposition", b""))
        if options.get(b"name", b"").decode("utf-8", "replace") != UPLOAD_FIELD:
            return  # other form fields are ignored
        if self.filename is not None:
            self.refuse(BadInput(UPLOAD_FIELD, "send exactly one file in the 'file' field."))
            return
        raw = options.get(b"filename")
        self.filename = raw.decode("utf-8", "replace") if raw is not None else ""
        try:
            suffix = check_filename(self.filename)
        except BadInput as exc:
            self.refuse(exc)
            return
        self.in_file = True
        self.path = self.spool_dir / f"{uuid.uuid4().hex}{suffix}"

    def on_part_data(self, data: bytes, start: int, end: int) -> None:
        if not self.in_file or self.problem is not None:
            return
        self.size += end - start
        if self.size > self.limit:
            self.refuse(_too_large(self.limit))
            return
        self.pending.append(data[start:end])

    def on_part_end(self) -> None:
        if self.in_file and self.problem is None:
            self.finished = True
        self.in_file = False

    def refuse(self, problem: Exception) -> None:
        if self.problem is None:
            self.problem = problem
        self.pending.clear()

    def flush(self) -> None:
        """Write what the parser handed over since the last flush (in a worker thread)."""
        if not self.pending or self.path is None:
            return
        if self.stream is None:
            self.spool_dir.mkdir(parents=True, exist_ok=True)
            self.stream = self.path.open("xb")
        self.stream.write(b"".join(self.pending))
        self.pending.clear()

    def close(self) -> None:
        if self.stream is not None:
            self.stream.close()


async def spool_upload(request: Request, *, spool_dir: Path, limit: int) -> SpooledUpload:
    """Stream the request's `file` part to `spool_dir`; ProblemError 413/400 or BadInput."""
    declared = request.headers.get("content-length", "")
    if declared.isdigit() and int(declared) > _DRAIN_FACTOR * limit + (1 << 20):
        raise _too_large(limit)  # clearly over: do not read a byte of it
    content_type, params = parse_options_header(request.headers.get("content-type", ""))
    if content_type != b"multipart/form-data" or b"boundary" not in params:
        raise BadInput(
            UPLOAD_FIELD, "send the table as multipart/form-data with the file in field 'file'."
        )
    reader = _Reader(spool_dir=spool_dir, limit=limit)
    parser = MultipartParser(params[b"boundary"], reader.callbacks())  # type: ignore[arg-type]
    received = 0
    try:
        async for chunk in request.stream():
            received += len(chunk)
            if reader.problem is not None:
                # Drain what the client is still sending (bounded), so it reads our answer
                # instead of a reset connection.
                if received > _DRAIN_FACTOR * limit + (1 << 20):
                    break
                continue
            try:
                parser.write(chunk)
            except FormParserError:
                reader.refuse(ProblemError(400, "the multipart body is malformed; resend it."))
                continue
            await run_in_threadpool(reader.flush)
    except BaseException:
        reader.close()
        if reader.path is not None:
            reader.path.unlink(missing_ok=True)
        raise
    reader.close()
    if reader.problem is None and not reader.finished:
        reader.problem = BadInput(
            UPLOAD_FIELD, "the request holds no complete 'file' part; attach the table as 'file'."
        )
    if reader.problem is not None:
        if reader.path is not None:
            reader.path.unlink(missing_ok=True)
        raise reader.problem
    assert reader.path is not None and reader.filename is not None
    if not reader.path.exists():  # a zero-byte file part never opened the spool file
        spool_dir.mkdir(parents=True, exist_ok=True)
        reader.path.touch()
    return SpooledUpload(reader.path, reader.filename)
