"""The bundled samples load as scikit-learn ships them."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from service.datasets.sources import DatasetSource, describe_table, load_table

# Rows and feature columns, from the scikit-learn dataset docs ("Toy datasets"): iris 150 x 4,
# breast cancer Wisconsin (diagnostic) 569 x 30, wine 178 x 13, diabetes 442 x 10.
SHAPES = {"iris": (150, 4), "breast_cancer": (569, 30), "wine": (178, 13), "diabetes": (442, 10)}

# Class sizes, from the same scikit-learn dataset docs: iris 50 per class, breast cancer
# 212 malignant (0) and 357 benign (1), wine 59 / 71 / 48.
CLASS_COUNTS = {"iris": [50, 50, 50], "breast_cancer": [212, 357], "wine": [59, 71, 48]}


@pytest.mark.parametrize("name", list(SHAPES))
def test_sample_shape_and_target(name: str, tmp_path: Path) -> None:
    table = load_table(DatasetSource.model_validate({"sample": name}), base_dir=tmp_path)
    rows, features = SHAPES[name]
    assert table.frame.shape == (rows, features + 1)
    assert table.frame.columns[-1] == "target"
    assert set(table.kinds.values()) == {"numeric"}
    assert table.origin == {"sample": name}
    assert describe_table(table)["n_rows"] == rows


@pytest.mark.parametrize("name", list(CLASS_COUNTS))
def test_classification_targets_are_integer_labels(name: str, tmp_path: Path) -> None:
    table = load_table(DatasetSource.model_validate({"sample": name}), base_dir=tmp_path)
    target = table.frame["target"].to_numpy()
    assert np.array_equal(target, np.round(target))
    labels, counts = np.unique(target, return_counts=True)
    assert labels.tolist() == list(range(len(CLASS_COUNTS[name])))
    assert counts.tolist() == CLASS_COUNTS[name]


def test_sample_hash_is_stable_across_loads(tmp_path: Path) -> None:
    first = load_table(DatasetSource(sample="iris"), base_dir=tmp_path)
    again = load_table(DatasetSource(sample="iris"), base_dir=tmp_path / "elsewhere")
    other = load_table(DatasetSource(sample="wine"), base_dir=tmp_path)
    assert first.content_hash == again.content_hash != other.content_hash
