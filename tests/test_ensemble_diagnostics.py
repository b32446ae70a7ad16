"""Diagnostics of fitted bags: out_of_bag, prediction_variance, spread and diagnose on
BagRegressor / BagClassifier, and what bagging gains for stable and unstable learners."""

from __future__ import annotations

import math
import pickle
import warnings

import numpy as np
import pytest
import sklearn.datasets
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import StratifiedKFold, cross_val_score
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

import bagwise


def _linear_data(n=1200, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    y = X @ [1.0, -2.0, 0.5, 0.0, 1.5] + rng.normal(scale=1.0, size=n)
    return X, y


def _fill_in_bag(predictions, counts):
    """In-bag entries are NaN by design; any valid number works (they are not read)."""
    if predictions.ndim == 3:
        return np.where((counts > 0)[:, :, None], 1.0 / predictions.shape[2], predictions)
    return np.where(counts > 0, 0.0, predictions)


def test_out_of_bag_equals_the_function_on_the_same_arrays():
    X, y = _linear_data(300)
    bag = bagwise.BagRegressor("linear", n_members=30, random_state=2).fit(X, y)
    oob = bag.out_of_bag()
    raw = bag.out_of_bag_predictions()
    direct = bagwise.out_of_bag(_fill_in_bag(raw, bag.in_bag_), bag.in_bag_, y)
    np.testing.assert_array_equal(oob.prediction, direct.prediction)
    assert oob.ensemble_loss == direct.ensemble_loss
    # independent numpy: mean over the members that left the row out (Breiman 1996)
    expected = np.nanmean(np.where(bag.in_bag_ == 0, raw, np.nan), axis=0)
    np.testing.assert_allclose(oob.prediction, expected, rtol=1e-12)
    assert bag.out_of_bag("absolute_error").ensemble_loss == pytest.approx(oob.absolute_error)


def test_classification_out_of_bag_uses_probabilities_and_class_codes():
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)   # bundled open dataset
    labels = np.where(y == 1, "benign", "malignant")
    bag = bagwise.BagClassifier(DecisionTreeClassifier(max_depth=4), n_members=25,
                                    random_state=1).fit(X, labels)
    oob = bag.out_of_bag(loss="brier_score")
    codes = np.searchsorted(bag.classes_, labels)
    raw = bag.out_of_bag_predictions()
    direct = bagwise.out_of_bag(_fill_in_bag(raw, bag.in_bag_), bag.in_bag_, codes,
                                loss="brier_score")
    np.testing.assert_array_equal(oob.probabilities, direct.probabilities)
    assert oob.ensemble_loss == direct.ensemble_loss and oob.error_rate == direct.error_rate


def test_prediction_variance_and_spread_reuse_the_count_gram():
    X, y = _linear_data(400)
    bag = bagwise.BagRegressor(DecisionTreeRegressor(max_depth=4), n_members=60,
                                random_state=0).fit(X[:300], y[:300])
    X_new = X[300:]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got = bag.prediction_variance(X_new)
        want = bagwise.prediction_variance(bag.member_predictions(X_new), bag.in_bag_)
    np.testing.assert_array_equal(got.variance, want.variance)
    gram = bag.count_gram_
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        again = bag.prediction_variance(X_new[:10], corrected=False)
        jack = bag.prediction_variance(X_new, method="jackknife")
        want_jack = bagwise.prediction_variance(bag.member_predictions(X_new), bag.in_bag_,
                                                method="jackknife")
    assert bag.count_gram_ is not gram            # rebuilt once, with the jackknife Gram
    np.testing.assert_array_equal(again.variance, want.raw_variance[:10])
    np.testing.assert_array_equal(jack.variance, want_jack.variance)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = bag.spread(X_new)
        s_want = bagwise.spread(bag.member_predictions(X_new), bag.in_bag_)
    assert s.pooled_rho == s_want.pooled_rho
    # pickled with its Gram: the same numbers
    copy = pickle.loads(pickle.dumps(bag))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        np.testing.assert_array_equal(copy.prediction_variance(X_new).variance, got.variance)
    with pytest.raises(ValueError, match="`method`"):
        bag.prediction_variance(X_new, method="bootstrap")


def test_native_bag_after_save_and_load_rebuilds_the_gram(tmp_path):
    X, y = _linear_data(300)
    bag = bagwise.BagRegressor("linear", n_members=40, random_state=3).fit(X[:200], y[:200])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        before = bag.prediction_variance(X[200:])
    bag.save(tmp_path / "bag.bagwise")
    loaded = bagwise.load(tmp_path / "bag.bagwise")
    assert "count_gram_" not in loaded.__dict__
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        after = loaded.prediction_variance(X[200:])
    np.testing.assert_array_equal(after.variance, before.variance)
    # a loaded bag keeps no training rows: out_of_bag needs them given back
    with pytest.raises(ValueError, match="`X`"):
        loaded.out_of_bag()
    assert loaded.out_of_bag(X=X[:200], y=y[:200]).ensemble_loss == bag.out_of_bag().ensemble_loss
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = loaded.diagnose(X[200:], y[200:])
    assert report.out_of_bag is None and report.uncertainty is not None


def test_classification_prediction_variance_has_every_class():
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)   # bundled open dataset
    bag = bagwise.BagClassifier(DecisionTreeClassifier(max_depth=3), n_members=30,
                                    random_state=0).fit(X[:400], y[:400])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got = bag.prediction_variance(X[400:])
        members = bag.member_predictions(X[400:])
        for k in range(2):
            want = bagwise.prediction_variance(members[:, :, k], bag.in_bag_)
            np.testing.assert_array_equal(got.std_error[:, k], want.std_error)
    assert got.std_error.shape == (len(X) - 400, 2) and got.quantity == "class probability"


def test_bayesian_counts_have_no_out_of_bag_or_variance():
    X, y = _linear_data(100)
    bag = bagwise.BagRegressor("linear", n_members=10, scheme="bayesian").fit(X, y)
    with pytest.raises(ValueError, match="`scheme`"):
        bag.out_of_bag()
    with pytest.raises(ValueError, match="`scheme`"):
        bag.prediction_variance(X)
    report = bag.diagnose(X, y)
    assert report.out_of_bag is None and report.uncertainty is None


def test_diagnose_labels_and_unknown_classes():
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)   # bundled open dataset
    labels = np.where(y == 1, "benign", "malignant")
    bag = bagwise.BagClassifier(DecisionTreeClassifier(max_depth=3), n_members=20,
                                    random_state=0).fit(X[:400], labels[:400])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bag.diagnose(X[400:], labels[400:])
    assert report.out_of_bag.ensemble_loss == bag.out_of_bag().ensemble_loss
    # ensemble Brier of the soft vote at the test points (numpy, one-hot targets)
    proba = bag.predict_proba(X[400:])
    onehot = np.eye(2)[np.searchsorted(bag.classes_, labels[400:])]
    assert report.decomposition.ensemble_loss == pytest.approx(
        np.mean(np.sum((proba - onehot) ** 2, axis=1)), rel=1e-12)
    with pytest.raises(ValueError, match="`y`: label 'other'"):
        bag.diagnose(X[400:402], ["benign", "other"])


#: Breiman (1996), "Bagging predictors", §6: bagging a stable procedure such as least
#: squares can only slightly improve or degrade it (from memory); the checks allow the
#: bagged / single test-loss ratio within [0.97, 1.05].
STABLE_RATIO = (0.97, 1.05)


def stable_ratio(seed):
    """Bagged (50 native linear members) over single least-squares test MSE
    (sklearn.linear_model.LinearRegression) on a linear truth, 200 training rows and 1,000
    test rows, as `diagnose` reports it."""
    X, y = _linear_data(1200, seed=seed)
    X_train, y_train, X_test, y_test = X[:200], y[:200], X[200:], y[200:]
    bag = bagwise.BagRegressor("linear", n_members=50, random_state=seed).fit(X_train, y_train)
    single = LinearRegression().fit(X_train, y_train).predict(X_test)   # sklearn.linear_model
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bag.diagnose(X_test, y_test, reference=single)
    return report.reference_ratio, report.verdict()


def test_stable_learner_gains_nothing():
    # Pass rate over 200 seeds (tests/bench/suite_a_pass_rate.py): 100%, the ratio within
    # 0.979-1.014.
    ratio, verdict = stable_ratio(4)
    assert STABLE_RATIO[0] <= ratio < STABLE_RATIO[1], ratio
    # The verdict is a 95% interval statement, so it is not asserted: over the same 200
    # seeds it read "no clear difference" on 92%, "hurts" on 4.5% (as here, ratio 1.007)
    # and "helps" on 3.5%.
    assert verdict.startswith(("no clear difference", "bagging hurts", "bagging helps"))


#: Breiman (1996), Table 4 (regression): bagging regression trees on Friedman #1 with 200
#: training rows, test MSE 11.4 -> 6.1, a ratio of 0.54 (from memory). The mean over three
#: data sets must be at most 0.7 and each at most 0.85 (a margin of 0.3 over the paper's
#: ratio for a single data set of 1,000 test rows).
FRIEDMAN_RATIO, FRIEDMAN_EACH = 0.7, 0.85


def friedman_ratios(seed, datasets=3):
    """Per Friedman #1 data set (sklearn.datasets.make_friedman1, Friedman 1991; noise 1),
    the `diagnose` reference ratio of 50 bagged sklearn trees against one tree."""
    ratios = []
    for d in range(seed * datasets, seed * datasets + datasets):
        X, y = sklearn.datasets.make_friedman1(n_samples=1200, noise=1.0, random_state=d)
        X_train, y_train, X_test, y_test = X[:200], y[:200], X[200:], y[200:]
        bag = bagwise.BagRegressor(DecisionTreeRegressor(), n_members=50,
                                   random_state=d).fit(X_train, y_train)
        single = DecisionTreeRegressor(random_state=d).fit(X_train, y_train).predict(X_test)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            report = bag.diagnose(X_test, y_test, reference=single)
        ratios.append(report.reference_ratio)
        assert report.out_of_bag is not None and report.spread is not None
    return ratios


def test_bagged_trees_on_friedman1():
    # Pass rate over 200 seeds (tests/bench/suite_a_pass_rate.py): 100%.
    ratios = friedman_ratios(0)
    assert np.mean(ratios) <= FRIEDMAN_RATIO, ratios
    assert all(r < FRIEDMAN_EACH for r in ratios), ratios


def oob_against_cv(seed):
    """(out-of-bag error, 5-fold cross-validated error, single tree's cross-validated
    error) of 50 bagged sklearn trees on sklearn.datasets.load_breast_cancer."""
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    model = bagwise.BagClassifier(DecisionTreeClassifier(), n_members=50, random_state=seed)
    oob_error = model.fit(X, y).out_of_bag().error_rate
    folds = StratifiedKFold(5, shuffle=True, random_state=seed)
    cv_error = 1 - cross_val_score(model, X, y, cv=folds).mean()
    single_error = 1 - cross_val_score(DecisionTreeClassifier(random_state=seed), X, y,
                                       cv=folds).mean()
    return oob_error, cv_error, single_error


def oob_tolerance(oob_error, cv_error, n_rows, z=3.0):
    """z binomial standard errors of the difference of two error rates on n_rows rows,
    sqrt(2 e (1 − e) / n) with e their mean, taking the two as independent (they share the
    rows, so this overstates the spread; z = 3 is common practice)."""
    e = (oob_error + cv_error) / 2
    return z * math.sqrt(2 * e * (1 - e) / n_rows)


def test_out_of_bag_error_matches_cross_validation_on_breast_cancer():
    # sklearn.datasets.load_breast_cancer; the out-of-bag error estimates the test error
    # (Breiman 1996), so it agrees with 5-fold cross-validation
    # (sklearn.model_selection.cross_val_score) of the same bag within the binomial
    # tolerance `oob_tolerance`. Pass rate over 200 seeds (tests/bench/suite_a_pass_rate.py,
    # with the single-tree comparison below): 100%.
    oob_error, cv_error, single_error = oob_against_cv(0)
    tolerance = oob_tolerance(oob_error, cv_error, 569)
    assert abs(oob_error - cv_error) <= tolerance, (oob_error, cv_error, tolerance)
    # The wrong variant the check catches: the in-bag (training) error in place of the
    # out-of-bag one, near 0 for trees grown to purity.
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    bag = bagwise.BagClassifier(DecisionTreeClassifier(), n_members=50, random_state=0).fit(X, y)
    training_error = float(np.mean(bag.predict(X) != y))
    assert abs(training_error - cv_error) > oob_tolerance(training_error, cv_error, 569)
    # bagged trees beat a single tree (common practice; Breiman 1996)
    assert cv_error < single_error, (cv_error, single_error)


def test_linear_diagnose_numbers_match_the_function():
    X, y = _linear_data(400, seed=5)
    bag = bagwise.BagRegressor("linear", n_members=30, random_state=1).fit(X[:300], y[:300])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bag.diagnose(X[300:], y[300:])
        direct = bagwise.diagnose(bag.member_predictions(X[300:]), y[300:], counts=bag.in_bag_,
                                  train_members=_fill_in_bag(bag.out_of_bag_predictions(),
                                                             bag.in_bag_),
                                  y_train=y[:300])
    assert report.summary() == direct.summary()


def test_spread_rho_agrees_with_replicate_spread():
    # Monte Carlo on a known generator, sklearn.datasets.make_friedman1 (Friedman 1991):
    # R independent training sets, a bag of wrapped sklearn.tree.DecisionTreeRegressor
    # (max_depth=3) on each, members predicted at fixed points. replicate_spread estimates
    # rho from the spread across training sets (random-effects ANOVA; ESL eq. 15.1);
    # spread estimates it inside one ensemble from the in-bag counts (corrected IJ, Wager,
    # Hastie & Efron 2014). Tolerance: 3 Monte-Carlo standard errors, combining the
    # jackknife over replicates of replicate_spread's rho with the standard error of the mean
    # of spread's per-replicate rho (measured: 0.158 ± 0.012 against 0.168 ± 0.006).
    replicates, members, n = 30, 100, 120
    x_test, _ = sklearn.datasets.make_friedman1(n_samples=40, noise=0.0, random_state=999)
    predictions, rhos, within = [], [], []
    for r in range(replicates):
        x, y = sklearn.datasets.make_friedman1(n_samples=n, noise=1.0, random_state=r)
        bag = bagwise.BagRegressor(DecisionTreeRegressor(max_depth=3), n_members=members,
                                    random_state=r).fit(x, y)
        predictions.append(bag.member_predictions(x_test))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", bagwise.BagwiseWarning)
            s = bag.spread(x_test)
        rhos.append(s.pooled_rho)
        within.append(s.mean_within)
    predictions = np.array(predictions)
    across = bagwise.replicate_spread(predictions)
    # the within parts are the same pooled across-member variance (ddof 1)
    assert across.mean_within == pytest.approx(np.mean(within), rel=1e-10)
    leave_one_out = np.array([bagwise.replicate_spread(np.delete(predictions, i, axis=0))
                              .pooled_rho for i in range(replicates)])
    se_across = np.sqrt((replicates - 1) / replicates
                        * np.sum((leave_one_out - leave_one_out.mean()) ** 2))
    se_inside = np.std(rhos, ddof=1) / np.sqrt(replicates)
    tolerance = 3 * np.hypot(se_across, se_inside)
    assert abs(np.mean(rhos) - across.pooled_rho) <= tolerance, (
        np.mean(rhos), across.pooled_rho, tolerance)
    # A real, non-trivial rho: the bounds only exclude a degenerate generator (measured on
    # this one: 0.158 ± 0.012; rho in (0, 1) by definition, ESL eq. 15.1).
    assert 0.05 < across.pooled_rho < 0.5


def test_native_classifier_out_of_bag_and_a_test_set_as_large_as_the_training_set():
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)   # bundled open dataset
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    bag = bagwise.BagClassifier("neighbors", n_members=20, neighbors=5,
                                    random_state=0).fit(X[:280], y[:280])
    oob = bag.out_of_bag()
    raw = bag.out_of_bag_predictions()
    direct = bagwise.out_of_bag(_fill_in_bag(raw, bag.in_bag_), bag.in_bag_, y[:280])
    np.testing.assert_array_equal(oob.probabilities, direct.probabilities)
    # The test set has as many rows as the training set: the bag never mistakes the test
    # predictions for training-row predictions; its out-of-bag part is the training one.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bag.diagnose(X[280:560], y[280:560])
    assert report.decomposition.n_points == 280
    assert report.out_of_bag.ensemble_loss == oob.ensemble_loss
    assert report.out_of_bag.error_rate == pytest.approx(
        np.mean(oob.probabilities.argmax(axis=1) != y[:280]), abs=0)
