"""`foldwise dataset inspect`: content hash, rows and column kinds, the same for CSV and Parquet."""

from __future__ import annotations

import json
import re
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import pandas as pd
import pytest

from .runner import REPO, Outcome, run_foldwise, run_foldwise_in_process

DEMO_CSV = "demo_data/pump_failures.csv"


@pytest.fixture(scope="module")
def inspected(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Outcome]:
    """The demo table inspected as CSV (relative to the repo) and as Parquet, and a missing file."""
    folder = tmp_path_factory.mktemp("inspect")
    parquet = folder / "pump_failures.parquet"
    pd.read_csv(REPO / DEMO_CSV).to_parquet(parquet, index=False)
    runs = {
        "csv": (("dataset", "inspect", DEMO_CSV, "--json"), REPO),
        "parquet": (("dataset", "inspect", str(parquet), "--json"), folder),
        "missing": (("dataset", "inspect", "no_such_table.csv", "--json"), folder),
    }
    with ThreadPoolExecutor(len(runs)) as pool:
        futures = {
            name: pool.submit(run_foldwise, *argv, cwd=cwd, home=folder / "home")
            for name, (argv, cwd) in runs.items()
        }
        return {name: future.result() for name, future in futures.items()}


def _description(out: Outcome) -> dict[str, Any]:
    assert out.code == 0, out.stderr
    parsed: dict[str, Any] = json.loads(out.stdout)
    return parsed


def test_csv_description(inspected: dict[str, Outcome]) -> None:
    description = _description(inspected["csv"])
    assert re.fullmatch(r"[0-9a-f]{64}", description["content_hash"])
    assert description["n_rows"] == 1500
    kinds = {col["name"]: col["kind"] for col in description["columns"]}
    assert kinds["site"] == "categorical"
    assert kinds["age_years"] == "numeric"
    assert kinds["failed_within_30d"] == "numeric"
    assert len(kinds) == description["n_columns"] == 13


def test_parquet_copy_has_the_same_content_hash(inspected: dict[str, Outcome]) -> None:
    # docs/store.md: the content hash is format-independent (same values, order, names, types)
    csv, parquet = _description(inspected["csv"]), _description(inspected["parquet"])
    assert parquet["content_hash"] == csv["content_hash"]
    assert parquet["columns"] == csv["columns"]


def test_missing_file_is_refused_in_one_sentence(inspected: dict[str, Outcome]) -> None:
    out = inspected["missing"]
    assert out.code == 2
    assert out.stdout == ""
    assert "Traceback" not in out.stderr
    assert out.stderr.endswith("\n") and out.stderr.count("\n") == 1, out.stderr
    assert out.stderr.startswith("error: PATH.path: ") or out.stderr.startswith("error: PATH: ")
    assert "no_such_table.csv" in out.stderr
    assert out.stderr.rstrip().endswith(".")


def test_inspect_shows_how_to_read_a_column_otherwise(
    tmp_path_factory: pytest.TempPathFactory,
) -> None:
    folder = tmp_path_factory.mktemp("hints")
    rows = "".join(f"{m:02d}/15/2024,{m % 3},{m * 1.5}\n" for m in range(1, 13))
    (folder / "dated.csv").write_text("when,code,x\n" + rows)
    # the command's answer is under test here, not the process start (the fixture above runs
    # the console script): in this process, as the same command line
    env = {"FOLDWISE_HOME": str(folder / "h")}
    as_json = run_foldwise_in_process(
        "dataset", "inspect", "dated.csv", "--json", cwd=folder, env=env
    )
    description = _description(as_json)
    hints = {c["name"]: c["hint"] for c in description["columns"]}
    assert '"format": "%m/%d/%Y"' in hints["when"]
    assert hints["x"] is None
    assert '"columns"' in description["column_types"]
    text = run_foldwise_in_process("dataset", "inspect", "dated.csv", cwd=folder, env=env)
    assert text.code == 0, text.stderr
    assert "%m/%d/%Y" in text.stdout and "overrides these kinds" in text.stdout
