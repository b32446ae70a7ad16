"""How differently the members of a classifier ensemble err (Kuncheva & Whitaker 2003).

`diversity` computes the pairwise measures (Yule's Q, the correlation of the correct/wrong
indicators `correct_correlation`, disagreement, double fault, Cohen's kappa between the
members' labels), their means over pairs, the non-pairwise measures (entropy,
Kohavi-Wolpert variance, interrater agreement, difficulty, generalised and
coincident-failure diversity) and per-member redundancy. `diversity_stream` computes exactly
the same result from chunks of points (e.g. slices of a memory-mapped ``.npy``): every
measure is a function of integer counts that merge exactly, so the split into chunks and
the thread count never change a digit.

Members come as integer ``(n_members, n_points)`` class labels or float32/float64
``(n_members, n_points, n_classes)`` probabilities; a member's label is then its most probable
class (ties: the lowest class index, as in `bagwise.vote_fractions`).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import _chunked, _core
from ._members import members_array, n_classes_of, targets
from ._progress import all_or_nothing, progress_callback, reporting
from ._results import Result
from ._validation import n_jobs_value, positive_int
from ._warnings import warn

__all__ = ["Diversity", "DiversityStream", "diversity", "diversity_stream"]

_PAIRWISE = ("yule_q", "correct_correlation", "disagreement", "double_fault", "kappa")
_SCALARS = ("mean_yule_q", "mean_correct_correlation", "mean_disagreement", "mean_double_fault",
            "mean_kappa", "entropy", "kohavi_wolpert", "interrater_kappa", "difficulty",
            "generalized_diversity", "coincident_failure")


def _diversity_iv(members, y, n_classes):
    """(members as int64 labels or f32/f64 probabilities, y as int64, n_classes); a label
    outside a given count names the array holding it (a stream fixes its count first)."""
    kind, members = members_array(members, kinds=("labels", "probabilities"), min_members=2,
                                  purpose="diversity measures")
    y = targets(y, kind, members.shape[1])
    implied = members.shape[2] if kind == "probabilities" else None
    n_classes = n_classes_of(n_classes, members if implied is None else None, y,
                             implied=implied, blame_labels=True)
    return members, y, n_classes


def _fmt(value) -> str:
    if isinstance(value, float) and math.isnan(value):
        return "nan"
    return f"{value:.4g}"


def _number(value):
    value = float(value)
    return None if math.isnan(value) else value


class DiversityStream:
    """Diversity measures computed from chunks of points; see `diversity_stream`.

    Pickles, and merges with a stream over other points of the same members.
    """

    def __init__(self, n_classes, n_jobs=None):
        # Required (no labels to infer it from yet); the core keeps members x n_classes counts.
        self.n_classes = n_classes_of(positive_int(n_classes, "n_classes"), None)
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = None

    _callback = None

    @all_or_nothing
    def update(self, members, y) -> DiversityStream:
        """Add every member's labels (or probabilities) at a chunk of points and its
        targets. Returns the stream."""
        members, y, _ = _diversity_iv(members, y, self.n_classes)
        if self._core is None:
            self._core = _core.DiversityAccumulator(members.shape[0], self.n_classes)
        elif members.shape[0] != self._core.n_members:
            raise ValueError(f"`members`: this chunk has {members.shape[0]} members but earlier "
                             f"chunks had {self._core.n_members}")
        self._core.update(members, y, self._n_jobs, progress=self._callback)
        return self

    def merge(self, other: DiversityStream) -> DiversityStream:
        """Add the counts of ``other`` (other points of the same members and classes); the
        integer counts add exactly, checked for overflow. Returns this stream."""
        if not isinstance(other, DiversityStream):
            raise TypeError(f"`other`: expected a DiversityStream, got {type(other).__name__}")
        if other.n_classes != self.n_classes:
            raise ValueError(f"`other`: has {other.n_classes} classes but this stream has "
                             f"{self.n_classes}")
        if other._core is None:
            return self
        if self._core is None:
            self._core = _core.DiversityAccumulator(other._core.n_members, self.n_classes)
        elif other._core.n_members != self._core.n_members:
            raise ValueError(f"`other`: has {other._core.n_members} members but this stream has "
                             f"{self._core.n_members}")
        self._core.merge(other._core)
        return self

    def result(self) -> Diversity:
        """The measures over all points added so far."""
        if self._core is None:
            raise ValueError("`members`: no points were added (call update first)")
        return Diversity._build(self._core.result())

    def __repr__(self) -> str:
        if self._core is None:
            return f"DiversityStream ({self.n_classes} classes, no chunk yet)"
        return (f"DiversityStream ({self._core.n_members} members, {self.n_classes} classes, "
                f"{self._core.n_points:,} points)")


def diversity_stream(*, n_classes, n_jobs=None) -> DiversityStream:
    """Start diversity measures fed by chunks of points.

    Call ``.update(members_chunk, y_chunk)`` for consecutive chunks (any split of the
    points; every chunk holds all members), then ``.result()``. The result equals
    `diversity` on all points exactly: the measures are functions of integer counts, summed
    with overflow checks. Streams over different points combine with ``.merge(other)`` and
    pickle.

    Parameters
    ----------
    n_classes : int
        Number of classes; labels are ``0..n_classes-1``.
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.

    Returns
    -------
    DiversityStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> members, y = rng.integers(0, 3, size=(5, 1000)), rng.integers(0, 3, size=1000)
    >>> stream = bagwise.diversity_stream(n_classes=3)
    >>> for start in range(0, 1000, 300):
    ...     _ = stream.update(members[:, start:start + 300], y[start:start + 300])
    >>> stream.result().kappa.tolist() == bagwise.diversity(members, y).kappa.tolist()
    True
    """
    return DiversityStream(n_classes, n_jobs)


def diversity(members, y, *, n_classes=None, n_jobs=None, progress=False) -> Diversity:
    """Diversity measures of a classifier ensemble (Kuncheva & Whitaker 2003).

    For every pair of members (i, j), with N11 the points both get right, N00 the points
    both get wrong and N10, N01 the points only one gets right::

        Yule's Q             (N11 N00 - N01 N10) / (N11 N00 + N01 N10)
        correct correlation  (N11 N00 - N01 N10) / sqrt((N11+N10)(N01+N00)(N11+N01)(N10+N00))
        disagreement         (N01 + N10) / n
        double fault         N00 / n
        kappa                Cohen's (1960) kappa between the two members' labels

    With l the number of members right at a point, the non-pairwise measures describe how
    l is spread over the points (see the `Diversity` attributes). Measures that are
    undefined (a zero denominator) are NaN with one `BagwiseWarning` each.

    Parameters
    ----------
    members : array
        Integer ``(n_members, n_points)`` class labels ``0..n_classes-1``, or float32/float64
        ``(n_members, n_points, n_classes)`` probabilities (a member's label is its most
        probable class, the lowest index among ties). At least 2 members; any strides.
    y : integer array of shape (n_points,)
        True classes ``0..n_classes-1``.
    n_classes : int, optional
        Number of classes (default: the probabilities' last axis, or the largest label + 1).
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    Diversity

    Notes
    -----
    Lazy inputs: ``members`` and ``y`` may be dask or zarr arrays chunked along the points
    (``members`` also a dask DataFrame, one row per point and one column per member; ``y`` a
    dask Series). Without ``n_classes`` the class count of labels comes from a dask max (one
    number per chunk). Each point chunk becomes a `DiversityStream` on the worker holding
    it, and the streams' integer counts add pairwise on the workers. What travels per chunk:
    its state, O(members**2 + members x n_classes) integer counts, independent of the
    points. The client holds the finished measures only. Equal to the in-memory result bit
    for bit (the counts are exact integers).

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> members = np.array([[0, 1, 0, 0], [0, 0, 0, 1], [1, 1, 1, 1]])
    >>> d = bagwise.diversity(members, np.array([0, 1, 0, 1]))
    >>> d.accuracy
    array([0.75, 0.75, 0.5 ])
    >>> float(d.mean_disagreement), float(d.kohavi_wolpert)
    (0.6666666666666666, 0.2222222222222222)
    >>> d.redundant_pairs(top=1)
    [(0, 1, 0.5)]
    """
    if _chunked.any_lazy(members, y):
        return _lazy_diversity(members, y, n_classes, n_jobs, progress)
    members, y, n_classes = _diversity_iv(members, y, n_classes)
    stream = DiversityStream(n_classes, n_jobs)
    with progress_callback(progress, "diversity", "point") as callback, reporting(stream, callback):
        return stream.update(members, y).result()


def _lazy_n_classes(members, y, n_classes) -> int:
    """The class count of lazy ``members`` and ``y`` as `_diversity_iv` finds it in memory
    (given, the probabilities' last axis, or the largest label + 1), checked against the
    largest labels of all points, found by a dask max (one number per chunk travels)."""
    array = _chunked.as_dask(members, "members")
    probabilities = array.ndim == 3 and array.dtype.kind == "f"
    if not probabilities and array.dtype.kind not in "iu":
        # The chunks refuse this kind with the in-memory message.
        return 1 if n_classes is None else positive_int(n_classes, "n_classes")
    top_members, top_y = _chunked.largest([(None if probabilities else members, "members"),
                                           (y, "y")])
    return n_classes_of(n_classes, None if probabilities else np.array([top_members]),
                        None if top_y is None else np.array([top_y]),
                        implied=array.shape[2] if probabilities else None, blame_labels=True)


def _diversity_update(stream, members, y):
    return stream.update(members, y)


def _lazy_diversity(members, y, n_classes, n_jobs, progress=False) -> Diversity:
    """`diversity` over the point chunks of lazy arrays: one `DiversityStream` per chunk,
    its integer counts added pairwise on the workers."""
    members = _chunked.point_major(members, "members")
    n_classes = _lazy_n_classes(members, y, n_classes)
    n_jobs = n_jobs_value(n_jobs)
    stream = _chunked.reduce_over([(members, "members", 1), (y, "y", 0)],
                                  lambda: DiversityStream(n_classes, n_jobs), _diversity_update,
                                  progress=progress)
    return stream.result()


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Diversity(Result):
    """Diversity of a classifier ensemble's members (Kuncheva & Whitaker 2003).

    Frozen: attributes cannot be reassigned and the arrays are read-only.

    Attributes
    ----------
    n_members, n_points : int
        Shape of the predictions.
    accuracy : ndarray of float64, shape (n_members,)
        Share of the points each member gets right.
    yule_q, correct_correlation, disagreement, double_fault, kappa : ndarray of float64
        Shape (n_members, n_members). The pairwise measures (symmetric);
        ``correct_correlation`` is the correlation of two members' right/wrong indicators.
        Diagonals: Q = correct correlation = kappa = 1, disagreement 0, double fault the
        member's error rate. An undefined pair is NaN: Q when ``N11 N00 + N01 N10 = 0``, the
        correct correlation when a member is always or never right, kappa when both members
        always predict the same single class.
    mean_yule_q, mean_correct_correlation, mean_disagreement, mean_double_fault, mean_kappa : float
        Means over the pairs i < j, undefined pairs left out (with a warning).
    entropy : float
        ``(1/n) sum_p min(l, M - l) / (M - ceil(M/2))``: 0 when the members always agree on
        being right or wrong, 1 when they split as evenly as possible.
    kohavi_wolpert : float
        ``(1/(n M^2)) sum_p l (M - l)``; equals ``(M - 1)/(2M)`` times the mean disagreement.
    interrater_kappa : float
        ``1 - sum_p l (M - l) / (n M (M - 1) pbar (1 - pbar))`` with ``pbar`` the mean
        accuracy (Fleiss' kappa of the right/wrong ratings); lower is more diverse. NaN when
        ``pbar`` is 0 or 1.
    difficulty : float
        Variance over the points of ``l / M``; lower is more diverse.
    generalized_diversity : float
        ``1 - p(2)/p(1)``: 0 when the members always fail together, 1 when a failure of one
        member never coincides with another's. NaN when no member ever fails.
    coincident_failure : float
        Coincident-failure diversity: 0 when failures always coincide (or there are none),
        1 when every failure is a single member's.
    correct_tally : ndarray of int64, shape (n_members + 1,)
        Number of points where exactly ``l`` members are right, ``l = 0..n_members``.
    redundancy : ndarray of float64, shape (n_members,)
        Every member's mean disagreement with the others: the lower, the more it repeats
        the rest of the ensemble.
    """

    _title = "Diversity"

    n_members: int
    n_points: int
    accuracy: np.ndarray
    yule_q: np.ndarray
    correct_correlation: np.ndarray
    disagreement: np.ndarray
    double_fault: np.ndarray
    kappa: np.ndarray
    mean_yule_q: float
    mean_correct_correlation: float
    mean_disagreement: float
    mean_double_fault: float
    mean_kappa: float
    entropy: float
    kohavi_wolpert: float
    interrater_kappa: float
    difficulty: float
    generalized_diversity: float
    coincident_failure: float
    correct_tally: np.ndarray
    redundancy: np.ndarray

    @classmethod
    def _build(cls, measures) -> Diversity:
        """The one place a Diversity is made: from the core's measures; warns once for
        every undefined measure."""
        fields = {f.name: getattr(measures, f.name) for f in dataclasses.fields(cls)}
        for value in fields.values():
            if isinstance(value, np.ndarray):
                value.setflags(write=False)
        result = cls(**fields)
        pairs = result.n_members * (result.n_members - 1) // 2
        for measure, count, why in (
            ("Yule's Q", measures.undefined_yule_q, "N11*N00 + N01*N10 = 0"),
            ("the correct correlation", measures.undefined_correct_correlation,
             "a member always or never right"),
            ("Cohen's kappa", measures.undefined_kappa, "both members always give one same class"),
        ):
            if count:
                warn(f"`members`: {measure} is undefined ({why}) for {count} of {pairs} pairs; "
                     "those entries are NaN and left out of its mean")
        if math.isnan(result.interrater_kappa):
            warn("`members`: the interrater agreement kappa is undefined (NaN) because the mean "
                 "member accuracy is 0 or 1")
        if math.isnan(result.generalized_diversity):
            warn("`members`: the generalized diversity is undefined (NaN) because no member "
                 "ever fails")
        return result

    def _pairs(self):
        return np.triu_indices(self.n_members, k=1)

    def redundant_pairs(self, top=10) -> list[tuple[int, int, float]]:
        """The ``top`` most redundant pairs: ``(member_a, member_b, disagreement)`` with
        ``member_a < member_b``, lowest disagreement first, ties by lower indices."""
        top = positive_int(top, "top")
        a, b = self._pairs()
        values = self.disagreement[a, b]
        order = np.argsort(values, kind="stable")[:top]  # pairs are listed in index order
        return [(int(a[k]), int(b[k]), float(values[k])) for k in order]

    def summary(self) -> dict:
        """The scalar measures as plain ints and floats (NaN as None), ready for ``json.dumps``."""
        out = {"n_members": self.n_members, "n_points": self.n_points,
               "mean_accuracy": _number(np.mean(self.accuracy))}
        out.update({name: _number(getattr(self, name)) for name in _SCALARS})
        return out

    def to_frame(self):
        """One row per pair ``member_a < member_b`` with the pairwise measures."""
        import pandas as pd

        a, b = self._pairs()
        columns = {"member_a": a.astype(np.int64), "member_b": b.astype(np.int64)}
        columns.update({name: getattr(self, name)[a, b] for name in _PAIRWISE})
        return pd.DataFrame(columns)

    def _rows(self):
        return [
            ("members x points", f"{self.n_members:,} x {self.n_points:,}"),
            ("mean accuracy", _fmt(float(np.mean(self.accuracy)))),
            ("mean disagreement", _fmt(self.mean_disagreement)),
            ("mean double fault", _fmt(self.mean_double_fault)),
            ("mean Yule's Q", _fmt(self.mean_yule_q)),
            ("mean correct correlation", _fmt(self.mean_correct_correlation)),
            ("mean Cohen's kappa", _fmt(self.mean_kappa)),
            ("entropy", _fmt(self.entropy)),
            ("Kohavi-Wolpert variance", _fmt(self.kohavi_wolpert)),
            ("interrater kappa", _fmt(self.interrater_kappa)),
            ("difficulty", _fmt(self.difficulty)),
            ("generalized diversity", _fmt(self.generalized_diversity)),
            ("coincident failure", _fmt(self.coincident_failure)),
        ]

    def _reading(self):
        q = self.mean_yule_q
        if math.isnan(q):
            return "members never err in a way that tells them apart (Yule's Q undefined)"
        word = "together" if q > 0.5 else "somewhat together" if q > 0 else "on different points"
        return (f"members tend to err {word} (mean Q {q:.2f}); they disagree on "
                f"{self.mean_disagreement:.1%} of the points per pair")
