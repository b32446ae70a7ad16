"""Native bagged CART trees: agreement with scikit-learn's trees, the bagging gains reported in
the literature, counts-as-weights equivalence, reproducibility, persistence and bad input."""

from __future__ import annotations

import pickle
import sys
import textwrap

import numpy as np
import pytest
from _interrupt import STOPS_WITHIN, interrupt
from sklearn.datasets import load_breast_cancer, make_friedman1
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

import bagwise
from bagwise._core import TreeEnsemble


def regression_data(n, seed, noise=1.0):
    x, y = make_friedman1(n_samples=n, noise=noise, random_state=seed)
    return x, y


def fit_regression(x, y, counts, **kw):
    kw.setdefault("splitter", "exact")
    if counts is None:
        kw.setdefault("n_members", 1)
    return TreeEnsemble.fit(x, y, counts, task="regression", **kw)


def mse(a, b):
    return float(np.mean((a - b) ** 2))


@pytest.mark.parametrize("splitter", ["exact", "histogram"])
@pytest.mark.parametrize("task", ["regression", "classification"])
def test_counts_as_weights_equal_materialised_rows(splitter, task):
    # Common practice (integer weights as repeated rows): the tree grown with in-bag counts
    # as weights is the tree grown on the rows repeated `count` times. For the histogram
    # splitter every feature takes 30 distinct values, all of them drawn, so both fits cut
    # the same bins (one per value).
    rng = np.random.default_rng(3)
    x = rng.uniform(size=(800, 4))
    if splitter == "histogram":
        x = np.floor(x * 30)
    y = np.sin(3 * x[:, 0]) + x[:, 1] ** 2 / 100 + rng.normal(scale=0.3, size=800)
    if task == "classification":
        y = np.digitize(y, np.quantile(y, [0.3, 0.7])).astype(np.int64)
        extra = {"task": task, "n_classes": 3}
    else:
        extra = {"task": task}
    counts = bagwise.resample(800, 3, rng=5).counts
    weighted = TreeEnsemble.fit(x, y, counts, splitter=splitter, min_leaf=4, **extra)
    test = rng.uniform(size=(400, 4)) * (30 if splitter == "histogram" else 1)
    for m in range(3):
        rows = np.repeat(np.arange(800), counts[m])
        if splitter == "histogram":
            assert all(len(np.unique(x[rows, f])) == 30 for f in range(4))
        one = TreeEnsemble.fit(x[rows], y[rows], None, n_members=1, splitter=splitter, min_leaf=4,
                               **extra)
        np.testing.assert_allclose(weighted.member_predictions(test)[m],
                                   one.member_predictions(test)[0], rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("max_depth, min_leaf", [(6, 5), (None, 5), (10, 10)])
def test_single_regression_tree_matches_sklearn(max_depth, min_leaf):
    # sklearn.tree.DecisionTreeRegressor with the same max_depth and min_samples_leaf, on
    # tie-free continuous float32 data (sklearn grows on float32): the same predictions on
    # at least 99% of test points.
    x, y = regression_data(4000, 1)
    x = x.astype(np.float32)
    ours = fit_regression(x[:2000], y[:2000], None, max_depth=max_depth, min_leaf=min_leaf)
    ref = DecisionTreeRegressor(max_depth=max_depth, min_samples_leaf=min_leaf, random_state=0)
    ref.fit(x[:2000], y[:2000])
    same = np.isclose(ours.predict(x[2000:]), ref.predict(x[2000:]), rtol=1e-10, atol=1e-12)
    assert same.mean() >= 0.99, same.mean()


@pytest.mark.parametrize("criterion", ["gini", "entropy"])
def test_single_classification_tree_matches_sklearn(criterion):
    # sklearn.tree.DecisionTreeClassifier(criterion=...) with the same max_depth and
    # min_samples_leaf: identical class probabilities on at least 99% of test points.
    x, y = regression_data(4000, 2)
    x = x.astype(np.float32)
    labels = np.digitize(y, np.quantile(y, [0.4, 0.75])).astype(np.int64)
    ours = TreeEnsemble.fit(x[:2000], labels[:2000], None, n_members=1, task="classification",
                            n_classes=3, criterion=criterion, splitter="exact", max_depth=5,
                            min_leaf=8)
    ref = DecisionTreeClassifier(criterion=criterion, max_depth=5, min_samples_leaf=8,
                                 random_state=0).fit(x[:2000], labels[:2000])
    probs = ours.member_predictions(x[2000:])[0]
    np.testing.assert_allclose(probs.sum(axis=1), 1.0, rtol=1e-12)
    same = np.all(np.isclose(probs, ref.predict_proba(x[2000:]), rtol=1e-10, atol=1e-12), axis=1)
    assert same.mean() >= 0.99, same.mean()


def test_bagging_cuts_friedman1_error():
    # Breiman (1996), "Bagging predictors", Machine Learning 24: on Friedman #1
    # (sklearn.datasets.make_friedman1; Friedman 1991) with 200 training rows, bagging
    # regression trees cut test MSE from about 11.4 to 6.1 (from memory). Assert a ratio
    # of at most 0.7 averaged over seeds.
    ratios = []
    for seed in range(3):
        x, y = regression_data(1200, seed)
        xtr, ytr, xte, yte = x[:200], y[:200], x[200:], y[200:]
        single = fit_regression(xtr, ytr, None)
        counts = bagwise.resample(200, 50, rng=seed).counts
        bagged = fit_regression(xtr, ytr, counts, seed=seed)
        ratios.append(mse(bagged.predict(xte), yte) / mse(single.predict(xte), yte))
    assert np.mean(ratios) <= 0.7, ratios


def test_bagged_trees_beat_one_tree_on_breast_cancer():
    # sklearn.datasets.load_breast_cancer: bagging an unstable classifier raises test
    # accuracy (Breiman 1996); averaged over several train/test splits.
    x, y = load_breast_cancer(return_X_y=True)
    y = y.astype(np.int64)
    gains = []
    for seed in range(6):
        order = np.random.default_rng(seed).permutation(len(y))
        tr, te = order[:380], order[380:]
        kw = {"task": "classification", "n_classes": 2, "splitter": "exact"}
        single = TreeEnsemble.fit(x[tr], y[tr], None, n_members=1, **kw)
        counts = bagwise.resample(len(tr), 50, rng=seed).counts
        bagged = TreeEnsemble.fit(x[tr], y[tr], counts, seed=seed, **kw)
        acc = [float(np.mean(m.predict(x[te]).argmax(axis=1) == y[te])) for m in (single, bagged)]
        gains.append(acc[1] - acc[0])
    assert np.mean(gains) > 0.01, gains


def test_histogram_and_auto_match_exact_error():
    # Common practice (histogram split finding with 256 quantile bins): test MSE within a
    # few percent of the exact splitter on a larger data set.
    x, y = regression_data(30_000, 4)
    xtr, ytr, xte, yte = x[:20_000], y[:20_000], x[20_000:], y[20_000:]
    counts = bagwise.resample(20_000, 20, rng=1).counts
    errors = {s: mse(fit_regression(xtr, ytr, counts, splitter=s).predict(xte), yte)
              for s in ("exact", "histogram", "auto")}
    assert abs(errors["histogram"] / errors["exact"] - 1) < 0.03, errors
    assert abs(errors["auto"] / errors["exact"] - 1) < 0.03, errors


@pytest.mark.parametrize("splitter", ["exact", "histogram", "auto"])
def test_reproducible_for_any_thread_count_and_member_count(splitter):
    x, y = regression_data(6000, 5)
    counts = bagwise.resample(6000, 6, rng=2).counts
    kw = {"splitter": splitter, "split_features": 3, "seed": 9}
    one = fit_regression(x, y, counts, n_jobs=1, **kw)
    two = fit_regression(x, y, counts, n_jobs=2, **kw)
    assert one.to_bytes() == two.to_bytes()
    first = fit_regression(x, y, counts[:2], n_jobs=2, **kw)
    np.testing.assert_array_equal(first.member_predictions(x), one.member_predictions(x)[:2])
    other_seed = fit_regression(x, y, counts, n_jobs=2, **{**kw, "seed": 10})
    assert other_seed.to_bytes() != one.to_bytes()
    np.testing.assert_array_equal(one.member_predictions(x, n_jobs=1),
                                  one.member_predictions(x, n_jobs=2))


def test_float32_strided_and_fortran_input():
    x, y = regression_data(1500, 6)
    x32 = x.astype(np.float32)
    counts = bagwise.resample(1500, 4, rng=3).counts
    base = fit_regression(x32.astype(np.float64), y, counts, splitter="auto")
    for variant in (x32, np.asfortranarray(x32), np.repeat(x32, 2, axis=1)[:, ::2]):
        fitted = fit_regression(variant, y, counts, splitter="auto")
        assert fitted.to_bytes() == base.to_bytes()
        np.testing.assert_array_equal(fitted.member_predictions(variant),
                                      base.member_predictions(x32))
    wide = np.zeros((1500, 20))
    wide[:, ::2] = x
    strided_counts = np.repeat(counts, 2, axis=1)[:, ::2]
    np.testing.assert_array_equal(fit_regression(wide[:, ::2], y, strided_counts).predict(x),
                                  fit_regression(x, y, counts).predict(x))


def test_counts_of_every_unsigned_width_agree():
    x, y = regression_data(500, 7)
    counts = bagwise.resample(500, 3, rng=4).counts
    fits = [fit_regression(x, y, counts.astype(t)).to_bytes()
            for t in (np.uint8, np.uint16, np.uint32, np.uint64)]
    assert all(f == fits[0] for f in fits)
    with pytest.raises(TypeError, match="`counts`"):
        fit_regression(x, y, counts.astype(np.int64))


def test_out_of_bag_predictions_are_nan_where_a_member_saw_the_row():
    x, y = regression_data(400, 8)
    counts = bagwise.resample(400, 5, rng=6).counts
    model = fit_regression(x, y, counts)
    oob = model.out_of_bag_predictions(x, counts)
    full = model.member_predictions(x)
    assert oob.shape == full.shape == (5, 400)
    np.testing.assert_array_equal(np.isnan(oob), counts > 0)
    np.testing.assert_array_equal(oob[counts == 0], full[counts == 0])
    with pytest.raises(ValueError, match="`counts`"):
        model.out_of_bag_predictions(x, counts[:, :10])


def test_classification_shapes_and_probabilities():
    x, y = load_breast_cancer(return_X_y=True)
    y = y.astype(np.int64)
    counts = bagwise.resample(len(y), 7, rng=1).counts
    model = TreeEnsemble.fit(x, y, counts, task="classification", n_classes=2, max_depth=4)
    members = model.member_predictions(x)
    assert members.shape == (7, len(y), 2)
    np.testing.assert_allclose(members.sum(axis=2), 1.0, rtol=1e-12)
    np.testing.assert_allclose(model.predict(x), members.mean(axis=0), rtol=1e-12)
    assert model.n_classes == 2 and model.n_members == 7 and model.n_features == 30
    assert len(model.node_counts) == 7 and all(1 < c < 2**5 for c in model.node_counts)
    assert "7 members" in repr(model)


def test_pickle_and_bytes_round_trip():
    x, y = regression_data(800, 9)
    model = fit_regression(x, y, bagwise.resample(800, 5, rng=1).counts, splitter="auto")
    back = pickle.loads(pickle.dumps(model))
    np.testing.assert_array_equal(back.member_predictions(x), model.member_predictions(x))
    assert TreeEnsemble.from_bytes(model.to_bytes()).to_bytes() == model.to_bytes()


def test_corrupt_bytes_raise_value_error():
    x, y = regression_data(300, 10)
    data = fit_regression(x, y, bagwise.resample(300, 2, rng=1).counts).to_bytes()
    for bad in (b"", b"garbage", data[:-5], data[: len(data) // 2], data + b"\x00"):
        with pytest.raises(ValueError, match="`data`"):
            TreeEnsemble.from_bytes(bad)
    rng = np.random.default_rng(0)
    for _ in range(200):
        flipped = bytearray(data)
        i = int(rng.integers(len(data)))
        flipped[i] ^= int(rng.integers(1, 256))
        try:
            back = TreeEnsemble.from_bytes(bytes(flipped))
        except ValueError:
            continue
        # A flip that still decodes is a well-formed ensemble: prediction never crashes.
        if back.n_features == x.shape[1]:
            assert back.member_predictions(x).shape[1] == len(x)


def test_progress_callback_and_interrupt():
    x, y = regression_data(2000, 11)
    counts = bagwise.resample(2000, 12, rng=1).counts
    calls = []
    fit_regression(x, y, counts, n_jobs=2, progress=lambda done, total: calls.append((done, total)))
    assert calls[-1] == (12, 12)
    assert all(b[0] >= a[0] for a, b in zip(calls, calls[1:]))

    def stop(done, total):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        fit_regression(x, y, counts, progress=stop)


def test_bad_input_raises_value_error_naming_the_argument():
    x, y = regression_data(100, 12)
    counts = bagwise.resample(100, 3, rng=1).counts
    labels = (y > y.mean()).astype(np.int64)

    def raises(argument, **kw):
        args = {"x": x, "y": y, "counts": counts, "task": "regression"} | kw
        with pytest.raises(ValueError, match=f"`{argument}`"):
            TreeEnsemble.fit(args.pop("x"), args.pop("y"), args.pop("counts"), **args)

    bad_x = x.copy()
    bad_x[3, 2] = np.nan
    raises("x", x=bad_x)
    bad_x[3, 2] = np.inf
    raises("x", x=bad_x)
    raises("x", x=x[:0])
    bad_y = y.copy()
    bad_y[0] = np.nan
    raises("y", y=bad_y)
    raises("y", y=y[:50])
    raises("counts", counts=counts[:, :50])
    zero = counts.copy()
    zero[1] = 0
    raises("counts", counts=zero)
    raises("min_leaf", min_leaf=0)
    raises("max_depth", max_depth=0)
    raises("split_features", split_features=0)
    raises("split_features", split_features=11)
    raises("splitter", splitter="fast")
    raises("criterion", criterion="gini")
    raises("task", task="ranking")
    raises("n_members", counts=None)
    raises("n_members", n_members=3)
    raises("n_classes", task="classification", y=labels)
    raises("y", task="classification", y=labels + 1, n_classes=2)
    raises("y", task="classification", y=labels - 1, n_classes=2)
    with pytest.raises(TypeError, match="`y`"):
        TreeEnsemble.fit(x, labels, counts, task="regression")
    with pytest.raises(TypeError, match="`x`"):
        TreeEnsemble.fit(x.astype(np.int64), y, counts, task="regression")
    model = fit_regression(x, y, counts)
    with pytest.raises(ValueError, match="`x`"):
        model.predict(x[:, :5])
    with pytest.raises(ValueError, match="`x`"):
        model.member_predictions(bad_x)
    with pytest.raises(ValueError, match="`n_jobs`"):
        model.predict(x, n_jobs=0)


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
def test_ctrl_c_stops_a_long_fit_quickly():
    code = textwrap.dedent("""
        import time, numpy as np, bagwise
        from bagwise._core import TreeEnsemble
        rng = np.random.default_rng(0)
        x, y = rng.uniform(size=(100_000, 8)), rng.uniform(size=100_000)
        counts = bagwise.resample(100_000, 500, rng=0).counts
        print("ready", flush=True)
        start = time.perf_counter()
        try:
            TreeEnsemble.fit(x, y, counts, task="regression", splitter="exact")  # minutes
        except KeyboardInterrupt:
            print(f"interrupted {time.perf_counter() - start:.3f}", flush=True)
    """)
    out, waited = interrupt(code, after=0.5, timeout=60)
    assert out.startswith("interrupted"), out
    assert waited < STOPS_WITHIN, waited


def test_trying_every_feature_at_random_equals_plain_bagging():
    # Random subspaces (Breiman 2001): with split_features = n_features every feature is
    # tried at every node, only in a random order, so the deterministic tie rule (lowest
    # feature, then lowest threshold) gives the plain bagged trees; fewer features differ.
    x, y = regression_data(1000, 13)
    counts = bagwise.resample(1000, 3, rng=2).counts
    for splitter in ("exact", "histogram"):
        plain = fit_regression(x, y, counts, splitter=splitter)
        every = fit_regression(x, y, counts, splitter=splitter, split_features=10, seed=4)
        assert every.to_bytes() == plain.to_bytes()
        few = fit_regression(x, y, counts, splitter=splitter, split_features=2, seed=4)
        assert few.to_bytes() != plain.to_bytes()
