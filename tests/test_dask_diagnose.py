"""`diagnose` and a fitted bag's `diagnose` on lazy inputs: the same report as in memory,
with every section computed where the chunks live.

Reference throughout: the in-memory path of the same function on the same arrays (itself
checked against independent references in tests/test_diagnosis.py). Figures agree to 1e-12
relative; a section's per-point arrays are compared where they exist.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from _lazy import record_client_results

import bagwise

dask = pytest.importorskip("dask")
da = pytest.importorskip("dask.array")
distributed = pytest.importorskip("dask.distributed")

N_MEMBERS = 40


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(processes=True, n_workers=2, threads_per_worker=1,
                                       dashboard_address=":0")
    with distributed.Client(cluster) as connected:
        yield connected
    cluster.close()


def _fitted(task="regression"):
    rng = np.random.default_rng(3)
    X = rng.normal(size=(700, 4))
    if task == "regression":
        y = X[:, 0] - X[:, 1] ** 2 + rng.normal(size=700)
        bag = bagwise.BagRegressor("tree", n_members=N_MEMBERS, random_state=0)
    else:
        y = (X[:, 0] + rng.normal(size=700) > 0).astype(np.int64) + (X[:, 1] > 1)
        bag = bagwise.BagClassifier("tree", n_members=N_MEMBERS, random_state=0)
    return bag.fit(X[:300], y[:300]), X, y


def _arrays(task="regression"):
    bag, X, y = _fitted(task)
    if task == "regression":
        test, train = bag.member_predictions(X[300:]), bag.member_predictions(X[:300])
    else:
        test, train = bag.member_predictions(X[300:]), bag.member_predictions(X[:300])
    return test, y[300:], bag.in_bag_, train, y[:300]


def _lazy(array, point_chunks):
    chunks = (array.shape[0], point_chunks) + array.shape[2:]
    return da.from_array(array, chunks=chunks)


def _quiet(run, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        return run(*args, **kwargs)


def _assert_same(lazy, memory):
    """Every number of every section's summary, and the per-point arrays of the sections
    that have them."""
    assert sorted(lazy.summary()) == sorted(memory.summary())
    for section, expected in memory.summary().items():
        got = lazy.summary()[section]
        if not isinstance(expected, dict):
            assert got == expected, section
            continue
        for key, value in expected.items():
            if isinstance(value, float) and np.isfinite(value):
                np.testing.assert_allclose(got[key], value, rtol=1e-12, atol=1e-14,
                                           err_msg=f"{section}.{key}")
            else:
                assert got[key] == value or (got[key] != got[key] and value != value), key
    for section, field in (("uncertainty", "variance"), ("spread", "between"),
                           ("intervals", "lower"), ("intervals", "upper"), ("intervals", "sets")):
        if getattr(getattr(memory, section), field, None) is not None:
            np.testing.assert_allclose(getattr(getattr(lazy, section), field),
                                       getattr(getattr(memory, section), field), rtol=1e-12,
                                       atol=1e-15, err_msg=f"{section}.{field}")
    assert lazy.readings() == memory.readings()


@pytest.mark.parametrize("point_chunks", [97, 1])
def test_diagnose_of_lazy_members_and_counts(point_chunks):
    test, y, counts, train, y_train = _arrays()
    memory = _quiet(bagwise.diagnose, test, y, counts=counts, train_members=train,
                    y_train=y_train)
    lazy = _quiet(bagwise.diagnose, _lazy(test, point_chunks), y,
                  counts=_lazy(counts, 77), train_members=_lazy(train, 61), y_train=y_train)
    _assert_same(lazy, memory)


def test_diagnose_of_lazy_probabilities():
    test, y, counts, train, y_train = _arrays("classification")
    memory = _quiet(bagwise.diagnose, test, y, counts=counts, train_members=train,
                    y_train=y_train)
    lazy = _quiet(bagwise.diagnose, _lazy(test, 150), da.from_array(y, chunks=100),
                  counts=counts, train_members=_lazy(train, 120), y_train=y_train)
    _assert_same(lazy, memory)


def test_diagnose_on_a_cluster(client):
    test, y, counts, train, y_train = _arrays()
    memory = _quiet(bagwise.diagnose, test, y, counts=counts, train_members=train,
                    y_train=y_train)
    lazy = _quiet(bagwise.diagnose, _lazy(test, 130), y, counts=_lazy(counts, 100),
                  train_members=_lazy(train, 100), y_train=y_train)
    _assert_same(lazy, memory)


def test_fitted_bag_diagnoses_lazy_points(client):
    bag, X, y = _fitted()
    memory = _quiet(bag.diagnose, X[300:], y[300:])
    lazy = _quiet(bag.diagnose, da.from_array(X[300:], chunks=(90, 4)), y[300:])
    _assert_same(lazy, memory)


def test_diagnose_gathers_no_chunk(monkeypatch):
    """What comes back to the client is states and per-point results, never a chunk of the
    members: turning a dask array into numpy on the client fails, and no single compute
    returns as much as one chunk of members (40 × 200 × 8 = 64,000 bytes) plus the
    per-point results of all 400 points (a handful of float64 arrays). The member order is
    the one section that gathers members: a seeded sample of at most ``MAX_POINTS`` points,
    100 here."""
    from bagwise.sections import ordering

    monkeypatch.setattr(ordering, "MAX_POINTS", 100)
    test, y, counts, train, y_train = _arrays()
    lazy_test = _lazy(test, 200)
    returned = record_client_results(monkeypatch)
    _quiet(bagwise.diagnose, lazy_test, y, counts=_lazy(counts, 150),
           train_members=_lazy(train, 150), y_train=y_train)
    assert returned
    per_point_results = 8 * 8 * len(y)
    assert max(returned) < per_point_results + 40 * 200 * 8


def test_lazy_diagnose_refuses_what_memory_refuses():
    test, y, counts, _, _ = _arrays()
    with pytest.raises(ValueError, match="^`counts`"):
        bagwise.diagnose(_lazy(test, 100), y, counts=_lazy(counts[:-1], 100))
    with pytest.raises(TypeError, match="^`counts`"):
        bagwise.diagnose(_lazy(test, 100), y, counts=_lazy(counts.astype(float), 100))
    with pytest.raises(ValueError, match="^`members`"):
        bagwise.diagnose(_lazy(test[:1], 100), y)
    with pytest.raises(ValueError, match="^`y`"):
        bagwise.diagnose(_lazy(test, 100), y[:-1])
