"""A repeated `foldwise select` is answered by the stored job, before scikit-learn is imported.

Issue 12, item 1: a job answered entirely from the store must cost a command well under 1.5 s.
The command keys a succeeded job by its request, its table's bytes, the package's source and the
library versions (service/jobs/intake/answer_key.py); the same key again prints that job's result
without planning, fitting or storing anything. These run the real console script.
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path
from typing import Any

import pytest

from .runner import (
    DATA_NAME,
    FOLDWISE,
    TIMEOUT,
    base_request,
    cli_env,
    run_foldwise,
    run_foldwise_in_process,
    store_count,
    store_jobs,
    write_job,
)

# what a run that fits must import, and the shortcut must not (nor the store's ORM)
FITTING_LIBRARIES = ("sklearn", "pandas", "scipy", "pyarrow", "sqlalchemy")


def _select_with_import_log(workdir: Path, home: Path) -> tuple[int, dict[str, Any], str]:
    """Run `foldwise select job.json --json` with Python's import-time log on stderr."""
    done = subprocess.run(
        [*FOLDWISE, "select", "job.json", "--json"],
        cwd=workdir,
        env=cli_env(home, PYTHONPROFILEIMPORTTIME="1"),
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
        check=False,
    )
    return done.returncode, json.loads(done.stdout or "null"), done.stderr


def _imported(import_log: str) -> set[str]:
    # lines read "import time: self | cumulative | <indent>package.module"
    return {
        line.rsplit("|", 1)[-1].strip().split(".")[0]
        for line in import_log.splitlines()
        if line.startswith("import time:") and "|" in line
    }


def _fitted_once(workdir: Path, home: Path) -> dict[str, Any]:
    """The base request run once on a fresh store: its result v1."""
    write_job(workdir, base_request())
    first = run_foldwise("select", "job.json", "--json", cwd=workdir, home=home)
    assert first.code == 0, first.stderr
    result: dict[str, Any] = json.loads(first.stdout)
    return result


def test_the_same_request_again_is_answered_by_the_stored_job_without_fitting_libraries(
    workdir: Path, foldwise_home: Path
) -> None:
    fitted = _fitted_once(workdir, foldwise_home)
    [(job_id, status)] = store_jobs(foldwise_home)
    assert status == "succeeded"

    code, result, log = _select_with_import_log(workdir, foldwise_home)
    assert code == 0, log
    assert result == fitted
    assert f"answered by job {job_id}" in log
    imported = _imported(log)
    assert "service" in imported  # the log does list what the command imported
    assert sorted(imported & set(FITTING_LIBRARIES)) == []
    assert store_jobs(foldwise_home) == [(job_id, "succeeded")]  # no job added


def test_other_bytes_or_rerun_make_a_new_job_that_reuses_the_stored_fold_scores(
    workdir: Path, foldwise_home: Path
) -> None:
    fitted = _fitted_once(workdir, foldwise_home)

    # the same rows with Windows line endings: the same table (content hash), other bytes
    table = workdir / DATA_NAME
    table.write_bytes(table.read_bytes().replace(b"\n", b"\r\n"))
    again = run_foldwise("select", "job.json", "--json", cwd=workdir, home=foldwise_home)
    assert again.code == 0, again.stderr
    assert "answered by job" not in again.stderr
    reused = json.loads(again.stdout)
    assert reused["dataset_hash"] == fitted["dataset_hash"]
    assert reused["outer"] == fitted["outer"]
    assert reused["work"]["units_computed"] == 0
    assert reused["work"]["units_reused"] == reused["work"]["units_total"]

    # now keyed too: the CRLF bytes are answered at once; --rerun still runs a new job
    keyed = run_foldwise("select", "job.json", "--json", cwd=workdir, home=foldwise_home)
    assert keyed.code == 0 and "answered by job" in keyed.stderr
    rerun = run_foldwise("select", "job.json", "--json", "--rerun", cwd=workdir, home=foldwise_home)
    assert rerun.code == 0, rerun.stderr
    assert "answered by job" not in rerun.stderr
    assert json.loads(rerun.stdout)["outer"] == fitted["outer"]
    assert len(store_jobs(foldwise_home)) == 3
    assert store_count(foldwise_home, "job", "answer_key IS NOT NULL") == 3


def test_a_failed_job_is_never_an_answer(workdir: Path, foldwise_home: Path) -> None:
    # (a changed request gets another key: tests/store/test_repeat_answers.py)
    # more neighbours than training rows passes the declared constraints but fails in predict
    request = base_request()
    request["families"] = [{"estimator": "KNeighborsClassifier", "fixed": {"n_neighbors": 500}}]
    write_job(workdir, request)
    failing = [run_foldwise("select", "job.json", cwd=workdir, home=foldwise_home) for _ in "ab"]
    assert [outcome.code for outcome in failing] == [1, 1]
    assert all("n_neighbors" in outcome.stderr for outcome in failing)
    assert store_count(foldwise_home, "job", "status = 'failed' AND answer_key IS NULL") == 2


def test_a_table_saved_while_the_job_ran_keys_nothing(
    workdir: Path, foldwise_home: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # The command reads the file's bytes once, for the key; whether the job saw the same bytes
    # is told by the file's stamp afterwards. A save while the job runs (here: the job's table
    # written again, same bytes, as an editor's save would) leaves the finished job unkeyed,
    # so the next run makes a new job (that reuses its fold scores) instead of trusting it.
    from service.jobs.local import driver

    write_job(workdir, base_request())
    table = workdir / DATA_NAME
    run_embedded = driver.run_embedded

    def saved_during_the_job(*args: Any, **kwargs: Any) -> Any:
        outcome = run_embedded(*args, **kwargs)
        table.write_bytes(table.read_bytes())
        return outcome

    monkeypatch.setattr(driver, "run_embedded", saved_during_the_job)
    env = {"FOLDWISE_HOME": str(foldwise_home)}
    first = run_foldwise_in_process("select", "job.json", "--json", cwd=workdir, env=env)
    assert first.code == 0, first.stderr
    assert store_count(foldwise_home, "job", "answer_key IS NULL") == 1

    monkeypatch.setattr(driver, "run_embedded", run_embedded)
    again = run_foldwise_in_process("select", "job.json", "--json", cwd=workdir, env=env)
    assert again.code == 0, again.stderr
    assert "answered by job" not in again.stderr
    assert json.loads(again.stdout)["work"]["units_computed"] == 0
    assert store_count(foldwise_home, "job", "answer_key IS NOT NULL") == 1  # this one, untouched
