"""Bagged ensembles in one line: `BagRegressor` and `BagClassifier`.

Members are native Rust learners (``"linear"``, ``"neighbors"``, and ``"tree"`` when the
build has it) fit in one parallel call with the in-bag counts as row weights, or clones of
any scikit-learn-compatible estimator fit on the resampled rows.
"""

from __future__ import annotations

import numbers
import secrets
import warnings

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin, clone
from sklearn.utils import _safe_indexing
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import (
    _num_samples,
    check_consistent_length,
    check_is_fitted,
    column_or_1d,
    validate_data,
)

from . import _core, persistence
from ._chunked import is_lazy
from ._learners import LEARNERS, register_estimator
from ._progress import progress_callback
from ._validation import LARGEST_COUNT, n_jobs_value, naming, positive_int, renamed_arguments
from ._warnings import warn
from .resampling import LITTLE_BAGS_FRACTION, check_group_size, resample

__all__ = ["BagClassifier", "BagRegressor"]

_SCHEMES = ("bootstrap", "subsample", "bayesian", "little_bags", "none")
_BACKENDS = ("auto", "local", "dask")
_CRITERIA = ("gini", "entropy")
_SPLITTERS = ("auto", "exact", "histogram")
# Warnings scikit-learn raises per member when the feature names of ``X`` and of the
# training rows disagree; the bag has already said so once for all of its members.
_MEMBER_FEATURE_NAMES = r"X (does not have valid|has) feature names"


def _seed_of(random_state) -> int:
    """The 64-bit seed of the members: an int as is (the same members for the same int),
    ``None`` a fresh one from the operating system, a `numpy.random.RandomState` one draw
    from it (scikit-learn's convention for ``random_state``)."""
    if isinstance(random_state, np.random.RandomState):
        high, low = random_state.randint(0, 2**32, size=2, dtype=np.uint64)
        return int(high) << 32 | int(low)
    if random_state is None:
        return secrets.randbits(64)
    if isinstance(random_state, bool) or not isinstance(random_state, numbers.Integral):
        raise TypeError("`random_state`: expected a non-negative integer, a "
                        f"numpy.random.RandomState or None, got {type(random_state).__name__}")
    seed = int(random_state)
    if not 0 <= seed < 2**64:
        raise ValueError(f"`random_state`: must lie in [0, 2**64), got {seed}")
    return seed


def _number(value, name: str, kind: type = numbers.Real, *, optional: bool = False):
    """``value`` unchanged if it is a number of ``kind`` (not a bool; ``None`` when
    ``optional``); the core checks its range and names ``name``."""
    if value is None and optional:
        return value
    if isinstance(value, bool) or not isinstance(value, kind):
        expected = "an integer" if kind is numbers.Integral else "a number"
        raise TypeError(f"`{name}`: expected {expected}, got {type(value).__name__}")
    if kind is numbers.Integral and abs(int(value)) > LARGEST_COUNT:
        raise OverflowError(f"`{name}`: {value} does not fit in 64 bits")
    return value


def _bag_iv(est: _Bag, classification: bool) -> dict:
    """Check the estimator's own parameters and convert the learner's; the core checks
    the learner parameters' values (``max_depth``, ``min_leaf``, ``split_features``,
    ``neighbors``, ``penalty``) once, naming each."""
    learner = est.learner
    if isinstance(learner, str):
        entry = LEARNERS.get(learner)
        if entry is None:
            raise ValueError(
                f"`learner`: expected one of {tuple(LEARNERS)} or an estimator object, got {learner!r}"
            )
        if not entry.available:
            raise ValueError(f"`learner`: the native {learner} learner is not built in this version")
        if classification and not entry.classification:
            raise ValueError(f"`learner`: {learner!r} is least squares, for BagRegressor only")
    else:
        needed = ("fit", "predict_proba") if classification else ("fit", "predict")
        missing = [m for m in needed if not callable(getattr(learner, m, None))]
        if missing:
            raise TypeError(
                f"`learner`: expected one of {tuple(LEARNERS)} or an estimator with "
                f"{' and '.join(needed)}; {type(learner).__name__} lacks {', '.join(missing)}"
            )
    n_members = positive_int(est.n_members, "n_members")
    if est.scheme not in _SCHEMES:
        raise ValueError(f"`scheme`: expected one of {_SCHEMES}, got {est.scheme!r}")
    fraction = est.fraction
    if isinstance(fraction, bool) or not isinstance(fraction, numbers.Real):
        raise TypeError(f"`fraction`: expected a number, got {type(fraction).__name__}")
    if est.scheme == "none" and fraction != 1:
        raise ValueError("`fraction`: scheme='none' gives every member all rows; leave fraction at 1.0")
    group_size = _little_bags_iv(est, n_members, classification) if est.scheme == "little_bags" else 0
    if group_size and fraction == 1:
        # Left at its default: the share whose bias stays small (bench_little_bags.py).
        fraction = LITTLE_BAGS_FRACTION
    _number(est.max_depth, "max_depth", numbers.Integral, optional=True)
    _number(est.min_leaf, "min_leaf", numbers.Integral)
    split = est.split_features
    if split is not None:
        if isinstance(split, bool) or not isinstance(split, numbers.Real):
            raise TypeError(f"`split_features`: expected None, an int or a fraction, got {split!r}")
        if isinstance(split, numbers.Integral):
            _number(split, "split_features", numbers.Integral)
        if not isinstance(split, numbers.Integral) and not 0 < split <= 1:
            # A fraction is converted here, into a count of features.
            raise ValueError(f"`split_features`: a fraction must lie in (0, 1], got {split}")
    _number(est.neighbors, "neighbors", numbers.Integral)
    _number(est.penalty, "penalty")
    if not isinstance(est.use_sample_weight, bool):
        raise TypeError("`use_sample_weight`: expected True or False")
    if not isinstance(est.random_member_count, bool):
        raise TypeError("`random_member_count`: expected True or False")
    if est.random_member_count and est.scheme not in ("bootstrap", "subsample"):
        raise ValueError(
            "`random_member_count`: the randomised number of members of the "
            "jackknife+-after-bootstrap is defined for scheme='bootstrap' or 'subsample', got "
            f"{est.scheme!r}"
        )
    if est.random_member_count and classification and est.stratify:
        raise ValueError("`random_member_count`: is defined for plain resampling, not with "
                         "stratify=True")
    if est.scheme == "bayesian":
        weighted = (LEARNERS[learner].weighted if isinstance(learner, str)
                    else est.use_sample_weight)
        if not weighted:
            raise ValueError(
                "`scheme`: 'bayesian' weights are continuous, so they cannot be used as row "
                "multiplicities; use learner='linear' or a wrapped estimator with "
                "use_sample_weight=True"
            )
    if classification:
        if est.criterion not in _CRITERIA:
            raise ValueError(f"`criterion`: expected one of {_CRITERIA}, got {est.criterion!r}")
        if not isinstance(est.stratify, bool):
            raise TypeError("`stratify`: expected True or False")
    if est.splitter not in _SPLITTERS:
        raise ValueError(f"`splitter`: expected one of {_SPLITTERS}, got {est.splitter!r}")
    if est.progress is not None and not isinstance(est.progress, bool) and not callable(est.progress):
        raise TypeError(f"`progress`: expected a bool or a callable, got {type(est.progress).__name__}")
    if not isinstance(est.backend, str) or est.backend not in _BACKENDS:
        raise ValueError(f"`backend`: expected one of {_BACKENDS}, got {est.backend!r}")
    return {
        "learner": learner, "n_members": n_members, "fraction": float(fraction),
        "group_size": group_size, "seed": _seed_of(est.random_state),
        "n_jobs": n_jobs_value(est.n_jobs), "backend": est.backend,
    }


def _little_bags_iv(est: _Bag, n_members: int, classification: bool) -> int:
    """ℓ of ``scheme="little_bags"``: an integer >= 2 dividing ``n_members``; the fraction
    (unless left at 1.0) below one half; no stratification."""
    group_size = check_group_size(_number(est.group_size, "group_size", numbers.Integral),
                                  n_members)
    if est.fraction != 1 and not 0 < est.fraction < 0.5:
        raise ValueError(
            "`fraction`: must lie in (0, 0.5) for scheme='little_bags' (each member's share "
            f"of all rows, drawn inside its group's half), got {est.fraction}; leave it at "
            f"1.0 for the default share {LITTLE_BAGS_FRACTION}")
    if classification and est.stratify:
        raise ValueError("`stratify`: scheme='little_bags' draws half-samples of all rows; "
                         "stratified little bags are not supported")
    return int(group_size)


def _distributed_in_memory(value):
    from ._distributed import in_memory

    return in_memory(value)


def _member_values(member, X, classes):
    """One fitted clone's values at ``X`` (regression, ``classes`` None) or its class
    probabilities in the columns of ``classes`` (a class it never saw gets 0)."""
    if classes is None:
        return np.asarray(member.predict(X), dtype=np.float64).reshape(-1)
    proba = np.asarray(member.predict_proba(X), dtype=np.float64)
    out = np.zeros((proba.shape[0], len(classes)))
    out[:, np.searchsorted(classes, member.classes_)] = proba
    return out


class _Predictor:
    """What a fitted bag needs to predict, and nothing else (no training rows): the native
    model or the fitted clones, and the classes. It is the one object a lazy prediction
    sends to each worker; the in-memory path uses it too, so both compute alike."""

    __slots__ = ("classes", "members", "model", "n_jobs")

    def __init__(self, model, members, classes, n_jobs):
        self.model, self.members, self.classes, self.n_jobs = model, members, classes, n_jobs

    def member_predictions(self, X, progress=None) -> np.ndarray:
        """``progress``: None or a ``callback(done, total)`` (never kept: this object
        travels to workers)."""
        if self.model is not None:
            try:
                return self.model.member_predictions(X, self.n_jobs, progress)
            except (ValueError, TypeError) as err:  # the core's `x` is the estimator's `X`
                raise renamed_arguments(err, {"x": "X"}) from None
        values = []
        with warnings.catch_warnings():
            # The bag has warned once if the feature names disagree; not once per member.
            warnings.filterwarnings("ignore", _MEMBER_FEATURE_NAMES, UserWarning)
            for member in self.members:
                values.append(_member_values(member, X, self.classes))
                if progress is not None:
                    progress(len(values), len(self.members))
        return np.stack(values)

    def mean(self, X, progress=None) -> np.ndarray:
        """The members' mean, summed in member order at every point whatever the number
        of points (numpy's ``mean(axis=0)`` switches to pairwise sums for one point), so
        a chunk of points gets the same bits as the whole."""
        members = self.member_predictions(X, progress)
        total = members[0].copy()
        for values in members[1:]:
            total += values
        return total / len(members)

    def labels(self, X) -> np.ndarray:
        return self.classes[np.argmax(self.mean(X), axis=1)]


def _member_seeds(template, seed: int, n_members: int) -> list:
    """One reproducible ``random_state`` per wrapped member (None when the estimator has
    none), as the member streams of the native path: member m's seed does not depend on
    which group or machine fits it."""
    if "random_state" not in template.get_params(deep=False):
        return [None] * n_members
    children = np.random.SeedSequence(seed).spawn(n_members)
    return [int(c.generate_state(1)[0] & 0x7FFFFFFF) for c in children]


def _fit_member(template, X, y, counts, use_sample_weight, random_state):
    """Clone ``template`` and fit it on one member's resample."""
    member = clone(template)
    if random_state is not None:
        member.set_params(random_state=random_state)
    if use_sample_weight:
        member.fit(X, y, sample_weight=np.asarray(counts, dtype=np.float64))
    else:
        rows = np.repeat(np.arange(len(counts)), np.asarray(counts, dtype=np.int64))
        member.fit(_safe_indexing(X, rows), y[rows])
    return member


class _Bag(BaseEstimator):
    """Shared machinery of `BagRegressor` and `BagClassifier`."""

    _classification = False

    # -- fitting --------------------------------------------------------------------------
    def fit(self, X, y, groups=None):
        """Fit every member on its resample of the rows of ``X``.

        On a cluster (``backend``; by default when ``X`` or ``y`` is a dask array or
        DataFrame and a ``dask.distributed`` client is active) the members are fitted in
        groups of consecutive members on the workers and joined in member order into one
        ensemble: the in-bag counts are drawn here as in the one-machine fit, and member m
        draws its own randomness from member stream m wherever it is fitted (wrapped
        estimators: member m's ``random_state`` from the seed), so ``in_bag_`` and every
        member's predictions equal the one-machine fit with the same seed, bit for bit.

        What travels: the targets (and a lazy ``y``) are computed here and broadcast once
        to every worker; the training rows go once to every worker that fits a group (a
        lazy ``X`` is joined into one array on one worker and fetched from there, an
        in-memory one is scattered from here); each group receives only its own rows of
        the counts and sends back its fitted members. Every worker holds the whole
        training set, so it must fit a worker's memory: a fit whose rows take more than a
        third of the smallest worker's ``memory_limit`` (the learner's own working copies
        need about twice the rows again) is refused with a ``ValueError`` naming both
        sizes; fit a sample of the rows, give the workers more memory, or fit in one
        process with ``backend="local"``. The fitted members are gathered into this bag;
        the bag keeps a lazy ``X`` lazily (`out_of_bag_predictions` computes it here when
        called without ``X``).

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features)
            Training rows. Native learners need numbers (float32 is kept as is); wrapped
            estimators receive ``X`` in its own type (e.g. a DataFrame, a dask DataFrame
            as one pandas DataFrame on each worker), row-indexed.
        y : array-like of shape (n_rows,)
            Targets (regression) or class labels (classification).
        groups : array-like of shape (n_rows,), optional
            Group labels: whole groups are resampled (cluster bootstrap).

        Returns
        -------
        self
        """
        self._forget()
        try:
            self._fit(X, y, groups)
        except BaseException:
            # An error or Ctrl-C leaves the estimator unfitted, never half fitted.
            self._forget()
            raise
        return self

    def _forget(self):
        for name in ("in_bag_", "n_features_in_", "feature_names_in_", "classes_", "members_",
                     "seed_", "_model", "_train_X", "_train_y", "count_gram_",
                     "_counted_at_random", "_scattered", "member_indices_"):
            self.__dict__.pop(name, None)

    def _fit(self, X, y, groups):
        from . import _distributed

        params = _bag_iv(self, self._classification)
        learner = params["learner"]
        native = isinstance(learner, str)
        client = _distributed.fit_client(params["backend"], X, y)
        if client is None:
            X = _distributed.in_memory(X)
        y, groups = _distributed.in_memory(y), _distributed.in_memory(groups)
        if native and is_lazy(X):
            validate_data(self, _distributed.schema(X), skip_check_array=True)
            X = _distributed.lazy_design(X)
            y = self._lazy_targets(y, X.shape[0])
        elif native:
            with naming("X", targets="y"):
                X, y = validate_data(self, X, y, dtype=[np.float64, np.float32],
                                     y_numeric=not self._classification, ensure_min_samples=2)
        else:
            validate_data(self, _distributed.schema(X), skip_check_array=True)
            if y is None:
                raise ValueError(f"{type(self).__name__} requires y to be passed, but the target y is None")
            y = column_or_1d(y, warn=True)
            check_consistent_length(X, y)
            if _num_samples(X) < 2:
                raise ValueError(f"`X`: bagging needs at least 2 rows, got {_num_samples(X)} sample")
        n_rows = len(y)
        if self._classification:
            with naming("y"), warnings.catch_warnings():
                warnings.simplefilter("error", RuntimeWarning)
                try:
                    check_classification_targets(y)
                except RuntimeWarning as err:  # numpy casting huge floats while looking
                    raise ValueError(f"`y`: cannot be read as class labels ({err})") from None
            classes, codes = np.unique(y, return_inverse=True)
            codes = codes.reshape(-1)
        else:
            classes, codes = None, None
        if self.random_member_count:
            params["n_members"] = self._random_count(n_rows, params, groups)
        counts = self._draw(n_rows, params, codes, groups)
        if native:
            # Classification passes the class codes (int64, indices into ``classes_``),
            # converted from the labels here once.
            target = codes.astype(np.int64) if self._classification else np.asarray(y, np.float64)
            n_classes = None if classes is None else len(classes)
            if client is None:
                model = self._fit_native(X, target, counts, params, n_classes)
            else:
                try:
                    model = _distributed.fit_native(client, LEARNERS[learner], X, target, counts,
                                                    self._native_options(X, params, n_classes),
                                                    self.progress)
                except (ValueError, TypeError) as err:  # as in the local fit: `x` is `X`
                    raise renamed_arguments(err, {"x": "X"}) from None
            members = None
        else:
            model = None
            members = self._fit_wrapped(X, y, counts, params, client)
        # Everything succeeded: publish the fitted state at once.
        self.in_bag_ = counts
        self.seed_ = params["seed"]
        if classes is not None:
            self.classes_ = classes
        if native:
            self._model = model
        else:
            self.members_ = members
        self._train_X = X
        self._train_y = codes if self._classification else np.asarray(y, dtype=np.float64)
        self._counted_at_random = self.random_member_count

    def _random_count(self, n_rows, params, groups):
        """The number of members to fit when ``random_member_count`` is set:
        ``Binomial(n_members, p)`` with ``p = (1 - 1/(n_rows + 1))^m`` for ``m`` draws with
        replacement, ``1 - m/(n_rows + 1)`` without (Kim, Xu & Barber 2020, NeurIPS 33,
        Algorithm 1 and Theorem 1), drawn from the seed (see `_core.random_member_count`)."""
        if groups is not None:
            raise ValueError("`groups`: the randomised number of members is defined for "
                             "resampling single rows, not groups")
        draws = round(n_rows * params["fraction"])
        if draws < 1:
            raise ValueError(f"`fraction`: draws no row of {n_rows}")
        count, _ = _core.random_member_count(params["n_members"], n_rows, draws,
                                             self.scheme == "bootstrap", params["seed"])
        if count < 1:
            raise ValueError(
                f"`n_members`: the randomised number of members drew 0 of {params['n_members']} "
                "(each is kept with probability about e^-1); ask for more members"
            )
        return count

    def _draw(self, n_rows, params, codes, groups):
        n_members = params["n_members"]
        if self.scheme == "none":
            if groups is not None:
                raise ValueError("`groups`: scheme='none' gives every member all rows; groups have no effect")
            return np.ones((n_members, n_rows), dtype=np.uint8)
        strata = codes if self._classification and self.stratify else None
        group_size = params["group_size"] or None
        draw = resample(n_rows, n_members, scheme=self.scheme, fraction=params["fraction"],
                        strata=strata, groups=groups, group_size=group_size, rng=params["seed"],
                        n_jobs=params["n_jobs"])
        if group_size:
            from .uncertainty import LITTLE_BAGS_BIAS_SHARE

            share = draw.draws_per_member / n_rows
            if share > LITTLE_BAGS_BIAS_SHARE:
                warn(f"`fraction`: each little-bags member sees {share:.2f} of the rows, above "
                     f"{LITTLE_BAGS_BIAS_SHARE:g}: the half-sampling variance overstates the "
                     "variance of the ensemble's mean at this share; a smaller fraction "
                     f"(e.g. the default {LITTLE_BAGS_FRACTION}) keeps the bias small")
        return draw.row_weights if self.scheme == "bayesian" else draw.counts

    def _lazy_targets(self, y, n_rows):
        """The targets of a lazy ``X`` (computed here): 1-D, one per row, numbers for
        regression."""
        if y is None:
            raise ValueError(f"{type(self).__name__} requires y to be passed, but the target y is None")
        y = column_or_1d(y, warn=True)
        if len(y) != n_rows:
            raise ValueError(f"`y`: has {len(y):,} values but `X` has {n_rows:,} rows")
        if n_rows < 2:
            raise ValueError(f"`X`: bagging needs at least 2 rows, got {n_rows}")
        if not self._classification and y.dtype.kind not in "fiub":
            raise TypeError(f"`y`: expected numbers for regression, got dtype {y.dtype}")
        return y

    def _native_options(self, X, params, n_classes):
        """The keyword options of the native learner's core ``fit`` (all but ``n_jobs`` and
        ``progress``)."""
        learner = LEARNERS[params["learner"]]
        task = "classification" if self._classification else "regression"
        options = learner.options(self, X, self._classification, params["seed"])
        return {"task": task, "n_classes": n_classes, **options}

    def _fit_native(self, X, target, counts, params, n_classes):
        learner = LEARNERS[params["learner"]]
        options = self._native_options(X, params, n_classes)
        with progress_callback(self.progress, "fitting") as callback:
            try:
                return learner.core().fit(X, target, counts, n_jobs=params["n_jobs"],
                                          progress=callback, **options)
            except (ValueError, TypeError) as err:  # the core's `x` is the estimator's `X`
                raise renamed_arguments(err, {"x": "X"}) from None

    def _fit_wrapped(self, X, y, counts, params, client=None):
        from joblib import Parallel, delayed

        template = params["learner"]
        members = params["n_members"]
        if self.use_sample_weight:
            import inspect

            if "sample_weight" not in inspect.signature(template.fit).parameters:
                raise ValueError(
                    f"`use_sample_weight`: {type(template).__name__}.fit does not accept sample_weight"
                )
        states = _member_seeds(template, params["seed"], members)
        if client is not None:
            from . import _distributed

            return _distributed.fit_wrapped(client, X, y, counts, template,
                                            self.use_sample_weight, states, self.progress)
        n_jobs = -1 if params["n_jobs"] is None else params["n_jobs"]
        tasks = (delayed(_fit_member)(template, X, y, counts[m], self.use_sample_weight, states[m])
                 for m in range(members))
        fitted = []
        with progress_callback(self.progress, "fitting") as callback:
            runner = Parallel(n_jobs=n_jobs, prefer="threads", return_as="generator")
            for member in runner(tasks):
                fitted.append(member)
                if callback is not None:
                    callback(len(fitted), members)
        return fitted

    def __sklearn_is_fitted__(self):
        return hasattr(self, "in_bag_")

    # -- prediction -----------------------------------------------------------------------
    @property
    def _native(self) -> bool:
        return "_model" in self.__dict__

    def _check_X(self, X):
        check_is_fitted(self)
        with naming("X"):
            if self._native:
                return validate_data(self, X, reset=False, dtype=[np.float64, np.float32])
            validate_data(self, X, reset=False, skip_check_array=True)
        return X

    def _predictor(self, n_jobs) -> _Predictor:
        return _Predictor(self.__dict__.get("_model"), self.__dict__.get("members_"),
                          self.classes_ if self._classification else None, n_jobs)

    def _lazy_points(self, X, what):
        """``member_predictions`` (``what="member_predictions"``), the mean or the labels
        at a lazy ``X``: a dask array chunked like its points, computed on the workers."""
        from . import _distributed

        check_is_fitted(self)
        validate_data(self, _distributed.schema(X), reset=False, skip_check_array=True)
        if self._native:
            X = _distributed.lazy_design(X)
        n_members = self._model.n_members if self._native else len(self.members_)
        leading = (n_members,) if what == "member_predictions" else ()
        classes = (len(self.classes_),) if self._classification and what != "labels" else ()
        dtype = self.classes_.dtype if what == "labels" else np.float64
        # One thread per chunk's task: dask runs the chunks in parallel.
        return _distributed.lazy_points(X, self._predictor(1), what, leading, classes, dtype,
                                        frame=not self._native,
                                        scattered=self.__dict__.setdefault("_scattered", {}))

    def __getstate__(self):
        # The model scattered to a cluster's workers for lazy predictions stays behind.
        state = super().__getstate__()
        state.pop("_scattered", None)
        return state

    def member_predictions(self, X) -> np.ndarray:
        """Every member's prediction at every point.

        Parameters
        ----------
        X : array-like of shape (n_points, n_features)
            In memory, or lazy: a dask array or DataFrame (or a zarr array).

        Returns
        -------
        ndarray of float64, or a dask array for a lazy ``X``
            ``(members, n_points)`` for regression, ``(members, n_points, n_classes)``
            class probabilities for classification (columns in the order of
            ``classes_``). Native learners answer in one parallel call.

            A lazy ``X`` gives a dask array chunked like the points of ``X`` (one chunk
            along the members), equal bit for bit to the in-memory answer. Nothing is
            computed until asked; then each chunk is predicted where it lives, on the
            workers of the active ``dask.distributed`` client (or dask's threads without
            one), and no chunk of ``X`` travels to the client. What travels to each worker
            is the fitted model once, however many chunks it predicts (the native
            ensemble, or the fitted clones and the classes; never the training rows):
            with a client it is scattered from here to every worker on the first lazy
            call and stays on the cluster for later calls while the bag lives (until it
            is fitted again or deleted; dask's active memory manager may drop an idle
            extra copy, which a worker then fetches from another worker, never from
            here); without one it is a single key of the graph that every chunk's task
            depends on.
        """
        if is_lazy(X):
            return self._lazy_points(X, "member_predictions")
        X = self._check_X(X)
        with progress_callback(self.progress, "predicting", "prediction") as callback:
            return self._predictor(self.n_jobs).member_predictions(X, callback)

    def out_of_bag_predictions(self, X=None) -> np.ndarray:
        """Each member's predictions on the training rows, NaN where it saw the row.

        Parameters
        ----------
        X : array-like, optional
            The training rows. Needed only after `bagwise.load` (saved files do not keep
            the training data); otherwise the rows given to `fit` are used.

        Returns
        -------
        ndarray of float64
            Shaped as `member_predictions` on the training rows, NaN where the member drew
            the row (in bag): only the out-of-bag entries are predictions (native learners
            compute only those); with ``scheme="none"`` every entry is NaN.
        """
        check_is_fitted(self)
        if self.in_bag_.dtype.kind == "f":
            raise ValueError(
                "`scheme`: 'bayesian' gives every row a positive weight in every member, so "
                "no row is out of bag"
            )
        if X is None:
            if "_train_X" not in self.__dict__:
                raise ValueError("`X`: give the training rows (a loaded ensemble does not keep them)")
            # The training rows of a fit on dask are computed here.
            X = _distributed_in_memory(self._train_X)
        else:
            X = self._check_X(X)
        if _num_samples(X) != self.in_bag_.shape[1]:
            raise ValueError(
                f"`X`: has {_num_samples(X)} rows but the ensemble was fit on {self.in_bag_.shape[1]}"
            )
        if self._native:
            with progress_callback(self.progress, "predicting", "prediction") as callback:
                return self._model.out_of_bag_predictions(X, self.in_bag_, self.n_jobs, callback)
        classes = self.classes_ if self._classification else None
        shape = (self.in_bag_.shape[1],) + ((len(self.classes_),) if self._classification else ())
        out = np.full((len(self.members_),) + shape, np.nan)
        with warnings.catch_warnings(), \
                progress_callback(self.progress, "predicting", "member") as callback:
            warnings.filterwarnings("ignore", _MEMBER_FEATURE_NAMES, UserWarning)
            for m, member in enumerate(self.members_):
                rows = np.flatnonzero(self.in_bag_[m] == 0)
                if len(rows):
                    out[m, rows] = _member_values(member, _safe_indexing(X, rows), classes)
                if callback is not None:
                    callback(m + 1, len(self.members_))
        return out

    # -- diagnostics ----------------------------------------------------------------------
    def _integer_counts(self, name):
        check_is_fitted(self)
        if self.in_bag_.dtype.kind == "f":
            raise ValueError(
                f"`scheme`: {name} needs integer in-bag counts; 'bayesian' gives continuous "
                "weights"
            )
        return self.in_bag_

    def _targets(self, y, n_points, name="y"):
        """``y`` as the diagnostics read it: float64 values, or class codes (index into
        ``classes_``) for classification."""
        if y is None:
            raise ValueError(f"`{name}`: give the targets")
        with naming(name):
            y = column_or_1d(y)
        if len(y) != n_points:
            raise ValueError(f"`{name}`: has {len(y)} values for {n_points} points")
        if not self._classification:
            if y.dtype.kind not in "fiu":
                raise TypeError(f"`{name}`: expected numbers, got dtype {y.dtype}")
            return np.asarray(y, dtype=np.float64)
        with naming(name):
            codes = np.searchsorted(self.classes_, y)
        codes = np.minimum(codes, len(self.classes_) - 1)
        unknown = self.classes_[codes] != y
        if np.any(unknown):
            label = y[np.argmax(unknown)]
            label = label.item() if isinstance(label, np.generic) else label
            raise ValueError(f"`{name}`: label {label!r} is not one of the "
                             f"fitted classes {self.classes_.tolist()}")
        return codes.astype(np.int64)

    def _training_members(self, X=None, y=None):
        """(out-of-bag member predictions with in-bag entries filled, training targets)."""
        counts = self._integer_counts("the out-of-bag error")
        predictions = self.out_of_bag_predictions(X)
        in_bag = counts > 0
        if self._classification:
            fill = 1.0 / predictions.shape[2]   # any valid distribution: in-bag rows are unused
            predictions = np.where(in_bag[:, :, None], fill, predictions)
        else:
            predictions = np.where(in_bag, 0.0, predictions)
        if y is None:
            if "_train_y" not in self.__dict__:
                raise ValueError("`y`: give the training targets (a loaded ensemble does not "
                                 "keep them)")
            target = self._train_y
        else:
            target = self._targets(y, counts.shape[1])
        return predictions, target

    def out_of_bag(self, loss=None, *, X=None, y=None):
        """The out-of-bag predictions and error on the training rows (Breiman 1996).

        Each member predicts only its out-of-bag rows (see `out_of_bag_predictions`); the
        result is `bagwise.out_of_bag` of those predictions, ``in_bag_`` and the training
        targets. Classification passes the member probabilities and the targets as class
        codes (indices into ``classes_``).

        Parameters
        ----------
        loss : str, optional
            Headline error, as in `bagwise.out_of_bag`.
        X, y : array-like, optional
            The training rows and targets; needed only after `bagwise.load`.

        Returns
        -------
        OutOfBag
        """
        from .out_of_bag import out_of_bag

        members, target = self._training_members(X, y)
        return out_of_bag(members, self.in_bag_, target, loss=loss, n_jobs=self.n_jobs)

    def _count_gram(self, jackknife=False):
        """The `CountGram` of ``in_bag_``, built on first use and kept in ``count_gram_``."""
        from .uncertainty import CountGram

        counts = self._integer_counts("the prediction variance")
        if self.scheme == "little_bags":
            raise ValueError(
                "`scheme`: the infinitesimal jackknife and the jackknife are not valid for "
                "scheme='little_bags' counts (members of a group share a half-sample, so they "
                "are not independent draws); prediction_variance(X) uses method='little_bags'")
        gram = self.__dict__.get("count_gram_")
        if gram is None or (jackknife and not gram._gram.has_jackknife):
            scheme = "subsample" if self.scheme == "subsample" else None
            gram = CountGram(counts, scheme=scheme, jackknife=jackknife, n_jobs=self.n_jobs)
            self.count_gram_ = gram
        return gram

    def prediction_variance(self, X, *, method=None, corrected=True):
        """Variance and standard error of the ensemble's prediction at new points.

        `bagwise.prediction_variance` of `member_predictions` (for classification: every
        class's probability, arrays of shape (n_points, n_classes) in the order of
        ``classes_``) and ``in_bag_``. The Gram matrix of the counts is built on the first call
        (O(members² · n_rows)) and kept in ``count_gram_``, so later calls cost only the
        quadratic forms; a loaded or unpickled ensemble rebuilds it when first needed.
        A bag fitted with ``scheme="little_bags"`` uses the bootstrap of little bags (no
        Gram matrix; one pass over the member predictions).

        Parameters
        ----------
        X : array-like of shape (n_points, n_features)
        method : {"ij", "jackknife", "little_bags"}, optional
            Default: ``"little_bags"`` for ``scheme="little_bags"`` (the only method valid
            for its counts), else ``"ij"``.
        corrected : bool
            As in `bagwise.prediction_variance`.

        Returns
        -------
        PredictionVariance
        """
        little = self.scheme == "little_bags"
        if method is None:
            method = "little_bags" if little else "ij"
        if method not in ("ij", "jackknife", "little_bags"):
            raise ValueError(f"`method`: expected 'ij', 'jackknife' or 'little_bags', got {method!r}")
        if little != (method == "little_bags"):
            raise ValueError(
                f"`method`: {method!r} is not valid for a bag fitted with scheme={self.scheme!r}; "
                + ("use method='little_bags' (members of a group share a half-sample, so the "
                   "jackknives do not apply)" if little else
                   "method='little_bags' needs scheme='little_bags'"))
        if little:
            from .uncertainty import _little_bags

            counts = self._integer_counts("the prediction variance")
            return _little_bags(self.member_predictions(X), counts, self.group_size,
                                corrected, self.n_jobs)
        gram = self._count_gram(jackknife=method == "jackknife")
        return gram.prediction_variance(self.member_predictions(X), method=method,
                                        corrected=corrected, n_jobs=self.n_jobs)

    def prediction_interval(self, X, level=0.9, *, method=None, X_train=None, y_train=None):
        """An interval (regression) or class set (classification) for a **new observation**
        at each point of ``X``, calibrated on the out-of-bag predictions of the training
        rows: `bagwise.prediction_interval` of `member_predictions`, ``in_bag_`` and the
        out-of-bag predictions (class sets in the order of ``classes_``).

        Parameters
        ----------
        X : array-like of shape (n_points, n_features)
        level : float
            Nominal coverage, in (0, 1).
        method : str, optional
            As in `bagwise.prediction_interval` (default: jackknife+ for regression, least
            ambiguous sets for classification).
        X_train, y_train : array-like, optional
            The training rows and targets; needed only after `bagwise.load`.

        Returns
        -------
        PredictionInterval or PredictionSet
        """
        from .intervals import _prediction_interval

        train_members, target = self._training_members(X_train, y_train)
        return _prediction_interval(self.member_predictions(X), self.in_bag_, train_members,
                                    target, level=level, method=method, n_jobs=self.n_jobs,
                                    member_count=self._member_count())

    def _member_count(self) -> str:
        """``"random"`` when the fit drew its number of members (``random_member_count``),
        else ``"fixed"`` (see `bagwise.intervals._guarantee`)."""
        randomised = self.__dict__.get("_counted_at_random", self.random_member_count)
        return "random" if randomised else "fixed"

    def spread(self, X):
        """Between/within split of the members' variance at ``X`` (`bagwise.spread`; every
        class's probability for classification), reusing ``count_gram_``.

        Returns
        -------
        Spread
        """
        gram = self._count_gram()
        return gram.spread(self.member_predictions(X), n_jobs=self.n_jobs)

    def verdict(self, X=None, y=None, *, folds=None, level=0.95, loss=None):
        """Does bagging help this learner? Answered on the training rows, without a
        hold-out set.

        For every training row with at least one out-of-bag member, the ensemble's
        out-of-bag loss ``a_i`` (the members that did not see the row; Breiman 1996) is
        paired with ``b_i``, the loss at the row of a **single model of the same learner
        and settings** fit on the other folds (K-fold cross-validation; a
        native learner as a bag of one member with ``scheme="none"``, a wrapped estimator
        as its `sklearn.base.clone`). The ratio ``R = mean(a) / mean(b)`` gets an interval
        by the delta method on the log scale from the paired rows,
        ``R · exp(±z sd(u)/√n)`` with ``u_i = a_i/mean(a) − b_i/mean(b)`` (the first-order
        expansion of ``log mean(a) − log mean(b)``; the pairing enters through ``sd(u)``),
        and the interval decides the verdict: ``"helps"`` when its upper end is below 1,
        ``"hurts"`` when its lower end is above 1, else ``"no clear difference"``. It is
        never decided from the mean member loss against the ensemble loss. Rows without an
        out-of-bag member are left out of both losses and counted.

        What the interval does and does not account for: it treats the n pairs of losses
        as independent draws, so it accounts for which rows happened to be sampled and, by
        pairing, for rows that are hard for both models; it does **not** account for the
        dependence the shared training data puts between the rows' losses (every row's
        out-of-bag and cross-validated predictions come from models fit on the other
        rows), nor for the randomness of the members and of the fold split. Rajanala,
        Bates, Hastie & Tibshirani (2022) show that intervals for the out-of-bag error
        alone that ignore this dependence undercover; in the ratio much of it cancels,
        because a training set that is hard for one model is hard for the other. The
        estimand is ``R_n``, the ratio of the **expected** test losses over training sets
        of this size (the bag fit on n rows against the single model fit on n rows), not
        the ratio for the two models fitted on this particular training set. The single
        model should learn from nearly as many rows as a row's out-of-bag members do
        (resamples of the other n − 1 rows), hence the default of leave-one-out (up to 100
        folds): with few folds its loss is too high and the ratio leans toward "helps".
        For squared error and the Brier score each row's out-of-bag loss is moved from its
        ``n_i`` (about M/e) out-of-bag members to all M by the finite-ensemble law (see
        `Verdict.ensemble_loss`). ``tests/bench/verdict_coverage.py`` measures the
        coverage of ``R_n`` at 95% by simulation on Friedman #1 (100 rows, 50 members, 200
        training sets, Monte-Carlo se 0.015): bagged full-depth trees 0.940, least
        squares 0.925 (slightly low, as Rajanala et al. lead one to expect); least squares
        at 5 folds only 0.730, its estimated ratio 0.971 against a true 1.002 (the size
        bias, against intervals that are narrow for a stable learner). The coverage of
        each training set's own ratio of its two fitted models is lower (0.885 for trees,
        0.905 for least squares).

        Parameters
        ----------
        X, y : array-like, optional
            The training rows and targets; needed only after `bagwise.load`.
        folds : int, splitter or None
            Folds of the single model's cross-validation: None (default) leave-one-out up
            to 100 rows, else 100 folds; an int (at least 2) uses
            `sklearn.model_selection.KFold` with shuffling seeded from ``seed_``; or any
            object with ``split(X, y)`` such as a ``KFold`` of your own. The single model
            is fit once per fold.
        level : float
            Nominal coverage of the interval of the ratio, in (0, 1).
        loss : str, optional
            The loss the verdict is decided on: ``"squared_error"`` (default) or
            ``"absolute_error"`` for regression; ``"error_rate"`` (default),
            ``"brier_score"`` or ``"log_loss"`` for classification. The others are
            reported beside it, labelled. The error rate is the default for classifiers
            because a single full-depth tree predicts probabilities of 0 and 1 only: its
            Brier score is then twice its error rate and its log loss is set by the 1e-15
            floor, so against those the ensemble gains merely by having probabilities.

        Returns
        -------
        Verdict

        Examples
        --------
        >>> import numpy as np, bagwise
        >>> rng = np.random.default_rng(0)
        >>> X = rng.uniform(-2, 2, size=(200, 2))
        >>> y = np.sin(2 * X[:, 0]) + X[:, 1] + rng.normal(scale=0.3, size=200)
        >>> bag = bagwise.BagRegressor("tree", n_members=50, random_state=0).fit(X, y)
        >>> result = bag.verdict()
        >>> result.verdict, bool(result.ratio_upper < 1)
        ('helps', True)
        """
        from .compare import bag_verdict

        return bag_verdict(self, X, y, folds=folds, level=level, loss=loss)

    def _refit_reference(self, X, X_train, y_train):
        """The single model of this learner fit on all training rows, its predictions at
        ``X`` (``reference="refit"``)."""
        from .compare import single_model, single_predictions

        if X_train is None:
            if "_train_X" not in self.__dict__:
                raise ValueError("`X_train`: reference='refit' needs the training rows (a "
                                 "loaded ensemble does not keep them)")
            X_train = _distributed_in_memory(self._train_X)
        else:
            X_train = self._check_X(X_train)
        if y_train is None:
            if "_train_y" not in self.__dict__:
                raise ValueError("`y_train`: reference='refit' needs the training targets")
            target = self._train_y
        else:
            target = self._targets(y_train, self.in_bag_.shape[1], "y_train")
        fit_y = self.classes_[target] if self._classification else target
        model = single_model(self).fit(X_train, fit_y)
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", _MEMBER_FEATURE_NAMES, UserWarning)
            return single_predictions(self, model, self._check_X(X))

    def diagnose(self, X, y, reference=None, *, X_train=None, y_train=None):
        """The full `bagwise.diagnose` report on a test set.

        The members' predictions at ``X`` are diagnosed against ``y`` with the in-bag counts
        (standard errors, between/within spread) and the out-of-bag predictions on the
        training rows (out-of-bag error).

        Parameters
        ----------
        X : array-like of shape (n_points, n_features)
            Test rows.
        y : array-like of shape (n_points,)
            Test targets (class labels as in ``classes_`` for classification).
        reference : array-like or "refit", optional
            A single model's predictions at ``X`` (regression) or its class probabilities
            ``(n_points, n_classes)`` in the order of ``classes_`` (classification); or
            ``"refit"``: fit that single model here, with the same learner and settings on
            all training rows (a native learner as a bag of one member with
            ``scheme="none"``, a wrapped estimator as its clone).
        X_train, y_train : array-like, optional
            The training rows and targets, needed for the out-of-bag part only after
            `bagwise.load`; without them that part is left out.

        Returns
        -------
        Diagnosis
        """
        from .diagnosis import _diagnose

        if isinstance(reference, str):
            if reference != "refit":
                raise ValueError(f"`reference`: expected an array or 'refit', got {reference!r}")
            reference = self._refit_reference(X, X_train, y_train)
        members = self.member_predictions(X)
        target = self._targets(y, members.shape[1])
        counts = self.in_bag_ if self.in_bag_.dtype.kind != "f" else None
        train_members = train_y = None
        if counts is not None and (X_train is not None or "_train_X" in self.__dict__):
            if y_train is not None or "_train_y" in self.__dict__:
                train_members, train_y = self._training_members(X_train, y_train)
        return _diagnose(members, target, counts=counts, reference=reference,
                         train_members=train_members, train_y=train_y, seed=0,
                         n_jobs=self.n_jobs, members_are_training=False,
                         member_count=self._member_count(),
                         group_size=self.group_size if self.scheme == "little_bags" else 0,
                         progress=self.progress)

    # -- ordering and pruning -------------------------------------------------------------
    def order_members(self, X=None, y=None, *, method=None, out_of_bag=None, folds=2,
                      orders=10, target_margin=None):
        """Order the members so that the first ``k`` make a good subensemble
        (`bagwise.order_members`).

        Without ``X`` the order is chosen on the bag's own out-of-bag predictions of its
        training rows (no extra data); with ``X`` and ``y`` on the members' predictions at
        those rows, meant as a validation set the members never trained on.

        Parameters
        ----------
        X, y : array-like, optional
            Validation rows and targets (labels as in ``classes_``); or, with
            ``out_of_bag=True``, the training rows and targets (needed after `bagwise.load`).
        method : str, optional
            As in `bagwise.order_members` (default ``"reduce_error"``).
        out_of_bag : bool, optional
            Choose on out-of-bag predictions of the training rows; default: when ``X`` is
            not given.
        folds, orders, target_margin
            As in `bagwise.order_members`; the folds and random orders are drawn from
            ``seed_``.

        Returns
        -------
        MemberOrder
        """
        from .ordering import TARGET_MARGIN, order_members

        check_is_fitted(self)
        if out_of_bag is None:
            out_of_bag = X is None
        if out_of_bag:
            counts = self._integer_counts("ordering on out-of-bag predictions")
            members = self.out_of_bag_predictions(X)
            if y is None and "_train_y" not in self.__dict__:
                raise ValueError("`y`: give the training targets (a loaded ensemble does not "
                                 "keep them)")
            target = self._train_y if y is None else self._targets(y, counts.shape[1])
        else:
            if X is None:
                raise ValueError("`X`: give the validation rows, or out_of_bag=True")
            counts = None
            members = self.member_predictions(X)
            target = self._targets(y, members.shape[1])
        return order_members(members, target, method=method, counts=counts, folds=folds,
                             orders=orders,
                             target_margin=TARGET_MARGIN if target_margin is None else target_margin,
                             rng=self.seed_, n_jobs=self.n_jobs, progress=self.progress)

    def prune(self, n_members, *, tolerance=0.01, method=None, X=None, y=None, order=None):
        """A smaller fitted bag: the first members of an order (ordered aggregation).

        Parameters
        ----------
        n_members : int, float or "smallest"
            Members to keep: a count, a share of the members in (0, 1) (rounded, at least
            one), or ``"smallest"``: the smallest size from which the loss on the order's
            ``honest_curve`` stays within ``tolerance`` of the full ensemble's
            (`MemberOrder.members_within`).
        tolerance : float
            Relative tolerance of ``"smallest"`` (default 1%).
        method : str, optional
            Ordering method (`bagwise.order_members`); default ``"reduce_error"``.
        X, y : array-like, optional
            A validation set to choose the order on; default: the bag's own out-of-bag
            predictions of its training rows (after `bagwise.load`, pass ``order``).
        order : MemberOrder, optional
            An order computed before (e.g. by `order_members`); then ``method``, ``X`` and
            ``y`` are not used.

        Returns
        -------
        BagRegressor or BagClassifier
            A new fitted bag of the same class holding the kept members in their original
            order, with their rows of ``in_bag_``, the same seed, classes and training rows;
            ``member_indices_`` gives their positions in this bag (composed over repeated
            prunes, so they always index the bag first fitted). It predicts, saves, loads,
            pickles and diagnoses like any bag; its ``n_members`` is the kept count and its
            ``random_member_count`` is False (a pruned size is chosen, not random, so the
            jackknife+-after-bootstrap's randomised-size guarantee no longer applies).
        """
        from .ordering import MemberOrder

        check_is_fitted(self)
        total = self.in_bag_.shape[0]
        if order is None:
            order = self.order_members(X, y, method=method)
        elif not isinstance(order, MemberOrder):
            raise TypeError(f"`order`: expected a MemberOrder, got {type(order).__name__}")
        elif order.n_members != total:
            raise ValueError(f"`order`: orders {order.n_members} members but this bag has {total}")
        keep = self._kept_count(n_members, tolerance, order, total)
        kept = np.sort(order.order[:keep])
        return self._subset(kept)

    @staticmethod
    def _kept_count(n_members, tolerance, order, total) -> int:
        if isinstance(n_members, str):
            if n_members != "smallest":
                raise ValueError(f"`n_members`: expected a count, a share in (0, 1) or "
                                 f"'smallest', got {n_members!r}")
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                keep = order.members_within(tolerance, "honest")
            if isinstance(keep, float):
                raise ValueError("`order`: has no honest curve (folds=None), so 'smallest' "
                                 "cannot be chosen; give a count or order with folds")
            return keep
        if isinstance(n_members, bool) or not isinstance(n_members, numbers.Real):
            raise TypeError(f"`n_members`: expected a count, a share in (0, 1) or 'smallest', "
                            f"got {type(n_members).__name__}")
        if isinstance(n_members, numbers.Integral):
            keep = int(n_members)
            if not 1 <= keep <= total:
                raise ValueError(f"`n_members`: must lie in 1..{total}, got {keep}")
            return keep
        share = float(n_members)
        if not 0 < share < 1:
            raise ValueError(f"`n_members`: a share must lie in (0, 1), got {share!r}")
        return max(1, round(share * total))

    def _subset(self, kept: np.ndarray):
        """A new fitted bag of the members ``kept`` (sorted positions in this bag)."""
        pruned = clone(self)
        pruned.set_params(n_members=len(kept), random_member_count=False)
        for name in ("n_features_in_", "feature_names_in_", "classes_", "seed_", "_train_X",
                     "_train_y"):
            if name in self.__dict__:
                pruned.__dict__[name] = self.__dict__[name]
        pruned.in_bag_ = np.ascontiguousarray(self.in_bag_[kept])
        if self._native:
            pruned._model = self._model.select(kept.tolist())
        else:
            pruned.members_ = [self.members_[i] for i in kept]
        before = self.__dict__.get("member_indices_")
        pruned.member_indices_ = (kept if before is None else before[kept]).astype(np.int64)
        pruned._counted_at_random = False
        return pruned

    def save(self, path) -> None:
        """Write a fitted native ensemble to ``path`` (see `bagwise.save`)."""
        persistence.save(self, path)


_PARAMETERS_DOC = """
    Parameters
    ----------
    learner : {"tree", "linear", "neighbors"} or estimator
        The member model. Native learners fit all members in one parallel Rust call with
        the in-bag counts as row weights (no resampled copy of ``X``): ``"tree"`` (CART,
        when the build has it), ``"linear"`` (least squares / ridge with intercept,
        regression only), ``"neighbors"`` (k nearest neighbours, a row drawn c times
        counting c times). Any other object with ``fit`` and ``predict`` (``predict_proba``
        for classification) is cloned per member with `sklearn.base.clone`.
    n_members : int
        Number of members.
    scheme : {"bootstrap", "subsample", "bayesian", "little_bags", "none"}
        How members resample the rows (see `bagwise.resample`); ``"none"`` gives every
        member all rows once (a single model is ``n_members=1, scheme="none"``).
        ``"bayesian"`` weights are continuous: only ``learner="linear"`` and wrapped
        estimators with ``use_sample_weight=True`` accept them. ``"little_bags"``: members
        in consecutive groups of ``group_size`` share a half-sample of the rows (Sexton &
        Laake 2009; Athey, Tibshirani & Wager 2019, §4), so that `prediction_variance`
        gives standard errors with a member budget that does not grow with the rows.
    fraction : float
        Draw size as a share of the rows. For ``"little_bags"`` each member's share of all
        rows, in (0, 0.5); left at 1.0 it becomes 0.1, the share whose bias was smallest in
        our measurement (the little-bags variance overstates the truth as the share grows:
        median ratio about 1.15 at 0.1, 1.28 at 0.2, 1.5 at 0.3, 2.1 at 0.4 on trees; a fit above 0.15
        warns). Smaller shares make noisier members, so each point's estimate needs more
        groups.
    group_size : int
        Members per group of ``scheme="little_bags"`` (at least 2, dividing
        ``n_members``); ignored by the other schemes.
    max_depth, min_leaf, split_features, splitter
        Tree parameters (ignored by the other learners): largest depth (None: no limit),
        smallest weight of a leaf, features tried per split (None: all; an int; or a
        fraction of the features) and split finder ("auto", "exact", "histogram").
    neighbors : int
        k of ``learner="neighbors"``: in-bag draws averaged per prediction (a row drawn c
        times fills up to c of the k slots; ties in distance go to the lower row index).
        Exact brute force in O(n_points * n_rows * p + members * n_points * n_in_bag) time,
        meant for up to about 50,000 training rows.
    penalty : float
        Ridge penalty λ of ``learner="linear"``: each member minimises
        ``sum_i c_i (y_i - b - x_i'β)^2 + λ ||β||^2`` on the original feature scale
        (intercept unpenalised; as sklearn.linear_model.Ridge with sample_weight=c).
        0 is weighted least squares, which raises ``ValueError`` on rank deficiency.
    random_state : int, numpy.random.RandomState or None
        Seed of the resampling (and of member randomness): an int seeds the member
        streams directly (the same int, the same members); ``None`` draws a fresh seed and
        a ``RandomState`` one seed from itself (scikit-learn's convention); the seed used
        is kept in ``seed_``.
    n_jobs : int, optional
        Worker threads (default: all cores). Native results do not depend on it; wrapped
        members run on joblib n_jobs.
    progress : bool or callable
        ``True`` shows a tqdm bar advancing per fitted member (and per block of predictions
        in ``member_predictions``, ``predict``, ``predict_proba`` and
        ``out_of_bag_predictions``); a callable receives ``(done, total)``. Ctrl-C stops a
        fit or a prediction within about a second; an interrupted fit leaves the estimator
        unfitted, never half-fitted.
    use_sample_weight : bool
        Wrapped estimators only: fit each member on all rows with the counts as
        ``sample_weight`` instead of on the repeated rows.
    random_member_count : bool
        Fit a random number of members, ``Binomial(n_members, p)`` with
        ``p = (1 - 1/(n_rows + 1))^m`` for ``m = round(n_rows * fraction)`` draws with
        replacement (``1 - m/(n_rows + 1)`` for ``scheme="subsample"``), drawn from
        ``random_state``: about ``e^-1`` of ``n_members`` for the bootstrap. This is the
        jackknife+-after-bootstrap's randomised ensemble size (Kim, Xu & Barber 2020,
        NeurIPS 33, Algorithm 1), under which `prediction_interval` covers a new
        observation with probability at least ``1 - 2 alpha`` (their Theorem 1); with a
        fixed number (the default) that bound is not proved. The members fitted are
        ``in_bag_.shape[0]``. Not for ``"bayesian"``/``"none"``, strata or groups.
    backend : {"auto", "local", "dask"}
        Where `fit` grows the members. ``"dask"``: in groups of consecutive members on the
        workers of the active ``dask.distributed`` client (two groups per worker, in turn, for
        native learners, so a worker's first group travels back while it fits the second;
        one group per worker thread for wrapped estimators), joined into one ensemble
        that equals the one-machine fit with the same seed, member for member (see
        `fit`). ``"auto"`` (default) does so when ``X`` or ``y`` is a dask array or
        DataFrame (or a zarr array) and a client is active, or inside
        ``joblib.parallel_backend("dask")``; a lazy input without a client is computed
        and fitted in this process. ``"local"`` always fits in this process.
"""

_ATTRIBUTES_DOC = """
    Attributes
    ----------
    in_bag_ : ndarray of shape (n_members, n_rows)
        In-bag count of every training row in every member (unsigned integers; float64
        weights for ``scheme="bayesian"``).
    n_features_in_ : int
        Number of features seen in `fit`.
    feature_names_in_ : ndarray of str
        Column names, when `fit` was given a DataFrame with string column names.
    members_ : list of estimators
        The fitted clones (wrapped estimators only; native members live in Rust).
    seed_ : int
        The integer seed the members were drawn with (also when ``random_state`` is
        None or a ``RandomState``).
    member_indices_ : ndarray of int64
        Only on a bag returned by `prune`: the positions of its members in the bag first
        fitted.

    Notes
    -----
    A fitted bag keeps a reference to its training rows for `out_of_bag_predictions`, so
    pickles of it include them; files written by `save` do not.

    Native ensembles pickle (their state is serde bytes) and `save` to a checksummed file
    of our own that `bagwise.load` reads without executing code. Wrapped estimators can
    only be pickled: never unpickle data from an untrusted source, since unpickling can
    run arbitrary code.
"""


@register_estimator
class BagRegressor(RegressorMixin, _Bag):
    __doc__ = (
        """A bagged regression ensemble: members fit on resamples, predictions averaged.
"""
        + _PARAMETERS_DOC
        + _ATTRIBUTES_DOC
        + """
    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(200, 3))
    >>> y = X @ [1.0, -2.0, 0.5] + rng.normal(scale=0.1, size=200)
    >>> bag = bagwise.BagRegressor("linear", n_members=20, random_state=1).fit(X, y)
    >>> bag.member_predictions(X[:5]).shape
    (20, 5)
    >>> round(bag.score(X, y), 3)
    0.998
    """
    )

    def __init__(self, learner="tree", n_members=100, *, scheme="bootstrap", fraction=1.0,
                 group_size=2, max_depth=None, min_leaf=1, split_features=None, neighbors=5,
                 penalty=0.0, random_state=0, n_jobs=None, progress=False, splitter="auto",
                 use_sample_weight=False, random_member_count=False, backend="auto"):
        self.learner = learner
        self.n_members = n_members
        self.scheme = scheme
        self.fraction = fraction
        self.group_size = group_size
        self.max_depth = max_depth
        self.min_leaf = min_leaf
        self.split_features = split_features
        self.neighbors = neighbors
        self.penalty = penalty
        self.random_state = random_state
        self.n_jobs = n_jobs
        self.progress = progress
        self.splitter = splitter
        self.use_sample_weight = use_sample_weight
        self.random_member_count = random_member_count
        self.backend = backend

    def predict(self, X) -> np.ndarray:
        """The ensemble mean over members, shape (n_points,); a dask array chunked like
        the points when ``X`` is lazy (see `member_predictions`)."""
        if is_lazy(X):
            return self._lazy_points(X, "mean")
        X = self._check_X(X)
        with progress_callback(self.progress, "predicting", "prediction") as callback:
            return self._predictor(self.n_jobs).mean(X, callback)


@register_estimator
class BagClassifier(ClassifierMixin, _Bag):
    __doc__ = (
        """A bagged classification ensemble: members' class probabilities averaged.
"""
        + _PARAMETERS_DOC
        + """    stratify : bool
        Resample within every class, so each member keeps the class sizes.
    criterion : {"gini", "entropy"}
        Split criterion of ``learner="tree"``.
"""
        + _ATTRIBUTES_DOC
        + """    classes_ : ndarray
        The class labels, sorted; probability columns follow this order.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(300, 2))
    >>> y = np.where(X[:, 0] + X[:, 1] > 0, "yes", "no")
    >>> bag = bagwise.BagClassifier("neighbors", n_members=10, neighbors=7).fit(X, y)
    >>> bag.classes_
    array(['no', 'yes'], dtype='<U3')
    >>> bag.member_predictions(X[:4]).shape
    (10, 4, 2)
    >>> float(bag.score(X, y)) > 0.9
    True
    """
    )

    def __init__(self, learner="tree", n_members=100, *, scheme="bootstrap", fraction=1.0,
                 group_size=2, max_depth=None, min_leaf=1, split_features=None, neighbors=5,
                 penalty=0.0, random_state=0, n_jobs=None, progress=False, stratify=False,
                 criterion="gini", splitter="auto", use_sample_weight=False,
                 random_member_count=False, backend="auto"):
        self.learner = learner
        self.n_members = n_members
        self.scheme = scheme
        self.fraction = fraction
        self.group_size = group_size
        self.max_depth = max_depth
        self.min_leaf = min_leaf
        self.split_features = split_features
        self.neighbors = neighbors
        self.penalty = penalty
        self.random_state = random_state
        self.n_jobs = n_jobs
        self.progress = progress
        self.stratify = stratify
        self.criterion = criterion
        self.splitter = splitter
        self.use_sample_weight = use_sample_weight
        self.random_member_count = random_member_count
        self.backend = backend

    _classification = True


    def diversity(self, X, y):
        """`bagwise.diversity` of the members' class predictions on a test set.

        Each member's label at a point is its most probable class (ties: the first in
        ``classes_``), compared with ``y``.

        Parameters
        ----------
        X : array-like of shape (n_points, n_features)
            Test rows.
        y : array-like of shape (n_points,)
            Test labels, as in ``classes_``.

        Returns
        -------
        Diversity
        """
        from .diversity import diversity

        members = self.member_predictions(X)
        target = self._targets(y, members.shape[1])
        return diversity(members, target, n_classes=len(self.classes_), n_jobs=self.n_jobs)

    def predict_proba(self, X) -> np.ndarray:
        """Mean of the members' class probabilities, shape (n_points, n_classes); a dask
        array chunked like the points when ``X`` is lazy (see `member_predictions`)."""
        if is_lazy(X):
            return self._lazy_points(X, "mean")
        X = self._check_X(X)
        with progress_callback(self.progress, "predicting", "prediction") as callback:
            return self._predictor(self.n_jobs).mean(X, callback)

    def predict(self, X) -> np.ndarray:
        """The class with the largest mean probability (ties: the first in ``classes_``);
        a dask array when ``X`` is lazy."""
        if is_lazy(X):
            return self._lazy_points(X, "labels")
        proba = self.predict_proba(X)
        return self.classes_[np.argmax(proba, axis=1)]
