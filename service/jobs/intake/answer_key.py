"""A request's answer key: what must be the same for a stored job to answer it without a fit.

A selection job is deterministic given its request, the rows of its table, the code that runs it
and the libraries that fit and read. The key is a sha256 over all four, computed without
importing any of those libraries: the table as the bytes of its file (or its content hash, or
the name of a shipped sample), the code as the bytes of this package's source files, the
libraries by their installed versions. Bytes are stricter than the table's logical content (a
file saved again with other line endings gets a new key and runs again, reusing its stored fold
scores): a missed answer costs a run, a wrong one would cost the user's trust.

A file's bytes are read for the key once per command. Whether they were still the same when the
job had read the table is told by the file's stamp (device, inode, size, modification and change
times, as `os.stat` gives them), taken around that read and again after the job: any write or
replacement moves it. A file written within the file system's timestamp granularity of the read
could keep its stamp, so for a file modified in the last few seconds the bytes are hashed again
(the "racily clean" case version-control tools know).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import sys
import time
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any, NamedTuple

from service.datasets.paths import resolve_dataset_path
from service.errors import BadInput

# everything that reads the table, fits or scores: a new version of any may change a number
LIBRARIES = ("scikit-learn", "numpy", "scipy", "pandas", "pyarrow")
PACKAGE_ROOT = Path(__file__).resolve().parents[2]
_CONTENT_HASH = re.compile(r"[0-9a-f]{64}")
_READ_CHUNK = 1 << 20
# a file modified this recently before its bytes were read may change again without moving its
# stamp (timestamps are as coarse as the file system's clock tick); its bytes are hashed again
_RACY_NS = 3_000_000_000


class Stamp(NamedTuple):
    """What `os.stat` says of a file that any write or replacement changes."""

    device: int
    inode: int
    size: int
    mtime_ns: int
    ctime_ns: int


@dataclass(frozen=True)
class FileRead:
    """The file a key hashed: the request's path, where it led, stamp, digest, stamped when."""

    raw: str
    path: Path
    stamp: Stamp
    digest: str
    stamped_at_ns: int


@dataclass(frozen=True)
class AnswerKey:
    """A request's answer key, and the file whose bytes it took (None for other sources)."""

    value: str
    file: FileRead | None


def keyed(data: Any, *, base_dir: Path, data_roots: tuple[Path, ...]) -> AnswerKey | None:
    """The request's answer key with what it read, or None when no stored job may answer it.

    None for a request whose rows can change under the same words (a SQL query) and for
    anything the full validation would refuse or word differently (a missing file, a path
    outside the data roots, a value JSON cannot carry): that path gives the user its error.
    """
    if not isinstance(data, dict):
        return None
    dataset = data.get("dataset")
    file = _file_read(dataset, base_dir=base_dir, data_roots=data_roots)
    source = ["file", file.digest] if file is not None else _named_source(dataset)
    if source is None:
        return None
    try:
        text = json.dumps(
            {"request": data, "source": source, "code": code_digest(), "versions": versions()},
            sort_keys=True,
            separators=(",", ":"),
            ensure_ascii=False,
            allow_nan=False,
        )
    except (TypeError, ValueError):
        return None
    return AnswerKey(hashlib.sha256(text.encode("utf-8")).hexdigest(), file)


def unchanged_since(key: AnswerKey, *, base_dir: Path, data_roots: tuple[Path, ...]) -> bool:
    """True if the key's file still has the bytes the key took (always, for other sources).

    The path is resolved again, as the job's loader resolved it: a name pointed at another file
    since (a symlink moved, a file saved by rename) has another stamp.
    """
    file = key.file
    if file is None:
        return True
    try:
        path = resolve_dataset_path(
            file.raw, base_dir=base_dir, data_roots=data_roots, field="path"
        )
        if path != file.path or _stamp(os.stat(path)) != file.stamp:
            return False
    except (BadInput, OSError):
        return False
    if file.stamped_at_ns - file.stamp.mtime_ns > _RACY_NS:
        return True
    again = _hash_file(path)
    return again is not None and again[0] == file.digest


def versions() -> dict[str, str]:
    """Python's version and the installed version of every library in LIBRARIES."""
    found = {"python": sys.version}
    for name in LIBRARIES:
        try:
            found[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            found[name] = "absent"
    return found


def code_digest() -> str:
    """sha256 over the path and bytes of every Python file of this package, in path order.

    The package's own version number does not move with each change; its source does. A few
    hundred small files: a few milliseconds.
    """
    digest = hashlib.sha256()
    for path in sorted(PACKAGE_ROOT.rglob("*.py")):
        digest.update(path.relative_to(PACKAGE_ROOT).as_posix().encode("utf-8") + b"\0")
        digest.update(path.read_bytes() + b"\0")
    return digest.hexdigest()


def _named_source(dataset: Any) -> list[str] | None:
    if isinstance(dataset, str):
        # a registered table: its content hash names its rows for good
        return ["content", dataset] if _CONTENT_HASH.fullmatch(dataset) else None
    if isinstance(dataset, dict) and len(dataset) == 1 and isinstance(dataset.get("sample"), str):
        # a table shipped with scikit-learn: the same rows for the same installed version
        return ["sample", dataset["sample"]]
    return None


def _file_read(dataset: Any, *, base_dir: Path, data_roots: tuple[Path, ...]) -> FileRead | None:
    if not isinstance(dataset, dict) or len(dataset) != 1:
        return None
    raw = dataset.get("path")
    if not isinstance(raw, str) or not raw:
        return None
    try:
        # the same resolution and data-roots rule the table's loader applies
        path = resolve_dataset_path(raw, base_dir=base_dir, data_roots=data_roots, field="path")
    except BadInput:
        return None
    # when the stamp was taken: a write in the same clock tick as the file's last one could
    # follow it unseen, so a file modified just before this moment is not judged by stamp alone
    stamped_at = time.time_ns()
    hashed = _hash_file(path)
    if hashed is None:
        return None
    digest, stamp = hashed
    return FileRead(raw, path, stamp, digest, stamped_at)


def _hash_file(path: Path) -> tuple[str, Stamp] | None:
    """(sha256, stamp) of the file's bytes; None if unreadable or written while it was read."""
    digest = hashlib.sha256()
    try:
        with path.open("rb") as handle:
            before = _stamp(os.fstat(handle.fileno()))
            while chunk := handle.read(_READ_CHUNK):
                digest.update(chunk)
            after = _stamp(os.fstat(handle.fileno()))
    except OSError:
        return None
    return (digest.hexdigest(), before) if before == after else None


def _stamp(status: os.stat_result) -> Stamp:
    return Stamp(
        status.st_dev, status.st_ino, status.st_size, status.st_mtime_ns, status.st_ctime_ns
    )
