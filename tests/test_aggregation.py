"""Tests of `bagwise.aggregation` against independent references (numpy, scikit-learn,
published identities); the source of each check is named beside it."""

from __future__ import annotations

import numpy as np
import pytest
from _members_data import L, P, T, _with, labels, numpy_votes, probabilities, regression

import bagwise


def test_mean_and_soft_vote_match_numpy_average():
    t, _ = regression(members=9, n=5000)
    w = np.random.default_rng(5).dirichlet(np.ones(9))
    # numpy.average over the member axis
    np.testing.assert_allclose(bagwise.aggregate(t), t.mean(axis=0), rtol=1e-13)
    np.testing.assert_allclose(bagwise.aggregate(t, member_weights=w),
                               np.average(t, axis=0, weights=w),
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
    np.testing.assert_array_equal(bagwise.aggregate(t, member_weights=w), wvote)
    np.testing.assert_allclose(bagwise.vote_fractions(t, member_weights=w), wfrac, rtol=1e-12)
    # n_classes widens the fractions; other integer dtypes are accepted
    assert bagwise.vote_fractions(t.astype(np.int16), n_classes=7).shape == (4000, 7)


def test_core_errors_name_the_argument():
    # The compiled layer validates too, for callers that bypass the Python wrapper.
    core = bagwise._core
    with pytest.raises(ValueError, match="`members`"):
        core.mean_prediction(np.array([[1.0, np.nan]]))
    with pytest.raises(ValueError, match="`member_weights`"):
        core.mean_prediction(np.ones((2, 3)), np.array([0.2, 0.2]))
    with pytest.raises(TypeError, match="`members`"):
        core.mean_prediction(np.ones((2, 3), dtype=np.int32))
    with pytest.raises(ValueError, match="`members`"):
        core.majority_vote(np.array([[0, 4]]), 3)


BAD = [
    (bagwise.aggregate, (_with(L, (1, 1), 7),), {"n_classes": 3}, "n_classes", ValueError),
    (bagwise.aggregate, (L,), {"n_classes": 0}, "n_classes", ValueError),
    (bagwise.aggregate, (_with(L, (0, 0), 10**7),), {}, "members", ValueError),
    (bagwise.aggregate, (P,), {"n_classes": 5}, "n_classes", ValueError),
    (bagwise.aggregate, (_with(T, (0, 0), np.nan),), {}, "members", ValueError),
    (bagwise.aggregate, ([["a", "b"]],), {}, "members", TypeError),
    (bagwise.vote_fractions, (T,), {}, "members", TypeError),
]


@pytest.mark.parametrize(("fn", "args", "kwargs", "argument", "error"), BAD)
def test_bad_input_names_the_argument(fn, args, kwargs, argument, error):
    with pytest.raises(error, match=f"`{argument}`"):
        fn(*args, **kwargs)
