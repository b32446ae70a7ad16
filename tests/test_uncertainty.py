"""Standard errors of bagged predictions: closed forms, the defining sums, a Monte-Carlo
truth over independent training sets, and bad input."""

from __future__ import annotations

import math
import pickle
import warnings

import numpy as np
import pytest
from sklearn.datasets import make_friedman1
from sklearn.ensemble import BaggingRegressor
from sklearn.tree import DecisionTreeRegressor

import bagwise


def direct_sums(members, counts, chunk=7):
    """V_IJ and V_J by their defining sums, chunked over training rows (independent of the
    Gram route). Efron (2014) for the IJ, Wager, Hastie & Efron (2014) for the jackknife."""
    t = members.astype(np.float64)
    b, n = counts.shape
    tc = t - t.mean(axis=0)
    ij = np.zeros(t.shape[1])
    jk = np.zeros(t.shape[1])
    for start in range(0, n, chunk):
        nc = counts[:, start:start + chunk].astype(np.float64)
        cov = (nc - nc.mean(axis=0)).T @ tc / b           # (rows, points)
        ij += (cov**2).sum(axis=0)
        out = nc == 0
        o = out.sum(axis=0)
        keep = o > 0
        loo = (out[:, keep].T.astype(float) @ t) / o[keep, None]   # t̄_(−i)
        jk += ((loo - t.mean(axis=0)) ** 2).sum(axis=0)
    jk *= (n - 1) / n
    spread = (tc**2).sum(axis=0)
    return ij, jk, spread


@pytest.fixture
def ensemble():
    rng = np.random.default_rng(4)
    n, b, p = 60, 80, 9
    counts = bagwise.resample(n, b, rng=2).counts
    x = rng.normal(size=(n, p))
    # Member predictions that depend on their counts, like fitted models do.
    members = counts @ x / n + 0.1 * rng.normal(size=(b, p))
    return members, counts


def test_ij_and_jackknife_equal_their_defining_sums(ensemble):
    members, counts = ensemble
    b, n = counts.shape
    ij, jk, spread = direct_sums(members, counts)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)   # small B: correction warnings
        raw_ij = bagwise.prediction_variance(members, counts, corrected=False)
        raw_jk = bagwise.prediction_variance(members, counts, method="jackknife",
                                             corrected=False)
        cor_ij = bagwise.prediction_variance(members, counts)
        cor_jk = bagwise.prediction_variance(members, counts, method="jackknife")
    np.testing.assert_allclose(raw_ij.variance, ij, rtol=1e-10)
    np.testing.assert_allclose(raw_jk.variance, jk, rtol=1e-10)
    # Corrections of Wager, Hastie & Efron (2014): n/B² Σ(t_b − t̄)², times (e − 1) for V_J.
    np.testing.assert_allclose(cor_ij.correction, n / b**2 * spread, rtol=1e-10)
    np.testing.assert_allclose(cor_jk.correction, (np.e - 1) * n / b**2 * spread, rtol=1e-10)
    np.testing.assert_allclose(cor_ij.variance, np.maximum(ij - n / b**2 * spread, 0), rtol=1e-10)
    np.testing.assert_allclose(raw_ij.mean, members.mean(axis=0), rtol=1e-12)


def test_bagged_mean_matches_the_multinomial_closed_form():
    # For t_b = Σ_i N_bi x_i / n the ideal IJ variance is Σ_i (x_i − x̄)² / n², from the
    # multinomial covariances Var N_i = 1 − 1/n, Cov(N_i, N_j) = −1/n (Efron 2014).
    rng = np.random.default_rng(0)
    n, b = 300, 6000
    x = rng.gamma(2.0, size=n)
    counts = bagwise.resample(n, b, rng=5).counts
    t = (counts @ x / n)[:, None]
    result = bagwise.prediction_variance(t, counts)
    ideal = ((x - x.mean()) ** 2).sum() / n**2
    assert abs(result.variance[0] / ideal - 1) < 0.05
    assert result.raw_variance[0] > result.variance[0]       # the correction is positive
    jack = bagwise.prediction_variance(t, counts, method="jackknife")
    assert abs(jack.variance[0] / ideal - 1) < 0.1


def test_subsample_factor_gives_the_unbiased_variance_of_the_mean():
    # Wager & Athey (2018) scale ((n−1)/n)(n/(n−s))² (from memory; derived in the Rust docs):
    # for the subsampled mean it must give Σ(x_i − x̄)² / (n (n − 1)).
    rng = np.random.default_rng(1)
    n, b, s = 120, 8000, 60
    x = rng.normal(size=n)
    counts = bagwise.resample(n, b, scheme="subsample", fraction=s / n, rng=3).counts
    t = (counts @ x / s)[:, None]
    result = bagwise.prediction_variance(t, counts)
    assert result.scheme == "subsample"
    unbiased = x.var(ddof=1) / n
    assert abs(result.variance[0] / unbiased - 1) < 0.06
    with pytest.raises(ValueError, match="`method`"):
        bagwise.prediction_variance(t, counts, method="jackknife")


def test_monte_carlo_truth_over_independent_training_sets():
    # Truth: the variance, across independent training sets drawn from
    # sklearn.datasets.make_friedman1 (Friedman 1991), of a bagged tree ensemble's prediction
    # at fixed points. The ensembles are scikit-learn's own BaggingRegressor; their in-bag
    # counts are rebuilt from estimators_samples_ with np.bincount.
    n, b, sets = 120, 400, 30
    x_test, _ = make_friedman1(n_samples=25, noise=0.0, random_state=999)
    predictions, estimates, covered = [], [], []
    for k in range(sets):
        x, y = make_friedman1(n_samples=n, noise=1.0, random_state=k)
        bag = BaggingRegressor(DecisionTreeRegressor(max_depth=3), n_estimators=b,
                               random_state=k).fit(x, y)
        counts = np.stack([np.bincount(s, minlength=n) for s in bag.estimators_samples_])
        members = np.stack([t.predict(x_test) for t in bag.estimators_])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", bagwise.BagwiseWarning)
            estimate = bagwise.prediction_variance(members, counts.astype(np.uint8))
        predictions.append(members.mean(axis=0))
        estimates.append(estimate)
    predictions = np.array(predictions)
    truth = predictions.var(axis=0, ddof=1)
    centre = predictions.mean(axis=0)
    mean_estimate = np.mean([e.variance for e in estimates], axis=0)
    ratio = mean_estimate.mean() / truth.mean()
    assert 0.6 <= ratio <= 1.7, ratio                        # tolerance from the issue
    for e in estimates:
        lower, upper = e.mean_interval(0.90)
        covered.append((lower <= centre) & (centre <= upper))
    coverage = np.mean(covered)
    assert 0.80 <= coverage <= 0.98, coverage


def test_spread_splits_member_variance():
    rng = np.random.default_rng(7)
    n, b = 200, 4000
    x = rng.normal(size=n)
    counts = bagwise.resample(n, b, rng=9).counts
    noise = rng.normal(scale=0.05, size=(b, 3))
    members = (counts @ x / n)[:, None] + noise
    result = bagwise.spread(members, counts)
    np.testing.assert_allclose(result.within, members.var(axis=0, ddof=1), rtol=1e-12)
    ideal_between = x.var() / n
    np.testing.assert_allclose(result.between, ideal_between, rtol=0.15)
    np.testing.assert_allclose(result.total, result.between + result.within, rtol=1e-14)
    np.testing.assert_allclose(result.rho, result.between / result.total, rtol=1e-14)
    # ESL eq. 15.1 in the between/within form.
    np.testing.assert_allclose(result.predicted_variance(10),
                               result.between + result.within / 10, rtol=1e-14)
    needed = result.members_needed(0.01)
    assert result.mean_within / needed <= 0.01 * result.mean_between
    assert result.mean_within / (needed - 1) > 0.01 * result.mean_between
    assert "rho" in repr(result) and "<table" in result._repr_html_()
    assert list(result.to_frame().columns) == ["point", "between", "within", "total", "rho",
                                              "noise", "status"]


def test_count_gram_is_reusable_and_pickles():
    counts = bagwise.resample(80, 40, rng=1).counts
    gram = bagwise.count_gram(counts, jackknife=True)
    np.testing.assert_array_equal(gram.gram, counts.astype(np.int64) @ counts.T.astype(np.int64))
    members = np.random.default_rng(0).normal(size=(40, 5)) + counts[:, :5]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        a = gram.prediction_variance(members)
        back = pickle.loads(pickle.dumps(gram))
        b = back.prediction_variance(members, method="jackknife")
        c = bagwise.prediction_variance(members, counts, method="jackknife")
    np.testing.assert_array_equal(b.variance, c.variance)
    assert a.n_members == 40 and back.n_rows == 80


def test_dtypes_strides_and_threads_give_identical_results():
    counts = bagwise.resample(300, 64, rng=4).counts
    rng = np.random.default_rng(3)
    members = rng.normal(size=(64, 40)) + counts[:, :40]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        base = bagwise.prediction_variance(members, counts, corrected=False).variance
        for variant in (counts.astype(np.uint16), counts.astype(np.int32), counts.astype(np.int64),
                        np.asfortranarray(counts)):
            got = bagwise.prediction_variance(members, variant, corrected=False).variance
            np.testing.assert_allclose(got, base, rtol=1e-12)
        strided = np.asfortranarray(members)[:, ::1]
        np.testing.assert_allclose(
            bagwise.prediction_variance(strided, counts, corrected=False).variance, base,
            rtol=1e-12)
        f32 = bagwise.prediction_variance(members.astype(np.float32), counts,
                                          corrected=False).variance
        np.testing.assert_allclose(f32, base, rtol=1e-5)
        one = bagwise.prediction_variance(members, counts, corrected=False, n_jobs=1).variance
        two = bagwise.prediction_variance(members, counts, corrected=False, n_jobs=2).variance
        np.testing.assert_array_equal(one, two)


def test_small_ensembles_warn_and_clip():
    counts = bagwise.resample(500, 10, rng=0).counts
    members = np.random.default_rng(0).normal(size=(10, 50))   # unrelated to the counts
    with pytest.warns(bagwise.BagwiseWarning) as caught:
        result = bagwise.prediction_variance(members, counts)
    messages = [str(w.message) for w in caught]
    assert len(messages) == 1
    n_not = int(np.sum(result.status == "not estimable"))
    assert f"not estimable with 10 members at {n_not} of 50 points" in messages[0]
    assert result.n_clipped > 0 and n_not >= result.n_clipped
    assert np.all(result.variance >= 0)
    assert np.all(result.correction_share > 0.5)


def test_interval_is_normal_approximation():
    counts = bagwise.resample(50, 200, rng=0).counts
    members = counts[:, :3].astype(float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        result = bagwise.prediction_variance(members, counts)
    lower, upper = result.mean_interval(0.95)
    # scipy.stats.norm.ppf(0.975) = 1.959963984540054
    np.testing.assert_allclose(upper - result.mean, 1.959963984540054 * result.std_error,
                               rtol=1e-12)
    np.testing.assert_allclose(result.mean - lower, upper - result.mean, rtol=1e-12)
    with pytest.raises(ValueError, match="`level`"):
        result.mean_interval(1.5)


@pytest.mark.parametrize(
    ("members", "counts", "argument", "error"),
    [
        (np.zeros((3, 4)), np.ones((4, 10), np.uint8), "members", ValueError),
        (np.zeros((3, 4)), -np.ones((3, 10), np.int8), "counts", ValueError),
        (np.zeros((3, 4)), np.zeros((3, 10), np.uint8), "counts", ValueError),
        (np.zeros((1, 4)), np.ones((1, 10), np.uint8), "counts", ValueError),
        (np.zeros((3, 4)), np.ones((3, 1), np.uint8), "counts", ValueError),
        (np.full((3, 4), np.nan), np.ones((3, 10), np.uint8), "members", ValueError),
        (np.zeros((3, 4)), np.ones((3, 10)), "counts", TypeError),
        (np.zeros((3, 4)), np.ones((3, 10), bool), "counts", TypeError),
        (np.zeros((3, 0)), np.ones((3, 10), np.uint8), "members", ValueError),
        (np.array([["a"] * 4] * 3), np.ones((3, 10), np.uint8), "members", TypeError),
    ],
)
def test_bad_input_names_the_argument(members, counts, argument, error):
    with pytest.raises(error, match=f"`{argument}`"):
        bagwise.prediction_variance(members, counts)


def test_bad_options_name_the_argument():
    counts = bagwise.resample(20, 5, rng=0).counts
    with pytest.raises(ValueError, match="`method`"):
        bagwise.prediction_variance(np.zeros((5, 2)), counts, method="bootstrap")
    with pytest.raises(ValueError, match="`scheme`"):
        bagwise.prediction_variance(np.zeros((5, 2)), counts, scheme="subsample")
    with pytest.raises(ValueError, match="`data`"):
        bagwise._core.CountGram.from_bytes(b"garbage")


def test_spread_members_needed_is_nan_with_one_warning_without_a_floor():
    # members that do not vary: between = within = 0, no floor to come near
    counts = bagwise.resample(30, 20, rng=1).counts
    result = bagwise.spread(np.ones((20, 4)), counts)
    assert result.mean_between == 0
    with pytest.warns(bagwise.BagwiseWarning, match="not positive") as caught:
        assert math.isnan(result.members_needed())
    assert len(caught) == 1
    assert caught[0].filename == __file__          # attributed to the caller's line
    with pytest.raises(ValueError, match="`tolerance`"):
        result.members_needed(0)
    # the display never warns
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert "nan" in repr(result)


def test_results_are_frozen_and_share_members_needed():
    import dataclasses
    import inspect

    counts = bagwise.resample(100, 200, rng=2).counts
    members = (counts @ np.random.default_rng(3).normal(size=(100, 5)) / 100
               + 0.05 * np.random.default_rng(4).normal(size=(200, 5)))
    result = bagwise.spread(members, counts)
    estimate = bagwise.prediction_variance(members, counts)
    for frozen in (result, estimate):
        with pytest.raises(dataclasses.FrozenInstanceError):
            frozen.n_members = 3
    assert result.n_members == estimate.n_members == 200 and estimate.n_rows == 100
    replicate = bagwise.replicate_spread(np.random.default_rng(5).normal(size=(3, 4, 5)))
    assert inspect.signature(result.members_needed) == inspect.signature(replicate.members_needed)
    assert result.members_needed() == result.members_needed(0.01)
    # the between part is the corrected IJ variance of the same call
    np.testing.assert_array_equal(result.between, estimate.variance)
    assert result.pooled_rho == result.mean_between / result.mean_total
    # ESL eq. 15.1 from the means over points
    assert result.mean_predicted_variance(7) == result.mean_between + result.mean_within / 7
    assert result.predicted_variance([1, 7]).shape == (5, 2)
    with pytest.raises(ValueError, match="`n_members`"):
        result.predicted_variance(0)
