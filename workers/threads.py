"""One BLAS/OpenMP thread per worker process.

Prefork children already split the cores between them (scale with Celery concurrency, keep
`n_jobs=1` inside a unit); a BLAS that also starts a thread per core makes them fight for the
same cores.
"""

from __future__ import annotations

import os
from typing import Any

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def cap_thread_environment() -> None:
    """Ask BLAS/OpenMP for one thread; only effective before numpy is first imported."""
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"


def cap_loaded_threadpools() -> Any:
    """Cap thread pools of libraries already loaded (threadpoolctl works after import too)."""
    from threadpoolctl import threadpool_limits

    return threadpool_limits(1)
