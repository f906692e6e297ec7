"""`foldwise select` skips scipy's docstring rebuild on import, and nothing else changes.

Each side runs in a fresh interpreter (this test process has imported scipy long ago): one
installs the plain decorator first (service/cli/scipy_doc_notes.py), the other imports scipy as
any program does. The patched side must really skip the rebuild on the pinned scipy (else the
start-up saving is gone unnoticed), and every number must be the same: a nested
cross-validation with scikit-learn on iris (ships with scikit-learn) and scipy functions that
carry the decorator, compared exactly.
"""

from __future__ import annotations

import json
import subprocess
import sys

from .runner import REPO, TIMEOUT

# What both sides compute: the outer scores of GridSearchCV inside cross_validate, a logistic
# regression's coefficients (scipy.optimize's L-BFGS-B) and two scipy.stats functions that
# scipy 1.17 decorates with xp_capabilities.
WORK = """
import json, sys
import numpy as np
import scipy.stats
from sklearn.datasets import load_iris
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_validate

X, y = load_iris(return_X_y=True)
search = GridSearchCV(
    LogisticRegression(max_iter=1000), {"C": [0.1, 1.0]},
    cv=StratifiedKFold(3, shuffle=True, random_state=1),
)
outer = cross_validate(search, X, y, cv=StratifiedKFold(3, shuffle=True, random_state=2))
model = LogisticRegression(max_iter=1000).fit(X, y)
t = scipy.stats.ttest_ind(X[y == 0, 0], X[y == 1, 0])
json.dump({
    "installed": INSTALLED,
    "note": "Array API Standard Support" in (scipy.stats.ttest_ind.__doc__ or ""),
    "doc_kept": bool(scipy.stats.ttest_ind.__doc__),
    "outer": outer["test_score"].tolist(),
    "coef": model.coef_.ravel().tolist(),
    "t": [float(t.statistic), float(t.pvalue)],
    "zscore": scipy.stats.zscore(X[:, 1]).tolist(),
}, sys.stdout)
"""


def _run(patched: bool) -> dict:
    prelude = (
        "from service.cli.scipy_doc_notes import skip_scipy_doc_notes\n"
        "INSTALLED = skip_scipy_doc_notes()\n"
        if patched
        else "INSTALLED = None\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", prelude + WORK],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
    )
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def test_the_rebuild_is_skipped_and_every_number_is_the_same() -> None:
    plain, patched = _run(patched=False), _run(patched=True)
    assert plain["note"] is True  # scipy rebuilds the docstring when left alone
    assert patched["installed"] is True
    assert patched["note"] is False  # the rebuild was skipped on the pinned scipy
    assert patched["doc_kept"] is True  # the docstring scipy wrote is still there
    for key in ("outer", "coef", "t", "zscore"):
        assert patched[key] == plain[key], key


def test_too_late_is_harmless() -> None:
    # scipy.stats already imported (as in a test process or a long-lived worker): installing
    # afterwards leaves what was imported as it was and reports the decorator was replaced
    done = subprocess.run(
        [
            sys.executable,
            "-c",
            "import scipy.stats\n"
            "from service.cli.scipy_doc_notes import skip_scipy_doc_notes\n"
            "print(skip_scipy_doc_notes(), "
            "'Array API Standard Support' in scipy.stats.ttest_ind.__doc__)\n",
        ],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "True"]
