"""Reading one CSV or Parquet file into a frame, refusing bad files with one clear sentence."""

from __future__ import annotations

import codecs
import gzip
import io
import re
from pathlib import Path
from typing import BinaryIO, Literal

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from service.datasets.kinds import iso_datetime_text, parse_iso_datetimes
from service.errors import BadInput

FileFormat = Literal["csv", "parquet"]

_SUFFIXES: dict[str, FileFormat] = {
    ".csv": "csv",
    ".csv.gz": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
}
_CHUNK = 1 << 20


def file_format(path: Path) -> FileFormat | None:
    """The format implied by the file name's extension, or None if foldwise does not read it."""
    name = path.name.lower()
    for suffix, fmt in _SUFFIXES.items():
        if name.endswith(suffix):
            return fmt
    return None


def read_dataset_file(path: Path, *, field: str) -> tuple[pd.DataFrame, FileFormat]:
    """Read a CSV or Parquet file by extension; BadInput on `field` for anything unreadable."""
    try:
        exists, is_dir = path.exists(), path.is_dir()
    except OSError as exc:
        raise BadInput(
            field, f"{path} could not be opened ({_brief(exc)}); check the path and try again."
        ) from None
    if not exists:
        raise BadInput(field, f"there is no file at {path}; check the path and try again.")
    if is_dir:
        raise BadInput(field, f"{path} is a directory; point to a .csv or .parquet file instead.")
    fmt = file_format(path)
    if fmt is None:
        raise BadInput(
            field,
            f"{path} has an extension foldwise does not read; "
            "use a .csv, .csv.gz, .parquet or .pq file.",
        )
    if path.stat().st_size == 0:
        raise BadInput(field, f"{path} is empty; supply a header row and at least one data row.")
    frame = _read_csv(path, field) if fmt == "csv" else _read_parquet(path, field)
    frame = _recognise_iso_dates(frame)
    if frame.shape[1] == 0:
        raise BadInput(field, f"{path} has no columns; supply a table with at least one column.")
    if len(frame) == 0:
        raise BadInput(field, f"{path} has column names but no rows; add at least one data row.")
    return frame, fmt


def _read_csv(path: Path, field: str) -> pd.DataFrame:
    # The file is read from disk once: checked as text and parsed from the same bytes.
    data = _utf8_text_bytes(path, field)
    try:
        # The raw header, because pandas silently renames a repeated name "a" to "a.1".
        header = pd.read_csv(
            io.BytesIO(data), header=None, nrows=1, dtype=str, keep_default_na=False
        )
        # pandas 3 parses each float to the nearest double by default, so CSV agrees with Parquet.
        frame = pd.read_csv(io.BytesIO(data))
    except pd.errors.EmptyDataError:
        raise BadInput(
            field, f"{path} holds no header row; supply a header row and at least one data row."
        ) from None
    except (pd.errors.ParserError, ValueError, OSError, EOFError) as exc:
        raise BadInput(
            field,
            f"{path} could not be parsed as CSV ({_brief(exc)}); "
            "check the quoting and that every row has as many fields as the header.",
        ) from None
    _check_unique([str(name) for name in header.iloc[0] if str(name)], path, field)
    return frame


def _recognise_iso_dates(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns holding only ISO 8601 dates become instants, as a Parquet timestamp is.

    So a CSV and a Parquet file with the same instants give the same table and content hash,
    whichever of the ISO 8601 spellings the file used (a Parquet file's text columns are read
    the same way, so a CSV and its Parquet copy still agree). Other date texts stay text: the
    request says how to read them (its "columns" field), never a guess here.
    """
    for name in frame.columns:
        if iso_datetime_text(frame[name]):
            frame[name] = parse_iso_datetimes(frame[name])
    return frame


def _read_parquet(path: Path, field: str) -> pd.DataFrame:
    try:
        with pq.ParquetFile(path) as parquet:
            # Names first: pyarrow's own error for a repeated name does not say what to fix.
            _check_unique(parquet.schema_arrow.names, path, field)
            _check_flat(parquet.schema_arrow, path, field)
            table = parquet.read()
    except BadInput:
        raise
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise BadInput(
            field,
            f"{path} is not a readable Parquet file ({_brief(exc)}); "
            "re-export it with pandas or pyarrow.",
        ) from None
    try:
        return table.to_pandas()
    except (pa.ArrowException, ValueError, TypeError) as exc:
        raise BadInput(
            field,
            f"{path} holds column types foldwise cannot read ({_brief(exc)}); "
            "store numbers, text, booleans or timestamps.",
        ) from None


def _check_flat(schema: pa.Schema, path: Path, field: str) -> None:
    """Refuse list, struct and map columns: a model input is one value per row and column."""
    for column in schema:
        if pa.types.is_nested(column.type):
            raise BadInput(
                field,
                f"{path} has a nested column {column.name!r} ({column.type}); foldwise reads one "
                "number, text, boolean or timestamp per cell, so flatten it into plain columns "
                "or drop it.",
            )


def _utf8_text_bytes(path: Path, field: str) -> bytes:
    """The file's bytes (decompressed); binary files are refused here, as pandas' errors would
    say nothing useful."""
    try:
        with _open_bytes(path) as stream:
            data = stream.read()
    except (OSError, EOFError) as exc:
        raise BadInput(
            field, f"{path} could not be read ({_brief(exc)}); check that the file is intact."
        ) from None
    if not data:
        raise BadInput(field, f"{path} is empty; supply a header row and at least one data row.")
    decoder = codecs.getincrementaldecoder("utf-8")()
    seen = 0
    try:
        # chunk by chunk as the file was once streamed: the first problem in file order is named,
        # and no decoded copy of a large file is ever held
        for start in range(0, len(data), _CHUNK):
            chunk = data[start : start + _CHUNK]
            if b"\x00" in chunk:
                raise BadInput(
                    field,
                    f"{path} contains NUL bytes, so it is binary rather than CSV text; "
                    "export the table as UTF-8 CSV or as Parquet.",
                )
            decoder.decode(chunk)
            seen += len(chunk)
        decoder.decode(b"", final=True)
    except UnicodeDecodeError as exc:
        raise BadInput(
            field,
            f"{path} is not UTF-8 text (bad byte near offset {seen + exc.start}); "
            "re-save it with UTF-8 encoding.",
        ) from None
    return data


def _open_bytes(path: Path) -> BinaryIO:
    if path.name.lower().endswith(".gz"):
        return gzip.open(path, "rb")  # type: ignore[return-value]
    return path.open("rb")


def _check_unique(names: list[str], path: Path, field: str) -> None:
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise BadInput(
            field,
            f"{path} has repeated column names ({', '.join(repeated)}); "
            "give every column a unique name.",
        )


def _brief(exc: BaseException) -> str:
    """The gist of a library error as a clause, so the caller's message stays one sentence."""
    text = str(exc).strip() or type(exc).__name__
    # pandas prefixes tokenizer errors with a sentence that carries no information.
    text = text.split("C error: ", 1)[-1]
    text = re.split(r"\.\s|\n", text, maxsplit=1)[0].rstrip(".").strip()
    return text[:160]
