"""The `foldwise` command line: select, dataset inspect, db upgrade, serve, token, demo."""

from __future__ import annotations

import gc
import json
import os
import signal
import sys
from pathlib import Path
from typing import Annotated, Any

import typer

from service.cli import analyst_cmd, handover_cmd, workers_cmd
from service.cli.audit_cmd import audit
from service.cli.demo_cmd import demo
from service.cli.output import fail, refuse, stderr, stdout
from service.cli.server_cmd import serve
from service.cli.token_cmd import token_app
from service.cli.webhook_cmd import webhook_secret
from service.config import load_settings
from service.errors import BadInput

app = typer.Typer(
    help="Nested cross-validation: pick a model and report an honest estimate of how it will do.",
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    add_completion=False,
)
# `foldwise select` stops within this many seconds of SIGTERM or Ctrl-C with --workers > 1:
# the pool's processes get 2 s to go before they are killed (service/processes.py). With one
# worker, or a job too small for a pool (pool_workers in service/jobs/local/driver.py), the fit
# in progress runs in this process and ends first.
SELECT_STOP_GRACE = 5
dataset_app = typer.Typer(help="Registered tables.", no_args_is_help=True)
db_app = typer.Typer(help="The store's schema.", no_args_is_help=True)
app.add_typer(dataset_app, name="dataset")
app.add_typer(db_app, name="db")


def _read_job_file(path: Path) -> Any:
    if not path.is_file():
        raise BadInput(str(path), "no such job file; give the path of a job request JSON file.")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise BadInput(
            str(path), "is not a UTF-8 text file; give a job request JSON file."
        ) from None
    except json.JSONDecodeError as exc:
        raise BadInput(
            str(path), f"is not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})."
        ) from None


def _print_outcome(result: dict[str, Any], job_id: str, *, as_json: bool) -> None:
    # imported here for start-up speed: `--help` and the server commands never render a result
    from service.cli.curve_render import print_curve
    from service.cli.render import print_result

    if as_json:
        sys.stdout.write(json.dumps(result, allow_nan=False) + "\n")
    elif result.get("kind") == "learning_curve":
        print_curve(stdout, result, job_id)
    else:
        print_result(stdout, result, job_id)


def _select(job: Any, *, as_json: bool, workers: int, base_dir: Path, rerun: bool) -> None:
    if workers < 1:
        raise BadInput("--workers", "must be at least 1.")
    settings = load_settings()
    # imported here for start-up speed: a repeated request is answered before scikit-learn loads
    from service.jobs.intake.answer_key import keyed, unchanged_since
    from service.store.repeat_answers import find_answer, keep_answer

    key = keyed(job, base_dir=base_dir, data_roots=settings.data_roots)
    stored = None if key is None or rerun else find_answer(settings.database_url, key.value)
    if stored is not None:
        stderr.print(
            f"answered by job {stored.job_id} (finished {stored.finished_at}): the same request, "
            "table bytes, code and libraries; nothing was fitted and no job was "
            "added. Give --rerun to run it as a new job.",
            markup=False,
        )
        _print_outcome(stored.result, stored.job_id, as_json=as_json)
        return

    # imported here for start-up speed: only a job that runs writes a model file
    from service.cli.scipy_doc_notes import skip_scipy_doc_notes
    from service.jobs.handover.model_writer import model_writer_aside

    # before the helper forks, so its import of scikit-learn skips the docstrings' rebuild too
    skip_scipy_doc_notes()

    # the helper imports skops on the other core from now on, while this process imports the
    # engine and fits (the model file is written last, and skops' import is most of a second)
    with model_writer_aside():
        # Importing the engine allocates hundreds of thousands of objects, none of them garbage:
        # with the collector off meanwhile, its passes over them (~0.5 s of a tiny job's wall,
        # tests/benchmarks/bench_fixed_costs.py) are not paid. The libraries live until exit:
        # frozen, out of the collector's reach, full collections during the run no longer walk
        # them either (gc.freeze, Python's gc docs).
        gc.disable()
        try:
            # imported here for start-up speed: only a job that runs needs the engine
            from service.cli.progress import unit_progress
            from service.jobs.local.driver import JobFailed, run_embedded
        finally:
            gc.freeze()
            gc.enable()
        try:
            with unit_progress(stderr) as progress:
                outcome = run_embedded(
                    job, settings=settings, workers=workers, base_dir=base_dir, progress=progress
                )
        except JobFailed as exc:
            fail(str(exc))
    # kept only if the table's file was not written or replaced since the key read its bytes
    if key is not None and unchanged_since(key, base_dir=base_dir, data_roots=settings.data_roots):
        keep_answer(settings.database_url, outcome.job_id, key.value)
    _print_outcome(outcome.result, outcome.job_id, as_json=as_json)
    # and the run's objects too: the interpreter's last collection at exit would otherwise walk
    # them all (~0.3 s with scikit-learn and pandas loaded); exit itself stays the normal one
    gc.freeze()


@app.command()
def select(
    job_file: Annotated[Path, typer.Argument(metavar="JOB.json", help="A job request v1 file.")],
    as_json: Annotated[
        bool, typer.Option("--json", help="Print result v1 alone on stdout.")
    ] = False,
    workers: Annotated[int, typer.Option(help="Local worker processes.")] = 1,
    rerun: Annotated[
        bool,
        typer.Option(
            "--rerun",
            help="Run as a new job even when a stored job answered the same request on the "
            "same file bytes (its stored fold scores are still reused).",
        ),
    ] = False,
) -> None:
    """Run a selection job here (embedded mode) and print its result.

    A request answered before, on the same table bytes with the same code and libraries, is
    answered by that job at once, without a fit and without a new job.
    """
    # SIGTERM stops a run as Ctrl-C does: the job is marked cancelled and the pool stopped
    signal.signal(signal.SIGTERM, signal.default_int_handler)
    try:
        _select(
            _read_job_file(job_file),
            as_json=as_json,
            workers=workers,
            base_dir=Path.cwd(),
            rerun=rerun,
        )
    except BadInput as exc:
        refuse(exc)
    except KeyboardInterrupt:
        stderr.print("failed: interrupted; the job is marked cancelled.", markup=False)
        sys.stdout.flush()
        sys.stderr.flush()
        # The job is cancelled and the pool stopped; skip the interpreter's teardown of
        # scikit-learn, pandas and pyarrow, which takes seconds, so a stop is prompt.
        os._exit(1)


@dataset_app.command("inspect")
def dataset_inspect(
    path: Annotated[Path, typer.Argument(help="A CSV or Parquet file.")],
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Content hash, rows, columns and inferred column kinds of a table."""
    from service.cli.render import print_description
    from service.datasets.sources import DatasetSource, describe_table, load_table

    try:
        table = load_table(DatasetSource(path=str(path)), base_dir=Path.cwd())
    except BadInput as exc:
        refuse(BadInput("PATH", exc.message))
    description = describe_table(table)
    if as_json:
        sys.stdout.write(json.dumps(description) + "\n")
    else:
        print_description(stdout, description)


@db_app.command("upgrade")
def db_upgrade() -> None:
    """Bring the store's schema to the newest revision (run before starting services)."""
    from service.store.db import upgrade_database

    settings = load_settings()
    upgrade_database(settings.database_url)
    stderr.print(f"store at {settings.database_url} is up to date", markup=False)


# The other commands live in their own modules; main only registers them.
app.command()(serve)
app.command()(demo)
app.add_typer(token_app, name="token")
app.command()(workers_cmd.worker)
app.command()(workers_cmd.beat)
app.command()(audit)
app.command("webhook-secret")(webhook_secret)
for _command in (*analyst_cmd.COMMANDS, *handover_cmd.COMMANDS):
    app.command()(_command)

if __name__ == "__main__":  # pragma: no cover
    app()
