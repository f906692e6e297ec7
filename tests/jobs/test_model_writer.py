"""The model file written by a helper process (service/jobs/handover/model_writer.py).

`foldwise select` hands the final model's skops dump to a helper that imported skops while the
job ran. The promise is that nothing changes but where the import is paid: the bytes (and so
`model_sha256`, equal for equal requests) are the ones this process would have written,
a dead helper costs nothing but time, a process forked from the command (a local pool's) writes
through the same helper, and a process without the helper's key is turned away before anything
it sends is read. Checks that need a process without skops run in a fresh interpreter, since
this test process has imported it.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import skops.io as sio
from cli.runner import run_foldwise
from sklearn.datasets import load_breast_cancer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline

from service.config import load_settings
from service.jobs.handover import model_file
from service.jobs.local.driver import run_embedded

REPO = Path(__file__).resolve().parents[2]
TIMEOUT = 300

# breast cancer Wisconsin ships with scikit-learn; "auto" preprocessing puts an imputer and a
# scaler before the model, so the dump holds a pipeline, not one estimator
REQUEST: dict[str, Any] = {
    "dataset": {"sample": "breast_cancer"},
    "target": "target",
    "task": "classification",
    "families": [{"estimator": "LogisticRegression", "grid": {"C": [0.1, 1.0]}}],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy"],
}

# in a fresh interpreter: a model dumped through the helper, then the same model dumped here
HELPER_THEN_HERE = """
import json, multiprocessing, sys
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from service.jobs.handover import model_file
from service.jobs.handover.model_writer import model_writer_aside

X, y = load_breast_cancer(return_X_y=True)
model = LogisticRegression(max_iter=5000).fit(X, y)
kill = sys.argv[1] == "kill"
with model_writer_aside():
    helpers = multiprocessing.active_children()
    if kill:
        for helper in helpers:
            helper.kill()
            helper.join()
    via_helper = model_file.model_bytes(model)
    skops_here = "skops.io" in sys.modules
here = model_file.model_bytes_here(model)
print(json.dumps({
    "helpers": len(helpers), "same": via_helper == here, "skops_here_before": skops_here,
    "alive_after": [p.pid for p in multiprocessing.active_children()],
}))
"""


def _fresh(*args: str) -> dict[str, Any]:
    done = subprocess.run(
        [sys.executable, "-c", HELPER_THEN_HERE, *args],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
    )
    assert done.returncode == 0, done.stderr
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def test_the_helper_writes_the_bytes_this_process_would_and_ends_with_the_block() -> None:
    seen = _fresh("use")
    assert seen["helpers"] == 1
    # the parent never imported skops: the bytes came from the helper, and equal its own dump
    assert seen["skops_here_before"] is False
    assert seen["same"] is True
    assert seen["alive_after"] == []


def test_a_dead_helper_leaves_the_file_to_this_process() -> None:
    seen = _fresh("kill")
    assert seen["helpers"] == 1
    assert seen["skops_here_before"] is True  # written here after all
    assert seen["same"] is True
    assert seen["alive_after"] == []


# in a fresh interpreter: inside the block, a forked process (as a local pool's) dumps a model;
# a process that does not know the key knocks first (argv[1] == "stranger")
FORKED_CHILD_THROUGH_HELPER = """
import json, multiprocessing, sys
from multiprocessing import AuthenticationError
from multiprocessing.connection import Client
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from service.jobs.handover import model_file
from service.jobs.handover.model_writer import model_writer_aside

X, y = load_breast_cancer(return_X_y=True)
model = LogisticRegression(max_iter=5000).fit(X, y)

def child(queue):
    written = model_file.model_bytes(model)
    queue.put((written, "skops.io" in sys.modules))

refused = None
with model_writer_aside():
    if sys.argv[1] == "stranger":
        address = model_file._writer.address
        try:
            Client(address, family="AF_UNIX", authkey=b"not the key").send(model)
            refused = False
        except (AuthenticationError, EOFError, ConnectionError):
            refused = True
    context = multiprocessing.get_context("fork")
    queue = context.Queue()
    # "crowd": four processes ask at once (the helper answers one connection at a time)
    count = 4 if sys.argv[1] == "crowd" else 1
    processes = [context.Process(target=child, args=(queue,)) for _ in range(count)]
    for process in processes:
        process.start()
    answers = [queue.get(timeout=300) for _ in processes]
    for process in processes:
        process.join(300)
    written = answers[0][0] if all(a[0] == answers[0][0] for a in answers) else None
    child_imported = any(a[1] for a in answers)
    after_child = model_file.model_bytes(model)
    parent_imported = "skops.io" in sys.modules
here = model_file.model_bytes_here(model)
print(json.dumps({
    "same": written == here, "child_imported_skops": child_imported, "refused": refused,
    "helper_still_served": after_child == here and not parent_imported,
    "exitcodes": [process.exitcode for process in processes],
}))
"""


@pytest.mark.parametrize("knock", ["none", "stranger", "crowd"])
def test_a_process_forked_from_the_command_writes_through_the_helper(knock: str) -> None:
    done = subprocess.run(
        [sys.executable, "-c", FORKED_CHILD_THROUGH_HELPER, knock],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
    )
    assert done.returncode == 0, done.stderr
    seen = json.loads(done.stdout.strip().splitlines()[-1])
    assert set(seen["exitcodes"]) == {0}
    assert seen["same"] is True  # every process got the bytes this process would write
    assert seen["child_imported_skops"] is False  # the helper wrote it
    assert seen["helper_still_served"] is True
    if knock == "stranger":
        assert seen["refused"] is True  # turned away at the handshake, nothing unpickled


def test_the_command_line_job_hands_over_the_same_model_as_an_in_process_run(
    tmp_path: Path,
) -> None:
    # `foldwise select` (a fresh process: the helper writes) against run_embedded here (skops
    # loaded in this process: written here); equal requests must give equal model files
    job = tmp_path / "job.json"
    job.write_text(json.dumps(REQUEST), encoding="utf-8")
    done = run_foldwise("select", str(job), "--json", cwd=tmp_path, home=tmp_path / "cli-home")
    assert done.code == 0, done.stderr
    from_cli = json.loads(done.stdout)
    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "here-home")})
    here = run_embedded(REQUEST, settings=settings, workers=1).result
    assert from_cli["final_pick"]["model_sha256"] == here["final_pick"]["model_sha256"]
    assert from_cli["outer"] == here["outer"]


def test_a_shared_value_and_two_equal_values_give_the_same_bytes() -> None:
    # two imputers whose missing_values are one float object, or two equal ones (what a
    # pickled copy has): the file must not tell them apart, and must still load
    X, y = load_breast_cancer(return_X_y=True)
    shared = float("nan")

    def fitted(first: float, second: float) -> Any:
        model = make_pipeline(
            SimpleImputer(missing_values=first),
            SimpleImputer(missing_values=second),
            LogisticRegression(max_iter=5000),
        )
        return model.fit(X, y)

    one_object = model_file.model_bytes_here(fitted(shared, shared))
    two_objects = model_file.model_bytes_here(fitted(float("nan"), float("nan")))
    assert one_object == two_objects
    loaded = sio.loads(one_object, trusted=sio.get_untrusted_types(data=one_object))
    assert np.array_equal(loaded.predict(X), fitted(shared, shared).predict(X))
