"""Out-of-bag predictions, errors and error curves: `out_of_bag`, `out_of_bag_stream` and
their `OutOfBag` result."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import _chunked, _core
from ._members import as_array, check_count_total, in_bag_counts, members_array, n_classes_of, targets
from ._progress import all_or_nothing, progress_callback
from ._results import Result
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["OutOfBag", "OutOfBagStream", "out_of_bag", "out_of_bag_stream"]

REGRESSION_LOSSES = ("squared_error", "absolute_error")
CLASSIFICATION_LOSSES = ("error_rate", "brier_score", "log_loss")
LOG_LOSS_FLOOR = 1e-15
#: Labels this family refuses above (the core takes up to `MAX_CLASSES`): the result holds
#: dense ``(n_points, n_classes)`` vote fractions, so a stray large label (say 100,000 in
#: place of 1) is refused here rather than turned into a mostly-zero table that size.
OUT_OF_BAG_MAX_CLASSES = 1 << 16


def _core_kind(kind):
    """The out-of-bag core and `OutOfBag.kind` name the values kind ``"regression"``."""
    return "regression" if kind == "values" else kind


def _sizes_iv(sizes, n_members):
    if sizes is None:
        return list(_core.default_sizes(n_members))
    sizes = as_array(sizes, "sizes")
    if sizes.ndim != 1 or sizes.size == 0 or sizes.dtype.kind not in "iu":
        raise TypeError("`sizes`: expected a non-empty 1-D sequence of integers")
    sizes = np.unique(sizes.astype(np.int64))
    if sizes[0] < 1 or sizes[-1] > n_members:
        raise ValueError(f"`sizes`: ensemble sizes must lie in 1..{n_members}, got {sizes.tolist()}")
    sizes = sizes.tolist()
    if sizes[-1] != n_members:
        sizes.append(n_members)  # the whole ensemble is always evaluated
    return sizes


def _loss_iv(loss, task):
    allowed = REGRESSION_LOSSES if task == "regression" else CLASSIFICATION_LOSSES
    if loss is None:
        return allowed[0]
    if loss not in allowed:
        raise ValueError(f"`loss`: for {task} expected one of {allowed}, got {loss!r}")
    return loss


def _out_of_bag_iv(members, counts, y, loss, point_weights, n_jobs, sizes, earlier_kind=None,
                   whole=True, check_labels=False):
    """Checks shapes and dtypes; values (NaN, ranges, sums) are checked by the core.
    ``earlier_kind``: the kind of a stream's earlier chunks, which this one must match;
    ``whole``: False for a stream's chunk (the counts of some training rows only).

    Labels are passed on unread with the class count of ``y``: the core refuses a label
    outside it, and `_checked_chunk` then calls again with ``check_labels`` (the count of
    all labels, or the error naming the bad label)."""
    kind, members = members_array(members, check_labels=check_labels)
    kind = _core_kind(kind)
    if earlier_kind is not None and kind != earlier_kind:
        raise ValueError(f"`members`: holds {kind} but earlier chunks held {earlier_kind}")
    n_members, n_points = members.shape[:2]
    # The members are the training rows' predictions: one column of counts per point.
    # The core's pass returns the counts' total for the check `_checked_chunk` makes.
    counts = in_bag_counts(counts, n_members=n_members, n_rows=n_points, rows_from="members",
                           whole=whole, total_from_pass=True)
    # Class targets may come as whole floats here (the core reads float64 targets).
    y = targets(y, "values" if kind == "regression" else kind, n_points, float_labels=True)
    n_classes = None
    if kind == "labels" and not check_labels:
        n_classes = int(y.max()) + 1
    if kind == "labels" and (check_labels or n_classes > OUT_OF_BAG_MAX_CLASSES):
        members = members_array(members, check_labels=True)[1]
        n_classes = n_classes_of(None, members, y, max_classes=OUT_OF_BAG_MAX_CLASSES,
                                 blame_labels=True)
    # Class indices go to the core as the int64 `targets` returns (no float copy).
    y = np.ascontiguousarray(y, dtype=np.float64 if kind == "regression" else np.int64)
    loss = _loss_iv(loss, "regression" if kind == "regression" else "classification")
    if point_weights is not None:
        point_weights = as_array(point_weights, "point_weights")
        if point_weights.ndim != 1 or point_weights.shape[0] != n_points:
            raise ValueError(
                f"`point_weights`: expected shape ({n_points},) to match `members`, got {point_weights.shape}"
            )
        if point_weights.dtype.kind not in "iuf":
            raise TypeError(f"`point_weights`: expected numbers, got dtype {point_weights.dtype}")
        point_weights = np.ascontiguousarray(point_weights, dtype=np.float64)
    sizes = _sizes_iv(sizes, n_members)
    return members, counts, y, kind, n_classes, loss, point_weights, n_jobs_value(n_jobs), sizes


def _in_bag_filled(members, counts):
    """``members`` with every in-bag entry replaced by a filler the core accepts, when it has
    missing (non-finite) entries and all of them are in bag; else ``None``.

    Out-of-bag predictions often mark in-bag entries with NaN (as
    `BagRegressor.out_of_bag_predictions` does); those entries are never read, so they may
    be missing. A missing out-of-bag entry is still an error (core)."""
    if members.dtype.kind != "f":
        return None
    missing = ~np.isfinite(members)
    if not missing.any():
        return None
    in_bag = counts != 0
    seen = in_bag[..., None] if members.ndim == 3 else in_bag
    if not np.all(np.broadcast_to(seen, members.shape)[missing]):
        return None
    # Fillers that pass the core's checks: 0, or uniform probabilities.
    fill = 1.0 / members.shape[2] if members.ndim == 3 else 0.0
    return np.where(seen, fill, members).astype(members.dtype, copy=False)


def _monotone(callback):
    """``callback`` passed only reports that do not go back (a retried call restarts)."""
    if callback is None:
        return None
    highest = [0]

    def report(done, total):
        if done >= highest[0]:
            highest[0] = done
            callback(done, total)

    return report


def _chunk(members, counts, y, point_weights, sizes, kind, n_classes, n_jobs, callback):
    """The core's result for one chunk. Missing members are looked for only when the core
    refuses the members (one more pass over them would cost as much as the whole call).
    ``callback`` must not go back on a retry: `_checked_chunk` wraps it once for all runs."""
    try:
        return _core.out_of_bag_chunk(members, counts, y, point_weights, sizes, kind,
                                      n_classes, n_jobs, callback)
    except ValueError as err:
        filled = _in_bag_filled(members, counts) if str(err).startswith("`members`") else None
        if filled is None:
            raise
    return _core.out_of_bag_chunk(filled, counts, y, point_weights, sizes, kind, n_classes,
                                  n_jobs, callback)


def _checked_chunk(arguments, earlier_kind=None, whole=True, callback=None, check=None):
    """`_out_of_bag_iv`, ``check(kind, members)`` if given, then `_chunk`. Labels the core
    refuses (outside the classes of ``y``) are checked and counted here, and the chunk is
    run again with their count. ``arguments``: members, counts, y, loss, point_weights,
    n_jobs, sizes."""
    (members, counts, y, kind, n_classes, loss, point_weights, n_jobs,
     sizes) = _out_of_bag_iv(*arguments, earlier_kind=earlier_kind, whole=whole)
    if check is not None:
        check(kind, members)
    callback = _monotone(callback)  # one wrapper over both runs: reports never go back
    try:
        result = _chunk(members, counts, y, point_weights, sizes, kind, n_classes, n_jobs,
                        callback)
    except ValueError as err:
        if kind != "labels" or not str(err).startswith("`members`: class labels must lie"):
            raise
        (members, counts, y, kind, n_classes, loss, point_weights, n_jobs,
         sizes) = _out_of_bag_iv(*arguments, earlier_kind=earlier_kind, whole=whole,
                                 check_labels=True)
        result = _chunk(members, counts, y, point_weights, sizes, kind, n_classes, n_jobs,
                        callback)
    state, arrays, count_total = result
    check_count_total(counts, count_total, "counts")
    return (state, arrays), kind, loss


def out_of_bag(members, counts, y, *, loss=None, point_weights=None, n_jobs=None,
               sizes=None, progress=False) -> OutOfBag:
    """Out-of-bag predictions and loss of a bagged ensemble, and its loss curve.

    For every training point only the members whose in-bag count of the point is zero
    are aggregated (Breiman 1996): the mean prediction for regression, the mean class
    probability or the vote fraction for classification. The loss of these predictions
    estimates the ensemble's test loss without a hold-out set; the loss curve repeats it
    for the first k members at every ensemble size k of ``sizes``.

    Parameters
    ----------
    members : ndarray
        Member predictions on the training points, one of: float32/float64 regression
        predictions of shape (n_members, n_points); integer class labels
        ``0..n_classes-1`` of shape (n_members, n_points) (majority vote; ties go to the
        lowest class index); float class probabilities of shape (n_members, n_points,
        n_classes), each member's row summing to 1 within 1e-5. Read without a copy, with
        any strides.
    counts : ndarray of int, shape (n_members, n_points), or Resample
        In-bag counts, e.g. ``bagwise.resample(...).counts``; zero means out of bag. Any
        signed or unsigned integer dtype; negative counts are an error.
    y : array-like, shape (n_points,)
        Targets; class indices for classification.
    loss : str, optional
        The headline loss: ``"squared_error"`` (default) or ``"absolute_error"`` for
        regression; ``"error_rate"`` (default), ``"brier_score"`` or ``"log_loss"`` for
        classification. All of them are computed either way.
    point_weights : array-like, shape (n_points,), optional
        Non-negative weights of the points in the loss means (default: all 1).
    n_jobs : int, optional
        Worker threads (default: all cores). Results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.
    sizes : sequence of int, optional
        Ensemble sizes k at which the loss of the first k members is evaluated (default:
        about 8 geometrically spaced sizes per decade from 1 to the number of members).
        The full ensemble is always included.

    Returns
    -------
    OutOfBag

    Notes
    -----
    Lazy inputs: ``members``, ``counts``, ``y`` and ``point_weights`` may be dask or zarr
    arrays chunked along the training rows (``members`` and ``counts`` also dask DataFrames,
    one row per training row and one column per member; ``y`` a dask Series); the members
    and the counts are aligned chunk by chunk (the chunks of the first lazy one), and any
    chunking of the member axis is made one chunk. Each chunk becomes an `OutOfBagStream` on
    the worker holding it, merged pairwise in row order on the workers. What travels per
    chunk: its state, O(sizes) compensated loss sums, plus the chunk's per-row results
    (prediction, members out of bag and, for classification, probabilities: O(rows of the
    chunk x n_classes)). The client holds the result, O(rows). Equal to the in-memory result
    to about 1e-15 relative (the per-row predictions bit for bit).

    Losses are weighted means over the points that have at least one out-of-bag member;
    points without one get a NaN prediction, are left out of the losses, are counted in
    ``n_without_out_of_bag`` and raise a ``BagwiseWarning`` (as do point weights that sum
    to zero over the covered points, which make every loss NaN). The Brier score is the
    multi-class form ``sum_c (p_c - [y = c])**2`` (twice scikit-learn's binary
    ``brier_score_loss``); the log loss uses ``-log(max(p_y, 1e-15))``.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> y = rng.normal(size=500)
    >>> draw = bagwise.resample(500, 100, rng=0)
    >>> members = y + rng.normal(scale=0.5, size=(100, 500))   # noisy members
    >>> oob = bagwise.out_of_bag(members, draw.counts, y)
    >>> oob.n_without_out_of_bag, bool(oob.n_out_of_bag.min() > 15)
    (0, True)
    >>> bool(abs(oob.ensemble_loss - 0.25 / 37) < 0.003)   # ≈ 0.5**2 / (members out of bag)
    True
    >>> oob.sizes[:4].tolist(), int(oob.sizes[-1])
    ([1, 2, 3, 4], 100)
    """
    if _chunked.any_lazy(members, counts, y, point_weights):
        return _lazy_out_of_bag(members, counts, y, loss, point_weights, n_jobs, sizes, progress)
    with progress_callback(progress, "out of bag", "point") as callback:
        (state, (prediction, n_oob, probabilities)), kind, loss = _checked_chunk(
            (members, counts, y, loss, point_weights, n_jobs, sizes), callback=callback)
    return OutOfBag._build(state, kind, loss, prediction, n_oob, probabilities)


def _out_of_bag_update(stream, members, counts, y, point_weights):
    return stream.update(members, counts, y, point_weights)


def _lazy_out_of_bag(members, counts, y, loss, point_weights, n_jobs, sizes,
                     progress=False) -> OutOfBag:
    """`out_of_bag` over the row chunks of lazy arrays: the members and the counts are
    aligned chunk by chunk along the training rows, each chunk becomes an `OutOfBagStream`
    on the worker holding it, merged pairwise in row order."""
    if not _chunked.is_lazy(counts):
        counts = getattr(counts, "counts", counts)  # a Resample
    members = _chunked.point_major(members, "members")
    counts = _chunked.point_major(counts, "counts")
    start = out_of_bag_stream(loss=loss, n_jobs=n_jobs)
    loss, n_jobs = start._loss, start._n_jobs
    sizes = None if sizes is None else np.asarray(sizes)
    stream = _chunked.reduce_over(
        [(members, "members", 1), (counts, "counts", 1), (y, "y", 0),
         (point_weights, "point_weights", 0)],
        lambda k: OutOfBagStream(loss, n_jobs, k), _out_of_bag_update, whole=[sizes],
        progress=progress)
    return stream.result()


def out_of_bag_stream(*, loss=None, n_jobs=None, sizes=None) -> OutOfBagStream:
    """Out-of-bag evaluation over chunks of points that need not fit in memory together.

    Feed consecutive chunks of points (all members each time) with
    :meth:`OutOfBagStream.update` and call :meth:`OutOfBagStream.result`; the result
    equals :func:`out_of_bag` on the whole arrays (the loss sums are compensated and
    merged in order, so they agree to about 1e-15 relative). Streams over consecutive
    parts of the points combine with :meth:`OutOfBagStream.merge` and pickle. Parameters
    as in :func:`out_of_bag`.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(1)
    >>> y = rng.normal(size=1000)
    >>> counts = bagwise.resample(1000, 50, rng=1).counts
    >>> members = y + rng.normal(size=(50, 1000))
    >>> stream = bagwise.out_of_bag_stream()
    >>> for start in range(0, 1000, 300):
    ...     part = slice(start, start + 300)
    ...     _ = stream.update(members[:, part], counts[:, part], y[part])
    >>> whole = bagwise.out_of_bag(members, counts, y)
    >>> bool(np.isclose(stream.result().ensemble_loss, whole.ensemble_loss, rtol=1e-12))
    True
    """
    if loss is not None and loss not in REGRESSION_LOSSES + CLASSIFICATION_LOSSES:
        raise ValueError(
            f"`loss`: expected one of {REGRESSION_LOSSES + CLASSIFICATION_LOSSES}, got {loss!r}"
        )
    return OutOfBagStream(loss, n_jobs_value(n_jobs), sizes)


class OutOfBagStream:
    """Accumulates an out-of-bag evaluation chunk of points by chunk (see
    :func:`out_of_bag_stream`); pickles, and merges with a stream over later points."""

    def __init__(self, loss, n_jobs, sizes):
        self._loss = loss
        self._n_jobs = n_jobs
        self._sizes = sizes
        self._kind = None
        self._state = None
        self._parts: list[tuple[np.ndarray, np.ndarray, np.ndarray | None]] = []

    _callback = None

    def _check_compatible(self, kind, n_members, n_classes_of_probabilities):
        """Raises unless a chunk (or stream) of ``kind`` fits the chunks seen so far."""
        if self._state is None:
            return
        if kind != self._kind:
            raise ValueError(f"`members`: holds {kind} but earlier chunks held {self._kind}")
        if n_members != self._state.n_members:
            raise ValueError(f"`members`: has {n_members} members but earlier chunks had "
                             f"{self._state.n_members}")
        if kind == "probabilities" and n_classes_of_probabilities != self._parts[0][2].shape[1]:
            raise ValueError(f"`members`: has {n_classes_of_probabilities} classes but "
                             f"earlier chunks had {self._parts[0][2].shape[1]}")

    @all_or_nothing
    def update(self, members, counts, y, point_weights=None) -> OutOfBagStream:
        """Add the next chunk of points: arrays as in :func:`out_of_bag`, restricted to the
        chunk's points (e.g. ``members[:, a:b]`` of a memory map). Returns the stream."""
        def check(kind, members):
            self._check_compatible(kind, members.shape[0],
                                   members.shape[2] if kind == "probabilities" else None)

        (state, part), kind, loss = _checked_chunk(
            (members, counts, y, self._loss, point_weights, self._n_jobs, self._sizes),
            earlier_kind=self._kind, whole=False, callback=self._callback, check=check)
        self._state = state if self._state is None else self._state.merge(state)
        self._kind, self._loss = kind, loss
        self._parts.append(part)
        return self

    def merge(self, other: OutOfBagStream) -> OutOfBagStream:
        """Add the points of ``other``, a stream over the points that follow this one's
        (same members, sizes and kind). Returns this stream."""
        if not isinstance(other, OutOfBagStream):
            raise TypeError(f"`other`: expected an OutOfBagStream, got {type(other).__name__}")
        if other._state is None:
            return self
        if self._state is None:
            self._kind, self._loss = other._kind, other._loss
            self._state, self._parts = other._state, list(other._parts)
            return self
        probabilities = other._parts[0][2]
        self._check_compatible(other._kind, other._state.n_members,
                               None if probabilities is None else probabilities.shape[1])
        if other._loss != self._loss:
            raise ValueError(f"`other`: reports {other._loss!r} but this stream {self._loss!r}")
        self._state = self._state.merge(other._state)
        self._parts.extend(other._parts)
        return self

    def __repr__(self) -> str:
        if self._state is None:
            return "OutOfBagStream (no chunk yet)"
        return (f"OutOfBagStream ({self._kind}, {self._state.n_members} members, "
                f"{self._state.n_points:,} points in {len(self._parts)} chunks)")

    def result(self) -> OutOfBag:
        """The :class:`OutOfBag` result of all chunks so far."""
        if self._state is None:
            raise ValueError("`members`: no chunk was added; call update() first")
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
        return OutOfBag._build(self._state, self._kind, self._loss, prediction, n_oob,
                               probabilities)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class OutOfBag(Result):
    """Out-of-bag predictions and losses of a bagged ensemble.

    Attributes
    ----------
    task : str
        ``"regression"`` or ``"classification"``.
    kind : str
        How the members predicted: ``"regression"``, ``"labels"`` or ``"probabilities"``.
    n_members, n_points : int
        Number of members and of training points.
    loss : str
        Name of the headline loss.
    ensemble_loss : float
        The headline loss of the whole ensemble (the value of ``loss``).
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
        Points with no out-of-bag member (left out of every loss).
    squared_error, absolute_error : float or None
        Regression: weighted mean squared and absolute error (None for classification).
    error_rate, brier_score, log_loss : float or None
        Classification: weighted share misclassified, multi-class Brier score
        ``sum_c (p_c - [y = c])**2`` and log loss with ``p`` floored at 1e-15 (None for
        regression).
    sizes : ndarray of int64
        Ensemble sizes k of the loss curve (the first k members), ending at ``n_members``.
    curve : ndarray of float64
        The headline loss of the first k members at each of ``sizes`` (NaN when no point
        is covered yet); :meth:`loss_curve` gives the other losses.
    n_covered : ndarray of int64
        At each of ``sizes``, the points with at least one out-of-bag member among the
        first k members.
    """

    _title = "OutOfBag"

    task: str
    kind: str
    n_members: int
    n_points: int
    loss: str
    ensemble_loss: float
    prediction: np.ndarray
    probabilities: np.ndarray | None
    n_out_of_bag: np.ndarray
    n_without_out_of_bag: int
    squared_error: float | None
    absolute_error: float | None
    error_rate: float | None
    brier_score: float | None
    log_loss: float | None
    sizes: np.ndarray
    curve: np.ndarray
    n_covered: np.ndarray
    _curves: dict = dataclasses.field(repr=False)

    @classmethod
    def _build(cls, state, kind, loss, prediction, n_oob, probabilities):
        """The one place an OutOfBag is made: from the core state and per-point arrays;
        warns (once each) about uncovered points and weights summing to zero."""
        raw = state.losses()
        curves = {name: np.asarray(values, dtype=np.float64)
                  for name in REGRESSION_LOSSES + CLASSIFICATION_LOSSES
                  if (values := getattr(raw, name)) is not None}
        losses = {name: float(values[-1]) for name, values in curves.items()}
        n_covered = np.asarray(raw.n_covered, dtype=np.int64)
        missing = int(state.n_without_out_of_bag)
        if missing:
            warn(f"{missing} of {state.n_points} points have no out-of-bag member: their "
                 "prediction is NaN and they are left out of the losses (use more members)")
        covered = int(n_covered[-1])
        if covered and math.isnan(losses[loss]):
            warn(f"`point_weights`: the weights of the {covered} covered points sum to zero, so "
                 "every loss is NaN")
        return cls(task=state.task, kind=kind, n_members=state.n_members,
                   n_points=int(state.n_points), loss=loss, ensemble_loss=losses[loss],
                   prediction=prediction, probabilities=probabilities, n_out_of_bag=n_oob,
                   n_without_out_of_bag=missing,
                   **{name: losses.get(name) for name in REGRESSION_LOSSES + CLASSIFICATION_LOSSES},
                   sizes=np.asarray(state.sizes, dtype=np.int64), curve=curves[loss],
                   n_covered=n_covered, _curves=curves)

    @property
    def covered(self) -> np.ndarray:
        """Boolean mask of the points with at least one out-of-bag member."""
        return self.n_out_of_bag > 0

    def loss_curve(self, loss: str | None = None) -> np.ndarray:
        """Loss of the first k members at every entry of ``sizes`` for ``loss`` (default:
        the headline loss, i.e. ``curve``)."""
        loss = self.loss if loss is None else loss
        if loss not in self._curves:
            allowed = REGRESSION_LOSSES if self.task == "regression" else CLASSIFICATION_LOSSES
            raise ValueError(f"`loss`: for {self.task} expected one of {allowed}, got {loss!r}")
        return self._curves[loss]

    def _rows(self) -> list[tuple[str, str]]:
        rows = [
            ("task", self.task if self.kind == "regression" else f"{self.task} ({self.kind})"),
            ("members x points", f"{self.n_members:,} x {self.n_points:,}"),
        ]
        names = REGRESSION_LOSSES if self.task == "regression" else CLASSIFICATION_LOSSES
        rows += [(name.replace("_", " "), f"{getattr(self, name):.6g}") for name in names]
        rows.append(("out-of-bag members", f"{self.n_out_of_bag.mean():.1f} per point on average"))
        rows.append(("points without any", f"{self.n_without_out_of_bag:,}"))
        k = len(self.sizes)
        if k > 1:
            rows.append((f"{self.loss.replace('_', ' ')} curve",
                         f"{self.curve[0]:.4g} (size {self.sizes[0]}) -> {self.curve[-1]:.4g} "
                         f"(size {self.sizes[-1]}), {k} sizes"))
        return rows

    def _reading(self) -> str:
        text = f"out-of-bag {self.loss.replace('_', ' ')} {self.ensemble_loss:.4g}"
        if self.n_without_out_of_bag:
            text += f"; {self.n_without_out_of_bag:,} points had no out-of-bag member"
        return text

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
        """One row per curve size: ``size``, ``n_covered`` and every loss of the task."""
        import pandas as pd

        frame = {"size": self.sizes, "n_covered": self.n_covered}
        frame.update(self._curves)
        return pd.DataFrame(frame)
