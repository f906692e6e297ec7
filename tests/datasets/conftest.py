"""Shared checks for the dataset tests."""

from __future__ import annotations

import re
from collections.abc import Callable

import pytest

from service.errors import BadInput


def _check_bad_input(error: BadInput, field: str) -> None:
    assert error.field == field
    message = error.message
    # One sentence: ends in a full stop, no line breaks, no second sentence after it.
    assert message.endswith("."), message
    assert "\n" not in message, message
    assert re.search(r"[.!?]\s+\S", message) is None, message
    assert "Traceback" not in message
    # Raised fresh or `from None`, so no pandas or pyarrow chain is printed with it.
    assert error.__cause__ is None
    assert error.__context__ is None or error.__suppress_context__


@pytest.fixture
def check_bad_input() -> Callable[[BadInput, str], None]:
    """Assert that a BadInput names `field` and says one clear sentence without a chained trace."""
    return _check_bad_input
