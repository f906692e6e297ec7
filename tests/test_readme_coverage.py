"""The README quotes `quick`'s measured coverage exactly as the job report does."""

from __future__ import annotations

from pathlib import Path

from service.cv.intervals import NESTED_COVERAGE, QUICK_COVERAGE, interval_words

README = Path(__file__).resolve().parent.parent / "README.md"


def test_readme_quotes_the_coverage_constant() -> None:
    """One figure, one place: the README's wording equals service.cv.intervals.QUICK_COVERAGE."""
    text = " ".join(README.read_text(encoding="utf-8").split())
    assert QUICK_COVERAGE in text
    assert NESTED_COVERAGE in text


def test_interval_words_name_level_and_method() -> None:
    """The level in percent and the method in words, as the report prints them."""
    assert interval_words({"method": "quick", "level": 0.9}) == (
        "90% interval, corrected resampled t — no extra fits"
    )
    assert interval_words({"method": "quick", "level": 0.95}).startswith("95% interval")
