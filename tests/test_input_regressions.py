"""Bad input the property tests (`test_properties.py`) found mishandled, one plain test each:
every refusal is a documented exception whose message starts with the argument in backticks
(the project's rule for every public call), and no figure is a silent NaN."""

from __future__ import annotations

import os

import numpy as np
import pytest

import bagwise

M, P, R = 8, 9, 20
RNG = np.random.default_rng(7)
VALUES = RNG.normal(size=(M, P))
Y = RNG.normal(size=P)
LABELS = RNG.integers(0, 3, size=(M, P))
Y_LABELS = RNG.integers(0, 3, size=P)
COUNTS = bagwise.resample(R, M, rng=3).counts
X = RNG.normal(size=(30, 3))
Y_X = X[:, 0] + 0.5 * RNG.normal(size=30)


def test_an_absurd_number_of_orders_is_a_memory_error_not_an_abort():
    # was: the core aborted the process allocating 10**12 member orders
    with pytest.raises(MemoryError, match=r"^`orders`"):
        bagwise.size_curve(VALUES, Y, orders=10**12)
    with pytest.raises(MemoryError, match=r"^`orders`"):
        bagwise.size_curve_stream(orders=10**12).update(LABELS, Y_LABELS)


@pytest.mark.parametrize("method", ["fit", "predict", "member_predictions", "diagnose"])
def test_estimators_name_X_in_scikit_learn_input_errors(method):
    # was: "Found array with dim 3, while dim <= 2 is required by BagRegressor."
    bag = bagwise.BagRegressor(n_members=4, max_depth=2, random_state=0).fit(X, Y_X)
    cube = X[:, :, None]
    with pytest.raises(ValueError, match=r"^`X`: Found array with dim 3"):
        if method == "fit":
            bagwise.BagRegressor(n_members=4).fit(cube, Y_X)
        elif method == "diagnose":
            bag.diagnose(cube[:7], Y_X[:7])
        else:
            getattr(bag, method)(cube)


def test_estimator_fit_names_y_in_its_target_errors():
    with pytest.raises(ValueError, match=r"^`y`: "):
        bagwise.BagRegressor(n_members=4).fit(X, np.c_[Y_X, Y_X, Y_X])


def test_read_ensemble_names_X_and_X_train():
    from sklearn.ensemble import BaggingRegressor

    model = BaggingRegressor(n_estimators=3, random_state=0).fit(X, Y_X)
    with pytest.raises(ValueError, match=r"^`X`: "):
        bagwise.read_ensemble(model, X[:5, :, None])
    with pytest.raises(ValueError, match=r"^`X_train`: "):
        bagwise.read_ensemble(model, X[:5], X_train=X[:, :, None], y_train=Y_X)


def test_compare_learners_names_a_scalar_X():
    # was: TypeError "Input should have at least 1 dimension ..." naming no argument
    with pytest.raises(TypeError, match=r"^`X`: "):
        bagwise.compare_learners(np.float64(1.0), Y_X, ["tree"], n_members=4, folds=2)


@pytest.mark.parametrize("call", [
    lambda loss: bagwise.decompose(VALUES, Y, loss=loss),
    lambda loss: bagwise.size_curve(VALUES, Y, loss=loss, orders=2),
    lambda loss: bagwise.decompose_stream(loss=loss),
])
def test_an_unhashable_loss_is_a_named_type_error(call):
    # was: TypeError "unhashable type: 'list'"
    with pytest.raises(TypeError, match=r"^`loss`: expected .* got list"):
        call([])


def test_count_gram_checks_jackknife_and_scheme_before_the_core():
    # was: pyo3's "'int' object is not an instance of 'bool'" / "... of 'str'"
    with pytest.raises(TypeError, match=r"^`jackknife`: expected True or False"):
        bagwise.count_gram(COUNTS, jackknife=0)
    with pytest.raises(ValueError, match=r"^`scheme`: "):
        bagwise.prediction_variance(VALUES, COUNTS, scheme=0)
    with pytest.raises(ValueError, match=r"^`scheme`: "):
        bagwise.spread(VALUES, COUNTS, scheme=0)


def test_targets_whose_squares_overflow_are_refused_by_name():
    # was: a silent NaN from replicate_spread and "`members`: ..." from an estimator's
    # diagnose, whose arguments are X and y; sqrt(largest float64) from numpy's finfo
    from bagwise._members import LARGEST_VALUE

    assert LARGEST_VALUE == pytest.approx(float(np.sqrt(np.finfo(np.float64).max)))
    huge = Y * 1e300
    with pytest.raises(ValueError, match=r"^`y`: has a value of .* overflows"):
        bagwise.replicate_spread(RNG.normal(size=(3, M, P)), huge)
    with pytest.raises(ValueError, match=r"^`y`: has a value of"):
        bagwise.decompose(VALUES, huge)
    bag = bagwise.BagRegressor(n_members=4, max_depth=2, random_state=0).fit(X, Y_X)
    with pytest.raises(ValueError, match=r"^`y`: "):
        bag.diagnose(X[:7], Y_X[:7] * 1e300)
    # large targets below the limit are still numbers
    edge = np.full(P, 1e150)
    assert np.isfinite(bagwise.decompose(np.zeros((M, P)), edge).ensemble_loss)


@pytest.mark.parametrize("call", [
    lambda: bagwise.size_curve(LABELS, np.r_[Y_LABELS[:-1], 2**31], orders=2),
    lambda: bagwise.decompose(np.r_[LABELS[:-1], LABELS[-1:] * 0 + 2**31], Y_LABELS),
])
def test_a_huge_label_is_blamed_on_the_array_holding_it(call):
    # was: "`n_classes`: ..." from calls that have no n_classes argument
    with pytest.raises(ValueError, match=r"^`(y|members)`: at most 1048576 classes"):
        call()


def test_load_and_save_name_the_path(tmp_path):
    # was: IsADirectoryError / FileNotFoundError / TypeError naming no argument
    with pytest.raises(IsADirectoryError, match=r"^`path`: .*is a directory"):
        bagwise.load(tmp_path)
    with pytest.raises(FileNotFoundError, match=r"^`path`: .*no such file"):
        bagwise.load(tmp_path / "missing.bag")
    with pytest.raises(TypeError, match=r"^`path`: expected a str or os.PathLike, got int"):
        bagwise.load(0)
    bag = bagwise.BagRegressor(n_members=4, max_depth=2, random_state=0).fit(X, Y_X)
    with pytest.raises(FileNotFoundError, match=r"^`path`: cannot write") as caught:
        bagwise.save(bag, tmp_path / "no" / "such" / "folder.bag")
    assert caught.value.errno is not None and os.strerror(caught.value.errno)
    with pytest.raises(TypeError, match=r"^`path`: "):
        bagwise.save(bag, 0)


def test_members_that_agree_exactly_have_correction_share_zero_not_nan():
    # was: correction_share 0/0 = NaN at every point, silently
    result = bagwise.prediction_variance(np.zeros((M, P)), COUNTS)
    assert np.array_equal(result.raw_variance, np.zeros(P))
    assert np.array_equal(result.correction_share, np.zeros(P))


@pytest.mark.parametrize("call", [
    lambda: bagwise.aggregate(VALUES, n_jobs=2**70),
    lambda: bagwise.size_curve(VALUES, Y, orders=2**70),
    lambda: bagwise.resample(2**70, 4),
])
def test_integers_beyond_64_bits_are_a_named_overflow_error(call):
    # was: pyo3's "int too big to convert", naming no argument
    with pytest.raises(OverflowError, match=r"^`(n_jobs|orders|n_rows)`: \d+ does not fit in 64 bits"):
        call()


def test_an_absurd_thread_count_is_refused():
    from bagwise._validation import MAX_N_JOBS

    with pytest.raises(ValueError, match=r"^`n_jobs`: at most 4096 threads"):
        bagwise.aggregate(VALUES, n_jobs=MAX_N_JOBS + 1)
    assert bagwise.aggregate(VALUES, n_jobs=2).shape == (P,)


@pytest.mark.parametrize("call, name", [
    (lambda ragged: bagwise.aggregate(VALUES, member_weights=ragged), "member_weights"),
    (lambda ragged: bagwise.decompose(VALUES, Y, member_weights=ragged), "member_weights"),
    (lambda ragged: bagwise.size_curve(VALUES, Y, sizes=ragged, orders=2), "sizes"),
    (lambda ragged: bagwise.prediction_interval(VALUES, COUNTS, RNG.normal(size=(M, R)), ragged),
     "y_train"),
    (lambda ragged: bagwise.prediction_interval(VALUES, COUNTS, ragged, Y[:R]), "train_members"),
])
def test_ragged_lists_are_a_named_type_error(call, name):
    # was: numpy's "setting an array element with a sequence ..." naming no argument
    with pytest.raises(TypeError, match=rf"^`{name}`: expected an array"):
        call([[1.0, 2.0], [3.0]])


def test_more_bugs_found_by_the_soak():
    # resample: numpy's "array is too big" ValueError, naming no argument
    with pytest.raises(MemoryError, match=r"^`n_members`: "):
        bagwise.resample(R, 2**62)
    # estimators: pyo3's "Python int too large to convert to C long"
    with pytest.raises(OverflowError, match=r"^`max_depth`: \d+ does not fit in 64 bits"):
        bagwise.BagRegressor(n_members=2, max_depth=2**70).fit(X, Y_X)
    # the core's `x` is the estimator's `X` (was "`x`: member 0: ... rank deficient")
    with pytest.raises(ValueError, match=r"^`X`: member 0: .*rank deficient"):
        bagwise.BagRegressor("linear", n_members=2).fit(np.zeros_like(X), Y_X)
    # estimator targets read by scikit-learn (was "y should be a 1d array ...")
    bag = bagwise.BagRegressor(n_members=4, max_depth=2, random_state=0).fit(X, Y_X)
    with pytest.raises(ValueError, match=r"^`y`: y should be a 1d array"):
        bag.diagnose(X[:7], Y_X[None, :7])
    # variances of members whose squares overflow (was numpy's "invalid value encountered
    # in subtract" and an infinite variance)
    with pytest.raises(ValueError, match=r"^`members`: values so large their variance"):
        bagwise.prediction_variance(VALUES * 1e300, COUNTS)
    with pytest.raises(ValueError, match=r"^`members`: values so large their variance"):
        bagwise.spread(VALUES * 1e300, COUNTS)


def test_read_ensemble_names_X_beyond_what_a_forest_reads():
    # was: numpy's "overflow encountered in cast" RuntimeWarning from scikit-learn's trees
    from sklearn.ensemble import RandomForestRegressor

    model = RandomForestRegressor(n_estimators=3, random_state=0).fit(X, Y_X)
    with pytest.raises(ValueError, match=r"^`X`: the model cannot read these values"):
        bagwise.read_ensemble(model, X[:5] * 1e300)


def test_a_tiny_level_gives_an_interval_not_a_panic():
    # was: "internal error in bagwise: partition_at_index index 19 greater than length of
    # slice 19" (the rank guard pushed k- = floor(alpha (n + 1)) past n)
    train = RNG.normal(size=(M, R))
    with pytest.warns(bagwise.BagwiseWarning, match="in bag for every member"):
        result = bagwise.prediction_interval(VALUES, COUNTS, train, RNG.normal(size=R),
                                             level=1e-273)
    assert np.all(np.isfinite(result.lower)) and np.all(np.isfinite(result.upper))


@pytest.mark.parametrize("reference, message", [
    (Y * 1e300, r"^`reference`: values so large their squared error"),
])
def test_diagnose_refuses_a_reference_whose_loss_overflows(reference, message):
    # was: numpy's "overflow encountered in square" RuntimeWarning and an infinite loss
    counts = bagwise.resample(P, M, rng=1).counts
    with pytest.raises(ValueError, match=message):
        bagwise.diagnose(VALUES, Y, counts=counts, reference=reference)


def test_diagnose_refuses_reference_probabilities_that_are_not_probabilities():
    probabilities = RNG.dirichlet(np.ones(3), size=(M, P))
    reference = np.full((P, 3), 1 / 3)
    reference[0] = [5.0, -4.0, 0.0]
    with pytest.raises(ValueError, match=r"^`reference`: class probabilities must lie in"):
        bagwise.diagnose(probabilities, Y_LABELS, reference=reference)


def test_bugs_found_by_the_last_soak():
    with pytest.raises(OverflowError, match=r"^`split_features`: \d+ does not fit in 64 bits"):
        bagwise.BagRegressor(n_members=2, split_features=2**70).fit(X, Y_X)
    # bytes have a split method, but they are not a splitter
    with pytest.raises(TypeError, match=r"^`folds`: expected an integer >= 2"):
        bagwise.compare_learners(X, Y_X, ["tree"], n_members=2, folds=b"x")
    # classes that cannot be compared with the targets (was "'<' not supported ...")
    bag = bagwise.BagClassifier(n_members=4, max_depth=2, random_state=0).fit(X, X[:, 0] > 0)
    import datetime

    with pytest.raises(TypeError, match=r"^`y`: "):
        bag.diagnose(X[:3], np.array([datetime.datetime(2020, 1, 1)] * 3, dtype=object))


def test_classifier_targets_that_are_not_classes_are_named():
    # was: scikit-learn's "Unknown label type: ..." and numpy's "invalid value encountered
    # in cast" RuntimeWarning, naming no argument
    with pytest.raises(ValueError, match=r"^`y`: Unknown label type"):
        bagwise.BagClassifier(n_members=2).fit(X, np.array([object()] * len(X), dtype=object))
    with pytest.raises(ValueError, match=r"^`y`: "):
        bagwise.BagClassifier(n_members=2).fit(X, X[:, 0] * 1e300)
