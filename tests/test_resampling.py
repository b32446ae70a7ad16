"""Resampling engine: statistical checks against published laws and scipy, structure of
stratified / grouped / block draws, reproducibility, and bad input.

Every Monte-Carlo check below is a function of its seed returning whether the right draw
passes and whether each plausible wrong variant passes; the unit test runs one seed, and
tests/bench/suite_a_pass_rate.py runs each over 200 seeds and prints both pass rates (the
figures quoted beside each check). Tolerances come from each check's own Monte-Carlo
standard error."""

from __future__ import annotations

import math
import os
import pickle
import subprocess
import sys
import textwrap

import numpy as np
import pytest
import scipy.stats
from _interrupt import STOPS_WITHIN, interrupt

import bagwise

#: Family-wise false-failure budget of one check: a check of K comparisons passes each at
#: z = Φ⁻¹(1 − ALPHA / (2K)) standard errors (Bonferroni), so it fails a correct draw with
#: probability at most ALPHA under the normal approximation (common practice).
ALPHA = 1e-3


def bonferroni_z(comparisons: int) -> float:
    """The two-sided normal quantile of one of ``comparisons`` comparisons (scipy.stats.norm)."""
    return float(scipy.stats.norm.isf(ALPHA / (2 * comparisons)))


def within_z(estimate, law, se, comparisons=None):
    """Whether every |estimate − law| is within the Bonferroni z of its standard error."""
    estimate, law, se = np.broadcast_arrays(*map(np.asarray, (estimate, law, se)))
    k = comparisons or estimate.size
    return bool(np.all(np.abs(estimate - law) <= bonferroni_z(k) * se))


# -- bootstrap counts ----------------------------------------------------------------------

def out_of_bag_share_check(seed, n=2000, members=3000):
    """The mean out-of-bag share against P(N_i = 0) for N_i ~ Binomial(n, 1/n) (Efron &
    Tibshirani 1993, ch. 6; scipy.stats.binom.pmf), within its Monte-Carlo standard error.
    Wrong variant: 1% fewer draws (fraction 0.99), share e^-0.99 instead of e^-1."""
    law = scipy.stats.binom.pmf(0, n, 1 / n)

    def passes(fraction):
        share = bagwise.resample(n, members, fraction=fraction, rng=seed).out_of_bag_share()
        return within_z(share.mean(), law, share.std(ddof=1) / math.sqrt(members))

    return passes(1.0), {"1% fewer draws": passes(0.99)}


def test_out_of_bag_share_matches_efron_tibshirani():
    # Pass rate over 200 seeds (tests/bench/suite_a_pass_rate.py): 100%; the smallest wrong
    # variant it catches is a shift of the mean share by 3.3 standard errors (about 7e-4),
    # e.g. 1% fewer draws (fails on every seed).
    right, wrong = out_of_bag_share_check(11)
    assert right and not any(wrong.values()), wrong
    # The stated expectation is the binomial law's P(N_i = 0) (scipy.stats.binom.pmf).
    draw = bagwise.resample(2000, 3, rng=11)
    assert draw.expected_out_of_bag_share() == pytest.approx(
        scipy.stats.binom.pmf(0, 2000, 1 / 2000), rel=1e-12)
    half = bagwise.resample(2000, 3, fraction=0.5, rng=11)
    assert half.expected_out_of_bag_share() == pytest.approx(
        scipy.stats.binom.pmf(0, 1000, 1 / 2000), rel=1e-12)


def one_row_binomial_check(seed, n=50, members=20000, row=7):
    """Chi-square goodness of fit (scipy.stats.chisquare) of one row's count against
    Binomial(n, 1/n) (scipy.stats.binom), counts >= 4 pooled so every expected cell is
    large (common practice: >= 5); passes at p > ALPHA. Wrong variant: 10% fewer draws."""
    top = 4
    probs = scipy.stats.binom.pmf(np.arange(top), n, 1 / n)
    probs = np.append(probs, 1 - probs.sum())

    def passes(fraction):
        counts = bagwise.resample(n, members, fraction=fraction, rng=seed).counts[:, row]
        observed = np.bincount(np.minimum(counts.astype(np.int64), top), minlength=top + 1)
        return bool(scipy.stats.chisquare(observed, probs * members).pvalue > ALPHA)

    return passes(1.0), {"10% fewer draws": passes(0.9)}


def test_counts_of_one_row_are_binomial():
    # N_i ~ Binomial(n, 1/n) (Efron & Tibshirani 1993). Pass rate over 200 seeds
    # (tests/bench/suite_a_pass_rate.py): 100% (0.1% expected by construction). The wrong
    # variant with 10% fewer draws fails on every seed; 5% fewer draws still passes on 5%
    # of seeds, the edge of what 20,000 members resolve.
    right, wrong = one_row_binomial_check(3)
    assert right and not any(wrong.values()), wrong


def multinomial_covariance_check(counts, draws):
    """Bootstrap counts of one member are Multinomial(draws; 1/n, …, 1/n): Var N_i =
    d/n (1 − 1/n) and Cov(N_i, N_j) = −d/n² (multinomial law; Efron & Tibshirani 1993,
    ch. 6). Every diagonal and off-diagonal element of the sample covariance (the means
    d/n known) against the law, each within the Bonferroni z of its own Monte-Carlo
    standard error (the standard deviation of the per-member products over √members).
    Row sums alone fix only the sum of each covariance row, not its elements."""
    members, n = counts.shape
    centred = counts.astype(np.float64) - draws / n
    law = np.full((n, n), -draws / n**2)
    np.fill_diagonal(law, draws / n * (1 - 1 / n))
    # means of the products (N_i − d/n)(N_j − d/n) over members and of their squares
    mean = centred.T @ centred / members
    square = centred**2
    second = square.T @ square / members
    se = np.sqrt(np.maximum(second - mean**2, 0) / (members - 1))
    upper = np.triu_indices(n)                          # n variances, n(n − 1)/2 covariances
    return within_z(mean[upper], law[upper], se[upper])


def multinomial_check(seed, n=20, members=40000):
    """The multinomial covariance of bagwise's bootstrap counts, and of three wrong
    samplers with the right mean count: independent Poisson(1) counts (numpy), sampling
    without replacement (bagwise subsample of half the rows against the law of n/2 draws
    with replacement) and one draw too few (fraction (n − 1)/n against n draws)."""
    right = multinomial_covariance_check(bagwise.resample(n, members, rng=seed).counts, n)
    poisson = np.random.default_rng(seed).poisson(1.0, size=(members, n))
    half = bagwise.resample(n, members, scheme="subsample", fraction=0.5, rng=seed).counts
    short = bagwise.resample(n, members, fraction=(n - 1) / n, rng=seed).counts
    return right, {
        "independent Poisson(1) counts": multinomial_covariance_check(poisson, n),
        "without replacement": multinomial_covariance_check(half, n // 2),
        "one draw too few": multinomial_covariance_check(short, n),
    }


def test_counts_are_multinomial_across_rows():
    # Pass rate over 200 seeds (tests/bench/suite_a_pass_rate.py): 100% (Bonferroni bound
    # 99.9%). Each wrong sampler fails on every seed; the smallest it catches is one draw
    # in twenty missing (each variance moves by 0.0475, about 5.5 standard errors).
    right, wrong = multinomial_check(5)
    assert right, "bagwise bootstrap counts"
    for name, passed in wrong.items():
        assert not passed, name


# -- Bayesian weights ---------------------------------------------------------------------

def dirichlet_check(shares):
    """``shares`` (members, k): each member's row is a point of the simplex. Checks it
    against Dirichlet(1, …, 1) (Rubin 1981): the marginal of the first coordinate is
    Beta(1, k − 1) (Kolmogorov–Smirnov, scipy.stats.kstest against scipy.stats.beta), every
    coordinate's mean 1/k and variance (k − 1)/(k²(k + 1)), and the covariance of the
    first two coordinates −1/(k²(k + 1)) (scipy.stats.dirichlet.mean / .var; the
    covariance from memory), each within the Bonferroni z of its Monte-Carlo standard
    error."""
    members, k = shares.shape
    alpha = np.ones(k)
    mean, var = scipy.stats.dirichlet.mean(alpha), scipy.stats.dirichlet.var(alpha)
    comparisons = 2 * k + 2                      # k means, k variances, one covariance, KS
    ks = scipy.stats.kstest(shares[:, 0], scipy.stats.beta(1, k - 1).cdf).pvalue
    squares = (shares - mean) ** 2
    product = (shares[:, 0] - mean[0]) * (shares[:, 1] - mean[1])
    root = math.sqrt(members)
    return (ks > ALPHA / comparisons
            and within_z(shares.mean(axis=0), mean, shares.std(axis=0, ddof=1) / root,
                         comparisons)
            and within_z(squares.mean(axis=0), var, squares.std(axis=0, ddof=1) / root,
                         comparisons)
            and within_z(product.mean(), -1 / (k**2 * (k + 1)), product.std(ddof=1) / root,
                         comparisons))


def bayesian_check(seed, n=30, members=20000):
    """Plain Bayesian weights / n against Dirichlet(1, …, 1); wrong variant: weights from
    Uniform(0, 2) normalised to sum n (right mean, right total, wrong law)."""
    weights = bagwise.resample(n, members, scheme="bayesian", rng=seed).row_weights
    u = np.random.default_rng(seed).uniform(0, 2, size=(members, n))
    return dirichlet_check(weights / n), {
        "normalised uniforms": dirichlet_check(u / u.sum(axis=1, keepdims=True))}


def test_bayesian_weights_have_dirichlet_moments():
    # Rubin (1981): weights / n ~ Dirichlet(1, ..., 1). Pass rate over 200 seeds in
    # tests/bench/suite_a_pass_rate.py: 100%; normalised uniforms fail on every seed.
    right, wrong = bayesian_check(8)
    assert right and not any(wrong.values()), wrong
    draw = bagwise.resample(30, 4, scheme="bayesian", rng=8)
    np.testing.assert_allclose(draw.row_weights.sum(axis=1), 30, rtol=1e-12)
    with pytest.raises(ValueError, match="bayesian"):
        _ = draw.counts
    with pytest.raises(ValueError, match="bayesian"):
        _ = draw.out_of_bag


#: Strata of unequal sizes (6, 10, 14) for the stratified Bayesian checks.
STRATA = np.repeat(np.arange(3), [6, 10, 14])[np.random.default_rng(0).permutation(30)]


def stratified_bayesian_check(seed, members=12000):
    """Rubin (1981) weights applied per stratum: within stratum s the weights over its
    total n_s are Dirichlet(1, …, 1) of size n_s (`dirichlet_check`), and strata are
    independent (covariance 0 between the first rows of two strata, within the Bonferroni z
    of its Monte-Carlo standard error). Wrong variants: one Dirichlet over all rows ignoring
    the strata (totals then wrong too, but the law is checked, not the totals), and each
    stratum's total shared by a common exponential (every stratum the same draw repeated)."""
    weights = bagwise.resample(len(STRATA), members, scheme="bayesian", strata=STRATA,
                               rng=seed).row_weights
    rng = np.random.default_rng(seed)

    def passes(w):
        ok = True
        firsts = []
        for s in range(3):
            rows = np.flatnonzero(STRATA == s)
            ok &= dirichlet_check(w[:, rows] / len(rows))
            firsts.append(w[:, rows[0]] / len(rows))
        product = (firsts[0] - 1 / 6) * (firsts[1] - 1 / 10)
        return ok and within_z(product.mean(), 0.0, product.std(ddof=1) / math.sqrt(members))

    e = rng.exponential(size=(members, len(STRATA)))
    unstratified = len(STRATA) * e / e.sum(axis=1, keepdims=True)
    shared = np.empty_like(e)
    base = rng.exponential(size=(members, 14))
    for s in range(3):
        rows = np.flatnonzero(STRATA == s)
        part = base[:, : len(rows)]
        shared[:, rows] = len(rows) * part / part.sum(axis=1, keepdims=True)
    return passes(weights), {"one Dirichlet over all rows": passes(unstratified),
                             "strata share their exponentials": passes(shared)}


#: Ten groups of unequal sizes (3 to 12 rows) for the grouped Bayesian checks.
GROUPS = np.repeat(np.arange(10), np.arange(3, 13))


def grouped_bayesian_check(seed, members=12000):
    """Rows of a group share one weight w_g ∝ E_g, E_g ~ Exp(1) per group (Rubin 1981
    over groups, scaled so all rows sum to n: src/resampling.rs), so (w_g / Σ_h w_h) is
    Dirichlet(1, …, 1) over the G groups whatever their sizes (`dirichlet_check`). Wrong
    variant: a weight per row summed per group (the group's share then Dirichlet(n_g))."""
    weights = bagwise.resample(len(GROUPS), members, scheme="bayesian", groups=GROUPS,
                               rng=seed).row_weights
    firsts = np.searchsorted(GROUPS, np.arange(10))
    per_group = weights[:, firsts]
    e = np.random.default_rng(seed).exponential(size=(members, len(GROUPS)))
    summed = np.add.reduceat(e, firsts, axis=1)
    return (dirichlet_check(per_group / per_group.sum(axis=1, keepdims=True)),
            {"row weights summed per group": dirichlet_check(
                summed / summed.sum(axis=1, keepdims=True))})


def test_bayesian_weights_respect_strata_and_groups():
    # Totals are exact by construction (each stratum keeps its size, all rows sum to n);
    # the law is checked by stratified_bayesian_check / grouped_bayesian_check. Pass rates
    # over 200 seeds: tests/bench/suite_a_pass_rate.py, 99.5% each; every wrong variant
    # fails on every seed.
    strat = bagwise.resample(30, 50, scheme="bayesian", strata=STRATA, rng=3).row_weights
    for s in range(3):
        np.testing.assert_allclose(strat[:, STRATA == s].sum(axis=1), (STRATA == s).sum(),
                                   rtol=1e-12)
    grouped = bagwise.resample(len(GROUPS), 50, scheme="bayesian", groups=GROUPS,
                               rng=3).row_weights
    np.testing.assert_allclose(grouped.sum(axis=1), len(GROUPS), rtol=1e-12)
    for g in range(10):
        block = grouped[:, GROUPS == g]
        assert (block == block[:, :1]).all()
    for check in (stratified_bayesian_check, grouped_bayesian_check):
        right, wrong = check(3)
        assert right, check.__name__
        for name, passed in wrong.items():
            assert not passed, name


# -- inclusion rates of subsamples, groups and blocks ---------------------------------------

def inclusion_check(included, law):
    """Per-row inclusion rates over members (``included`` members × rows, bool) against the
    exact per-row law, each within the Bonferroni z of its binomial standard error (members
    are independent draws)."""
    members = included.shape[0]
    law = np.broadcast_to(np.asarray(law, dtype=np.float64), included.shape[1:])
    se = np.sqrt(law * (1 - law) / members)
    rate = included.mean(axis=0)
    exact = se == 0
    return bool(np.all(rate[exact] == law[exact])) and within_z(rate[~exact], law[~exact],
                                                                 se[~exact], included.shape[1])


def subsample_check(seed, n=101, members=4000):
    """Subagging (Bühlmann & Yu 2002): d = round(n·fraction) distinct rows, each row in with
    probability d/n exactly (simple random sampling without replacement; common practice).
    Wrong variant: an off-by-one bounded draw that never picks the last row (numpy,
    the d rows uniform among the first n − 1)."""
    d = math.floor(n * 0.5 + 0.5)      # round half up: 51 of 101 rows (Python's round gives 50)
    counts = bagwise.resample(n, members, scheme="subsample", fraction=0.5, rng=seed).counts
    rng = np.random.default_rng(seed)
    short = np.zeros((members, n), dtype=bool)
    picks = np.argsort(rng.random((members, n - 1)), axis=1)[:, :d]
    np.put_along_axis(short, picks, True, axis=1)
    return inclusion_check(counts > 0, d / n), {"last row never drawn":
                                                inclusion_check(short, d / n)}


def test_subsample_draws_distinct_rows():
    # Bühlmann & Yu (2002) subagging: round(n * fraction) rows without replacement. Pass
    # rate over 200 seeds: tests/bench/suite_a_pass_rate.py, 100%; the smallest bias
    # it catches is a row's rate off by 4.5 binomial standard errors (0.036 at 4,000
    # members), e.g. a row never drawn (fails on every seed).
    draw = bagwise.resample(101, 500, scheme="subsample", fraction=0.5, rng=2)
    assert draw.counts.max() == 1
    np.testing.assert_array_equal(draw.counts.sum(axis=1), 51)
    right, wrong = subsample_check(2)
    assert right and not any(wrong.values()), wrong


def test_stratified_draws_keep_every_stratum_size():
    rng = np.random.default_rng(0)
    labels = rng.choice(np.array(["a", "b", "c"]), size=300, p=[0.6, 0.3, 0.1])
    for scheme, fraction in (("bootstrap", 1.0), ("subsample", 0.6), ("bootstrap", 0.5)):
        draw = bagwise.resample(300, 200, scheme=scheme, fraction=fraction, strata=labels)
        for value in "abc":
            size = (labels == value).sum()
            expected = max(1, round(size * fraction))
            np.testing.assert_array_equal(draw.counts[:, labels == value].sum(axis=1), expected)
        np.testing.assert_array_equal(draw.strata, labels)


def grouped_count_check(seed, members=10000):
    """Cluster bootstrap over G groups (Davison & Hinkley 1997, §3.8): a group's count is
    Binomial(G, 1/G), so a group is out of bag with probability (1 − 1/G)^G
    (scipy.stats.binom.pmf), per group within the Bonferroni z of its binomial standard
    error; 5 groups of unequal sizes. Wrong variant: rows drawn instead of groups (each
    group's count read from its first row: out of bag with probability (1 − 1/n)^n)."""
    groups = np.repeat(np.arange(5), [10, 40, 70, 120, 160])
    first_rows = np.searchsorted(groups, np.arange(5))
    law = scipy.stats.binom.pmf(0, 5, 1 / 5)
    right = bagwise.resample(400, members, groups=groups, rng=seed).counts[:, first_rows]
    rows = bagwise.resample(400, members, rng=seed).counts[:, first_rows]
    return inclusion_check(right == 0, law), {"rows drawn, not groups":
                                              inclusion_check(rows == 0, law)}


def test_grouped_draws_share_counts_within_groups():
    rng = np.random.default_rng(1)
    groups = rng.integers(0, 17, size=400)
    draw = bagwise.resample(400, 300, groups=groups, rng=4)
    for g in np.unique(groups):
        block = draw.counts[:, groups == g]
        assert (block == block[:, :1]).all()
    first_rows = [np.flatnonzero(groups == g)[0] for g in np.unique(groups)]
    np.testing.assert_array_equal(draw.counts[:, first_rows].sum(axis=1), 17)
    # The expected out-of-bag share: (1 - 1/G)^G whatever the group sizes (each group is
    # out with that probability; scipy.stats.binom.pmf).
    assert draw.expected_out_of_bag_share() == pytest.approx(
        scipy.stats.binom.pmf(0, 17, 1 / 17), rel=1e-12)
    # Per-group out-of-bag rates against the binomial law. Pass rate over 200 seeds:
    # tests/bench/suite_a_pass_rate.py, 100%; rows drawn instead of groups fail on
    # every seed.
    right, wrong = grouped_count_check(4)
    assert right and not any(wrong.values()), wrong


def block_miss_law(n, length, draws):
    """P(row i is out of bag) for the moving-block bootstrap (Künsch 1989), by enumeration
    of the starts: ceil(draws / L) blocks with starts uniform on 0..n−L, the last block cut
    to its first draws − (B − 1)L rows; a row is out when no block covers it."""
    starts = n - length + 1
    blocks = -(-draws // length)
    last = draws - (blocks - 1) * length
    full = np.zeros(n)
    cut = np.zeros(n)
    for s in range(starts):
        full[s:s + length] += 1
        cut[s:s + last] += 1
    return (1 - full / starts) ** (blocks - 1) * (1 - cut / starts)


def block_check(seed, n=103, length=10, members=4000):
    """Per-row out-of-bag rates of the moving-block bootstrap against `block_miss_law`.
    Wrong variant: blocks that wrap around the end (circular blocks, Politis & Romano 1992,
    starts uniform on 0..n−1), numpy."""
    law = block_miss_law(n, length, n)
    draw = bagwise.resample(n, members, block_length=length, rng=seed)
    rng = np.random.default_rng(seed)
    blocks = -(-n // length)
    covered = np.zeros((members, n), dtype=bool)
    starts = rng.integers(0, n, size=(members, blocks))
    for b in range(blocks):
        size = length if b < blocks - 1 else n - (blocks - 1) * length
        for k in range(size):
            covered[np.arange(members), (starts[:, b] + k) % n] = True
    return inclusion_check(draw.counts == 0, law), {"circular blocks":
                                                    inclusion_check(~covered, law)}


def block_starts_check(seed, n=120, length=12, members=200):
    """Block starts uniform on 0..n−L (Künsch 1989): chi-square against equal frequencies
    (scipy.stats.chisquare), passing at p > ALPHA (false failure 0.1% by construction).
    Wrong variant: starts uniform on 0..n−1 (circular blocks, Politis & Romano 1992), with
    the starts past n−L counted where they would be cut (numpy)."""
    starts = bagwise.resample(n, members, block_length=length, rng=seed).block_starts
    circular = np.random.default_rng(seed).integers(0, n, size=starts.shape)

    def passes(s):
        freq = np.bincount(np.minimum(s.ravel(), n - length), minlength=n - length + 1)
        return bool(scipy.stats.chisquare(freq).pvalue > ALPHA)

    return passes(starts), {"starts on 0..n-1": passes(circular)}


def test_moving_blocks_are_consecutive_rows():
    # Künsch (1989): blocks of L consecutive rows drawn with replacement until n rows.
    n, length, members = 120, 12, 200
    draw = bagwise.resample(n, members, block_length=length, rng=9)
    starts = draw.block_starts
    assert starts.shape == (members, n // length)
    assert starts.min() >= 0 and starts.max() <= n - length
    rebuilt = np.zeros((members, n), dtype=np.int64)
    for m in range(members):
        for s in starts[m]:
            rebuilt[m, s:s + length] += 1
    np.testing.assert_array_equal(draw.counts, rebuilt)
    np.testing.assert_array_equal(draw.counts.sum(axis=1), n)
    # Starts are uniform on 0..n-L (block_starts_check). Pass rate over 200 seeds:
    # tests/bench/suite_a_pass_rate.py, 100%; starts uniform on 0..n-1 (circular blocks)
    # fail on every seed.
    right, wrong = block_starts_check(9)
    assert right and not any(wrong.values()), wrong


def test_moving_blocks_cut_the_last_block():
    draw = bagwise.resample(103, 20, block_length=10, rng=1)
    assert draw.block_starts.shape == (20, 11)
    np.testing.assert_array_equal(draw.counts.sum(axis=1), 103)
    # The stated expectation is the mean of the enumerated per-row law.
    assert draw.expected_out_of_bag_share() == pytest.approx(
        block_miss_law(103, 10, 103).mean(), rel=1e-12)
    # Per-row out-of-bag rates against the law. Pass rate over 200 seeds:
    # tests/bench/suite_a_pass_rate.py, 99.5%; circular blocks fail on every seed.
    right, wrong = block_check(2)
    assert right and not any(wrong.values()), wrong


def test_members_do_not_change_when_more_are_drawn():
    for kwargs in ({}, {"scheme": "subsample", "fraction": 0.3}, {"block_length": 7},
                   {"groups": np.arange(90) % 9}, {"strata": np.arange(90) % 4}):
        few = bagwise.resample(90, 5, rng=21, **kwargs).counts
        many = bagwise.resample(90, 300, rng=21, **kwargs).counts
        np.testing.assert_array_equal(few, many[:5])
    few = bagwise.resample(90, 5, rng=21, scheme="bayesian").row_weights
    many = bagwise.resample(90, 300, rng=21, scheme="bayesian").row_weights
    np.testing.assert_array_equal(few, many[:5])


def test_results_do_not_depend_on_thread_count():
    one = bagwise.resample(5000, 64, rng=13, n_jobs=1).counts
    two = bagwise.resample(5000, 64, rng=13, n_jobs=2).counts
    np.testing.assert_array_equal(one, two)
    assert not np.array_equal(one, bagwise.resample(5000, 64, rng=14).counts)


@pytest.mark.parametrize("n_jobs", ["1", "2"])
def test_rayon_num_threads_gives_identical_draws(n_jobs, tmp_path):
    code = "import bagwise, sys; sys.stdout.buffer.write(bagwise.resample(3000, 40, rng=5).counts.tobytes())"
    env = {**os.environ, "RAYON_NUM_THREADS": n_jobs}
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, check=True)
    here = bagwise.resample(3000, 40, rng=5).counts.tobytes()
    assert out.stdout == here


def test_counts_use_a_wider_dtype_instead_of_wrapping():
    # 3 rows, 3000 draws: counts near 1000 do not fit uint8.
    draw = bagwise.resample(3, 10, fraction=1000, rng=0)
    assert draw.counts.dtype == np.uint16
    np.testing.assert_array_equal(draw.counts.sum(axis=1, dtype=np.int64), 3000)
    assert bagwise.resample(1000, 3).counts.dtype == np.uint8


def test_row_weights_are_counts_as_floats():
    draw = bagwise.resample(50, 4, rng=1)
    assert draw.row_weights.dtype == np.float64
    np.testing.assert_array_equal(draw.row_weights, draw.counts)
    np.testing.assert_array_equal(draw.out_of_bag, draw.counts == 0)


def test_rng_none_records_the_seed_used():
    draw = bagwise.resample(100, 3, rng=None)
    again = bagwise.resample(100, 3, rng=draw.seed)
    np.testing.assert_array_equal(draw.counts, again.counts)


def test_rng_generator_seeds_with_its_next_integer():
    # SPEC 7: a Generator gives the seed int(rng.integers(2**63)); the result keeps it.
    draw = bagwise.resample(100, 3, rng=np.random.default_rng(7))
    expected = int(np.random.default_rng(7).integers(2**63))
    assert draw.seed == expected
    np.testing.assert_array_equal(draw.counts, bagwise.resample(100, 3, rng=expected).counts)
    generator = np.random.default_rng(7)
    first, second = (bagwise.resample(100, 3, rng=generator) for _ in range(2))
    assert first.seed != second.seed   # the Generator advances


def test_resample_is_a_frozen_result():
    draw = bagwise.resample(40, 6, rng=0)
    assert isinstance(draw, bagwise._results.Result)
    with pytest.raises(AttributeError):
        draw.n_members = 7
    assert "members x rows" in repr(draw) and "6 x 40" in repr(draw)
    assert "Resample" in draw._repr_html_()
    frame = draw.to_frame()
    assert frame["member"].tolist() == list(range(6))
    assert draw.to_frame().shape[0] == draw.n_members


def test_progress_callback_and_interrupt():
    calls = []
    bagwise.resample(100_000, 200, progress=lambda done, total: calls.append((done, total)))
    assert calls and calls[-1] == (200, 200)
    assert all(b[0] > a[0] for a, b in zip(calls, calls[1:]))

    def stop(done, total):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        bagwise.resample(100_000, 200, progress=stop)


def test_progress_bar_with_tqdm(capsys):
    draw = bagwise.resample(10_000, 50, progress=True)
    assert draw.counts.shape == (50, 10_000)
    assert "resampling" in capsys.readouterr().err


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
def test_ctrl_c_stops_a_long_draw_quickly():
    code = textwrap.dedent("""
        import sys, time, bagwise
        print("ready", flush=True)
        start = time.perf_counter()
        try:
            bagwise.resample(1_000_000, 400, fraction=50.0, rng=0)  # ~10 s of work
        except KeyboardInterrupt:
            print(f"interrupted {time.perf_counter() - start:.3f}", flush=True)
    """)
    out, waited = interrupt(code, after=0.5, timeout=30)
    assert out.startswith("interrupted"), out
    assert waited < STOPS_WITHIN, waited


def test_resample_pickles_and_displays():
    draw = bagwise.resample(200, 10, strata=np.arange(200) % 3, rng=2)
    back = pickle.loads(pickle.dumps(draw))
    np.testing.assert_array_equal(back.counts, draw.counts)
    text = repr(draw)
    assert "strata" in text and "out-of-bag share" in text
    html = draw._repr_html_()
    assert html.startswith("<div") and "out-of-bag share" in html
    frame = draw.to_frame()
    assert list(frame.columns) == ["member", "rows_drawn", "distinct_rows", "out_of_bag_share",
                                   "largest_count"]
    np.testing.assert_array_equal(frame["rows_drawn"], 200)
    np.testing.assert_allclose(frame["out_of_bag_share"], draw.out_of_bag.mean(axis=1))
    bayes = bagwise.resample(20, 3, scheme="bayesian").to_frame()
    assert list(bayes.columns) == ["member", "weight_min", "weight_max", "weight_std"]


@pytest.mark.parametrize(
    ("kwargs", "argument", "error"),
    [
        ({"n_rows": 0}, "n_rows", ValueError),
        ({"n_rows": -5}, "n_rows", ValueError),
        ({"n_rows": 10.5}, "n_rows", TypeError),
        ({"n_members": 0}, "n_members", ValueError),
        ({"n_members": True}, "n_members", TypeError),
        ({"scheme": "jackknife"}, "scheme", ValueError),
        ({"fraction": 0.0}, "fraction", ValueError),
        ({"fraction": -1.0}, "fraction", ValueError),
        ({"fraction": float("nan")}, "fraction", ValueError),
        ({"fraction": "half"}, "fraction", TypeError),
        ({"scheme": "subsample", "fraction": 1.5}, "fraction", ValueError),
        ({"scheme": "bayesian", "fraction": 0.5}, "fraction", ValueError),
        ({"strata": np.arange(9)}, "strata", ValueError),
        ({"strata": np.array([0.0, np.nan] * 5)}, "strata", ValueError),
        ({"strata": np.array([None, "a"] * 5, dtype=object)}, "strata", ValueError),
        ({"strata": np.zeros((5, 2))}, "strata", ValueError),
        ({"groups": np.arange(11)}, "groups", ValueError),
        ({"groups": np.array([1.0, np.inf] * 5)}, "groups", ValueError),
        ({"block_length": 0}, "block_length", ValueError),
        ({"block_length": 11}, "block_length", ValueError),
        ({"block_length": 3, "scheme": "subsample", "fraction": 0.5}, "block_length", ValueError),
        ({"block_length": 3, "scheme": "bayesian"}, "block_length", ValueError),
        ({"strata": np.arange(10) % 2, "groups": np.arange(10) % 5}, "strata", ValueError),
        ({"groups": np.arange(10) % 5, "block_length": 2}, "groups", ValueError),
        ({"rng": -1}, "rng", ValueError),
        ({"rng": 2**64}, "rng", ValueError),
        ({"rng": 1.5}, "rng", TypeError),
        ({"n_jobs": 0}, "n_jobs", ValueError),
        ({"progress": "yes"}, "progress", TypeError),
    ],
)
def test_bad_input_names_the_argument(kwargs, argument, error):
    args = {"n_rows": 10, "n_members": 3, **kwargs}
    with pytest.raises(error, match=f"`{argument}`"):
        bagwise.resample(args.pop("n_rows"), args.pop("n_members"), **args)


def test_impossible_allocation_is_a_memory_error():
    with pytest.raises(MemoryError):
        bagwise.resample(10**9, 10**6)


def test_core_errors_name_the_argument():
    # The compiled layer validates too, for callers that bypass the Python wrapper.
    with pytest.raises(ValueError, match="`n_rows`"):
        bagwise._core.Resampler(0, "bootstrap", 1.0)
    with pytest.raises(ValueError, match="`scheme`"):
        bagwise._core.Resampler(5, "nope", 1.0)
    with pytest.raises(ValueError, match="`strata`"):
        bagwise._core.Resampler(3, "bootstrap", 1.0, strata=np.array([0, -1, 2]))
    with pytest.raises(TypeError):
        bagwise._core.Resampler(3, "bootstrap", 1.0, strata=np.array([0.5, 1.0, 2.0]))
    with pytest.raises(ValueError, match="`n_members`"):
        bagwise._core.Resampler(3, "bootstrap", 1.0).counts(0, 0)
