"""Replicate spread: equicorrelated members (Hastie, Tibshirani & Friedman 2009, eq. 15.1)
recovered within Monte-Carlo error, the one-way ANOVA estimator against numpy and
scipy.stats.f_oneway, and the Ueda & Nakano (1996) split adding up exactly."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats

import bagwise


def equicorrelated(replicates, members, n_points, sigma2, rho, seed):
    """members[r, :, i] ~ N(mu_i, sigma2 [(1 - rho) I + rho 11']) independently for every
    replicate r and point i: members of one replicate share a training-set effect of
    variance rho sigma2 (numpy.random.Generator.multivariate_normal)."""
    rng = np.random.default_rng(seed)
    cov = sigma2 * ((1 - rho) * np.eye(members) + rho * np.ones((members, members)))
    mu = rng.normal(size=n_points)
    draws = rng.multivariate_normal(np.zeros(members), cov, size=(replicates, n_points))
    return np.transpose(draws, (0, 2, 1)) + mu          # (R, M, n)


def anova_reference(t):
    """Straightforward numpy one-way random-effects ANOVA per point (replicates as groups)."""
    r, m, _ = t.shape
    msw = t.var(axis=1, ddof=1).mean(axis=0)
    msb = m * t.mean(axis=1).var(axis=0, ddof=1)
    return msw, (msb - msw) / m, msb


def test_equicorrelated_members_recover_sigma_rho_and_ensemble_variance():
    # Hastie, Tibshirani & Friedman (2009), ESL 2nd ed., eq. 15.1:
    # Var(f_M) = rho sigma^2 + (1 - rho) sigma^2 / M.
    R, M, n, sigma2, rho = 50, 10, 400, 2.0, 0.3
    t = equicorrelated(R, M, n, sigma2, rho, seed=0)
    spread = bagwise.replicate_spread(t)
    between_true, within_true = rho * sigma2, (1 - rho) * sigma2
    # Monte-Carlo standard errors for normal data in the balanced one-way layout
    # (Searle, Casella & McCulloch 1992, §3.5): Var(MSW) = 2 s_e^4 / (R(M-1)),
    # Var(MSB) = 2 (M s_a^2 + s_e^2)^2 / (R-1); points are independent, so divide by n.
    var_msw = 2 * within_true**2 / (R * (M - 1)) / n
    var_msb = 2 * (M * between_true + within_true) ** 2 / (R - 1) / n
    se_within = math.sqrt(var_msw)
    se_between = math.sqrt(var_msb + var_msw) / M
    assert abs(spread.within - within_true) < 5 * se_within
    assert abs(spread.between - between_true) < 5 * se_between
    assert abs(spread.total_variance - sigma2) < 5 * (se_within + se_between)
    # rho = b / (b + w): delta-method bound from the two errors above
    se_rho = (se_between + rho * (se_between + se_within)) / sigma2
    assert abs(spread.correlation - rho) < 5 * se_rho
    for k in (1, 10, 100):
        truth = rho * sigma2 + (1 - rho) * sigma2 / k
        assert abs(spread.predicted_variance(k) - truth) < 5 * (se_between + se_within / k), k
    # the observed variance of the 10-member ensemble mean over training sets
    assert abs(spread.ensemble_variance - (between_true + within_true / M)) < 5 * math.sqrt(var_msb) / M


def test_anova_matches_numpy_and_scipy_f_oneway():
    rng = np.random.default_rng(1)
    t = rng.normal(size=(6, 5, 300)) + rng.normal(scale=0.5, size=(6, 1, 300))
    spread = bagwise.replicate_spread(t)
    msw, between, msb = anova_reference(t)          # straightforward numpy
    np.testing.assert_allclose(spread.within_per_point, msw, rtol=1e-12)
    np.testing.assert_allclose(spread.between_per_point, between, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(spread.ensemble_variance_per_point, msb / 5, rtol=1e-12)
    # scipy.stats.f_oneway: F = MSB / MSW per point, replicates as the groups
    f = scipy.stats.f_oneway(*[t[r] for r in range(6)], axis=0).statistic
    np.testing.assert_allclose((5 * spread.between_per_point + spread.within_per_point)
                               / spread.within_per_point, f, rtol=1e-10)
    assert spread.n_negative_between == int((between < 0).sum())
    assert spread.n_negative_between > 0        # some noise points, kept unbiased (not clipped)
    assert spread.within == pytest.approx(msw.mean(), rel=1e-12)
    assert spread.between == pytest.approx(between.mean(), rel=1e-10)
    plus = np.maximum(between, 0)
    np.testing.assert_allclose(spread.correlation_per_point, plus / (plus + msw), rtol=1e-10)
    assert spread.correlation == pytest.approx(max(between.mean(), 0) / (max(between.mean(), 0)
                                                                        + msw.mean()), rel=1e-10)
    # eq. 15.1 at the ensemble's own size equals the observed variance where between >= 0
    # (between + within / M = MSB / M, an identity of the estimator)
    ok = between >= 0
    np.testing.assert_allclose(spread.predicted_variance(5, per_point=True)[ok], (msb / 5)[ok],
                               rtol=1e-10)
    assert spread.predicted_variance([1, 5], per_point=True).shape == (300, 2)
    assert isinstance(spread.to_frame().shape, tuple)


def test_ueda_nakano_split_adds_up_exactly():
    # Ueda & Nakano (1996): E[(f - y)^2] = bias^2 + var/M + (1 - 1/M) covar; with moments
    # over replicates taken with ddof 0 the identity holds exactly for the R replicates.
    rng = np.random.default_rng(2)
    R, M, n = 8, 6, 250
    y = rng.normal(size=n)
    t = 0.3 + y + rng.normal(size=(R, M, n)) + rng.normal(scale=0.7, size=(R, 1, n))
    spread = bagwise.replicate_spread(t, y)
    f = t.mean(axis=1)                                     # (R, n) ensemble means
    expected = ((f - y) ** 2).mean(axis=0)                 # across-replicate mean
    # straightforward numpy: per point the M x M covariance over replicates (ddof 0)
    cov = np.stack([np.cov(t[:, :, i], rowvar=False, ddof=0) for i in range(n)])
    var = np.einsum("imm->im", cov).mean(axis=1)
    covar = (cov.sum(axis=(1, 2)) - np.einsum("imm->i", cov)) / (M * (M - 1))
    bias = t.mean(axis=(0, 1)) - y
    np.testing.assert_allclose(spread.bias_per_point, bias, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(spread.variance_per_point, var, rtol=1e-12)
    np.testing.assert_allclose(spread.covariance_per_point, covar, rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(spread.expected_squared_error_per_point, expected, rtol=1e-12)
    total = spread.bias_per_point**2 + spread.variance_per_point / M \
        + (1 - 1 / M) * spread.covariance_per_point
    np.testing.assert_allclose(total, expected, rtol=1e-12)
    assert spread.bias_squared + spread.variance / M + (1 - 1 / M) * spread.covariance == \
        pytest.approx(expected.mean(), rel=1e-12)
    assert spread.expected_squared_error == pytest.approx(expected.mean(), rel=1e-12)


def test_members_needed_meets_its_definition():
    t = equicorrelated(30, 8, 200, 1.0, 0.2, seed=3)
    spread = bagwise.replicate_spread(t)
    b, w = max(spread.between, 0), spread.within
    for tol in (0.5, 0.1, 0.01):
        m = spread.members_needed(tol)
        # smallest M with (1 - rho) s^2 / M <= tol * rho s^2 (definition in the docstring)
        assert w / m <= tol * b and (m == 1 or w / (m - 1) > tol * b)
    per_point = spread.members_needed(0.1, per_point=True)
    assert per_point.shape == (200,)
    assert np.isinf(per_point[spread.between_per_point <= 0]).all()
    with pytest.raises(ValueError, match="`tolerance`"):
        spread.members_needed(0)
    with pytest.raises(ValueError, match="`n_members`"):
        spread.predicted_variance(0)


def test_threads_and_float32():
    t = equicorrelated(5, 4, 3000, 1.0, 0.5, seed=4)
    y = np.zeros(3000)
    a = bagwise.replicate_spread(t, y, n_jobs=1)
    b = bagwise.replicate_spread(t, y, n_jobs=2)
    np.testing.assert_array_equal(a.between_per_point, b.between_per_point)
    assert (a.between, a.covariance) == (b.between, b.covariance)
    t32 = t.astype(np.float32)
    c = bagwise.replicate_spread(t32, y)
    d = bagwise.replicate_spread(t32.astype(np.float64), y)   # same values, widened by us
    assert c.between == d.between and c.within == d.within
    big = bagwise.replicate_spread(t.astype(">f8"), y)
    assert big.between == a.between
    strided = bagwise.replicate_spread(t[:, :, ::3])
    copy = bagwise.replicate_spread(np.ascontiguousarray(t[:, :, ::3]))
    np.testing.assert_array_equal(strided.within_per_point, copy.within_per_point)


def test_bad_input_and_undefined_cases():
    t = np.random.default_rng(5).normal(size=(3, 4, 20))
    with pytest.raises(ValueError, match=r"^`members`: needs at least 2 replicates"):
        bagwise.replicate_spread(t[:1])
    with pytest.raises(ValueError, match=r"^`members`: expected shape"):
        bagwise.replicate_spread(t[0])
    with pytest.raises(ValueError, match=r"^`members`: is empty"):
        bagwise.replicate_spread(t[:, :, :0])
    with pytest.raises(TypeError, match=r"^`members`"):
        bagwise.replicate_spread(t.astype(int))
    bad = t.copy()
    bad[1, 2, 3] = np.nan
    with pytest.raises(ValueError, match=r"^`members`: contains NaN"):
        bagwise.replicate_spread(bad)
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.replicate_spread(t, np.zeros(19))
    with pytest.raises(ValueError, match=r"^`y`"):
        bagwise.replicate_spread(t, np.full(20, np.inf))
    # one member per replicate: rho undefined -> NaN with a warning (documented)
    with pytest.warns(RuntimeWarning, match="one member per replicate"):
        one = bagwise.replicate_spread(t[:, :1])
    assert math.isnan(one.correlation) and math.isnan(one.within)
    # constant predictions at a point: rho undefined there -> NaN with a warning
    flat = t.copy()
    flat[:, :, 4] = 1.5
    with pytest.warns(RuntimeWarning, match="1 of 20 points have constant predictions"):
        spread = bagwise.replicate_spread(flat)
    assert np.isnan(spread.correlation_per_point[4])
    assert np.isfinite(np.delete(spread.correlation_per_point, 4)).all()
    assert "ReplicateSpread" in repr(spread) and "<table" in spread._repr_html_()
