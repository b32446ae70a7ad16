"""Tests of `bagwise.decomposition` against independent references (numpy, scikit-learn,
published identities); the source of each check is named beside it."""

from __future__ import annotations

import math
import pickle
import tracemalloc

import numpy as np
import pytest
from _members_data import (
    LY,
    PY,
    L,
    P,
    T,
    Y,
    _chunks,
    _with,
    labels,
    numpy_brier,
    numpy_squared,
    numpy_votes,
    probabilities,
    regression,
)
from sklearn.metrics import accuracy_score, brier_score_loss, mean_squared_error

import bagwise


def test_squared_decomposition_against_numpy_and_sklearn():
    t, y = regression()
    d = bagwise.decompose(t, y)
    f, ens, mem, amb = numpy_squared(t, y)
    # Krogh & Vedelsby (1995), eq. (5)-(6): ensemble = mean member loss - ambiguity, exactly.
    assert d.identity and d.loss == "squared_error"
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
    d = bagwise.decompose(t, y, member_weights=w)
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
    assert d.loss == "brier_score" and d.identity
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
    d = bagwise.decompose(t, y, member_weights=w)
    vote, _ = numpy_votes(t, 3, w)
    # sklearn.metrics.accuracy_score on the weighted vote
    np.testing.assert_allclose(d.ensemble_loss, 1 - accuracy_score(y, vote), rtol=1e-12)
    np.testing.assert_allclose(d.member_loss, np.average((t != y).mean(axis=1), weights=w),
                               rtol=1e-12)


def test_one_member_has_no_ambiguity_with_a_warning():
    t, y = regression(members=6, n=500)
    with pytest.warns(bagwise.BagwiseWarning, match="single member"):
        d = bagwise.decompose(t[:1], y)
    assert d.ambiguity == 0
    np.testing.assert_allclose(d.ensemble_loss, np.mean((t[0] - y) ** 2), rtol=1e-12)


def test_exact_members_give_nan_relative_gain_with_a_warning():
    y = np.arange(5.0)
    with pytest.warns(bagwise.BagwiseWarning, match="member loss 0"):
        d = bagwise.decompose(np.tile(y, (3, 1)), y)
    assert d.ensemble_loss == 0 and d.ambiguity == 0 and math.isnan(d.relative_gain)


# -- streaming ------------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["squared_error", "brier_score", "error_rate"])
def test_streams_from_a_memory_map_equal_in_memory(kind, tmp_path):
    if kind == "squared_error":
        t, y = regression(members=20, n=9000)
    elif kind == "brier_score":
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
    got = stream.result()
    for name in ("ensemble_loss", "member_loss", "relative_gain"):
        np.testing.assert_allclose(getattr(got, name), getattr(whole, name), rtol=1e-12)
    np.testing.assert_allclose(got.ensemble_loss_per_point, whole.ensemble_loss_per_point, rtol=1e-12)
    if kind != "error_rate":
        np.testing.assert_allclose(got.ambiguity, whole.ambiguity, rtol=1e-12)


def test_stream_rejects_changing_members():
    t, y = regression(members=5, n=100)
    stream = bagwise.decompose_stream()
    stream.update(t[:, :50], y[:50])
    with pytest.raises(ValueError, match="`members`"):
        stream.update(t[:4, 50:], y[50:])
    with pytest.raises(ValueError, match="`loss`"):
        stream.update(np.zeros((5, 3), dtype=np.int64), np.zeros(3, dtype=np.int64))
    with pytest.raises(ValueError, match="`members`"):
        bagwise.decompose_stream().result()


@pytest.mark.parametrize("kind", ["squared_error", "brier_score", "error_rate"])
def test_stream_merge_of_two_halves_and_pickle_equal_the_whole(kind):
    # Merging the sums of two halves of the points equals one pass (Chan, Golub & LeVeque
    # 1983); a pickled stream carries its state and its per-point losses.
    t, y = {"squared_error": regression, "brier_score": probabilities, "error_rate": labels}[kind]()
    n = t.shape[1]
    whole = bagwise.decompose(t, y)
    first = bagwise.decompose_stream().update(t[:, : n // 2], y[: n // 2])
    second = bagwise.decompose_stream().update(t[:, n // 2:], y[n // 2:])
    second = pickle.loads(pickle.dumps(second))
    first_alone = pickle.loads(pickle.dumps(first))
    merged = first.merge(second).result()
    for name in ("ensemble_loss", "member_loss", "relative_gain"):
        np.testing.assert_allclose(getattr(merged, name), getattr(whole, name), rtol=1e-12)
    np.testing.assert_allclose(merged.member_loss_per_point, whole.member_loss_per_point,
                               rtol=1e-12)
    assert merged.n_points == n and merged.n_members == whole.n_members
    empty = bagwise.decompose_stream().merge(first_alone)
    np.testing.assert_allclose(empty.result().ensemble_loss,
                               bagwise.decompose(t[:, : n // 2], y[: n // 2]).ensemble_loss,
                               rtol=1e-12)
    with pytest.raises(ValueError, match="`other`"):
        bagwise.decompose_stream(loss="squared_error").merge(
            bagwise.decompose_stream().update(*labels(members=3, n=20)))


# -- every family reads members alike: dtypes, layouts, n_jobs ---------------------------

def test_float32_gives_the_float64_results_without_a_copy():
    t64, y = regression(members=20, n=5000)
    t32 = t64.astype(np.float32)
    exact = t32.astype(np.float64)  # the same values in f64
    for fn in (lambda m: bagwise.decompose(m, y).ambiguity,
               lambda m: bagwise.size_curve(m, y, orders=3).curve,
               lambda m: bagwise.correlation(m, y).mean_residual_correlation,
               lambda m: bagwise.aggregate(m)):
        # the same values in f32 and f64: only the order of f64 accumulation may differ,
        # far below f32's own resolution 2^-24 ≈ 6e-8 (common practice: 1e-6)
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
        assert (bagwise.correlation(v, y).mean_residual_correlation
                == bagwise.correlation(t, y).mean_residual_correlation)
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
    assert c1.mean_residual_correlation == c2.mean_residual_correlation
    np.testing.assert_array_equal(c1.residual_correlation, c2.residual_correlation)
    lt, ly = labels(n=10_000)
    d1, d2 = bagwise.decompose(lt, ly, n_jobs=1), bagwise.decompose(lt, ly, n_jobs=2)
    assert d1.ensemble_loss == d2.ensemble_loss and d1.member_loss == d2.member_loss
    np.testing.assert_array_equal(bagwise.vote_fractions(lt, n_jobs=1),
                                  bagwise.vote_fractions(lt, n_jobs=2))


# -- display ---------------------------------------------------------------------------------

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
    back = pickle.loads(pickle.dumps(d))
    assert back.ambiguity == d.ambiguity


# -- bad input -------------------------------------------------------------------------------

def test_core_errors_name_the_argument():
    # The compiled layer validates too, for callers that bypass the Python wrapper.
    core = bagwise._core
    with pytest.raises(ValueError, match="`n_classes`"):
        core.DecompositionAccumulator("error_rate").update(np.array([[0, 10**7]]), np.zeros(2, np.int64))
    with pytest.raises(ValueError, match="`loss`"):
        core.DecompositionAccumulator("hinge")
    acc = core.DecompositionAccumulator("squared_error")
    with pytest.raises(ValueError, match="`y`"):
        acc.update(np.ones((2, 3)), np.ones(4))


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
    (bagwise.decompose, (T, Y), {"loss": "brier_score"}, "loss", ValueError),
    (bagwise.decompose, (T, Y), {"loss": "hinge"}, "loss", ValueError),
    (bagwise.decompose, (T, Y), {"member_weights": [0.5, 0.5, 0.5, 0.5]}, "member_weights", ValueError),
    (bagwise.decompose, (T, Y), {"member_weights": [1.5, -0.5, 0, 0]}, "member_weights", ValueError),
    (bagwise.decompose, (T, Y), {"member_weights": [0.5, 0.5]}, "member_weights", ValueError),
    (bagwise.decompose, (T, Y), {"member_weights": [np.nan, 1, 0, 0]}, "member_weights", ValueError),
    (bagwise.decompose, (T, Y), {"n_jobs": 0}, "n_jobs", ValueError),
    (bagwise.decompose, (_with(P, (0, 1, 1), 0.9), PY), {}, "members", ValueError),
    (bagwise.decompose, (_with(P, (0, 1), [1.2, -0.2, 0.0]), PY), {}, "members", ValueError),
    (bagwise.decompose, (P, _with(PY, 0, 3)), {}, "y", ValueError),
    (bagwise.decompose, (P, PY.astype(float)), {}, "y", TypeError),
    (bagwise.decompose, (_with(L, (0, 0), -1), LY), {}, "members", ValueError),
    (bagwise.decompose, (L, _with(LY, 2, -2)), {}, "y", ValueError),
    (bagwise.decompose, (_with(L, (0, 0), 10**7), LY), {}, "members", ValueError),  # no n_classes argument
]


@pytest.mark.parametrize(("fn", "args", "kwargs", "argument", "error"), BAD)
def test_bad_input_names_the_argument(fn, args, kwargs, argument, error):
    with pytest.raises(error, match=f"`{argument}`"):
        fn(*args, **kwargs)
