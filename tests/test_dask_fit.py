"""Fits on a dask.distributed cluster and member predictions at lazy inputs.

The reference of every check is the one-machine answer of the same estimator: the
in-process fit with numpy inputs (``backend="local"``), whose members are checked against
scikit-learn in test_tree.py, test_linear.py and test_neighbors.py. A distributed fit must
reproduce it bit for bit (same in-bag counts, same member predictions), and a lazy
prediction must equal the in-memory one bit for bit. Data: Friedman #1 from
`sklearn.datasets.make_friedman1` (Friedman 1991, eq. 1 of its section 4.3).
"""

import pickle
import warnings

import numpy as np
import pytest

da = pytest.importorskip("dask.array")
dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")

import dask  # noqa: E402
import pandas as pd  # noqa: E402
from sklearn.datasets import make_friedman1  # noqa: E402
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor  # noqa: E402

import bagwise  # noqa: E402
from bagwise._distributed import GROUPS_PER_WORKER  # noqa: E402

N_MEMBERS = 20
THREADS_PER_WORKER = 1
# Per worker; the refusal test below sends a training set above a third of it.
MEMORY_LIMIT = 400 * 2**20


def _data(n_rows=240, seed=0):
    X, y = make_friedman1(n_samples=n_rows, n_features=6, noise=1.0, random_state=seed)
    labels = np.array(["low", "mid", "high"])[np.digitize(y, [12.0, 16.0])]
    return X, y, labels


X, Y, LABELS = _data()
X_TEST = _data(90, seed=1)[0]


def _lazy(values, chunk=70):
    return da.from_array(values, chunks=(chunk,) + values.shape[1:])


# -- without a client (runs before the module's cluster starts) ---------------------------
def test_backend_dask_without_a_client_is_refused():
    with pytest.raises(ValueError, match=r"^`backend`: 'dask' .* none is active"):
        bagwise.BagRegressor("linear", n_members=3, backend="dask").fit(X, Y)


def test_lazy_inputs_without_a_client_fit_in_process():
    # Reference: the in-process fit on the numpy arrays.
    local = bagwise.BagRegressor("tree", n_members=5, random_state=1).fit(X, Y)
    lazy = bagwise.BagRegressor("tree", n_members=5, random_state=1).fit(_lazy(X), _lazy(Y))
    assert np.array_equal(lazy.member_predictions(X_TEST), local.member_predictions(X_TEST))


def test_unknown_backend_is_refused():
    with pytest.raises(ValueError, match=r"^`backend`: expected one of"):
        bagwise.BagRegressor("linear", backend="spark").fit(X, Y)


# -- lazy member predictions -----------------------------------------------------------
@pytest.fixture(scope="module")
def fitted():
    return {
        "tree": bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=1,
                                     split_features=2, backend="local").fit(X, Y),
        "classes": bagwise.BagClassifier("tree", n_members=N_MEMBERS, random_state=1,
                                         backend="local").fit(X, LABELS),
        "wrapped": bagwise.BagClassifier(DecisionTreeClassifier(max_depth=4),
                                         n_members=N_MEMBERS, random_state=1,
                                         backend="local").fit(X, LABELS),
    }


def _members_of(predictor, block):
    return predictor.member_predictions(block)


def _carrying(array, nbytes):
    """Tasks of the (optimised) graph whose pickled form is at least ``nbytes`` long."""
    (optimised,) = dask.optimize(array)
    return sum(len(pickle.dumps(task)) >= nbytes for task in dict(optimised.__dask_graph__()).values())


@pytest.mark.parametrize("name", ["tree", "wrapped"])
def test_without_a_client_the_model_is_one_key_of_the_graph(fitted, name):
    bag = fitted[name]
    lazy_X = da.from_array(X_TEST, chunks=(15, 6))
    size = len(pickle.dumps(bag._predictor(1)))
    assert size > 10 * len(pickle.dumps(X_TEST[:15]))
    members = bag.member_predictions(lazy_X)
    # Six chunks of points, one task carrying the model that all of them depend on;
    # reference: the in-memory call.
    assert _carrying(members, size) == 1
    assert np.array_equal(members.compute(), bag.member_predictions(X_TEST))
    # The wrong variant, the model embedded in every chunk's task, counts six.
    predictor = bag._predictor(1)
    embedded = [dask.delayed(_members_of, pure=True)(predictor, block)
                for block in lazy_X.to_delayed().ravel()]
    embedded = da.concatenate([da.from_delayed(task, shape=(N_MEMBERS, 15), dtype=float)
                               for task in embedded], axis=1)
    assert _carrying(embedded, size) == 6


# -- on the cluster ------------------------------------------------------------------------
@pytest.fixture(scope="module")
def client():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cluster = distributed.LocalCluster(processes=True, n_workers=2,
                                           threads_per_worker=THREADS_PER_WORKER,
                                           dashboard_address=":0", memory_limit=MEMORY_LIMIT)
        client = distributed.Client(cluster)
    yield client
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        client.close()
        cluster.close()


def _group_workers(client, fit):
    """The workers that ran the fit's member groups, checking on the way that there were
    a few groups per worker (not one task per member) and that a lazy training set was
    joined once."""
    with distributed.get_task_stream(client) as stream:
        fit()
    groups = [task["worker"] for task in stream.data if "_fit_" in task["key"]]
    assert len(groups) in (2 * THREADS_PER_WORKER, 2 * GROUPS_PER_WORKER)
    assert sum("_concat_" in task["key"] for task in stream.data) <= 1
    return set(groups)


def _same_members(local, remote, X_points):
    assert np.array_equal(remote.in_bag_, local.in_bag_)
    assert np.array_equal(remote.member_predictions(X_points), local.member_predictions(X_points))


@pytest.mark.parametrize(
    "estimator, settings",
    [
        (bagwise.BagRegressor, {"learner": "tree", "split_features": 2}),
        (bagwise.BagRegressor, {"learner": "tree", "splitter": "histogram", "max_depth": 4}),
        (bagwise.BagRegressor, {"learner": "linear", "penalty": 0.5}),
        (bagwise.BagRegressor, {"learner": "neighbors", "neighbors": 4}),
        (bagwise.BagClassifier, {"learner": "tree", "split_features": 3}),
        (bagwise.BagClassifier, {"learner": "neighbors", "neighbors": 4}),
    ],
)
def test_distributed_fit_equals_the_one_machine_fit(client, estimator, settings):
    y = LABELS if estimator is bagwise.BagClassifier else Y
    local = estimator(n_members=N_MEMBERS, random_state=7, backend="local", **settings).fit(X, y)
    remote = estimator(n_members=N_MEMBERS, random_state=7, **settings)
    workers = _group_workers(client, lambda: remote.fit(_lazy(X), _lazy(y)))
    # Reference: the in-process fit (same seed); both workers fitted a group.
    assert len(workers) == 2
    _same_members(local, remote, X_TEST)
    assert np.array_equal(remote.predict(X_TEST), local.predict(X_TEST))
    if settings["learner"] == "tree":
        assert remote._model.node_counts == local._model.node_counts
    # The training rows stay lazy on the bag; out of bag they are computed here.
    assert np.array_equal(remote.out_of_bag_predictions(), local.out_of_bag_predictions(),
                          equal_nan=True)


def test_another_seed_gives_other_members(client):
    # The wrong variant of the check above: a distributed fit must not match any seed.
    local = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=7,
                                 split_features=2, backend="local").fit(X, Y)
    other = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=8,
                                 split_features=2).fit(_lazy(X), _lazy(Y))
    assert not np.array_equal(other.member_predictions(X_TEST), local.member_predictions(X_TEST))


def test_in_memory_inputs_with_backend_dask(client):
    # Reference: the in-process fit; numpy inputs are scattered to the workers.
    local = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=3,
                                 split_features=3, backend="local").fit(X, Y)
    remote = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=3,
                                  split_features=3, backend="dask")
    assert len(_group_workers(client, lambda: remote.fit(X, Y))) == 2
    _same_members(local, remote, X_TEST)


def test_dask_dataframe_training_rows(client):
    # Reference: the in-process fit on the pandas frame (same column names).
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(X.shape[1])])
    lazy_frame = dd.from_pandas(frame, npartitions=3)
    local = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=5,
                                 backend="local").fit(frame, Y)
    remote = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=5).fit(
        lazy_frame, dd.from_pandas(pd.Series(Y), npartitions=3))
    assert list(remote.feature_names_in_) == list(frame.columns)
    test_frame = pd.DataFrame(X_TEST, columns=frame.columns)
    _same_members(local, remote, test_frame)


def test_wrapped_estimator_on_lazy_inputs(client):
    # Reference: the in-process fit of the wrapped scikit-learn tree; max_features=2 makes
    # every member use its own random_state.
    template = DecisionTreeRegressor(max_features=2, min_samples_leaf=2)
    local = bagwise.BagRegressor(template, n_members=N_MEMBERS, random_state=2,
                                 backend="local").fit(X, Y)
    remote = bagwise.BagRegressor(template, n_members=N_MEMBERS, random_state=2)
    assert len(_group_workers(client, lambda: remote.fit(_lazy(X), _lazy(Y)))) == 2
    _same_members(local, remote, X_TEST)
    assert [m.tree_.node_count for m in remote.members_] == [
        m.tree_.node_count for m in local.members_]


def test_wrapped_classifier_under_joblib_dask_backend(client):
    import joblib

    # Reference: the in-process fit of the wrapped scikit-learn classifier.
    template = DecisionTreeClassifier(max_features=3)
    local = bagwise.BagClassifier(template, n_members=N_MEMBERS, random_state=4,
                                  backend="local").fit(X, LABELS)
    remote = bagwise.BagClassifier(template, n_members=N_MEMBERS, random_state=4)
    with joblib.parallel_backend("dask"):
        workers = _group_workers(client, lambda: remote.fit(X, LABELS))
    assert len(workers) == 2
    _same_members(local, remote, X_TEST)


def test_progress_counts_every_member(client):
    calls = []
    bagwise.BagRegressor("linear", n_members=N_MEMBERS, random_state=1,
                         progress=lambda done, total: calls.append((done, total))).fit(
        _lazy(X), _lazy(Y))
    assert calls[-1] == (N_MEMBERS, N_MEMBERS)
    assert [done for done, _ in calls] == sorted(done for done, _ in calls)


def test_a_training_set_above_the_worker_memory_is_refused(client):
    # A third of the 400 MiB limit is about 133 MiB; these rows take 137 MiB.
    rows = np.zeros((2_000_000, 9))
    with pytest.raises(ValueError, match=r"^`X`: the training rows take 137\.3 MiB .* "
                                         r"memory limit is 400\.0 MiB"):
        bagwise.BagRegressor("linear", n_members=2, backend="dask").fit(rows, rows[:, 0])


def test_errors_on_the_workers_reach_the_caller(client):
    bad = X.copy()
    bad[5, 1] = np.nan
    with pytest.raises(ValueError, match=r"^`X`: contains NaN"):
        bagwise.BagRegressor("tree", n_members=4).fit(_lazy(bad), _lazy(Y))


@pytest.mark.parametrize("name", ["tree", "classes", "wrapped"])
def test_lazy_member_predictions_equal_in_memory(client, fitted, name):
    bag = fitted[name]
    # Uneven chunks with a one-point chunk; reference: the in-memory call.
    lazy_X = da.from_array(X_TEST, chunks=((40, 1, 49), (3, 3)))
    members = bag.member_predictions(lazy_X)
    assert isinstance(members, da.Array)
    assert members.chunks[:2] == ((N_MEMBERS,), (40, 1, 49))
    assert np.array_equal(members.compute(), bag.member_predictions(X_TEST))
    assert np.array_equal(bag.predict(lazy_X).compute(), bag.predict(X_TEST))
    if name != "tree":
        assert np.array_equal(bag.predict_proba(lazy_X).compute(), bag.predict_proba(X_TEST))


def test_lazy_member_predictions_of_a_dask_dataframe(client, fitted):
    frame = dd.from_pandas(pd.DataFrame(X_TEST), npartitions=4)
    for bag in fitted.values():
        members = bag.member_predictions(frame)
        # Reference: the in-memory call on the same rows.
        assert np.array_equal(members.compute(), bag.member_predictions(X_TEST))
        assert len(members.chunks[1]) == 4


@pytest.mark.parametrize("name", ["tree", "wrapped"])
def test_the_model_is_sent_once_to_each_worker(client, fitted, name):
    bag = fitted[name]
    lazy_X = da.from_array(X_TEST, chunks=(15, 6))
    members = bag.member_predictions(lazy_X)
    # Reference: the in-memory call.
    assert np.array_equal(members.compute(), bag.member_predictions(X_TEST))
    # The model is scattered once: no task of the graph carries it, all six chunks depend
    # on its one key, which lives on the workers (one copy each at most; dask's active
    # memory manager may drop an idle extra copy, fetched again between workers).
    (model,) = bag._scattered.values()
    assert _carrying(members, len(pickle.dumps(bag._predictor(1)))) == 0
    graph = dict(members.__dask_graph__())
    assert sum(model.key in getattr(task, "dependencies", ()) for task in graph.values()) == 6
    assert 1 <= len(client.who_has([model])[model.key]) <= 2
    # A later call sends nothing again.
    bag.predict(lazy_X).compute()
    assert bag._scattered[client.id] is model
    # A bag pickles without it.
    assert "_scattered" not in pickle.loads(pickle.dumps(bag)).__dict__
