"""The final model as a file: skops' format, written so equal models give equal bytes.

skops (scikit-learn's community persistence format) stores an object tree as JSON plus numpy
arrays inside a zip, and loads it without running code from the file: types outside its
trusted list are reported by `skops.io.get_untrusted_types` instead of being imported. That is
the only form foldwise hands over, and the form it keeps, so the sha256 in result v1 is the
hash of the very bytes a client downloads.

Two saves of one model would still differ: skops names each object by its address in memory
(`__id__`, and the `<id>.npy` member holding an array) and a zip records a time per member. The
ids are renumbered here in order of first appearance (a one-to-one renaming, so shared
references stay shared; JSON values aside, see `_JSON_ATOM`) and members are written in name
order with one fixed time, which keeps `model_sha256` equal for equal requests (the determinism
the store relies on).

skops 0.16 trusts no `numpy.dtype` (its DTypeNode's trusted list is empty), and scikit-learn's
SimpleImputer keeps two; tree ensembles keep node storage skops lists as well. Those types are
reported with the file (`untrusted_types`) rather than hidden: a pick without them (e.g. a linear
model with preprocess "none") loads with nothing to trust.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import zipfile
from collections.abc import Callable
from pathlib import Path
from types import ModuleType
from typing import Any

MEDIA_TYPE = "application/vnd.skops"  # not registered; names the format for a reader
SUFFIX = ".skops"
_FIXED_TIME = (1980, 1, 1, 0, 0, 0)  # the earliest time a zip entry can carry
_SCHEMA = "schema.json"


def _skops_io() -> ModuleType:
    # imported here for start-up speed: importing skops.io imports every scikit-learn estimator
    # (its trusted-types list), seconds that a job answered from the store never needs
    import skops.io

    return skops.io


_ARRAY_FILE = re.compile(r"^(\d+)(\.np[yz])$")
# A number, string or other JSON value is one node whose id says which Python object it was,
# so a value shared by two parameters (one `np.nan` as two imputers' missing_values) is written
# once and a reference, where two equal but distinct objects are written twice: the bytes would
# follow an accident of memory. A pickled copy of a model (model_writer.py) keeps every shared
# string, array and estimator but not a shared float. Each occurrence gets an id of its own
# here: equal values, equal bytes, and loading gives equal (immutable) values.
_JSON_ATOM = "JsonNode"


def _renumber(node: Any, ids: dict[int, int]) -> Any:
    """The schema with every object id replaced by its order of first appearance."""
    if isinstance(node, list):
        return [_renumber(item, ids) for item in node]
    if not isinstance(node, dict):
        return node
    out = {}
    atom = node.get("__loader__") == _JSON_ATOM
    for key, value in node.items():
        if key == "__id__" and isinstance(value, int) and atom:
            value = len(ids) + 1  # a number each time it appears (see _JSON_ATOM)
            ids[-value] = value  # only to count it
        elif key == "__id__" and isinstance(value, int):
            value = ids.setdefault(value, len(ids) + 1)
        elif key == "file" and isinstance(value, str) and _ARRAY_FILE.match(value):
            number, suffix = _ARRAY_FILE.match(value).groups()  # type: ignore[union-attr]
            value = f"{ids.setdefault(int(number), len(ids) + 1)}{suffix}"
        else:
            value = _renumber(value, ids)
        out[key] = value
    return out


def _stable_zip(data: bytes) -> bytes:
    source = zipfile.ZipFile(io.BytesIO(data))
    ids: dict[int, int] = {}
    schema = _renumber(json.loads(source.read(_SCHEMA)), ids)
    members = {_SCHEMA: json.dumps(schema, indent=2).encode()}
    for name in source.namelist():
        if name == _SCHEMA:
            continue
        found = _ARRAY_FILE.match(name)
        if found is None:
            raise ValueError(f"unexpected member {name!r} in a skops file")
        number, suffix = found.groups()
        members[f"{ids.setdefault(int(number), len(ids) + 1)}{suffix}"] = source.read(name)
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED) as target:
        for name in sorted(members):
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            target.writestr(info, members[name])
    return out.getvalue()


# A process that has not imported skops yet may hand its dumps to a helper process that imports
# it meanwhile (model_writer.py). The setting is inherited by the processes forked from this one
# (a local pool's), which reach the same helper.
_writer: Callable[[Any], bytes] | None = None


def set_writer(writer: Callable[[Any], bytes] | None) -> None:
    """Route `model_bytes`, here and in processes forked from here, through `writer` (None:
    write here again)."""
    global _writer
    _writer = writer


def model_bytes(model: Any) -> bytes:
    """The skops serialisation of `model`, identical for identical fitted models."""
    if _writer is not None:
        return _writer(model)
    return model_bytes_here(model)


def model_bytes_here(model: Any) -> bytes:
    """`model_bytes` written in this process, whatever writer is set."""
    return _stable_zip(_skops_io().dumps(model))


def sha256(data: bytes) -> str:
    """Hex sha256 of `data`."""
    return hashlib.sha256(data).hexdigest()


def file_sha256(path: Path) -> str:
    """Hex sha256 of a file, read in chunks."""
    digest = hashlib.sha256()
    with path.open("rb") as source:
        for chunk in iter(lambda: source.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def untrusted_types_of(path: Path) -> list[str]:
    """Types in the file at `path` that skops would not load without being told to trust them."""
    return list(_skops_io().get_untrusted_types(file=path))


def untrusted_types(data: bytes) -> list[str]:
    """Types in the file that skops would not load without being told to trust them."""
    return list(_skops_io().get_untrusted_types(data=data))


def load_model(data: bytes) -> Any:
    """Load a model file, trusting nothing beyond skops' defaults (raises on unknown types)."""
    return _skops_io().loads(data)
