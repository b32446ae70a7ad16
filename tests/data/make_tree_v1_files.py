"""Writes the tree-ensemble files of the first tree payload format (header ``bgwtree\\x01``,
postcard nodes) and their expected predictions, beside this script.

The committed outputs were made by running this script with bagwise built from commit
2b202dc (the last commit writing that format): ``python tests/data/make_tree_v1_files.py``.
Run with a later bagwise it would write the current format instead, so the committed files
must not be regenerated; tests/test_persistence.py loads them and checks the predictions.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import bagwise

HERE = Path(__file__).parent


def main() -> None:
    rng = np.random.default_rng(20)
    x = rng.normal(size=(60, 4))
    y = np.sin(x[:, 0]) + x[:, 1] * x[:, 2] + 0.1 * rng.normal(size=60)
    labels = (x[:, 0] > 0).astype(int) + (x[:, 3] > 0.5).astype(int)
    points = rng.normal(size=(25, 4))
    models = {
        "tree_v1_regression": bagwise.BagRegressor(
            "tree", n_members=3, max_depth=4, random_state=5).fit(x, y),
        "tree_v1_classification": bagwise.BagClassifier(
            "tree", n_members=3, max_depth=5, random_state=6).fit(x, labels),
    }
    np.save(HERE / "tree_v1_points.npy", points)
    for name, bag in models.items():
        bag.save(HERE / f"{name}.bagwise")
        np.save(HERE / f"{name}_members.npy", bag.member_predictions(points))
        predicted = bag.predict_proba(points) if hasattr(bag, "classes_") else bag.predict(points)
        np.save(HERE / f"{name}_predicted.npy", predicted)


if __name__ == "__main__":
    main()
