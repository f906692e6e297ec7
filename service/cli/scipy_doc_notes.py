"""Leave scipy's docstrings as written while a one-shot command imports scikit-learn.

Importing scikit-learn imports scipy.stats, scipy.special, scipy.optimize and more; scipy 1.17
decorates about 470 of their functions with `xp_capabilities`, which parses each docstring
(numpydoc) and rebuilds it with a table of the array libraries the function supports. That is
about 0.17 s of every `foldwise select` that fits (whole processes, medians of seven, on the
benchmark machine; tests/benchmarks/bench_fixed_costs.py shows the command's total), and the
rebuilt docstrings are read by nobody in a command that fits and exits.

`skip_scipy_doc_notes()` replaces that decorator, before scipy's modules import it, with one
that returns the function unchanged (the original also fills a table that only scipy's own test
suite and documentation build read). The functions, their behaviour and every number they
return are scipy's: only `__doc__` keeps its text without the appended table. Long-lived
processes (the API server, Celery workers) never call it: they import once.

If scipy moves the decorator, this does nothing and the import costs what it did
(tests/cli/test_scipy_doc_notes.py checks it still takes effect on the pinned scipy).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any


def skip_scipy_doc_notes() -> bool:
    """Install the plain decorator for scipy modules imported from now on; False if scipy has
    no such decorator (a module imported before keeps its rebuilt docstrings, which is harmless)."""
    try:
        # imported here for start-up speed: only a command about to fit pays numpy's import
        from scipy._lib import _array_api
    except ImportError:
        return False
    if not callable(getattr(_array_api, "xp_capabilities", None)):
        return False

    def xp_capabilities(*_args: Any, **_capabilities: Any) -> Callable[[Any], Any]:
        return _unchanged

    _array_api.xp_capabilities = xp_capabilities
    return True


def _unchanged(function: Any) -> Any:
    return function
