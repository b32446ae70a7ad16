"""`read_ensemble`: member predictions and in-bag counts of a fitted ensemble, checked
against scikit-learn's own records of the same ensemble: its drawn rows
(``estimators_samples_``, ``_generate_sample_indices``), its predictions (``predict``,
``predict_proba``) and its out-of-bag estimates (``oob_prediction_``,
``oob_decision_function_``); bagwise's own bags against an out-of-bag mean written here in
numpy (Breiman 1996). Data: scikit-learn's bundled diabetes, iris and wine sets."""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest
import sklearn.datasets
from sklearn.ensemble import (
    BaggingClassifier,
    BaggingRegressor,
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    GradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.linear_model import RidgeClassifier
from sklearn.neighbors import KNeighborsRegressor
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

import bagwise

N_MEMBERS = 40


def diabetes():
    X, y = sklearn.datasets.load_diabetes(return_X_y=True)
    return X[:300], y[:300], X[300:], y[300:]


def iris_labels():
    """Iris with its class names as string labels, shuffled (fixed seed) and split."""
    data = sklearn.datasets.load_iris()
    order = np.random.default_rng(0).permutation(len(data.target))
    X, y = data.data[order], data.target_names[data.target[order]]
    return X[:100], y[:100], X[100:], y[100:]


def wine_labels():
    data = sklearn.datasets.load_wine()
    order = np.random.default_rng(1).permutation(len(data.target))
    X, y = data.data[order], np.array(["barolo", "grignolino", "barbera"])[data.target[order]]
    return X[:120], y[:120], X[120:], y[120:]


def read(model, data, **fit):
    X, y, X_test, _ = data
    model.fit(X, y, **fit)
    return bagwise.read_ensemble(model, X_test, X_train=X, y_train=y)


def quiet_out_of_bag(result):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        return bagwise.out_of_bag(result.train_members, result.counts, result.y_train)


# -- the forests' seed route ----------------------------------------------------------------


@pytest.mark.parametrize("cls", [RandomForestRegressor, ExtraTreesRegressor])
@pytest.mark.parametrize("max_samples", [None, 0.6, 123])
@pytest.mark.parametrize("weighted", [False, True])
def test_forest_counts_are_scikit_learns_draws(cls, max_samples, weighted):
    """Guards the route bagwise relies on: the counts rebuilt from each tree's seed equal
    the np.bincount of scikit-learn's own draws, from its private
    ``_generate_sample_indices`` (read in scikit-learn 1.9.1) and its public
    ``estimators_samples_``. A change of scikit-learn's route fails here."""
    from sklearn.ensemble._forest import _generate_sample_indices

    X, y, X_test, _ = diabetes()
    weights = np.random.default_rng(2).uniform(0.2, 3.0, size=len(y)) if weighted else None
    model = cls(n_estimators=15, bootstrap=True, max_samples=max_samples, max_depth=4,
                random_state=0).fit(X, y, sample_weight=weights)
    result = bagwise.read_ensemble(model, X_test)
    n = len(y)
    drawn = [_generate_sample_indices(tree.random_state, n, model._n_samples_bootstrap,
                                      getattr(model, "_sample_weight", None))
             for tree in model.estimators_]
    assert np.array_equal(result.counts, np.stack([np.bincount(d, minlength=n) for d in drawn]))
    public = np.stack([np.bincount(s, minlength=n) for s in model.estimators_samples_])
    assert np.array_equal(result.counts, public)
    expected_draws = {None: n, 0.6: int(0.6 * (weights.sum() if weighted else n)), 123: 123}
    assert np.all(result.counts.sum(axis=1) == expected_draws[max_samples])   # max_samples


# -- out of bag: scikit-learn's own estimates -----------------------------------------------


REGRESSORS = {
    "RandomForestRegressor": lambda: RandomForestRegressor(
        n_estimators=N_MEMBERS, oob_score=True, max_depth=6, random_state=0),
    "RandomForestRegressor max_samples": lambda: RandomForestRegressor(
        n_estimators=N_MEMBERS, oob_score=True, max_samples=0.7, max_features=0.5,
        random_state=1),
    "ExtraTreesRegressor": lambda: ExtraTreesRegressor(
        n_estimators=N_MEMBERS, bootstrap=True, oob_score=True, max_samples=150, random_state=2),
    "BaggingRegressor features": lambda: BaggingRegressor(
        DecisionTreeRegressor(max_depth=5), n_estimators=N_MEMBERS, max_features=0.5,
        max_samples=0.8, oob_score=True, random_state=3),
    "BaggingRegressor bootstrap features, no sample_weight": lambda: BaggingRegressor(
        KNeighborsRegressor(7), n_estimators=N_MEMBERS, max_features=4,
        bootstrap_features=True, oob_score=True, random_state=4),
}


@pytest.mark.parametrize("name", list(REGRESSORS))
def test_regressors_out_of_bag_equals_scikit_learns(name):
    model = REGRESSORS[name]()
    data = diabetes()
    result = read(model, data)
    # source: scikit-learn's oob_prediction_ (the mean over the trees or members that did
    # not draw the row).
    np.testing.assert_allclose(quiet_out_of_bag(result).prediction, model.oob_prediction_,
                               rtol=1e-12, atol=1e-12)
    # source: scikit-learn's predict, the mean of the members at the points.
    np.testing.assert_allclose(result.members.mean(axis=0), model.predict(data[2]),
                               rtol=1e-12, atol=1e-12)
    assert result.kind == "values" and result.classes is None
    assert result.members.shape == (N_MEMBERS, len(data[2]))
    assert result.counts.shape == (N_MEMBERS, len(data[0])) and result.n_rows == len(data[0])


def test_weighted_forest_out_of_bag_equals_scikit_learns():
    X, y, X_test, _ = data = diabetes()
    weights = np.random.default_rng(4).uniform(0.5, 2.0, size=len(y))
    model = RandomForestRegressor(n_estimators=N_MEMBERS, oob_score=True, max_depth=5,
                                  random_state=5)
    result = read(model, data, sample_weight=weights)
    # source: scikit-learn's oob_prediction_ of a forest whose draws follow the weights.
    np.testing.assert_allclose(quiet_out_of_bag(result).prediction, model.oob_prediction_,
                               rtol=1e-12, atol=1e-12)


CLASSIFIERS = {
    "RandomForestClassifier": (lambda: RandomForestClassifier(
        n_estimators=N_MEMBERS, oob_score=True, max_depth=3, random_state=0), iris_labels),
    "RandomForestClassifier balanced_subsample": (lambda: RandomForestClassifier(
        n_estimators=N_MEMBERS, oob_score=True, max_samples=0.7,
        class_weight="balanced_subsample", random_state=1), wine_labels),
    "RandomForestClassifier balanced": (lambda: RandomForestClassifier(
        n_estimators=N_MEMBERS, oob_score=True, max_depth=3, class_weight="balanced",
        random_state=5), wine_labels),
    "ExtraTreesClassifier": (lambda: ExtraTreesClassifier(
        n_estimators=N_MEMBERS, bootstrap=True, oob_score=True, max_depth=4,
        random_state=2), wine_labels),
    "BaggingClassifier features": (lambda: BaggingClassifier(
        DecisionTreeClassifier(max_depth=3), n_estimators=N_MEMBERS, max_features=2,
        oob_score=True, random_state=3), iris_labels),
    "BaggingClassifier votes, bootstrap features": (lambda: BaggingClassifier(
        RidgeClassifier(), n_estimators=N_MEMBERS, max_features=6, bootstrap_features=True,
        max_samples=0.9, oob_score=True, random_state=4), wine_labels),
}


@pytest.mark.parametrize("name", list(CLASSIFIERS))
def test_classifiers_out_of_bag_equals_scikit_learns_with_string_labels(name):
    make, load = CLASSIFIERS[name]
    model = make()
    data = load()
    result = read(model, data)
    assert result.classes.dtype.kind == "U"
    assert np.array_equal(result.classes, np.unique(data[1]))
    # string labels as class indices into classes (numpy.searchsorted of the sorted labels)
    assert np.array_equal(result.classes[result.y_train], data[1])
    # source: scikit-learn's oob_decision_function_ (mean member probabilities, or vote
    # shares for members without predict_proba, over the members that did not draw the row)
    np.testing.assert_allclose(quiet_out_of_bag(result).probabilities,
                               model.oob_decision_function_, rtol=1e-12, atol=1e-12)
    # source: scikit-learn's predict_proba at the points.
    np.testing.assert_allclose(result.members.mean(axis=0), model.predict_proba(data[2]),
                               rtol=1e-12, atol=1e-12)
    assert result.kind == "probabilities"
    assert result.members.shape == (N_MEMBERS, len(data[2]), len(result.classes))


def test_bagging_features_are_honoured():
    X, y, X_test, _ = diabetes()
    model = BaggingRegressor(DecisionTreeRegressor(max_depth=3), n_estimators=5,
                             max_features=3, random_state=0).fit(X, y)
    result = bagwise.read_ensemble(model, X_test)
    for m, (member, features) in enumerate(zip(model.estimators_, model.estimators_features_)):
        assert len(features) == 3
        # source: the member's own predict on its own feature columns
        assert np.array_equal(result.members[m], member.predict(X_test[:, features]))


def test_bagging_subsample_gives_zero_one_counts():
    X, y, X_test, _ = diabetes()
    model = BaggingRegressor(n_estimators=10, bootstrap=False, max_samples=0.5,
                             random_state=0).fit(X, y)
    result = bagwise.read_ensemble(model, X_test)
    masks = np.zeros((10, len(y)), dtype=np.int64)
    for m, rows in enumerate(model.estimators_samples_):
        masks[m, rows] = 1
    assert np.array_equal(result.counts, masks)
    assert np.all(result.counts.sum(axis=1) == len(y) // 2)


# -- bagwise's own bags --------------------------------------------------------------------


def numpy_out_of_bag(train_members, counts):
    """Breiman (1996): each row's mean over the members that did not draw it."""
    out = counts == 0
    if train_members.ndim == 3:
        out = out[:, :, None]
    return np.where(out, train_members, 0.0).sum(axis=0) / out.sum(axis=0)


def test_bag_regressor():
    X, y, X_test, _ = data = diabetes()
    bag = bagwise.BagRegressor("linear", n_members=N_MEMBERS, fraction=0.8, random_state=3)
    result = read(bag, data)
    assert np.array_equal(result.counts, bag.in_bag_)
    assert np.array_equal(result.members, bag.member_predictions(X_test))
    np.testing.assert_allclose(quiet_out_of_bag(result).prediction,
                               numpy_out_of_bag(result.train_members, result.counts),
                               rtol=1e-12)
    assert result.model == "BagRegressor"


def test_bag_classifier_with_string_labels():
    X, y, X_test, _ = data = iris_labels()
    bag = bagwise.BagClassifier("tree", n_members=N_MEMBERS, max_depth=3, random_state=4)
    result = read(bag, data)
    assert np.array_equal(result.classes, bag.classes_)
    assert np.array_equal(result.classes[result.y_train], y)
    np.testing.assert_allclose(quiet_out_of_bag(result).probabilities,
                               numpy_out_of_bag(result.train_members, result.counts),
                               rtol=1e-12)
    # source: the bag's predict_proba (scikit-learn's ClassifierMixin contract)
    np.testing.assert_allclose(result.members.mean(axis=0), bag.predict_proba(X_test), rtol=1e-12)


# -- diagnose takes the result --------------------------------------------------------------


def test_diagnose_takes_the_result_in_place_of_the_arrays():
    X, y, X_test, y_test = data = wine_labels()
    model = RandomForestClassifier(n_estimators=N_MEMBERS, max_depth=3, oob_score=True,
                                   random_state=0)
    result = read(model, data)
    codes = np.searchsorted(result.classes, y_test)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        direct = bagwise.diagnose(result, y_test)
        arrays = bagwise.diagnose(result.members, codes, counts=result.counts,
                                  train_members=result.train_members, y_train=result.y_train)
    assert direct.summary() == arrays.summary()
    assert direct.uncertainty is not None
    # source: scikit-learn's oob_score_, the accuracy of its out-of-bag decision function
    oob = direct.summary()["out_of_bag"]
    assert oob["loss"] == "error_rate"
    assert np.isclose(oob["ensemble_loss"], 1 - model.oob_score_, rtol=1e-12)


def test_diagnose_of_a_result_without_training_rows_leaves_out_of_bag_out():
    X, y, X_test, y_test = diabetes()
    model = RandomForestRegressor(n_estimators=N_MEMBERS, max_depth=4, random_state=0).fit(X, y)
    # Members at the training rows themselves, without X_train: they are not read as the
    # training-row predictions, so no out-of-bag section.
    result = bagwise.read_ensemble(model, X)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        report = bagwise.diagnose(result, y)
    assert report.out_of_bag is None and report.uncertainty is not None


def test_diagnose_refuses_arrays_the_result_holds():
    X, y, X_test, y_test = data = diabetes()
    result = read(RandomForestRegressor(n_estimators=5, random_state=0), data)
    with pytest.raises(ValueError, match=r"^`counts`: comes from the ensemble read"):
        bagwise.diagnose(result, y_test, counts=result.counts)
    with pytest.raises(ValueError, match=r"^`y_train`: comes from the ensemble read"):
        bagwise.diagnose(result, y_test, y_train=y)


def test_diagnose_refuses_a_label_the_model_does_not_know():
    X, y, X_test, y_test = data = iris_labels()
    result = read(RandomForestClassifier(n_estimators=5, random_state=0), data)
    with pytest.raises(ValueError, match=r"^`y`: label 'tulip' is not one of the model's "):
        bagwise.diagnose(result, np.where(y_test == "setosa", "tulip", y_test))


# -- what is not supported ------------------------------------------------------------------


def unsupported():
    X, y, _, _ = diabetes()
    y2 = np.c_[y, -y]
    return {
        "forest bootstrap=False": (ValueError, "`model`: .*bootstrap=False",
                                   ExtraTreesRegressor(n_estimators=3).fit(X, y)),
        "multi-output": (ValueError, "`model`: .*outputs",
                         RandomForestRegressor(n_estimators=3).fit(X, y2)),
        "bagging every row": (ValueError, "`model`: .*every member every training row",
                              BaggingRegressor(n_estimators=3, bootstrap=False).fit(X, y)),
        "boosting": (TypeError, "`model`: expected a fitted BagRegressor",
                     GradientBoostingRegressor(n_estimators=3).fit(X, y)),
        "a class": (TypeError, "`model`: expected a fitted ensemble", RandomForestRegressor),
        "not fitted": (ValueError, "`model`: .*not fitted", RandomForestRegressor()),
        "bag without resampling": (ValueError, "`model`: .*scheme='none'",
                                   bagwise.BagRegressor("linear", n_members=2,
                                                        scheme="none").fit(X, y)),
        "bayesian bag": (ValueError, "`model`: .*bayesian",
                         bagwise.BagRegressor("linear", n_members=3, scheme="bayesian").fit(X, y)),
    }


UNSUPPORTED = unsupported()


@pytest.mark.parametrize("name", list(UNSUPPORTED))
def test_unsupported_models_are_refused(name):
    error, message, model = UNSUPPORTED[name]
    with pytest.raises(error, match="^" + message):
        bagwise.read_ensemble(model, diabetes()[2])


def test_training_rows_and_targets_are_checked():
    X, y, X_test, _ = diabetes()
    model = RandomForestRegressor(n_estimators=3, random_state=0).fit(X, y)
    with pytest.raises(ValueError, match=r"^`X_train`: has 299 rows but the "
                                         r"RandomForestRegressor was fit on 300"):
        bagwise.read_ensemble(model, X_test, X_train=X[:-1])
    with pytest.raises(ValueError, match=r"^`y_train`: has 299 values"):
        bagwise.read_ensemble(model, X_test, y_train=y[:-1])
    with pytest.raises(ValueError, match=r"^`y_train`: contains NaN"):
        bagwise.read_ensemble(model, X_test, y_train=np.where(y > 100, np.nan, y))
    forest = RandomForestClassifier(n_estimators=3, random_state=0).fit(*iris_labels()[:2])
    with pytest.raises(ValueError, match=r"^`y_train`: label 'rose'"):
        bagwise.read_ensemble(forest, iris_labels()[2], y_train=np.full(100, "rose"))


def test_a_warm_started_bagging_that_lost_its_draws_is_refused():
    X, y, X_test, _ = diabetes()
    model = BaggingRegressor(n_estimators=3, warm_start=True, random_state=0).fit(X, y)
    model.set_params(n_estimators=5).fit(X, y)
    if len(model.estimators_samples_) == len(model.estimators_):
        pytest.skip("this scikit-learn keeps the draws of every warm-started member")
    with pytest.raises(ValueError, match=r"^`model`: .*warm-started"):
        bagwise.read_ensemble(model, X_test)


# -- the result ---------------------------------------------------------------------------


def test_the_result_displays_and_tabulates():
    X, y, X_test, _ = data = wine_labels()
    result = read(RandomForestClassifier(n_estimators=6, random_state=0), data)
    text = repr(result)
    assert "RandomForestClassifier" in text and "6 x 58 (probabilities)" in text
    assert "barbera" in text
    assert "RandomForestClassifier" in result._repr_html_()
    frame = result.to_frame()
    assert list(frame.columns) == ["member", "rows_drawn", "distinct_rows", "out_of_bag_share"]
    # source: the counts, tallied here
    assert np.array_equal(frame["rows_drawn"], result.counts.sum(axis=1))
    assert np.array_equal(frame["distinct_rows"], (result.counts > 0).sum(axis=1))
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.counts = None
