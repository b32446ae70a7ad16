"""Writes tests/data/reference_predictions.npz: member predictions of the benchmark ensembles
and digests of the resampling counts, made before the speed work of the tree grower, the
resampler and the model file. tests/test_reference_predictions.py refits every case with the
same seeds and requires the same bits, so a speed change that alters a single split fails.

    python tests/data/make_reference_predictions.py        # rewrites the file

Rewrite the file only for a change meant to alter results, and say so in its commit.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
from sklearn.datasets import load_digits, make_classification, make_friedman1

from bagwise import resample
from bagwise._core import LinearEnsemble, NeighborsEnsemble, TreeEnsemble

OUT = Path(__file__).with_name("reference_predictions.npz")
TEST_POINTS = 200


def datasets():
    """(name, x_train, y_train, x_test, task, n_classes); 6,000 training rows so that the
    histogram splitter of 'auto' runs at the top of each tree (above 2,048 distinct rows)."""
    x, y = make_friedman1(n_samples=6000 + TEST_POINTS, noise=1.0, random_state=3)
    yield "friedman1", x[:6000], y[:6000], x[6000:], "regression", None
    x, y = make_classification(n_samples=6000 + TEST_POINTS, n_features=20, random_state=4)
    yield "two_class", x[:6000], y[:6000].astype(np.int64), x[6000:], "classification", 2
    x, y = make_classification(
        n_samples=6000 + TEST_POINTS, n_features=20, n_informative=10, n_classes=10,
        random_state=5,
    )
    yield "ten_class", x[:6000], y[:6000].astype(np.int64), x[6000:], "classification", 10
    digits = load_digits()
    x, y = digits.data, digits.target.astype(np.int64)
    yield "digits", x[:1500], y[:1500], x[1500:1500 + TEST_POINTS], "classification", 10


TREE_SETTINGS = {
    "auto": {},
    "exact": {"splitter": "exact"},
    "histogram": {"splitter": "histogram"},
    "features": {"split_features": 3, "min_leaf": 2},
    "shallow": {"max_depth": 6},
}


def tree_cases(n_jobs: int = 2):
    for name, x, y, x_test, task, n_classes in datasets():
        counts = resample(len(y), 6, rng=11).counts
        settings = dict(TREE_SETTINGS)
        if task == "classification":
            settings["entropy"] = {"criterion": "entropy"}
        for setting, extra in settings.items():
            model = TreeEnsemble.fit(
                x, y, counts, task=task, n_classes=n_classes, seed=7, n_jobs=n_jobs, **extra
            )
            yield f"trees/{name}/{setting}", model.member_predictions(x_test)
        # Single-precision features take their own path through the binning.
        model = TreeEnsemble.fit(
            x.astype(np.float32), y, counts, task=task, n_classes=n_classes, seed=7, n_jobs=n_jobs
        )
        yield f"trees/{name}/float32", model.member_predictions(x_test.astype(np.float32))


def other_cases(n_jobs: int = 2):
    x, y = make_friedman1(n_samples=2000 + TEST_POINTS, noise=1.0, random_state=6)
    counts = resample(2000, 6, rng=12).counts
    linear = LinearEnsemble.fit(x[:2000], y[:2000], counts, n_jobs=n_jobs)
    yield "linear/friedman1", linear.member_predictions(x[2000:])
    neighbors = NeighborsEnsemble.fit(x[:2000], y[:2000], counts, task="regression",
                                       n_jobs=n_jobs)
    yield "neighbors/friedman1", neighbors.member_predictions(x[2000:])


# Counts of every scheme, as digests (the arrays are large): the resampler's speed work must
# give the same draws for any thread count.
COUNT_CASES = {
    "bootstrap_1m_20": dict(n_rows=1_000_000, n_members=20),
    "bootstrap_5k_300": dict(n_rows=5_000, n_members=300),
    "bootstrap_half_10k_30": dict(n_rows=10_000, n_members=30, fraction=0.5),
    "subsample_10k_30": dict(n_rows=10_000, n_members=30, scheme="subsample", fraction=0.5),
    "little_bags_10k_30": dict(n_rows=10_000, n_members=30, scheme="little_bags", group_size=3,
                               fraction=0.2),
    "stratified_10k_30": dict(n_rows=10_000, n_members=30,
                              strata=np.arange(10_000, dtype=np.int64) % 3),
}


def count_digest(n_jobs: int, **kwargs) -> str:
    counts = resample(rng=21, n_jobs=n_jobs, **kwargs).counts
    return f"{counts.dtype.str}:{counts.shape}:" + hashlib.sha256(counts.tobytes()).hexdigest()


def main() -> None:
    arrays = dict(tree_cases())
    arrays.update(other_cases())
    for name, kwargs in COUNT_CASES.items():
        arrays[f"counts/{name}"] = np.array(count_digest(1, **kwargs))
    np.savez_compressed(OUT, **arrays)
    print(f"wrote {OUT} ({OUT.stat().st_size / 1e3:.0f} kB, {len(arrays)} cases)")


if __name__ == "__main__":
    main()
