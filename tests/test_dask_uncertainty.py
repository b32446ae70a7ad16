"""Uncertainty and intervals on lazy inputs: the count Gram from chunks of training rows, and
prediction_variance, spread, CountGram methods, little bags and prediction_interval on dask
and zarr members chunked along points.

The reference of every check is the in-memory path, same function, on the same numbers
(``np.asarray`` of the lazy input): per-point arrays to 1e-12 (relative), Grams, status
arrays, counts and warnings exactly. One module-scoped two-process LocalCluster serves the
tests that ask for it (and, once started, is dask's scheduler for the rest of the module).
"""

from __future__ import annotations

import pickle
import warnings

import numpy as np
import pytest

import bagwise

dask = pytest.importorskip("dask")
da = pytest.importorskip("dask.array")
distributed = pytest.importorskip("dask.distributed")
zarr = pytest.importorskip("zarr")

N_MEMBERS, N_ROWS, N_POINTS, N_CLASSES = 24, 45, 37, 3
#: Uneven chunks of the points, and of the training rows (one-row chunk included).
POINT_CHUNKS = (5, 1, 13, 18)
ROW_CHUNKS = (1, 16, 7, 21)


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(processes=True, n_workers=2, threads_per_worker=1,
                                       dashboard_address=":0")
    with distributed.Client(cluster) as running:
        yield running
    cluster.close()


def _draw(seed=0):
    """Bootstrap counts, members that depend on them (like fitted models), class
    probabilities, training-row predictions and targets."""
    rng = np.random.default_rng(seed)
    counts = bagwise.resample(N_ROWS, N_MEMBERS, rng=seed + 1).counts
    x_train = rng.normal(size=(N_ROWS, N_POINTS))
    members = counts @ x_train / N_ROWS + 0.05 * rng.normal(size=(N_MEMBERS, N_POINTS))
    logits = rng.normal(size=(N_MEMBERS, N_POINTS, N_CLASSES)) + members[:, :, None]
    probabilities = np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)
    y_train = rng.normal(size=N_ROWS)
    train_members = y_train + rng.normal(scale=0.5, size=(N_MEMBERS, N_ROWS))
    labels = rng.integers(0, N_CLASSES, size=N_ROWS)
    train_probabilities = rng.dirichlet(np.ones(N_CLASSES), size=(N_MEMBERS, N_ROWS))
    return dict(counts=counts, members=members, probabilities=probabilities, y_train=y_train,
                train_members=train_members, labels=labels,
                train_probabilities=train_probabilities)


@pytest.fixture(scope="module")
def data():
    return _draw()


def lazy_members(members, chunks=POINT_CHUNKS):
    return da.from_array(members, chunks=(N_MEMBERS, chunks) + members.shape[2:])


def lazy_counts(counts, chunks=ROW_CHUNKS):
    return da.from_array(counts, chunks=(counts.shape[0], chunks))


def as_zarr(array, path, chunks):
    stored = zarr.open_array(store=str(path), mode="w", shape=array.shape, chunks=chunks,
                             dtype=array.dtype)
    stored[...] = array
    return zarr.open_array(store=str(path), mode="r")


def recorded(compute):
    """``compute()``'s result and its BagwiseWarnings (every one recorded)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = compute()
    return result, [w for w in caught if issubclass(w.category, bagwise.BagwiseWarning)]


def assert_same_result(lazy, reference):
    """Every field of a result equal to the in-memory one (in-memory path, same function):
    float arrays to 1e-12 relative, everything else exactly."""
    assert type(lazy) is type(reference)
    for name, expected in vars(reference).items():
        got = vars(lazy)[name]
        if isinstance(expected, np.ndarray) and expected.dtype.kind == "f":
            assert got.shape == expected.shape, name
            scale = float(np.nanmax(np.abs(expected))) if np.isfinite(expected).any() else 0.0
            np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-15 * scale,
                                       equal_nan=True, err_msg=name)
        elif isinstance(expected, np.ndarray):
            np.testing.assert_array_equal(got, expected, err_msg=name)
        elif dataclass_result(expected):
            assert_same_result(got, expected)
        elif isinstance(expected, float) and np.isnan(expected):
            assert np.isnan(got), name
        else:
            assert got == expected, name


def dataclass_result(value):
    return isinstance(value, bagwise.PredictionVariance)


def same_warnings(lazy, reference):
    assert [str(w.message) for w in lazy] == [str(w.message) for w in reference]


# -- the count Gram from chunks of training rows ----------------------------------------------

def streamed(counts, bounds, **options):
    stream = bagwise.count_gram_stream(**options)
    for start, end in bounds:
        stream.update(counts[:, start:end])
    return stream.result()


def test_stream_over_row_chunks_equals_the_whole_gram(data):
    counts = data["counts"]
    uneven = [(0, 1), (1, 17), (17, 24), (24, N_ROWS)]
    single = [(i, i + 1) for i in range(N_ROWS)]
    for jackknife in (False, True):
        whole = bagwise.count_gram(counts, jackknife=jackknife)   # in-memory path, same function
        for bounds in (uneven, single):
            gram = streamed(counts, bounds, jackknife=jackknife)
            assert np.array_equal(gram.gram, whole.gram)
            assert gram.scheme == whole.scheme == "bootstrap"
            # the jackknife's Gram and the rows never out of bag: the stored bytes are equal
            assert gram._gram.to_bytes() == whole._gram.to_bytes()
    # the jackknife built from the stream gives the in-memory jackknife variances
    stream_jk, _ = recorded(lambda: streamed(counts, uneven, jackknife=True).prediction_variance(
        data["members"], method="jackknife"))
    whole_jk, _ = recorded(lambda: bagwise.prediction_variance(data["members"], counts,
                                                               method="jackknife"))
    assert_same_result(stream_jk, whole_jk)


def test_stream_detects_and_checks_the_subsample_scheme():
    subsample = bagwise.resample(30, 8, scheme="subsample", fraction=0.5, rng=3).counts
    bounds = [(0, 4), (4, 5), (5, 30)]
    for scheme in (None, "subsample"):
        whole = bagwise.count_gram(subsample, scheme=scheme)     # in-memory path, same function
        gram = streamed(subsample, bounds, scheme=scheme)
        assert (gram.scheme, gram._gram.subsample_rows) == (whole.scheme, 15) == ("subsample", 15)
        assert np.array_equal(gram.gram, whole.gram)
    # the detection needs every chunk: each half alone would be the same, but bootstrap
    # counts in one chunk make the whole a bootstrap
    mixed = subsample.copy()
    mixed[0, 0], mixed[0, 1] = 2, 0
    assert streamed(mixed, bounds).scheme == bagwise.count_gram(mixed).scheme == "bootstrap"
    with pytest.raises(ValueError, match=r"^`scheme`: 'subsample' needs 0/1"):
        streamed(mixed, bounds, scheme="subsample")


def test_gram_stream_pickles_and_merges_in_any_order(data):
    counts = data["counts"]
    parts = []
    for start, end in [(0, 10), (10, 11), (11, N_ROWS)]:
        part = bagwise.count_gram_stream(jackknife=True).update(counts[:, start:end])
        parts.append(pickle.loads(pickle.dumps(part)))
    forward = bagwise.count_gram_stream(jackknife=True)
    for part in parts:
        forward.merge(pickle.loads(pickle.dumps(part)))
    backward = bagwise.count_gram_stream(jackknife=True)
    for part in reversed(parts):
        backward.merge(part)
    whole = bagwise.count_gram(counts, jackknife=True)          # in-memory path, same function
    assert forward.n_rows == backward.n_rows == N_ROWS
    assert forward.result()._gram.to_bytes() == whole._gram.to_bytes()
    assert backward.result()._gram.to_bytes() == whole._gram.to_bytes()
    # a finished Gram pickles too
    assert pickle.loads(pickle.dumps(forward.result()))._gram.to_bytes() == whole._gram.to_bytes()
    # wider count types give the same state
    wide = bagwise.count_gram_stream(jackknife=True).update(counts.astype(np.uint32))
    assert np.array_equal(wide.result().gram, whole.gram)


def test_gram_stream_bad_input_names_the_argument(data):
    counts = data["counts"]
    with pytest.raises(ValueError, match=r"^`counts`: no chunk"):
        bagwise.count_gram_stream().result()
    with pytest.raises(TypeError, match=r"^`counts`"):
        bagwise.count_gram_stream().update(counts.astype(np.float64))
    with pytest.raises(ValueError, match=r"^`counts`: .*non-negative"):
        bagwise.count_gram_stream().update(-counts.astype(np.int64) - 1)
    stream = bagwise.count_gram_stream().update(counts[:, :5])
    with pytest.raises(ValueError, match=r"^`counts`"):
        stream.update(counts[:-1, 5:])
    assert stream.n_rows == 5                       # the refused chunk changed nothing
    with pytest.raises(ValueError, match=r"^`other`"):
        stream.merge(bagwise.count_gram_stream(jackknife=True))
    with pytest.raises(TypeError, match=r"^`other`"):
        stream.merge(counts)
    with pytest.raises(ValueError, match=r"^`scheme`"):
        bagwise.count_gram_stream(scheme="little_bags")
    with pytest.raises(TypeError, match=r"^`jackknife`"):
        bagwise.count_gram_stream(jackknife="yes")
    empty = counts.copy()
    empty[3] = 0
    with pytest.raises(ValueError, match=r"^`counts`: member 3 has no in-bag row"):
        streamed(empty, [(0, 20), (20, N_ROWS)])


def test_count_gram_of_lazy_counts_on_the_cluster(client, data, tmp_path):
    counts = data["counts"]
    stored = as_zarr(counts, tmp_path / "counts.zarr", chunks=(N_MEMBERS, 8))
    for lazy in (lazy_counts(counts), lazy_counts(counts, chunks=1), stored):
        for jackknife in (False, True):
            whole = bagwise.count_gram(counts, jackknife=jackknife)  # in-memory path, same function
            gram = bagwise.count_gram(lazy, jackknife=jackknife)
            assert np.array_equal(gram.gram, whole.gram)
            assert gram._gram.to_bytes() == whole._gram.to_bytes()
    with pytest.raises(TypeError, match=r"^`counts`"):
        bagwise.count_gram(da.from_array(counts.astype(np.float32)))
    with pytest.raises(ValueError, match=r"^`counts`"):
        bagwise.count_gram(da.from_array(counts[0]))


# -- per-point estimates on chunks of points --------------------------------------------------

@pytest.mark.parametrize("method", ["ij", "jackknife"])
def test_prediction_variance_on_the_cluster(client, data, method):
    members, counts = data["members"], data["counts"]
    reference, expected = recorded(       # in-memory path, same function
        lambda: bagwise.prediction_variance(members, counts, method=method))
    assert len(expected) == 1             # this small ensemble has not-estimable points
    for lazy_c in (counts, lazy_counts(counts)):
        result, caught = recorded(lambda lazy_c=lazy_c: bagwise.prediction_variance(
            lazy_members(members), lazy_c, method=method))
        assert_same_result(result, reference)
        same_warnings(caught, expected)   # once on the client, not once per chunk


def test_one_point_chunks_and_uncorrected(data):
    members, counts = data["members"], data["counts"]
    for corrected in (True, False):
        reference, expected = recorded(   # in-memory path, same function
            lambda corrected=corrected: bagwise.prediction_variance(members, counts, corrected=corrected))
        result, caught = recorded(lambda corrected=corrected: bagwise.prediction_variance(
            lazy_members(members, chunks=1), counts, corrected=corrected))
        assert_same_result(result, reference)
        same_warnings(caught, expected)


def test_probabilities_per_class_on_the_cluster(client, data):
    probabilities, counts = data["probabilities"], data["counts"]
    reference, expected = recorded(lambda: bagwise.prediction_variance(probabilities, counts))
    result, caught = recorded(lambda: bagwise.prediction_variance(
        lazy_members(probabilities), lazy_counts(counts)))
    assert result.variance.shape == (N_POINTS, N_CLASSES) and result.quantity == "class probability"
    assert_same_result(result, reference)   # in-memory path, same function
    same_warnings(caught, expected)
    spread_ref, _ = recorded(lambda: bagwise.spread(probabilities, counts))
    spread_lazy, _ = recorded(lambda: bagwise.spread(lazy_members(probabilities), counts))
    assert_same_result(spread_lazy, spread_ref)


def test_spread_and_count_gram_methods_on_the_cluster(client, data, tmp_path):
    members, counts = data["members"], data["counts"]
    stored = as_zarr(members, tmp_path / "members.zarr", chunks=(N_MEMBERS, 6))
    reference, expected = recorded(lambda: bagwise.spread(members, counts))  # in-memory path
    for lazy in (lazy_members(members), stored):
        result, caught = recorded(lambda lazy=lazy: bagwise.spread(lazy, lazy_counts(counts)))
        assert_same_result(result, reference)
        same_warnings(caught, expected)
    gram = bagwise.count_gram(lazy_counts(counts), jackknife=True)
    for method in ("ij", "jackknife"):
        reference, expected = recorded(lambda method=method: bagwise.count_gram(counts, jackknife=True)
                                       .prediction_variance(members, method=method))
        result, caught = recorded(lambda method=method: gram.prediction_variance(stored, method=method))
        assert_same_result(result, reference)   # in-memory path, same function
        same_warnings(caught, expected)
    result, _ = recorded(lambda: gram.spread(lazy_members(members)))
    reference, _ = recorded(lambda: bagwise.count_gram(counts).spread(members))
    assert_same_result(result, reference)


def test_shared_arguments_are_one_key_for_every_chunk(data, monkeypatch):
    """The Gram (or training side) is one dask key every chunk's task depends on, so it
    travels once per worker; each task gets its own chunk of points, never the whole."""
    from bagwise import _chunked

    seen = []
    original = _chunked.map_points

    def spy(compute, blocks):
        seen.append(blocks)
        return original(compute, blocks)

    monkeypatch.setattr(_chunked, "map_points", spy)
    members, counts = data["members"], data["counts"]
    recorded(lambda: bagwise.prediction_variance(lazy_members(members), counts))
    bagwise.prediction_interval(lazy_members(members), counts, data["train_members"],
                                data["y_train"])
    assert len(seen) == 2
    for blocks in seen:
        assert len(blocks) == len(POINT_CHUNKS)
        keys = {chunk[1].key for chunk in blocks}
        assert len(keys) == 1
        graph = dict(blocks[0][1].__dask_graph__())
        assert len(graph) == 1                 # the value itself, not a task per chunk
        sizes = [dask.compute(chunk[0])[0].shape for chunk in blocks]
        assert sizes == [(N_MEMBERS, size) for size in POINT_CHUNKS]


def test_lazy_members_bad_input_names_the_argument(data):
    members, counts = data["members"], data["counts"]
    gram = bagwise.count_gram(counts)
    with pytest.raises(ValueError, match=r"^`members`: has 23 members"):
        gram.prediction_variance(lazy_members(members)[:-1])
    broken = members.copy()
    broken[2, 30] = np.nan
    with pytest.raises(ValueError, match=r"^`members`"):   # found in its chunk, raised here
        gram.prediction_variance(lazy_members(broken))
    with pytest.raises(ValueError, match=r"^`method`"):
        bagwise.count_gram(lazy_counts(counts)).prediction_variance(lazy_members(members),
                                                                   method="jackknife")


def little_bags_draw():
    draw = bagwise.resample(80, 40, scheme="little_bags", fraction=0.2, group_size=4, rng=5)
    rng = np.random.default_rng(6)
    x = rng.normal(size=(80, N_POINTS))
    members = draw.counts @ x / 16 + 0.1 * rng.normal(size=(40, N_POINTS))
    return members, draw.counts


def test_little_bags_on_the_cluster(client, tmp_path):
    members, counts = little_bags_draw()
    stored = as_zarr(counts, tmp_path / "little.zarr", chunks=(40, 11))
    reference, expected = recorded(lambda: bagwise.prediction_variance(   # in-memory path
        members, counts, method="little_bags", group_size=4))
    for lazy_c in (counts, lazy_counts(counts, chunks=(3, 40, 37)), stored):
        result, caught = recorded(lambda lazy_c=lazy_c: bagwise.prediction_variance(
            da.from_array(members, chunks=(40, POINT_CHUNKS)), lazy_c, method="little_bags",
            group_size=4))
        assert_same_result(result, reference)
        same_warnings(caught, expected)
    # the little-bags checks read lazy counts as they read in-memory ones
    bootstrap = bagwise.resample(80, 40, rng=1).counts
    with pytest.raises(ValueError, match=r"^`counts`: little bags draw each row at most once"):
        bagwise.prediction_variance(members, lazy_counts(bootstrap, chunks=20),
                                    method="little_bags", group_size=4)
    shuffled = counts[np.random.default_rng(0).permutation(40)]
    with pytest.raises(ValueError) as lazy_error:
        bagwise.prediction_variance(members, lazy_counts(shuffled, chunks=20),
                                    method="little_bags", group_size=4)
    with pytest.raises(ValueError) as memory_error:
        bagwise.prediction_variance(members, shuffled, method="little_bags", group_size=4)
    assert str(lazy_error.value) == str(memory_error.value)
    assert str(lazy_error.value).startswith("`counts`: the members of group")
    with pytest.raises(ValueError, match=r"^`group_size`"):
        bagwise.prediction_variance(members, lazy_counts(counts, chunks=20),
                                    method="little_bags", group_size=3)


# -- prediction intervals and class sets -------------------------------------------------------

@pytest.mark.parametrize("method", ["jackknife+", "out_of_bag_residual"])
def test_prediction_interval_on_the_cluster(client, data, tmp_path, method):
    members, counts = data["members"], data["counts"]
    train, y_train = data["train_members"], data["y_train"]
    reference, expected = recorded(lambda: bagwise.prediction_interval(   # in-memory path
        members, counts, train, y_train, method=method))
    stored = as_zarr(train, tmp_path / "train.zarr", chunks=(N_MEMBERS, 10))
    for arguments in [(lazy_members(members), counts, train, y_train),
                      (lazy_members(members, chunks=1), lazy_counts(counts), stored,
                       da.from_array(y_train, chunks=20))]:
        result, caught = recorded(
            lambda arguments=arguments: bagwise.prediction_interval(*arguments, method=method))
        assert_same_result(result, reference)
        same_warnings(caught, expected)


def test_float32_members_and_one_point_members(data):
    members, counts = data["members"], data["counts"]
    train, y_train = data["train_members"], data["y_train"]
    single = members.astype(np.float32)
    # float32 members with float64 training predictions: both read as float64, as in memory
    reference = bagwise.prediction_interval(single, counts, train, y_train)   # in-memory path
    assert_same_result(bagwise.prediction_interval(lazy_members(single), counts, train, y_train),
                       reference)
    swapped = members.astype(">f8")        # big-endian data from a file: read as float64
    reference = bagwise.prediction_interval(swapped, counts, train, y_train)  # in-memory path
    assert_same_result(bagwise.prediction_interval(lazy_members(swapped), counts, train, y_train),
                       reference)
    reference, expected = recorded(lambda: bagwise.prediction_variance(single, counts))
    result, caught = recorded(lambda: bagwise.prediction_variance(lazy_members(single), counts))
    assert_same_result(result, reference)                                 # in-memory path
    same_warnings(caught, expected)
    # a 1-D members array is one point per member, lazy or not
    reference, _ = recorded(lambda: bagwise.prediction_variance(members[:, 4], counts))
    result, _ = recorded(lambda: bagwise.prediction_variance(da.from_array(members[:, 4]), counts))
    assert result.variance.shape == (1,)
    assert_same_result(result, reference)                                 # in-memory path


def test_interval_warnings_once_on_the_client(client, data):
    members, train, y_train = data["members"], data["train_members"], data["y_train"]
    # every member draws rows 0-2 (left out of the calibration), and at level 0.99 the
    # 45 rows are too few: two warnings, each once
    counts = data["counts"].copy()
    counts[:, :3] = 1
    reference, expected = recorded(lambda: bagwise.prediction_interval(   # in-memory path
        members, counts, train, y_train, level=0.99))
    assert len(expected) == 2 and np.isinf(reference.width).all()
    result, caught = recorded(lambda: bagwise.prediction_interval(
        lazy_members(members), lazy_counts(counts), train, y_train, level=0.99))
    assert_same_result(result, reference)
    same_warnings(caught, expected)


@pytest.mark.parametrize("method", ["least_ambiguous", "adaptive"])
def test_prediction_sets_on_the_cluster(client, data, method):
    probabilities, counts = data["probabilities"], data["counts"]
    train, labels = data["train_probabilities"], data["labels"]
    reference, expected = recorded(lambda: bagwise.prediction_interval(   # in-memory path
        probabilities, counts, train, labels, method=method))
    result, caught = recorded(lambda: bagwise.prediction_interval(
        lazy_members(probabilities), lazy_counts(counts), train, labels, method=method))
    assert isinstance(result, bagwise.PredictionSet)
    assert_same_result(result, reference)
    same_warnings(caught, expected)


def test_lazy_interval_bad_input_names_the_argument(data):
    members, counts = data["members"], data["counts"]
    train, y_train = data["train_members"], data["y_train"]
    with pytest.raises(TypeError, match=r"^`members`: expected float32 or float64"):
        bagwise.prediction_interval(lazy_members(members).astype(np.int64), counts, train, y_train)
    with pytest.raises(ValueError, match=r"^`level`"):
        bagwise.prediction_interval(lazy_members(members), counts, train, y_train, level=1.5)
    with pytest.raises(ValueError, match=r"^`train_members`: has 23 members"):
        bagwise.prediction_interval(lazy_members(members), counts, train[:-1], y_train)
    with pytest.raises(ValueError, match=r"^`y_train`"):   # checked on a worker
        bagwise.prediction_interval(lazy_members(members), counts, train,
                                    da.from_array(y_train[:-1]))
    broken = members.copy()
    broken[0, 36] = np.inf
    with pytest.raises(ValueError, match=r"^`members`: contains NaN"):
        bagwise.prediction_interval(lazy_members(broken), counts, train, y_train)
