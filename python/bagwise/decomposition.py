"""The ambiguity decomposition of the ensemble's loss.

`decompose` splits the loss of the combined prediction into the mean member loss and the
ambiguity (Krogh & Vedelsby 1995); `decompose_stream` computes the same result from chunks
of points (e.g. slices of a memory-mapped ``.npy``), and its streams merge and pickle.
Members are read by the shared reader (`bagwise._members`): float values (loss
``"squared_error"``), float probabilities (``"brier_score"``) or integer labels
(``"error_rate"``).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import _chunked, _core
from ._display import fmt as _fmt
from ._members import loss_for, loss_option, members_array, n_classes_of, targets
from ._members import member_weights as _member_weights
from ._progress import all_or_nothing, progress_callback, reporting
from ._results import Result
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["Decomposition", "DecompositionStream", "decompose", "decompose_stream"]


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Decomposition(Result):
    """Loss of the combined prediction against the loss of its members.

    Attributes
    ----------
    loss : str
        ``"squared_error"``, ``"brier_score"`` or ``"error_rate"``.
    identity : bool
        True when ``ensemble_loss = member_loss - ambiguity`` holds exactly (squared error
        and Brier score); False for error rates.
    n_members, n_points : int
        Shape of the predictions.
    member_weights : ndarray or None
        Member weights (None: equal).
    ensemble_loss : float
        Mean over points of the loss of the combined prediction (mean, soft vote or
        majority vote).
    member_loss : float
        Mean over points of the (weighted) mean member loss.
    ambiguity : float or None
        Mean over points of ``sum_b w_b (t_b - f)**2`` (summed over classes for Brier);
        ``None`` for error rates. 0 for a single member.
    vote_gain : float or None
        Error rates only: ``member_loss - ensemble_loss`` (mean member error minus vote
        error); not an identity, can be negative. ``None`` for squared error and Brier.
    relative_gain : float
        ``ambiguity / member_loss`` (``vote_gain / member_loss`` for error rates): the share
        of the mean member loss that combining removes. NaN (with a warning) when the member
        loss is 0.
    ensemble_loss_per_point, member_loss_per_point : ndarray of float64, shape (n_points,)
        The same losses point by point.
    ambiguity_per_point, vote_gain_per_point : ndarray or None
        Per-point ambiguity (squared error, Brier) or vote gain (error rates); the other is
        None.
    """

    _title = "Decomposition"

    loss: str
    identity: bool
    n_members: int
    n_points: int
    member_weights: np.ndarray | None
    ensemble_loss: float
    member_loss: float
    ambiguity: float | None
    vote_gain: float | None
    relative_gain: float
    ensemble_loss_per_point: np.ndarray
    member_loss_per_point: np.ndarray
    ambiguity_per_point: np.ndarray | None
    vote_gain_per_point: np.ndarray | None

    def _rows(self):
        gain_row = (("ambiguity", _fmt(self.ambiguity)) if self.identity
                    else ("vote gain", _fmt(self.vote_gain)))
        return [
            ("loss", self.loss + ("" if self.member_weights is None else " (weighted)")),
            ("members x points", f"{self.n_members:,} x {self.n_points:,}"),
            ("ensemble loss", _fmt(self.ensemble_loss)),
            ("mean member loss", _fmt(self.member_loss)),
            gain_row,
            ("relative gain", _fmt(self.relative_gain)),
        ]

    def _reading(self):
        if self.identity:
            return ("ensemble = member - ambiguity holds exactly (Krogh & Vedelsby 1995); "
                    f"combining removes {self.relative_gain:.1%} of the mean member loss")
        return ("no identity for error rates: vote gain = mean member error - vote error "
                "(it can be negative)")

    def to_frame(self):
        """One row per point: ensemble loss, member loss, and ambiguity or vote gain."""
        import pandas as pd

        gain_name = "ambiguity" if self.identity else "vote_gain"
        gain = self.ambiguity_per_point if self.identity else self.vote_gain_per_point
        return pd.DataFrame({"ensemble_loss": self.ensemble_loss_per_point,
                             "member_loss": self.member_loss_per_point, gain_name: gain})


def _decomposition(loss, n_members, member_weights, means, parts) -> Decomposition:
    """The one place a `Decomposition` is built: from the core's typed means and the
    per-point losses of every chunk, with the warnings of its edge cases."""
    if len(parts) == 1:
        ensemble, member, gain = parts[0]
    else:
        ensemble, member, gain = (np.concatenate(part) for part in zip(*parts))
    identity = loss != "error_rate"
    gain_mean = float(means.gain)
    member_loss = float(means.member_loss)
    if n_members == 1:
        warn("`members`: a single member - nothing is combined, so the ambiguity (or vote "
             "gain) is 0")
    if member_loss > 0:
        relative_gain = gain_mean / member_loss
    else:
        warn("`members`: every member is exact (member loss 0), so relative_gain is NaN")
        relative_gain = math.nan
    return Decomposition(
        loss=loss, identity=identity, n_members=n_members, n_points=int(means.n_points),
        member_weights=member_weights, ensemble_loss=float(means.ensemble_loss),
        member_loss=member_loss,
        ambiguity=gain_mean if identity else None, vote_gain=None if identity else gain_mean,
        relative_gain=relative_gain, ensemble_loss_per_point=ensemble,
        member_loss_per_point=member,
        ambiguity_per_point=gain if identity else None,
        vote_gain_per_point=None if identity else gain,
    )


class DecompositionStream:
    """A decomposition computed from chunks of points; see `decompose_stream`.

    ``update(members, y) -> self`` adds a chunk, ``merge(other) -> self`` adds the points
    of another stream (after this stream's points), ``result()`` gives the
    `Decomposition`; streams pickle (the core state travels as bytes).
    """

    def __init__(self, loss=None, member_weights=None, n_jobs=None):
        self.loss = loss_option(loss)
        self._weights_arg = member_weights
        self._weights = None
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = None
        self._kind = None
        self._parts: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []

    _callback = None

    def _start(self, kind, n_members):
        self.loss = loss_for(self.loss, kind)
        self._kind = kind
        self._weights = _member_weights(self._weights_arg, n_members)
        self._core = _core.DecompositionAccumulator(self.loss, self._weights)

    @all_or_nothing
    def update(self, members, y) -> DecompositionStream:
        """Add the predictions of every member at a chunk of points and their targets."""
        kind, members = members_array(members)
        if self._core is None:
            self._start(kind, members.shape[0])
        else:
            loss_for(self.loss, kind)
            if members.shape[0] != self._core.n_members:
                raise ValueError(f"`members`: this chunk has {members.shape[0]} members but "
                                 f"earlier chunks had {self._core.n_members}")
        y = targets(y, kind, members.shape[1])
        n_classes = None
        if kind == "labels":
            n_classes = n_classes_of(None, members, y, blame_labels=True)
        elif kind == "probabilities" and y.max() >= members.shape[2]:
            raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
        self._parts.append(self._core.update(members, y, n_classes, self._n_jobs,
                                             progress=self._callback))
        return self

    def merge(self, other: DecompositionStream) -> DecompositionStream:
        """Add the points of ``other`` (same loss and member weights) after this stream's."""
        if not isinstance(other, DecompositionStream):
            raise TypeError(f"`other`: expected a DecompositionStream, got {type(other).__name__}")
        if other._core is None:
            return self
        if self._core is None:
            if self.loss is not None and self.loss != other.loss:
                raise ValueError(f"`other`: has loss {other.loss!r} but this stream {self.loss!r}")
            self.loss, self._kind, self._weights = other.loss, other._kind, other._weights
            self._core = _core.DecompositionAccumulator.from_bytes(other._core.to_bytes())
        else:
            self._core.merge(other._core)
        self._parts.extend(other._parts)
        return self

    def result(self) -> Decomposition:
        """The decomposition over all points added so far."""
        if self._core is None:
            raise ValueError("`members`: no points were added (call update first)")
        return _decomposition(self.loss, self._core.n_members, self._weights,
                              self._core.result(), self._parts)


def decompose_stream(*, loss=None, member_weights=None, n_jobs=None) -> DecompositionStream:
    """Start a decomposition fed by chunks of points.

    Call ``.update(members_chunk, y_chunk)`` for consecutive chunks (any split of the
    points; every chunk holds all members), then ``.result()``. The result equals
    ``decompose`` on all points up to rounding (about 1e-15 relative): each chunk yields
    mergeable sums (Chan, Golub & LeVeque 1983) merged in order. Streams over different
    points combine with ``.merge(other)`` and pickle. Memory: the per-point losses
    (24 bytes a point) plus one chunk.

    Parameters
    ----------
    loss, member_weights, n_jobs
        As in `decompose`.

    Returns
    -------
    DecompositionStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> members, y = rng.normal(size=(20, 1000)), rng.normal(size=1000)
    >>> stream = bagwise.decompose_stream()
    >>> for start in range(0, 1000, 300):
    ...     _ = stream.update(members[:, start:start + 300], y[start:start + 300])
    >>> d = stream.result()
    >>> bool(np.isclose(d.ambiguity, bagwise.decompose(members, y).ambiguity, rtol=1e-12))
    True
    """
    return DecompositionStream(loss=loss, member_weights=member_weights, n_jobs=n_jobs)


def decompose(members, y, *, loss=None, member_weights=None, n_jobs=None, progress=False) -> Decomposition:
    """Split the ensemble's loss into the mean member loss and the ambiguity.

    For a weighted average ``f = sum_b w_b t_b`` (weights summing to 1) the ambiguity
    decomposition (Krogh & Vedelsby 1995, NIPS 7, eq. 5-6) holds exactly at every point::

        (f - y)**2 = sum_b w_b (t_b - y)**2 - sum_b w_b (t_b - f)**2
        ensemble   = mean member loss        - ambiguity

    so combining never hurts a squared loss, and gains exactly the spread of the members
    around their mean. The multi-class Brier score ``sum_c (p_c - [y == c])**2`` (Brier
    1950) is a squared loss on the one-hot target, so the identity holds for probabilities
    and their soft vote too. The routine makes one pass over the members per point (West
    1979 weighted moments); the identity holds to rounding.

    For integer labels (loss ``"error_rate"``) it reports the majority-vote error rate
    and the mean member error rate. **No identity holds there**: their difference, the
    ``vote_gain``, is not a spread of the members and can be negative (a vote can be worse
    than its average member), so ``ambiguity`` is ``None`` for labels.

    Parameters
    ----------
    members : array
        Float ``(n_members, n_points)`` values, float ``(n_members, n_points, n_classes)``
        probabilities (each member's probabilities summing to 1 at every point within
        1e-5), or integer ``(n_members, n_points)`` labels.
    y : array of shape (n_points,)
        Targets: numbers for values, integer class labels otherwise.
    loss : {"squared_error", "brier_score", "error_rate"}, optional
        Must fit the members' kind; by default the one that does.
    member_weights : array of shape (n_members,), optional
        Non-negative member weights summing to 1 (within 1e-6); equal by default.
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    Decomposition

    Notes
    -----
    Lazy inputs: ``members`` and ``y`` may be dask or zarr arrays chunked along the points
    (``members`` also a dask DataFrame, one row per point and one column per member; ``y`` a
    dask Series); any chunking of the member or class axis is made one chunk. Each point
    chunk becomes a `DecompositionStream` on the worker holding it, and the streams merge
    pairwise in point order on the workers. What travels per chunk: its state, O(members)
    (the member weights and loss moments) plus the chunk's per-point losses, 24 bytes a
    point; the member weights go once to each worker. The client holds the result: three
    per-point arrays, O(points). Equal to the in-memory result to about 1e-15 relative (the
    per-point losses bit for bit).

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(1)
    >>> y = rng.normal(size=500)
    >>> members = y + rng.normal(size=(50, 500))        # noisy, independent members
    >>> d = bagwise.decompose(members, y)
    >>> bool(np.isclose(d.ensemble_loss, d.member_loss - d.ambiguity, rtol=1e-12))
    True
    >>> round(d.relative_gain, 2)                        # combining removes ~98% of the loss
    0.98
    """
    if _chunked.any_lazy(members, y):
        return _lazy_decompose(members, y, loss, member_weights, n_jobs, progress)
    stream = decompose_stream(loss=loss, member_weights=member_weights, n_jobs=n_jobs)
    with progress_callback(progress, "decompose", "point") as callback, reporting(stream, callback):
        return stream.update(members, y).result()


def _decompose_update(stream, members, y):
    return stream.update(members, y)


def _lazy_decompose(members, y, loss, member_weights, n_jobs, progress=False) -> Decomposition:
    """`decompose` over the point chunks of lazy arrays: one `DecompositionStream` per chunk
    where it lives, merged pairwise in point order."""
    loss = loss_option(loss)
    weights = None if member_weights is None else np.asarray(member_weights)
    n_jobs = n_jobs_value(n_jobs)
    members = _chunked.point_major(members, "members")
    stream = _chunked.reduce_over(
        [(members, "members", 1), (y, "y", 0)],
        lambda w: DecompositionStream(loss=loss, member_weights=w, n_jobs=n_jobs),
        _decompose_update, whole=[weights], progress=progress)
    return stream.result()
