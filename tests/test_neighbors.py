"""Native nearest-neighbour learner: members against scikit-learn fit on the materialised
resample, tie handling, out-of-bag rows, thread independence and bad input."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor

import bagwise
from bagwise import _core


def _data(n=150, p=3, seed=0, classes=None):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, p))  # continuous: distinct distances almost surely (tie-free)
    if classes is None:
        y = np.sin(x[:, 0]) + x[:, 1] ** 2 + rng.normal(scale=0.1, size=n)
    else:
        y = np.minimum((np.abs(x[:, 0] + 0.5 * x[:, 1]) * classes / 2).astype(int), classes - 1)
    return x, y


@pytest.mark.parametrize("k", [1, 4, 9])
def test_regression_members_equal_sklearn_on_repeated_rows(k):
    # k nearest neighbours on the materialised resample (rows repeated by their counts,
    # np.repeat) against sklearn.neighbors.KNeighborsRegressor (uniform weights).
    x, y = _data()
    xt = _data(40, seed=7)[0]
    counts = bagwise.resample(len(y), 5, rng=3).counts
    fit = _core.NeighborsEnsemble.fit(x, y, counts, task="regression", neighbors=k)
    got = fit.member_predictions(xt)
    assert got.shape == (5, 40)
    for m in range(5):
        rows = np.repeat(np.arange(len(y)), counts[m])
        ref = KNeighborsRegressor(n_neighbors=k, algorithm="brute").fit(x[rows], y[rows])
        np.testing.assert_allclose(got[m], ref.predict(xt), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(fit.predict(xt), got.mean(axis=0), rtol=1e-12)


def test_classification_members_equal_sklearn_on_repeated_rows():
    # sklearn.neighbors.KNeighborsClassifier.predict_proba on the materialised resample;
    # its columns are the member's own classes, mapped to all classes here.
    x, y = _data(200, classes=3, seed=1)
    xt = _data(50, seed=8)[0]
    counts = bagwise.resample(200, 4, scheme="subsample", fraction=0.5, rng=6).counts
    fit = _core.NeighborsEnsemble.fit(x, y.astype(np.int64), counts, task="classification",
                                      n_classes=3, neighbors=6)
    got = fit.member_predictions(xt)
    assert got.shape == (4, 50, 3) and fit.n_classes == 3
    np.testing.assert_allclose(got.sum(axis=2), 1.0, rtol=1e-12)
    for m in range(4):
        rows = np.repeat(np.arange(200), counts[m])
        ref = KNeighborsClassifier(n_neighbors=6, algorithm="brute").fit(x[rows], y[rows])
        expected = np.zeros((50, 3))
        expected[:, ref.classes_] = ref.predict_proba(xt)
        np.testing.assert_allclose(got[m], expected, atol=1e-12)


def test_ties_go_to_the_lower_row_index():
    # Documented rule: order by distance, then row index. Rows 0 and 2 are equidistant
    # from the query; with k = 2, row 1 (nearest) and then row 0 (lower index) are used.
    x = np.array([[0.0], [1.1], [2.0], [5.0]])
    y = np.array([10.0, 20.0, 30.0, 40.0])
    fit = _core.NeighborsEnsemble.fit(x, y, np.ones((1, 4), np.uint8), task="regression",
                                      neighbors=2)
    assert fit.member_predictions(np.array([[1.0]]))[0, 0] == (20.0 + 10.0) / 2
    # Multiplicity: row 2 drawn three times fills every slot of k = 3.
    counts = np.array([[1, 0, 3, 1]], dtype=np.uint8)
    fit = _core.NeighborsEnsemble.fit(x, y, counts, task="regression", neighbors=3)
    assert fit.member_predictions(np.array([[2.1]]))[0, 0] == 30.0


def test_out_of_bag_predictions_equal_refits_without_the_row():
    # A member's out-of-bag prediction at training row i is its prediction at x_i
    # (sklearn KNeighborsRegressor on the member's repeated rows); in-bag rows are NaN.
    x, y = _data(80, seed=2)
    counts = bagwise.resample(80, 4, rng=9).counts
    fit = _core.NeighborsEnsemble.fit(x, y, counts, task="regression", neighbors=3)
    oob = fit.out_of_bag_predictions(x, counts)
    assert np.array_equal(np.isnan(oob), counts > 0)
    for m in range(4):
        rows = np.repeat(np.arange(80), counts[m])
        ref = KNeighborsRegressor(n_neighbors=3, algorithm="brute").fit(x[rows], y[rows])
        out = counts[m] == 0
        np.testing.assert_allclose(oob[m, out], ref.predict(x[out]), rtol=1e-12)


def test_threads_float32_and_strides_do_not_change_results():
    x, y = _data(300, seed=4)
    counts = bagwise.resample(300, 6, rng=1).counts
    fit = _core.NeighborsEnsemble.fit(x, y, counts, task="regression", n_jobs=1)
    other = _core.NeighborsEnsemble.fit(x, y, counts, task="regression", n_jobs=2)
    a = fit.member_predictions(x, n_jobs=1)
    np.testing.assert_array_equal(a, other.member_predictions(x, n_jobs=2))
    np.testing.assert_array_equal(a, fit.member_predictions(np.asfortranarray(x)))
    wide = np.zeros((300, 6))
    wide[:, ::2] = x
    np.testing.assert_array_equal(a, fit.member_predictions(wide[:, ::2]))
    x32 = x.astype(np.float32)
    single = _core.NeighborsEnsemble.fit(x32, y, counts, task="regression")
    rounded = _core.NeighborsEnsemble.fit(x32.astype(np.float64), y, counts, task="regression")
    np.testing.assert_array_equal(single.member_predictions(x32), rounded.member_predictions(x32))


def test_estimators_use_the_native_learner():
    # BagRegressor(learner="neighbors") members against sklearn KNeighborsRegressor on
    # the materialised resample of in_bag_.
    x, y = _data(120, seed=5)
    bag = bagwise.BagRegressor("neighbors", n_members=3, neighbors=4, random_state=2).fit(x, y)
    got = bag.member_predictions(x[:20])
    for m in range(3):
        rows = np.repeat(np.arange(120), bag.in_bag_[m])
        ref = KNeighborsRegressor(n_neighbors=4, algorithm="brute").fit(x[rows], y[rows])
        np.testing.assert_allclose(got[m], ref.predict(x[:20]), rtol=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "match", "error"),
    [
        ({"neighbors": 0}, "`neighbors`", ValueError),
        ({"neighbors": 41}, "`neighbors`: member 0 has 40", ValueError),
        ({"task": "ranking"}, "`task`", ValueError),
        ({"task": "classification", "n_classes": 0}, "`n_classes`", ValueError),
        ({"task": "classification", "n_classes": 1, "y": np.arange(40) % 2}, "`y`: class codes",
         ValueError),
        ({"counts": np.full((1, 40), 0.5)}, "`counts`: nearest neighbours need whole", ValueError),
        ({"counts": np.ones((1, 40), dtype=np.int32)}, "`counts`", TypeError),
        ({"y": np.full(40, np.nan)}, "`y`", ValueError),
    ],
)
def test_bad_input(kwargs, match, error):
    x = np.random.default_rng(0).normal(size=(40, 2))
    args = {"y": np.arange(40.0) % 2, "counts": np.ones((1, 40), dtype=np.uint8),
            "task": "regression"}
    args.update(kwargs)
    with pytest.raises(error, match=match):
        _core.NeighborsEnsemble.fit(x, args.pop("y"), args.pop("counts"), **args)


def test_estimator_rejects_bayesian_weights_for_neighbours():
    x, y = _data(30)
    with pytest.raises(ValueError, match="`scheme`: 'bayesian'"):
        bagwise.BagRegressor("neighbors", n_members=2, scheme="bayesian").fit(x, y)
    # A subsample too small for k draws is named by the neighbours parameter.
    with pytest.raises(ValueError, match="`neighbors`"):
        bagwise.BagRegressor("neighbors", n_members=2, scheme="subsample", fraction=0.1,
                              neighbors=5).fit(x, y)
