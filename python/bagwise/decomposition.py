"""Combining member predictions and splitting the ensemble's loss.

`aggregate` and `vote_fractions` combine members; `decompose` gives the ambiguity
decomposition (Krogh & Vedelsby 1995); `size_curve` the loss of the first-k-member ensemble
with the exact finite-ensemble law; `correlation` the spread and correlation of member
residuals. `decompose_stream` and `size_curve_stream` compute the same results from chunks of
points (e.g. slices of a memory-mapped ``.npy``).

Member predictions come in three kinds, told apart by dtype and shape:

- values: float32/float64 ``(members, n_points)`` (regression), loss ``"squared"``;
- probabilities: float32/float64 ``(members, n_points, n_classes)``, loss ``"brier"``;
- labels: integer ``(members, n_points)`` class indices ``0..n_classes-1``, loss
  ``"error_rate"``.

Float inputs are read in place (no upcasting copy, any strides); integer labels are read as
int64 (other integer dtypes are converted once).
"""

from __future__ import annotations

import math
import numbers
import warnings

import numpy as np

from . import _core
from ._display import html_block, safe_html, text_block
from ._validation import positive_int, seed_value, n_jobs_value

__all__ = [
    "Correlation",
    "Decomposition",
    "DecompositionStream",
    "SizeCurve",
    "SizeCurveStream",
    "aggregate",
    "correlation",
    "decompose",
    "decompose_stream",
    "size_curve",
    "size_curve_stream",
    "vote_fractions",
]

_LOSS_OF_KIND = {"values": "squared", "probabilities": "brier", "labels": "error_rate"}
_KIND_OF_LOSS = {loss: kind for kind, loss in _LOSS_OF_KIND.items()}
_WEIGHT_TOLERANCE = 1e-6
_MAX_VOTE_CLASSES = 1 << 16  # the core's vote tables hold 2048 points x n_classes totals


# -- shared input checks ------------------------------------------------------------------

def _members_array(members, name="members"):
    """(kind, array): float members stay as they are (f32/f64, any strides); labels int64."""
    array = members if isinstance(members, np.ndarray) else np.asarray(members)
    kind = array.dtype.kind
    if kind == "f":
        if array.dtype not in (np.float32, np.float64):
            raise TypeError(f"`{name}`: float predictions must be float32 or float64, got {array.dtype}")
        if array.ndim == 2:
            found = "values"
        elif array.ndim == 3:
            found = "probabilities"
        else:
            raise ValueError(
                f"`{name}`: expected (members, n_points) values or (members, n_points, n_classes) "
                f"probabilities, got shape {array.shape}"
            )
    elif kind in "iu":
        if array.ndim != 2:
            raise ValueError(f"`{name}`: integer labels must have shape (members, n_points), "
                             f"got {array.shape}")
        found = "labels"
    else:
        raise TypeError(f"`{name}`: expected float predictions or integer labels, got dtype "
                        f"{array.dtype}")
    if 0 in array.shape:
        raise ValueError(f"`{name}`: is empty (shape {array.shape})")
    if found == "labels":
        if array.dtype == np.uint64 and array.max() > np.iinfo(np.int64).max:
            raise ValueError(f"`{name}`: labels are class indices; got {array.max()}")
        array = array.astype(np.int64, copy=False)
        if array.min() < 0:
            raise ValueError(f"`{name}`: labels are class indices 0..n_classes-1; got {array.min()}")
    return found, array


def _target(y, kind, n_points):
    array = y if isinstance(y, np.ndarray) else np.asarray(y)
    if array.ndim != 1:
        raise ValueError(f"`y`: expected a 1-D array, got shape {array.shape}")
    if array.shape[0] != n_points:
        raise ValueError(f"`y`: has {array.shape[0]} values but `members` has {n_points} points")
    if kind == "values":
        if array.dtype.kind not in "fiu":
            raise TypeError(f"`y`: expected numbers, got dtype {array.dtype}")
        array = array.astype(np.float64, copy=False)
        if not np.all(np.isfinite(array)):
            raise ValueError("`y`: contains NaN or infinite values")
        return array
    if array.dtype.kind not in "iu":
        raise TypeError(f"`y`: class labels must be integers 0..n_classes-1, got dtype {array.dtype}")
    array = array.astype(np.int64, copy=False)
    if array.size and array.min() < 0:
        raise ValueError(f"`y`: labels are class indices 0..n_classes-1; got {array.min()}")
    return array


def _weights(weights, members):
    if weights is None:
        return None
    array = np.asarray(weights)
    if array.dtype.kind not in "fiu":
        raise TypeError(f"`weights`: expected numbers, got dtype {array.dtype}")
    array = array.astype(np.float64)
    if array.shape != (members,):
        raise ValueError(f"`weights`: expected shape ({members},) (one per member), got {array.shape}")
    if not np.all(np.isfinite(array)) or np.any(array < 0):
        raise ValueError("`weights`: must be finite and non-negative")
    if abs(array.sum() - 1.0) > _WEIGHT_TOLERANCE:
        raise ValueError(f"`weights`: must sum to 1 (within {_WEIGHT_TOLERANCE:g}), got {array.sum()!r}")
    return array


def _n_classes(n_classes, labels, y=None):
    top = int(labels.max())
    if y is not None and y.size:
        top = max(top, int(y.max()))
    if n_classes is None:
        n_classes = top + 1
    else:
        n_classes = positive_int(n_classes, "n_classes")
    if n_classes > _MAX_VOTE_CLASSES:
        raise ValueError(f"`n_classes`: {n_classes} classes exceed the {_MAX_VOTE_CLASSES} a vote "
                         "supports; labels must be class indices 0..n_classes-1")
    if top >= n_classes:
        raise ValueError(f"`n_classes`: is {n_classes} but a label {top} occurs")
    return n_classes


def _loss_name(loss, kind):
    if loss is None:
        return _LOSS_OF_KIND[kind]
    if loss not in _KIND_OF_LOSS:
        raise ValueError(f"`loss`: expected 'squared', 'brier' or 'error_rate', got {loss!r}")
    if _KIND_OF_LOSS[loss] != kind:
        raise ValueError(
            f"`loss`: {loss!r} needs {_KIND_OF_LOSS[loss]} but `members` holds {kind} "
            "(values: float (members, n_points); probabilities: float (members, n_points, "
            "n_classes); labels: integer (members, n_points))"
        )
    return loss


def _loss_iv(loss):
    if loss is not None and loss not in _KIND_OF_LOSS:
        raise ValueError(f"`loss`: expected 'squared', 'brier' or 'error_rate', got {loss!r}")
    return loss


def _fmt(value) -> str:
    if value is None:
        return "-"
    if isinstance(value, float) and math.isnan(value):
        return "nan"
    return f"{value:.6g}"


# -- aggregation ----------------------------------------------------------------------------

def _aggregate_iv(members, weights, n_classes, n_jobs):
    kind, members = _members_array(members)
    weights = _weights(weights, members.shape[0])
    if kind == "labels":
        n_classes = _n_classes(n_classes, members)
    elif n_classes is not None:
        positive_int(n_classes, "n_classes")
        if kind == "probabilities" and n_classes != members.shape[2]:
            raise ValueError(f"`n_classes`: is {n_classes} but `members` has {members.shape[2]} "
                             "classes")
    return kind, members, weights, n_classes, n_jobs_value(n_jobs)


def aggregate(members, *, weights=None, n_classes=None, n_jobs=None) -> np.ndarray:
    """Combine member predictions into the ensemble prediction.

    Parameters
    ----------
    members : array
        Float ``(members, n_points)`` values, float ``(members, n_points, n_classes)``
        probabilities, or integer ``(members, n_points)`` class labels.
    weights : array of shape (members,), optional
        Non-negative member weights summing to 1 (within 1e-6); equal weights by default.
    n_classes : int, optional
        Number of classes for labels (default: largest label + 1).
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.

    Returns
    -------
    ndarray
        Values: the weighted mean, float64 ``(n_points,)``. Probabilities: the soft vote
        (mean probabilities), float64 ``(n_points, n_classes)``. Labels: the (weighted)
        majority vote, int64 ``(n_points,)``; among tied classes the lowest class index wins
        (weighted totals are compared as float sums).

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> bagwise.aggregate(np.array([[1.0, 2.0], [3.0, 6.0]]))
    array([2., 4.])
    >>> bagwise.aggregate(np.array([[2, 0], [1, 1], [1, 2], [2, 2]]))  # ties go to class 1
    array([1, 2])
    """
    kind, members, weights, n_classes, n_jobs = _aggregate_iv(members, weights, n_classes, n_jobs)
    if kind == "labels":
        return _core.majority_vote(members, n_classes, weights, n_jobs)[0]
    return _core.mean_prediction(members, weights, n_jobs)


def vote_fractions(members, *, n_classes=None, weights=None, n_jobs=None) -> np.ndarray:
    """Share of the (weighted) member votes each class gets at every point.

    The fractions estimate class probabilities from hard votes: row ``j`` is
    ``sum_b w_b [t_bj == c] / sum_b w_b`` for ``c = 0..n_classes-1``.

    Parameters
    ----------
    members : integer array of shape (members, n_points)
        Class labels ``0..n_classes-1``.
    n_classes : int, optional
        Number of classes (default: largest label + 1).
    weights : array of shape (members,), optional
        Non-negative member weights summing to 1.
    n_jobs : int, optional
        Worker threads.

    Returns
    -------
    ndarray of float64, shape (n_points, n_classes)

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> bagwise.vote_fractions(np.array([[0, 1], [0, 2], [1, 2], [0, 2]]), n_classes=3)
    array([[0.75, 0.25, 0.  ],
           [0.  , 0.25, 0.75]])
    """
    kind, members, weights, n_classes, n_jobs = _aggregate_iv(members, weights, n_classes, n_jobs)
    if kind != "labels":
        raise TypeError("`members`: vote fractions need integer labels; for probabilities the "
                        "soft vote is `aggregate(members)`")
    return _core.majority_vote(members, n_classes, weights, n_jobs)[1]


# -- decomposition --------------------------------------------------------------------------

class DecompositionStream:
    """A decomposition computed from chunks of points; see `decompose_stream`."""

    def __init__(self, loss=None, weights=None, n_jobs=None):
        self.loss = _loss_iv(loss)
        self._weights_arg = weights
        self._weights = None
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = None
        self._kind = None
        self._parts: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []

    def update(self, members, y) -> DecompositionStream:
        """Add the predictions of every member at a chunk of points and their targets."""
        kind, members = _members_array(members)
        if self._core is None:
            self.loss = _loss_name(self.loss, kind)
            self._kind = kind
            self._weights = _weights(self._weights_arg, members.shape[0])
            self._core = _core.DecompositionAccumulator(self.loss, self._weights)
        else:
            _loss_name(self.loss, kind)
            if members.shape[0] != self._core.members:
                raise ValueError(f"`members`: this chunk has {members.shape[0]} members but earlier "
                                 f"chunks had {self._core.members}")
        y = _target(y, kind, members.shape[1])
        n_classes = None
        if kind == "labels":
            n_classes = _n_classes(None, members, y)
        elif kind == "probabilities" and y.max() >= members.shape[2]:
            raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
        self._parts.append(self._core.update(members, y, n_classes, self._n_jobs))
        return self

    def finish(self) -> Decomposition:
        """The decomposition over all points added so far."""
        if self._core is None:
            raise ValueError("`members`: no points were added (call update first)")
        if len(self._parts) == 1:
            ensemble, member, gain = self._parts[0]
        else:
            ensemble, member, gain = (np.concatenate(part) for part in zip(*self._parts))
        moments = self._core.moments()
        return Decomposition(
            loss=self.loss, members=self._core.members, n_points=int(moments["n_points"]),
            weights=self._weights, ensemble_loss=moments["ensemble"]["mean"],
            member_loss=moments["member"]["mean"], gain=moments["gain"]["mean"],
            ensemble_loss_per_point=ensemble, member_loss_per_point=member, gain_per_point=gain,
        )


def decompose_stream(*, loss=None, weights=None, n_jobs=None) -> DecompositionStream:
    """Start a decomposition fed by chunks of points.

    Call ``.update(members_chunk, y_chunk)`` for consecutive chunks (any split of the
    points; every chunk holds all members), then ``.finish()``. The result equals
    ``decompose`` on all points up to rounding (about 1e-15 relative): each chunk yields
    mergeable sums (Chan, Golub & LeVeque 1983) merged in order. Memory: the per-point losses
    (24 bytes a point) plus one chunk.

    Parameters
    ----------
    loss, weights, n_jobs
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
    >>> d = stream.finish()
    >>> bool(np.isclose(d.ambiguity, bagwise.decompose(members, y).ambiguity, rtol=1e-12))
    True
    """
    return DecompositionStream(loss=loss, weights=weights, n_jobs=n_jobs)


def decompose(members, y, *, loss=None, weights=None, n_jobs=None) -> Decomposition:
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
        Float ``(members, n_points)`` values, float ``(members, n_points, n_classes)``
        probabilities (each member's probabilities summing to 1 at every point within
        1e-5), or integer ``(members, n_points)`` labels.
    y : array of shape (n_points,)
        Targets: numbers for values, integer class labels otherwise.
    loss : {"squared", "brier", "error_rate"}, optional
        Must fit the members' kind; by default the one that does.
    weights : array of shape (members,), optional
        Non-negative member weights summing to 1 (within 1e-6); equal by default.
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.

    Returns
    -------
    Decomposition

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
    stream = decompose_stream(loss=loss, weights=weights, n_jobs=n_jobs)
    return stream.update(members, y).finish()


class Decomposition:
    """Loss of the combined prediction against the loss of its members.

    Attributes
    ----------
    loss : str
        ``"squared"``, ``"brier"`` or ``"error_rate"``.
    identity : bool
        True when ``ensemble_loss = member_loss - ambiguity`` holds exactly (squared and
        Brier); False for error rates.
    members, n_points : int
        Shape of the predictions.
    weights : ndarray or None
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
        error); not an identity, can be negative. ``None`` for squared and Brier.
    relative_gain : float
        ``ambiguity / member_loss`` (``vote_gain / member_loss`` for error rates): the share
        of the mean member loss that combining removes. NaN (with a warning) when the member
        loss is 0.
    ensemble_loss_per_point, member_loss_per_point : ndarray of float64, shape (n_points,)
        The same losses point by point.
    ambiguity_per_point, vote_gain_per_point : ndarray or None
        Per-point ambiguity (squared, Brier) or vote gain (error rates); the other is None.
    """

    def __init__(self, *, loss, members, n_points, weights, ensemble_loss, member_loss, gain,
                 ensemble_loss_per_point, member_loss_per_point, gain_per_point):
        self.loss = loss
        self.identity = loss != "error_rate"
        self.members = members
        self.n_points = n_points
        self.weights = weights
        self.ensemble_loss = float(ensemble_loss)
        self.member_loss = float(member_loss)
        self.ensemble_loss_per_point = ensemble_loss_per_point
        self.member_loss_per_point = member_loss_per_point
        if self.identity:
            self.ambiguity, self.ambiguity_per_point = float(gain), gain_per_point
            self.vote_gain, self.vote_gain_per_point = None, None
        else:
            self.ambiguity, self.ambiguity_per_point = None, None
            self.vote_gain, self.vote_gain_per_point = float(gain), gain_per_point
        if members == 1:
            warnings.warn("`members`: a single member - nothing is combined, so the ambiguity "
                          "(or vote gain) is 0", UserWarning, stacklevel=3)
        if self.member_loss > 0:
            self.relative_gain = float(gain) / self.member_loss
        else:
            warnings.warn("`members`: every member is exact (member loss 0), so relative_gain "
                          "is NaN", UserWarning, stacklevel=3)
            self.relative_gain = math.nan

    def _rows(self):
        gain_row = (("ambiguity", _fmt(self.ambiguity)) if self.identity
                    else ("vote gain", _fmt(self.vote_gain)))
        return [
            ("loss", self.loss + ("" if self.weights is None else " (weighted)")),
            ("members x points", f"{self.members:,} x {self.n_points:,}"),
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

    def __repr__(self) -> str:
        return text_block("Decomposition", self._rows(), self._reading())

    def _repr_html_(self) -> str:
        return safe_html(self, lambda: html_block("Decomposition", self._rows(), self._reading()))

    def to_frame(self):
        """One row per point: ensemble loss, member loss, and ambiguity or vote gain."""
        import pandas as pd

        gain_name = "ambiguity" if self.identity else "vote_gain"
        gain = self.ambiguity_per_point if self.identity else self.vote_gain_per_point
        return pd.DataFrame({"ensemble_loss": self.ensemble_loss_per_point,
                             "member_loss": self.member_loss_per_point, gain_name: gain})


# -- ensemble-size curve --------------------------------------------------------------------

def _default_sizes(members):
    """About 20 roughly log-spaced sizes from 1 to members, always including both ends."""
    grid = np.unique(np.round(np.geomspace(1, members, num=min(members, 20))).astype(np.int64))
    return [int(k) for k in np.union1d(grid, [1, members])]


def _sizes_iv(sizes, members):
    if sizes is None:
        return _default_sizes(members)
    array = np.asarray(sizes)
    if array.ndim != 1 or array.size == 0:
        raise ValueError(f"`sizes`: expected a non-empty 1-D list of sizes, got shape {array.shape}")
    if array.dtype.kind not in "iu":
        raise TypeError(f"`sizes`: expected integers, got dtype {array.dtype}")
    if array.min() < 1 or array.max() > members:
        raise ValueError(f"`sizes`: every size must lie in 1..{members} (the number of members)")
    return [int(k) for k in np.unique(array)]


class SizeCurveStream:
    """The ensemble-size curve computed from chunks of points; see `size_curve_stream`."""

    def __init__(self, loss=None, sizes=None, orders=20, seed=0, n_jobs=None):
        self.loss = _loss_iv(loss)
        self._sizes_arg = sizes
        self.orders = positive_int(orders, "orders")
        self.seed = seed_value(seed)
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = None
        self._members = None

    def update(self, members, y) -> SizeCurveStream:
        """Add the predictions of every member at a chunk of points and their targets."""
        kind, members = _members_array(members)
        if self._core is None:
            self.loss = _loss_name(self.loss, kind)
            self._members = members.shape[0]
            sizes = _sizes_iv(self._sizes_arg, self._members)
            self._core = _core.SizeCurveAccumulator(self.loss, self._members, sizes, self.orders,
                                                    self.seed)
        else:
            _loss_name(self.loss, kind)
            if members.shape[0] != self._members:
                raise ValueError(f"`members`: this chunk has {members.shape[0]} members but earlier "
                                 f"chunks had {self._members}")
        y = _target(y, kind, members.shape[1])
        n_classes = _n_classes(None, members, y) if kind == "labels" else None
        if kind == "probabilities" and y.max() >= members.shape[2]:
            raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
        self._core.update(members, y, n_classes, self._n_jobs)
        return self

    def finish(self) -> SizeCurve:
        """The curve over all points added so far."""
        if self._core is None:
            raise ValueError("`members`: no points were added (call update first)")
        return SizeCurve(loss=self.loss, orders=self.orders, seed=self.seed,
                         member_orders=self._core.orders(), **self._core.finish())


def size_curve_stream(*, loss=None, sizes=None, orders=20, seed=0, n_jobs=None) -> SizeCurveStream:
    """Start an ensemble-size curve fed by chunks of points.

    ``.update(members_chunk, y_chunk)`` for consecutive chunks, then ``.finish()``; the
    result equals `size_curve` on all points up to rounding. The member orders are drawn
    from ``seed`` at the first chunk, when the number of members is known.

    Parameters
    ----------
    loss, sizes, orders, seed, n_jobs
        As in `size_curve`.

    Returns
    -------
    SizeCurveStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> members, y = rng.normal(size=(30, 900)), np.zeros(900)
    >>> stream = bagwise.size_curve_stream(seed=3)
    >>> for start in range(0, 900, 400):
    ...     _ = stream.update(members[:, start:start + 400], y[start:start + 400])
    >>> whole = bagwise.size_curve(members, y, seed=3)
    >>> bool(np.allclose(stream.finish().curve, whole.curve, rtol=1e-12))
    True
    """
    return SizeCurveStream(loss=loss, sizes=sizes, orders=orders, seed=seed, n_jobs=n_jobs)


def size_curve(members, y, *, sizes=None, orders=20, seed=0, loss=None, n_jobs=None) -> SizeCurve:
    """Loss of the ensemble of the first k members, for k on a grid, over random orders.

    For each of ``orders`` random member orders (order ``o`` uses member stream ``o`` drawn
    from ``seed`` and a Fisher-Yates shuffle), the ensemble of the first ``k`` members is
    scored: squared loss of the mean (values), Brier score of the soft vote
    (probabilities), or error rate of the majority vote (labels; ties to the lowest class).
    The curve is the mean over orders, with its standard error across orders.

    For squared-type losses the finite-ensemble law is exact. Members fit on independent
    resamples are, given the data, i.i.d. draws at a point with mean ``mu`` and variance
    ``sigma**2``; for ``k`` of them ``E[(mean_k - y)**2] = (mu - y)**2 + sigma**2 / k``, so
    ``E[loss(k)] = loss(inf) + W / k`` with ``W`` the mean over points of the
    across-member variance. Estimated from the ``M`` members at hand (``W`` with ddof 1):
    ``infinite_loss = loss(M) - W/M`` and ``law(k) = infinite_loss + W/k``. The first ``k``
    members of a random order are a sample of ``k`` of the ``M`` drawn without replacement,
    whose mean has variance ``(s**2/k)(1 - k/M)`` (Cochran 1977, Theorem 2.2); hence the
    order-averaged curve has expectation exactly ``loss(M) + W (1/k - 1/M)``, which is the
    same number as ``law(k)``: the law is what the empirical curve estimates, at every k.

    Parameters
    ----------
    members : array
        Float values, float probabilities or integer labels, as in `decompose`.
    y : array of shape (n_points,)
        Targets.
    sizes : sequence of int, optional
        Ensemble sizes in ``1..members`` (default: about 20 roughly log-spaced sizes,
        always including 1 and ``members``).
    orders : int
        Number of random member orders (default 20).
    seed : int or None
        Seed of the orders (``None``: a fresh one, kept in ``SizeCurve.seed``).
    loss : {"squared", "brier", "error_rate"}, optional
        Must fit the members' kind.
    n_jobs : int, optional
        Worker threads; results do not depend on it.

    Returns
    -------
    SizeCurve

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(2)
    >>> y = np.zeros(2000)
    >>> members = 0.5 + rng.normal(size=(40, 2000))     # bias 0.5, member variance 1
    >>> curve = bagwise.size_curve(members, y, orders=10)
    >>> round(curve.spread, 1), round(curve.infinite_loss, 2)
    (1.0, 0.25)
    >>> curve.members_needed(0.1)                        # W/k <= 10% of loss(inf)
    40
    """
    stream = size_curve_stream(loss=loss, sizes=sizes, orders=orders, seed=seed, n_jobs=n_jobs)
    return stream.update(members, y).finish()


class SizeCurve:
    """Loss of the first-k-member ensemble, averaged over random member orders.

    Attributes
    ----------
    loss : str
        ``"squared"``, ``"brier"`` or ``"error_rate"``.
    members, n_points : int
        Shape of the predictions (``M`` members).
    orders : int
        Number of random member orders.
    seed : int
        Seed of the orders.
    member_orders : ndarray of int64, shape (orders, members)
        The orders themselves.
    sizes : ndarray of int64
        Ensemble sizes ``k``.
    curve : ndarray of float64
        Mean over orders of the loss of the first-``k`` ensemble.
    standard_error : ndarray of float64
        Standard error of ``curve`` across orders (0 at ``k = M``; NaN for one order).
    per_order : ndarray of float64, shape (orders, sizes)
        The loss of every order at every size.
    full_loss : float
        Loss of the ensemble of all members, ``loss(M)``.
    spread : float or None
        ``W``: mean over points of the across-member variance (ddof 1; summed over classes
        for Brier). NaN (with a warning) for one member; None for error rates.
    infinite_loss : float or None
        ``loss(M) - W/M``, the estimated loss of an infinite ensemble; None for error rates.
    """

    def __init__(self, *, loss, orders, seed, member_orders, sizes, curve, standard_error,
                 per_order, full_loss, spread, n_points, members):
        self.loss = loss
        self.orders = orders
        self.seed = seed
        self.member_orders = member_orders
        self.sizes = np.asarray(sizes, dtype=np.int64)
        self.curve = curve
        self.standard_error = standard_error
        self.per_order = per_order
        self.full_loss = float(full_loss)
        self.n_points = int(n_points)
        self.members = int(members)
        if loss == "error_rate":
            self.spread, self.infinite_loss = None, None
        else:
            if members == 1:
                warnings.warn("`members`: a single member has no spread; spread, infinite_loss "
                              "and the law are NaN", UserWarning, stacklevel=3)
            self.spread = float(spread)
            self.infinite_loss = self.full_loss - self.spread / self.members
        if orders == 1:
            warnings.warn("`orders`: one order gives no standard error (NaN)", UserWarning,
                          stacklevel=3)

    def _require_law(self, name):
        if self.spread is None:
            raise ValueError(f"`{name}`: the finite-ensemble law holds for squared and Brier "
                             "losses only, not for error rates")

    def law(self, k):
        """``infinite_loss + W/k`` (= ``loss(M) + W (1/k - 1/M)``) at ensemble sizes ``k``."""
        self._require_law("law")
        k = np.asarray(k, dtype=np.float64)
        if np.any(~(k >= 1)):
            raise ValueError("`k`: ensemble sizes must be at least 1")
        value = self.infinite_loss + self.spread / k
        return float(value) if value.ndim == 0 else value

    def members_needed(self, tolerance: float):
        """Smallest ``k`` with ``W/k <= tolerance * infinite_loss``.

        ``W/k`` is the expected excess loss of ``k`` members over an infinite ensemble, so
        this is the ensemble size that comes within ``tolerance`` (relative) of it. It may
        exceed ``members``. NaN (with a warning) when ``infinite_loss <= 0`` with ``W > 0``
        (no size is close enough in relative terms) or for a single member.
        """
        self._require_law("members_needed")
        if isinstance(tolerance, bool) or not isinstance(tolerance, numbers.Real):
            raise TypeError(f"`tolerance`: expected a number, got {type(tolerance).__name__}")
        if not (tolerance > 0 and math.isfinite(tolerance)):
            raise ValueError(f"`tolerance`: must be positive and finite, got {tolerance}")
        spread, limit = self.spread, tolerance * self.infinite_loss
        if math.isnan(spread):
            warnings.warn("`members`: a single member has no spread", UserWarning, stacklevel=2)
            return math.nan
        if spread == 0:
            return 1
        if not limit > 0:
            warnings.warn("`tolerance`: infinite_loss <= 0, so no ensemble size comes within a "
                          "relative tolerance of it", UserWarning, stacklevel=2)
            return math.nan
        k = max(1, math.ceil(spread / limit))
        while k > 1 and spread / (k - 1) <= limit:
            k -= 1
        while spread / k > limit:
            k += 1
        return k

    def _rows(self):
        rows = [
            ("loss", self.loss),
            ("members x points", f"{self.members:,} x {self.n_points:,}"),
            ("orders (seed)", f"{self.orders} ({self.seed})"),
            ("loss(1)", f"{_fmt(float(self.curve[0]))} ± {_fmt(float(self.standard_error[0]))}"
             if self.sizes[0] == 1 else "-"),
            ("loss(M)", _fmt(self.full_loss)),
        ]
        if self.spread is not None:
            rows += [("spread W", _fmt(self.spread)), ("infinite loss", _fmt(self.infinite_loss))]
        return rows

    def _reading(self):
        if self.spread is None:
            return "error rates follow no exact size law; read the curve and its standard errors"
        return "E[loss(k)] = infinite loss + W/k (exact for the order-averaged curve)"

    def __repr__(self) -> str:
        return text_block("SizeCurve", self._rows(), self._reading())

    def _repr_html_(self) -> str:
        return safe_html(self, lambda: html_block("SizeCurve", self._rows(), self._reading()))

    def to_frame(self):
        """One row per size: ``k``, curve, standard error and (squared-type losses) the law."""
        import pandas as pd

        frame = pd.DataFrame({"k": self.sizes, "loss": self.curve,
                              "standard_error": self.standard_error})
        if self.spread is not None:
            frame["law"] = self.law(self.sizes)
        return frame


# -- residual correlation -------------------------------------------------------------------

def _correlation_iv(members, y, matrix, n_jobs):
    kind, members = _members_array(members)
    if kind != "values":
        raise TypeError("`members`: residual correlation needs float (members, n_points) values; "
                        "for probabilities pass one class, members[:, :, c], with y == c")
    if not isinstance(matrix, (bool, np.bool_)):
        raise TypeError(f"`matrix`: expected a bool, got {type(matrix).__name__}")
    return members, _target(y, kind, members.shape[1]), bool(matrix), n_jobs_value(n_jobs)


def correlation(members, y, *, matrix=False, n_jobs=None) -> Correlation:
    """Spread and pairwise correlation of the members' residuals ``r_b = t_b - y``.

    The mean pairwise correlation is computed in O(members * n_points) without forming the
    members x members matrix, from the variance of a sum,
    ``Var(sum_b z_b) = sum_b Var z_b + sum_{a != b} Cov(z_a, z_b)``: with standardised
    residuals ``z_b`` the off-diagonal correlations sum to ``Var(sum_b z_b) - M``, so their
    mean is that over ``M (M - 1)``. The same identity on the centred residuals gives the mean
    pairwise covariance. Variances and covariances use ddof 1.

    Parameters
    ----------
    members : float array of shape (members, n_points)
        Value predictions.
    y : array of shape (n_points,)
        Targets.
    matrix : bool
        Also compute the full members x members correlation matrix (blocked, parallel Gram
        computation; O(members**2 * n_points) work).
    n_jobs : int, optional
        Worker threads; results do not depend on it.

    Returns
    -------
    Correlation

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(3)
    >>> shared = rng.normal(size=4000)
    >>> members = shared + rng.normal(size=(10, 4000))   # correlation 1/2 by construction
    >>> round(bagwise.correlation(members, np.zeros(4000)).mean_correlation, 1)
    0.5
    """
    members, y, matrix, n_jobs = _correlation_iv(members, y, matrix, n_jobs)
    result = _core.residual_correlation(members, y, n_jobs)
    full = _core.correlation_matrix(members, y, n_jobs) if matrix else None
    return Correlation(members=members.shape[0], n_points=members.shape[1], matrix=full, **result)


class Correlation:
    """Spread and correlation of the member residuals.

    Attributes
    ----------
    members, n_points : int
        Shape of the predictions.
    member_variance : ndarray of float64, shape (members,)
        Variance (ddof 1) across points of every member's residual.
    mean_variance : float
        Mean of ``member_variance``.
    mean_covariance : float
        Mean over pairs ``a != b`` of the residual covariance (NaN, with a warning, for one
        member).
    mean_correlation : float
        Mean over pairs of members with non-constant residuals of the residual correlation.
        NaN (with a warning) when fewer than two members have non-constant residuals.
    constant_members : ndarray of int64
        Members whose residuals are constant across points; their correlations are NaN and
        they are left out of ``mean_correlation`` (with a warning).
    matrix : ndarray of float64, shape (members, members) or None
        The full correlation matrix when asked for (NaN rows/columns for constant members).
    """

    def __init__(self, *, members, n_points, member_variance, mean_variance, mean_covariance,
                 mean_correlation, constant_members, matrix):
        self.members = members
        self.n_points = n_points
        self.member_variance = member_variance
        self.mean_variance = float(mean_variance)
        self.mean_covariance = float(mean_covariance)
        self.mean_correlation = float(mean_correlation)
        self.constant_members = np.asarray(constant_members, dtype=np.int64)
        self.matrix = matrix
        if members == 1:
            warnings.warn("`members`: a single member has no pairs; the mean covariance and "
                          "correlation are NaN", UserWarning, stacklevel=3)
        elif self.constant_members.size:
            warnings.warn(f"`members`: {self.constant_members.size} member(s) have constant "
                          "residuals, so their correlations are undefined (NaN) and left out of "
                          "the mean correlation", UserWarning, stacklevel=3)

    def _rows(self):
        return [
            ("members x points", f"{self.members:,} x {self.n_points:,}"),
            ("mean residual variance", _fmt(self.mean_variance)),
            ("mean pairwise covariance", _fmt(self.mean_covariance)),
            ("mean pairwise correlation", _fmt(self.mean_correlation)),
            ("constant members", str(self.constant_members.size)),
        ]

    def _reading(self):
        rho = self.mean_correlation
        if math.isnan(rho):
            return "no correlation: fewer than two members with varying residuals"
        return (f"members' errors are {'strongly' if rho > 0.7 else 'moderately' if rho > 0.3 else 'weakly'}"
                " correlated; averaging removes less of the error the closer this is to 1")

    def __repr__(self) -> str:
        return text_block("Correlation", self._rows(), self._reading())

    def _repr_html_(self) -> str:
        return safe_html(self, lambda: html_block("Correlation", self._rows(), self._reading()))

    def to_frame(self):
        """One row per member: its residual variance and whether it is constant."""
        import pandas as pd

        constant = np.zeros(self.members, dtype=bool)
        constant[self.constant_members] = True
        return pd.DataFrame({"member": np.arange(self.members),
                             "residual_variance": self.member_variance, "constant": constant})
