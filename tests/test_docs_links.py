"""Every file a comment, docstring or Markdown page names exists in the repository.

Comments once cited notes that lived outside the repository; a newcomer following them found
nothing. This reads the comments and docstrings of every Python file under service/, workers/ and
tests/, and the Markdown pages (README.md, DEVELOPERS.md, docs/ and those under the scanned
folders), and checks two kinds of names:
- a path that starts at a top-level folder of the repository (`docs/store.md`,
  `service/cv/units.py`, `tests/benchmarks/`): it must exist from the repository root. A glob
  (`service/datasets/sql_*`) must match something; `service/cv/units.check_finite` names a module
  and something in it; a folder the .gitignore lists (`tests/output/`) is made by the tests;
- a bare Markdown file name (`README.md`): it must exist beside the file that names it or at the
  repository root.
Code (string literals that are not docstrings) is not read: routes such as `.../model-card.md`
are URLs, not files.
"""

from __future__ import annotations

import ast
import io
import re
import tokenize
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TOP_FOLDERS = ("service", "workers", "tests", "docs", "deploy", "demo_data")
SCANNED_FOLDERS = ("service", "workers", "tests", "docs")
ROOT_PAGES = ("README.md", "DEVELOPERS.md")

# A name is only read where it starts: not inside a URL path, a placeholder or a longer word.
_NOT_AFTER = r"(?<![\w/.{}<>*$-])"
_REPO_PATH = re.compile(_NOT_AFTER + r"((?:" + "|".join(TOP_FOLDERS) + r")/[\w./*-]*)")
_MARKDOWN_NAME = re.compile(_NOT_AFTER + r"([\w-]+\.md)(?![\w/])")


def python_prose(source: str) -> Iterator[tuple[int, str]]:
    """(line, text) of every comment and docstring in a Python source."""
    for token in tokenize.generate_tokens(io.StringIO(source).readline):
        if token.type == tokenize.COMMENT:
            yield token.start[0], token.string
    tree = ast.parse(source)
    for node in ast.walk(tree):
        if isinstance(node, ast.Module | ast.ClassDef | ast.FunctionDef | ast.AsyncFunctionDef):
            text = ast.get_docstring(node, clean=False)
            if text is not None:
                yield node.body[0].lineno, text


def named_files(text: str) -> Iterator[str]:
    """Repository paths and bare Markdown names in a piece of prose."""
    for match in _REPO_PATH.finditer(text):
        yield match.group(1).rstrip(".")
    for match in _MARKDOWN_NAME.finditer(text):
        yield match.group(1)


def _generated_folders() -> tuple[str, ...]:
    # folders the tests write and git ignores, e.g. tests/output/ (screenshots)
    lines = (ROOT / ".gitignore").read_text(encoding="utf-8").splitlines()
    return tuple(line.strip() for line in lines if line.strip().startswith(TOP_FOLDERS))


def _repo_path_exists(name: str) -> bool:
    if "*" in name:
        return any(ROOT.glob(name))
    if (ROOT / name).exists() or name.startswith(_generated_folders()):
        return True
    # service/cv/units.check_finite: the module service/cv/units.py and a name defined in it
    module, _, attribute = name.rpartition(".")
    source = ROOT / f"{module}.py"
    return bool(module) and source.is_file() and attribute in source.read_text(encoding="utf-8")


def missing_names(text: str, citing: Path) -> list[str]:
    """The names in `text` that resolve to nothing, for a file at `citing`."""
    missing = []
    for name in named_files(text):
        if "/" in name:
            found = _repo_path_exists(name)
        else:
            found = (citing.parent / name).exists() or (ROOT / name).exists()
        if not found:
            missing.append(name)
    return missing


def scanned_files() -> list[Path]:
    """The Python files and Markdown pages whose prose is checked."""
    files = [ROOT / page for page in ROOT_PAGES]
    for folder in SCANNED_FOLDERS:
        for path in sorted((ROOT / folder).rglob("*")):
            if path.suffix in (".py", ".md") and "__pycache__" not in path.parts:
                files.append(path)
    return files


def broken_references() -> tuple[list[str], int]:
    """'file:line: name' for every name that does not exist, and how many names were checked."""
    broken, checked = [], 0
    for path in scanned_files():
        source = path.read_text(encoding="utf-8")
        if path.suffix == ".py":
            pieces = list(python_prose(source))
        else:
            pieces = list(enumerate(source.splitlines(), start=1))
        for line, text in pieces:
            checked += sum(1 for _ in named_files(text))
            relative = path.relative_to(ROOT)
            broken += [f"{relative}:{line}: {name}" for name in missing_names(text, path)]
    return broken, checked


def test_every_named_file_exists() -> None:
    broken, checked = broken_references()
    # the scan must have read something: comments do cite docs/ and other repository files
    assert checked > 50, f"only {checked} names found; is the scanner reading the tree?"
    assert broken == [], "comments or pages name files that are not in the repository:\n" + (
        "\n".join(broken)
    )


@pytest.mark.parametrize(
    ("prose", "missing"),
    [
        ("# see RELIABILITY.md, schedules", ["RELIABILITY.md"]),
        ("# (docs/no-such-note.md)", ["docs/no-such-note.md"]),
        ("# the claim in service/jobs/no_such_module.py.", ["service/jobs/no_such_module.py"]),
        ("# docs/store.md and README.md, as before", []),
        ('# GET /v1/jobs/{id}/model-card.md is a route, not a file; so is ".../model-card.md"', []),
        ("# one per file under tests/benchmarks/*.py", []),
        ("# confined either way (service/datasets/sql_*)", []),
        ("# confined either way (service/datasets/nosql_*)", ["service/datasets/nosql_*"]),
        ("# let the unit say (service/cv/units.check_finite)", []),
        ("# let the unit say (service/cv/units.no_such_name)", ["service/cv/units.no_such_name"]),
        ("# screenshots under `tests/output/` (gitignored)", []),
    ],
)
def test_the_checker_tells_present_from_missing(prose: str, missing: list[str]) -> None:
    assert missing_names(prose, ROOT / "service" / "example.py") == missing


def test_docstrings_are_read_and_code_strings_are_not() -> None:
    source = (
        '"""Module notes: see DESIGN.md."""\n'
        "ROUTE = '/v1/jobs/{x}/model-card.md'\n"
        "PAGE = 'NOTES.md'  # and a comment naming docs/gone.md\n"
        "def f():\n"
        '    """Function notes: docs/reliability.md."""\n'
    )
    prose = " ".join(text for _, text in python_prose(source))
    assert sorted(named_files(prose)) == ["DESIGN.md", "docs/gone.md", "docs/reliability.md"]
