"""Determinism: every randomised call gives bit-identical results for 1, 2 and 4 threads,
member m does not change when members are added, fits of member ranges joined equal the
whole fit, and the mergeable statistics agree over chunk sizes 1, 7, 64 and all points.

Every check compares the library with itself under another thread count, member count or
chunking; the reference is the bytes of the same call with ``n_jobs=1`` (or the same
statistic on all points at once), and a mismatch is a failure. Where the code promises
agreement only up to rounding (chunked moments merged by Chan, Golub & LeVeque 1983), the
bound used is stated beside the check.
"""

from __future__ import annotations

import dataclasses
import math
import pickle

import numpy as np
import pytest

import bagwise
from bagwise import _core

# Small ensembles make some figures "not estimable" with a warning; what is compared here is
# every field, warnings or not.
pytestmark = pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")

THREADS = (1, 2, 4)
CHUNKS = (1, 7, 64, None)  # None: all points in one chunk


def _identical(a, b, where: str = "result") -> None:
    """Bit-identical: arrays by dtype, shape and bytes (NaN payloads included), floats by
    their IEEE bits, dataclasses field by field, containers item by item."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        a, b = np.asarray(a), np.asarray(b)
        assert a.dtype == b.dtype and a.shape == b.shape, f"{where}: {a.dtype}{a.shape} vs {b.dtype}{b.shape}"
        if a.dtype.kind == "O":
            assert a.tolist() == b.tolist(), where
        else:
            assert a.tobytes() == b.tobytes(), f"{where}: arrays differ"
    elif dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for field in dataclasses.fields(a):
            if field.name == "n_jobs":  # the thread count itself, kept with the inputs
                continue
            _identical(getattr(a, field.name), getattr(b, field.name), f"{where}.{field.name}")
    elif callable(getattr(a, "to_bytes", None)) and not isinstance(a, int):
        assert type(a) is type(b) and a.to_bytes() == b.to_bytes(), f"{where}: stored bytes differ"
    elif isinstance(a, float) or isinstance(b, float):
        assert np.float64(a).tobytes() == np.float64(b).tobytes(), f"{where}: {a!r} vs {b!r}"
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), where
        for k, (x, y) in enumerate(zip(a, b)):
            _identical(x, y, f"{where}[{k}]")
    elif isinstance(a, dict):
        assert a.keys() == b.keys(), where
        for key in a:
            _identical(a[key], b[key], f"{where}[{key!r}]")
    elif hasattr(a, "to_numpy") and hasattr(a, "columns"):
        assert list(a.columns) == list(b.columns), where
        for column in a.columns:
            _identical(a[column].to_numpy(), b[column].to_numpy(), f"{where}[{column!r}]")
    elif type(a).__eq__ is object.__eq__:  # an object without equality: its pickle
        assert type(a) is type(b) and pickle.dumps(a) == pickle.dumps(b), f"{where}: pickles differ"
    else:
        assert a == b, f"{where}: {a!r} vs {b!r}"


def _close(a, b, rtol: float, where: str = "result") -> None:
    """As `_identical`, but floating values within ``rtol`` of the largest magnitude of
    their array (NaN where NaN): an entry that is zero up to rounding, such as the size
    curve's standard error at the full ensemble, is compared on the array's scale."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        a, b = np.asarray(a), np.asarray(b)
        assert a.shape == b.shape, where
        if a.dtype.kind == "f":
            finite = np.abs(b[np.isfinite(b)])
            scale = float(finite.max()) if finite.size else 0.0
            np.testing.assert_allclose(a, b, rtol=rtol, atol=rtol * scale, equal_nan=True,
                                       err_msg=where)
        else:
            _identical(a, b, where)
    elif dataclasses.is_dataclass(a) and not isinstance(a, type):
        for field in dataclasses.fields(a):
            if field.name == "n_jobs":
                continue
            _close(getattr(a, field.name), getattr(b, field.name), rtol, f"{where}.{field.name}")
    elif callable(getattr(a, "to_bytes", None)) and not isinstance(a, int):
        _identical(a, b, where)
    elif isinstance(a, float) and isinstance(b, float):
        assert (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=rtol), (
            f"{where}: {a!r} vs {b!r}")
    elif isinstance(a, (list, tuple)):
        for k, (x, y) in enumerate(zip(a, b)):
            _close(x, y, rtol, f"{where}[{k}]")
    elif isinstance(a, dict):
        for key in a:
            _close(a[key], b[key], rtol, f"{where}[{key!r}]")
    else:
        _identical(a, b, where)


def test_the_comparison_can_fail():
    # The helpers must see a one-ulp change, a changed NaN payload and a changed label.
    x = np.linspace(0.0, 1.0, 5)
    y = x.copy()
    y[2] = np.nextafter(y[2], 2.0)
    with pytest.raises(AssertionError):
        _identical(x, y)
    with pytest.raises(AssertionError):
        _identical(0.1, 0.1 + 2**-56)
    with pytest.raises(AssertionError):
        _close(x, x * (1 + 1e-9), rtol=1e-12)
    with pytest.raises(AssertionError):
        _identical(np.array(["a", "b"], dtype=object), np.array(["a", "c"], dtype=object))


# ---------------------------------------------------------------------------- resampling

SCHEMES = {
    "bootstrap": {},
    "subsample": {"scheme": "subsample", "fraction": 0.5},
    "bayesian": {"scheme": "bayesian"},
    "strata": {"strata": np.arange(40) % 3},
    "groups": {"groups": np.arange(40) // 4},
    "blocks": {"block_length": 5},
    "little_bags": {"scheme": "little_bags", "fraction": 0.25, "group_size": 2},
}


@pytest.mark.parametrize("name", sorted(SCHEMES))
def test_resample_is_identical_for_every_thread_count(name):
    draws = [bagwise.resample(40, 12, rng=5, n_jobs=k, **SCHEMES[name]) for k in THREADS]
    for k, draw in zip(THREADS[1:], draws[1:]):
        _identical(draw, draws[0], f"{name}, n_jobs={k}")


@pytest.mark.parametrize("name", sorted(SCHEMES))
def test_resample_keeps_the_first_members_when_members_are_added(name):
    few = bagwise.resample(40, 10, rng=5, n_jobs=2, **SCHEMES[name])
    many = bagwise.resample(40, 20, rng=5, n_jobs=2, **SCHEMES[name])
    weights = "row_weights" if name == "bayesian" else "counts"
    _identical(getattr(many, weights)[:10], getattr(few, weights), name)
    # ... and another seed changes them (the check can fail).
    other = bagwise.resample(40, 10, rng=6, n_jobs=2, **SCHEMES[name])
    assert getattr(other, weights).tobytes() != getattr(few, weights).tobytes()


# ---------------------------------------------------------------------------- native fits

def _data(classification: bool, n: int = 60, p: int = 4, seed: int = 3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * rng.normal(size=n)
    if classification:
        y = np.digitize(y, [-0.5, 0.5])
    return X, y


NATIVE = {
    "tree_exact": ("tree", {"splitter": "exact"}),
    "tree_histogram": ("tree", {"splitter": "histogram"}),
    "tree_split_features": ("tree", {"split_features": 2, "max_depth": 5}),
    "tree_subsample": ("tree", {"scheme": "subsample", "fraction": 0.6}),
    "linear": ("linear", {"penalty": 0.1}),
    "linear_bayesian": ("linear", {"scheme": "bayesian"}),
    "neighbors": ("neighbors", {"neighbors": 3}),
}


def _native_cases():
    for name, (learner, options) in NATIVE.items():
        for classification in (False, True):
            if learner == "linear" and classification:
                continue
            yield pytest.param(learner, options, classification,
                               id=f"{name}-{'classifier' if classification else 'regressor'}")


def _bag(learner, options, classification, **more):
    cls = bagwise.BagClassifier if classification else bagwise.BagRegressor
    return cls(learner, **{"random_state": 11, **options, **more})


@pytest.mark.parametrize(("learner", "options", "classification"), list(_native_cases()))
def test_native_fits_are_identical_for_every_thread_count(learner, options, classification):
    X, y = _data(classification)
    fits = [_bag(learner, options, classification, n_members=9, n_jobs=k).fit(X, y)
            for k in THREADS]
    first = fits[0]
    for k, bag in zip(THREADS[1:], fits[1:]):
        assert bag._model.to_bytes() == first._model.to_bytes(), f"n_jobs={k}: model bytes"
        _identical(bag.in_bag_, first.in_bag_, f"n_jobs={k}: in_bag_")
        _identical(bag.member_predictions(X), first.member_predictions(X), f"n_jobs={k}")
    # Prediction with any thread count gives the same bits too.
    predictions = [first.set_params(n_jobs=k).member_predictions(X) for k in THREADS]
    for k, values in zip(THREADS[1:], predictions[1:]):
        _identical(values, predictions[0], f"prediction with n_jobs={k}")


@pytest.mark.parametrize(("learner", "options", "classification"), list(_native_cases()))
def test_native_members_do_not_change_when_members_are_added(learner, options, classification):
    X, y = _data(classification)
    few = _bag(learner, options, classification, n_members=10, n_jobs=2).fit(X, y)
    many = _bag(learner, options, classification, n_members=20, n_jobs=2).fit(X, y)
    _identical(many.member_predictions(X)[:10], few.member_predictions(X), "first 10 members")
    _identical(many.in_bag_[:10], few.in_bag_, "first 10 in-bag rows")


CORE_FITS = {
    "tree": ("TreeEnsemble", {"task": "regression", "split_features": 2, "seed": 4}),
    "tree_classes": ("TreeEnsemble", {"task": "classification", "n_classes": 3,
                                      "split_features": 1, "seed": 4}),
    "linear": ("LinearEnsemble", {"task": "regression", "penalty": 0.2}),
    "neighbors": ("NeighborsEnsemble", {"task": "regression", "neighbors": 3}),
}


@pytest.mark.parametrize("name", sorted(CORE_FITS))
def test_fits_of_member_ranges_joined_equal_the_whole_fit(name):
    # The distributed fit: groups of consecutive members fitted apart (with their first
    # member's index) and joined, as `_distributed.fit_native` does on the workers.
    core_class, options = CORE_FITS[name]
    core = getattr(_core, core_class)
    X, y = _data(options["task"] == "classification")
    y = y.astype(np.int64) if options["task"] == "classification" else y
    counts = bagwise.resample(len(y), 10, rng=2).counts
    whole = core.fit(X, y, counts, n_jobs=1, **options)
    streams = {"first_member": 0} if core_class == "TreeEnsemble" else {}
    for cuts in ([0, 3, 10], [0, 1, 2, 7, 10]):
        parts = []
        for first, end in zip(cuts[:-1], cuts[1:]):
            if streams:
                streams = {"first_member": first}
            parts.append(core.fit(X, y, counts[first:end], n_jobs=2, **options, **streams))
        assert core.join(parts).to_bytes() == whole.to_bytes(), f"{name}, cuts {cuts}"


def test_wrapped_fits_are_identical_for_every_thread_count():
    from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

    for classification, template in ((False, DecisionTreeRegressor(max_features=2)),
                                     (True, DecisionTreeClassifier(max_features=2))):
        X, y = _data(classification)
        cls = bagwise.BagClassifier if classification else bagwise.BagRegressor
        fits = [cls(template, n_members=8, random_state=7, n_jobs=k).fit(X, y) for k in THREADS]
        for k, bag in zip(THREADS[1:], fits[1:]):
            _identical(bag.in_bag_, fits[0].in_bag_, f"n_jobs={k}")
            _identical(bag.member_predictions(X), fits[0].member_predictions(X), f"n_jobs={k}")
        few = cls(template, n_members=4, random_state=7, n_jobs=2).fit(X, y)
        _identical(fits[0].member_predictions(X)[:4], few.member_predictions(X), "first members")


# ------------------------------------------------------------------- randomised diagnostics

def _members(n_members: int = 12, n_points: int = 150, seed: int = 1):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n_points)
    members = y + rng.normal(size=(n_members, n_points)) + 0.3 * rng.normal(size=(n_members, 1))
    counts = bagwise.resample(n_points, n_members, rng=seed).counts
    return members, y, counts


def _labels(n_members: int = 12, n_points: int = 150, n_classes: int = 3, seed: int = 1):
    rng = np.random.default_rng(seed)
    y = rng.integers(n_classes, size=n_points)
    wrong = rng.random((n_members, n_points)) < 0.3
    members = np.where(wrong, rng.integers(n_classes, size=(n_members, n_points)), y)
    return members, y


def test_size_curve_orders_are_identical_for_every_thread_count():
    members, y, _ = _members()
    curves = [bagwise.size_curve(members, y, orders=15, rng=3, n_jobs=k) for k in THREADS]
    for k, curve in zip(THREADS[1:], curves[1:]):
        _identical(curve, curves[0], f"n_jobs={k}")
    other = bagwise.size_curve(members, y, orders=15, rng=4, n_jobs=1)
    assert other.per_order.tobytes() != curves[0].per_order.tobytes()


def test_diagnose_is_identical_for_every_thread_count():
    members, y, counts = _members()
    train, y_train, _ = _members(seed=2)
    results = [bagwise.diagnose(members, y, counts=counts, train_members=train, y_train=y_train,
                                rng=5, n_jobs=k) for k in THREADS]
    for k, result in zip(THREADS[1:], results[1:]):
        _identical(result, results[0], f"n_jobs={k}")
        _identical(result.summary(), results[0].summary(), f"summary, n_jobs={k}")


DIAGNOSTICS = {
    "decompose": lambda m, y, c, k: bagwise.decompose(m, y, n_jobs=k),
    "correlation": lambda m, y, c, k: bagwise.correlation(m, y, matrix=True, n_jobs=k),
    "out_of_bag": lambda m, y, c, k: bagwise.out_of_bag(m[:, :40], c[:, :40], y[:40], n_jobs=k),
    "prediction_variance": lambda m, y, c, k: bagwise.prediction_variance(m, c, n_jobs=k),
    "jackknife": lambda m, y, c, k: bagwise.prediction_variance(m, c, method="jackknife",
                                                                n_jobs=k),
    "spread": lambda m, y, c, k: bagwise.spread(m, c, n_jobs=k),
    "count_gram": lambda m, y, c, k: bagwise.count_gram(c, jackknife=True, n_jobs=k),
    "replicate_spread": lambda m, y, c, k: bagwise.replicate_spread(
        m.reshape(3, 4, -1), y, n_jobs=k),
    "prediction_interval": lambda m, y, c, k: bagwise.prediction_interval(
        m[:, :20], c[:, 20:], train_members=m[:, 20:], y_train=y[20:], n_jobs=k),
}


@pytest.mark.parametrize("name", sorted(DIAGNOSTICS))
def test_diagnostics_are_identical_for_every_thread_count(name):
    members, y, counts = _members()
    results = [DIAGNOSTICS[name](members, y, counts, k) for k in THREADS]
    for k, result in zip(THREADS[1:], results[1:]):
        _identical(result, results[0], f"{name}, n_jobs={k}")


def test_diversity_is_identical_for_every_thread_count():
    members, y = _labels()
    results = [bagwise.diversity(members, y, n_jobs=k) for k in THREADS]
    for k, result in zip(THREADS[1:], results[1:]):
        _identical(result, results[0], f"n_jobs={k}")


def test_verdict_and_compare_learners_are_identical_for_every_thread_count():
    X, y = _data(False, n=80)
    verdicts = [bagwise.BagRegressor("tree", n_members=10, max_depth=4, random_state=2,
                                     n_jobs=k).fit(X, y).verdict(X, y, folds=3) for k in THREADS]
    for k, verdict in zip(THREADS[1:], verdicts[1:]):
        _identical(verdict, verdicts[0], f"verdict, n_jobs={k}")
    tables = [bagwise.compare_learners(X, y, ["tree", "linear"], n_members=8, folds=3,
                                       random_state=2, n_jobs=k) for k in THREADS]
    for k, table in zip(THREADS[1:], tables[1:]):
        _identical(table, tables[0], f"compare_learners, n_jobs={k}")


# ------------------------------------------------------------- chunk sizes of the streams

def _chunks(n: int, size: int | None):
    size = n if size is None else size
    return [(start, min(start + size, n)) for start in range(0, n, size)]


def _streamed(stream, n: int, size: int | None, update):
    for start, end in _chunks(n, size):
        update(stream, start, end)
    # A pickled round trip in the middle of nothing must not change the state either.
    return pickle.loads(pickle.dumps(stream)).result()


# Streams whose state holds exact integer counts: every chunking gives the same bits.
EXACT_STREAMS = {
    "count_gram": (lambda: bagwise.count_gram_stream(jackknife=True),
                   lambda s, m, y, c, a, b: s.update(c[:, a:b]),
                   lambda m, y, c: bagwise.count_gram(c, jackknife=True)),
}

# Streams that merge floating-point moments (Chan, Golub & LeVeque 1983): the same value
# up to rounding. Bound: 1e-12 relative, a few hundred ulps for these 150 points; the
# code documents about 1e-15 per merge.
MOMENT_STREAMS = {
    "decompose": (lambda: bagwise.decompose_stream(),
                  lambda s, m, y, c, a, b: s.update(m[:, a:b], y[a:b]),
                  lambda m, y, c: bagwise.decompose(m, y)),
    "correlation": (lambda: bagwise.correlation_stream(matrix=True),
                    lambda s, m, y, c, a, b: s.update(m[:, a:b], y[a:b]),
                    lambda m, y, c: bagwise.correlation(m, y, matrix=True)),
    "size_curve": (lambda: bagwise.size_curve_stream(orders=10, rng=2),
                   lambda s, m, y, c, a, b: s.update(m[:, a:b], y[a:b]),
                   lambda m, y, c: bagwise.size_curve(m, y, orders=10, rng=2)),
    "replicate_spread": (lambda: bagwise.replicate_spread_stream(),
                         lambda s, m, y, c, a, b: s.update(m.reshape(3, 4, -1)[:, :, a:b], y[a:b]),
                         lambda m, y, c: bagwise.replicate_spread(m.reshape(3, 4, -1), y)),
    "out_of_bag": (lambda: bagwise.out_of_bag_stream(),
                   lambda s, m, y, c, a, b: s.update(m[:, a:b], c[:, a:b], y[a:b]),
                   lambda m, y, c: bagwise.out_of_bag(m, c, y)),
}


@pytest.mark.parametrize("size", CHUNKS)
@pytest.mark.parametrize("name", sorted(EXACT_STREAMS))
def test_exact_streams_are_identical_for_every_chunk_size(name, size):
    members, y, counts = _members()
    start, update, whole = EXACT_STREAMS[name]
    n = counts.shape[1]
    result = _streamed(start(), n, size,
                       lambda s, a, b: update(s, members, y, counts, a, b))
    _identical(result, whole(members, y, counts), f"{name}, chunks of {size}")


@pytest.mark.parametrize("size", CHUNKS)
@pytest.mark.parametrize("name", sorted(MOMENT_STREAMS))
def test_moment_streams_agree_for_every_chunk_size(name, size):
    members, y, counts = _members()
    start, update, whole = MOMENT_STREAMS[name]
    result = _streamed(start(), len(y), size,
                       lambda s, a, b: update(s, members, y, counts, a, b))
    _close(result, whole(members, y, counts), 1e-12, f"{name}, chunks of {size}")
    # The same chunking twice gives the same bits (no order depends on threads or time).
    again = _streamed(start(), len(y), size,
                      lambda s, a, b: update(s, members, y, counts, a, b))
    _identical(again, result, f"{name}, chunks of {size}, repeated")


@pytest.mark.parametrize("size", CHUNKS)
def test_diversity_stream_is_identical_for_every_chunk_size(size):
    members, y = _labels()
    stream = bagwise.diversity_stream(n_classes=3)
    result = _streamed(stream, len(y), size, lambda s, a, b: s.update(members[:, a:b], y[a:b]))
    _identical(result, bagwise.diversity(members, y, n_classes=3), f"chunks of {size}")


@pytest.mark.parametrize("chunks", [7, 64])
def test_lazy_inputs_agree_with_in_memory_for_any_chunking(chunks):
    da = pytest.importorskip("dask.array")
    members, y, counts = _members()
    lazy = da.from_array(members, chunks=(members.shape[0], chunks))
    lazy_y = da.from_array(y, chunks=chunks)
    _close(bagwise.decompose(lazy, lazy_y), bagwise.decompose(members, y), 1e-12, "decompose")
    lazy_counts = da.from_array(counts, chunks=(counts.shape[0], chunks))
    _identical(bagwise.count_gram(lazy_counts), bagwise.count_gram(counts), "count_gram")
