"""Aggregation, ambiguity decomposition, ensemble-size curve and residual correlation:
checks against straightforward numpy written here, scikit-learn metrics, exhaustive
enumeration, streaming from memory-mapped files, layouts, thread counts and bad input."""

from __future__ import annotations

import itertools
import math
import pickle
import tracemalloc

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, brier_score_loss, mean_squared_error

import bagwise

# -- simulated ensembles --------------------------------------------------------------------

def regression(members=30, n=2000, seed=0, dtype=np.float64):
    """Bagged-like members: shared signal, member-specific noise, a common bias."""
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    shared = 0.3 * rng.normal(size=n)
    preds = y + shared + 0.2 + 0.7 * rng.normal(size=(members, n))
    return preds.astype(dtype), y


def probabilities(members=25, n=1500, classes=4, seed=1):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    logits = rng.normal(size=(members, n, classes)) + 1.5 * np.eye(classes)[y]
    p = np.exp(logits)
    return p / p.sum(axis=2, keepdims=True), y


def labels(members=21, n=3000, classes=3, seed=2, accuracy=0.6):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    right = rng.random(size=(members, n)) < accuracy
    noise = rng.integers(0, classes, size=(members, n))
    return np.where(right, y, noise).astype(np.int64), y


# -- independent references (straightforward numpy) -----------------------------------------

def numpy_squared(t, y, w=None):
    w = np.full(t.shape[0], 1 / t.shape[0]) if w is None else w
    f = np.tensordot(w, t.astype(np.float64), axes=1)
    ens = (f - y) ** 2
    mem = np.tensordot(w, (t - y) ** 2, axes=1)
    amb = np.tensordot(w, (t - f) ** 2, axes=1)
    return f, ens, mem, amb


def numpy_brier(p, y, w=None):
    w = np.full(p.shape[0], 1 / p.shape[0]) if w is None else w
    onehot = np.eye(p.shape[2])[y]
    soft = np.tensordot(w, p, axes=1)
    ens = ((soft - onehot) ** 2).sum(axis=1)
    mem = np.tensordot(w, ((p - onehot) ** 2).sum(axis=2), axes=1)
    amb = np.tensordot(w, ((p - soft) ** 2).sum(axis=2), axes=1)
    return soft, ens, mem, amb


def numpy_votes(t, n_classes, w=None):
    w = np.ones(t.shape[0]) if w is None else w
    totals = np.zeros((t.shape[1], n_classes))
    for b in range(t.shape[0]):
        np.add.at(totals, (np.arange(t.shape[1]), t[b]), w[b])
    # numpy.argmax returns the first maximal index: the lowest class among ties.
    return totals.argmax(axis=1), totals / w.sum()


# -- aggregation ----------------------------------------------------------------------------

def test_mean_and_soft_vote_match_numpy_average():
    t, _ = regression(members=9, n=5000)
    w = np.random.default_rng(5).dirichlet(np.ones(9))
    # numpy.average over the member axis
    np.testing.assert_allclose(bagwise.aggregate(t), t.mean(axis=0), rtol=1e-13)
    np.testing.assert_allclose(bagwise.aggregate(t, weights=w), np.average(t, axis=0, weights=w),
                               rtol=1e-12, atol=1e-14)
    p, _ = probabilities(members=7, n=3000)
    soft = bagwise.aggregate(p)
    assert soft.shape == (3000, 4)
    np.testing.assert_allclose(soft, p.mean(axis=0), rtol=1e-13)
    np.testing.assert_allclose(soft.sum(axis=1), 1, rtol=1e-12)


def test_majority_vote_and_fractions_match_numpy():
    t, y = labels(members=6, n=4000, classes=5, accuracy=0.2)  # weak members: many ties
    vote, fractions = numpy_votes(t, 5)
    got = bagwise.aggregate(t)
    np.testing.assert_array_equal(got, vote)
    np.testing.assert_allclose(bagwise.vote_fractions(t), fractions, rtol=1e-15)
    top = fractions.max(axis=1, keepdims=True)
    tied = ((fractions == top).sum(axis=1) > 1)
    assert tied.sum() > 50  # the tie rule is exercised
    np.testing.assert_array_equal(got[tied], np.argmax(fractions[tied] == top[tied], axis=1))
    w = np.random.default_rng(3).dirichlet(np.ones(6))
    wvote, wfrac = numpy_votes(t, 5, w)
    np.testing.assert_array_equal(bagwise.aggregate(t, weights=w), wvote)
    np.testing.assert_allclose(bagwise.vote_fractions(t, weights=w), wfrac, rtol=1e-12)
    # n_classes widens the fractions; other integer dtypes are accepted
    assert bagwise.vote_fractions(t.astype(np.int16), n_classes=7).shape == (4000, 7)


# -- decomposition --------------------------------------------------------------------------

def test_squared_decomposition_against_numpy_and_sklearn():
    t, y = regression()
    d = bagwise.decompose(t, y)
    f, ens, mem, amb = numpy_squared(t, y)
    # Krogh & Vedelsby (1995), eq. (5)-(6): ensemble = mean member loss - ambiguity, exactly.
    assert d.identity and d.loss == "squared"
    np.testing.assert_allclose(d.ensemble_loss, d.member_loss - d.ambiguity, rtol=1e-12)
    np.testing.assert_allclose(d.ensemble_loss_per_point,
                               d.member_loss_per_point - d.ambiguity_per_point, rtol=1e-12, atol=1e-15)
    # sklearn.metrics.mean_squared_error on the mean prediction
    np.testing.assert_allclose(d.ensemble_loss, mean_squared_error(y, t.mean(axis=0)), rtol=1e-12)
    np.testing.assert_allclose(d.member_loss,
                               np.mean([mean_squared_error(y, m) for m in t]), rtol=1e-12)
    # straightforward numpy
    np.testing.assert_allclose(d.ensemble_loss_per_point, ens, rtol=1e-11, atol=1e-15)
    np.testing.assert_allclose(d.member_loss_per_point, mem, rtol=1e-12)
    np.testing.assert_allclose(d.ambiguity_per_point, amb, rtol=1e-12)
    np.testing.assert_allclose(d.relative_gain, amb.mean() / mem.mean(), rtol=1e-12)
    assert d.vote_gain is None and d.vote_gain_per_point is None


def test_weighted_decomposition():
    t, y = regression(members=12, n=3000)
    w = np.random.default_rng(9).dirichlet(np.ones(12) * 0.5)
    w[3] = 0.0
    w /= w.sum()
    d = bagwise.decompose(t, y, weights=w)
    _, ens, mem, amb = numpy_squared(t, y, w)
    # Krogh & Vedelsby (1995) with weights summing to one
    np.testing.assert_allclose(d.ensemble_loss, d.member_loss - d.ambiguity, rtol=1e-12)
    np.testing.assert_allclose([d.ensemble_loss, d.member_loss, d.ambiguity],
                               [ens.mean(), mem.mean(), amb.mean()], rtol=1e-12)
    # sklearn.metrics.mean_squared_error on the weighted mean (numpy.average)
    np.testing.assert_allclose(d.ensemble_loss,
                               mean_squared_error(y, np.average(t, axis=0, weights=w)), rtol=1e-12)


def test_brier_decomposition_against_numpy_and_sklearn():
    p, y = probabilities()
    d = bagwise.decompose(p, y)
    _, ens, mem, amb = numpy_brier(p, y)
    assert d.loss == "brier" and d.identity
    # Brier (1950) multi-class score; Krogh & Vedelsby identity on the one-hot target
    np.testing.assert_allclose(d.ensemble_loss, d.member_loss - d.ambiguity, rtol=1e-12)
    np.testing.assert_allclose(d.ensemble_loss_per_point, ens, rtol=1e-11, atol=1e-15)
    np.testing.assert_allclose(d.member_loss_per_point, mem, rtol=1e-12)
    np.testing.assert_allclose(d.ambiguity_per_point, amb, rtol=1e-11, atol=1e-15)
    # Binary case: sklearn.metrics.brier_score_loss is mean (p1 - y)^2, which is half the
    # two-class multi-class Brier score of the soft vote.
    p2, y2 = probabilities(classes=2, seed=4)
    d2 = bagwise.decompose(p2, y2)
    soft1 = p2.mean(axis=0)[:, 1]
    np.testing.assert_allclose(d2.ensemble_loss, 2 * brier_score_loss(y2, soft1), rtol=1e-12)
    np.testing.assert_allclose(d2.member_loss,
                               2 * np.mean([brier_score_loss(y2, m[:, 1]) for m in p2]), rtol=1e-12)


def test_error_rate_against_sklearn_accuracy():
    t, y = labels()
    d = bagwise.decompose(t, y)
    vote, _ = numpy_votes(t, 3)
    assert d.loss == "error_rate" and not d.identity
    # sklearn.metrics.accuracy_score on the majority vote (ties to the lowest class)
    np.testing.assert_allclose(d.ensemble_loss, 1 - accuracy_score(y, vote), rtol=1e-12)
    np.testing.assert_allclose(d.member_loss, np.mean([1 - accuracy_score(y, m) for m in t]),
                               rtol=1e-12)
    np.testing.assert_array_equal(d.ensemble_loss_per_point, vote != y)
    np.testing.assert_allclose(d.member_loss_per_point, (t != y).mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(d.vote_gain, d.member_loss - d.ensemble_loss, rtol=1e-12)
    np.testing.assert_allclose(d.relative_gain, d.vote_gain / d.member_loss, rtol=1e-12)
    assert d.ambiguity is None and d.ambiguity_per_point is None
    assert "no identity" in repr(d)
    # A vote can be worse than its average member: accuracy 0.4 with 3 classes where the
    # wrong votes concentrate on one class (common practice: the vote gain is not a spread).
    rng = np.random.default_rng(0)
    y = np.zeros(2000, dtype=np.int64)
    bad = np.where(rng.random((15, 2000)) < 0.45, 0, 1)
    worse = bagwise.decompose(bad, y)
    assert worse.vote_gain < 0
    np.testing.assert_allclose(worse.ensemble_loss, 1 - accuracy_score(y, numpy_votes(bad, 2)[0]))


def test_weighted_error_rate():
    t, y = labels(members=10)
    w = np.random.default_rng(1).dirichlet(np.ones(10))
    d = bagwise.decompose(t, y, weights=w)
    vote, _ = numpy_votes(t, 3, w)
    # sklearn.metrics.accuracy_score on the weighted vote
    np.testing.assert_allclose(d.ensemble_loss, 1 - accuracy_score(y, vote), rtol=1e-12)
    np.testing.assert_allclose(d.member_loss, np.average((t != y).mean(axis=1), weights=w),
                               rtol=1e-12)


# -- ensemble-size curve --------------------------------------------------------------------

def numpy_curve(t, y, orders, sizes, kind):
    """The first-k ensembles of the given orders, scored in plain numpy."""
    out = np.zeros((len(orders), len(sizes)))
    for o, order in enumerate(orders):
        for i, k in enumerate(sizes):
            sub = t[order[:k]]
            if kind == "squared":
                out[o, i] = np.mean((sub.mean(axis=0) - y) ** 2)
            elif kind == "brier":
                out[o, i] = np.mean(((sub.mean(axis=0) - np.eye(t.shape[2])[y]) ** 2).sum(axis=1))
            else:
                out[o, i] = np.mean(numpy_votes(sub, int(t.max()) + 1)[0] != y)
    return out


def test_size_curve_matches_numpy_on_the_same_orders():
    t, y = regression(members=16, n=800)
    curve = bagwise.size_curve(t, y, orders=7, seed=4)
    assert curve.sizes[0] == 1 and curve.sizes[-1] == 16
    assert np.all(np.diff(curve.sizes) > 0)
    orders = curve.member_orders
    assert orders.shape == (7, 16)
    np.testing.assert_array_equal(np.sort(orders, axis=1), np.tile(np.arange(16), (7, 1)))
    ref = numpy_curve(t, y, orders, curve.sizes, "squared")
    np.testing.assert_allclose(curve.per_order, ref, rtol=1e-12)
    np.testing.assert_allclose(curve.curve, ref.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(curve.standard_error, ref.std(axis=0, ddof=1) / np.sqrt(7),
                               rtol=1e-9, atol=1e-15)
    # Seeded orders are reproducible; another seed gives other orders.
    np.testing.assert_array_equal(bagwise.size_curve(t, y, orders=7, seed=4).member_orders, orders)
    assert not np.array_equal(bagwise.size_curve(t, y, orders=7, seed=5).member_orders, orders)
    # Brier and error rate on their own kinds
    p, py = probabilities(members=9, n=600)
    pc = bagwise.size_curve(p, py, orders=5, sizes=[1, 2, 5, 9], seed=1)
    np.testing.assert_allclose(pc.per_order, numpy_curve(p, py, pc.member_orders, pc.sizes, "brier"),
                               rtol=1e-12)
    lt, ly = labels(members=12, n=900)
    lc = bagwise.size_curve(lt, ly, orders=6, seed=2)
    np.testing.assert_allclose(lc.per_order,
                               numpy_curve(lt, ly, lc.member_orders, lc.sizes, "error_rate"), rtol=1e-12)
    assert lc.spread is None and lc.infinite_loss is None
    with pytest.raises(ValueError, match="`law`"):
        lc.law(3)
    with pytest.raises(ValueError, match="`members_needed`"):
        lc.members_needed(0.1)


def test_size_law_is_the_exact_mean_over_all_subsets():
    # Cochran (1977), Theorem 2.2: a simple random sample of k of M values has mean variance
    # (s^2/k)(1 - k/M), so the mean over all k-subsets of the subset-mean squared error is
    # loss(M) + W (1/k - 1/M). Checked by enumerating every subset (itertools.combinations).
    t, y = regression(members=7, n=300, seed=8)
    curve = bagwise.size_curve(t, y, sizes=[1, 2, 3, 5, 7], orders=3)
    w_numpy = t.var(axis=0, ddof=1).mean()
    loss_m = np.mean((t.mean(axis=0) - y) ** 2)
    np.testing.assert_allclose(curve.spread, w_numpy, rtol=1e-12)
    np.testing.assert_allclose(curve.full_loss, loss_m, rtol=1e-12)
    np.testing.assert_allclose(curve.infinite_loss, loss_m - w_numpy / 7, rtol=1e-12)
    for k in (1, 2, 3, 5, 7):
        subsets = [np.mean((t[list(c)].mean(axis=0) - y) ** 2)
                   for c in itertools.combinations(range(7), k)]
        np.testing.assert_allclose(curve.law(k), np.mean(subsets), rtol=1e-12)
        np.testing.assert_allclose(curve.law(k), loss_m + w_numpy * (1 / k - 1 / 7), rtol=1e-12)
    # Brier: the same, summed over classes
    p, py = probabilities(members=6, n=200)
    pc = bagwise.size_curve(p, py, sizes=[2, 6], orders=2)
    onehot = np.eye(4)[py]
    subsets = [np.mean(((p[list(c)].mean(axis=0) - onehot) ** 2).sum(axis=1))
               for c in itertools.combinations(range(6), 2)]
    np.testing.assert_allclose(pc.law(2), np.mean(subsets), rtol=1e-12)
    np.testing.assert_allclose(pc.spread, p.var(axis=0, ddof=1).sum(axis=1).mean(), rtol=1e-12)


def test_empirical_curve_agrees_with_the_law_within_standard_errors():
    # The order-averaged curve estimates E over random k-subsets, which is law(k) exactly
    # (Cochran 1977, Theorem 2.2); |curve - law| <= 4 SE (common practice for a z-check).
    t, y = regression(members=60, n=3000, seed=11)
    curve = bagwise.size_curve(t, y, orders=200, seed=1)
    law = curve.law(curve.sizes)
    assert np.all(np.abs(curve.curve - law) <= 4 * curve.standard_error + 1e-12), (
        curve.curve - law, curve.standard_error)
    assert curve.standard_error[-1] < 1e-12  # every order ends in the full ensemble
    # The curve decreases in k like W/k: loss(1) - loss(M) = W (1 - 1/M)
    np.testing.assert_allclose(curve.law(1) - curve.full_loss, curve.spread * (1 - 1 / 60), rtol=1e-12)
    p, py = probabilities(members=30, n=1000)
    pc = bagwise.size_curve(p, py, orders=100)
    assert np.all(np.abs(pc.curve - pc.law(pc.sizes)) <= 4 * pc.standard_error + 1e-12)


def test_members_needed_against_a_brute_force_search():
    t, y = regression(members=40, n=2000, seed=3)
    curve = bagwise.size_curve(t, y, orders=5)
    ks = np.arange(1, 10**6)
    for tolerance in (0.5, 0.1, 0.01, 0.001):
        # smallest k with W/k <= tolerance * infinite_loss (straightforward numpy search)
        expected = int(ks[np.argmax(curve.spread / ks <= tolerance * curve.infinite_loss)])
        assert curve.members_needed(tolerance) == expected
    # no bias: infinite loss near 0 can be negative -> NaN with a warning
    rng = np.random.default_rng(0)
    y0 = np.zeros(50)
    noisy = rng.normal(size=(4, 50))
    noisy -= noisy.mean(axis=0)  # the full ensemble is exact: loss(M) = 0, infinite < 0
    zero = bagwise.size_curve(noisy, y0, orders=3)
    with pytest.warns(UserWarning, match="infinite_loss"):
        assert math.isnan(zero.members_needed(0.1))


# -- correlation ----------------------------------------------------------------------------

def test_correlation_against_numpy_corrcoef_and_cov():
    t, y = regression(members=25, n=4000)
    r = t - y
    c = bagwise.correlation(t, y, matrix=True)
    off = ~np.eye(25, dtype=bool)
    # numpy.corrcoef / numpy.cov off-diagonal means (rows are members)
    np.testing.assert_allclose(c.mean_correlation, np.corrcoef(r)[off].mean(), rtol=1e-10)
    np.testing.assert_allclose(c.mean_covariance, np.cov(r)[off].mean(), rtol=1e-10)
    np.testing.assert_allclose(c.member_variance, r.var(axis=1, ddof=1), rtol=1e-12)
    np.testing.assert_allclose(c.mean_variance, r.var(axis=1, ddof=1).mean(), rtol=1e-12)
    np.testing.assert_allclose(c.matrix, np.corrcoef(r), rtol=1e-10, atol=1e-13)
    assert bagwise.correlation(t, y).matrix is None


def test_constant_members_and_one_member_give_nan_with_a_warning():
    t, y = regression(members=6, n=500)
    t[2] = y + 1.5  # constant residual
    with pytest.warns(UserWarning, match="constant"):
        c = bagwise.correlation(t, y, matrix=True)
    r = t - y
    with np.errstate(invalid="ignore", divide="ignore"):
        ref = np.corrcoef(r)  # numpy.corrcoef: NaN rows for a constant variable
    keep = np.array([b != 2 for b in range(6)])
    sub = ref[np.ix_(keep, keep)]
    np.testing.assert_allclose(c.mean_correlation, sub[~np.eye(5, dtype=bool)].mean(), rtol=1e-10)
    np.testing.assert_array_equal(c.constant_members, [2])
    assert np.isnan(c.matrix[2]).all() and np.isnan(c.matrix[:, 2]).all()
    with pytest.warns(UserWarning, match="single member"):
        one = bagwise.correlation(t[:1], y)
    assert math.isnan(one.mean_correlation) and math.isnan(one.mean_covariance)
    with pytest.warns(UserWarning, match="single member"):
        d = bagwise.decompose(t[:1], y)
    assert d.ambiguity == 0
    np.testing.assert_allclose(d.ensemble_loss, np.mean((t[0] - y) ** 2), rtol=1e-12)
    with pytest.warns(UserWarning, match="single member"):
        s = bagwise.size_curve(t[:1], y, orders=2)
    assert math.isnan(s.spread)


# -- streaming ------------------------------------------------------------------------------

def _chunks(n, cuts):
    edges = [0, *cuts, n]
    return [slice(a, b) for a, b in zip(edges, edges[1:])]


@pytest.mark.parametrize("kind", ["squared", "brier", "error_rate"])
def test_streams_from_a_memory_map_equal_in_memory(kind, tmp_path):
    if kind == "squared":
        t, y = regression(members=20, n=9000)
    elif kind == "brier":
        t, y = probabilities(members=10, n=5000)
    else:
        t, y = labels(members=15, n=7000)
    np.save(tmp_path / "members.npy", t)
    mapped = np.load(tmp_path / "members.npy", mmap_mode="r")
    n = t.shape[1]
    whole = bagwise.decompose(t, y)
    stream = bagwise.decompose_stream(loss=kind)
    for part in _chunks(n, [1, 2049, 4000, n - 3]):
        stream.update(mapped[:, part], y[part])
    got = stream.finish()
    for name in ("ensemble_loss", "member_loss", "relative_gain"):
        np.testing.assert_allclose(getattr(got, name), getattr(whole, name), rtol=1e-12)
    np.testing.assert_allclose(got.ensemble_loss_per_point, whole.ensemble_loss_per_point, rtol=1e-12)
    curve = bagwise.size_curve(t, y, orders=6, seed=3)
    sc = bagwise.size_curve_stream(orders=6, seed=3)
    for part in _chunks(n, [700, 701, n - 1]):
        sc.update(mapped[:, part], y[part])
    streamed = sc.finish()
    np.testing.assert_array_equal(streamed.sizes, curve.sizes)
    np.testing.assert_allclose(streamed.per_order, curve.per_order, rtol=1e-12)
    np.testing.assert_allclose(streamed.standard_error, curve.standard_error, rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(streamed.full_loss, curve.full_loss, rtol=1e-12)
    if kind != "error_rate":
        np.testing.assert_allclose(got.ambiguity, whole.ambiguity, rtol=1e-12)
        np.testing.assert_allclose(streamed.spread, curve.spread, rtol=1e-12)


def test_stream_rejects_changing_members():
    t, y = regression(members=5, n=100)
    stream = bagwise.decompose_stream()
    stream.update(t[:, :50], y[:50])
    with pytest.raises(ValueError, match="`members`"):
        stream.update(t[:4, 50:], y[50:])
    with pytest.raises(ValueError, match="`loss`"):
        stream.update(np.zeros((5, 3), dtype=np.int64), np.zeros(3, dtype=np.int64))
    with pytest.raises(ValueError, match="`members`"):
        bagwise.decompose_stream().finish()
    sc = bagwise.size_curve_stream()
    sc.update(t[:, :50], y[:50])
    with pytest.raises(ValueError, match="`members`"):
        sc.update(t[:3, 50:], y[50:])


# -- dtypes, layouts, n_jobs ---------------------------------------------------------------

def test_float32_gives_the_float64_results_without_a_copy():
    t64, y = regression(members=20, n=5000)
    t32 = t64.astype(np.float32)
    exact = t32.astype(np.float64)  # the same values in f64
    for fn in (lambda m: bagwise.decompose(m, y).ambiguity,
               lambda m: bagwise.size_curve(m, y, orders=3).curve,
               lambda m: bagwise.correlation(m, y).mean_correlation,
               lambda m: bagwise.aggregate(m)):
        np.testing.assert_allclose(fn(t32), fn(exact), rtol=1e-6)
    # Not copied: the traced peak stays far below the size of an f64 copy (numpy registers
    # its buffers with tracemalloc; the core's buffers are chunk-sized).
    big = np.random.default_rng(0).random((40, 250_000), dtype=np.float32)
    yy = np.zeros(250_000)
    tracemalloc.start()
    bagwise.decompose(big, yy)
    bagwise.size_curve(big, yy, orders=2)
    bagwise.correlation(big, yy)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < big.nbytes / 2, (peak, big.nbytes)  # an f64 copy would be 2 * nbytes


def test_layouts_give_identical_results():
    t, y = regression(members=11, n=3001)
    base = bagwise.decompose(t, y)
    wide = np.zeros((22, 6002))
    wide[::2, ::2] = t
    variants = [np.asfortranarray(t), np.ascontiguousarray(t.T).T, wide[::2, ::2]]
    for v in variants:
        assert not v.flags.c_contiguous
        d = bagwise.decompose(v, y)
        np.testing.assert_array_equal(d.ambiguity_per_point, base.ambiguity_per_point)
        assert d.ensemble_loss == base.ensemble_loss
        np.testing.assert_array_equal(bagwise.aggregate(v), bagwise.aggregate(t))
        np.testing.assert_array_equal(bagwise.size_curve(v, y, orders=3).curve,
                                      bagwise.size_curve(t, y, orders=3).curve)
        assert bagwise.correlation(v, y).mean_correlation == bagwise.correlation(t, y).mean_correlation
    p, py = probabilities(members=5, n=900)
    pf = np.asfortranarray(p)
    np.testing.assert_array_equal(bagwise.decompose(pf, py).ambiguity_per_point,
                                  bagwise.decompose(p, py).ambiguity_per_point)
    lt, ly = labels()
    np.testing.assert_array_equal(bagwise.aggregate(np.asfortranarray(lt)), bagwise.aggregate(lt))


def test_results_do_not_depend_on_thread_count():
    t, y = regression(members=13, n=20_000)
    one, two = bagwise.decompose(t, y, n_jobs=1), bagwise.decompose(t, y, n_jobs=2)
    np.testing.assert_array_equal(one.ambiguity_per_point, two.ambiguity_per_point)
    assert one.ensemble_loss == two.ensemble_loss and one.ambiguity == two.ambiguity
    np.testing.assert_array_equal(bagwise.size_curve(t, y, n_jobs=1).per_order,
                                  bagwise.size_curve(t, y, n_jobs=2).per_order)
    c1 = bagwise.correlation(t, y, matrix=True, n_jobs=1)
    c2 = bagwise.correlation(t, y, matrix=True, n_jobs=2)
    assert c1.mean_correlation == c2.mean_correlation
    np.testing.assert_array_equal(c1.matrix, c2.matrix)
    lt, ly = labels(n=10_000)
    d1, d2 = bagwise.decompose(lt, ly, n_jobs=1), bagwise.decompose(lt, ly, n_jobs=2)
    assert d1.ensemble_loss == d2.ensemble_loss and d1.member_loss == d2.member_loss
    np.testing.assert_array_equal(bagwise.vote_fractions(lt, n_jobs=1),
                                  bagwise.vote_fractions(lt, n_jobs=2))


# -- display --------------------------------------------------------------------------------

def test_results_display_and_convert():
    t, y = regression(members=8, n=300)
    d = bagwise.decompose(t, y)
    assert "ambiguity" in repr(d) and "holds exactly" in repr(d)
    assert d._repr_html_().startswith("<div") and "ambiguity" in d._repr_html_()
    frame = d.to_frame()
    assert list(frame.columns) == ["ensemble_loss", "member_loss", "ambiguity"]
    np.testing.assert_allclose(frame["member_loss"], d.member_loss_per_point)
    lt, ly = labels(n=200)
    assert list(bagwise.decompose(lt, ly).to_frame().columns)[-1] == "vote_gain"
    s = bagwise.size_curve(t, y, orders=4)
    assert "spread W" in repr(s) and s._repr_html_().startswith("<div")
    sf = s.to_frame()
    np.testing.assert_allclose(sf["law"], s.law(s.sizes))
    c = bagwise.correlation(t, y)
    assert "correlation" in repr(c) and c._repr_html_().startswith("<div")
    assert list(c.to_frame().columns) == ["member", "residual_variance", "constant"]
    back = pickle.loads(pickle.dumps(d))
    assert back.ambiguity == d.ambiguity


# -- bad input ------------------------------------------------------------------------------

T, Y = regression(members=4, n=10)
P, PY = probabilities(members=3, n=10, classes=3)
L, LY = labels(members=5, n=10)


def _with(array, index, value):
    out = np.array(array, copy=True)
    out[index] = value
    return out


BAD = [
    (bagwise.decompose, (_with(T, (0, 3), np.nan), Y), {}, "members", ValueError),
    (bagwise.decompose, (_with(T, (1, 2), np.inf), Y), {}, "members", ValueError),
    (bagwise.decompose, (T, _with(Y, 4, np.nan)), {}, "y", ValueError),
    (bagwise.decompose, (T, Y[:9]), {}, "y", ValueError),
    (bagwise.decompose, (T, Y.reshape(2, 5)), {}, "y", ValueError),
    (bagwise.decompose, (T[:, :0], Y[:0]), {}, "members", ValueError),
    (bagwise.decompose, (T[:0], Y), {}, "members", ValueError),
    (bagwise.decompose, (T[0], Y), {}, "members", ValueError),
    (bagwise.decompose, (T.astype(np.float16), Y), {}, "members", TypeError),
    (bagwise.decompose, (T.astype(complex), Y), {}, "members", TypeError),
    (bagwise.decompose, (T > 0, Y), {}, "members", TypeError),
    (bagwise.decompose, (T, Y.astype(str)), {}, "y", TypeError),
    (bagwise.decompose, (T, Y), {"loss": "brier"}, "loss", ValueError),
    (bagwise.decompose, (T, Y), {"loss": "hinge"}, "loss", ValueError),
    (bagwise.decompose, (T, Y), {"weights": [0.5, 0.5, 0.5, 0.5]}, "weights", ValueError),
    (bagwise.decompose, (T, Y), {"weights": [1.5, -0.5, 0, 0]}, "weights", ValueError),
    (bagwise.decompose, (T, Y), {"weights": [0.5, 0.5]}, "weights", ValueError),
    (bagwise.decompose, (T, Y), {"weights": [np.nan, 1, 0, 0]}, "weights", ValueError),
    (bagwise.decompose, (T, Y), {"n_jobs": 0}, "n_jobs", ValueError),
    (bagwise.decompose, (_with(P, (0, 1, 1), 0.9), PY), {}, "members", ValueError),
    (bagwise.decompose, (_with(P, (0, 1), [1.2, -0.2, 0.0]), PY), {}, "members", ValueError),
    (bagwise.decompose, (P, _with(PY, 0, 3)), {}, "y", ValueError),
    (bagwise.decompose, (P, PY.astype(float)), {}, "y", TypeError),
    (bagwise.decompose, (_with(L, (0, 0), -1), LY), {}, "members", ValueError),
    (bagwise.decompose, (L, _with(LY, 2, -2)), {}, "y", ValueError),
    (bagwise.aggregate, (_with(L, (1, 1), 7),), {"n_classes": 3}, "n_classes", ValueError),
    (bagwise.aggregate, (L,), {"n_classes": 0}, "n_classes", ValueError),
    (bagwise.aggregate, (_with(L, (0, 0), 10**7),), {}, "n_classes", ValueError),
    (bagwise.decompose, (_with(L, (0, 0), 10**7), LY), {}, "n_classes", ValueError),
    (bagwise.size_curve, (_with(L, (0, 0), 10**7), LY), {}, "n_classes", ValueError),
    (bagwise.aggregate, (P,), {"n_classes": 5}, "n_classes", ValueError),
    (bagwise.aggregate, (_with(T, (0, 0), np.nan),), {}, "members", ValueError),
    (bagwise.aggregate, ([["a", "b"]],), {}, "members", TypeError),
    (bagwise.vote_fractions, (T,), {}, "members", TypeError),
    (bagwise.size_curve, (T, Y), {"sizes": [0, 2]}, "sizes", ValueError),
    (bagwise.size_curve, (T, Y), {"sizes": [5]}, "sizes", ValueError),
    (bagwise.size_curve, (T, Y), {"sizes": [1.5]}, "sizes", TypeError),
    (bagwise.size_curve, (T, Y), {"sizes": []}, "sizes", ValueError),
    (bagwise.size_curve, (T, Y), {"orders": 0}, "orders", ValueError),
    (bagwise.size_curve, (T, Y), {"orders": 2.5}, "orders", TypeError),
    (bagwise.size_curve, (T, Y), {"seed": -1}, "seed", ValueError),
    (bagwise.size_curve, (_with(T, (3, 9), np.nan), Y), {}, "members", ValueError),
    (bagwise.size_curve, (_with(P, (0, 0), [0.5, 0.6, 0.0]), PY), {}, "members", ValueError),
    (bagwise.correlation, (P, PY), {}, "members", TypeError),
    (bagwise.correlation, (L, LY), {}, "members", TypeError),
    (bagwise.correlation, (T, Y), {"matrix": "yes"}, "matrix", TypeError),
    (bagwise.correlation, (_with(T, (2, 2), -np.inf), Y), {}, "members", ValueError),
]


@pytest.mark.parametrize(("fn", "args", "kwargs", "argument", "error"), BAD)
def test_bad_input_names_the_argument(fn, args, kwargs, argument, error):
    with pytest.raises(error, match=f"`{argument}`"):
        fn(*args, **kwargs)


def test_size_curve_tolerance_and_law_arguments():
    curve = bagwise.size_curve(T, Y, orders=2)
    for bad, error in ((0.0, ValueError), (-1.0, ValueError), (math.inf, ValueError), ("a", TypeError)):
        with pytest.raises(error, match="`tolerance`"):
            curve.members_needed(bad)
    with pytest.raises(ValueError, match="`k`"):
        curve.law(0)
    with pytest.warns(UserWarning, match="`orders`"):
        bagwise.size_curve(T, Y, orders=1)


def test_exact_members_give_nan_relative_gain_with_a_warning():
    y = np.arange(5.0)
    with pytest.warns(UserWarning, match="member loss 0"):
        d = bagwise.decompose(np.tile(y, (3, 1)), y)
    assert d.ensemble_loss == 0 and d.ambiguity == 0 and math.isnan(d.relative_gain)


def test_core_errors_name_the_argument():
    # The compiled layer validates too, for callers that bypass the Python wrapper.
    core = bagwise._core
    with pytest.raises(ValueError, match="`members`"):
        core.mean_prediction(np.array([[1.0, np.nan]]))
    with pytest.raises(ValueError, match="`weights`"):
        core.mean_prediction(np.ones((2, 3)), np.array([0.2, 0.2]))
    with pytest.raises(TypeError, match="`members`"):
        core.mean_prediction(np.ones((2, 3), dtype=np.int32))
    with pytest.raises(ValueError, match="`members`"):
        core.majority_vote(np.array([[0, 4]]), 3)
    with pytest.raises(ValueError, match="`n_classes`"):
        core.DecompositionAccumulator("error_rate").update(np.array([[0, 10**7]]), np.zeros(2, np.int64))
    with pytest.raises(ValueError, match="`loss`"):
        core.DecompositionAccumulator("hinge")
    acc = core.DecompositionAccumulator("squared")
    with pytest.raises(ValueError, match="`y`"):
        acc.update(np.ones((2, 3)), np.ones(4))
    with pytest.raises(ValueError, match="`sizes`"):
        core.SizeCurveAccumulator("squared", 3, [2, 2], 1, 0)
    with pytest.raises(ValueError, match="`orders`"):
        core.SizeCurveAccumulator("squared", 3, [1], 0, 0)
    with pytest.raises(ValueError, match="`members`"):
        core.SizeCurveAccumulator("squared", 3, [1], 1, 0).finish()
