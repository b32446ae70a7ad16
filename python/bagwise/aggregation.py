"""Combining member predictions into the ensemble's prediction.

`aggregate` gives the (weighted) mean of values, the soft vote of probabilities or the
majority vote of labels; `vote_fractions` the share of the votes each class gets. Members
are read by the shared reader (`bagwise._members`): float values ``(n_members,
n_points)``, float probabilities ``(n_members, n_points, n_classes)`` or integer labels
``(n_members, n_points)``.
"""

from __future__ import annotations

import numpy as np

from . import _chunked, _core
from ._members import member_weights as _member_weights
from ._members import members_array, n_classes_of
from ._progress import progress_callback
from ._validation import n_jobs_value, positive_int

__all__ = ["aggregate", "vote_fractions"]


def _aggregate_iv(members, member_weights, n_classes, n_jobs):
    kind, members = members_array(members)
    member_weights = _member_weights(member_weights, members.shape[0])
    if kind == "labels":
        n_classes = n_classes_of(n_classes, members)
    elif n_classes is not None:
        positive_int(n_classes, "n_classes")
        if kind == "probabilities" and n_classes != members.shape[2]:
            raise ValueError(f"`n_classes`: is {n_classes} but `members` has {members.shape[2]} "
                             "classes")
    return kind, members, member_weights, n_classes, n_jobs_value(n_jobs)


def _lazy_classes(members, n_classes):
    """The class count of lazy labels as `_aggregate_iv` finds it in memory (given or the
    largest label + 1), checked against the largest label of all points, a dask max; the
    float kinds' chunks check a given count themselves."""
    array = _chunked.as_dask(members, "members")
    if array.dtype.kind not in "iu" or array.ndim != 2:
        return n_classes
    (top,) = _chunked.largest([(members, "members")])
    return n_classes_of(n_classes, np.array([top]))


def _lazy_map(members, member_weights, n_classes, n_jobs, compute, progress=False) -> np.ndarray:
    """A per-point map over the point chunks of lazy ``members``, joined in point order."""
    members = _chunked.point_major(members, "members")
    n_classes = _lazy_classes(members, n_classes)
    weights = None if member_weights is None else np.asarray(member_weights)
    parts = _chunked.map_over([(members, "members", 1)], compute,
                              whole=[weights, n_classes, n_jobs], progress=progress)
    return np.concatenate(parts)


def _aggregate_chunk(member_weights, n_classes, n_jobs, members):
    return aggregate(members, member_weights=member_weights, n_classes=n_classes, n_jobs=n_jobs)


def _vote_fractions_chunk(member_weights, n_classes, n_jobs, members):
    return vote_fractions(members, n_classes=n_classes, member_weights=member_weights,
                          n_jobs=n_jobs)


def aggregate(members, *, member_weights=None, n_classes=None, n_jobs=None, progress=False) -> np.ndarray:
    """Combine member predictions into the ensemble prediction.

    Parameters
    ----------
    members : array
        Float ``(n_members, n_points)`` values, float ``(n_members, n_points, n_classes)``
        probabilities, or integer ``(n_members, n_points)`` class labels.
    member_weights : array of shape (n_members,), optional
        Non-negative member weights summing to 1 (within 1e-6); equal weights by default.
    n_classes : int, optional
        Number of classes for labels (default: largest label + 1).
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    ndarray
        Values: the weighted mean, float64 ``(n_points,)``. Probabilities: the soft vote
        (mean probabilities), float64 ``(n_points, n_classes)``. Labels: the (weighted)
        majority vote, int64 ``(n_points,)``; among tied classes the lowest class index wins
        (weighted totals are compared as float sums).

    Notes
    -----
    Lazy inputs: ``members`` may be a dask or zarr array chunked along the points (or a dask
    DataFrame, one row per point and one column per member); each chunk is combined on the
    worker holding it and the per-point results come back in point order (what travels per
    chunk: the chunk's combined predictions, O(points of the chunk x n_classes); the member
    weights go once to each worker). Without ``n_classes`` the class count of labels comes
    from a dask max. The client holds the returned numpy array, equal to the in-memory one
    bit for bit.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> bagwise.aggregate(np.array([[1.0, 2.0], [3.0, 6.0]]))
    array([2., 4.])
    >>> bagwise.aggregate(np.array([[2, 0], [1, 1], [1, 2], [2, 2]]))  # ties go to class 1
    array([1, 2])
    """
    if _chunked.is_lazy(members):
        return _lazy_map(members, member_weights, n_classes, n_jobs, _aggregate_chunk, progress)
    kind, members, member_weights, n_classes, n_jobs = _aggregate_iv(
        members, member_weights, n_classes, n_jobs)
    with progress_callback(progress, "aggregate", "point") as callback:
        if kind == "labels":
            return _core.majority_vote(members, n_classes, member_weights, n_jobs, callback)[0]
        return _core.mean_prediction(members, member_weights, n_jobs, callback)


def vote_fractions(members, *, n_classes=None, member_weights=None, n_jobs=None,
                   progress=False) -> np.ndarray:
    """Share of the (weighted) member votes each class gets at every point.

    The fractions estimate class probabilities from hard votes: row ``j`` is
    ``sum_b w_b [t_bj == c] / sum_b w_b`` for ``c = 0..n_classes-1``.

    Parameters
    ----------
    members : integer array of shape (n_members, n_points)
        Class labels ``0..n_classes-1``.
    n_classes : int, optional
        Number of classes (default: largest label + 1).
    member_weights : array of shape (n_members,), optional
        Non-negative member weights summing to 1.
    n_jobs : int, optional
        Worker threads.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    ndarray of float64, shape (n_points, n_classes)

    Notes
    -----
    Lazy inputs: as in `aggregate` (what travels per chunk: its fractions, O(points of the
    chunk x n_classes)).

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> bagwise.vote_fractions(np.array([[0, 1], [0, 2], [1, 2], [0, 2]]), n_classes=3)
    array([[0.75, 0.25, 0.  ],
           [0.  , 0.25, 0.75]])
    """
    if _chunked.is_lazy(members):
        return _lazy_map(members, member_weights, n_classes, n_jobs, _vote_fractions_chunk,
                         progress)
    kind, members, member_weights, n_classes, n_jobs = _aggregate_iv(
        members, member_weights, n_classes, n_jobs)
    if kind != "labels":
        raise TypeError("`members`: vote fractions need integer labels; for probabilities the "
                        "soft vote is `aggregate(members)`")
    with progress_callback(progress, "vote fractions", "point") as callback:
        return _core.majority_vote(members, n_classes, member_weights, n_jobs, callback)[1]
