"""Paths are resolved, and refused when they leave the configured data roots."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from service.datasets.sources import DatasetSource, load_table
from service.errors import BadInput


@pytest.fixture
def layout(tmp_path: Path) -> tuple[Path, Path]:
    """A data root with one table in it, and a sibling folder outside it holding another."""
    root = tmp_path / "root"
    outside = tmp_path / "outside"
    root.mkdir()
    outside.mkdir()
    pd.DataFrame({"x": [1, 2]}).to_csv(root / "inside.csv", index=False)
    pd.DataFrame({"x": [3, 4]}).to_csv(outside / "secret.csv", index=False)
    return root, outside


def _refused(
    raw: str, base: Path, roots: tuple[Path, ...], check: Callable[[BadInput, str], None]
) -> BadInput:
    with pytest.raises(BadInput) as caught:
        load_table(DatasetSource(path=raw), base_dir=base, data_roots=roots)
    check(caught.value, "dataset.path")
    assert "outside the configured data roots (FOLDWISE_DATA_ROOTS)" in caught.value.message
    return caught.value


def test_file_inside_a_root_loads(layout: tuple[Path, Path]) -> None:
    root, _ = layout
    table = load_table(DatasetSource(path="inside.csv"), base_dir=root, data_roots=(root,))
    assert table.origin == {"path": str(root / "inside.csv"), "format": "csv"}
    assert table.frame["x"].tolist() == [1.0, 2.0]


def test_absolute_path_outside_is_refused(
    layout: tuple[Path, Path], check_bad_input: Callable[[BadInput, str], None]
) -> None:
    root, outside = layout
    _refused(str(outside / "secret.csv"), root, (root,), check_bad_input)


def test_dotdot_escape_is_refused(
    layout: tuple[Path, Path], check_bad_input: Callable[[BadInput, str], None]
) -> None:
    root, _ = layout
    error = _refused("../outside/secret.csv", root, (root,), check_bad_input)
    # The message shows where `..` really led, not the spelling that hid it.
    assert ".." not in error.message


def test_symlink_pointing_out_is_refused(
    layout: tuple[Path, Path], check_bad_input: Callable[[BadInput, str], None]
) -> None:
    root, outside = layout
    os.symlink(outside / "secret.csv", root / "link.csv")
    _refused("link.csv", root, (root,), check_bad_input)


def test_symlinked_folder_pointing_out_is_refused(
    layout: tuple[Path, Path], check_bad_input: Callable[[BadInput, str], None]
) -> None:
    root, outside = layout
    os.symlink(outside, root / "mounted")
    _refused("mounted/secret.csv", root, (root,), check_bad_input)


def test_symlink_within_the_root_is_allowed(layout: tuple[Path, Path]) -> None:
    root, _ = layout
    os.symlink(root / "inside.csv", root / "alias.csv")
    table = load_table(DatasetSource(path="alias.csv"), base_dir=root, data_roots=(root,))
    assert table.origin["path"] == str(root / "inside.csv")


def test_missing_file_outside_is_refused_as_outside(
    layout: tuple[Path, Path], check_bad_input: Callable[[BadInput, str], None]
) -> None:
    # Saying "no such file" would let a caller probe which files exist outside the roots.
    root, outside = layout
    _refused(str(outside / "absent.csv"), root, (root,), check_bad_input)


def test_second_root_is_honoured(layout: tuple[Path, Path]) -> None:
    root, outside = layout
    table = load_table(
        DatasetSource(path=str(outside / "secret.csv")), base_dir=root, data_roots=(root, outside)
    )
    assert table.frame["x"].tolist() == [3.0, 4.0]


def test_without_roots_any_readable_path_loads(layout: tuple[Path, Path]) -> None:
    root, _ = layout
    table = load_table(DatasetSource(path="../outside/secret.csv"), base_dir=root)
    assert table.origin["path"] == str((root.parent / "outside" / "secret.csv").resolve())


def test_prefix_sibling_is_not_inside(
    tmp_path: Path, check_bad_input: Callable[[BadInput, str], None]
) -> None:
    # "/data" must not admit "/data-private": containment is by path parts, not by string prefix.
    (tmp_path / "data").mkdir()
    (tmp_path / "data-private").mkdir()
    (tmp_path / "data-private" / "t.csv").write_text("x\n1\n")
    _refused("../data-private/t.csv", tmp_path / "data", (tmp_path / "data",), check_bad_input)
