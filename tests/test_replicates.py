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


#: Standard errors a comparison allows: |N(0, 1)| exceeds 4 with probability 6e-5; the eight
#: comparisons of `equicorrelated_errors` (normal approximations, rho by the delta method)
#: pass together on 99.8% of seeds (tests/bench/variance_pass_rate.py, 1,000 seeds; 99.5% of
#: 200 other seeds in tests/bench/suite_a_pass_rate.py, where the wrong variant passes 0%).
Z = 4.0


def equicorrelated_errors(seed, R=50, M=10, n=400, sigma2=2.0, rho=0.3):
    """Standardised errors (estimate − truth) / SE of the replicate spread on equicorrelated
    members, and of the wrong variant that takes the variance of the ensemble means for the
    between part (forgetting that it still holds within / M).

    Truth: Hastie, Tibshirani & Friedman (2009), ESL 2nd ed., eq. 15.1,
    Var(f_M) = rho sigma^2 + (1 - rho) sigma^2 / M. Standard errors for normal data in the
    balanced one-way layout (Searle, Casella & McCulloch 1992, §3.5): MSW and MSB are
    independent with Var(MSW) = 2 s_e^4 / (R(M-1)), Var(MSB) = 2 (M s_a^2 + s_e^2)^2 / (R-1);
    points are independent, so their means divide these by n. Every estimate below is
    linear in (MSW, MSB) except rho, which uses the delta method (common practice).
    """
    t = equicorrelated(R, M, n, sigma2, rho, seed=seed)
    spread = bagwise.replicate_spread(t)
    between, within = rho * sigma2, (1 - rho) * sigma2
    msb = M * between + within
    var_msw = 2 * within**2 / (R * (M - 1)) / n
    var_msb = 2 * msb**2 / (R - 1) / n

    def se(d_msb, d_msw):
        """SE of d_msb * MSB + d_msw * MSW."""
        return math.sqrt(d_msb**2 * var_msb + d_msw**2 * var_msw)

    # between = (MSB − MSW)/M, total = MSB/M + (1 − 1/M) MSW, variance = MSB/M,
    # rho = (MSB − MSW)/(MSB + (M − 1) MSW), whose gradient at the truth is
    # (M MSW, −M MSB)/D² with D = M sigma².
    d = M * sigma2
    right = {
        "within": (spread.mean_within - within) / se(0, 1),
        "between": (spread.mean_between - between) / se(1 / M, -1 / M),
        "total": (spread.mean_total - sigma2) / se(1 / M, 1 - 1 / M),
        "rho": (spread.pooled_rho - rho) / se(M * within / d**2, M * msb / d**2),
        "variance of the 10-member mean": (spread.mean_variance - (between + within / M))
        / se(1 / M, 0),
    }
    for k in (1, 10, 100):
        right[f"eq. 15.1 at {k} members"] = (
            (spread.mean_predicted_variance(k) - (between + within / k)) / se(1 / M, 1 / k - 1 / M))
    wrong = {"between as the variance of the ensemble means":
             (spread.mean_variance - between) / se(1 / M, -1 / M)}
    return right, wrong


def test_equicorrelated_members_recover_sigma_rho_and_ensemble_variance():
    right, wrong = equicorrelated_errors(seed=0)
    for name, z in right.items():
        assert abs(z) <= Z, (name, z)
    for name, z in wrong.items():
        assert abs(z) > Z, (name, z)


def test_anova_matches_numpy_and_scipy_f_oneway():
    rng = np.random.default_rng(1)
    t = rng.normal(size=(6, 5, 300)) + rng.normal(scale=0.5, size=(6, 1, 300))
    spread = bagwise.replicate_spread(t)
    msw, between, msb = anova_reference(t)          # straightforward numpy
    np.testing.assert_allclose(spread.within, msw, rtol=1e-12)
    np.testing.assert_allclose(spread.between, between, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(spread.variance, msb / 5, rtol=1e-12)
    # scipy.stats.f_oneway: F = MSB / MSW per point, replicates as the groups
    f = scipy.stats.f_oneway(*[t[r] for r in range(6)], axis=0).statistic
    np.testing.assert_allclose((5 * spread.between + spread.within)
                               / spread.within, f, rtol=1e-10)
    assert spread.n_negative_between == int((between < 0).sum())
    assert spread.n_negative_between > 0        # some noise points, kept unbiased (not clipped)
    assert spread.mean_within == pytest.approx(msw.mean(), rel=1e-12)
    assert spread.mean_between == pytest.approx(between.mean(), rel=1e-10)
    plus = np.maximum(between, 0)
    np.testing.assert_allclose(spread.rho, plus / (plus + msw), rtol=1e-10)
    assert spread.pooled_rho == pytest.approx(max(between.mean(), 0) / (max(between.mean(), 0)
                                                                        + msw.mean()), rel=1e-10)
    # eq. 15.1 at the ensemble's own size equals the observed variance where between >= 0
    # (between + within / M = MSB / M, an identity of the estimator)
    ok = between >= 0
    np.testing.assert_allclose(spread.predicted_variance(5)[ok], (msb / 5)[ok],
                               rtol=1e-10)
    # eq. 15.1 per point at several sizes: max(between, 0) + within / M (Hastie, Tibshirani
    # & Friedman 2009), from the numpy ANOVA
    plus_ref = np.maximum(between, 0)
    np.testing.assert_allclose(spread.predicted_variance([1, 5, 40]),
                               plus_ref[:, None] + msw[:, None] / np.array([1, 5, 40]),
                               rtol=1e-10, atol=1e-14)
    # the frame holds the same per-point values, point by point
    frame = spread.to_frame()
    np.testing.assert_array_equal(frame["point"], np.arange(300))
    for column, reference in (("between", between), ("within", msw),
                              ("total", between + msw), ("rho", plus_ref / (plus_ref + msw)),
                              ("variance", msb / 5)):
        np.testing.assert_allclose(frame[column], reference, rtol=1e-10, atol=1e-14,
                                   err_msg=column)


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
    np.testing.assert_allclose(spread.bias, bias, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(spread.member_variance, var, rtol=1e-12)
    np.testing.assert_allclose(spread.covariance, covar, rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(spread.expected_squared_error, expected, rtol=1e-12)
    total = spread.bias**2 + spread.member_variance / M \
        + (1 - 1 / M) * spread.covariance
    np.testing.assert_allclose(total, expected, rtol=1e-12)
    assert spread.mean_bias_squared + spread.mean_member_variance / M \
        + (1 - 1 / M) * spread.mean_covariance == pytest.approx(expected.mean(), rel=1e-12)
    assert spread.mean_expected_squared_error == pytest.approx(expected.mean(), rel=1e-12)


def test_targets_are_read_at_their_own_point_beyond_the_first_block():
    # The core works in blocks of 512 points; every point must meet its own target.
    # Reference: straightforward numpy, bias = mean over replicates and members - y and
    # E[(f - y)^2] the mean over replicates (Ueda & Nakano 1996).
    rng = np.random.default_rng(5)
    R, M, n = 4, 3, 1100
    y = np.arange(n, dtype=np.float64)
    t = rng.normal(size=(R, M, n))
    spread = bagwise.replicate_spread(t, y)
    np.testing.assert_allclose(spread.bias, t.mean(axis=(0, 1)) - y, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(spread.expected_squared_error,
                               ((t.mean(axis=1) - y) ** 2).mean(axis=0), rtol=1e-12)


def test_members_needed_meets_its_definition():
    t = equicorrelated(30, 8, 200, 1.0, 0.2, seed=3)
    spread = bagwise.replicate_spread(t)
    b, w = max(spread.mean_between, 0), spread.mean_within
    for tol in (0.5, 0.1, 0.01):
        m = spread.members_needed(tol)
        # smallest M with (1 - rho) s^2 / M <= tol * rho s^2 (definition in the docstring)
        assert w / m <= tol * b and (m == 1 or w / (m - 1) > tol * b)
    # per point, the same definition on the numpy ANOVA's between and within; 20 extra
    # points repeat the same members in every replicate (between = -within / M < 0)
    same = np.repeat(np.random.default_rng(3).normal(size=(1, 8, 20)), 30, axis=0)
    t = np.concatenate([t, same], axis=2)
    spread = bagwise.replicate_spread(t)
    msw, between, _ = anova_reference(t)
    per_point = spread.members_needed_at_points(0.1)
    positive = between > 0
    assert np.isinf(per_point[~positive]).all() and (~positive).any()
    m, b, w = per_point[positive], between[positive], msw[positive]
    assert np.all(m == np.floor(m)) and np.all(m >= 1)
    assert np.all(w / m <= 0.1 * b * (1 + 1e-12))
    assert np.all((m == 1) | (w / np.maximum(m - 1, 1) > 0.1 * b * (1 - 1e-12)))
    with pytest.raises(ValueError, match="`tolerance`"):
        spread.members_needed(0)
    with pytest.raises(ValueError, match="`n_members`"):
        spread.predicted_variance(0)


def test_threads_and_float32():
    t = equicorrelated(5, 4, 3000, 1.0, 0.5, seed=4)
    y = np.zeros(3000)
    a = bagwise.replicate_spread(t, y, n_jobs=1)
    b = bagwise.replicate_spread(t, y, n_jobs=2)
    np.testing.assert_array_equal(a.between, b.between)
    assert (a.mean_between, a.mean_covariance) == (b.mean_between, b.mean_covariance)
    t32 = t.astype(np.float32)
    c = bagwise.replicate_spread(t32, y)
    d = bagwise.replicate_spread(t32.astype(np.float64), y)   # same values, widened by us
    assert c.mean_between == d.mean_between and c.mean_within == d.mean_within
    big = bagwise.replicate_spread(t.astype(">f8"), y)
    assert big.mean_between == a.mean_between
    strided = bagwise.replicate_spread(t[:, :, ::3])
    copy = bagwise.replicate_spread(np.ascontiguousarray(t[:, :, ::3]))
    np.testing.assert_array_equal(strided.within, copy.within)


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
    with pytest.warns(bagwise.BagwiseWarning, match="one member per replicate"):
        one = bagwise.replicate_spread(t[:, :1])
    assert math.isnan(one.pooled_rho) and math.isnan(one.mean_within)
    # constant predictions at a point: rho undefined there -> NaN with a warning
    flat = t.copy()
    flat[:, :, 4] = 1.5
    with pytest.warns(bagwise.BagwiseWarning, match="1 of 20 points have constant predictions"):
        spread = bagwise.replicate_spread(flat)
    assert np.isnan(spread.rho[4])
    assert np.isfinite(np.delete(spread.rho, 4)).all()
    assert "ReplicateSpread" in repr(spread) and "<table" in spread._repr_html_()


def _same_means_in_every_replicate(n_points=6):
    """Every replicate holds the same members, so the replicate means agree exactly:
    MSB = 0 and between = -within / M < 0 at every point (the ANOVA of the module docs)."""
    base = np.random.default_rng(6).normal(size=(1, 4, n_points))
    return np.repeat(base, 3, axis=0)


def test_members_needed_is_nan_with_one_warning_when_there_is_no_floor():
    spread = bagwise.replicate_spread(_same_means_in_every_replicate())
    assert spread.mean_between < 0 and spread.pooled_rho == 0
    with pytest.warns(bagwise.BagwiseWarning, match="not positive") as caught:
        assert math.isnan(spread.members_needed())
    assert len(caught) == 1
    # the warning points at the caller's line, not inside bagwise
    assert caught[0].filename == __file__
    # one member per replicate: undefined, also NaN with one warning saying why
    with pytest.warns(bagwise.BagwiseWarning):
        one = bagwise.replicate_spread(np.random.default_rng(7).normal(size=(3, 1, 5)))
    with pytest.warns(bagwise.BagwiseWarning, match="one member per replicate") as caught:
        assert math.isnan(one.members_needed(0.1))
    assert len(caught) == 1


def test_members_needed_has_one_signature_and_checks_its_tolerance():
    import inspect

    t = equicorrelated(10, 5, 50, 1.0, 0.4, seed=8)
    spread = bagwise.replicate_spread(t)
    assert str(inspect.signature(spread.members_needed)) == "(tolerance: 'float' = 0.01) -> 'int | float'"
    assert spread.members_needed() == spread.members_needed(0.01)
    for bad in (0, 1, 1.5, -0.1):
        with pytest.raises(ValueError, match="`tolerance`"):
            spread.members_needed(bad)
    with pytest.raises(TypeError, match="`tolerance`"):
        spread.members_needed("small")


def test_result_is_frozen_and_follows_the_glossary():
    import dataclasses

    t = equicorrelated(6, 5, 40, 1.0, 0.5, seed=9)
    y = np.zeros(40)
    spread = bagwise.replicate_spread(t, y)
    with pytest.raises(dataclasses.FrozenInstanceError):
        spread.mean_between = 0.0
    # per-point arrays carry the plain name, their means mean_<name> (DEVELOPERS glossary);
    # values point by point against straightforward numpy (one-way ANOVA; the member
    # variance over replicates with ddof 0, Ueda & Nakano 1996)
    msw, between, msb = anova_reference(t)
    plus = np.maximum(between, 0)
    reference = {"between": between, "within": msw, "total": between + msw,
                 "rho": plus / (plus + msw), "variance": msb / 5,
                 "member_variance": t.var(axis=0).mean(axis=0)}
    for name, values in reference.items():
        np.testing.assert_allclose(getattr(spread, name), values, rtol=1e-10, atol=1e-14,
                                   err_msg=name)
    for name in ("between", "within", "variance", "member_variance", "covariance",
                 "expected_squared_error"):
        assert getattr(spread, f"mean_{name}") == pytest.approx(getattr(spread, name).mean(),
                                                                  rel=1e-12), name
    assert spread.mean_total == spread.mean_between + spread.mean_within
    assert spread.mean_bias_squared == pytest.approx(np.mean(spread.bias**2), rel=1e-12)
    np.testing.assert_array_equal(spread.total, spread.between + spread.within)
    # between > 0 here, so pooled_rho is exactly mean_between / mean_total
    assert spread.mean_between > 0
    assert spread.pooled_rho == spread.mean_between / spread.mean_total
    frame = spread.to_frame()
    assert list(frame.columns) == ["point", "between", "within", "total", "rho", "variance", "bias",
                                   "member_variance", "covariance", "expected_squared_error"]
    np.testing.assert_array_equal(frame["variance"], spread.variance)
    assert spread.bias is not None and bagwise.replicate_spread(t).bias is None
    assert "pooled rho" in repr(spread) and "<table" in spread._repr_html_()
