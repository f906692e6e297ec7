"""What the command line loads before it runs a command, and that lazy loading lost no command.

`foldwise --help` and every command that talks to a server must not pay for scikit-learn,
pandas or the store: those are imported by the command bodies that need them (issue 12, item 1).
Each check runs in a fresh interpreter, since this test process has imported all of them.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from .runner import FOLDWISE, REPO, TIMEOUT, base_request, cli_env, run_foldwise, write_job

# the libraries that cost a command most of its start-up; none is needed to parse arguments
HEAVY = ("sklearn", "pandas", "scipy", "sqlalchemy", "alembic", "skops", "pyarrow", "httpx")
# every command and command group README.md documents, at the top level of `foldwise`
DOCUMENTED = {
    "select", "serve", "demo", "worker", "beat", "audit", "webhook-secret", "login", "jobs",
    "result", "scores", "compare", "report", "submit", "model", "predictions", "dataset", "db",
    "token",
}  # fmt: skip


def _fresh(code: str) -> str:
    done = subprocess.run(
        [sys.executable, "-c", code], cwd=REPO, capture_output=True, text=True, timeout=TIMEOUT
    )
    assert done.returncode == 0, done.stderr
    return done.stdout


def test_importing_the_command_line_imports_no_heavy_library() -> None:
    loaded = json.loads(
        _fresh(
            "import json, sys\n"
            "import service.cli.main\n"
            "print(json.dumps(sorted({m.split('.')[0] for m in sys.modules})))\n"
        )
    )
    assert "typer" in loaded  # the check sees what the import loaded
    assert sorted(set(HEAVY) & set(loaded)) == []


def test_help_lists_every_command() -> None:
    registered = set(
        json.loads(
            _fresh(
                "import json, typer\n"
                "from service.cli.main import app\n"
                "group = typer.main.get_command(app)\n"
                "print(json.dumps(sorted(group.list_commands(None))))\n"
            )
        )
    )
    assert registered >= DOCUMENTED
    done = subprocess.run(
        [*FOLDWISE, "--help"],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
        env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"},
    )
    assert done.returncode == 0, done.stderr
    listed = {line.split()[1] for line in done.stdout.splitlines() if line.startswith("│ ")}
    assert listed >= registered, f"missing from --help: {sorted(registered - listed)}"


def test_a_job_the_store_answers_loads_neither_the_model_format_nor_the_migrations(
    workdir: Path, foldwise_home: Path
) -> None:
    job = write_job(workdir, base_request())
    first = run_foldwise("select", str(job), "--json", cwd=workdir, home=foldwise_home)
    assert first.code == 0, first.stderr
    # the same request again as a new job (--rerun: not the stored job's answer, which skips
    # scikit-learn entirely, tests/cli/test_repeat_answer.py), run by the command line inside a
    # probe that reports what it loaded
    probe = (
        "import json, sys\n"
        "from service.cli.main import app\n"
        "try:\n"
        f"    app(['select', {str(job)!r}, '--json', '--rerun'])\n"
        "except SystemExit as stop:\n"
        "    assert not stop.code, stop.code\n"
        "loaded = sorted({m.split('.')[0] for m in sys.modules})\n"
        "print(json.dumps(loaded), file=sys.stderr)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", probe],
        cwd=workdir,
        env=cli_env(foldwise_home),
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
    )
    assert done.returncode == 0, done.stderr
    second = json.loads(done.stdout)
    assert second["work"]["fits"] == 0  # every unit and the final model came from the store
    assert second["outer"] == json.loads(first.stdout)["outer"]
    loaded = set(json.loads(done.stderr.strip().splitlines()[-1]))
    assert "sklearn" in loaded  # planning the folds needs it; the probe sees real imports
    assert sorted(loaded & {"skops", "alembic"}) == []
