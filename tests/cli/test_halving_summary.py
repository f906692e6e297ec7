"""`foldwise select` on a halving job: its text summary says what the search cost beside the grid.

The job is the small halving request of tests/engine/test_halving.py on load_wine (ships with
scikit-learn; that file checks it against HalvingGridSearchCV), run by the real console script;
the line is checked against result v1 as the run stored it.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

from engine.test_halving import CASES  # tests/engine: the halving requests checked against sklearn

from .runner import run_foldwise, store_jobs, write_job


def test_select_prints_the_halving_searchs_fits_and_rows_against_the_grid(
    tmp_path: Path,
) -> None:
    write_job(tmp_path, CASES["wine-small"].request())  # 4 candidates, 3 outer folds
    out = run_foldwise("select", "job.json", "--workers", "2", cwd=tmp_path)
    assert out.code == 0, out.stderr
    [(job_id, status)] = store_jobs(out.home)
    assert status == "succeeded"
    with sqlite3.connect(out.home / "foldwise.sqlite") as con:
        (stored,) = con.execute("SELECT result FROM job WHERE id = ?", (job_id,)).fetchone()
    search = json.loads(stored)["search"]
    share = search["inner_train_rows"] / search["full_grid_inner_train_rows"]
    assert 0 < share < 1
    line = (
        f"Halving search: {search['fits']} fits instead of {search['full_grid_fits']} for the "
        f"full grid; training rows {share * 100:.0f}% of the grid's."
    )
    # one unwrapped line among the rest of the summary, which is unchanged around it
    assert line in out.stdout.splitlines(), out.stdout
    assert "Optimism gap" in out.stdout and "Cautions" in out.stdout
    assert "Traceback" not in out.stdout + out.stderr
