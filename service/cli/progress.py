"""A progress bar on stderr for long jobs, shown only when stderr is a terminal."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

from rich.console import Console
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    TextColumn,
    TimeElapsedColumn,
    TimeRemainingColumn,
)

# (done, total), as service/jobs/local/driver.py's Progress; spelled here so that drawing a bar
# does not import the job runner (and scikit-learn) into every command that shows one
ProgressCallback = Callable[[int, int], None]


@contextmanager
def unit_progress(console: Console) -> Iterator[ProgressCallback | None]:
    """Yields a (done, total) callback drawing units done, elapsed and time left, or None."""
    if not console.is_terminal:
        yield None
        return
    bar = Progress(
        TextColumn("units"),
        BarColumn(),
        MofNCompleteColumn(),
        TextColumn("elapsed"),
        TimeElapsedColumn(),
        TextColumn("left"),
        TimeRemainingColumn(),
        console=console,
        transient=True,
    )
    task = bar.add_task("units", total=None)

    def update(done: int, total: int) -> None:
        bar.update(task, completed=done, total=total)

    with bar:
        yield update
