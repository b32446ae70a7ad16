"""The bootstrap of little bags: `resample(..., scheme="little_bags")`, the variance
estimator `prediction_variance(..., method="little_bags")` and the estimators' use of them.

Sources: Sexton & Laake (2009), "Standard errors for bagged and random forest estimators",
CSDA 53(3); Athey, Tibshirani & Wager (2019), "Generalized random forests", Annals of
Statistics 47(2), §4, eq. 12 (the estimator S²_B − W/ℓ over groups of ℓ members sharing a
half-sample). The Monte-Carlo checks compare with the variance of the ensemble's mean over
independent training sets; `little_bags_ratio` and `tree_ratio` are also run over many
seeds by tests/bench/bench_little_bags.py (pass rate).
"""

from __future__ import annotations

import functools
import math
import pickle
import warnings

import numpy as np
import pytest
import scipy.stats
from scipy import integrate
from sklearn.base import clone

import bagwise
from bagwise import BagwiseWarning

# -- the scheme ---------------------------------------------------------------------------


@pytest.mark.parametrize(("n_rows", "fraction", "group_size"),
                         [(101, 0.1, 2), (200, 0.3, 3), (9, 0.45, 4), (2, 0.2, 2)])
def test_members_stay_inside_their_group_half(n_rows, fraction, group_size):
    # Sexton & Laake (2009); Athey, Tibshirani & Wager (2019), §4: each group shares a half
    # of floor(n/2) rows; each member draws round(n * fraction) distinct rows of it.
    n_members = 5 * group_size
    draw = bagwise.resample(n_rows, n_members, scheme="little_bags", fraction=fraction,
                            group_size=group_size, rng=3)
    counts = draw.counts
    assert counts.shape == (n_members, n_rows)
    assert set(np.unique(counts)) <= {0, 1}
    size = max(1, round(n_rows * fraction))
    assert np.all(counts.sum(axis=1) == size)
    assert draw.draws_per_member == size
    assert draw.group_size == group_size
    union = counts.reshape(-1, group_size, n_rows).any(axis=1).sum(axis=1)
    assert np.all(union <= n_rows // 2)
    # 1 - d/n: each member's rows are a uniform subset of all rows.
    assert draw.expected_out_of_bag_share() == pytest.approx(1 - size / n_rows)


def test_a_group_half_has_floor_n_over_two_rows():
    # With ℓ members of n/2 - 1 rows each from a half of n/2, the group's union reaches the
    # whole half for most groups and never exceeds it (counting argument).
    n = 40
    draw = bagwise.resample(n, 400, scheme="little_bags", fraction=0.49, group_size=4, rng=5)
    union = draw.counts.reshape(100, 4, n).any(axis=1).sum(axis=1)
    assert union.max() == n // 2
    assert np.mean(union == n // 2) > 0.5


def little_bags_inclusion_check(counts, n, d, group_size):
    """Exact inclusion law of the little bags (Sexton & Laake 2009): a group's half H holds
    h = floor(n/2) uniform rows and each member d uniform rows of H, so a row is in a member
    with probability d/n and in two members of the same group with probability
    (h/n)(d/h)² = d²/(n h) (given H the members draw independently), against (d/n)² for
    members of different groups. Per row, the inclusion rate against d/n, and pooled over
    rows, the same-group pair rate against d²/(n h); each within the Bonferroni z of its
    standard error (the standard deviation over groups, which are independent, over
    √groups)."""
    members = counts.shape[0]
    groups = members // group_size
    h = n // 2
    inside = (counts > 0).reshape(groups, group_size, n)
    per_group_rate = inside.mean(axis=1)                        # (groups, n)
    pairs = (inside[:, 0] & inside[:, 1]).mean(axis=1)          # (groups,) first two members
    root = math.sqrt(groups)
    z = float(scipy.stats.norm.isf(1e-3 / (2 * (n + 1))))        # Bonferroni, 0.1% in all
    rate_ok = np.all(np.abs(per_group_rate.mean(axis=0) - d / n)
                     <= z * per_group_rate.std(axis=0, ddof=1) / root)
    pair_ok = abs(pairs.mean() - d * d / (n * h)) <= z * pairs.std(ddof=1) / root
    return bool(rate_ok and pair_ok)


def little_bags_draw_check(seed, n=60, members=8000, fraction=0.2, group_size=2):
    """(passes, {wrong variant: passes}): bagwise's little bags against the exact law, and
    two wrong samplers (numpy): members drawing d rows of all rows (no shared half), and a
    half of n/2 + 5 rows (a wrong half size)."""
    d = round(n * fraction)
    counts = bagwise.resample(n, members, scheme="little_bags", fraction=fraction,
                              group_size=group_size, rng=seed).counts
    rng = np.random.default_rng(seed)

    def sampler(half_size):
        out = np.zeros((members, n), dtype=np.int64)
        for g in range(members // group_size):
            half = rng.choice(n, half_size, replace=False)
            for m in range(group_size):
                out[g * group_size + m, rng.choice(half, d, replace=False)] = 1
        return out

    return little_bags_inclusion_check(counts, n, d, group_size), {
        "no shared half": little_bags_inclusion_check(sampler(n), n, d, group_size),
        "half of n/2 + 5 rows": little_bags_inclusion_check(sampler(n // 2 + 5), n, d,
                                                            group_size),
    }


def test_rows_are_drawn_evenly_over_many_groups():
    # Pass rate over 200 seeds: tests/bench/suite_a_pass_rate.py, 100%; both wrong
    # samplers fail on every seed. The smallest wrong variant it catches: a half 5 rows too
    # large (pooled pair rate 0.069 instead of 0.080, about 20 standard errors).
    right, wrong = little_bags_draw_check(7)
    assert right
    for name, passed in wrong.items():
        assert not passed, name


def test_draws_do_not_depend_on_threads_or_later_groups():
    kwargs = dict(scheme="little_bags", fraction=0.1, group_size=3, rng=11)
    many = bagwise.resample(500, 3000, n_jobs=2, **kwargs).counts
    one = bagwise.resample(500, 3000, n_jobs=1, **kwargs).counts
    few = bagwise.resample(500, 6, n_jobs=1, **kwargs).counts
    np.testing.assert_array_equal(many, one)
    np.testing.assert_array_equal(many[:6], few)


def test_bad_arguments_name_themselves():
    with pytest.raises(ValueError, match=r"^`fraction`.*\(0, 0\.5\)"):
        bagwise.resample(100, 10, scheme="little_bags")
    with pytest.raises(ValueError, match=r"^`fraction`"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.5)
    with pytest.raises(ValueError, match=r"^`n_members`.*multiple of group_size \(3\)"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, group_size=3)
    with pytest.raises(ValueError, match=r"^`group_size`.*at least 2"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, group_size=1)
    with pytest.raises(TypeError, match=r"^`group_size`"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, group_size=2.0)
    with pytest.raises(ValueError, match=r"^`group_size`.*only scheme='little_bags'"):
        bagwise.resample(100, 10, group_size=2)
    with pytest.raises(ValueError, match=r"^`strata`"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, strata=np.arange(100) % 2)
    with pytest.raises(ValueError, match=r"^`groups`"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, groups=np.arange(100) % 5)
    with pytest.raises(ValueError, match=r"^`block_length`"):
        bagwise.resample(100, 10, scheme="little_bags", fraction=0.1, block_length=5)
    with pytest.raises(ValueError, match=r"^`n_rows`"):
        bagwise.resample(1, 10, scheme="little_bags", fraction=0.1)


def test_resample_shows_its_groups():
    draw = bagwise.resample(100, 8, scheme="little_bags", fraction=0.1, rng=0)
    assert "4 of 2, each in a half of 50 rows" in repr(draw)
    assert bagwise.resample(100, 8, rng=0).group_size == 0


# -- the estimator against its defining sums ----------------------------------------------


def _defining_sums(members, group_size):
    """S²_B, W and the grand mean written out (Athey, Tibshirani & Wager 2019, eq. 12)."""
    groups = members.reshape(-1, group_size, members.shape[1])
    group_means = groups.mean(axis=1)
    s2_b = group_means.var(axis=0, ddof=1)
    within = groups.var(axis=1, ddof=1).mean(axis=0)
    return s2_b, within, group_means.mean(axis=0)


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")   # pure noise: all clipped
@pytest.mark.parametrize("group_size", [2, 3, 5])
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_estimator_equals_its_defining_sums(group_size, dtype):
    rng = np.random.default_rng(group_size)
    n_members = 12 * group_size
    counts = bagwise.resample(80, n_members, scheme="little_bags", fraction=0.2,
                              group_size=group_size, rng=1).counts
    members = (rng.normal(size=(n_members, 700)) * 3 + 50).astype(dtype)
    result = bagwise.prediction_variance(members, counts, method="little_bags",
                                         group_size=group_size)
    s2_b, within, mean = _defining_sums(members.astype(np.float64), group_size)
    np.testing.assert_allclose(result.raw_variance, s2_b, rtol=1e-12)
    np.testing.assert_allclose(result.correction, within / group_size, rtol=1e-12)
    np.testing.assert_allclose(result.mean, mean, rtol=1e-12)
    corrected = s2_b - within / group_size
    # A difference of two terms: its error is relative to their size, not to the difference.
    np.testing.assert_allclose(result.variance, np.maximum(corrected, 0), rtol=0,
                               atol=1e-12 * float(s2_b.max()))
    assert result.n_clipped == int((corrected < 0).sum())
    assert result.group_size == group_size
    assert result.method == result.scheme == "little_bags"
    raw = bagwise.prediction_variance(members, counts, method="little_bags",
                                      group_size=group_size, corrected=False)
    np.testing.assert_allclose(raw.variance, s2_b, rtol=1e-12)


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
def test_estimator_is_the_same_for_any_thread_count_and_strides():
    counts = bagwise.resample(80, 40, scheme="little_bags", fraction=0.2, rng=1).counts
    members = np.random.default_rng(0).normal(size=(1000, 40)).T   # strided view
    a = bagwise.prediction_variance(members, counts, method="little_bags", n_jobs=1)
    b = bagwise.prediction_variance(np.ascontiguousarray(members), counts,
                                    method="little_bags", n_jobs=2)
    np.testing.assert_array_equal(a.raw_variance, b.raw_variance)
    np.testing.assert_array_equal(a.correction, b.correction)


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
def test_counts_that_are_not_little_bags_are_refused():
    good = bagwise.resample(100, 20, scheme="little_bags", fraction=0.2, rng=0).counts
    members = np.random.default_rng(0).normal(size=(20, 5))
    boot = bagwise.resample(100, 20, rng=0).counts
    with pytest.raises(ValueError, match=r"^`counts`: little bags draw each row at most once"):
        bagwise.prediction_variance(members, boot, method="little_bags")
    # Two plain subsamples of 40 rows cover about 64 of 100 rows: not inside one half.
    sub = bagwise.resample(100, 20, scheme="subsample", fraction=0.4, rng=0).counts
    with pytest.raises(ValueError, match=r"^`counts`: the members of group \d+ .*more than one half"):
        bagwise.prediction_variance(members, sub, method="little_bags")
    uneven = good.copy()
    uneven[3, np.flatnonzero(uneven[3])[0]] = 0
    with pytest.raises(ValueError, match=r"^`counts`: little-bags members all draw the same"):
        bagwise.prediction_variance(members, uneven, method="little_bags")
    with pytest.raises(ValueError, match=r"^`group_size`: the 20 members do not split"):
        bagwise.prediction_variance(members, good, method="little_bags", group_size=3)
    with pytest.raises(ValueError, match=r"^`group_size`: only method='little_bags'"):
        bagwise.prediction_variance(members, good, group_size=2)
    with pytest.raises(ValueError, match=r"^`scheme`: method='ij' is not valid for little-bags"):
        bagwise.prediction_variance(members, good, scheme="little_bags")
    with pytest.raises(ValueError, match=r"^`members`: needs at least 2 groups"):
        bagwise.prediction_variance(members[:2], good[:2], method="little_bags")
    bad = members.copy()
    bad[0, 0] = np.nan
    with pytest.raises(ValueError, match=r"^`members`"):
        bagwise.prediction_variance(bad, good, method="little_bags")


# -- Monte-Carlo checks against the variance over training sets ---------------------------

#: The simulated statistic: member prediction at point x_j is (1/s) Σ_{i in S} K_j(x_i) y_i,
#: a kernel-weighted subsample mean, with x ~ U(0, 1), y = sin(2πx) + N(0, 1).
POINTS = np.linspace(0.05, 0.95, 12)
BANDWIDTH = 0.1


def _kernel(x):
    return np.exp(-0.5 * ((x[:, None] - POINTS[None, :]) / BANDWIDTH) ** 2)


def kernel_truth(n_rows):
    """Var over training sets of the infinite ensemble's mean (1/n) Σ_i K_j(x_i) y_i:
    Var(K_j(X) Y) / n, with E[K Y] = ∫ K f and E[K² Y²] = ∫ K² (f² + 1) on (0, 1)
    (scipy.integrate.quad)."""
    def f(x):
        return math.sin(2 * math.pi * x)

    def first(x, point):
        return math.exp(-0.5 * ((x - point) / BANDWIDTH) ** 2) * f(x)

    def second(x, point):
        return math.exp(-((x - point) / BANDWIDTH) ** 2) * (f(x) ** 2 + 1)

    out = []
    for point in POINTS:
        mean = integrate.quad(first, 0, 1, args=(point,))[0]
        square = integrate.quad(second, 0, 1, args=(point,))[0]
        out.append((square - mean**2) / n_rows)
    return np.array(out)


#: The kernel check's size: n = 2000 rows, 100 members (50 groups of 2) at share 0.1,
#: 700 independent training sets (standard error of the median ratio about 0.05).
KERNEL = dict(n_rows=2000, n_members=100, fraction=0.1, replicates=700)


@functools.lru_cache(maxsize=4)
def kernel_replicates(seed, *, n_rows=KERNEL["n_rows"], n_members=KERNEL["n_members"],
                      fraction=KERNEL["fraction"], replicates=KERNEL["replicates"],
                      group_size=2):
    """Per replicate (an independent training set and draw): S²_B and W of the kernel
    statistic, shape (replicates, n_points) each."""
    rng = np.random.default_rng(seed)
    raws, withins = [], []
    for r in range(replicates):
        x = rng.random(n_rows)
        y = np.sin(2 * np.pi * x) + rng.normal(size=n_rows)
        weighted = _kernel(x) * y[:, None]
        counts = bagwise.resample(n_rows, n_members, scheme="little_bags", fraction=fraction,
                                  group_size=group_size, rng=seed * 100_003 + r).counts
        members = counts @ weighted / counts[0].sum()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", BagwiseWarning)
            result = bagwise.prediction_variance(members, counts, method="little_bags",
                                                 group_size=group_size)
        raws.append(result.raw_variance)
        withins.append(result.correction * group_size)
    return np.array(raws), np.array(withins)


def ratio_check(estimates, truth, z=3.5):
    """(passed, median ratio, tolerance): the median over points of mean(estimate) / truth
    within z Monte-Carlo standard errors of 1 (the standard error of the mean over
    replicates, per point, its median over points; z = 3.5 fails 0.05% of correct runs
    under normality, common practice)."""
    ratio = estimates.mean(axis=0) / truth
    se = estimates.std(axis=0, ddof=1) / math.sqrt(len(estimates)) / truth
    tolerance = z * float(np.median(se))
    median = float(np.median(ratio))
    return abs(median - 1) <= tolerance, median, tolerance


def little_bags_ratio(seed, variant="little_bags"):
    """The kernel check at share 0.1 for ``variant``: "little_bags" (S²_B − W/ℓ),
    "uncorrected" (S²_B) or "ddof" (S²_B − W/(ℓ − 1), the wrong ℓ)."""
    raws, withins = kernel_replicates(seed)
    ell = 2
    estimate = {"little_bags": raws - withins / ell, "uncorrected": raws,
                "ddof": raws - withins / (ell - 1)}[variant]
    return ratio_check(estimate, kernel_truth(KERNEL["n_rows"]))


def test_kernel_statistic_matches_its_variance_over_training_sets():
    # Truth in closed form (kernel_truth); the estimator is unbiased for the half-sample
    # variance, which equals it for this linear statistic (Athey, Tibshirani & Wager 2019,
    # §4). Pass rate over seeds: tests/bench/bench_little_bags.py.
    passed, median, tolerance = little_bags_ratio(1)
    assert tolerance < 0.2, tolerance        # the check is at least as tight as [0.8, 1.25]
    assert passed, (median, tolerance)
    assert 0.8 <= median <= 1.25


def test_kernel_statistic_rejects_the_wrong_variants():
    raws, withins = kernel_replicates(1)
    truth = kernel_truth(KERNEL["n_rows"])
    assert not ratio_check(raws, truth)[0]                   # S²_B without − W/ℓ
    assert not ratio_check(raws - withins, truth)[0]         # W/(ℓ − 1): the wrong ℓ
    assert not ratio_check(raws - withins / 4, truth)[0]     # W/(2ℓ): the wrong ℓ


def test_the_ij_is_not_estimable_on_the_same_budget():
    # Same statistic, size and budget, plain bootstrap members: the IJ correction n v / B
    # (Wager, Hastie & Efron 2014) is about n/B = 20 times the variance, so nearly all of
    # the raw IJ is Monte-Carlo noise.
    n, b = KERNEL["n_rows"], KERNEL["n_members"]
    rng = np.random.default_rng(0)
    x = rng.random(n)
    y = np.sin(2 * np.pi * x) + rng.normal(size=n)
    counts = bagwise.resample(n, b, rng=0).counts
    members = counts @ (_kernel(x) * y[:, None]) / n
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        ij = bagwise.prediction_variance(members, counts)
    assert np.nanmedian(ij.correction_share) > 0.9


@functools.lru_cache(maxsize=4)
def tree_replicates(seed, *, n_rows=1000, n_members=100, fraction=0.1, replicates=100,
                    n_points=100):
    """Little-bags bags of native trees refit on independent Friedman #1 training sets
    (sklearn.datasets.make_friedman1, noise 1): per replicate (rows) and point (columns)
    the estimate S²_B − W/ℓ, S²_B and the ensemble mean."""
    from sklearn.datasets import make_friedman1

    points, _ = make_friedman1(n_points, noise=0, random_state=10_000 + seed)
    estimates, raws, means = [], [], []
    for r in range(replicates):
        X, y = make_friedman1(n_rows, noise=1.0, random_state=seed * 1000 + r)
        bag = bagwise.BagRegressor("tree", n_members=n_members, scheme="little_bags",
                                   fraction=fraction, min_leaf=5, random_state=seed * 1000 + r)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", BagwiseWarning)
            result = bag.fit(X, y).prediction_variance(points)
        estimates.append(result.raw_variance - result.correction)
        raws.append(result.raw_variance)
        means.append(result.mean)
    return np.array(estimates), np.array(raws), np.array(means)


def replicate_truth(raws, means, groups):
    """The Monte-Carlo truth of the infinite ensemble's variance over training sets:
    Var_r(ensemble mean) − mean_r(S²_B)/G, since the ensemble mean's own Monte-Carlo
    variance given the data is Var(B_g)/G, which S²_B/G estimates without bias (law of total
    variance)."""
    return means.var(axis=0, ddof=1) - raws.mean(axis=0) / groups


def tree_ratio(seed, variant="little_bags", bootstrap=300, **kwargs):
    """(passed, median ratio, tolerance) of the tree case: the median over points of
    mean_r(estimate) / truth, within 4 standard errors of 1, the standard error from a
    bootstrap over the replicates (the estimate and the truth are both Monte-Carlo
    figures; Efron & Tibshirani 1993, ch. 6)."""
    estimates, raws, means = tree_replicates(seed, **kwargs)
    groups = kwargs.get("n_members", 100) // 2
    # S²_B − W/ℓ; S²_B; S²_B − W/(ℓ − 1) = S²_B − 2 (W/ℓ) for ℓ = 2.
    values = {"little_bags": estimates, "uncorrected": raws,
              "ddof": raws - 2 * (raws - estimates)}[variant]

    def median_ratio(rows):
        truth = replicate_truth(raws[rows], means[rows], groups)
        return float(np.median(values[rows].mean(axis=0) / truth))

    rng = np.random.default_rng(seed)
    n = len(values)
    spread = [median_ratio(rng.integers(0, n, n)) for _ in range(bootstrap)]
    median = median_ratio(np.arange(n))
    tolerance = 4 * float(np.std(spread, ddof=1))
    return abs(median - 1) <= tolerance, median, tolerance


def test_trees_match_their_variance_over_training_sets():
    # Athey, Tibshirani & Wager (2019), §4: at share 0.1 the half-sample variance is close
    # to the variance of the full ensemble's mean; truth from refits on independent Friedman
    # #1 training sets. Pass rate over seeds: tests/bench/bench_little_bags.py.
    passed, median, tolerance = tree_ratio(1)
    assert passed, (median, tolerance)
    # S²_B alone is the variance of a group mean: many times too large.
    assert not tree_ratio(1, "uncorrected")[0]
    # W/(ℓ − 1) instead of W/ℓ: the wrong ℓ removes more than the Monte-Carlo part.
    assert not tree_ratio(1, "ddof")[0]


# -- the estimators ------------------------------------------------------------------------


def _data(n=400, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    return X, X[:, 0] - X[:, 1] ** 2 + rng.normal(size=n)


def test_regressor_follows_scikit_learn_conventions():
    bag = bagwise.BagRegressor("linear", n_members=20, scheme="little_bags", group_size=4)
    assert bag.get_params()["group_size"] == 4
    copy = clone(bag)
    assert copy.get_params() == bag.get_params()
    assert copy.set_params(group_size=5).group_size == 5
    assert bagwise.BagClassifier(scheme="little_bags").get_params()["group_size"] == 2


def test_regressor_uses_the_default_share_and_little_bags_variance():
    X, y = _data()
    bag = bagwise.BagRegressor("linear", n_members=40, scheme="little_bags",
                               random_state=3).fit(X, y)
    counts = bag.in_bag_
    default = bagwise.resampling.LITTLE_BAGS_FRACTION
    assert np.all(counts.sum(axis=1) == round(400 * default))
    assert np.all(counts.reshape(20, 2, 400).any(axis=1).sum(axis=1) <= 200)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        result = bag.prediction_variance(X[:30])
        direct = bagwise.prediction_variance(bag.member_predictions(X[:30]), counts,
                                             method="little_bags")
    assert result.method == "little_bags" and result.group_size == 2
    np.testing.assert_array_equal(result.variance, direct.variance)
    assert "share per member" in repr(result)
    with pytest.raises(ValueError, match=r"^`method`: 'ij' is not valid for a bag fitted with"):
        bag.prediction_variance(X[:30], method="ij")
    with pytest.raises(ValueError, match=r"^`scheme`: the infinitesimal jackknife"):
        bag.spread(X[:30])
    restored = pickle.loads(pickle.dumps(bag))
    assert restored.group_size == 2
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        diagnosis = bag.diagnose(X[:30], y[:30])
    # the diagnosis uses the little-bags estimator and leaves out the IJ-based split
    assert diagnosis.uncertainty.method == "little_bags"
    np.testing.assert_array_equal(diagnosis.uncertainty.variance, direct.variance)
    assert diagnosis.spread is None


def test_other_bags_refuse_the_little_bags_method():
    X, y = _data()
    bag = bagwise.BagRegressor("linear", n_members=10, random_state=0).fit(X, y)
    with pytest.raises(ValueError, match=r"^`method`: 'little_bags' is not valid"):
        bag.prediction_variance(X[:5], method="little_bags")


def test_classifier_gives_little_bags_variance_of_every_class():
    X, y = _data()
    labels = np.where(y > 0, "high", "low")
    bag = bagwise.BagClassifier("neighbors", n_members=30, scheme="little_bags", group_size=3,
                                fraction=0.1, random_state=1).fit(X, labels)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        result = bag.prediction_variance(X[:20])
    assert result.raw_variance.shape == (20, 2)
    for k in range(2):
        probabilities = bag.member_predictions(X[:20])[:, :, k]
        s2_b, within, _ = _defining_sums(probabilities, 3)
        np.testing.assert_allclose(result.raw_variance[:, k], s2_b, rtol=1e-12)
        np.testing.assert_allclose(result.correction[:, k], within / 3, rtol=1e-12)


def test_a_large_share_warns_once_and_says_so():
    X, y = _data()
    with pytest.warns(BagwiseWarning, match=r"^`fraction`: each little-bags member sees 0\.40"):
        bag = bagwise.BagRegressor("linear", n_members=20, scheme="little_bags", fraction=0.4,
                                   random_state=0).fit(X, y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BagwiseWarning)
        result = bag.prediction_variance(X[:10])
    assert "large enough to overstate" in repr(result)


@pytest.mark.parametrize(("params", "pattern"), [
    (dict(n_members=21), r"^`n_members`: must be a multiple of group_size \(2\)"),
    (dict(group_size=1), r"^`group_size`: must be at least 2"),
    (dict(group_size=2.5), r"^`group_size`: expected an integer"),
    (dict(fraction=0.6), r"^`fraction`: must lie in \(0, 0\.5\)"),
])
def test_estimators_refuse_bad_little_bags_parameters(params, pattern):
    X, y = _data(60)
    bag = bagwise.BagRegressor("linear", **{"n_members": 20, "scheme": "little_bags", **params})
    with pytest.raises((ValueError, TypeError), match=pattern):
        bag.fit(X, y)


def test_classifier_refuses_stratified_little_bags_and_groups():
    X, y = _data(60)
    labels = y > 0
    with pytest.raises(ValueError, match=r"^`stratify`"):
        bagwise.BagClassifier("neighbors", n_members=10, scheme="little_bags",
                              stratify=True).fit(X, labels)
    with pytest.raises(ValueError, match=r"^`groups`"):
        bagwise.BagRegressor("linear", n_members=10, scheme="little_bags").fit(
            X, y, groups=np.arange(60) % 6)
