"""Lazy inputs (dask arrays, zarr arrays, dask Series) give the in-memory result.

Reference for every equality check below: the in-memory path, same function (numpy
inputs), or a single stream fed every point in one pass. Tolerance 1e-12 relative
(the per-point arrays and integer counts compare exactly where the docstrings say so).

Pickle/merge round trips of every stream state live here too: a state pickled mid-stream
and merged must give the one-pass result.

The tests that run on a `LocalCluster` (processes, two workers) come last in the file: the
cluster's client becomes dask's default scheduler while it lives.
"""

from __future__ import annotations

import dataclasses
import pickle
import warnings

import numpy as np
import pytest
from _lazy import record_client_results

import bagwise
from bagwise import _core

dask = pytest.importorskip("dask")
da = pytest.importorskip("dask.array")

M, N, K = 7, 53, 3
UNEVEN = (10, 1, 25, 17)


def _values(seed=0, n=N, m=M):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    members = y + 0.4 * rng.normal(size=n) + rng.normal(size=(m, n))
    return members, y


def _probabilities(seed=1, n=N, m=M, k=K):
    rng = np.random.default_rng(seed)
    members = rng.dirichlet(np.ones(k), size=(m, n))
    return members, rng.integers(0, k, size=n)


def _labels(seed=2, n=N, m=M, k=K):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, k, size=n)
    members = np.where(rng.random((m, n)) < 0.6, y, rng.integers(0, k, size=(m, n)))
    return members, y


def _counts(seed=3, n=N, m=M):
    """In-bag counts where every point has an out-of-bag member (the last member leaves
    out the points every other member drew)."""
    counts = bagwise.resample(n, m, rng=seed).counts.copy()
    counts[-1, (counts != 0).all(axis=0)] = 0
    return counts


KINDS = {"values": _values, "probabilities": _probabilities, "labels": _labels}


def _chunked(array, chunking, axis=1):
    """``array`` as a dask array chunked along ``axis`` by ``chunking``: "uneven", "one"
    (one point a chunk) or "members" (the member axis split too)."""
    chunks = list(array.shape)
    chunks[axis] = {"uneven": UNEVEN, "one": 1, "members": (20, array.shape[axis] - 20)}[chunking]
    if chunking == "members":
        chunks[0] = (3, array.shape[0] - 3) if axis != 0 else chunks[0]
        if axis == 2:  # replicate stacks: split the member axis (1)
            chunks[0], chunks[1] = array.shape[0], (2, array.shape[1] - 2)
    return da.from_array(array, chunks=tuple(chunks))


def _same(lazy, eager, rtol=1e-12):
    """Every field of two results agrees: arrays and floats to ``rtol`` (NaN where NaN),
    everything else exactly."""
    assert type(lazy) is type(eager)
    if dataclasses.is_dataclass(eager):
        pairs = [(f.name, getattr(lazy, f.name), getattr(eager, f.name))
                 for f in dataclasses.fields(eager)]
    else:
        pairs = [("value", lazy, eager)]
    for name, a, b in pairs:
        if isinstance(b, dict):
            assert isinstance(a, dict) and a.keys() == b.keys(), name
            pairs += [(f"{name}[{key!r}]", a[key], b[key]) for key in b]
        elif isinstance(b, (list, tuple)) and not isinstance(b, str):
            a, b = np.asarray(a), np.asarray(b)
            np.testing.assert_allclose(a, b, rtol=rtol, atol=1e-14, equal_nan=True, err_msg=name)
        elif isinstance(b, np.ndarray):
            assert isinstance(a, np.ndarray), name
            assert a.shape == b.shape and a.dtype == b.dtype, name
            if b.dtype.kind == "f":
                np.testing.assert_allclose(a, b, rtol=rtol, atol=1e-14, equal_nan=True,
                                           err_msg=name)
            else:
                np.testing.assert_array_equal(a, b, err_msg=name)
        elif isinstance(b, float):
            assert isinstance(a, float), name
            np.testing.assert_allclose(a, b, rtol=rtol, atol=1e-14, equal_nan=True,
                                       err_msg=name)
        else:
            assert a == b, name


def _quiet(function, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        return function(*args, **kwargs)


# -- statistics of all points ----------------------------------------------------------------

@pytest.mark.parametrize("kind", list(KINDS))
@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
def test_decompose(kind, chunking):
    members, y = KINDS[kind]()
    lazy = bagwise.decompose(_chunked(members, chunking), y)
    eager = bagwise.decompose(members, y)  # reference: in-memory path, same function
    _same(lazy, eager)
    # The per-point losses do not depend on the chunks: bit for bit (in-memory path).
    assert np.array_equal(lazy.ensemble_loss_per_point, eager.ensemble_loss_per_point)


def test_decompose_weights_float32_and_lazy_targets():
    members, y = _values()
    weights = np.linspace(1, 2, M) / np.linspace(1, 2, M).sum()
    members32 = members.astype(np.float32)
    lazy = bagwise.decompose(_chunked(members32, "uneven"), da.from_array(y, chunks=20),
                             member_weights=weights)
    # reference: in-memory path, same function
    _same(lazy, bagwise.decompose(members32, y, member_weights=weights))


@pytest.mark.parametrize("kind", list(KINDS))
@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
def test_size_curve(kind, chunking):
    members, y = KINDS[kind]()
    lazy = _quiet(bagwise.size_curve, _chunked(members, chunking), y, orders=4, rng=5)
    eager = _quiet(bagwise.size_curve, members, y, orders=4, rng=5)  # in-memory path
    _same(lazy, eager)


def test_size_curve_sizes_and_generator_seed():
    members, y = _values()
    lazy = bagwise.size_curve(_chunked(members, "uneven"), y, sizes=[1, 3, 7], orders=3,
                              rng=np.random.default_rng(9))
    eager = bagwise.size_curve(members, y, sizes=[1, 3, 7], orders=3,
                               rng=np.random.default_rng(9))  # in-memory path, same function
    _same(lazy, eager)


@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
@pytest.mark.parametrize("matrix", [False, True])
def test_correlation(chunking, matrix):
    members, y = _values()
    lazy = bagwise.correlation(_chunked(members, chunking), y, matrix=matrix)
    eager = bagwise.correlation(members, y, matrix=matrix)  # in-memory path, same function
    _same(lazy, eager)


def test_correlation_constant_member_probability_class_and_float32():
    members, y = _values()
    members = members.copy()
    members[2] = y + 0.5  # constant residual: left out, with the same warning
    with pytest.warns(bagwise.BagwiseWarning, match="constant residuals"):
        lazy = bagwise.correlation(_chunked(members, "uneven"), y)
    with pytest.warns(bagwise.BagwiseWarning, match="constant residuals"):
        eager = bagwise.correlation(members, y)  # reference: in-memory path, same function
    _same(lazy, eager)
    assert lazy.constant_members.tolist() == [2]  # the member made constant above
    members32 = _values()[0].astype(np.float32)
    _same(bagwise.correlation(_chunked(members32, "one"), y),
          bagwise.correlation(members32, y))  # reference: in-memory path, same function
    # One class of probabilities, as the in-memory docstring suggests.
    p, labels = _probabilities()
    lazy = bagwise.correlation(_chunked(p, "uneven")[:, :, 1], (labels == 1).astype(float))
    # reference: in-memory path, same function
    _same(lazy, bagwise.correlation(p[:, :, 1], (labels == 1).astype(float)))


@pytest.mark.parametrize("kind", ["labels", "probabilities"])
@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
def test_diversity(kind, chunking):
    members, y = KINDS[kind]()
    lazy = _quiet(bagwise.diversity, _chunked(members, chunking), y)
    eager = _quiet(bagwise.diversity, members, y)  # in-memory path, same function
    _same(lazy, eager, rtol=0)  # integer counts: bit for bit


def test_diversity_class_count_from_labels_and_given():
    members, y = _labels(k=4)
    members = np.where(members == 3, 2, members)  # the largest label only in y
    y = y.copy()
    y[7] = 3
    lazy = _quiet(bagwise.diversity, _chunked(members, "uneven"), da.from_array(y, chunks=9))
    _same(lazy, _quiet(bagwise.diversity, members, y), rtol=0)  # in-memory path
    lazy = _quiet(bagwise.diversity, _chunked(members, "uneven"), y, n_classes=6)
    _same(lazy, _quiet(bagwise.diversity, members, y, n_classes=6), rtol=0)  # in-memory path


@pytest.mark.parametrize("kind", list(KINDS))
@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
def test_out_of_bag(kind, chunking):
    members, y = KINDS[kind]()
    counts = _counts()
    lazy = _quiet(bagwise.out_of_bag, _chunked(members, chunking),
                  _chunked(counts, "uneven"), y, sizes=[1, 2, 5])
    eager = _quiet(bagwise.out_of_bag, members, counts, y, sizes=[1, 2, 5])  # in-memory path
    _same(lazy, eager)


def test_out_of_bag_counts_lazy_alone_weights_and_resample():
    members, y = _values()
    draw = bagwise.resample(N, 12, rng=3)
    members = np.vstack([members, members[:5]])
    weights = np.random.default_rng(4).random(N)
    eager = bagwise.out_of_bag(members, draw.counts, y, point_weights=weights,
                               loss="absolute_error")  # in-memory path, same function
    lazy = bagwise.out_of_bag(members, da.from_array(draw.counts, chunks=(12, 13)), y,
                              point_weights=da.from_array(weights, chunks=30),
                              loss="absolute_error")
    _same(lazy, eager)
    _same(bagwise.out_of_bag(_chunked(members, "uneven"), draw, y, point_weights=weights,
                             loss="absolute_error"), eager)


@pytest.mark.parametrize("with_y", [False, True])
@pytest.mark.parametrize("chunking", ["uneven", "one", "members"])
def test_replicate_spread(with_y, chunking):
    rng = np.random.default_rng(6)
    stack = rng.normal(scale=0.6, size=(6, 1, N)) + rng.normal(size=(6, 5, N))
    y = rng.normal(size=N) if with_y else None
    lazy = _quiet(bagwise.replicate_spread, _chunked(stack, chunking, axis=2), y)
    eager = _quiet(bagwise.replicate_spread, stack, y)  # in-memory path, same function
    _same(lazy, eager)
    assert np.array_equal(lazy.between, eager.between)  # per point: bit for bit


@pytest.mark.parametrize("kind", list(KINDS))
def test_aggregate_and_vote_fractions(kind):
    members, _ = KINDS[kind]()
    weights = np.linspace(1, 3, M) / np.linspace(1, 3, M).sum()
    lazy = bagwise.aggregate(_chunked(members, "uneven"), member_weights=weights)
    eager = bagwise.aggregate(members, member_weights=weights)  # in-memory path
    assert lazy.dtype == eager.dtype and np.array_equal(lazy, eager)
    if kind == "labels":
        lazy = bagwise.vote_fractions(_chunked(members, "one"), n_classes=5)
        assert np.array_equal(lazy, bagwise.vote_fractions(members, n_classes=5))  # in-memory


# -- zarr and dask DataFrames ----------------------------------------------------------------

def _zarr(tmp_path, name, array, chunk_points):
    zarr = pytest.importorskip("zarr")
    chunks = list(array.shape)
    chunks[1 if array.ndim < 3 or name != "stack" else 2] = chunk_points
    stored = zarr.open_array(store=str(tmp_path / f"{name}.zarr"), mode="w", shape=array.shape,
                             chunks=tuple(chunks), dtype=array.dtype)
    stored[...] = array
    return stored


def test_zarr_inputs(tmp_path):
    members, y = _values()
    stored = _zarr(tmp_path, "values", members, 12)
    assert bagwise._chunked.is_lazy(stored)
    # reference for each: in-memory path, same function
    _same(bagwise.decompose(stored, y), bagwise.decompose(members, y))
    _same(bagwise.correlation(stored, y), bagwise.correlation(members, y))
    _same(bagwise.size_curve(stored, y, orders=3), bagwise.size_curve(members, y, orders=3))
    counts = _counts()
    _same(bagwise.out_of_bag(stored, _zarr(tmp_path, "counts", counts, 20), y),
          bagwise.out_of_bag(members, counts, y))
    labels, labels_y = _labels()
    _same(_quiet(bagwise.diversity, _zarr(tmp_path, "labels", labels, 12), labels_y),
          _quiet(bagwise.diversity, labels, labels_y), rtol=0)
    stack = np.random.default_rng(7).normal(size=(4, 3, N))
    _same(bagwise.replicate_spread(_zarr(tmp_path, "stack", stack, 12)),
          bagwise.replicate_spread(stack))


def test_dask_series_targets():
    dd = pytest.importorskip("dask.dataframe")
    pd = pytest.importorskip("pandas")
    members, y = _values()
    series = dd.from_pandas(pd.Series(y), npartitions=3)
    # reference for each: in-memory path, same function
    _same(bagwise.decompose(_chunked(members, "uneven"), series), bagwise.decompose(members, y))
    _same(bagwise.correlation(members, series), bagwise.correlation(members, y))
    counts = _counts()
    _same(bagwise.out_of_bag(members, counts, series), bagwise.out_of_bag(members, counts, y))


def test_dask_dataframe_members():
    """A dask DataFrame of member predictions: one row per point, one column per member."""
    dd = pytest.importorskip("dask.dataframe")
    pd = pytest.importorskip("pandas")

    def frame(array, partitions=4):
        return dd.from_pandas(pd.DataFrame(array.T, columns=[f"m{b}" for b in range(len(array))]),
                              npartitions=partitions)

    values, y = _values()
    labels, labels_y = _labels()
    counts = _counts()
    # reference for each: in-memory path, same function
    _same(bagwise.decompose(frame(values), y), bagwise.decompose(values, y))
    _same(bagwise.size_curve(frame(values), y, orders=3),
          bagwise.size_curve(values, y, orders=3))
    _same(bagwise.correlation(frame(values), dd.from_pandas(pd.Series(y), npartitions=2)),
          bagwise.correlation(values, y))
    _same(_quiet(bagwise.diversity, frame(labels), labels_y),
          _quiet(bagwise.diversity, labels, labels_y), rtol=0)
    _same(bagwise.out_of_bag(frame(values), frame(counts, 3), y),
          bagwise.out_of_bag(values, counts, y))
    assert np.array_equal(bagwise.aggregate(frame(labels)), bagwise.aggregate(labels))


# -- the same messages for bad input -----------------------------------------------------------

def _message(function, *args, **kwargs):
    with pytest.raises((ValueError, TypeError)) as caught:
        _quiet(function, *args, **kwargs)
    return caught.type, str(caught.value)


BAD_INPUTS = {
    "nan member": (bagwise.decompose, lambda m, y: (np.where(np.arange(N) == 30, np.nan, m), y)),
    "labels to correlation": (bagwise.correlation,
                              lambda m, y: (_labels()[0], y)),
    "nan target": (bagwise.correlation, lambda m, y: (m, np.where(np.arange(N) == 3, np.nan, y))),
    "label above n_classes": (lambda m, y: bagwise.diversity(m, y, n_classes=2),
                              lambda m, y: _labels()),
    "one replicate": (bagwise.replicate_spread, lambda m, y: (m[None], None)),
    "negative count": (lambda m, y: bagwise.out_of_bag(m, _negative_counts(), y),
                       lambda m, y: (m, y)),
    "nan replicate": (bagwise.replicate_spread,
                      lambda m, y: (np.where(np.arange(N) == 40, np.nan, np.stack([m, m])), y)),
}


def _negative_counts():
    counts = _counts().astype(np.int64)
    counts[2, 30] = -1
    return counts


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_bad_input_gives_the_in_memory_message(case):
    function, make = BAD_INPUTS[case]
    members, y = make(*_values())
    eager = _message(function, members, y)  # reference: in-memory path, same function
    axis = 2 if members.ndim == 3 and "replicate" in case else 1
    lazy = _message(function, _chunked(members, "uneven", axis=axis), y)
    assert lazy == eager  # reference: in-memory path, same function
    assert eager[1].startswith("`")  # the error rule: the message opens with the argument


def test_mismatched_lengths_name_the_argument():
    # The error rule (messages open with the argument in backticks); the lengths are made
    # unequal here, so the argument at fault is known.
    members, y = _values()
    with pytest.raises(ValueError, match="^`y`"):
        bagwise.decompose(_chunked(members, "uneven"), y[:-1])
    with pytest.raises(ValueError, match="^`counts`"):
        bagwise.out_of_bag(_chunked(members, "uneven"), _counts()[:, :-1], y)


# -- pickle and merge round trips of every stream state -----------------------------------------

def _split_feed(start, update, arrays, axis=1):
    """A stream fed in one pass, and the same points fed as three parts: part 1, a
    pickle round trip mid-stream, part 2; part 3 in another stream, pickled, merged."""
    def part(lo, hi):
        return [None if a is None else np.take(a, range(lo, hi), axis=axis if a.ndim > 1 else 0)
                for a in arrays]
    whole = update(start(), *arrays)
    first = update(start(), *part(0, 11))
    first = pickle.loads(pickle.dumps(first))
    first = update(first, *part(11, 30))
    last = pickle.loads(pickle.dumps(update(start(), *part(30, N))))
    merged = pickle.loads(pickle.dumps(first.merge(last)))
    return merged, whole


def _with_counts():
    members, y = _values()
    return members, _counts(), y


STREAMS = {
    "decompose": (lambda: bagwise.decompose_stream(), lambda s, *a: s.update(*a),
                  _probabilities, bagwise.decompose),
    "size_curve": (lambda: bagwise.size_curve_stream(orders=3, rng=2),
                   lambda s, *a: s.update(*a), _values,
                   lambda m, y: bagwise.size_curve(m, y, orders=3, rng=2)),
    "correlation": (lambda: bagwise.correlation_stream(matrix=True),
                    lambda s, *a: s.update(*a), _values,
                    lambda m, y: bagwise.correlation(m, y, matrix=True)),
    "diversity": (lambda: bagwise.diversity_stream(n_classes=K), lambda s, *a: s.update(*a),
                  _labels, bagwise.diversity),
    "out_of_bag": (lambda: bagwise.out_of_bag_stream(), lambda s, *a: s.update(*a),
                   _with_counts, bagwise.out_of_bag),
}


@pytest.mark.parametrize("family", list(STREAMS))
def test_stream_pickles_mid_stream_and_merges(family):
    start, update, data, function = STREAMS[family]
    arrays = list(data())
    merged, whole = _split_feed(start, update, arrays)
    one_pass = _quiet(whole.result)
    _same(_quiet(merged.result), one_pass)  # reference: one stream over every point
    _same(one_pass, _quiet(function, *arrays))  # reference: in-memory path


@pytest.mark.parametrize("with_y", [False, True])
def test_replicate_stream_pickles_mid_stream_and_merges(with_y):
    rng = np.random.default_rng(8)
    stack = rng.normal(size=(4, 3, N))
    y = rng.normal(size=N) if with_y else None
    merged, whole = _split_feed(lambda: bagwise.replicate_spread_stream(),
                                lambda s, m, t: s.update(m, t), [stack, y], axis=2)
    _same(merged.result(), whole.result())  # reference: one stream over every point
    _same(whole.result(), bagwise.replicate_spread(stack, y))  # in-memory path, same function


def _core_states():
    """Every core accumulator: (make, feed(state, lo, hi), finish(state) -> comparable)."""
    values, y = _values()
    labels, labels_y = _labels()
    stack = np.random.default_rng(8).normal(size=(4, 3, N))
    counts = _counts()

    def oob_feed(state, lo, hi):
        part, _, _ = _core.out_of_bag_chunk(values[:, lo:hi], counts[:, lo:hi], y[lo:hi], None,
                                         [1, M], "regression", None, None)
        return part if state is None else state.merge(part)

    def feed(method):
        def run(state, lo, hi):
            method(state, lo, hi)
            return state
        return run

    return {
        "DecompositionAccumulator": (
            lambda: _core.DecompositionAccumulator("squared_error"),
            feed(lambda s, lo, hi: s.update(values[:, lo:hi], y[lo:hi])),
            lambda s: (s.result().ensemble_loss, s.result().gain)),
        "SizeCurveAccumulator": (
            lambda: _core.SizeCurveAccumulator("squared_error", M, [1, 3, M], 3, 1),
            feed(lambda s, lo, hi: s.update(values[:, lo:hi], y[lo:hi])),
            lambda s: (*s.result().curve, s.result().mean_within)),
        "DiversityAccumulator": (
            lambda: _core.DiversityAccumulator(M, K),
            feed(lambda s, lo, hi: s.update(labels[:, lo:hi], labels_y[lo:hi])),
            lambda s: (*s.result().kappa.ravel(), s.result().entropy)),
        "OutOfBagState": (lambda: None, oob_feed,
                          lambda s: tuple(s.losses().squared_error)),
        "CorrelationAccumulator": (
            lambda: _core.CorrelationAccumulator(),
            feed(lambda s, lo, hi: s.update(values[:, lo:hi], y[lo:hi])),
            lambda s: (*s.result().residual_variance, s.result().mean_residual_correlation,
                       *s.matrix().ravel())),
        "ReplicateSpreadAccumulator": (
            lambda: _core.ReplicateSpreadAccumulator(),
            feed(lambda s, lo, hi: s.update(stack[:, :, lo:hi], y[lo:hi])),
            lambda s: (*s.result()[:4], *s.result()[4])),
    }


@pytest.mark.parametrize("name", list(_core_states()))
def test_core_state_pickles_mid_stream_and_merges(name):
    make, feed, finish = _core_states()[name]
    whole = feed(make(), 0, N)
    first = pickle.loads(pickle.dumps(feed(make(), 0, 20)))
    first = feed(first, 20, 41)
    last = pickle.loads(pickle.dumps(feed(make(), 41, N)))
    merged = first.merge(last) or first  # core merges return None or the merged state
    merged = pickle.loads(pickle.dumps(merged))
    # reference: the same state fed every point in one pass
    np.testing.assert_allclose(finish(merged), finish(whole), rtol=1e-12, atol=1e-14)


# -- no chunk comes back to the client --------------------------------------------------------

def test_only_states_come_back(monkeypatch):
    """What the client computes is the merged stream (or per-point results, or a class
    count), never a chunk of the inputs: every ``dask.compute`` the functions call is
    recorded with the pickled size of what it returns, and turning a dask array into numpy
    on the client fails."""
    m, n = 20, 20_000
    members, y = _values(n=n, m=m)
    labels, labels_y = _labels(n=n, m=m)
    returned = record_client_results(monkeypatch)
    lazy = da.from_array(members, chunks=(m, 2_000))
    lazy_labels = da.from_array(labels, chunks=(m, 2_000))
    lazy_y = da.from_array(y, chunks=3_000)
    budget = 100_000  # bytes: far below one chunk of members (20 x 2,000 x 8 = 320,000)
    for run in (lambda: bagwise.correlation(lazy, lazy_y, matrix=True),
                lambda: bagwise.size_curve(lazy, lazy_y, orders=3),
                lambda: _quiet(bagwise.diversity, lazy_labels, labels_y)):
        returned.clear()
        run()
        assert returned and sum(returned) < budget, returned
    # Per-point results: what comes back is O(points), well under the members' size.
    returned.clear()
    bagwise.decompose(lazy, lazy_y)
    assert returned and sum(returned) < 3 * 8 * n + budget < members.nbytes, returned


# -- on a cluster (processes) -------------------------------------------------------------------

@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(processes=True, n_workers=2, threads_per_worker=1,
                                  dashboard_address=":0") as cluster, \
            distributed.Client(cluster) as connected:
        yield connected


def test_cluster_statistics_of_all_points(client, tmp_path):
    values, y = _values()
    labels, labels_y = _labels()
    probabilities, classes = _probabilities()
    counts = _counts()
    stack = np.random.default_rng(6).normal(size=(5, 4, N))
    lazy = _chunked(values, "uneven")
    # reference for each: in-memory path, same function
    _same(bagwise.decompose(_chunked(probabilities, "members"), classes),
          bagwise.decompose(probabilities, classes))
    _same(bagwise.size_curve(lazy, y, orders=3), bagwise.size_curve(values, y, orders=3))
    _same(bagwise.correlation(_zarr(tmp_path, "values", values, 9), y, matrix=True),
          bagwise.correlation(values, y, matrix=True))
    few = slice(0, 12)  # one-point chunks: a task per point, so few points
    _same(_quiet(bagwise.diversity, _chunked(labels[:, few], "one"), labels_y[few]),
          _quiet(bagwise.diversity, labels[:, few], labels_y[few]), rtol=0)
    _same(bagwise.out_of_bag(lazy, _chunked(counts, "members"), y),
          bagwise.out_of_bag(values, counts, y))
    _same(bagwise.replicate_spread(_chunked(stack, "uneven", axis=2), y),
          bagwise.replicate_spread(stack, y))
    assert np.array_equal(bagwise.aggregate(_chunked(labels, "uneven")),
                          bagwise.aggregate(labels))
    assert np.array_equal(bagwise.vote_fractions(_chunked(labels, "uneven")),
                          bagwise.vote_fractions(labels))


def test_cluster_reports_bad_input(client):
    members, y = _values()
    bad = np.where(np.arange(N) == 30, np.nan, members)
    eager = _message(bagwise.correlation, bad, y)  # reference: in-memory path
    assert _message(bagwise.correlation, _chunked(bad, "uneven"), y) == eager
