"""Spread of ensembles refitted on independent training sets: `replicate_spread`, its
`ReplicateSpread` result and `replicate_spread_stream`, the same from chunks of points."""

from __future__ import annotations

import dataclasses
import math
import types
from typing import ClassVar

import numpy as np

from . import _chunked, _core
from ._members import replicate_members, targets
from ._progress import all_or_nothing, progress_callback
from ._results import Result, check_tolerance, members_for
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["ReplicateSpread", "ReplicateSpreadStream", "replicate_spread",
           "replicate_spread_stream"]


def _replicate_spread_iv(members, y, n_jobs):
    members = replicate_members(members)
    if y is not None:
        y = np.ascontiguousarray(targets(y, "values", members.shape[2]))
    return members, y, n_jobs_value(n_jobs)


def replicate_spread(members, y=None, *, n_jobs=None, progress=False) -> ReplicateSpread:
    """How much of the members' variance averaging removes, from ensembles refitted on
    independent training sets.

    Member predictions are split, per point, by one-way random-effects ANOVA with the
    replicates (training sets) as groups (Searle, Casella & McCulloch 1992):

    - ``within``: pooled variance of the members around their replicate's ensemble mean
      (ddof 1), estimating ``(1 - rho) * sigma**2``;
    - ``between = (MSB - MSW) / M`` with ``MSB = M * Var_r(f_r)`` (ddof 1) and
      ``MSW = within``: the unbiased variance, over training sets, of the mean of
      infinitely many members, estimating ``rho * sigma**2``. Noise can make it negative;
      it is kept as is and the negative points are counted;
    - ``total = between + within`` (``sigma**2``, the variance of one member) and
      ``rho = max(between, 0) / (max(between, 0) + within)`` (clipped at 0 so that rho
      lies in [0, 1]; this clipping is used only in ``rho`` and what is derived from it);
    - ``variance``: the observed variance over replicates of the ``M``-member ensemble
      mean ``f_r`` (ddof 1), ``MSB / M``.

    The variance of an ensemble of ``M`` members is then
    ``Var(f_M) = rho sigma**2 + (1 - rho) sigma**2 / M`` (Hastie, Tibshirani & Friedman
    2009, The Elements of Statistical Learning, 2nd ed., eq. 15.1), see
    :meth:`ReplicateSpread.predicted_variance`.

    With targets ``y`` the expected squared error of the ensemble mean over training sets
    is split as ``bias**2 + member_variance / M + (1 - 1/M) covariance`` (Ueda & Nakano
    1996), where member ``m`` of every replicate is treated as the same member refitted:
    ``bias = mean_m E_r[t_rm] - y``, ``member_variance = mean_m Var_r(t_rm)`` and
    ``covariance`` the mean of ``Cov_r(t_rm, t_rm')`` over pairs ``m != m'``. These
    moments over replicates use ddof 0, so the three terms add up exactly to the mean over
    replicates of ``(f_r - y)**2``.

    Parameters
    ----------
    members : ndarray of float32 or float64, shape (n_replicates, n_members, n_points)
        ``members[r, m, i]``: prediction at point ``i`` of member ``m`` of the ensemble
        fitted on training set ``r``. At least 2 replicates. Read without a copy.
    y : array-like, shape (n_points,), optional
        Targets, for the bias-variance-covariance split.
    n_jobs : int, optional
        Worker threads (default: all cores). Results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    ReplicateSpread

    Notes
    -----
    Lazy inputs: ``members`` and ``y`` may be dask or zarr arrays chunked along the points
    (the last axis of ``members``; ``y`` also a dask Series); any chunking of the replicate
    or member axis is made one chunk. Each point chunk becomes a `ReplicateSpreadStream` on
    the worker holding it, merged pairwise in point order on the workers. What travels per
    chunk: its state, 16 floats of compensated sums, plus the chunk's per-point arrays (24
    bytes a point, 56 with ``y``). The client holds the result, O(points). The per-point
    arrays equal the in-memory ones bit for bit, the means to about 1e-15 relative.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> shared = rng.normal(scale=0.6, size=(40, 1, 300))    # training-set effect
    >>> members = shared + rng.normal(scale=0.8, size=(40, 25, 300))
    >>> spread = bagwise.replicate_spread(members)
    >>> round(spread.mean_between, 2), round(spread.mean_within, 2)   # 0.36 and 0.64 expected
    (0.36, 0.64)
    >>> spread.members_needed(0.1)    # mean_within / (tolerance * mean_between) = 0.64 / 0.036
    18
    """
    if _chunked.any_lazy(members, y):
        return _lazy_replicate_spread(members, y, n_jobs, progress)
    members, y, n_jobs = _replicate_spread_iv(members, y, n_jobs)
    with progress_callback(progress, "replicate spread", "point") as callback:
        parts = _core.replicate_spread(members, y, n_jobs, callback)
    return ReplicateSpread._from_parts(members.shape, parts)


_ROWS = ("within", "between", "variance", "bias", "member_variance", "covariance",
         "expected_squared_error")
_MEANS = ("mean_bias_squared", "mean_member_variance", "mean_covariance",
          "mean_expected_squared_error")


class ReplicateSpreadStream:
    """The replicate spread computed from chunks of points; see `replicate_spread_stream`.

    ``update(members, y=None) -> self`` adds a chunk, ``merge(other) -> self`` adds the
    points of another stream (after this stream's points), ``result()`` gives the
    `ReplicateSpread`; streams pickle (the core state travels as bytes).
    """

    def __init__(self, n_jobs=None):
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = _core.ReplicateSpreadAccumulator()
        self._parts: list[np.ndarray] = []

    _callback = None

    @all_or_nothing
    def update(self, members, y=None) -> ReplicateSpreadStream:
        """Add the predictions of every replicate and member at a chunk of points
        ``(n_replicates, n_members, chunk_points)`` and, if any, their targets. Returns the
        stream."""
        members, y, _ = _replicate_spread_iv(members, y, None)
        self._parts.append(self._core.update(members, y, self._n_jobs, progress=self._callback))
        return self

    def merge(self, other: ReplicateSpreadStream) -> ReplicateSpreadStream:
        """Add the points of ``other`` (same replicates and members, targets alike) after
        this stream's points. Returns this stream."""
        if not isinstance(other, ReplicateSpreadStream):
            raise TypeError("`other`: expected a ReplicateSpreadStream, got "
                            f"{type(other).__name__}")
        self._core.merge(other._core)
        self._parts.extend(other._parts)
        return self

    def result(self) -> ReplicateSpread:
        """The replicate spread over all points added so far."""
        within, between, variance, negative, means = self._core.result()
        rows = np.concatenate(self._parts, axis=1)
        parts = types.SimpleNamespace(
            **{name: (rows[k] if k < rows.shape[0] else None) for k, name in enumerate(_ROWS)},
            mean_within=within, mean_between=between, mean_variance=variance,
            n_negative_between=negative, **dict(zip(_MEANS, means, strict=True)))
        n_replicates, n_members = self._core.shape
        return ReplicateSpread._from_parts((n_replicates, n_members, rows.shape[1]), parts)

    def __repr__(self) -> str:
        if self._core.shape is None:
            return "ReplicateSpreadStream (no chunk yet)"
        n_replicates, n_members = self._core.shape
        return (f"ReplicateSpreadStream ({n_replicates} replicates x {n_members} members, "
                f"{self._core.n_points:,} points)")


def replicate_spread_stream(*, n_jobs=None) -> ReplicateSpreadStream:
    """Start a replicate spread fed by chunks of points.

    Call ``.update(members_chunk, y_chunk)`` for consecutive chunks of points
    (``members_chunk`` of shape ``(n_replicates, n_members, chunk_points)``; targets for
    every chunk or for none), then ``.result()``. Every per-point quantity depends on its
    point alone, so the per-point arrays equal those of `replicate_spread` bit for bit;
    the means over points are compensated sums (Neumaier 1974) merged in order, equal to
    about 1e-15 relative. Streams over different points combine with ``.merge(other)`` and
    pickle. Memory: the per-point arrays (3 floats a point, 7 with targets) plus one chunk.

    Parameters
    ----------
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.

    Returns
    -------
    ReplicateSpreadStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> members = rng.normal(size=(5, 10, 600))
    >>> stream = bagwise.replicate_spread_stream()
    >>> for start in range(0, 600, 250):
    ...     _ = stream.update(members[:, :, start:start + 250])
    >>> whole = bagwise.replicate_spread(members)
    >>> bool(np.array_equal(stream.result().between, whole.between))
    True
    """
    return ReplicateSpreadStream(n_jobs=n_jobs)


def _replicate_update(stream, members, y):
    return stream.update(members, y)


def _lazy_replicate_spread(members, y, n_jobs, progress=False) -> ReplicateSpread:
    """`replicate_spread` over the point chunks (last axis) of lazy arrays: one
    `ReplicateSpreadStream` per chunk where it lives, merged pairwise in point order."""
    n_jobs = n_jobs_value(n_jobs)
    stream = _chunked.reduce_over([(members, "members", 2), (y, "y", 0)],
                                  lambda: ReplicateSpreadStream(n_jobs), _replicate_update,
                                  progress=progress)
    return stream.result()


def _ceil_members(within, between_plus, tolerance):
    """Smallest M >= 1 with within / M <= tolerance * between_plus at one point (inf when
    between_plus is 0 and within is not, NaN when undefined)."""
    if not (within >= 0 and between_plus >= 0):
        return math.nan
    if within == 0:
        return 1
    if between_plus == 0:
        return math.inf
    m = max(1, math.ceil(within / (tolerance * between_plus)))
    while m > 1 and within / (m - 1) <= tolerance * between_plus:  # guard rounding
        m -= 1
    while within / m > tolerance * between_plus:
        m += 1
    return m


def _n_members_iv(n_members) -> np.ndarray:
    m = np.asarray(n_members)
    if m.dtype.kind not in "iu" or np.any(m < 1):
        raise ValueError(f"`n_members`: expected integers >= 1, got {n_members!r}")
    return m.astype(np.float64)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class ReplicateSpread(Result):
    """Within- and between-replicate spread of ensembles fitted on independent training sets.

    Per-point arrays (shape ``(n_points,)``) carry the plain name, their means over points
    ``mean_<name>``.

    Attributes
    ----------
    n_replicates, n_members, n_points : int
        Shape of the input.
    between : ndarray
        Unbiased between-replicate variance of the infinite ensemble's mean, ``rho sigma**2``
        (may be negative from noise).
    within : ndarray
        Pooled within-replicate member variance (ddof 1), ``(1 - rho) sigma**2``.
    total : ndarray
        ``sigma**2 = between + within``, the variance of one member over training sets.
    rho : ndarray
        ``max(between, 0) / (max(between, 0) + within)``; NaN for one member or constant
        predictions.
    variance : ndarray
        Observed variance over replicates of the ``n_members``-member ensemble mean
        (ddof 1), equal to ``between + within / n_members``.
    mean_between, mean_within, mean_total, mean_variance : float
        Means over points (``mean_total = mean_between + mean_within``).
    pooled_rho : float
        ``mean_between / mean_total`` with ``mean_between`` clipped at zero (as in ``rho``):
        ``max(mean_between, 0) / (max(mean_between, 0) + mean_within)``; NaN for one member
        or constant predictions.
    n_negative_between : int
        Points whose between estimate is negative.
    bias, member_variance, covariance, expected_squared_error : ndarray or None
        With ``y``, per point: the signed bias of the ensemble mean, the mean over members
        of a member's variance over replicates, the mean pairwise member covariance and
        the expected squared error of the ensemble mean (Ueda & Nakano 1996);
        ``expected_squared_error = bias**2 + member_variance / M + (1 - 1/M) covariance``.
        ``None`` without ``y``.
    mean_bias_squared, mean_member_variance, mean_covariance, mean_expected_squared_error \
: float or None
        Their means over points (``mean_bias_squared`` is the mean of ``bias**2``); ``None``
        without ``y``.
    """

    _title: ClassVar[str] = "ReplicateSpread"

    n_replicates: int
    n_members: int
    n_points: int
    between: np.ndarray
    within: np.ndarray
    total: np.ndarray
    rho: np.ndarray
    variance: np.ndarray
    mean_between: float
    mean_within: float
    mean_total: float
    mean_variance: float
    pooled_rho: float
    n_negative_between: int
    bias: np.ndarray | None = None
    member_variance: np.ndarray | None = None
    covariance: np.ndarray | None = None
    expected_squared_error: np.ndarray | None = None
    mean_bias_squared: float | None = None
    mean_member_variance: float | None = None
    mean_covariance: float | None = None
    mean_expected_squared_error: float | None = None

    @classmethod
    def _from_parts(cls, shape, parts) -> ReplicateSpread:
        """The one place a ReplicateSpread is built: from the core's typed parts."""
        n_replicates, n_members, n_points = (int(v) for v in shape)
        within, between = parts.within, parts.between
        mean_within, mean_between = float(parts.mean_within), float(parts.mean_between)
        with np.errstate(invalid="ignore", divide="ignore"):
            plus = np.maximum(between, 0.0)
            rho = plus / (plus + within)
        b = max(mean_between, 0.0) if not math.isnan(mean_between) else math.nan
        denominator = b + mean_within
        with_y = parts.bias is not None
        split = {}
        if with_y:
            split = dict(
                bias=parts.bias, member_variance=parts.member_variance,
                covariance=parts.covariance, expected_squared_error=parts.expected_squared_error,
                mean_bias_squared=float(parts.mean_bias_squared),
                mean_member_variance=float(parts.mean_member_variance),
                mean_covariance=float(parts.mean_covariance),
                mean_expected_squared_error=float(parts.mean_expected_squared_error))
        result = cls(
            n_replicates=n_replicates, n_members=n_members, n_points=n_points,
            between=between, within=within, total=within + between, rho=rho,
            variance=parts.variance, mean_between=mean_between, mean_within=mean_within,
            mean_total=mean_within + mean_between, mean_variance=float(parts.mean_variance),
            pooled_rho=b / denominator if denominator > 0 else math.nan,
            n_negative_between=int(parts.n_negative_between), **split)
        result._warn()
        return result

    def _warn(self):
        if self.n_members == 1:
            warn("`members`: one member per replicate - the within-replicate variance, the "
                 "between-replicate variance and rho are undefined (NaN)")
            return
        undefined = int(np.isnan(self.rho).sum())
        if undefined:
            warn(f"`members`: {undefined} of {self.n_points} points have constant predictions; "
                 "their rho is undefined (NaN)")

    def predicted_variance(self, n_members):
        """``Var(f_M) = rho s**2 + (1 - rho) s**2 / M`` (Hastie, Tibshirani & Friedman 2009,
        eq. 15.1) at each point for ensembles of ``n_members`` members, with ``s**2 =
        max(between, 0) + within``; equivalently ``max(between, 0) + within / M``.

        ``n_members`` may be an int (shape ``(n_points,)``) or an array of ints (shape
        ``(n_points, len(n_members))``).
        """
        m = _n_members_iv(n_members)
        plus = np.maximum(self.between, 0.0)
        if m.ndim == 0:
            return plus + self.within / m
        return plus[:, None] + self.within[:, None] / np.ravel(m)[None, :]

    def mean_predicted_variance(self, n_members):
        """eq. 15.1 from the means over points: ``max(mean_between, 0) + mean_within / M``
        for ensembles of ``n_members`` members (an int gives a float, an array an array)."""
        m = _n_members_iv(n_members)
        value = max(self.mean_between, 0.0) + self.mean_within / m
        return float(value) if value.ndim == 0 else value

    def members_needed(self, tolerance: float = 0.01) -> int | float:
        """The smallest ``M`` for which the variance of the ``M``-member ensemble's mean,
        ``rho s**2 + (1 - rho) s**2 / M`` (Hastie, Tibshirani & Friedman 2009, eq. 15.1), is
        within ``tolerance`` (relative) of its limit ``rho s**2``, from the means over points:
        ``mean_within / M <= tolerance * max(mean_between, 0)``.

        NaN with one `BagwiseWarning` when the limit is not positive (the members look
        uncorrelated: averaging removes all of their variance, no floor to come near) or
        undefined (one member per replicate).
        """
        tolerance = check_tolerance(tolerance)
        if self.n_members == 1:
            why = "one member per replicate: the within and between variances are undefined"
        else:
            why = ("the between-replicate variance (the limit) is not positive: averaging "
                   "removes all of the members' variance, there is no floor to come near")
        return members_for(self.mean_within, max(self.mean_between, 0.0), tolerance, why)

    def members_needed_at_points(self, tolerance: float = 0.01) -> np.ndarray:
        """The criterion of :meth:`members_needed` at each point: the smallest ``M`` with
        ``within / M <= tolerance * max(between, 0)``, as floats; ``inf`` where ``between
        <= 0`` (averaging removes everything eventually but never reaches a positive floor),
        NaN where undefined. No warning: the per-point edge cases are these values."""
        tolerance = check_tolerance(tolerance)
        return np.array([
            _ceil_members(w, max(b, 0.0), tolerance)
            for w, b in zip(self.within.tolist(), self.between.tolist())
        ], dtype=np.float64)

    def _rows(self):
        rows = [
            ("replicates x members x points",
             f"{self.n_replicates:,} x {self.n_members:,} x {self.n_points:,}"),
            ("mean within (1 - rho) s^2", f"{self.mean_within:.6g}"),
            ("mean between rho s^2", f"{self.mean_between:.6g}"),
            ("mean total s^2", f"{self.mean_total:.6g}"),
            ("pooled rho", f"{self.pooled_rho:.4f}"),
            ("points with between < 0", f"{self.n_negative_between:,}"),
            (f"mean variance of f_{self.n_members}", f"{self.mean_variance:.6g}"),
        ]
        if self.mean_bias_squared is not None:
            rows += [
                ("mean bias^2", f"{self.mean_bias_squared:.6g}"),
                ("mean member variance", f"{self.mean_member_variance:.6g}"),
                ("mean covariance", f"{self.mean_covariance:.6g}"),
                ("mean expected squared error", f"{self.mean_expected_squared_error:.6g}"),
            ]
        return rows

    def _reading(self):
        if math.isnan(self.pooled_rho):
            return "rho is undefined"
        if self.pooled_rho == 0:
            return "members look uncorrelated: averaging removes all of their variance"
        floor = self.pooled_rho * (max(self.mean_between, 0.0) + self.mean_within)
        return (f"averaging can at best bring the variance from {self.mean_total:.4g} down "
                f"to {floor:.4g} (pooled rho = {self.pooled_rho:.3f})")

    def to_frame(self):
        """One row per point: ``point`` and every per-point array."""
        import pandas as pd

        names = ["between", "within", "total", "rho", "variance"]
        if self.bias is not None:
            names += ["bias", "member_variance", "covariance", "expected_squared_error"]
        return pd.DataFrame({"point": np.arange(self.n_points),
                             **{name: getattr(self, name) for name in names}})

