"""Analysts' commands against a server: login, jobs, result, scores, compare, report.

Readable tables on a terminal, `--json` for scripts. A 4xx answer is the caller's to fix (exit 2,
the problem's detail in one sentence); a 5xx or an unreachable server is not (exit 1).
"""

from __future__ import annotations

import json
import sys
import webbrowser
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from enum import StrEnum
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.table import Table

from service.cli.output import fail, refuse, stderr, stdout
from service.errors import BadInput

if TYPE_CHECKING:
    from service.cli.client import Client

SCORE_PAGE = 1000


class ScoreFormat(StrEnum):
    """How `foldwise scores` writes."""

    csv = "csv"
    json = "json"


@contextmanager
def _client() -> Iterator[Client]:
    # imported here for start-up speed: only commands that talk to a server load httpx
    from service.cli.client import Client, ServerFailed, load_config

    try:
        with Client(load_config()) as client:
            yield client
    except BadInput as exc:
        refuse(exc)
    except ServerFailed as exc:
        fail(str(exc))


def _print_json(data: Any) -> None:
    sys.stdout.write(json.dumps(data, allow_nan=False) + "\n")


JsonOption = Annotated[bool, typer.Option("--json", help="Print JSON on stdout, nothing else.")]


def login(
    url: Annotated[str, typer.Option(help="The server, e.g. http://127.0.0.1:8000.")],
    token: Annotated[str, typer.Option(help="A token from `foldwise token create`.")],
) -> None:
    """Remember a server and token in FOLDWISE_HOME/client.json (readable by you only)."""
    # imported here for start-up speed, as in _client
    from service.cli.client import ClientConfig, save_config

    try:
        path = save_config(ClientConfig(url, token))
    except BadInput as exc:
        refuse(exc)
    stderr.print(f"saved {path}", markup=False)


def jobs(
    dataset_hash: Annotated[str | None, typer.Option(help="Only jobs on this table.")] = None,
    status: Annotated[str | None, typer.Option(help="queued, running, succeeded, ...")] = None,
    estimator: Annotated[str | None, typer.Option(help="Only jobs with this family.")] = None,
    limit: Annotated[int, typer.Option(help="At most this many, newest first.")] = 50,
    as_json: JsonOption = False,
) -> None:
    """List jobs the token may see, newest first."""
    with _client() as client:
        page = client.get(
            "/v1/jobs",
            dataset_hash=dataset_hash,
            status=status,
            estimator=estimator,
            limit=limit,
        )
    if as_json:
        _print_json(page)
        return
    table = Table(title=f"{len(page['data'])} of {page['count']} jobs")
    for column in ("id", "status", "dataset", "team", "created", "progress"):
        table.add_column(column)
    for job in page["data"]:
        progress = job["progress"]
        table.add_row(
            job["id"],
            job["status"],
            job["dataset_hash"][:12],
            job["team"],
            job["created_at"][:19].replace("T", " "),
            f"{progress['units_done']}/{progress['units_total']}",
        )
    stdout.print(table)


def result(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id.")],
    as_json: JsonOption = False,
    local: Annotated[
        bool,
        typer.Option(
            "--local",
            help="Read the job from this machine's store (where `foldwise select` keeps it); "
            "the default when no server is named.",
        ),
    ] = False,
) -> None:
    """A job's result v1: the estimate, the picks, the optimism gap, the cautions."""
    from service.cli.local_store import local_job, server_configured
    from service.cli.render import print_result

    if local or not server_configured():
        try:
            job = local_job(job_id)
        except BadInput as exc:
            refuse(exc)
    else:
        with _client() as client:
            job = client.get(f"/v1/jobs/{job_id}")
    if job["status"] != "succeeded":
        detail = f": {job['error']}" if job.get("error") else ""
        refuse(BadInput("JOB", f"job {job_id} is {job['status']}, so it has no result{detail}."))
    if as_json:
        _print_json(job["result"])
    else:
        print_result(stdout, job["result"], job_id)


def _score_pages(client: Client, job_id: str) -> Iterator[list[dict[str, Any]]]:
    after = 0
    while True:
        page = client.get(f"/v1/jobs/{job_id}/fold-scores", after=after, limit=SCORE_PAGE)
        if page["data"]:
            yield page["data"]
        if page["next_after"] is None:
            return
        after = page["next_after"]


def scores(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id.")],
    output: Annotated[ScoreFormat, typer.Option("--format", help="csv or json.")] = ScoreFormat.csv,
) -> None:
    """Every fold score of a job, streamed to stdout as CSV or a JSON array."""
    out = sys.stdout
    with _client() as client:
        if output is ScoreFormat.csv:
            # the server's own CSV, passed through as it arrives
            for chunk in client.stream(f"/v1/jobs/{job_id}/fold-scores.csv"):
                out.buffer.write(chunk)
            out.flush()
            return
        out.write("[")
        first = True
        for page in _score_pages(client, job_id):
            for row in page:
                out.write(("" if first else ",\n") + json.dumps(row, allow_nan=False))
                first = False
        out.write("]\n")


def _fmt(value: float | None, spec: str = ".4f") -> str:
    return "-" if value is None else format(value, spec)


def compare(
    first: Annotated[str, typer.Argument(metavar="A", help="The first job id.")],
    second: Annotated[str, typer.Argument(metavar="B", help="The second job id.")],
    as_json: JsonOption = False,
) -> None:
    """Compare two jobs on one dataset: per-fold differences and a corrected t-test."""
    # deferred for start-up: service.cv.intervals loads scipy, which `foldwise --help` must not
    from service.cv.intervals import interval_words

    with _client() as client:
        comparison = client.get("/v1/compare", jobs=f"{first},{second}")
    if as_json:
        _print_json(comparison)
        return
    stdout.print(comparison["statement"], highlight=False, soft_wrap=True)
    table = Table(title=f"{first} minus {second}")
    for column in ("metric", "A mean", "B mean", "difference", "t", "df", "p (two-sided)"):
        table.add_column(column, justify="left" if column == "metric" else "right")
    for row in comparison["metrics"]:
        test = row["test"]
        table.add_row(
            row["metric"],
            _fmt(row["left_mean"]),
            _fmt(row["right_mean"]),
            _fmt(test["mean_difference"], "+.4f"),
            _fmt(test["t"], ".3f"),
            _fmt(test["df"], ".1f"),
            _fmt(test["p_value"], ".3f"),
        )
    stdout.print(table)
    # the interval on each difference, one unwrapped line a metric (as the job summary does)
    for row in comparison["metrics"]:
        band = row.get("interval")
        line = (
            f"{row['metric']}: {interval_words(band)} on the difference: "
            f"{band['lower']:+.4f} to {band['upper']:+.4f}"
            if band
            else f"{row['metric']}: no interval on the difference (neither job's values vary)"
        )
        stdout.print(line, soft_wrap=True, highlight=False, markup=False)
    for caveat in comparison["caveats"]:
        stdout.print(f"  - {caveat}", highlight=False, soft_wrap=True)


def report(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id.")],
    open_page: Annotated[bool, typer.Option("--open", help="Open it in a web browser.")] = False,
) -> None:
    """Print the address of a job's report page (after checking the job is there)."""
    with _client() as client:
        client.get(f"/v1/jobs/{job_id}")
        url = f"{client.config.url}/reports/jobs/{job_id}"
    sys.stdout.write(url + "\n")
    if open_page and not webbrowser.open(url):
        fail(f"no web browser could be started; open {url} yourself.")


COMMANDS: tuple[Callable[..., None], ...] = (login, jobs, result, scores, compare, report)
