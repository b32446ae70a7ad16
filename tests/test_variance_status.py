"""The Monte-Carlo noise, status and members-needed figures of every variance result, and
the per-class variances of class probabilities.

The truths come from outside the code: reseeding the members on the same training rows
(the noise), the multinomial closed form of a bagged mean (Efron & Tibshirani 1993: a bagged
sample mean has variance Σ(x − x̄)²/n² over bootstrap resamples) and the defining sums of
the infinitesimal jackknife (Efron 2014) for every class.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pytest

import bagwise
from bagwise import BagwiseWarning

#: "± 0" in any spelling ("± 0", "± 0.0", "±0"): never printed from a clipped estimate.
PLUS_MINUS_ZERO = re.compile(r"±\s*0(\.0*)?(?![.\d])")


def _bagged_means(x, n_members, seed):
    """Members that are bagged means of the columns of ``x`` (one "point" per column)."""
    counts = bagwise.resample(x.shape[0], n_members, rng=seed).counts
    return counts @ x / x.shape[0], counts


def _reseeded(x, n_members, seeds, method="ij"):
    """Corrected estimates and their stated noise over reseeded members, same data."""
    estimates, noises = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        for seed in seeds:
            members, counts = _bagged_means(x, n_members, seed)
            result = bagwise.prediction_variance(members, counts, method=method)
            estimates.append(result.raw_variance - result.correction)
            noises.append(result.noise)
    return np.array(estimates), np.array(noises)


def noise_check(seed, method):
    """``(right_passes, wrong_passes)`` of the stated-noise check for one seed: fixed
    training data; the members are redrawn 400 times; the observed variance of the corrected
    estimate over the redraws, relative to the mean stated noise², averaged over points,
    must be 1 within 4 Monte-Carlo standard errors (from 10 blocks of redraws, so the points'
    shared members are accounted for). The wrong variant, the noise √((2c² + 4Vc)/n) that
    forgets how the Monte-Carlo errors align with the statistic's own fluctuation (the
    4V²/B term), is put to the same check."""
    rng = np.random.default_rng(seed)
    n, n_members, n_points, blocks, per_block = 200, 200, 12, 10, 40
    x = rng.standard_normal((n, n_points)) ** 2
    first = 1000 * seed
    estimates, noises = _reseeded(x, n_members, range(first, first + blocks * per_block),
                                  method)
    right, wrong = [], []
    for block in range(blocks):
        part = slice(block * per_block, (block + 1) * per_block)
        observed = estimates[part].var(axis=0, ddof=1)
        stated_sq = np.mean(noises[part] ** 2, axis=0)
        right.append(np.mean(observed / stated_sq))
        positive = np.maximum(estimates[part].mean(axis=0), 0)
        wrong.append(np.mean(observed / (stated_sq - 4 * positive**2 / n_members)))
    right, wrong = np.array(right), np.array(wrong)

    # The jackknife's noise formula carries its Gaussian approximation's bias (observed
    # ratio about 0.98 over 100 seeds): an allowance of 0.04 for it, 0.02 for the IJ's.
    allowance = 0.04 if method == "jackknife" else 0.02

    def passes(ratios):
        return abs(ratios.mean() - 1) < 4 * ratios.std(ddof=1) / math.sqrt(blocks) + allowance

    return passes(right), passes(wrong)


@pytest.mark.parametrize("method", ["ij", "jackknife"])
def test_stated_noise_matches_the_spread_over_reseeded_members(method):
    """Source: simulation (see `noise_check`). False-failure rate over 200 seeds
    (tests/bench/noise_pass_rate.py --seeds 200, seeds 2000-2199, fastdev build): ij and
    jackknife both pass 100.0%. Smallest wrong variant caught: the noise without its
    4V²/B term, which passes 0.0% of the same seeds for both methods."""
    right, wrong = noise_check(11, method)
    assert right and not wrong


def members_needed_check(seed):
    """``(right_passes, halved_fails)`` for one seed: members_needed_at_points(0.2), read off
    a large ensemble, is used to draw ensembles of that size again and again; the observed
    noise of the estimate relative to the true variance (closed form of a bagged mean,
    Σ(x − x̄)²/n², Efron & Tibshirani 1993) must be 0.2 within its Monte-Carlo error, and
    half as many members must give clearly more."""
    rng = np.random.default_rng(seed)
    n, n_points = 150, 8
    x = rng.standard_normal((n, n_points))
    truth = x.var(axis=0) / n
    members, counts = _bagged_means(x, 3000, 99 + seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        needed = bagwise.prediction_variance(members, counts).members_needed_at_points(0.2)
    size = int(np.median(needed))
    assert 20 < size < 3000
    first = 1000 * seed
    estimates, _ = _reseeded(x, size, range(first, first + 200))
    relative = estimates.std(axis=0, ddof=1) / truth
    # SD of a sample SD over 200 near-Gaussian draws: about 1/√(2·199) of it.
    tolerance = 3 * 0.2 / math.sqrt(2 * 199) / math.sqrt(n_points) + 0.02
    halved, _ = _reseeded(x, size // 2, range(first + 500, first + 600))
    return (abs(np.mean(relative) - 0.2) < tolerance,
            np.mean(halved.std(axis=0, ddof=1) / truth) > 0.2 + tolerance)


def test_members_needed_gives_the_stated_noise_when_used():
    """Source: simulation against the closed form (see `members_needed_check`).
    False-failure rate over 200 seeds (tests/bench/noise_pass_rate.py --seeds 200, seeds
    2000-2199): passes 100.0%. Smallest wrong variant caught: half the members, clearly
    noisier on 100.0% of the same seeds."""
    right, halved_fails = members_needed_check(5)
    assert right and halved_fails


def test_a_steady_case_and_a_case_that_is_not():
    """A large ensemble of bagged means is steady everywhere and reads as a number; a small
    one on many rows is not estimable and says how many members it needs, never "± 0"."""
    rng = np.random.default_rng(3)
    x = rng.standard_normal((200, 6))
    members, counts = _bagged_means(x, 4000, 1)
    steady = bagwise.prediction_variance(members, counts)
    assert set(steady.status) == {"steady"}
    assert "±" in steady._reading() and not PLUS_MINUS_ZERO.search(repr(steady))
    x = rng.standard_normal((3000, 6))
    members, counts = _bagged_means(x, 20, 1)
    with pytest.warns(BagwiseWarning, match="not estimable with 20 members") as caught:
        rough = bagwise.prediction_variance(members, counts)
    assert len(caught) == 1
    # 20 members on 3,000 rows: the correction (n/B² Σ(t_b − t̄)²) is about n/B = 150 times
    # the true variance (Wager, Hastie & Efron 2014), so its noise swamps the estimate at
    # nearly every point; "more than half" is the status's own 50% noise bound.
    assert np.mean(rough.status == "not estimable") > 0.5
    text = repr(rough) + rough._repr_html_()
    assert "not estimable with 20 members" in text and "needed" in text
    assert not PLUS_MINUS_ZERO.search(text)
    needed = rough.members_needed()
    assert needed > 20


def test_status_thresholds_follow_the_noise():
    """The status is read off the estimate and its noise by the documented thresholds."""
    from bagwise.uncertainty import _status_of

    value = np.array([1.0, 1.0, 1.0, 1.0, 0.0, -0.1, 0.0])
    noise = np.array([0.1, 0.2, 0.3, 0.6, 0.1, 0.01, 0.0])
    assert list(_status_of(value, noise)) == ["steady", "steady", "noisy", "not estimable",
                                              "not estimable", "not estimable", "steady"]


def test_spread_reads_out_between_only_when_it_is_estimable():
    """A pooled between part inside its noise gives no ρ, no between figure and a NaN
    members_needed with one warning; a steady one gives them."""
    rng = np.random.default_rng(8)
    x = rng.standard_normal((3000, 5))
    members, counts = _bagged_means(x, 20, 2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        rough = bagwise.spread(members, counts)
    assert rough.pooled_status == "not estimable"
    assert "rho" in repr(rough) and re.search(r"rho\s+not estimable", repr(rough))
    with pytest.warns(BagwiseWarning, match="not estimable") as caught:
        assert math.isnan(rough.members_needed(0.01))
    assert len(caught) == 1
    x = rng.standard_normal((200, 5))
    members, counts = _bagged_means(x, 4000, 2)
    steady = bagwise.spread(members + rng.normal(scale=0.05, size=members.shape), counts)
    assert steady.pooled_status == "steady"
    assert re.search(r"rho\s+0\.\d+", repr(steady)) and steady.members_needed(0.01) >= 1


def test_every_class_gets_its_own_variance():
    """Source: the defining sum V_IJ = Σ_i Cov_b(N_bi, t_b)² (Efron 2014), in numpy, for
    every class of class probabilities: shape (n_points, n_classes)."""
    rng = np.random.default_rng(4)
    n_members, n_rows, n_points, n_classes = 60, 40, 7, 3
    counts = bagwise.resample(n_rows, n_members, rng=4).counts
    logits = rng.normal(size=(n_members, n_points, n_classes))
    members = np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        result = bagwise.prediction_variance(members, counts, corrected=False)
    assert result.variance.shape == (n_points, n_classes)
    assert result.quantity == "class probability"
    centred_counts = counts - counts.mean(axis=0)
    for k in range(n_classes):
        t = members[:, :, k]
        cov = centred_counts.T @ (t - t.mean(axis=0)) / n_members      # (n_rows, n_points)
        np.testing.assert_allclose(result.raw_variance[:, k], (cov**2).sum(axis=0),
                                   rtol=1e-10)
        np.testing.assert_allclose(result.mean[:, k], t.mean(axis=0), rtol=1e-12)
    frame = result.to_frame()
    assert len(frame) == n_points * n_classes and "class" in frame.columns


def test_a_classifier_says_which_class_it_summarises():
    """A bag of classifiers gives per-class variances; its readings name the predicted
    class's probability, never a silent last class, and never "± 0"."""
    from sklearn.datasets import load_iris

    X, y = load_iris(return_X_y=True)     # bundled open data (scikit-learn)
    bag = bagwise.BagClassifier(n_members=30, random_state=0).fit(X, y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        result = bag.prediction_variance(X[::3])
        spread = bag.spread(X[::3])
        diagnosis = bag.diagnose(X[::3], y[::3])
    assert result.variance.shape == (50, 3) and spread.between.shape == (50, 3)
    assert "predicted class" in result._reading()
    text = " ".join(diagnosis.readings()) + repr(diagnosis)
    assert not PLUS_MINUS_ZERO.search(text)


def test_diagnose_never_prints_plus_minus_zero_for_a_small_tree_bag():
    """The case users met: a small bag of deep trees on many rows. Every reading, the
    text report and the summary say "not estimable" instead of a standard error of 0."""
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(1200, noise=1.0, random_state=0)   # Friedman (1991) #1
    bag = bagwise.BagRegressor(n_members=25, random_state=0).fit(X[:1000], y[:1000])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        diagnosis = bag.diagnose(X[1000:], y[1000:])
        text = "\n".join(diagnosis.readings()) + repr(diagnosis) + diagnosis._repr_html_()
    assert not PLUS_MINUS_ZERO.search(text)
    assert "not estimable with 25 members" in text
    summary = diagnosis.summary()
    assert summary["uncertainty"]["median_std_error"] is None
    assert summary["spread"]["pooled_rho"] is None
