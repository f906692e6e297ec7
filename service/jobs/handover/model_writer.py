"""A helper process that imports skops while this one fits, and writes the final model file.

Importing skops.io costs most of a second (its trusted-types list imports every scikit-learn
estimator and scans every loaded module for numpy's ufuncs), paid once per process. A long-lived
worker pays it once; `foldwise select` pays it on every job, at the very end (the final refit's
hand-over), where nothing else runs: a tiny job spent about a quarter of its wall time there. So
`foldwise select` forks a helper before it imports the engine: the helper imports skops on the
other core while this process imports scikit-learn and fits, and writes the model file when
asked (the fitted model crosses by pickle, between two processes of this same program). A
process forked from this one (a local pool's) writes its own files. The bytes are the ones
`model_bytes_here` gives in this process (tests/jobs/test_model_writer.py).

If the helper is gone (killed, out of memory), the file is written here as before.
"""

from __future__ import annotations

import gc
import logging
import multiprocessing
import sys
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from typing import Any

from service.jobs.handover import model_file
from service.processes import die_with_parent, stop_pool

log = logging.getLogger(__name__)


def helper_pays() -> bool:
    """True while this process has not imported skops: the helper would take its import aside."""
    return "skops.io" not in sys.modules


def _start_helper() -> None:
    die_with_parent()
    gc.disable()  # an import makes no garbage; the collector's passes over it only cost time
    try:
        model_file._skops_io()  # the import this helper exists to take off the job's path
    finally:
        gc.freeze()
        gc.enable()


def _ready() -> bool:
    return True


@contextmanager
def model_writer_aside() -> Iterator[None]:
    """While open, `model_file.model_bytes` in this process is written by a helper process.

    With skops already imported here it opens nothing: the block runs as without it. The helper
    is stopped on leaving, used or not (it may still be importing).
    """
    if not helper_pays():
        yield
        return
    pool = ProcessPoolExecutor(
        1, mp_context=multiprocessing.get_context("fork"), initializer=_start_helper
    )
    pool.submit(_ready)  # starts the helper (and its import) now, not at the first dump

    def write(model: Any) -> bytes:
        try:
            return pool.submit(model_file.model_bytes_here, model).result()
        except BrokenProcessPool:
            log.warning("the model-writing helper is gone; writing the model file here")
            return model_file.model_bytes_here(model)

    model_file.set_writer(write)
    try:
        yield
    finally:
        model_file.set_writer(None)
        stop_pool(pool)
