"""Spread and correlation of the members' residuals ``r_b = t_b - y``.

`correlation` gives every member's residual variance, their mean pairwise covariance and
correlation (without the members x members matrix), and the matrix itself when asked;
`correlation_stream` computes the same result from chunks of points in one pass (its
state is the members x members co-moment matrix), and its streams merge and pickle.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import _chunked, _core
from ._display import fmt as _fmt
from ._members import members_array, targets
from ._progress import all_or_nothing, progress_callback, stages
from ._results import Result
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["Correlation", "CorrelationStream", "correlation", "correlation_stream"]


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Correlation(Result):
    """Spread and correlation of the member residuals.

    Attributes
    ----------
    n_members, n_points : int
        Shape of the predictions.
    residual_variance : ndarray of float64, shape (n_members,)
        Variance (ddof 1) across points of every member's residual.
    mean_residual_variance : float
        Mean of ``residual_variance``.
    mean_residual_covariance : float
        Mean over pairs ``a != b`` of the residual covariance (NaN, with a warning, for one
        member).
    mean_residual_correlation : float
        Mean over pairs of members with non-constant residuals of the residual correlation.
        NaN (with a warning) when fewer than two members have non-constant residuals.
    constant_members : ndarray of int64
        Members whose residuals are constant across points; their correlations are NaN and
        they are left out of ``mean_residual_correlation`` (with a warning).
    residual_correlation : ndarray of float64, shape (n_members, n_members) or None
        The full correlation matrix when asked for (NaN rows/columns for constant members).
    """

    _title = "Correlation"

    n_members: int
    n_points: int
    residual_variance: np.ndarray
    mean_residual_variance: float
    mean_residual_covariance: float
    mean_residual_correlation: float
    constant_members: np.ndarray
    residual_correlation: np.ndarray | None

    def _rows(self):
        return [
            ("members x points", f"{self.n_members:,} x {self.n_points:,}"),
            ("mean residual variance", _fmt(self.mean_residual_variance)),
            ("mean residual covariance", _fmt(self.mean_residual_covariance)),
            ("mean residual correlation", _fmt(self.mean_residual_correlation)),
            ("constant members", str(self.constant_members.size)),
        ]

    def _reading(self):
        rho = self.mean_residual_correlation
        if math.isnan(rho):
            return "no correlation: fewer than two members with varying residuals"
        strength = "strongly" if rho > 0.7 else "moderately" if rho > 0.3 else "weakly"
        return (f"members' errors are {strength} correlated; averaging removes less of the "
                "error the closer this is to 1")

    def to_frame(self):
        """One row per member: its residual variance and whether it is constant."""
        import pandas as pd

        constant = np.zeros(self.n_members, dtype=bool)
        constant[self.constant_members] = True
        return pd.DataFrame({"member": np.arange(self.n_members),
                             "residual_variance": self.residual_variance, "constant": constant})


def _correlation(n_points, summary, matrix) -> Correlation:
    """The one place a `Correlation` is built: from the core's typed summary, with the
    warnings of its edge cases."""
    residual_variance = summary.residual_variance
    n_members = residual_variance.shape[0]
    constant = np.asarray(summary.constant_members, dtype=np.int64)
    if n_members == 1:
        warn("`members`: a single member has no pairs; the mean residual covariance and "
             "correlation are NaN")
    elif constant.size:
        warn(f"`members`: {constant.size} member(s) have constant residuals, so their "
             "correlations are undefined (NaN) and left out of the mean residual correlation")
    return Correlation(
        n_members=n_members, n_points=n_points, residual_variance=residual_variance,
        mean_residual_variance=float(summary.mean_residual_variance),
        mean_residual_covariance=float(summary.mean_residual_covariance),
        mean_residual_correlation=float(summary.mean_residual_correlation),
        constant_members=constant, residual_correlation=matrix,
    )


def _values_iv(members, y):
    kind, members = members_array(members)
    if kind != "values":
        raise TypeError("`members`: residual correlation needs float (members, n_points) values; "
                        "for probabilities pass one class, members[:, :, c], with y == c")
    return members, targets(y, kind, members.shape[1])


def _matrix_iv(matrix):
    if not isinstance(matrix, (bool, np.bool_)):
        raise TypeError(f"`matrix`: expected a bool, got {type(matrix).__name__}")
    return bool(matrix)


def _correlation_iv(members, y, matrix, n_jobs):
    members, y = _values_iv(members, y)
    return members, y, _matrix_iv(matrix), n_jobs_value(n_jobs)


class CorrelationStream:
    """Residual spread and correlation computed from chunks of points; see
    `correlation_stream`.

    ``update(members, y) -> self`` adds a chunk, ``merge(other) -> self`` adds the points
    of another stream (after this stream's points), ``result()`` gives the `Correlation`;
    streams pickle (the core state travels as bytes).
    """

    def __init__(self, matrix=False, n_jobs=None):
        self.matrix = _matrix_iv(matrix)
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = _core.CorrelationAccumulator()

    _callback = None

    @all_or_nothing
    def update(self, members, y) -> CorrelationStream:
        """Add the value predictions of every member at a chunk of points and their
        targets. Returns the stream."""
        members, y = _values_iv(members, y)
        self._core.update(members, np.ascontiguousarray(y, dtype=np.float64), self._n_jobs,
                          progress=self._callback)
        return self

    def merge(self, other: CorrelationStream) -> CorrelationStream:
        """Add the points of ``other`` (the same members) after this stream's points.
        Returns this stream."""
        if not isinstance(other, CorrelationStream):
            raise TypeError(f"`other`: expected a CorrelationStream, got {type(other).__name__}")
        self._core.merge(other._core)
        return self

    def result(self) -> Correlation:
        """The residual spread and correlation over all points added so far."""
        summary = self._core.result()
        matrix = self._core.matrix() if self.matrix else None
        return _correlation(int(self._core.n_points), summary, matrix)

    def __repr__(self) -> str:
        if self._core.n_members is None:
            return "CorrelationStream (no chunk yet)"
        return (f"CorrelationStream ({self._core.n_members} members, "
                f"{self._core.n_points:,} points)")


def correlation_stream(*, matrix=False, n_jobs=None) -> CorrelationStream:
    """Start a residual correlation fed by chunks of points.

    Call ``.update(members_chunk, y_chunk)`` for consecutive chunks (any split of the
    points; every chunk holds all members), then ``.result()``. One pass: the state is
    the members' residual means and their co-moment matrix ``C_ab = sum_j (r_aj - mu_a)
    (r_bj - mu_b)``, merged across chunks by the pairwise update of Chan, Golub & LeVeque
    (1979, 1983) applied to cross products, so a chunk costs O(members**2 x points) work and
    the state O(members**2) memory, whatever the number of points. The result equals
    `correlation` on all points up to rounding (about 1e-13 relative). Streams over
    different points combine with ``.merge(other)`` and pickle.

    Parameters
    ----------
    matrix : bool
        Also give ``residual_correlation``, the members x members matrix (free here: the
        state holds it).
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.

    Returns
    -------
    CorrelationStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(3)
    >>> members, y = rng.normal(size=(8, 1000)), np.zeros(1000)
    >>> stream = bagwise.correlation_stream()
    >>> for start in range(0, 1000, 300):
    ...     _ = stream.update(members[:, start:start + 300], y[start:start + 300])
    >>> whole = bagwise.correlation(members, y).mean_residual_correlation
    >>> bool(np.isclose(stream.result().mean_residual_correlation, whole, rtol=1e-12))
    True
    """
    return CorrelationStream(matrix=matrix, n_jobs=n_jobs)


def _correlation_update(stream, members, y):
    return stream.update(members, y)


def _lazy_correlation(members, y, matrix, n_jobs, progress=False) -> Correlation:
    """`correlation` over the point chunks of lazy arrays: one `CorrelationStream` per
    chunk where it lives, merged pairwise in point order."""
    matrix, n_jobs = _matrix_iv(matrix), n_jobs_value(n_jobs)
    members = _chunked.point_major(members, "members")
    stream = _chunked.reduce_over([(members, "members", 1), (y, "y", 0)],
                                  lambda: CorrelationStream(matrix, n_jobs), _correlation_update,
                                  progress=progress)
    return stream.result()


def correlation(members, y, *, matrix=False, n_jobs=None, progress=False) -> Correlation:
    """Spread and pairwise correlation of the members' residuals ``r_b = t_b - y``.

    The mean pairwise correlation is computed in O(members * n_points) without forming the
    members x members matrix, from the variance of a sum,
    ``Var(sum_b z_b) = sum_b Var z_b + sum_{a != b} Cov(z_a, z_b)``: with standardised
    residuals ``z_b`` the off-diagonal correlations sum to ``Var(sum_b z_b) - M``, so their
    mean is that over ``M (M - 1)``. The same identity on the centred residuals gives the mean
    pairwise covariance. Variances and covariances use ddof 1.

    Parameters
    ----------
    members : float array of shape (n_members, n_points)
        Value predictions.
    y : array of shape (n_points,)
        Targets.
    matrix : bool
        Also compute ``residual_correlation``, the full members x members matrix (blocked, parallel Gram
        computation; O(members**2 * n_points) work).
    n_jobs : int, optional
        Worker threads; results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    Correlation

    Notes
    -----
    Lazy inputs: ``members`` and ``y`` may be dask or zarr arrays chunked along the points
    (``members`` also a dask DataFrame, one row per point and one column per member; ``y`` a
    dask Series); any chunking of the member axis is made one chunk. Each point chunk
    becomes a `CorrelationStream` on the worker holding it, and the streams merge pairwise
    in point order on the workers. What travels per chunk: its state, O(members**2) (the
    co-moment matrix, ``8 M (M + 3) / 2`` bytes), independent of the points. The client
    holds the finished result, O(members), or O(members**2) with ``matrix``. Equal to the
    in-memory result to about 1e-13 relative (one pass with merged co-moments in place of
    two passes).

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(3)
    >>> shared = rng.normal(size=4000)
    >>> members = shared + rng.normal(size=(10, 4000))   # correlation 1/2 by construction
    >>> round(bagwise.correlation(members, np.zeros(4000)).mean_residual_correlation, 1)
    0.5
    """
    if _chunked.any_lazy(members, y):
        return _lazy_correlation(members, y, matrix, n_jobs, progress)
    members, y, matrix, n_jobs = _correlation_iv(members, y, matrix, n_jobs)
    with progress_callback(progress, "correlation", "step" if matrix else "point") as callback:
        first, second = stages(callback, 2 if matrix else 1) + [None] * (1 - bool(matrix))
        summary = _core.residual_correlation(members, y, n_jobs, first)
        full = _core.correlation_matrix(members, y, n_jobs, second) if matrix else None
    return _correlation(members.shape[1], summary, full)
