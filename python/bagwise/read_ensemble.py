"""Any fitted bagged ensemble in one call: `read_ensemble` and its `EnsembleArrays` result.

`read_ensemble` reads what every bagwise diagnostic takes from a fitted ensemble: the
members' predictions at the points, the in-bag counts rebuilt from the rows each member
drew, the members' predictions on the training rows and the training targets. It reads
bagwise's `BagRegressor` / `BagClassifier` and scikit-learn's `BaggingRegressor`,
`BaggingClassifier`, `RandomForestRegressor`, `RandomForestClassifier`,
`ExtraTreesRegressor` and `ExtraTreesClassifier`.

Where the counts come from
--------------------------
- bagwise's bags keep them (``in_bag_``).
- scikit-learn's bagging keeps the rows each member drew (``estimators_samples_``, public);
  the counts are their ``np.bincount``.
- scikit-learn's forests keep only each tree's integer seed (``tree.random_state``). The
  rows a tree drew are rebuilt by the route of ``_generate_sample_indices`` in
  ``sklearn/ensemble/_forest.py`` (read in scikit-learn 1.9.1):
  ``numpy.random.RandomState(seed).randint(0, n_rows, n_draws)``, or, when the forest was
  fit with sample or class weights (kept as ``_sample_weight``),
  ``RandomState(seed).choice(n_rows, n_draws, replace=True, p=weights / weights.sum())``;
  ``n_draws`` follows ``max_samples`` as ``_get_n_samples_bootstrap`` does (None: every row;
  an int: that many; a float f: ``max(int(f * n_rows), 1)``, with ``n_rows`` the sum of the
  weights when there are weights). This relies on scikit-learn's private route: the
  draw size is checked against the forest's own record (``_n_samples_bootstrap``) and the
  first tree's counts against scikit-learn's own rebuild of its draws where it has one,
  and `tests/test_read_ensemble.py` guards the route against ``_generate_sample_indices``,
  ``estimators_samples_`` and ``oob_prediction_`` / ``oob_decision_function_``.

Not supported (a clear error): forests fit with ``bootstrap=False`` and bagging that gives
every member every row (nothing is out of bag); multi-output targets; bagwise's bags with
``scheme="bayesian"`` (continuous weights, no counts) or ``scheme="none"``; a warm-started
scikit-learn bagging whose earlier draws are lost; any other model (boosting, stacking,
voting, isolation forests, tree embeddings).
"""

from __future__ import annotations

import contextlib
import dataclasses
import numbers
import warnings

import numpy as np

from ._members import as_array, in_bag_counts
from ._results import Result
from ._validation import naming

__all__ = ["EnsembleArrays", "read_ensemble"]

_SUPPORTED = ("BagRegressor, BagClassifier, or scikit-learn's BaggingRegressor, "
              "BaggingClassifier, RandomForestRegressor, RandomForestClassifier, "
              "ExtraTreesRegressor, ExtraTreesClassifier")


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class EnsembleArrays(Result):
    """The member predictions and in-bag counts read from a fitted bagged ensemble.

    Every array is in the form the bagwise diagnostics take: pass the result to
    `bagwise.diagnose` in place of ``members`` (with the targets at the points), or its
    arrays to any diagnostic, e.g. ``bagwise.out_of_bag(r.train_members, r.counts,
    r.y_train)``.

    Attributes
    ----------
    members : ndarray of float64
        The members' predictions at the points: values ``(n_members, n_points)`` for a
        regressor, class probabilities ``(n_members, n_points, n_classes)`` (columns in the
        order of ``classes``) for a classifier.
    counts : ndarray of int, shape (n_members, n_rows)
        In-bag counts: how many times each member drew each training row.
    train_members : ndarray of float64 or None
        The members' predictions at the training rows ``X_train``, shaped as ``members``
        with ``n_rows`` in place of ``n_points`` (None without ``X_train``).
    y_train : ndarray or None
        The training targets: float64 values, or class indices into ``classes`` (None
        without ``y_train``).
    classes : ndarray or None
        The class labels in code order (None for a regressor).
    model : str
        The class name of the ensemble read.
    kind : str
        ``"values"`` or ``"probabilities"``.
    n_members, n_points, n_rows : int
        Members, points of ``members``, training rows of ``counts``.
    """

    members: np.ndarray
    counts: np.ndarray
    train_members: np.ndarray | None
    y_train: np.ndarray | None
    classes: np.ndarray | None
    model: str
    kind: str
    n_members: int
    n_points: int
    n_rows: int

    _title = "Ensemble read"

    def class_codes(self, y) -> np.ndarray:
        """``y`` in the codes the diagnostics read: class labels (as the model predicts
        them) as int64 indices into ``classes``; a regressor's targets as float64."""
        return _targets(y, self.classes, "y")

    def rows_drawn(self) -> np.ndarray:
        """Rows each member drew (its total count), shape (n_members,)."""
        return self.counts.sum(axis=1, dtype=np.int64)

    def out_of_bag_share(self) -> np.ndarray:
        """Share of the training rows each member left out, shape (n_members,)."""
        return (self.counts == 0).mean(axis=1)

    def _rows(self):
        drawn = self.rows_drawn()
        draws = (f"{int(drawn[0]):,}" if np.all(drawn == drawn[0])
                 else f"{int(drawn.min()):,}..{int(drawn.max()):,}")
        rows = [
            ("model", self.model),
            ("members x points", f"{self.n_members:,} x {self.n_points:,} ({self.kind})"),
            ("training rows", f"{self.n_rows:,} ({draws} drawn per member)"),
            ("out of bag", f"{self.out_of_bag_share().mean():.1%} of the rows per member"),
        ]
        if self.classes is not None:
            shown = ", ".join(str(c) for c in self.classes[:6])
            more = f", ... ({len(self.classes)})" if len(self.classes) > 6 else ""
            rows.append(("classes", shown + more))
        rows.append(("training predictions", "yes" if self.train_members is not None
                     else "no (give X_train)"))
        rows.append(("training targets", "yes" if self.y_train is not None
                     else "no (give y_train)"))
        return rows

    def _reading(self):
        return ("bagwise.diagnose(this, y) reads everything at once; the arrays go to any "
                "diagnostic as they are")

    def to_frame(self):
        """One row per member: ``member``, ``rows_drawn``, ``distinct_rows``,
        ``out_of_bag_share``."""
        import pandas as pd

        return pd.DataFrame({"member": np.arange(self.n_members),
                             "rows_drawn": self.rows_drawn(),
                             "distinct_rows": (self.counts > 0).sum(axis=1),
                             "out_of_bag_share": self.out_of_bag_share()})


def read_ensemble(model, X, *, X_train=None, y_train=None) -> EnsembleArrays:
    """The member predictions and in-bag counts of a fitted bagged ensemble, in one call.

    Parameters
    ----------
    model : fitted ensemble
        bagwise's `BagRegressor` or `BagClassifier`; or scikit-learn's `BaggingRegressor`,
        `BaggingClassifier` (any members; a member's ``estimators_features_`` are honoured),
        `RandomForestRegressor`, `RandomForestClassifier`, `ExtraTreesRegressor` or
        `ExtraTreesClassifier` fit with ``bootstrap=True`` (any ``max_samples``; sample and
        class weights honoured). One target column only.
    X : array-like of shape (n_points, n_features)
        The points where the members predict (usually a test set), as the model takes them.
    X_train : array-like of shape (n_rows, n_features), optional
        The training rows, in the order the model was fit on; gives ``train_members``.
    y_train : array-like of shape (n_rows,), optional
        The training targets (class labels as the model was fit on them), stored as values
        or class indices into ``classes``.

    Returns
    -------
    EnsembleArrays

    Notes
    -----
    Regressors give each member's ``predict``; classifiers each member's ``predict_proba``
    in the columns of the ensemble's ``classes_`` (a member that never saw a class gives it
    probability 0; a scikit-learn bagging member without ``predict_proba`` gives its vote
    as probability 1, as scikit-learn's own out-of-bag decision function counts it). The
    counts of scikit-learn's forests are rebuilt from each tree's seed by scikit-learn's own
    sampling route; see the module docstring for what that relies on.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> from sklearn.ensemble import RandomForestRegressor
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(300, 4))
    >>> y = X[:, 0] - 2 * X[:, 1] + rng.normal(size=300)
    >>> forest = RandomForestRegressor(n_estimators=50, oob_score=True, random_state=0)
    >>> forest = forest.fit(X[:200], y[:200])
    >>> read = bagwise.read_ensemble(forest, X[200:], X_train=X[:200], y_train=y[:200])
    >>> read.members.shape, read.counts.shape
    ((50, 100), (50, 200))
    >>> oob = bagwise.out_of_bag(read.train_members, read.counts, read.y_train)
    >>> bool(np.allclose(oob.prediction, forest.oob_prediction_))
    True
    >>> read.model, read.kind
    ('RandomForestRegressor', 'values')

    ``bagwise.diagnose(read, y[200:])`` then reports on it all at once.
    """
    reader = _reader(model)
    return reader(model, X, X_train, y_train)


# -- the readers ------------------------------------------------------------------------------


def _reader(model):
    from sklearn.ensemble import (
        BaggingClassifier,
        BaggingRegressor,
        ExtraTreesClassifier,
        ExtraTreesRegressor,
        RandomForestClassifier,
        RandomForestRegressor,
    )

    from .ensemble import _Bag

    if isinstance(model, type):
        raise TypeError(f"`model`: expected a fitted ensemble, got the class {model.__name__}")
    if isinstance(model, _Bag):
        return _read_bag
    if isinstance(model, (BaggingRegressor, BaggingClassifier)):
        return _read_bagging
    if isinstance(model, (RandomForestRegressor, RandomForestClassifier, ExtraTreesRegressor,
                          ExtraTreesClassifier)):
        return _read_forest
    raise TypeError(f"`model`: expected a fitted {_SUPPORTED}; got {type(model).__name__}")


def _fitted(model, attribute):
    if not hasattr(model, attribute):
        raise ValueError(f"`model`: this {type(model).__name__} is not fitted; call fit first")


def _read_bag(model, X, X_train, y_train):
    """bagwise's own bags: ``in_bag_`` and ``member_predictions``."""
    _fitted(model, "in_bag_")
    if model.in_bag_.dtype.kind == "f":
        raise ValueError(f"`model`: this {type(model).__name__} was fit with "
                         "scheme='bayesian': continuous row weights, not in-bag counts, so no "
                         "row is ever out of bag")
    if model.scheme == "none":
        raise ValueError(f"`model`: this {type(model).__name__} was fit with scheme='none': "
                         "every member saw every training row, so nothing is out of bag")
    counts = in_bag_counts(model.in_bag_)
    n_rows = counts.shape[1]
    members = model.member_predictions(X)
    train = None
    if X_train is not None:
        _rows_of(X_train, n_rows, type(model).__name__)
        train = model.member_predictions(X_train)
    classes = getattr(model, "classes_", None)
    return _result(model, members, counts, train, y_train, classes)


def _read_bagging(model, X, X_train, y_train):
    """scikit-learn's bagging: ``estimators_samples_``, ``estimators_features_``."""
    from sklearn.base import is_classifier
    from sklearn.utils.validation import validate_data

    _fitted(model, "estimators_")
    name = type(model).__name__
    samples = model.estimators_samples_
    if len(samples) != len(model.estimators_):
        raise ValueError(f"`model`: this {name} keeps the draws of {len(samples)} of its "
                         f"{len(model.estimators_)} members (a warm-started fit); refit it "
                         "in one call to read its in-bag counts")
    n_rows = _n_rows(model, X_train)
    counts = in_bag_counts(np.stack([np.bincount(np.asarray(s), minlength=n_rows)
                                     for s in samples]))
    if counts.shape[1] != n_rows:
        raise ValueError(f"`model`: its members drew rows beyond the {n_rows:,} training rows")
    if not model.bootstrap and np.all(counts > 0):
        raise ValueError(f"`model`: this {name} gives every member every training row "
                         "(bootstrap=False with max_samples covering all rows): nothing is "
                         "out of bag and nothing was resampled")
    features = model.estimators_features_
    classification = is_classifier(model)
    n_classes = len(model.classes_) if classification else None

    def predict(rows):
        rows = validate_data(model, rows, accept_sparse=["csr", "csc"], dtype=None,
                             ensure_all_finite=False, reset=False)
        out = []
        for member, columns in zip(model.estimators_, features):
            part = rows[:, columns]
            if not classification:
                out.append(_one_output(member.predict(part), name))
                continue
            if hasattr(member, "predict_proba"):
                proba = np.asarray(member.predict_proba(part), dtype=np.float64)
                full = np.zeros((proba.shape[0], n_classes))
                full[:, np.asarray(member.classes_, dtype=np.int64)] = proba
            else:
                votes = np.asarray(member.predict(part), dtype=np.int64)
                full = np.zeros((votes.shape[0], n_classes))
                full[np.arange(votes.shape[0]), votes] = 1.0
            out.append(full)
        return np.stack(out)

    return _predicted(model, predict, X, X_train, y_train, counts, n_rows, classification)


@contextlib.contextmanager
def _overflow_named(name: str):
    """A RuntimeWarning of the model's own input conversion (values beyond float32 cast
    to infinity for scikit-learn's trees) as a ``ValueError`` naming the argument."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        try:
            yield
        except RuntimeWarning as err:
            raise ValueError(f"`{name}`: the model cannot read these values ({err}; "
                             "scikit-learn's trees read X as float32, at most 3.4e38)") from None


def _predicted(model, predict, X, X_train, y_train, counts, n_rows, classification):
    """The result of a scikit-learn reader: ``predict`` at ``X`` and, when given, at the
    checked ``X_train``."""
    train = None
    if X_train is not None:
        _rows_of(X_train, n_rows, type(model).__name__)
        with naming("X_train"), _overflow_named("X_train"):
            train = predict(X_train)
    with naming("X"), _overflow_named("X"):
        points = predict(X)
    return _result(model, points, counts, train, y_train,
                   model.classes_ if classification else None)


def _read_forest(model, X, X_train, y_train):
    """scikit-learn's forests: the counts rebuilt from every tree's seed."""
    from sklearn.base import is_classifier
    from sklearn.utils.validation import validate_data

    _fitted(model, "estimators_")
    name = type(model).__name__
    if not model.bootstrap:
        raise ValueError(f"`model`: this {name} was fit with bootstrap=False: every tree saw "
                         "every training row, so nothing is out of bag; fit it with "
                         "bootstrap=True")
    if getattr(model, "n_outputs_", 1) != 1:
        raise ValueError(f"`model`: this {name} has {model.n_outputs_} outputs; only one "
                         "target column is supported")
    n_rows = _n_rows(model, X_train)
    counts = in_bag_counts(_forest_counts(model, n_rows))
    classification = is_classifier(model)
    n_classes = len(model.classes_) if classification else None

    def predict(rows):
        rows = validate_data(model, rows, dtype=np.float32, accept_sparse="csr",
                             ensure_all_finite=False, reset=False)
        out = []
        for tree in model.estimators_:
            if not classification:
                out.append(_one_output(tree.predict(rows), name))
                continue
            proba = np.asarray(tree.predict_proba(rows), dtype=np.float64)
            if proba.shape[1] != n_classes:
                full = np.zeros((proba.shape[0], n_classes))
                full[:, np.asarray(tree.classes_, dtype=np.int64)] = proba
                proba = full
            out.append(proba)
        return np.stack(out)

    return _predicted(model, predict, X, X_train, y_train, counts, n_rows, classification)


def _forest_counts(model, n_rows: int) -> np.ndarray:
    """In-bag counts of a scikit-learn forest, rebuilt from each tree's integer seed by the
    route of ``sklearn.ensemble._forest._generate_sample_indices`` (see the module
    docstring)."""
    name = type(model).__name__
    weights = getattr(model, "_sample_weight", None)
    if weights is not None:
        weights = np.asarray(weights, dtype=np.float64)
        if weights.shape != (n_rows,):
            raise ValueError(f"`model`: this {name} keeps {weights.shape} row weights for "
                             f"{n_rows:,} training rows")
        p = weights / np.sum(weights)
    n_draws = _forest_draws(model, n_rows, weights)
    kept = getattr(model, "_n_samples_bootstrap", None)
    if kept is not None and int(kept) != n_draws:
        raise ValueError(f"`model`: this {name} drew {int(kept):,} rows per tree where "
                         f"max_samples={model.max_samples!r} gives {n_draws:,}; this version "
                         "of scikit-learn samples differently from the route bagwise reads")
    counts = np.empty((len(model.estimators_), n_rows), dtype=np.int64)
    for m, tree in enumerate(model.estimators_):
        seed = tree.random_state
        if isinstance(seed, bool) or not isinstance(seed, numbers.Integral):
            raise ValueError(f"`model`: tree {m} of this {name} has no integer seed "
                             f"(random_state={seed!r}), so its draws cannot be rebuilt")
        stream = np.random.RandomState(int(seed))
        if weights is None:
            rows = stream.randint(0, n_rows, n_draws)
        else:
            rows = stream.choice(n_rows, n_draws, replace=True, p=p)
        counts[m] = np.bincount(rows, minlength=n_rows)
    _check_first_tree(model, counts[0])
    return counts


def _forest_draws(model, n_rows: int, weights) -> int:
    """Rows each tree draws: ``_get_n_samples_bootstrap`` of scikit-learn."""
    share = model.max_samples
    if share is None:
        return n_rows
    if isinstance(share, numbers.Integral):
        return int(share)
    total = n_rows if weights is None else float(np.sum(weights))
    return max(int(share * total), 1)


def _check_first_tree(model, counts: np.ndarray) -> None:
    """The first tree's counts against scikit-learn's own rebuild of its draws, where the
    installed version has one (``_get_estimators_indices``, private: skipped without it)."""
    rebuild = getattr(model, "_get_estimators_indices", None)
    if rebuild is None:
        return
    try:
        first = np.asarray(next(iter(rebuild())))
    except Exception:  # noqa: BLE001 - a private helper that changed: the check is skipped
        return
    if first.ndim != 1 or not np.array_equal(np.bincount(first, minlength=len(counts)), counts):
        raise ValueError(f"`model`: the in-bag counts rebuilt from the seeds of this "
                         f"{type(model).__name__} disagree with scikit-learn's own record of "
                         "its draws; this version of scikit-learn samples differently from "
                         "the route bagwise reads")


def _n_rows(model, X_train) -> int:
    """Training rows of a scikit-learn ensemble: its own record, else ``X_train``'s rows,
    else the length of its out-of-bag predictions."""
    kept = getattr(model, "_n_samples", None)
    if isinstance(kept, numbers.Integral):
        return int(kept)
    if X_train is not None:
        return _rows_of(X_train, None, type(model).__name__)
    for attribute in ("oob_prediction_", "oob_decision_function_"):
        if hasattr(model, attribute):
            return len(getattr(model, attribute))
    raise ValueError(f"`X_train`: this {type(model).__name__} does not record how many "
                     "rows it was fit on; give the training rows")


def _rows_of(X_train, n_rows: int | None, name: str) -> int:
    from sklearn.utils.validation import _num_samples

    try:
        rows = _num_samples(X_train)
    except TypeError as err:
        raise TypeError(f"`X_train`: expected the training rows, got "
                        f"{type(X_train).__name__} ({err})") from None
    if n_rows is not None and rows != n_rows:
        raise ValueError(f"`X_train`: has {rows:,} rows but the {name} was fit on {n_rows:,}")
    return rows


def _one_output(prediction, name: str) -> np.ndarray:
    prediction = np.asarray(prediction, dtype=np.float64)
    if prediction.ndim == 2 and prediction.shape[1] == 1:
        prediction = prediction[:, 0]
    if prediction.ndim != 1:
        raise ValueError(f"`model`: the members of this {name} predict {prediction.shape[1:]} "
                         "outputs per point; only one target column is supported")
    return prediction


def _targets(y, classes, name: str) -> np.ndarray:
    """Targets as the diagnostics read them: float64 values, or int64 indices into
    ``classes`` of labels as the model predicts them."""
    array = as_array(y, name)
    if array.ndim == 2 and array.shape[1] == 1:
        array = array[:, 0]
    if array.ndim != 1:
        raise ValueError(f"`{name}`: expected a 1-D array of targets, got shape {array.shape}")
    if classes is None:
        if array.dtype.kind not in "fiu":
            raise TypeError(f"`{name}`: expected numbers, got dtype {array.dtype}")
        array = array.astype(np.float64)
        if not np.all(np.isfinite(array)):
            raise ValueError(f"`{name}`: contains NaN or infinite values")
        return array
    order = np.argsort(classes, kind="stable")
    ordered = classes[order]
    try:
        at = np.clip(np.searchsorted(ordered, array), 0, len(classes) - 1)
        known = ordered[at] == array
    except (TypeError, ValueError):
        at, known = np.zeros(len(array), dtype=np.int64), np.zeros(len(array), dtype=bool)
    if not np.all(known):
        label = array[np.argmin(known)]
        label = label.item() if isinstance(label, np.generic) else label
        raise ValueError(f"`{name}`: label {label!r} is not one of the model's classes "
                         f"{classes.tolist()} (give labels as the model predicts them)")
    return order[at].astype(np.int64)


def _result(model, members, counts, train, y_train, classes) -> EnsembleArrays:
    members = np.ascontiguousarray(members, dtype=np.float64)
    n_rows = counts.shape[1]
    if classes is not None:
        classes = np.asarray(classes)
    if y_train is not None:
        y_train = _targets(y_train, classes, "y_train")
        if len(y_train) != n_rows:
            raise ValueError(f"`y_train`: has {len(y_train):,} values but the "
                             f"{type(model).__name__} was fit on {n_rows:,} rows")
    if train is not None:
        train = np.ascontiguousarray(train, dtype=np.float64)
    return EnsembleArrays(
        members=members, counts=counts, train_members=train, y_train=y_train, classes=classes,
        model=type(model).__name__, kind="probabilities" if members.ndim == 3 else "values",
        n_members=members.shape[0], n_points=members.shape[1], n_rows=n_rows)
