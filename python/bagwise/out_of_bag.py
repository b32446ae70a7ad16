"""Out-of-bag predictions, errors and error curves: `out_of_bag`, `out_of_bag_stream` and
their `OutOfBag` result."""

from __future__ import annotations

import math
import warnings

import numpy as np

from . import _core
from ._display import html_block, safe_html, text_block
from ._validation import n_jobs_value

__all__ = ["OutOfBag", "OutOfBagStream", "out_of_bag", "out_of_bag_stream"]

REGRESSION_METRICS = ("squared_error", "absolute_error")
CLASSIFICATION_METRICS = ("error_rate", "brier_score", "log_loss")
LOG_LOSS_FLOOR = 1e-15
PROBABILITY_TOLERANCE = 1e-6


def _array(value, name):
    """``value`` as an ndarray without copying numpy inputs (memory maps stay mapped);
    only non-native byte order (e.g. big-endian data from a file) is converted."""
    if not isinstance(value, np.ndarray):
        try:
            value = np.asarray(value)
        except (TypeError, ValueError) as err:
            raise TypeError(f"`{name}`: expected an array, got {type(value).__name__} ({err})") from None
    if not value.dtype.isnative:
        value = value.astype(value.dtype.newbyteorder("="))
    return value


def _members_kind(members):
    """("regression" | "labels" | "probabilities") from the dtype and dimensions."""
    kind = members.dtype.kind
    if kind == "f" and members.dtype not in (np.float32, np.float64):
        raise TypeError(f"`members`: float predictions must be float32 or float64, got {members.dtype}")
    if members.ndim == 2 and kind == "f":
        return "regression"
    if members.ndim == 2 and kind in "iu":
        return "labels"
    if members.ndim == 3 and kind == "f":
        return "probabilities"
    raise TypeError(
        "`members`: expected float predictions (members, n_points), integer class labels "
        "(members, n_points) or float class probabilities (members, n_points, n_classes); "
        f"got dtype {members.dtype} with {members.ndim} dimensions"
    )


def _curve_sizes(curve_sizes, n_members):
    if curve_sizes is None:
        return list(_core.default_sizes(n_members))
    sizes = _array(curve_sizes, "curve_sizes")
    if sizes.ndim != 1 or sizes.size == 0 or sizes.dtype.kind not in "iu":
        raise TypeError("`curve_sizes`: expected a non-empty 1-D sequence of integers")
    sizes = np.unique(sizes.astype(np.int64))
    if sizes[0] < 1 or sizes[-1] > n_members:
        raise ValueError(f"`curve_sizes`: ensemble sizes must lie in 1..{n_members}, got {sizes.tolist()}")
    sizes = sizes.tolist()
    if sizes[-1] != n_members:
        sizes.append(n_members)  # the whole ensemble is always evaluated
    return sizes


def _out_of_bag_iv(members, counts, y, metric, point_weights, n_jobs, curve_sizes):
    """Checks shapes and dtypes; values (NaN, ranges, sums) are checked by the core."""
    from .resampling import Resample

    members = _array(members, "members")
    kind = _members_kind(members)
    if members.size == 0:
        raise ValueError(f"`members`: is empty (shape {members.shape})")
    if isinstance(counts, Resample):
        counts = counts.counts
    counts = _array(counts, "counts")
    if counts.dtype.kind not in "iu":
        raise TypeError(
            f"`counts`: expected integer in-bag counts (zero = out of bag), got dtype {counts.dtype}"
        )
    if counts.shape != members.shape[:2]:
        raise ValueError(
            f"`counts`: has shape {counts.shape} but `members` has (members, n_points) = "
            f"{members.shape[:2]}"
        )
    n_members, n_points = members.shape[:2]
    if members.dtype.kind == "f":
        missing = ~np.isfinite(members)
        if missing.any():
            # Out-of-bag predictions often mark in-bag entries with NaN (as
            # `BagRegressor.out_of_bag_predictions` does); those entries are never read, so
            # they may be missing. A missing out-of-bag entry is still an error (core).
            in_bag = counts != 0
            seen = in_bag[..., None] if members.ndim == 3 else in_bag
            if np.all(np.broadcast_to(seen, members.shape)[missing]):
                # Fillers that pass the core's checks: 0, or uniform probabilities.
                fill = 1.0 / members.shape[2] if members.ndim == 3 else 0.0
                members = np.where(seen, fill, members).astype(members.dtype, copy=False)
    y = _array(y, "y")
    if y.ndim != 1 or y.shape[0] != n_points:
        raise ValueError(f"`y`: expected shape ({n_points},) to match `members`, got {y.shape}")
    if y.dtype.kind not in "iuf":
        raise TypeError(f"`y`: expected numbers, got dtype {y.dtype}")
    n_classes = None
    if kind == "labels":
        lowest, highest = int(members.min()), int(members.max())
        if lowest < 0:
            raise ValueError(f"`members`: class labels must be non-negative integers, found {lowest}")
        if y.dtype.kind == "f" and not np.all(np.isfinite(y)):
            raise ValueError("`y`: contains NaN or infinite values")
        y_top = float(y.max()) if y.size else 0.0
        for name, top in (("members", highest), ("y", y_top)):
            if top >= 2**16:
                raise ValueError(f"`{name}`: at most 65536 classes are supported, found label {top:g}")
        n_classes = max(highest, int(y_top)) + 1
    y = np.ascontiguousarray(y, dtype=np.float64)
    task = "regression" if kind == "regression" else "classification"
    allowed = REGRESSION_METRICS if task == "regression" else CLASSIFICATION_METRICS
    if metric is None:
        metric = allowed[0]
    elif metric not in allowed:
        raise ValueError(f"`metric`: for {task} expected one of {allowed}, got {metric!r}")
    if point_weights is not None:
        point_weights = _array(point_weights, "point_weights")
        if point_weights.ndim != 1 or point_weights.shape[0] != n_points:
            raise ValueError(
                f"`point_weights`: expected shape ({n_points},) to match `members`, got {point_weights.shape}"
            )
        if point_weights.dtype.kind not in "iuf":
            raise TypeError(f"`point_weights`: expected numbers, got dtype {point_weights.dtype}")
        point_weights = np.ascontiguousarray(point_weights, dtype=np.float64)
    sizes = _curve_sizes(curve_sizes, n_members)
    return members, counts, y, kind, n_classes, metric, point_weights, n_jobs_value(n_jobs), sizes


def out_of_bag(members, counts, y, *, metric=None, point_weights=None, n_jobs=None,
               curve_sizes=None) -> OutOfBag:
    """Out-of-bag predictions and error of a bagged ensemble, and its error curve.

    For every training point only the members whose in-bag count of the point is zero
    are aggregated (Breiman 1996): the mean prediction for regression, the mean class
    probability or the share of votes for classification. The error of these
    predictions estimates the ensemble's error on new data without a hold-out set.

    Parameters
    ----------
    members : ndarray
        Member predictions on the training points, one of: float32/float64 regression
        predictions of shape (members, n_points); integer class labels ``0..n_classes-1``
        of shape (members, n_points) (majority vote; ties go to the lowest class index);
        float class probabilities of shape (members, n_points, n_classes), each member's
        row summing to 1 within 1e-6. Read without a copy, with any strides.
    counts : ndarray of int, shape (members, n_points), or Resample
        In-bag counts, e.g. ``bagwise.resample(...).counts``; zero means out of bag. Any
        signed or unsigned integer dtype; negative counts are an error.
    y : array-like, shape (n_points,)
        Targets; class indices for classification.
    metric : str, optional
        The headline error: ``"squared_error"`` (default) or ``"absolute_error"`` for
        regression; ``"error_rate"`` (default), ``"brier_score"`` or ``"log_loss"`` for
        classification. All of them are computed either way.
    point_weights : array-like, shape (n_points,), optional
        Non-negative weights of the points in the error means (default: all 1).
    n_jobs : int, optional
        Worker threads (default: all cores). Results do not depend on it.
    curve_sizes : sequence of int, optional
        Ensemble sizes k at which the error of the first k members is evaluated (default:
        about 8 geometrically spaced sizes per decade from 1 to the number of members).
        The full ensemble is always included.

    Returns
    -------
    OutOfBag

    Notes
    -----
    Errors are weighted means over the points that have at least one out-of-bag member;
    points without one get a NaN prediction, are left out of the errors, are counted in
    ``n_without_out_of_bag`` and raise a ``RuntimeWarning`` (as do point weights that sum to zero
    over the covered points, which make every error NaN). The Brier score is the
    multi-class form ``sum_c (p_c - [y = c])**2`` (twice scikit-learn's binary
    ``brier_score_loss``); the log loss uses ``-log(max(p_y, 1e-15))``.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> y = rng.normal(size=500)
    >>> draw = bagwise.resample(500, 100, seed=0)
    >>> members = y + rng.normal(scale=0.5, size=(100, 500))   # noisy members
    >>> oob = bagwise.out_of_bag(members, draw.counts, y)
    >>> oob.n_without_out_of_bag, bool(oob.n_out_of_bag.min() > 15)
    (0, True)
    >>> bool(abs(oob.error - 0.25 / 37) < 0.003)   # ≈ 0.5**2 / (members out of bag)
    True
    >>> oob.curve_sizes[:4].tolist(), int(oob.curve_sizes[-1])
    ([1, 2, 3, 4], 100)
    """
    (members, counts, y, kind, n_classes, metric, point_weights, n_jobs,
     sizes) = _out_of_bag_iv(members, counts, y, metric, point_weights, n_jobs, curve_sizes)
    state, (prediction, n_oob, probabilities) = _core.out_of_bag_chunk(
        members, counts, y, point_weights, sizes, kind, n_classes, n_jobs)
    return OutOfBag._build(state, kind, metric, prediction, n_oob, probabilities)


def out_of_bag_stream(*, metric=None, n_jobs=None, curve_sizes=None) -> OutOfBagStream:
    """Out-of-bag evaluation over chunks of points that need not fit in memory together.

    Feed consecutive chunks of points (all members each time) with
    :meth:`OutOfBagStream.update` and call :meth:`OutOfBagStream.finish`; the result
    equals :func:`out_of_bag` on the whole arrays (the error sums are compensated and
    merged in order, so they agree to about 1e-15 relative). Parameters as in
    :func:`out_of_bag`.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(1)
    >>> y = rng.normal(size=1000)
    >>> counts = bagwise.resample(1000, 50, seed=1).counts
    >>> members = y + rng.normal(size=(50, 1000))
    >>> stream = bagwise.out_of_bag_stream()
    >>> for start in range(0, 1000, 300):
    ...     part = slice(start, start + 300)
    ...     stream.update(members[:, part], counts[:, part], y[part])
    >>> whole = bagwise.out_of_bag(members, counts, y)
    >>> bool(np.isclose(stream.finish().error, whole.error, rtol=1e-12))
    True
    """
    if metric is not None and metric not in REGRESSION_METRICS + CLASSIFICATION_METRICS:
        raise ValueError(
            f"`metric`: expected one of {REGRESSION_METRICS + CLASSIFICATION_METRICS}, got {metric!r}"
        )
    return OutOfBagStream(metric, n_jobs_value(n_jobs), curve_sizes)


class OutOfBagStream:
    """Accumulates an out-of-bag evaluation chunk of points by chunk (see
    :func:`out_of_bag_stream`)."""

    def __init__(self, metric, n_jobs, curve_sizes):
        self._metric = metric
        self._n_jobs = n_jobs
        self._curve_sizes = curve_sizes
        self._kind = None
        self._state = None
        self._parts: list[tuple[np.ndarray, np.ndarray, np.ndarray | None]] = []

    def update(self, members_chunk, counts_chunk, y_chunk, point_weights_chunk=None) -> None:
        """Add the next chunk of points: arrays as in :func:`out_of_bag`, restricted to the
        chunk's points (e.g. ``members[:, a:b]`` of a memory map)."""
        if self._kind is not None:
            kind = _members_kind(_array(members_chunk, "members_chunk"))
            if kind != self._kind:
                raise ValueError(f"`members_chunk`: holds {kind} but earlier chunks held {self._kind}")
        (members, counts, y, kind, n_classes, metric, point_weights, n_jobs,
         sizes) = _out_of_bag_iv(members_chunk, counts_chunk, y_chunk, self._metric,
                                 point_weights_chunk, self._n_jobs, self._curve_sizes)
        if self._state is not None:
            if members.shape[0] != self._state.members:
                raise ValueError(
                    f"`members_chunk`: has {members.shape[0]} members but earlier chunks had "
                    f"{self._state.members}"
                )
            if kind == "probabilities" and members.shape[2] != self._parts[0][2].shape[1]:
                raise ValueError(
                    f"`members_chunk`: has {members.shape[2]} classes but earlier chunks had "
                    f"{self._parts[0][2].shape[1]}"
                )
        state, part = _core.out_of_bag_chunk(members, counts, y, point_weights, sizes, kind,
                                             n_classes, n_jobs)
        self._state = state if self._state is None else self._state.merge(state)
        self._kind, self._metric = kind, metric
        self._parts.append(part)

    def __repr__(self) -> str:
        if self._state is None:
            return "OutOfBagStream (no chunk yet)"
        return (f"OutOfBagStream ({self._kind}, {self._state.members} members, "
                f"{self._state.points:,} points in {len(self._parts)} chunks)")

    def finish(self) -> OutOfBag:
        """The :class:`OutOfBag` result of all chunks so far."""
        if self._state is None:
            raise ValueError("`members_chunk`: no chunk was added; call update() first")
        prediction = np.concatenate([p[0] for p in self._parts])
        n_oob = np.concatenate([p[1] for p in self._parts])
        probabilities = None
        if self._kind != "regression":
            width = max(p[2].shape[1] for p in self._parts)
            blocks = []
            for _, n_part, probs in self._parts:
                pad = np.where((n_part == 0)[:, None], np.nan, 0.0)
                blocks.append(np.hstack([probs, np.broadcast_to(pad, (len(n_part), width - probs.shape[1]))]))
            probabilities = np.concatenate(blocks)
        return OutOfBag._build(self._state, self._kind, self._metric, prediction, n_oob,
                               probabilities)


class OutOfBag:
    """Out-of-bag predictions and errors of a bagged ensemble.

    Attributes
    ----------
    task : str
        ``"regression"`` or ``"classification"``.
    kind : str
        How the members predicted: ``"regression"``, ``"labels"`` or ``"probabilities"``.
    members, n_points : int
        Number of members and of training points.
    metric : str
        Name of the headline error.
    error : float
        The headline error of the whole ensemble (the value of ``metric``).
    prediction : ndarray of float64, shape (n_points,)
        Out-of-bag prediction of every point: the mean of its out-of-bag members
        (regression) or the voted class index (classification; ties to the lowest index).
        NaN for points without an out-of-bag member.
    probabilities : ndarray of float64, shape (n_points, n_classes), or None
        Classification: vote fractions (label members) or mean probabilities (probability
        members) of the out-of-bag members; NaN rows for points without one.
    n_out_of_bag : ndarray of int64, shape (n_points,)
        Number of members for which the point is out of bag.
    n_without_out_of_bag : int
        Points with no out-of-bag member (left out of every error).
    squared_error, absolute_error : float or None
        Regression: weighted mean squared and absolute error (None for classification).
    error_rate, brier_score, log_loss : float or None
        Classification: weighted share misclassified, multi-class Brier score
        ``sum_c (p_c - [y = c])**2`` and log loss with ``p`` floored at 1e-15 (None for
        regression).
    curve_sizes : ndarray of int64
        Ensemble sizes k of the error curve (the first k members), ending at ``members``.
    curve_error : ndarray of float64
        The headline error of the first k members at each size (NaN when no point is
        covered yet).
    curve_covered : ndarray of int64
        Points with at least one out-of-bag member among the first k members.
    """

    def __init__(self, *, task, kind, members, n_points, metric, prediction, probabilities,
                 n_out_of_bag, n_without_out_of_bag, errors, curve_sizes, curve):
        self.task = task
        self.kind = kind
        self.members = members
        self.n_points = n_points
        self.metric = metric
        self.prediction = prediction
        self.probabilities = probabilities
        self.n_out_of_bag = n_out_of_bag
        self.n_without_out_of_bag = n_without_out_of_bag
        names = REGRESSION_METRICS + CLASSIFICATION_METRICS
        for name in names:
            setattr(self, name, errors.get(name))
        self.error = errors[metric]
        self.curve_sizes = curve_sizes
        self._curve = curve
        self.curve_covered = curve["covered"]
        self.curve_error = curve[metric]

    @classmethod
    def _build(cls, state, kind, metric, prediction, n_oob, probabilities):
        raw = state.curve()
        curve = {name: np.asarray(values, dtype=np.float64) for name, values in raw.items()}
        curve["covered"] = np.asarray(raw["covered"], dtype=np.int64)
        errors = {name: float(values[-1]) for name, values in curve.items() if name != "covered"}
        missing = int(state.without_out_of_bag)
        if missing:
            warnings.warn(
                f"{missing} of {state.points} points have no out-of-bag member: their "
                "prediction is NaN and they are left out of the errors (use more members)",
                RuntimeWarning, stacklevel=3,
            )
        covered = int(curve["covered"][-1])
        if covered and math.isnan(errors[metric]):
            warnings.warn(
                f"`point_weights`: the weights of the {covered} covered points sum to zero, so every "
                "error is NaN",
                RuntimeWarning, stacklevel=3,
            )
        return cls(task=state.task, kind=kind, members=state.members, n_points=int(state.points),
                   metric=metric, prediction=prediction, probabilities=probabilities,
                   n_out_of_bag=n_oob, n_without_out_of_bag=missing, errors=errors,
                   curve_sizes=np.asarray(state.sizes, dtype=np.int64), curve=curve)

    @property
    def covered(self) -> np.ndarray:
        """Boolean mask of the points with at least one out-of-bag member."""
        return self.n_out_of_bag > 0

    def curve(self, metric: str | None = None) -> np.ndarray:
        """Error of the first k members at every ``curve_sizes`` entry for ``metric``
        (default: the headline metric)."""
        metric = self.metric if metric is None else metric
        if metric not in self._curve or metric == "covered":
            allowed = REGRESSION_METRICS if self.task == "regression" else CLASSIFICATION_METRICS
            raise ValueError(f"`metric`: for {self.task} expected one of {allowed}, got {metric!r}")
        return self._curve[metric]

    def _rows(self) -> list[tuple[str, str]]:
        rows = [
            ("task", self.task if self.kind == "regression" else f"{self.task} ({self.kind})"),
            ("members x points", f"{self.members:,} x {self.n_points:,}"),
        ]
        names = REGRESSION_METRICS if self.task == "regression" else CLASSIFICATION_METRICS
        rows += [(name.replace("_", " "), f"{getattr(self, name):.6g}") for name in names]
        rows.append(("out-of-bag members", f"{self.n_out_of_bag.mean():.1f} per point on average"))
        rows.append(("points without any", f"{self.n_without_out_of_bag:,}"))
        k = len(self.curve_sizes)
        if k > 1:
            first = self.curve_error[0]
            rows.append((f"{self.metric.replace('_', ' ')} curve",
                         f"{first:.4g} (k={self.curve_sizes[0]}) -> {self.curve_error[-1]:.4g} "
                         f"(k={self.curve_sizes[-1]}), {k} sizes"))
        return rows

    def _reading(self) -> str:
        text = f"out-of-bag {self.metric.replace('_', ' ')} {self.error:.4g}"
        if self.n_without_out_of_bag:
            text += f"; {self.n_without_out_of_bag:,} points had no out-of-bag member"
        return text

    def __repr__(self) -> str:
        return text_block("OutOfBag", self._rows(), self._reading())

    def _repr_html_(self) -> str:
        return safe_html(self, lambda: html_block("OutOfBag", self._rows(), self._reading()))

    def to_frame(self):
        """One row per point: ``prediction``, ``n_out_of_bag`` and, for classification,
        one ``probability_<c>`` column per class."""
        import pandas as pd

        columns = {"prediction": self.prediction, "n_out_of_bag": self.n_out_of_bag}
        if self.probabilities is not None:
            for c in range(self.probabilities.shape[1]):
                columns[f"probability_{c}"] = self.probabilities[:, c]
        return pd.DataFrame(columns)

    def curve_frame(self):
        """One row per curve size: ``size``, ``covered`` and every metric of the task."""
        import pandas as pd

        frame = {"size": self.curve_sizes, "covered": self.curve_covered}
        frame.update({k: v for k, v in self._curve.items() if k != "covered"})
        return pd.DataFrame(frame)

