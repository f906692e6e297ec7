"""One BLAS/OpenMP thread per worker process.

Prefork children already split the cores between them (scale with Celery concurrency, keep
`n_jobs=1` inside a unit); a BLAS that also starts a thread per core makes them fight for the
same cores. The environment side (OMP_NUM_THREADS and the like, read only before numpy is
first imported) is set by whoever starts the worker: `foldwise workers`
(service/cli/workers_cmd.py) and deploy/Containerfile.
"""

from __future__ import annotations

from typing import Any


def cap_loaded_threadpools() -> Any:
    """Cap thread pools of libraries already loaded (threadpoolctl works after import too)."""
    from threadpoolctl import threadpool_limits

    return threadpool_limits(1)
