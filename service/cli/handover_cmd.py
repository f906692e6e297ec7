"""Commands that hand work to a server and take its outcome back: submit, model, predictions.

They speak to the server through the package's client (service/cli/client.py), with the URL and
token of `foldwise login` or FOLDWISE_URL / FOLDWISE_TOKEN. A 4xx is the caller's to fix (exit 2,
one sentence), a 5xx or an unreachable server is not (exit 1).
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any

import typer

from service.cli.analyst_cmd import _client, _print_json
from service.cli.output import refuse, stderr, stdout
from service.cli.progress import unit_progress
from service.errors import BadInput


def _read_request(path: Path) -> Any:
    if not path.is_file():
        raise BadInput(str(path), "no such job file; give the path of a job request JSON file.")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise BadInput(str(path), f"is not a JSON text file ({type(exc).__name__}).") from None


def submit(
    job_file: Annotated[Path, typer.Argument(metavar="JOB.json", help="A job request v1 file.")],
    wait: Annotated[bool, typer.Option("--wait", help="Follow the job until it ends.")] = False,
    idempotency_key: Annotated[
        str | None,
        typer.Option(help="Repeat the submission safely: the same key names the same job."),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print the job as JSON.")] = False,
) -> None:
    """Submit a job to the server; with --wait, show its progress and print its result."""
    from service.cli.render import print_result

    try:
        request = _read_request(job_file)
    except BadInput as exc:
        refuse(exc)
    with _client() as client:
        job = client.submit(request, idempotency_key=idempotency_key)
        stderr.print(f"job {job['id']} {job['status']}", markup=False)
        if wait:
            with unit_progress(stderr) as progress:
                job = client.wait(job["id"], progress)
    if wait and job["status"] != "succeeded":
        detail = f": {job['error']}" if job.get("error") else ""
        refuse(BadInput("JOB", f"job {job['id']} ended {job['status']}{detail}."))
    if as_json:
        _print_json(job)
    elif wait and job.get("result") and job.get("kind", "selection") == "selection":
        print_result(stdout, job["result"], job["id"])
    else:
        sys.stdout.write(job["id"] + "\n")


def model(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id.")],
    output: Annotated[
        Path | None, typer.Option("-o", "--output", help="Where to write the model file.")
    ] = None,
    card: Annotated[
        bool, typer.Option("--card", help="Print the model card (Markdown) instead.")
    ] = False,
    as_json: Annotated[bool, typer.Option("--json", help="With --card: the card as JSON.")] = False,
) -> None:
    """Download the final model (skops' format, sha256 checked) or print its model card."""
    if not card and output is None:
        refuse(BadInput("-o", "give a file to write the model to, e.g. -o model.skops."))
    with _client() as client:
        if card:
            text = (
                json.dumps(client.model_card(job_id), indent=2) + "\n"
                if as_json
                else client.model_card_markdown(job_id)
            )
            if output is None:
                sys.stdout.write(text)
            else:
                output.write_text(text, encoding="utf-8")
            return
        assert output is not None
        digest = client.download_model(job_id, output)
    stderr.print(f"wrote {output} (sha256 {digest})", markup=False)
    sys.stdout.write(digest + "\n")


def predictions(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="A job id.")],
    output: Annotated[
        Path | None, typer.Option("-o", "--output", help="A .csv or .parquet file.")
    ] = None,
) -> None:
    """The out-of-fold predictions of the outer test folds, as CSV (stdout) or a file."""
    suffix = "parquet" if output is not None and output.suffix == ".parquet" else "csv"
    with _client() as client:
        chunks = client.stream(f"/v1/jobs/{job_id}/predictions.{suffix}")
        if output is None:
            for chunk in chunks:
                sys.stdout.buffer.write(chunk)
            sys.stdout.flush()
            return
        with output.open("wb") as out:
            for chunk in chunks:
                out.write(chunk)
    stderr.print(f"wrote {output}", markup=False)


COMMANDS: tuple[Callable[..., None], ...] = (submit, model, predictions)
