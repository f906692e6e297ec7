"""A request's answer key: what must be the same for a stored job to answer it without a fit.

A selection job is deterministic given its request, the rows of its table, the code that runs it
and the libraries that fit and read. The key is a sha256 over all four, computed without
importing any of those libraries: the table as the bytes of its file (or its content hash, or
the name of a shipped sample), the code as the bytes of this package's source files, the
libraries by their installed versions. Bytes are stricter than the table's logical content (a
file saved again with other line endings gets a new key and runs again, reusing its stored fold
scores): a missed answer costs a run, a wrong one would cost the user's trust.
"""

from __future__ import annotations

import hashlib
import json
import re
import sys
from importlib import metadata
from pathlib import Path
from typing import Any

from service.datasets.paths import resolve_dataset_path
from service.errors import BadInput

# everything that reads the table, fits or scores: a new version of any may change a number
LIBRARIES = ("scikit-learn", "numpy", "scipy", "pandas", "pyarrow")
PACKAGE_ROOT = Path(__file__).resolve().parents[2]
_CONTENT_HASH = re.compile(r"[0-9a-f]{64}")
_READ_CHUNK = 1 << 20


def answer_key(data: Any, *, base_dir: Path, data_roots: tuple[Path, ...]) -> str | None:
    """The request's answer key, or None when no stored job may answer it.

    None for a request whose rows can change under the same words (a SQL query) and for
    anything the full validation would refuse or word differently (a missing file, a path
    outside the data roots, a value JSON cannot carry): that path gives the user its error.
    """
    if not isinstance(data, dict):
        return None
    source = _source_digest(data.get("dataset"), base_dir=base_dir, data_roots=data_roots)
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
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


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


def _source_digest(
    dataset: Any, *, base_dir: Path, data_roots: tuple[Path, ...]
) -> list[str] | None:
    if isinstance(dataset, str):
        # a registered table: its content hash names its rows for good
        return ["content", dataset] if _CONTENT_HASH.fullmatch(dataset) else None
    if not isinstance(dataset, dict) or len(dataset) != 1:
        return None
    if isinstance(dataset.get("sample"), str):
        # a table shipped with scikit-learn: the same rows for the same installed version
        return ["sample", dataset["sample"]]
    if isinstance(dataset.get("path"), str) and dataset["path"]:
        digest = _file_digest(dataset["path"], base_dir=base_dir, data_roots=data_roots)
        return None if digest is None else ["file", digest]
    return None


def _file_digest(raw: str, *, base_dir: Path, data_roots: tuple[Path, ...]) -> str | None:
    try:
        # the same resolution and data-roots rule the table's loader applies
        path = resolve_dataset_path(raw, base_dir=base_dir, data_roots=data_roots, field="path")
        digest = hashlib.sha256()
        with path.open("rb") as handle:
            while chunk := handle.read(_READ_CHUNK):
                digest.update(chunk)
    except (BadInput, OSError):
        return None
    return digest.hexdigest()
