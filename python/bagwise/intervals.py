"""Prediction intervals and class sets for a new observation, calibrated on the members'
out-of-bag predictions: `prediction_interval` and its `PredictionInterval` and
`PredictionSet` results."""

from __future__ import annotations

import dataclasses
import math
import numbers
from typing import ClassVar

import numpy as np

from . import _chunked, _core
from ._members import as_array, in_bag_counts
from ._progress import progress_callback
from ._results import Result
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["PredictionInterval", "PredictionSet", "prediction_interval"]

_INTERVAL_METHODS = ("jackknife+", "out_of_bag_residual")
_SET_METHODS = ("least_ambiguous", "adaptive")

# Relative guard on alpha * (n + 1) against round-off in alpha = 1 - level (as in the core).
_RANK_GUARD = 1e-12


def _rows_needed(level: float) -> int:
    """The least number of calibration rows n with floor(alpha (n + 1)) >= 1."""
    alpha = 1.0 - level
    n = max(math.ceil(1.0 / alpha) - 2, 0)
    while math.floor(alpha * (n + 1) * (1 + _RANK_GUARD)) < 1:
        n += 1
    return n


def _float_array(values, name: str) -> np.ndarray:
    array = as_array(values, name)  # a non-native byte order is converted once
    if array.dtype not in (np.float32, np.float64):
        raise TypeError(f"`{name}`: expected float32 or float64 predictions, got dtype {array.dtype}")
    return array


def _finite(array: np.ndarray, name: str) -> None:
    if not np.all(np.isfinite(array)):
        raise ValueError(f"`{name}`: contains NaN or infinite values")


def _members_shape_iv(dtype, shape) -> None:
    """The checks of ``members`` that need only its dtype and shape."""
    if dtype not in (np.float32, np.float64):
        raise TypeError(f"`members`: expected float32 or float64 predictions, got dtype {dtype}")
    if len(shape) not in (2, 3):
        raise ValueError(
            "`members`: expected shape (n_members, n_points) for values or (n_members, n_points, "
            f"n_classes) for class probabilities, got {len(shape)} dimensions {shape}"
        )
    if math.prod(shape) == 0:
        raise ValueError(f"`members`: is empty (shape {shape})")
    if shape[0] < 2:
        raise ValueError(
            f"`members`: needs at least 2 members (out-of-bag calibration averages the members "
            f"that did not see a row), got {shape[0]}"
        )
    if len(shape) == 3 and shape[2] < 2:
        raise ValueError(f"`members`: needs at least 2 classes, got {shape[2]}")


def _members_values_iv(members: np.ndarray) -> None:
    """The checks of ``members`` that read its values (finite; probabilities in [0, 1])."""
    _finite(members, "members")
    if members.ndim == 3 and (members.min() < 0 or members.max() > 1):
        raise ValueError("`members`: class probabilities must lie in [0, 1]")


def _training_iv(members_dtype, members_shape, counts, train_members, y_train):
    """The training side, checked against the members' dtype and shape: ``(counts,
    train_members, y_train, n_left_out)``, ``train_members`` as float64 when the dtypes of
    the two prediction arrays differ."""
    classes = len(members_shape) == 3
    n_members = members_shape[0]
    train_members = _float_array(train_members, "train_members")
    if train_members.ndim != len(members_shape):
        raise ValueError(
            f"`train_members`: expected {len(members_shape)} dimensions like `members`, got "
            f"shape {train_members.shape}"
        )
    if train_members.shape[0] != n_members:
        raise ValueError(
            f"`train_members`: has {train_members.shape[0]} members but `members` has {n_members}"
        )
    if classes and train_members.shape[2] != members_shape[2]:
        raise ValueError(
            f"`train_members`: has {train_members.shape[2]} classes but `members` has "
            f"{members_shape[2]}"
        )
    n_rows = train_members.shape[1]
    if n_rows == 0:
        raise ValueError("`train_members`: has no training rows")
    _finite(train_members, "train_members")
    if classes and (train_members.min() < 0 or train_members.max() > 1):
        raise ValueError("`train_members`: class probabilities must lie in [0, 1]")
    if members_dtype != train_members.dtype:  # one converted copy of the float32 one
        train_members = train_members.astype(np.float64, copy=False)

    counts = in_bag_counts(counts, n_members=n_members, n_rows=n_rows, rows_from="train_members",
                           unsigned=True)
    used = np.any(counts == 0, axis=0)
    if not np.any(used):
        raise ValueError(
            "`counts`: no training row is out of bag for any member; out-of-bag calibration "
            "needs rows that some member did not see"
        )

    y_train = as_array(y_train, "y_train")
    if y_train.ndim != 1 or y_train.shape[0] != n_rows:
        raise ValueError(f"`y_train`: expected shape ({n_rows},) = (n_rows,), got {y_train.shape}")
    if classes:
        if y_train.dtype.kind not in "iu":
            raise TypeError(
                f"`y_train`: expected integer class codes 0..{members_shape[2] - 1}, got dtype "
                f"{y_train.dtype}"
            )
        if y_train.min() < 0 or y_train.max() >= members_shape[2]:
            raise ValueError(
                f"`y_train`: class codes must lie in 0..{members_shape[2] - 1}, got values in "
                f"{y_train.min()}..{y_train.max()}"
            )
        y_train = np.ascontiguousarray(y_train, dtype=np.int64)
    else:
        if y_train.dtype.kind not in "iuf":
            raise TypeError(f"`y_train`: expected numbers, got dtype {y_train.dtype}")
        y_train = np.ascontiguousarray(y_train, dtype=np.float64)
        _finite(y_train, "y_train")
    return counts, train_members, y_train, int(n_rows - used.sum())


def _options_iv(level, method, classes: bool):
    if isinstance(level, bool) or not isinstance(level, numbers.Real):
        raise TypeError(f"`level`: expected a number, got {type(level).__name__}")
    level = float(level)
    if not 0 < level < 1:
        raise ValueError(f"`level`: must lie strictly between 0 and 1, got {level!r}")
    allowed = _SET_METHODS if classes else _INTERVAL_METHODS
    if method is None:
        method = allowed[0]
    if method not in allowed:
        kind = "class probabilities" if classes else "values"
        raise ValueError(f"`method`: for {kind} expected one of {allowed}, got {method!r}")
    return level, method


def _prediction_interval_iv(members, counts, train_members, y_train, level, method, n_jobs):
    members = _float_array(members, "members")
    _members_shape_iv(members.dtype, members.shape)
    _members_values_iv(members)
    counts, train_members, y_train, n_left_out = _training_iv(
        members.dtype, members.shape, counts, train_members, y_train)
    if members.dtype != train_members.dtype:
        members = members.astype(np.float64, copy=False)
    level, method = _options_iv(level, method, members.ndim == 3)
    return members, counts, train_members, y_train, level, method, n_jobs_value(n_jobs), n_left_out


def _guarantee(method: str, level: float, member_count: str | None = None) -> str:
    """The coverage guarantee in words. ``member_count``: ``"random"`` (the members were
    counted by Kim, Xu & Barber's Binomial draw), ``"fixed"`` (a fixed number), None (not
    known: arrays from elsewhere)."""
    alpha = 1.0 - level
    if method == "jackknife+":
        claim = ("a new observation exchangeable with the training rows falls in its interval "
                 f"with probability at least 1 - 2 alpha = {1 - 2 * alpha:.4g}")
        typical = f"coverage near {level:.4g} is typical"
        if member_count == "random":
            return (f"Guaranteed: {claim}, since the number of members was drawn at random "
                    f"(Binomial), as Kim, Xu & Barber (2020, Theorem 1) require; {typical}.")
        proof = ("Kim, Xu & Barber (2020, Theorem 1) prove it for a number of members drawn at "
                 "random (Binomial, their Algorithm 1)")
        if member_count == "fixed":
            return (f"The bound does not formally hold: {proof}, and this number was fixed "
                    f"(fit with random_member_count=True for it); {typical}.")
        return (f"It is not known whether {claim}: {proof}, and these arrays do not say how "
                f"the members were counted; {typical}.")
    aim = (
        f"aims at covering a new observation with probability {level:.4g}; with out-of-bag "
        "calibration scores no finite-sample bound is proved"
    )
    if method == "out_of_bag_residual":
        return (
            f"The interval {aim} (Johansson, Bostrom, Lofstrom & Linusson 2014 found coverage near "
            "nominal in practice)."
        )
    if method == "adaptive":
        return (
            f"The class set {aim} (Romano, Sesia & Candes 2020 prove {level:.4g} with held-out "
            "scores); this version is not randomised, so its sets are conservative (larger)."
        )
    return (
        f"The class set {aim} (Sadinle, Lei & Wasserman 2019 prove {level:.4g} with held-out "
        "scores)."
    )


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class _Calibrated(Result):
    """What an interval and a class set share: the level, the method and the calibration
    rows (the subclasses document these fields)."""

    level: float
    method: str
    n_rows_used: int
    n_rows: int
    n_members: int
    guarantee: str

    def _summary(self, n_points: int, mean_name: str, mean_value: float) -> dict:
        return {"level": self.level, "method": self.method, "n_points": n_points,
                "n_rows_used": self.n_rows_used, mean_name: mean_value}

    def _framed_rows(self, shape_row, mean_row) -> list[tuple[str, str]]:
        return [("method", self.method), ("level", f"{self.level:.4g}"), shape_row,
                ("rows used / rows", f"{self.n_rows_used:,} / {self.n_rows:,}"), mean_row]


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class PredictionInterval(_Calibrated):
    """Prediction interval for a new observation at each new point.

    Attributes
    ----------
    lower, upper : ndarray of float64, shape (n_points,)
        Bounds of the interval for a new observation at each point (``-inf``/``inf`` when
        too few rows are out of bag for the level).
    width : ndarray of float64, shape (n_points,)
        ``upper - lower``.
    level : float
        The nominal coverage ``1 - alpha``.
    method : str
        ``"jackknife+"`` or ``"out_of_bag_residual"``.
    n_rows_used : int
        Training rows with at least one out-of-bag member (the calibration rows).
    n_rows : int
        Training rows given.
    n_members : int
        Members of the ensemble.
    guarantee : str
        What coverage is proved, and under which assumptions, in plain words.
    """

    lower: np.ndarray
    upper: np.ndarray
    width: np.ndarray

    _title: ClassVar[str] = "PredictionInterval"

    def coverage(self, y) -> float:
        """Share of the points whose observed ``y`` lies in its interval (bounds included)."""
        y = np.asarray(y)
        if y.dtype.kind not in "iuf":
            raise TypeError(f"`y`: expected numbers, got dtype {y.dtype}")
        if y.shape != self.lower.shape:
            raise ValueError(f"`y`: expected shape {self.lower.shape} = (n_points,), got {y.shape}")
        _finite(y, "y")
        return float(np.mean((self.lower <= y) & (y <= self.upper)))

    def summary(self) -> dict:
        """Level, method, rows and the mean width over points."""
        return self._summary(int(self.lower.shape[0]), "mean_width", float(np.mean(self.width)))

    def to_frame(self):
        """One row per point: ``lower``, ``upper``, ``width``."""
        import pandas as pd

        return pd.DataFrame({"lower": self.lower, "upper": self.upper, "width": self.width})

    def _rows(self):
        return self._framed_rows(("points", f"{self.lower.shape[0]:,}"),
                                 ("mean width", f"{float(np.mean(self.width)):.6g}"))

    def _reading(self):
        if not np.all(np.isfinite(self.width)):
            return "too few out-of-bag rows for this level: the interval for a new observation is unbounded"
        return (
            f"a new observation at a point falls in its interval with the probability stated in "
            f"`guarantee` (nominal {self.level:.4g}); the mean width is {float(np.mean(self.width)):.4g}"
        )


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class PredictionSet(_Calibrated):
    """Set of classes for a new observation at each new point.

    Attributes
    ----------
    sets : ndarray of bool, shape (n_points, n_classes)
        ``sets[j, k]`` is true when class ``k`` is in the set at point ``j``.
    set_size : ndarray of int64, shape (n_points,)
        Classes in each set.
    level : float
        The nominal coverage ``1 - alpha``.
    method : str
        ``"least_ambiguous"`` or ``"adaptive"``.
    n_rows_used : int
        Training rows with at least one out-of-bag member (the calibration rows).
    n_rows : int
        Training rows given.
    n_members : int
        Members of the ensemble.
    guarantee : str
        What coverage is proved, and under which assumptions, in plain words.
    """

    sets: np.ndarray
    set_size: np.ndarray

    _title: ClassVar[str] = "PredictionSet"

    def coverage(self, y) -> float:
        """Share of the points whose true class code ``y`` is in its set."""
        y = np.asarray(y)
        n_points, n_classes = self.sets.shape
        if y.dtype.kind not in "iu":
            raise TypeError(f"`y`: expected integer class codes, got dtype {y.dtype}")
        if y.shape != (n_points,):
            raise ValueError(f"`y`: expected shape ({n_points},) = (n_points,), got {y.shape}")
        if y.size and (y.min() < 0 or y.max() >= n_classes):
            raise ValueError(f"`y`: class codes must lie in 0..{n_classes - 1}")
        return float(np.mean(self.sets[np.arange(n_points), y]))

    def summary(self) -> dict:
        """Level, method, rows and the mean set size over points."""
        return self._summary(int(self.sets.shape[0]), "mean_set_size",
                             float(np.mean(self.set_size)))

    def to_frame(self):
        """One row per point: ``set_size``, then one boolean column per class code."""
        import pandas as pd

        frame = pd.DataFrame({"set_size": self.set_size})
        for k in range(self.sets.shape[1]):
            frame[k] = self.sets[:, k]
        return frame

    def _rows(self):
        return self._framed_rows(
            ("points x classes", f"{self.sets.shape[0]:,} x {self.sets.shape[1]:,}"),
            ("mean set size", f"{float(np.mean(self.set_size)):.4g}"))

    def _reading(self):
        return (
            f"the set holds the class of a new observation with the probability stated in "
            f"`guarantee` (nominal {self.level:.4g}); {float(np.mean(self.set_size == 1)):.0%} of "
            "the sets hold a single class"
        )


def prediction_interval(
    members, counts, train_members, y_train, *, level=0.9, method=None, n_jobs=None,
    progress=False
) -> PredictionInterval | PredictionSet:
    """Prediction interval (values) or class set (probabilities) for a new observation,
    calibrated on the members' out-of-bag predictions at the training rows.

    A training row ``i`` is out of bag for member ``m`` when ``counts[m, i] == 0``; rows
    with at least one such member are the ``n`` calibration rows (rows that every member
    saw are left out, counted in ``n_rows_used``, and warned about once). With
    ``alpha = 1 - level``, ``k- = floor(alpha (n + 1))`` and
    ``k+ = ceil((1 - alpha)(n + 1))``:

    - ``"jackknife+"`` (values, default): the jackknife+-after-bootstrap of Kim, Xu &
      Barber (2020, NeurIPS 33). With ``mu_i(x)`` the mean of the members that did not
      see row ``i`` and ``R_i = |y_i - mu_i(x_i)|``, ``lower(x)`` is the ``k-``-th
      smallest of ``mu_i(x) - R_i`` and ``upper(x)`` the ``k+``-th smallest of
      ``mu_i(x) + R_i``.
    - ``"out_of_bag_residual"`` (values): Johansson, Bostrom, Lofstrom & Linusson (2014,
      Machine Learning 97): ``q`` the ``k+``-th smallest ``R_i``; the interval is the
      members' mean at ``x`` plus or minus ``q``.
    - ``"least_ambiguous"`` (probabilities, default): Sadinle, Lei & Wasserman (2019, JASA
      114): scores ``1 - p_i[y_i]`` from the out-of-bag mean probabilities, ``q`` their
      ``k+``-th smallest; the set at ``x`` holds the classes ``k`` with
      ``1 - p(x)[k] <= q``, ``p(x)`` the members' mean probability.
    - ``"adaptive"`` (probabilities): Romano, Sesia & Candes (2020, NeurIPS 33) with the
      score ``sum of p[j] over the classes with p[j] > p[k], plus p[k]``. It is the
      non-randomised version, which is conservative: its sets are larger than the
      randomised ones and cover at least as often.

    When ``k- < 1`` (too few calibration rows for the level) the interval is infinite on
    both sides (a class set holds every class), with one warning naming how many rows
    are needed. What coverage is proved is stated in the result's ``guarantee``: for
    jackknife+ the ``1 - 2 alpha`` bound of Kim, Xu & Barber (2020, Theorem 1) needs the
    number of members drawn at random (``BagRegressor(random_member_count=True)``), so for
    arrays given here it says the bound is not known to hold.

    Parameters
    ----------
    members : ndarray of float32 or float64
        The members' predictions at the new points, ``(n_members, n_points)`` values or
        ``(n_members, n_points, n_classes)`` class probabilities. Any strides, no copy.
    counts : ndarray of int, shape (n_members, n_rows)
        In-bag counts of the training rows (for scikit-learn's bagging,
        ``np.bincount(indices, minlength=n_rows)`` of each member's ``estimators_samples_``).
    train_members : ndarray of float32 or float64
        The members' predictions at the training rows, ``(n_members, n_rows[, n_classes])``.
        If its dtype differs from ``members``, both are read as float64.
    y_train : array-like, shape (n_rows,)
        Training targets; integer class codes ``0..n_classes - 1`` for probabilities.
    level : float, default 0.9
        Nominal coverage ``1 - alpha``, strictly between 0 and 1.
    method : str, optional
        ``"jackknife+"`` (default for values), ``"out_of_bag_residual"``,
        ``"least_ambiguous"`` (default for probabilities) or ``"adaptive"``.
    n_jobs : int, optional
        Worker threads (default: all cores). Results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Lazy inputs: ``members`` may be a dask or zarr array chunked along the points (axis 1);
    ``counts``, ``train_members`` and ``y_train`` may be lazy too. The training side
    (O(members × rows): counts, training predictions, targets) is checked once, on the
    client when it is in memory or else on one worker, and travels once to each worker;
    each chunk of points sends back only its bounds or class sets (O(points of one chunk)),
    joined in point order on the client, which gives each warning once.

    Returns
    -------
    PredictionInterval or PredictionSet

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> from sklearn.ensemble import BaggingRegressor
    >>> rng = np.random.default_rng(0)
    >>> X, X_new = rng.uniform(-2, 2, size=(300, 1)), rng.uniform(-2, 2, size=(2000, 1))
    >>> y = np.sin(2 * X[:, 0]) + rng.normal(scale=0.3, size=300)
    >>> y_new = np.sin(2 * X_new[:, 0]) + rng.normal(scale=0.3, size=2000)
    >>> bag = BaggingRegressor(n_estimators=50, random_state=0).fit(X, y)
    >>> counts = np.array([np.bincount(s, minlength=300) for s in bag.estimators_samples_])
    >>> members = np.array([tree.predict(X_new) for tree in bag.estimators_])
    >>> train_members = np.array([tree.predict(X) for tree in bag.estimators_])
    >>> interval = bagwise.prediction_interval(members, counts, train_members, y, level=0.9)
    >>> interval.n_rows_used
    300
    >>> round(interval.coverage(y_new), 2)
    0.89
    """
    return _prediction_interval(members, counts, train_members, y_train, level=level,
                                method=method, n_jobs=n_jobs, member_count=None,
                                progress=progress)


def _prediction_interval(members, counts, train_members, y_train, *, level, method, n_jobs,
                         member_count, progress=False):
    """`prediction_interval`, told how the members were counted (see `_guarantee`)."""
    if any(_chunked.is_lazy(value) for value in (members, counts, train_members, y_train)):
        return _lazy_prediction_interval(members, counts, train_members, y_train, level=level,
                                         method=method, n_jobs=n_jobs, member_count=member_count,
                                         progress=progress)
    members, counts, train_members, y_train, level, method, n_jobs, n_left_out = (
        _prediction_interval_iv(members, counts, train_members, y_train, level, method, n_jobs)
    )
    core = _core.prediction_set_arrays if members.ndim == 3 else _core.prediction_interval_arrays
    with progress_callback(progress, "prediction interval", "point") as callback:
        arrays = core(members, counts, train_members, y_train, level, method, n_jobs, callback)
    return _calibrated(arrays, members.ndim == 3, counts.shape, n_left_out, level, method,
                       member_count)


def _calibrated(arrays, classes, counts_shape, n_left_out, level, method, member_count):
    """The result from the core's arrays ``(sets, n_used, finite)`` or ``(lower, upper,
    n_used, finite)``, with the calibration warnings (each once)."""
    n_members, n_rows = counts_shape
    if n_left_out:
        warn(
            f"`counts`: {n_left_out} of {n_rows} training rows were in bag for every member and are "
            "left out of the calibration (more members, or smaller samples, leave more rows out of bag)"
        )
    guarantee = _guarantee(method, level, member_count)
    *per_point, n_used, finite = arrays
    if not finite:
        what = "every class set holds all classes" if classes else "the interval is infinite"
        warn(
            f"`level`: with {n_used} rows out of bag, {what} at level {level:.4g}; at least "
            f"{_rows_needed(level)} rows with an out-of-bag member are needed (or a lower `level`)"
        )
    common = dict(level=level, method=method, n_rows_used=int(n_used), n_rows=int(n_rows),
                  n_members=int(n_members), guarantee=guarantee)
    if classes:
        (sets,) = per_point
        return PredictionSet(sets=sets, set_size=sets.sum(axis=1, dtype=np.int64), **common)
    lower, upper = per_point
    return PredictionInterval(lower=lower, upper=upper, width=upper - lower, **common)


def _interval_chunk(chunk, training):
    """One chunk of points' interval bounds or class sets from the shared training side
    (``counts, train_members, y_train, n_left_out``, options); the O(1) calibration figures
    ride along so the client can warn once."""
    (counts, train_members, y_train, n_left_out), level, method, n_jobs = training
    members = _float_array(chunk, "members")
    _members_values_iv(members)
    if members.dtype != train_members.dtype:
        members = members.astype(np.float64, copy=False)
    if members.ndim == 3:
        *per_point, n_used, finite = _core.prediction_set_arrays(
            members, counts, train_members, y_train, level, method, n_jobs)
    else:
        *per_point, n_used, finite = _core.prediction_interval_arrays(
            members, counts, train_members, y_train, level, method, n_jobs)
    flags = np.array([[n_used, finite, n_left_out, counts.shape[1]]], dtype=np.int64)
    return (*per_point, flags)


def _bundle(*values):
    return values


def _lazy_prediction_interval(members, counts, train_members, y_train, *, level, method, n_jobs,
                              member_count, progress=False):
    """`_prediction_interval` with lazy arrays: the members' chunks of points stay where
    they live; the training side (O(members × rows)) is checked once (on the client when
    it is in memory, else on one worker) and travels once to each worker."""
    import dask

    array = _chunked.as_dask(members, "members")
    dtype = array.dtype
    if dtype.kind == "f" and not dtype.isnative:  # each chunk is converted where it lives
        dtype = dtype.newbyteorder("=")
    _members_shape_iv(dtype, array.shape)
    classes = array.ndim == 3
    level, method = _options_iv(level, method, classes)
    training_arrays = (counts, train_members, y_train)
    if any(_chunked.is_lazy(value) for value in training_arrays):
        training = dask.delayed(_training_iv, pure=False)(
            dtype, array.shape,
            *(_chunked.as_dask(v, name) if _chunked.is_lazy(v) else v
              for v, name in zip(training_arrays, ("counts", "train_members", "y_train"),
                                 strict=True)))
        shared = dask.delayed(_bundle, pure=False)(training, level, method, n_jobs_value(n_jobs))
    else:
        training = _training_iv(dtype, array.shape, *training_arrays)
        shared = _chunked.shared((training, level, method, n_jobs_value(n_jobs)))
    blocks = _chunked.aligned_blocks([(array, "members", 1), (shared, "training", None)])
    *per_point, flags = _chunked.join_points(_chunked.map_points(_interval_chunk, blocks,
                                                                 **_chunked.reporting(progress)))
    n_used, finite, n_left_out, n_rows = (int(v) for v in flags[0])
    return _calibrated((*per_point, n_used, bool(finite)), classes, (array.shape[0], n_rows),
                       n_left_out, level, method, member_count)
