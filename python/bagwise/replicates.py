"""Spread of ensembles refitted on independent training sets: `replicate_spread` and its
`ReplicateSpread` result."""

from __future__ import annotations

import math
import numbers
import warnings

import numpy as np

from . import _core
from ._display import html_block, safe_html, text_block
from ._validation import n_jobs_value

__all__ = ["ReplicateSpread", "replicate_spread"]


def _replicate_spread_iv(members, y, n_jobs):
    if not isinstance(members, np.ndarray):
        members = np.asarray(members)
    if not members.dtype.isnative:   # e.g. big-endian data from a file: one converted copy
        members = members.astype(members.dtype.newbyteorder("="))
    if members.dtype not in (np.float32, np.float64):
        raise TypeError(f"`members`: expected float32 or float64 predictions, got dtype {members.dtype}")
    if members.ndim != 3:
        raise ValueError(
            "`members`: expected shape (replicates, members, n_points), got "
            f"{members.ndim} dimensions {members.shape}"
        )
    if members.size == 0:
        raise ValueError(f"`members`: is empty (shape {members.shape})")
    if members.shape[0] < 2:
        raise ValueError(
            f"`members`: needs at least 2 replicates (ensembles fitted on independent training "
            f"sets) to estimate the between-replicate variance, got {members.shape[0]}"
        )
    if y is not None:
        y = np.asarray(y)
        if y.dtype.kind not in "iuf":
            raise TypeError(f"`y`: expected numbers, got dtype {y.dtype}")
        if y.shape != (members.shape[2],):
            raise ValueError(f"`y`: expected shape ({members.shape[2]},) to match `members`, got {y.shape}")
        y = np.ascontiguousarray(y, dtype=np.float64)
    return members, y, n_jobs_value(n_jobs)


def replicate_spread(members, y=None, *, n_jobs=None) -> ReplicateSpread:
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
    - ``sigma**2 = between + within`` (the variance of one member) and
      ``rho = max(between, 0) / (max(between, 0) + within)`` (clipped at 0 so that rho
      lies in [0, 1]; this clipping is used only in ``rho`` and what is derived from it).

    The variance of an ensemble of ``M`` members is then
    ``Var(f_M) = rho sigma**2 + (1 - rho) sigma**2 / M`` (Hastie, Tibshirani & Friedman
    2009, The Elements of Statistical Learning, 2nd ed., eq. 15.1), see
    :meth:`ReplicateSpread.predicted_variance`.

    With targets ``y`` the expected squared error of the ensemble mean over training sets
    is split as ``bias**2 + variance / M + (1 - 1/M) covariance`` (Ueda & Nakano 1996),
    where member ``m`` of every replicate is treated as the same member refitted:
    ``bias = mean_m E_r[t_rm] - y``, ``variance = mean_m Var_r(t_rm)`` and
    ``covariance`` the mean of ``Cov_r(t_rm, t_rm')`` over pairs ``m != m'``. These
    moments over replicates use ddof 0, so the three terms add up exactly to the mean over
    replicates of ``(f_r - y)**2``.

    Parameters
    ----------
    members : ndarray of float32 or float64, shape (replicates, members, n_points)
        ``members[r, m, i]``: prediction at point ``i`` of member ``m`` of the ensemble
        fitted on training set ``r``. At least 2 replicates. Read without a copy.
    y : array-like, shape (n_points,), optional
        Targets, for the bias-variance-covariance split.
    n_jobs : int, optional
        Worker threads (default: all cores). Results do not depend on it.

    Returns
    -------
    ReplicateSpread

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> shared = rng.normal(scale=0.6, size=(40, 1, 300))    # training-set effect
    >>> members = shared + rng.normal(scale=0.8, size=(40, 25, 300))
    >>> spread = bagwise.replicate_spread(members)
    >>> round(spread.between, 2), round(spread.within, 2)   # 0.36 and 0.64 expected
    (0.36, 0.64)
    >>> spread.members_needed(0.1)    # (1 - rho) / (tolerance * rho) = 0.64 / 0.036
    18
    """
    members, y, n_jobs = _replicate_spread_iv(members, y, n_jobs)
    per_point, means = _core.replicate_spread_arrays(members, y, n_jobs)
    return ReplicateSpread(members.shape, per_point, means, y is not None)


def _ceil_members(within, between_plus, tolerance):
    """Smallest M >= 1 with within / M <= tolerance * between_plus (inf when none)."""
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


class ReplicateSpread:
    """Within- and between-replicate spread of ensembles fitted on independent training sets.

    Scalars are means over points; ``*_per_point`` arrays have shape (n_points,).

    Attributes
    ----------
    replicates, members, n_points : int
        Shape of the input.
    within : float
        Pooled within-replicate member variance (ddof 1), ``(1 - rho) sigma**2``.
    between : float
        Unbiased between-replicate variance of the true ensemble mean, ``rho sigma**2``
        (may be negative from noise).
    total_variance : float
        ``sigma**2 = between + within``, the variance of one member over training sets.
    correlation : float
        ``rho = max(between, 0) / (max(between, 0) + within)`` from the means; NaN for one
        member or constant predictions.
    n_negative_between : int
        Points whose between estimate is negative.
    ensemble_variance : float
        Observed variance over replicates of the M-member ensemble mean (ddof 1), equal to
        ``between + within / M``.
    within_per_point, between_per_point, total_variance_per_point, correlation_per_point, \
ensemble_variance_per_point : ndarray
        The same per point (``correlation_per_point`` clipped per point).
    bias_squared, variance, covariance, expected_squared_error : float or None
        With ``y``: means over points of the squared bias, member variance, pairwise member
        covariance and expected squared error of the ensemble mean (Ueda & Nakano 1996);
        ``expected_squared_error = bias_squared + variance / M + (1 - 1/M) covariance``.
        ``None`` without ``y``.
    bias_per_point, variance_per_point, covariance_per_point, \
expected_squared_error_per_point : ndarray or None
        The same per point (``bias_per_point`` is signed).
    """

    def __init__(self, shape, per_point, means, with_y):
        self.replicates, self.members, self.n_points = (int(v) for v in shape)
        self.within = float(means["within"])
        self.between = float(means["between"])
        self.total_variance = self.within + self.between
        self.ensemble_variance = float(means["ensemble_variance"])
        self.n_negative_between = int(means["negative_between"])
        self.within_per_point = per_point["within"]
        self.between_per_point = per_point["between"]
        self.total_variance_per_point = self.within_per_point + self.between_per_point
        self.ensemble_variance_per_point = per_point["ensemble_variance"]
        with np.errstate(invalid="ignore", divide="ignore"):
            plus = np.maximum(self.between_per_point, 0.0)
            self.correlation_per_point = plus / (plus + self.within_per_point)
        b = max(self.between, 0.0) if not math.isnan(self.between) else math.nan
        denominator = b + self.within
        self.correlation = b / denominator if denominator > 0 else math.nan
        self._warn()
        for name in ("bias", "variance", "covariance", "expected_squared_error"):
            setattr(self, f"{name}_per_point", per_point[name] if with_y else None)
        self.bias_squared = float(means["bias_squared"]) if with_y else None
        self.variance = float(means["variance"]) if with_y else None
        self.covariance = float(means["covariance"]) if with_y else None
        self.expected_squared_error = float(means["expected_squared_error"]) if with_y else None

    def _warn(self):
        if self.members == 1:
            warnings.warn(
                "`members`: one member per replicate - the within-replicate variance, the "
                "between-replicate variance and rho are undefined (NaN)",
                RuntimeWarning, stacklevel=3,
            )
            return
        undefined = int(np.isnan(self.correlation_per_point).sum())
        if undefined:
            warnings.warn(
                f"`members`: {undefined} of {self.n_points} points have constant predictions; "
                "their rho is undefined (NaN)",
                RuntimeWarning, stacklevel=3,
            )

    def predicted_variance(self, n_members, per_point: bool = False):
        """``Var(f_M) = rho s**2 + (1 - rho) s**2 / M`` (Hastie, Tibshirani & Friedman 2009,
        eq. 15.1) for ensembles of ``n_members`` members, with ``s**2 = max(between, 0) +
        within``; equivalently ``max(between, 0) + within / M``.

        ``n_members`` may be an int or an array of ints; ``per_point=True`` gives one value
        per point.
        """
        m = np.asarray(n_members)
        if m.dtype.kind not in "iu" or np.any(m < 1):
            raise ValueError(f"`n_members`: expected integers >= 1, got {n_members!r}")
        m = m.astype(np.float64)
        if per_point:
            plus = np.maximum(self.between_per_point, 0.0)
            if m.ndim == 0:
                return plus + self.within_per_point / m
            return plus[:, None] + self.within_per_point[:, None] / np.ravel(m)[None, :]
        value = max(self.between, 0.0) + self.within / m
        return float(value) if value.ndim == 0 else value

    def members_needed(self, tolerance: float, per_point: bool = False):
        """Smallest ``M`` with ``(1 - rho) s**2 / M <= tolerance * rho s**2``: the part of
        the variance that more members could still remove is at most ``tolerance`` times
        the part no number of members removes. ``math.inf`` when ``rho = 0`` (averaging
        removes everything eventually but never reaches a positive floor), NaN when
        undefined.
        """
        if isinstance(tolerance, bool) or not isinstance(tolerance, numbers.Real) or not (
            math.isfinite(tolerance) and tolerance > 0
        ):
            raise ValueError(f"`tolerance`: expected a positive finite number, got {tolerance!r}")
        if per_point:
            return np.array([
                _ceil_members(w, max(b, 0.0), tolerance)
                for w, b in zip(self.within_per_point.tolist(), self.between_per_point.tolist())
            ], dtype=np.float64)
        return _ceil_members(self.within, max(self.between, 0.0), tolerance)

    def _rows(self):
        rows = [
            ("replicates x members x points", f"{self.replicates:,} x {self.members:,} x {self.n_points:,}"),
            ("within (1 - rho) s^2", f"{self.within:.6g}"),
            ("between rho s^2", f"{self.between:.6g}"),
            ("member variance s^2", f"{self.total_variance:.6g}"),
            ("rho", f"{self.correlation:.4f}"),
            ("points with between < 0", f"{self.n_negative_between:,}"),
            (f"Var(f_{self.members})", f"{self.ensemble_variance:.6g}"),
        ]
        if self.bias_squared is not None:
            rows += [
                ("bias^2", f"{self.bias_squared:.6g}"),
                ("variance", f"{self.variance:.6g}"),
                ("covariance", f"{self.covariance:.6g}"),
                ("expected squared error", f"{self.expected_squared_error:.6g}"),
            ]
        return rows

    def _reading(self):
        if math.isnan(self.correlation):
            return "rho is undefined"
        if self.correlation == 0:
            return "members look uncorrelated: averaging removes all of their variance"
        floor = self.correlation * (max(self.between, 0.0) + self.within)
        return (f"averaging can at best bring the variance from {self.total_variance:.4g} down "
                f"to {floor:.4g} (rho = {self.correlation:.3f})")

    def __repr__(self):
        return text_block("ReplicateSpread", self._rows(), self._reading())

    def _repr_html_(self):
        return safe_html(self, lambda: html_block("ReplicateSpread", self._rows(), self._reading()))

    def to_frame(self):
        """One row per point with every ``*_per_point`` quantity."""
        import pandas as pd

        names = ["within", "between", "total_variance", "correlation", "ensemble_variance"]
        if self.bias_squared is not None:
            names += ["bias", "variance", "covariance", "expected_squared_error"]
        return pd.DataFrame({name: getattr(self, f"{name}_per_point") for name in names})
