"""Pool processes that never outlive the process that started them.

Whatever a request or a job sets off, stopping foldwise must stop its fits too: a pool is shut
down by terminating its processes (units stop mid-fit; their claims are released or their
leases run out, and the store hands them out again), and each pool process asks the kernel
to kill it if its parent dies without that (SIGKILL, an OOM kill).

A pool process started through a fork server is the fork server's child, not the server's, and
the fork server does not end with the server either (the pool processes it forked hold its
"parent alive" pipe open): such a process watches the server's pid itself (`die_with`).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import logging
import os
import select
import signal
import sys
import threading
import time
from concurrent.futures import ProcessPoolExecutor

log = logging.getLogger(__name__)

_PR_SET_PDEATHSIG = 1  # linux/prctl.h


def die_with_parent() -> None:
    """In a pool process: end on SIGTERM, and be killed when the parent goes (Linux)."""
    # a forked process inherits the parent's handlers; `foldwise select` turns SIGTERM into
    # KeyboardInterrupt, which a pool process would report as a result and then carry on
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
    except OSError:  # no libc to ask: the parent's shutdown still stops the pool
        log.warning("could not ask the kernel to stop this process with its parent")


def pid_alive(pid: int) -> bool:
    """True if a process with this pid exists on this machine (perhaps not the one we mean)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's process: alive
        return True
    return True


def die_with(owner: int) -> None:
    """In a pool process: be killed as soon as process `owner` (the server) ends, however."""
    try:
        # a pidfd turns readable when the process exits: no polling, no pid reuse (Linux 5.3+)
        handle = os.pidfd_open(owner)
    except ProcessLookupError:  # the owner is already gone: so are we
        os.kill(os.getpid(), signal.SIGKILL)
        return
    except (AttributeError, OSError):  # no pidfd here: the owner's shutdown still stops us
        log.warning("cannot watch process %s; this pool process may outlive it", owner)
        return

    def watch() -> None:
        select.select([handle], [], [])
        os.kill(os.getpid(), signal.SIGKILL)  # as the kernel's parent-death signal would

    threading.Thread(target=watch, name="foldwise-owner-watch", daemon=True).start()


def stop_pool(pool: ProcessPoolExecutor, *, grace: float = 2.0) -> list[int]:
    """Shut a pool down now: cancel what waits, terminate what runs; returns the pids stopped."""
    # ProcessPoolExecutor keeps its processes in a private dict; there is no public accessor
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        if process.is_alive():
            process.terminate()
    deadline = time.monotonic() + grace
    for process in processes:
        process.join(max(0.0, deadline - time.monotonic()))
        if process.is_alive():
            process.kill()
            process.join(1.0)
    return [int(p.pid) for p in processes if p.pid is not None]
