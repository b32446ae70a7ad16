"""Out-of-bag predictions, errors and curves: checks against straightforward numpy written
here, sklearn.metrics, and scikit-learn's own bagging (BaggingRegressor / BaggingClassifier
out-of-bag estimates); streaming over memory-mapped chunks; dtypes, n_jobs, strides and
bad input."""

from __future__ import annotations

import pickle

import numpy as np
import pytest
import sklearn.datasets
import sklearn.ensemble
import sklearn.metrics

import bagwise

# -- independent reference ------------------------------------------------------------------


def reference(members, counts, y, kind, weights=None, k=None):
    """Straightforward numpy out-of-bag aggregation over the first k members.

    Breiman (1996): a point's OOB prediction aggregates the members whose in-bag count of
    the point is zero. Returns the prediction, the class probabilities (or None), the OOB
    member counts and every error over the covered points.
    """
    members = np.asarray(members)[:k]
    oob = np.asarray(counts)[:k] == 0
    n_oob = oob.sum(axis=0)
    covered = n_oob > 0
    w = np.ones(len(y)) if weights is None else np.asarray(weights, dtype=float)
    wc = w[covered]
    out = {"n_oob": n_oob, "covered": int(covered.sum())}
    with np.errstate(invalid="ignore", divide="ignore"):
        if kind == "regression":
            pred = np.where(oob, members.astype(np.float64), 0.0).sum(axis=0) / n_oob
            d = pred[covered] - y[covered]
            out.update(prediction=pred, probabilities=None,
                       squared_error=np.sum(wc * d**2) / wc.sum(),
                       absolute_error=np.sum(wc * np.abs(d)) / wc.sum())
            return out
        if kind == "labels":
            n_classes = max(members.max(), y.max()) + 1
            probs = np.eye(n_classes)[members]          # one-hot votes (M, n, C)
        else:
            probs = members.astype(np.float64)
        mean = np.where(oob[:, :, None], probs, 0.0).sum(axis=0) / n_oob[:, None]
    pred = np.where(covered, np.argmax(np.nan_to_num(mean, nan=-1.0), axis=1), np.nan)
    pc, yc = mean[covered], y[covered].astype(int)
    onehot = np.eye(mean.shape[1])[yc]
    p_true = np.maximum(pc[np.arange(len(yc)), yc], 1e-15)
    out.update(prediction=pred, probabilities=mean,
               error_rate=np.sum(wc * (pred[covered] != yc)) / wc.sum(),
               brier_score=np.sum(wc * ((pc - onehot) ** 2).sum(axis=1)) / wc.sum(),
               log_loss=np.sum(wc * -np.log(p_true)) / wc.sum())
    return out


def draw_counts(n, m, seed):
    """Bootstrap counts where every point is out of bag for at least one member (small
    ensembles would otherwise leave a few points uncovered, which has its own tests)."""
    counts = bagwise.resample(n, m, rng=seed).counts.copy()
    uncovered = np.flatnonzero((counts == 0).sum(axis=0) == 0)
    counts[np.arange(len(uncovered)) % m, uncovered] = 0
    return counts


def regression_data(n=700, m=40, seed=0):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    members = y + rng.normal(scale=0.7, size=(m, n))
    counts = draw_counts(n, m, seed)
    return members, counts, y


def probability_data(n=600, m=30, c=4, seed=1):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, c, size=n)
    probs = rng.dirichlet(np.ones(c), size=(m, n))   # strictly positive rows summing to 1
    probs[:, np.arange(n), y] += 0.5
    probs /= probs.sum(axis=2, keepdims=True)
    counts = draw_counts(n, m, seed)
    return probs, counts, y


# -- against straightforward numpy ----------------------------------------------------------


def test_regression_matches_numpy_reference_and_sklearn_metrics():
    members, counts, y = regression_data()
    oob = bagwise.out_of_bag(members, counts, y)
    ref = reference(members, counts, y, "regression")
    # straightforward numpy (reference() above)
    np.testing.assert_allclose(oob.prediction, ref["prediction"], rtol=1e-13)
    np.testing.assert_array_equal(oob.n_out_of_bag, ref["n_oob"])
    assert oob.squared_error == pytest.approx(ref["squared_error"], rel=1e-12)
    assert oob.absolute_error == pytest.approx(ref["absolute_error"], rel=1e-12)
    assert oob.ensemble_loss == oob.squared_error and oob.loss == "squared_error"
    # sklearn.metrics.mean_squared_error / mean_absolute_error on the OOB predictions
    assert oob.squared_error == pytest.approx(sklearn.metrics.mean_squared_error(y, oob.prediction),
                                              rel=1e-12)
    assert oob.absolute_error == pytest.approx(
        sklearn.metrics.mean_absolute_error(y, oob.prediction), rel=1e-12)
    assert oob.error_rate is None and oob.task == "regression"
    absolute = bagwise.out_of_bag(members, counts, y, loss="absolute_error")
    assert absolute.ensemble_loss == oob.absolute_error


def test_weights_enter_every_mean():
    members, counts, y = regression_data(seed=2)
    w = np.random.default_rng(3).uniform(0, 2, size=len(y))
    oob = bagwise.out_of_bag(members, counts, y, point_weights=w)
    ref = reference(members, counts, y, "regression", weights=w)
    assert oob.squared_error == pytest.approx(ref["squared_error"], rel=1e-12)
    # sklearn.metrics.mean_squared_error with sample_weight
    assert oob.squared_error == pytest.approx(
        sklearn.metrics.mean_squared_error(y, oob.prediction, sample_weight=w), rel=1e-12)


def test_zero_weights_give_nan_with_a_warning():
    members, counts, y = regression_data(n=100, m=20, seed=22)
    with pytest.warns(bagwise.BagwiseWarning, match="`point_weights`: .* sum to zero"):
        oob = bagwise.out_of_bag(members, counts, y, point_weights=np.zeros(100))
    assert np.isnan(oob.ensemble_loss) and np.isfinite(oob.prediction).all()


def test_probabilities_match_numpy_and_sklearn_metrics():
    probs, counts, y = probability_data()
    oob = bagwise.out_of_bag(probs, counts, y)
    ref = reference(probs, counts, y, "probabilities")
    assert oob.kind == "probabilities" and oob.loss == "error_rate"
    np.testing.assert_allclose(oob.probabilities, ref["probabilities"], rtol=1e-13)
    np.testing.assert_array_equal(oob.prediction, ref["prediction"])
    for name in ("error_rate", "brier_score", "log_loss"):
        assert getattr(oob, name) == pytest.approx(ref[name], rel=1e-12), name
    # sklearn.metrics.accuracy_score and log_loss on the OOB mean probabilities
    assert 1 - oob.error_rate == pytest.approx(
        sklearn.metrics.accuracy_score(y, oob.prediction.astype(int)), rel=1e-12)
    assert oob.log_loss == pytest.approx(
        sklearn.metrics.log_loss(y, oob.probabilities, labels=np.arange(4)), rel=1e-10)


def test_binary_brier_is_twice_sklearns():
    # sklearn.metrics.brier_score_loss (binary) = mean (p1 - y)^2; the multi-class form
    # sum_c (p_c - [y = c])^2 counts the same deviation twice (Brier 1950).
    probs, counts, y = probability_data(c=2, seed=4)
    oob = bagwise.out_of_bag(probs, counts, y, loss="brier_score")
    assert oob.ensemble_loss == oob.brier_score
    sk = sklearn.metrics.brier_score_loss(y, oob.probabilities[:, 1])
    assert oob.brier_score == pytest.approx(2 * sk, rel=1e-12)


def test_labels_vote_with_lowest_class_winning_ties():
    # 4 members, one point, all out of bag: votes 2, 1, 2, 1 -> tie between 1 and 2 -> 1
    # (documented rule: lowest class index wins).
    members = np.array([[2], [1], [2], [1]], dtype=np.int32)
    counts = np.zeros((4, 1), dtype=np.uint8)
    oob = bagwise.out_of_bag(members, counts, np.array([2]))
    assert oob.prediction.tolist() == [1.0]
    np.testing.assert_array_equal(oob.probabilities, [[0.0, 0.5, 0.5]])
    assert oob.error_rate == 1.0
    # Brier: 0 + 0.25 + 0.25 (hand computed)
    assert oob.brier_score == pytest.approx(0.5, rel=1e-15)


def test_labels_match_numpy_reference_including_log_loss_floor():
    rng = np.random.default_rng(5)
    n, m = 800, 25
    y = rng.integers(0, 3, size=n)
    members = np.where(rng.random((m, n)) < 0.6, y, rng.integers(0, 3, size=(m, n))).astype(np.int16)
    counts = bagwise.resample(n, m, rng=5).counts
    oob = bagwise.out_of_bag(members, counts, y, loss="log_loss")
    ref = reference(members, counts, y, "labels")   # straightforward numpy (reference above)
    np.testing.assert_allclose(oob.probabilities, ref["probabilities"], rtol=1e-15)
    np.testing.assert_array_equal(oob.prediction, ref["prediction"])
    for name in ("error_rate", "brier_score", "log_loss"):
        assert getattr(oob, name) == pytest.approx(ref[name], rel=1e-12), name
    # some vote fractions of the true class are zero, so the floor matters here
    assert np.any(oob.probabilities[np.arange(n), y] == 0)


def test_curve_matches_reference_over_the_first_k_members():
    members, counts, y = regression_data(n=300, m=60, seed=6)
    oob = bagwise.out_of_bag(members, counts, y, sizes=[1, 3, 10, 30])
    assert oob.sizes.tolist() == [1, 3, 10, 30, 60]   # the full ensemble is appended
    for k, err, covered in zip(oob.sizes, oob.curve, oob.n_covered):
        ref = reference(members, counts, y, "regression", k=k)   # numpy on members[:k]
        assert covered == ref["covered"]
        assert err == pytest.approx(ref["squared_error"], rel=1e-12)
    assert oob.loss_curve("absolute_error")[-1] == oob.absolute_error
    default = bagwise.out_of_bag(members, counts, y).sizes
    assert default[0] == 1 and default[-1] == 60 and np.all(np.diff(default) > 0)
    ratios = default[1:] / default[:-1]
    assert ratios[-1] < 1.5   # roughly log-spaced: bounded ratio at the top


def test_classification_curve_matches_reference():
    probs, counts, y = probability_data(n=400, m=20, seed=7)
    oob = bagwise.out_of_bag(probs, counts, y, loss="brier_score")
    for k, err in zip(oob.sizes, oob.curve):   # numpy reference on members[:k]
        assert err == pytest.approx(reference(probs, counts, y, "probabilities", k=k)["brier_score"],
                                    rel=1e-12)


# -- against scikit-learn's bagging ---------------------------------------------------------


def test_matches_sklearn_bagging_regressor_on_diabetes():
    # sklearn.datasets.load_diabetes; sklearn.ensemble.BaggingRegressor(oob_score=True)
    X, y = sklearn.datasets.load_diabetes(return_X_y=True)
    n = len(y)
    bag = sklearn.ensemble.BaggingRegressor(n_estimators=50, oob_score=True, random_state=0).fit(X, y)
    counts = np.array([np.bincount(s, minlength=n) for s in bag.estimators_samples_])
    members = np.array([est.predict(X[:, feats])
                        for est, feats in zip(bag.estimators_, bag.estimators_features_)])
    oob = bagwise.out_of_bag(members, counts, y)
    assert oob.n_without_out_of_bag == 0
    np.testing.assert_allclose(oob.prediction, bag.oob_prediction_, rtol=1e-10, atol=0)
    # BaggingRegressor.oob_score_ is sklearn.metrics.r2_score of its OOB prediction
    assert sklearn.metrics.r2_score(y, oob.prediction) == pytest.approx(bag.oob_score_, rel=1e-10)


def test_matches_sklearn_bagging_classifier_on_breast_cancer():
    # sklearn.datasets.load_breast_cancer; BaggingClassifier averages predict_proba of the
    # out-of-bag estimators into oob_decision_function_ (soft vote).
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    n = len(y)
    bag = sklearn.ensemble.BaggingClassifier(n_estimators=50, oob_score=True, random_state=1).fit(X, y)
    counts = np.array([np.bincount(s, minlength=n) for s in bag.estimators_samples_])
    probs = np.array([est.predict_proba(X[:, feats])
                      for est, feats in zip(bag.estimators_, bag.estimators_features_)])
    oob = bagwise.out_of_bag(probs, counts, y)
    assert oob.n_without_out_of_bag == 0
    np.testing.assert_allclose(oob.probabilities, bag.oob_decision_function_, rtol=1e-10, atol=1e-12)
    # oob_score_ is the accuracy of argmax(oob_decision_function_)
    assert 1 - oob.error_rate == pytest.approx(bag.oob_score_, rel=1e-12)
    # hard votes of the same members: checked against the numpy reference
    labels = np.array([est.predict(X[:, feats]).astype(np.int64)
                       for est, feats in zip(bag.estimators_, bag.estimators_features_)])
    hard = bagwise.out_of_bag(labels, counts, y)
    ref = reference(labels, counts, y, "labels")
    assert hard.error_rate == pytest.approx(ref["error_rate"], rel=1e-12)


# -- points without an out-of-bag member ------------------------------------------------------


def test_points_without_out_of_bag_member_are_counted_and_warned():
    members, counts, y = regression_data(n=200, m=10, seed=8)
    counts = counts.copy()
    counts[:, [3, 17, 50]] = 1   # in bag for every member
    expected = int(((counts == 0).sum(axis=0) == 0).sum())   # straightforward numpy
    assert expected >= 3
    with pytest.warns(bagwise.BagwiseWarning, match=f"{expected} of 200 points have no out-of-bag member"):
        oob = bagwise.out_of_bag(members, counts, y)
    assert oob.n_without_out_of_bag == expected
    assert np.isnan(oob.prediction[[3, 17, 50]]).all()
    assert np.array_equal(oob.covered, oob.n_out_of_bag > 0)
    ref = reference(members, counts, y, "regression")
    assert oob.squared_error == pytest.approx(ref["squared_error"], rel=1e-12)
    assert oob.n_covered[-1] == 200 - oob.n_without_out_of_bag
    frame = oob.to_frame()
    assert frame["prediction"].isna().sum() == oob.n_without_out_of_bag


def test_classification_without_out_of_bag_member_gives_nan_rows():
    probs, counts, y = probability_data(n=50, m=5, c=3, seed=9)
    counts = counts.copy()
    counts[:, 0] = 2
    with pytest.warns(bagwise.BagwiseWarning, match="no out-of-bag member"):
        oob = bagwise.out_of_bag(probs, counts, y)
    assert np.isnan(oob.prediction[0]) and np.isnan(oob.probabilities[0]).all()


# -- dtypes, n_jobs, strides -----------------------------------------------------------------

COUNT_DTYPES = [np.uint8, np.uint16, np.uint32, np.uint64, np.int8, np.int16, np.int32, np.int64]


def test_every_count_dtype_gives_identical_results():
    members, counts, y = regression_data(n=500, m=20, seed=10)
    results = [bagwise.out_of_bag(members, counts.astype(dt), y) for dt in COUNT_DTYPES]
    for r in results[1:]:
        np.testing.assert_array_equal(r.prediction, results[0].prediction)
        np.testing.assert_array_equal(r.curve, results[0].curve)
        assert r.ensemble_loss == results[0].ensemble_loss


def test_label_dtypes_and_float32_members():
    members, counts, y = regression_data(n=400, m=15, seed=11)
    f32 = members.astype(np.float32)
    a = bagwise.out_of_bag(f32, counts, y)
    b = bagwise.out_of_bag(f32.astype(np.float64), counts, y)   # same values, widened by us
    np.testing.assert_array_equal(a.prediction, b.prediction)
    assert a.ensemble_loss == b.ensemble_loss
    labels = (members > 0).astype(np.int64)
    yl = (y > 0).astype(np.int64)
    results = [bagwise.out_of_bag(labels.astype(dt), counts, yl) for dt in COUNT_DTYPES]
    assert len({r.brier_score for r in results}) == 1


@pytest.mark.parametrize("kind", ["labels", "probabilities"])
def test_class_targets_of_any_dtype_give_identical_results(kind):
    # Class indices reach the core as int64 without a float copy; whole floats (1.0) and
    # narrower integers must give the same bits, over several blocks of points.
    rng = np.random.default_rng(12)
    n, m = 30_000, 40
    y = rng.integers(0, 3, size=n)
    counts = bagwise.resample(n, m, rng=12).counts
    if kind == "labels":
        members = (y + (rng.random((m, n)) < 0.4)) % 3
    else:
        members = rng.dirichlet(np.ones(3), size=(m, n))
    results = [bagwise.out_of_bag(members, counts, target)
               for target in (y, y.astype(np.float64), y.astype(np.int32), y.astype(np.uint8),
                              list(y))]
    assert results[0].n_without_out_of_bag == 0
    for r in results[1:]:
        np.testing.assert_array_equal(r.prediction, results[0].prediction)
        np.testing.assert_array_equal(r.probabilities, results[0].probabilities)
        np.testing.assert_array_equal(r.curve, results[0].curve)
        assert r.ensemble_loss == results[0].ensemble_loss


def test_results_do_not_depend_on_threads():
    members, counts, y = regression_data(n=50_000, m=12, seed=12)
    one = bagwise.out_of_bag(members, counts, y, n_jobs=1)
    two = bagwise.out_of_bag(members, counts, y, n_jobs=2)
    three = bagwise.out_of_bag(members, counts, y, n_jobs=3)
    for other in (two, three):
        np.testing.assert_array_equal(other.prediction, one.prediction)
        np.testing.assert_array_equal(other.curve, one.curve)
        assert other.ensemble_loss == one.ensemble_loss
    probs, counts, y = probability_data(n=20_000, m=8, c=3, seed=12)
    one = bagwise.out_of_bag(probs, counts, y, n_jobs=1)
    two = bagwise.out_of_bag(probs, counts, y, n_jobs=2)
    np.testing.assert_array_equal(two.probabilities, one.probabilities)
    assert (two.brier_score, two.log_loss) == (one.brier_score, one.log_loss)


def test_strided_and_fortran_inputs():
    members, counts, y = regression_data(n=600, m=20, seed=13)
    whole = bagwise.out_of_bag(members[:, ::2], counts[:, ::2], y[::2])
    copy = bagwise.out_of_bag(members[:, ::2].copy(), counts[:, ::2].copy(), y[::2].copy())
    np.testing.assert_array_equal(whole.prediction, copy.prediction)
    assert whole.ensemble_loss == copy.ensemble_loss
    fortran = bagwise.out_of_bag(np.asfortranarray(members), np.asfortranarray(counts), y)
    base = bagwise.out_of_bag(members, counts, y)
    np.testing.assert_array_equal(fortran.prediction, base.prediction)
    probs, pc, py = probability_data(n=200, m=6, seed=14)
    strided = np.swapaxes(np.swapaxes(probs, 0, 1).copy(), 0, 1)   # non-C layout
    assert not strided.flags.c_contiguous
    a, b = bagwise.out_of_bag(strided, pc, py), bagwise.out_of_bag(probs, pc, py)
    assert a.log_loss == b.log_loss
    np.testing.assert_array_equal(a.probabilities, b.probabilities)


def test_non_native_byte_order_is_accepted():
    members, counts, y = regression_data(n=300, m=20, seed=23)
    big = bagwise.out_of_bag(members.astype(">f8"), counts.astype(">u2"), y.astype(">f8"))
    assert big.ensemble_loss == bagwise.out_of_bag(members, counts, y).ensemble_loss


def test_stream_warns_at_finish_for_points_without_out_of_bag_member():
    members, counts, y = regression_data(n=100, m=20, seed=24)
    counts = counts.copy()
    counts[:, 70] = 3
    stream = bagwise.out_of_bag_stream()
    stream.update(members[:, :50], counts[:, :50], y[:50])
    stream.update(members[:, 50:], counts[:, 50:], y[50:])
    with pytest.warns(bagwise.BagwiseWarning, match="1 of 100 points"):
        result = stream.result()
    assert np.isnan(result.prediction[70]) and result.n_without_out_of_bag == 1


def test_loss_curve_rejects_a_loss_of_the_other_task():
    members, counts, y = regression_data(n=100, m=20, seed=25)
    oob = bagwise.out_of_bag(members, counts, y)
    with pytest.raises(ValueError, match="`loss`"):
        oob.loss_curve("log_loss")
    with pytest.raises(ValueError, match="`loss`"):
        oob.loss_curve("covered")


def test_accepts_a_resample_result_as_counts():
    members, _, y = regression_data(n=300, m=30, seed=15)
    draw = bagwise.resample(300, 30, rng=15)
    assert (bagwise.out_of_bag(members, draw, y).ensemble_loss
            == bagwise.out_of_bag(members, draw.counts, y).ensemble_loss)


# -- streaming over memory-mapped chunks ------------------------------------------------------


@pytest.mark.parametrize("kind", ["regression", "labels", "probabilities"])
def test_stream_over_memory_mapped_chunks_equals_in_memory(tmp_path, kind):
    if kind == "probabilities":
        members, counts, y = probability_data(n=5000, m=12, c=3, seed=16)
    else:
        members, counts, y = regression_data(n=5000, m=12, seed=16)
        if kind == "labels":
            members, y = np.clip(np.round(members + 2), 0, 4).astype(np.int32), np.clip(
                np.round(y + 2), 0, 4).astype(np.int64)
    w = np.random.default_rng(17).uniform(0.5, 1.5, size=len(y))
    for name, array in (("members", members), ("counts", counts), ("y", y), ("w", w)):
        np.save(tmp_path / f"{name}.npy", array)
    mm = {name: np.load(tmp_path / f"{name}.npy", mmap_mode="r") for name in ("members", "counts", "y", "w")}
    stream = bagwise.out_of_bag_stream(loss="brier_score" if kind != "regression" else None)
    edges = [0, 7, 1000, 1001, 3333, 5000]
    for a, b in zip(edges[:-1], edges[1:]):
        stream.update(mm["members"][:, a:b], mm["counts"][:, a:b], mm["y"][a:b], mm["w"][a:b])
    got = stream.result()
    want = bagwise.out_of_bag(members, counts, y, point_weights=w,
                              loss="brier_score" if kind != "regression" else None)
    np.testing.assert_array_equal(got.n_out_of_bag, want.n_out_of_bag)
    np.testing.assert_allclose(got.prediction, want.prediction, rtol=1e-12)
    np.testing.assert_allclose(got.curve, want.curve, rtol=1e-12)
    np.testing.assert_array_equal(got.n_covered, want.n_covered)
    assert got.ensemble_loss == pytest.approx(want.ensemble_loss, rel=1e-12)
    if kind != "regression":
        np.testing.assert_allclose(got.probabilities, want.probabilities, rtol=1e-12)
        assert got.log_loss == pytest.approx(want.log_loss, rel=1e-12)
    assert "chunks" in repr(stream)


@pytest.mark.parametrize("kind", ["regression", "labels", "probabilities"])
def test_stream_merge_of_two_halves_equals_the_whole_and_pickles(kind):
    if kind == "probabilities":
        members, counts, y = probability_data(n=900, m=10, c=3, seed=26)
    else:
        members, counts, y = regression_data(n=900, m=10, seed=26)
        if kind == "labels":
            members, y = np.clip(np.round(members + 2), 0, 4).astype(np.int32), np.clip(
                np.round(y + 2), 0, 4).astype(np.int64)
    loss = "log_loss" if kind != "regression" else "absolute_error"
    first, second = bagwise.out_of_bag_stream(loss=loss), bagwise.out_of_bag_stream(loss=loss)
    assert first.update(members[:, :400], counts[:, :400], y[:400]) is first
    second.update(members[:, 400:], counts[:, 400:], y[400:])
    second = pickle.loads(pickle.dumps(second))
    assert first.merge(second) is first
    got, want = first.result(), bagwise.out_of_bag(members, counts, y, loss=loss)
    np.testing.assert_array_equal(got.n_out_of_bag, want.n_out_of_bag)
    np.testing.assert_allclose(got.prediction, want.prediction, rtol=1e-12)
    np.testing.assert_allclose(got.curve, want.curve, rtol=1e-12)
    np.testing.assert_array_equal(got.n_covered, want.n_covered)
    assert got.ensemble_loss == pytest.approx(want.ensemble_loss, rel=1e-12)
    # a pickled stream continues exactly where it stopped
    again = pickle.loads(pickle.dumps(bagwise.out_of_bag_stream(loss=loss).update(
        members[:, :400], counts[:, :400], y[:400])))
    again.update(members[:, 400:], counts[:, 400:], y[400:])
    np.testing.assert_array_equal(again.result().curve, first.result().curve)
    # merging an empty stream changes nothing, into an empty one copies
    assert bagwise.out_of_bag_stream(loss=loss).merge(first).result().ensemble_loss == got.ensemble_loss
    with pytest.raises(TypeError, match="`other`"):
        first.merge(object())


def test_core_state_rejects_corrupt_bytes():
    members, counts, y = regression_data(n=50, m=6, seed=27)
    state, _, _ = bagwise._core.out_of_bag_chunk(members, counts, y, None, [6], "regression")
    data = state.to_bytes()
    assert bagwise._core.OutOfBagState.from_bytes(data).n_points == 50
    with pytest.raises(ValueError, match="`data`"):
        bagwise._core.OutOfBagState.from_bytes(data[:-3])
    with pytest.raises(ValueError, match="`data`"):
        bagwise._core.OutOfBagState.from_bytes(b"\x07" + data[1:])


def test_result_is_frozen():
    members, counts, y = regression_data(n=60, m=5, seed=28)
    oob = bagwise.out_of_bag(members, counts, y)
    assert isinstance(oob, bagwise._results.Result)
    with pytest.raises(AttributeError):
        oob.ensemble_loss = 0.0
    assert oob.curve[-1] == oob.ensemble_loss and oob.loss_curve() is oob.curve


def test_stream_rejects_inconsistent_chunks():
    members, counts, y = regression_data(n=100, m=8, seed=18)
    stream = bagwise.out_of_bag_stream()
    with pytest.raises(ValueError, match="no chunk"):
        stream.result()
    stream.update(members[:, :50], counts[:, :50], y[:50])
    with pytest.raises(ValueError, match="`members`"):
        stream.update(members[:4, 50:], counts[:4, 50:], y[50:])
    with pytest.raises(ValueError, match="`members`"):
        stream.update((members[:, 50:] > 0).astype(int), counts[:, 50:], (y[50:] > 0).astype(int))


# -- bad input --------------------------------------------------------------------------------


def test_bad_input_raises_naming_the_argument():
    members, counts, y = regression_data(n=50, m=6, seed=19)
    bad = members.copy()
    bad[2, 7] = np.nan
    with pytest.raises(ValueError, match=r"^`members`: contains NaN or infinite.*member 2, point 7"):
        bagwise.out_of_bag(bad, counts, y)
    bad[2, 7] = np.inf
    with pytest.raises(ValueError, match=r"^`members`"):
        bagwise.out_of_bag(bad, counts, y)
    with pytest.raises(ValueError, match=r"^`counts`: has shape"):
        bagwise.out_of_bag(members, counts[:, :-1], y)
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.out_of_bag(members, counts, y[:-1])
    ybad = y.copy()
    ybad[0] = np.nan
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.out_of_bag(members, counts, ybad)
    negative = counts.astype(np.int16)
    negative[1, 3] = -1
    with pytest.raises(ValueError, match=r"^`counts`: .*non-negative"):
        bagwise.out_of_bag(members, negative, y)
    with pytest.raises(TypeError, match=r"^`counts`"):
        bagwise.out_of_bag(members, counts == 0, y)
    with pytest.raises(TypeError, match=r"^`counts`"):
        bagwise.out_of_bag(members, counts.astype(float), y)
    with pytest.raises(ValueError, match=r"^`members`: is empty"):
        bagwise.out_of_bag(np.empty((0, 5)), np.empty((0, 5), dtype=np.uint8), np.zeros(5))
    with pytest.raises(TypeError, match=r"^`members`"):
        bagwise.out_of_bag(members.astype(np.float16), counts, y)
    with pytest.raises(ValueError, match=r"^`members`"):
        bagwise.out_of_bag(members[None, None], counts, y)
    with pytest.raises(ValueError, match=r"^`loss`"):
        bagwise.out_of_bag(members, counts, y, loss="error_rate")
    with pytest.raises(ValueError, match=r"^`point_weights`"):
        bagwise.out_of_bag(members, counts, y, point_weights=-np.ones(50))
    with pytest.raises(ValueError, match=r"^`point_weights`"):
        bagwise.out_of_bag(members, counts, y, point_weights=np.ones(3))
    with pytest.raises(ValueError, match=r"^`sizes`"):
        bagwise.out_of_bag(members, counts, y, sizes=[0, 2])
    with pytest.raises(ValueError, match=r"^`n_jobs`|^`n_jobs`: must be at least 1"):
        bagwise.out_of_bag(members, counts, y, n_jobs=0)


def test_bad_classification_input():
    probs, counts, y = probability_data(n=40, m=5, c=3, seed=20)
    bad = probs.copy()
    bad[1, 2, 0] += 1e-4
    with pytest.raises(ValueError, match=r"^`members`: class probabilities must .*sum to 1"):
        bagwise.out_of_bag(bad, counts, y)
    fine = probs.copy()
    fine[1, 2, 0] += 1e-7    # within the documented 1e-5 tolerance
    bagwise.out_of_bag(fine, counts, y)
    negative = probs.copy()
    negative[0, 0] = [1.5, -0.5, 0.0]
    with pytest.raises(ValueError, match=r"^`members`"):
        bagwise.out_of_bag(negative, counts, y)
    with pytest.raises(ValueError, match=r"^`y`: class labels must be integers in 0\.\.3"):
        bagwise.out_of_bag(probs, counts, np.where(np.arange(40) == 5, 3, y))
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.out_of_bag(probs, counts, y + 0.5)
    labels = np.argmax(probs, axis=2)
    with pytest.raises(ValueError, match=r"^`members`: class labels must be non-negative"):
        bagwise.out_of_bag(labels - 1, counts, y)
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.out_of_bag(labels, counts, -y - 1)
    with pytest.raises(ValueError, match=r"^`members`: at most 65536"):
        bagwise.out_of_bag(labels * 100_000, counts, y)
    with pytest.raises(ValueError, match=r"^`loss`"):
        bagwise.out_of_bag(labels, counts, y, loss="squared_error")


def test_display_never_raises():
    members, counts, y = regression_data(n=60, m=5, seed=21)
    oob = bagwise.out_of_bag(members, counts, y)
    assert "squared error" in repr(oob) and "<table" in oob._repr_html_()
    frame = oob.curve_frame()
    assert frame["size"].tolist() == oob.sizes.tolist()
    object.__setattr__(oob, "curve", None)   # broken on purpose: the HTML hook falls back to text
    assert oob._repr_html_().startswith("<pre>")


def test_missing_in_bag_entries_are_ignored():
    # Out-of-bag predictions with NaN where a member saw the row (the layout of
    # BagRegressor.out_of_bag_predictions) give the same result as any filler there;
    # a NaN at an out-of-bag entry is still an error naming `members`.
    rng = np.random.default_rng(5)
    counts = bagwise.resample(80, 30, rng=3).counts
    members = rng.normal(size=(30, 80))
    y = rng.normal(size=80)
    marked = np.where(counts > 0, np.nan, members)
    want = bagwise.out_of_bag(members, counts, y)
    got = bagwise.out_of_bag(marked, counts, y)
    np.testing.assert_array_equal(got.prediction, want.prediction)
    assert got.ensemble_loss == want.ensemble_loss
    probabilities = rng.dirichlet(np.ones(3), size=(30, 80))
    labels = rng.integers(0, 3, size=80)
    marked3 = np.where((counts > 0)[..., None], np.nan, probabilities)
    np.testing.assert_array_equal(bagwise.out_of_bag(marked3, counts, labels).probabilities,
                                  bagwise.out_of_bag(probabilities, counts, labels).probabilities)
    bad = members.copy()
    bad[np.nonzero(counts == 0)[0][0], np.nonzero(counts == 0)[1][0]] = np.nan
    with pytest.raises(ValueError, match="`members`"):
        bagwise.out_of_bag(bad, counts, y)


def test_missing_in_bag_entries_retry_keeps_progress_monotone_and_streams_work():
    # The missing in-bag entries are only looked for after the core refuses the members
    # (far into the points here, so progress was reported before the retry).
    rng = np.random.default_rng(8)
    n, m = 150_000, 5   # more points than one round of blocks on one thread
    counts = draw_counts(n, m, seed=8)
    members = rng.normal(size=(m, n))
    y = rng.normal(size=n)
    marked = members.copy()
    in_bag = np.flatnonzero(counts[3] > 0)
    marked[3, in_bag[in_bag > 140_000][0]] = np.inf
    reports = []
    got = bagwise.out_of_bag(marked, counts, y, n_jobs=1,
                             progress=lambda done, total: reports.append(done))
    want = reference(members, counts, y, "regression")
    np.testing.assert_allclose(got.prediction, want["prediction"], rtol=1e-12)
    assert reports == sorted(reports) and reports[-1] == n
    stream = bagwise.out_of_bag_stream().update(marked[:, :90_000], counts[:, :90_000],
                                                y[:90_000])
    stream.update(marked[:, 90_000:], counts[:, 90_000:], y[90_000:])
    assert stream.result().ensemble_loss == pytest.approx(want["squared_error"], rel=1e-12)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_values_over_block_and_group_boundaries(dtype):
    # More points than one block (not a multiple of it), every member size on the curve
    # and a member with no out-of-bag point; float32 members are summed in float64.
    rng = np.random.default_rng(9)
    n, m = 2 * 16_384 + 77, 21
    counts = draw_counts(n, m, seed=9)
    counts[4] = 1
    members = (rng.normal(size=(m, n)) * 10).astype(dtype)
    y = rng.normal(size=n)
    sizes = list(range(1, m + 1))
    got = bagwise.out_of_bag(members, counts, y, sizes=sizes)
    for k in (1, 4, 5, 8, 9, 16, 17, m):
        want = reference(members, counts, y, "regression", k=k)
        assert got.curve[k - 1] == pytest.approx(want["squared_error"], rel=1e-12)
        assert got.n_covered[k - 1] == want["covered"]
    np.testing.assert_allclose(got.prediction, want["prediction"], rtol=1e-12)
    np.testing.assert_array_equal(got.n_out_of_bag, want["n_oob"])


@pytest.mark.parametrize("dtype", [np.uint8, np.int8, np.uint16, np.int16, np.int32, np.uint64])
def test_count_dtypes_and_strides_give_the_same_result(dtype):
    rng = np.random.default_rng(10)
    n, m = 3_001, 12
    counts = draw_counts(n, m, seed=10)
    members = rng.normal(size=(m, n))
    y = rng.normal(size=n)
    want = reference(members, counts, y, "regression")
    # Counts laid out point-major, and members read through a step of two.
    strided_counts = np.asfortranarray(counts.astype(dtype))
    wide = np.repeat(members, 2, axis=1)[:, ::2]
    got = bagwise.out_of_bag(wide, strided_counts, y)
    np.testing.assert_allclose(got.prediction, want["prediction"], rtol=1e-12)
    assert got.ensemble_loss == pytest.approx(want["squared_error"], rel=1e-12)


@pytest.mark.parametrize("dtype", [np.int8, np.int16])
def test_negative_small_counts_are_named(dtype):
    counts = draw_counts(50, 4, seed=11).astype(dtype)
    counts[2, 31] = -3
    with pytest.raises(ValueError, match=r"^`counts`: in-bag counts must be non-negative, got "
                                         r"-3 \(member 2, row 31\)"):
        bagwise.out_of_bag(np.zeros((4, 50)), counts, np.zeros(50))


@pytest.mark.parametrize("n_classes", [2, 3, 10])
@pytest.mark.parametrize("members_of", ["labels int64", "labels uint8 strided",
                                        "probabilities float64",
                                        "probabilities float32 strided"])
def test_classes_over_block_boundaries_match_numpy(n_classes, members_of):
    # 20,011 points (prime: a multiple of no block), several blocks for every class count;
    # the curve at sizes where few points are covered yet; ties in the votes.
    rng = np.random.default_rng(12 + n_classes)
    n, m = 20_011, 17
    probs, counts, y = probability_data(n=n, m=m, c=n_classes, seed=12 + n_classes)
    if members_of.startswith("labels"):
        members = rng.integers(0, n_classes, size=(m, n))
        members[:, :50] = np.arange(50) % n_classes   # ties between classes
        if "uint8" in members_of:
            members = members.astype(np.uint8)
    else:
        members = probs.astype(np.float32 if "float32" in members_of else np.float64)
    if "strided" in members_of:
        wide = np.repeat(members, 2, axis=1)
        members = wide[:, ::2]
        assert not members.flags.c_contiguous
    weights = rng.random(n)
    sizes = [1, 2, 3, 5, 8, 13, m]
    got = bagwise.out_of_bag(members, counts, y, point_weights=weights, sizes=sizes)
    kind = "labels" if members_of.startswith("labels") else "probabilities"
    for i, k in enumerate(sizes):
        want = reference(members, counts, y, kind, weights=weights, k=k)
        assert got.n_covered[i] == want["covered"]
        for loss in ("error_rate", "brier_score", "log_loss"):
            assert got.loss_curve(loss)[i] == pytest.approx(want[loss], rel=1e-12), (k, loss)
    np.testing.assert_array_equal(got.n_out_of_bag, want["n_oob"])
    np.testing.assert_array_equal(got.prediction, want["prediction"])
    np.testing.assert_allclose(got.probabilities, want["probabilities"], rtol=1e-12)


def test_labels_above_the_classes_of_y_are_counted():
    # y lacks the top class the members vote for: the class count comes from the labels.
    rng = np.random.default_rng(13)
    n, m = 3_001, 9
    counts = draw_counts(n, m, seed=13)
    members = rng.integers(0, 4, size=(m, n))
    y = np.minimum(rng.integers(0, 4, size=n), 2)
    got = bagwise.out_of_bag(members, counts, y)
    want = reference(members, counts, y, "labels")
    assert got.probabilities.shape == (n, 4)
    np.testing.assert_allclose(got.probabilities, want["probabilities"], rtol=1e-12)
    assert got.log_loss == pytest.approx(want["log_loss"], rel=1e-12)
    stream = bagwise.out_of_bag_stream()
    for part in (slice(0, 1000), slice(1000, n)):
        stream.update(members[:, part], counts[:, part], y[part])
    assert stream.result().log_loss == pytest.approx(want["log_loss"], rel=1e-12)
    members[3, 7] = 70_000
    with pytest.raises(ValueError, match=r"^`members`: at most 65536 .* found label 70000"):
        bagwise.out_of_bag(members, counts, y)


def test_labels_above_the_classes_of_y_keep_progress_monotone():
    # The label above the classes of y sits in the last round of blocks, so the first run
    # reports progress before it is refused and the run with all labels counted restarts.
    n, m = 150_000, 3
    counts = draw_counts(n, m, seed=14)
    members = np.zeros((m, n), dtype=np.int64)
    members[1, -1] = 3
    y = np.zeros(n, dtype=np.int64)
    y[:10] = 2
    reports = []
    got = bagwise.out_of_bag(members, counts, y, n_jobs=2,
                             progress=lambda done, total: reports.append((done, total)))
    assert got.probabilities.shape == (n, 4)
    done = [d for d, _ in reports]
    assert done == sorted(done) and reports[-1] == (n, n)
