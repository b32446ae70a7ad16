"""Counts that are not counts are refused, in one place (`bagwise._members.in_bag_counts`),
by every function that takes ``counts``: drawn row indices, boolean masks, transposed
arrays and floats each get a message naming `counts`, saying what the array looks like and
how to convert it; legitimate counts of every scheme pass."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import sklearn.ensemble
import sklearn.tree

import bagwise
from bagwise._members import CONVERT_INDICES, INDEX_DISPERSION, INDEX_MEAN, in_bag_counts

N_ROWS, N_MEMBERS = 60, 25


def bagging_fit(**options):
    """A scikit-learn bagging fit on N_ROWS rows: its drawn row indices
    (``estimators_samples_``) are what is often passed by mistake."""
    rng = np.random.default_rng(3)
    X = rng.normal(size=(N_ROWS, 3))
    y = X[:, 0] + rng.normal(size=N_ROWS)
    model = sklearn.ensemble.BaggingRegressor(sklearn.tree.DecisionTreeRegressor(),
                                              n_estimators=N_MEMBERS, random_state=0,
                                              **options).fit(X, y)
    return model


def good_inputs():
    """Members (values) on the training rows, their counts and targets."""
    rng = np.random.default_rng(5)
    counts = bagwise.resample(N_ROWS, N_MEMBERS, rng=1).counts
    y = rng.normal(size=N_ROWS)
    members = y + counts @ rng.normal(size=(N_ROWS, N_ROWS)) / N_ROWS
    return members, counts, y


def indices():
    return np.stack(bagging_fit().estimators_samples_)


def mask(counts):
    return counts > 0


# Every function that takes counts, called with `counts` replaced.
CALLERS = {
    "out_of_bag": lambda m, c, y: bagwise.out_of_bag(m, c, y),
    "out_of_bag_stream": lambda m, c, y: bagwise.out_of_bag_stream().update(m, c, y),
    "prediction_variance": lambda m, c, y: bagwise.prediction_variance(m, c),
    "spread": lambda m, c, y: bagwise.spread(m, c),
    "count_gram": lambda m, c, y: bagwise.count_gram(c),
    "prediction_interval": lambda m, c, y: bagwise.prediction_interval(m, c, m, y),
    "diagnose": lambda m, c, y: bagwise.diagnose(m, y, counts=c),
    "diagnose with train_members": lambda m, c, y: bagwise.diagnose(
        m, y, counts=c, train_members=m, y_train=y),
}


def quietly(call, *args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        return call(*args)


@pytest.mark.parametrize("caller", list(CALLERS))
def test_row_indices_are_refused_with_the_conversion(caller):
    members, _, y = good_inputs()
    drawn = indices()
    assert drawn.shape == (N_MEMBERS, N_ROWS)   # the shape of counts: only the values tell
    with pytest.raises(ValueError, match=r"^`counts`: looks like drawn row indices") as error:
        quietly(CALLERS[caller], members, drawn, y)
    assert CONVERT_INDICES in str(error.value)
    assert f"0..{N_ROWS - 1}" in str(error.value)   # what the array looks like
    # The conversion the message gives turns them into counts every function takes.
    converted = np.stack([np.bincount(idx, minlength=N_ROWS) for idx in drawn])
    quietly(CALLERS[caller], members, converted, y)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.uint64])
@pytest.mark.parametrize("caller", ["out_of_bag", "out_of_bag_stream"])
def test_unsigned_row_indices_are_refused_after_the_pass_that_sums_them(caller, dtype):
    # The out-of-bag pass sums unsigned counts as it reads them, and the check for indices
    # runs on that sum after it: the refusal must be the one made up front elsewhere.
    members, _, y = good_inputs()
    drawn = indices().astype(dtype)
    with pytest.raises(ValueError) as up_front:
        in_bag_counts(drawn)
    with pytest.raises(ValueError, match=r"^`counts`: looks like drawn row indices") as error:
        quietly(CALLERS[caller], members, drawn, y)
    assert str(error.value) == str(up_front.value)


@pytest.mark.parametrize("caller", list(CALLERS))
def test_boolean_masks_are_refused_with_the_conversion(caller):
    members, counts, y = good_inputs()
    with pytest.raises(TypeError, match=r"^`counts`: is a boolean mask") as error:
        quietly(CALLERS[caller], members, mask(counts), y)
    assert "astype(np.int64)" in str(error.value) and "np.bincount" in str(error.value)


@pytest.mark.parametrize("caller", list(CALLERS))
def test_transposed_counts_are_refused(caller):
    members, counts, y = good_inputs()
    with pytest.raises(ValueError, match=r"^`counts`: .*looks transposed") as error:
        quietly(CALLERS[caller], members, counts.T, y)
    assert "`counts.T`" in str(error.value)


@pytest.mark.parametrize("caller", list(CALLERS))
def test_float_counts_are_refused_with_the_conversion(caller):
    members, counts, y = good_inputs()
    with pytest.raises(TypeError, match=r"^`counts`: in-bag counts must be integers") as error:
        quietly(CALLERS[caller], members, counts.astype(np.float64), y)
    assert "whole numbers: convert with `counts.astype(np.int64)`" in str(error.value)
    weights = bagwise.resample(N_ROWS, N_MEMBERS, scheme="bayesian", rng=0).row_weights
    with pytest.raises(TypeError, match=r"^`counts`: .*not whole numbers.*weights"):
        quietly(CALLERS[caller], members, weights, y)


@pytest.mark.parametrize("caller", ["out_of_bag", "prediction_interval", "diagnose"])
def test_a_shape_checked_against_members_names_members(caller):
    members, counts, y = good_inputs()
    with pytest.raises(ValueError, match=r"^`counts`: has shape \(24, 60\) but `members` has 25"):
        quietly(CALLERS[caller], members, counts[:-1], y)


@pytest.mark.parametrize("caller", ["out_of_bag", "prediction_interval",
                                    "diagnose with train_members"])
def test_a_shape_checked_against_training_rows_names_the_argument(caller):
    members, counts, y = good_inputs()
    # out_of_bag's members are the training rows; prediction_interval and diagnose read
    # them from train_members.
    source = "members" if caller == "out_of_bag" else "train_members"
    with pytest.raises(ValueError, match=rf"^`counts`: has shape \(25, 59\) but `{source}` "
                                         "has 60 training rows"):
        quietly(CALLERS[caller], members, counts[:, :-1], y)


def test_negative_counts_are_refused_at_their_place():
    counts = bagwise.resample(N_ROWS, N_MEMBERS, rng=0).counts.astype(np.int32)
    counts[3, 7] = -2
    with pytest.raises(ValueError, match=r"^`counts`: .*non-negative, got -2 \(member 3, row 7\)"):
        in_bag_counts(counts)


def test_ragged_index_lists_and_other_dtypes_are_refused():
    model = bagging_fit(bootstrap=False, max_samples=0.5)
    ragged = [idx[: 20 + m] for m, idx in enumerate(model.estimators_samples_[:4])]
    with pytest.raises(TypeError, match=r"^`counts`: got a list of 4 arrays of different "
                                        r"lengths \(20\.\.23\): drawn row indices") as error:
        in_bag_counts(ragged)
    assert CONVERT_INDICES in str(error.value)
    with pytest.raises(TypeError, match=r"^`counts`: expected integer in-bag counts"):
        in_bag_counts(np.array([["1", "0"], ["0", "1"]]))
    with pytest.raises(ValueError, match=r"^`counts`: expected shape \(n_members, n_rows\).*"
                                         r"counts\[None, :\]"):
        in_bag_counts(np.ones(5, dtype=np.int64))
    with pytest.raises(ValueError, match=r"^`counts`: is empty"):
        in_bag_counts(np.zeros((3, 0), dtype=np.int64))


def test_permuted_row_indices_are_refused():
    # scikit-learn's bagging with bootstrap=False and every row: each member's indices are a
    # permutation of 0..n-1, so every row sums to the same total.
    drawn = np.stack(bagging_fit(bootstrap=False).estimators_samples_)
    assert np.all(np.sort(drawn, axis=1) == np.arange(N_ROWS))
    with pytest.raises(ValueError, match=r"^`counts`: looks like drawn row indices"):
        in_bag_counts(drawn)


@pytest.mark.parametrize("n_rows", [13, 40, 1000])
def test_index_arrays_above_twelve_rows_are_caught(n_rows):
    # Uniform indices on 0..n-1 have mean (n-1)/2 and variance (n^2-1)/12, (n+1)/6 times the
    # mean (the discrete uniform distribution, common practice): above INDEX_DISPERSION and
    # the mean above INDEX_MEAN from 13 rows on.
    assert (n_rows - 1) / 2 > INDEX_MEAN and (n_rows + 1) / 6 > INDEX_DISPERSION
    drawn = np.random.default_rng(n_rows).integers(0, n_rows, size=(30, n_rows))
    with pytest.raises(ValueError, match="looks like drawn row indices"):
        in_bag_counts(drawn)


# -- legitimate counts pass ---------------------------------------------------------------


def little_bags(n_rows=60, groups=5, per_group=4, rng=0):
    """0/1 counts of members in groups: each group draws a half of the rows, each of its
    members a half of that half without replacement."""
    rng = np.random.default_rng(rng)
    counts = np.zeros((groups * per_group, n_rows), dtype=np.int64)
    for g in range(groups):
        half = rng.choice(n_rows, n_rows // 2, replace=False)
        for m in range(per_group):
            counts[g * per_group + m, rng.choice(half, n_rows // 4, replace=False)] = 1
    return counts


def legitimate():
    n = N_ROWS
    variety = np.arange(n) % 3
    vineyard = np.repeat(np.arange(12), 5)
    uneven = np.r_[np.zeros(30, int), np.arange(30) // 3 + 1]   # one group of 30, ten of 3
    rows = {
        "bootstrap": bagwise.resample(n, N_MEMBERS, rng=0).counts,
        "bootstrap fraction 0.5": bagwise.resample(n, N_MEMBERS, fraction=0.5, rng=0).counts,
        "bootstrap fraction 1.7": bagwise.resample(n, N_MEMBERS, fraction=1.7, rng=0).counts,
        "bootstrap fraction 6": bagwise.resample(n, N_MEMBERS, fraction=6.0, rng=0).counts,
        "stratified": bagwise.resample(n, N_MEMBERS, strata=variety, rng=0).counts,
        "grouped": bagwise.resample(n, N_MEMBERS, groups=vineyard, rng=0).counts,
        "grouped, uneven groups": bagwise.resample(n, N_MEMBERS, groups=uneven, rng=0).counts,
        "blocks": bagwise.resample(n, N_MEMBERS, block_length=7, rng=0).counts,
        "subsample uint8": bagwise.resample(n, N_MEMBERS, scheme="subsample", fraction=0.5,
                                            rng=0).counts,
        "subsample int64": bagwise.resample(n, N_MEMBERS, scheme="subsample", fraction=0.5,
                                            rng=0).counts.astype(np.int64),
        "little bags": little_bags(),
        "scikit-learn subsample": np.stack([
            np.bincount(idx, minlength=n)
            for idx in bagging_fit(bootstrap=False, max_samples=0.5).estimators_samples_]),
        "big-endian": bagwise.resample(n, N_MEMBERS, rng=0).counts.astype(">i4"),
    }
    return rows


def test_two_grouped_members_that_look_transposed_by_chance_pass():
    # Groups {0} and {1, 2, 3}: the first member drew group 0 twice, the second the other
    # group twice. Every column sums to 2, the number of members, as in transposed
    # bootstrap counts; with two members that is chance, and the counts pass.
    counts = np.array([[2, 0, 0, 0], [0, 2, 2, 2]], dtype=np.uint8)
    assert np.array_equal(in_bag_counts(counts), counts)
    bagwise.count_gram(counts)


LEGITIMATE = legitimate()


@pytest.mark.parametrize("name", list(LEGITIMATE))
def test_legitimate_counts_pass_every_function(name):
    counts = LEGITIMATE[name]
    read = in_bag_counts(counts)
    assert np.array_equal(read, counts) and read.dtype.isnative
    rng = np.random.default_rng(1)
    y = rng.normal(size=counts.shape[1])
    members = y + counts @ rng.normal(size=(counts.shape[1], counts.shape[1])) / counts.shape[1]
    members[:, 0] += rng.normal(size=counts.shape[0])   # no constant point
    for caller in ("out_of_bag", "prediction_variance", "count_gram", "diagnose"):
        quietly(CALLERS[caller], members, counts, y)


@pytest.mark.parametrize("name", ["bootstrap fraction 0.5", "grouped, uneven groups",
                                  "little bags"])
def test_chunks_of_legitimate_counts_pass_a_stream(name):
    counts = LEGITIMATE[name]
    rng = np.random.default_rng(2)
    y = rng.normal(size=counts.shape[1])
    members = y + rng.normal(size=counts.shape)
    stream = bagwise.out_of_bag_stream()
    for start in range(0, counts.shape[1], 7):   # chunks of 7 points, the last one shorter
        part = slice(start, start + 7)
        quietly(stream.update, members[:, part], counts[:, part], y[part])
    whole = quietly(bagwise.out_of_bag, members, counts, y)
    assert np.allclose(stream.result().prediction, whole.prediction, equal_nan=True)


def test_a_resample_passes_as_its_counts_and_bayesian_weights_are_refused():
    draw = bagwise.resample(N_ROWS, N_MEMBERS, rng=0)
    assert in_bag_counts(draw) is draw.counts
    with pytest.raises(TypeError, match=r"^`counts`: this Resample \('bayesian'\)"):
        in_bag_counts(bagwise.resample(N_ROWS, N_MEMBERS, scheme="bayesian", rng=0))


def test_signed_counts_read_as_unsigned_without_a_copy():
    counts = bagwise.resample(N_ROWS, N_MEMBERS, rng=0).counts.astype(np.int16)
    read = in_bag_counts(counts, unsigned=True)
    assert read.dtype == np.uint16 and np.shares_memory(read, counts)
    assert np.array_equal(read, counts)
