"""A fold's preprocessing fitted once and shared by every candidate scored on that fold.

A unit is one candidate over the folds of one scope, so the candidates of a fold meet only in
the process that runs their units. Each process keeps a small least-recently-used cache of
fitted preprocessing: the fitted steps before the model and the fold's train and test rows
already transformed. A candidate whose preprocessing is the same as an earlier one's (same
steps and values, same table, target, weights and fold rows) fits only its model.

The steps are deterministic functions of their inputs, and a hit hands out the very arrays a
fresh fit computed, so fold scores are bit-identical to fitting the whole pipeline per candidate
(tests/engine/test_shared_folds.py holds that).

Bounded by entries and bytes (FOLDWISE_FOLD_CACHE_MB, default 256; 0 turns sharing off): an
entry's bytes are its two matrices plus the pickled size of its fitted steps; an entry larger
than the whole budget is not kept.
"""

from __future__ import annotations

import hashlib
import os
import pickle
import threading
import weakref
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import sparse
from sklearn.base import BaseEstimator

DEFAULT_MAX_ENTRIES = 64
DEFAULT_MAX_MB = 256


def _describe(value: Any) -> Any:
    """A hashable, exact description of an unfitted estimator or one of its parameter values."""
    # repr() would do for most values, but scikit-learn shortens long reprs with "...", and two
    # different steps must never share a key
    if isinstance(value, BaseEstimator):
        params = value.get_params(deep=False)
        cls = type(value)
        return (cls.__module__, cls.__qualname__, tuple((k, _describe(params[k])) for k in params))
    if isinstance(value, (list, tuple)):
        return (type(value).__name__, tuple(_describe(v) for v in value))
    if isinstance(value, dict):
        return ("dict", tuple(sorted((str(k), _describe(v)) for k, v in value.items())))
    if isinstance(value, np.ndarray):
        digest = hashlib.sha256(np.ascontiguousarray(value).tobytes()).hexdigest()
        return ("ndarray", str(value.dtype), value.shape, digest)
    if callable(value):  # score functions of selectors, target transforms
        return ("callable", getattr(value, "__module__", ""), getattr(value, "__qualname__", ""))
    return (type(value).__name__, repr(value))


def steps_key(head: Any) -> Any:
    """What the fitted steps depend on besides their inputs: their classes and every value."""
    return _describe(head)


def _nbytes(matrix: Any) -> int:
    if sparse.issparse(matrix):
        return int(matrix.data.nbytes + matrix.indices.nbytes + matrix.indptr.nbytes)
    return int(np.asarray(matrix).nbytes)


def _frozen(matrix: Any) -> Any:
    # the kept copy is read-only so no fit can change what later candidates get
    if isinstance(matrix, np.ndarray):
        matrix.flags.writeable = False
    return matrix


def handed_out(matrix: Any) -> Any:
    """A writable copy of a kept matrix, same values and memory layout: an estimator may write
    into its input (copy_X=False) and Cython code may refuse read-only buffers."""
    if isinstance(matrix, np.ndarray):
        return matrix.copy(order="K")
    return matrix.copy()


@dataclass
class SharedFold:
    """Fitted preprocessing of one fold and the fold's rows through it (kept read-only)."""

    steps: Any
    train: Any
    test: Any
    nbytes: int


@dataclass
class _Slot:
    sources: tuple[Callable[[], Any], ...]  # weak references to the table, target and weights
    fold: SharedFold


def _reference(obj: Any) -> Callable[[], Any]:
    if obj is None:
        return lambda: None
    try:
        return weakref.ref(obj)
    except TypeError:  # not weakly referenceable: hold it (the slot's life bounds it)
        return lambda: obj


class FoldCache:
    """Least recently used, bounded by entries and bytes; per process, not shared."""

    def __init__(self, max_entries: int, max_bytes: int) -> None:
        self.max_entries = max_entries
        self.max_bytes = max_bytes
        self._slots: OrderedDict[Any, _Slot] = OrderedDict()
        self.bytes = 0
        self.peak_bytes = 0
        self.hits = 0
        self.misses = 0
        # a worker may run units on threads; a fit happens outside the lock (two threads may
        # both fit one fold's steps, and the second entry replaces the first, same bits)
        self._lock = threading.Lock()

    @property
    def enabled(self) -> bool:
        """False when the limits leave no room for an entry."""
        return self.max_entries > 0 and self.max_bytes > 0

    def get(self, key: Any, sources: tuple[Any, ...]) -> SharedFold | None:
        """The entry for `key` if its table, target and weights are still these very objects."""
        with self._lock:
            return self._get(key, sources)

    def _get(self, key: Any, sources: tuple[Any, ...]) -> SharedFold | None:
        slot = self._slots.get(key)
        # the key holds id()s: a weak reference that no longer resolves to the same object
        # means the id now belongs to another table, so the entry is stale
        if slot is None or any(
            ref() is not obj for ref, obj in zip(slot.sources, sources, strict=True)
        ):
            if slot is not None:
                self._drop(key)
            self.misses += 1
            return None
        self._slots.move_to_end(key)
        self.hits += 1
        return slot.fold

    def put(self, key: Any, sources: tuple[Any, ...], fold: SharedFold) -> None:
        """Keep `fold`, evicting the least recently used entries to stay within both bounds."""
        if not self.enabled or fold.nbytes > self.max_bytes:
            return
        with self._lock:
            self._put(key, sources, fold)

    def _put(self, key: Any, sources: tuple[Any, ...], fold: SharedFold) -> None:
        if key in self._slots:
            self._drop(key)
        self._slots[key] = _Slot(tuple(_reference(s) for s in sources), fold)
        self.bytes += fold.nbytes
        while len(self._slots) > self.max_entries or self.bytes > self.max_bytes:
            self._drop(next(iter(self._slots)))
        self.peak_bytes = max(self.peak_bytes, self.bytes)

    def _drop(self, key: Any) -> None:
        slot = self._slots.pop(key)
        self.bytes -= slot.fold.nbytes

    def clear(self) -> None:
        """Forget every entry (the counters stay)."""
        with self._lock:
            self._slots.clear()
            self.bytes = 0

    def stats(self) -> dict[str, int]:
        """Entries, bytes now and at most, hits and misses since the process started."""
        return {
            "entries": len(self._slots),
            "bytes": self.bytes,
            "peak_bytes": self.peak_bytes,
            "hits": self.hits,
            "misses": self.misses,
        }


def _limits_from_environment() -> tuple[int, int]:
    text = os.environ.get("FOLDWISE_FOLD_CACHE_MB", str(DEFAULT_MAX_MB))
    try:
        megabytes = max(0.0, float(text))
    except ValueError:
        megabytes = DEFAULT_MAX_MB
    return DEFAULT_MAX_ENTRIES, int(megabytes * 1024 * 1024)


CACHE = FoldCache(*_limits_from_environment())


def set_limits(max_entries: int, max_bytes: int) -> None:
    """Change this process's bounds (0 for either turns sharing off); empties the cache and
    starts its counters again."""
    CACHE.__init__(max_entries, max_bytes)  # type: ignore[misc]


def shared_fold(
    key: Any,
    sources: tuple[Any, ...],
    fit: Callable[[], tuple[Any, npt.NDArray[Any], npt.NDArray[Any]]],
) -> SharedFold:
    """The cached entry for `key`, or a fresh one from `fit()` -> (steps, train, test), kept."""
    if CACHE.enabled:
        found = CACHE.get(key, sources)
        if found is not None:
            return found
    steps, train, test = fit()
    if not CACHE.enabled:
        return SharedFold(steps, train, test, 0)
    size = _nbytes(train) + _nbytes(test) + len(pickle.dumps(steps, protocol=5))
    fold = SharedFold(steps, _frozen(train), _frozen(test), size)
    CACHE.put(key, sources, fold)
    return fold
