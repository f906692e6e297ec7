"""Where the server-side commands write: results on stdout, messages and errors on stderr."""

from __future__ import annotations

import sys
from typing import NoReturn

import typer
from rich.console import Console

from service.errors import BadInput

# wide enough for the tables when piped to a file; a terminal sets its own width
stdout = Console(width=None if sys.stdout.isatty() else 160)
stderr = Console(stderr=True)


def refuse(exc: BadInput) -> NoReturn:
    """Bad input: one sentence on stderr, exit code 2."""
    stderr.print(f"error: {exc}", markup=False, highlight=False, soft_wrap=True)
    raise typer.Exit(2)


def fail(message: str) -> NoReturn:
    """A failure that is not the caller's input: one sentence on stderr, exit code 1."""
    stderr.print(f"failed: {message}", markup=False, highlight=False, soft_wrap=True)
    raise typer.Exit(1)
