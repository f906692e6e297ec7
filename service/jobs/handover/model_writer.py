"""A helper process that imports skops while the job fits, and writes the final model file.

Importing skops.io costs most of a second (its trusted-types list imports every scikit-learn
estimator and scans every loaded module for numpy's ufuncs), paid once per process. A long-lived
worker pays it once; `foldwise select` pays it on every job, at the very end (the final refit's
hand-over), where nothing else runs: a tiny job spent about a quarter of its wall time there. So
`foldwise select` forks a helper before it imports the engine: the helper imports skops on the
other core while the command imports scikit-learn and fits, then serves dumps on a local socket
until the command ends. The fitted model crosses by pickle, between processes of this same
program. The processes of a local pool, forked from the command later, send their dumps there
too (a pool process writes the final model of a job run on two workers; it would otherwise
import skops itself, about half a second at the job's tail). The bytes are the ones
`model_bytes_here` gives in the process itself (tests/jobs/test_model_writer.py).

The socket is in Linux's abstract namespace (no file to clean up; it goes with the helper) and
each connection proves it knows a random key (multiprocessing.connection's handshake). If the
helper is gone (killed, out of memory) or cannot be reached, the file is written where it is
asked for, as before.
"""

from __future__ import annotations

import gc
import logging
import multiprocessing
import os
import signal
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from multiprocessing import AuthenticationError
from multiprocessing.connection import Client, Connection, Listener
from typing import Any

from service.jobs.handover import model_file
from service.processes import die_with_parent

log = logging.getLogger(__name__)
# connections waiting while the helper serves one: the command and its pool processes
_BACKLOG = 8


def helper_pays() -> bool:
    """True while this process has not imported skops: the helper would take its import aside.

    Linux only: the helper's socket lives in the abstract namespace.
    """
    return "skops.io" not in sys.modules and sys.platform.startswith("linux")


def _serve(listener: Listener) -> None:
    die_with_parent()
    # Ctrl-C reaches the terminal's whole process group: the command stops this helper itself
    # when it has cancelled the job (a KeyboardInterrupt here would print a traceback)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    gc.disable()  # an import makes no garbage; the collector's passes over it only cost time
    try:
        model_file._skops_io()  # the import this helper exists to take off the job's path
    finally:
        gc.freeze()
        gc.enable()
    while True:
        try:
            connection = listener.accept()
        except (AuthenticationError, EOFError, ConnectionError):
            continue  # a process without the key, or one gone mid-handshake: serve the next
        with connection:
            _answer(connection)


def _answer(connection: Connection) -> None:
    try:
        connection.send_bytes(model_file.model_bytes_here(connection.recv()))
    except Exception:
        # closed unanswered (an asker gone, a model skops cannot write): the asker, if still
        # there, writes the file itself and meets any error of the dump where it is reported
        return


class _SocketWriter:
    """`model_bytes` through the helper, from the command or any process forked from it."""

    def __init__(self, address: str, key: bytes) -> None:
        self.address = address
        self.key = key

    def __call__(self, model: Any) -> bytes:
        try:
            with Client(self.address, family="AF_UNIX", authkey=self.key) as connection:
                connection.send(model)
                return connection.recv_bytes()
        except (OSError, EOFError) as exc:
            log.warning(
                "the model-writing helper did not answer (%s); writing the model file here",
                type(exc).__name__,
            )
            return model_file.model_bytes_here(model)


@contextmanager
def model_writer_aside() -> Iterator[None]:
    """While open, `model_file.model_bytes` here and in processes forked from here is written
    by a helper process.

    With skops already imported here it opens nothing: the block runs as without it. The helper
    is stopped on leaving, used or not (it may still be importing).
    """
    if not helper_pays():
        yield
        return
    key = os.urandom(32)  # never in the socket's name: local users can list those
    # "\0..." names a socket in the abstract namespace; the pid and a token make it this run's
    address = f"\0foldwise-model-writer-{os.getpid()}-{os.urandom(8).hex()}"
    listener = Listener(address, family="AF_UNIX", backlog=_BACKLOG, authkey=key)
    helper = multiprocessing.get_context("fork").Process(
        target=_serve, args=(listener,), name="foldwise-model-writer", daemon=True
    )
    try:
        helper.start()  # its import starts now, not at the first dump
    finally:
        # only the helper keeps the socket open: once it is gone, a dump is refused at once
        # (and falls back to writing here) instead of waiting on a socket nobody serves
        listener.close()
    model_file.set_writer(_SocketWriter(address, key))
    try:
        yield
    finally:
        model_file.set_writer(None)
        helper.kill()
        helper.join()
