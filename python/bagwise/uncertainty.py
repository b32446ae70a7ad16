"""A standard error for every bagged prediction, from one fitted ensemble.

`prediction_variance` gives the infinitesimal-jackknife (Efron 2014) or
jackknife-after-bootstrap variance of the ensemble mean at each point, with the Monte-Carlo
bias corrections of Wager, Hastie & Efron (2014), or, for members drawn by
``resample(..., scheme="little_bags")``, the bootstrap of little bags (Sexton & Laake 2009;
Athey, Tibshirani & Wager 2019, §4), whose member budget does not grow with the number of
training rows; `spread` splits each point's member
variance into the part shared through the training data (between) and the part more members
average away (within). Both work from the members' predictions and the in-bag counts they
were fit with, through Gram matrices of the counts (`CountGram`) that can be built once and
reused for any number of new points.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from statistics import NormalDist
from typing import ClassVar

import numpy as np

from . import _core
from ._members import as_array, members_array
from ._results import Result, check_tolerance, members_for
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["CountGram", "PredictionVariance", "Spread", "count_gram", "prediction_variance",
           "spread"]

#: Above this median share of the raw estimate, the bias correction dominates and a warning
#: suggests more members (common practice: the correction should be a small adjustment).
CORRECTION_WARNING_SHARE = 0.5

#: Little bags: above this share of the rows per member, the half-sampling argument's
#: higher-order terms bias the variance upward noticeably (tests/bench/bench_little_bags.py:
#: median ratio to the Monte-Carlo truth 1.15 ± 0.10 at share 0.1, 1.28 ± 0.06 at 0.2).
LITTLE_BAGS_BIAS_SHARE = 0.15
#: The measured median ratio (little-bags variance / Monte-Carlo truth) by share, for the
#: reading of a result; from tests/bench/bench_little_bags.py (Friedman #1 with noise 1,
#: n = 4000, 300 native trees in groups of 2, 100 training sets).
LITTLE_BAGS_MEASURED_RATIO = {0.1: 1.15, 0.2: 1.28, 0.3: 1.51, 0.4: 2.10}


def _counts_iv(counts) -> np.ndarray:
    counts = np.asarray(counts)
    if counts.dtype == np.bool_ or counts.dtype.kind not in "iu":
        raise TypeError(f"`counts`: expected integer in-bag counts, got dtype {counts.dtype}")
    if counts.ndim != 2:
        raise ValueError(f"`counts`: expected shape (n_members, n_rows), got {counts.shape}")
    if counts.shape[0] < 2:
        raise ValueError(f"`counts`: needs at least 2 members, got {counts.shape[0]}")
    if counts.shape[1] < 2:
        raise ValueError(f"`counts`: needs at least 2 training rows, got {counts.shape[1]}")
    if counts.dtype.kind == "i":
        if counts.size and counts.min() < 0:
            raise ValueError("`counts`: in-bag counts cannot be negative")
        # Same width, reinterpreted: no copy.
        counts = counts.view(counts.dtype.str.replace("i", "u"))
    return counts


def _members_iv(members, n_members: int) -> np.ndarray:
    """Values ``(n_members, n_points)`` (integers and booleans read as values; a 1-D array is
    one point per member) from the shared reader, matching ``n_members`` rows of counts."""
    array = as_array(members, "members")
    if array.ndim == 1:
        array = array[:, None]
    _, array = members_array(array, kinds=("values",), numbers_as_values=True,
                             purpose="standard errors")
    if array.shape[0] != n_members:
        raise ValueError(f"`members`: has {array.shape[0]} members (rows) but `counts` has "
                         f"{n_members}")
    return array


class CountGram:
    """Gram matrices of an ensemble's in-bag counts, built once, reused for any points.

    G = N Nᵀ (members × members, exact integer arithmetic on the counts' own dtype) gives the
    infinitesimal jackknife as the quadratic form t̃ᵀ G t̃ / B²; the weighted Gram of the
    out-of-bag indicators gives the jackknife-after-bootstrap. Building costs
    O(B² · n_rows); each point afterwards costs O(B²).

    Parameters
    ----------
    counts : array of non-negative integers, shape (n_members, n_rows)
    scheme : {"bootstrap", "subsample"} or None
        How rows were drawn. None detects it: 0/1 counts with the same number of rows ``s``
        in every member, ``s < n_rows``, are a subsample; anything else a bootstrap.
    jackknife : bool
        Also build the out-of-bag Gram needed by ``method="jackknife"``.
    n_jobs : int, optional
    """

    def __init__(self, counts, *, scheme=None, jackknife=False, n_jobs=None):
        counts = _counts_iv(counts)
        subsample_rows = None
        if scheme == "subsample":
            sums = counts.sum(axis=1)
            if counts.max() > 1 or not np.all(sums == sums[0]):
                raise ValueError("`scheme`: 'subsample' needs 0/1 counts with the same number "
                                 "of rows in every member")
            subsample_rows = int(sums[0])
        self._gram = _core.CountGram(counts, scheme=scheme, subsample_rows=subsample_rows,
                                     jackknife=jackknife, n_jobs=n_jobs_value(n_jobs))

    @classmethod
    def _wrap(cls, gram):
        self = cls.__new__(cls)
        self._gram = gram
        return self

    @property
    def n_members(self) -> int:
        """Members (rows of the counts)."""
        return self._gram.n_members

    @property
    def n_rows(self) -> int:
        """Training rows (columns of the counts)."""
        return self._gram.n_rows

    @property
    def scheme(self) -> str:
        """``"bootstrap"`` or ``"subsample"``."""
        return self._gram.scheme

    @property
    def gram(self) -> np.ndarray:
        """G = N Nᵀ, shape (n_members, n_members)."""
        return self._gram.gram

    def prediction_variance(self, members, *, method="ij", corrected=True, n_jobs=None):
        """Variance of the ensemble mean at each point; see :func:`prediction_variance`."""
        if method not in ("ij", "jackknife"):
            raise ValueError(f"`method`: expected 'ij' or 'jackknife', got {method!r}")
        return self._estimate(members, method, corrected, n_jobs)[0]

    def spread(self, members, *, n_jobs=None):
        """Between/within split of the member variance; see :func:`spread`."""
        return Spread._from_parts(*self._estimate(members, "ij", True, n_jobs))

    def _estimate(self, members, method, corrected, n_jobs):
        """The PredictionVariance of ``members`` and their across-member variance."""
        members = _members_iv(members, self.n_members)
        if method == "jackknife" and not self._gram.has_jackknife:
            raise ValueError("`method`: this CountGram was built without jackknife=True")
        raw, correction, within, mean = self._gram.variance(members, method,
                                                            n_jobs_value(n_jobs))
        estimate = PredictionVariance._from_parts(
            method=method, corrected=corrected, raw=raw, correction=correction, mean=mean,
            n_members=self.n_members, n_rows=self.n_rows, scheme=self.scheme,
            n_without_out_of_bag=(self._gram.rows_never_out_of_bag
                                   if method == "jackknife" else 0))
        return estimate, within

    def __reduce__(self):
        return (_restore_gram, (self._gram.to_bytes(),))

    def __repr__(self):
        return (f"CountGram(n_members={self.n_members}, n_rows={self.n_rows}, "
                f"scheme={self.scheme!r}, jackknife={self._gram.has_jackknife})")


def _restore_gram(data: bytes) -> CountGram:
    return CountGram._wrap(_core.CountGram.from_bytes(data))


def count_gram(counts, *, scheme=None, jackknife=False, n_jobs=None) -> CountGram:
    """Build the :class:`CountGram` of ``counts`` once, for repeated use on new points.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> counts = bagwise.resample(100, 50, rng=0).counts
    >>> gram = bagwise.count_gram(counts)
    >>> gram.gram.shape
    (50, 50)
    >>> bool(np.all(np.diag(gram.gram) == (counts.astype(np.int64) ** 2).sum(axis=1)))
    True
    """
    return CountGram(counts, scheme=scheme, jackknife=jackknife, n_jobs=n_jobs)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class PredictionVariance(Result):
    """Variance and standard error of a bagged prediction at each point.

    Attributes
    ----------
    method : str
        ``"ij"`` (infinitesimal jackknife) or ``"jackknife"`` (after bootstrap).
    corrected : bool
        Whether the Monte-Carlo bias correction was subtracted.
    variance : ndarray, shape (n_points,)
        The variance of the ensemble's mean prediction over training sets; corrected values
        below zero are clipped to zero (see ``n_clipped``).
    std_error : ndarray, shape (n_points,)
        ``sqrt(variance)``.
    raw_variance, correction : ndarray, shape (n_points,)
        The uncorrected estimate and the correction term (corrected = raw − correction).
    correction_share : ndarray, shape (n_points,)
        ``correction / raw_variance``: near 1 means too few members for a stable estimate.
    mean : ndarray, shape (n_points,)
        The ensemble mean prediction the standard errors belong to.
    n_members, n_rows : int
        Members and training rows of the in-bag counts.
    scheme : str
        ``"bootstrap"``, ``"subsample"`` (which fixes the scale; see the module notes) or
        ``"little_bags"``.
    n_clipped : int
        Points whose corrected variance was negative and clipped to zero.
    n_without_out_of_bag : int
        Training rows in every member (jackknife only): no leave-one-out mean exists for
        them, so they are left out of the jackknife sum.
    group_size : int
        Members per group (ℓ) for ``method="little_bags"``, whose ``raw_variance`` is the
        variance of the group means across groups and ``correction`` the mean within-group
        variance over ℓ; 0 for the other methods.
    """

    _title: ClassVar[str] = "PredictionVariance"

    method: str
    corrected: bool
    variance: np.ndarray
    std_error: np.ndarray
    raw_variance: np.ndarray
    correction: np.ndarray
    correction_share: np.ndarray
    mean: np.ndarray
    n_members: int
    n_rows: int
    scheme: str
    n_clipped: int
    n_without_out_of_bag: int
    group_size: int
    _share: float = dataclasses.field(repr=False)

    @classmethod
    def _from_parts(cls, *, method, corrected, raw, correction, mean, n_members, n_rows,
                    scheme, n_without_out_of_bag, group_size=0,
                    member_share=math.nan) -> PredictionVariance:
        """The one place a PredictionVariance is built: from the core's estimate."""
        with np.errstate(divide="ignore", invalid="ignore"):
            correction_share = np.where(raw > 0, correction / raw, np.nan)
        value = raw - correction if corrected else raw.copy()
        negative = value < 0
        n_clipped = int(negative.sum())
        variance = np.where(negative, 0.0, value)
        share = (float(np.nanmedian(correction_share)) if np.isfinite(correction_share).any()
                 else math.nan)
        if corrected and share > CORRECTION_WARNING_SHARE:
            warn(f"the Monte-Carlo correction is {share:.0%} of the raw variance at the median "
                 f"point: {n_members} members are too few for a stable estimate; use more members")
        if corrected and n_clipped:
            warn(f"{n_clipped} of {len(value)} corrected variances were negative and were "
                 "clipped to zero")
        return cls(method=method, corrected=corrected, variance=variance,
                   std_error=np.sqrt(variance), raw_variance=raw, correction=correction,
                   correction_share=correction_share, mean=mean, n_members=n_members,
                   n_rows=n_rows, scheme=scheme, n_clipped=n_clipped,
                   n_without_out_of_bag=n_without_out_of_bag, group_size=group_size,
                   _share=member_share)

    def mean_interval(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """Normal-approximation interval ``mean ± z · std_error`` at ``level`` for the
        **ensemble's mean prediction** (what a refit on new training data would average to),
        not for a new observation: for that, use `bagwise.prediction_interval`.

        The normal approximation is an assumption (Wager, Hastie & Efron 2014 use it too);
        it ignores the ensemble's bias.
        """
        if not 0 < level < 1:
            raise ValueError(f"`level`: must lie in (0, 1), got {level}")
        z = NormalDist().inv_cdf(0.5 + level / 2)
        return self.mean - z * self.std_error, self.mean + z * self.std_error

    def _rows(self):
        name = {"ij": "infinitesimal jackknife", "jackknife": "jackknife-after-bootstrap",
                "little_bags": "bootstrap of little bags"}
        rows = [
            ("method", name[self.method] + (" (bias-corrected)" if self.corrected else "")),
            ("members x training rows", f"{self.n_members:,} x {self.n_rows:,}"),
            ("points", f"{len(self.variance):,}"),
            ("median standard error", f"{np.median(self.std_error):.4g}"),
            ("median correction share", f"{np.nanmedian(self.correction_share):.1%}"
             if np.isfinite(self.correction_share).any() else "n/a"),
            ("clipped at zero", str(self.n_clipped)),
        ]
        if self.method == "jackknife":
            rows.append(("rows never out of bag", str(self.n_without_out_of_bag)))
        if self.method == "little_bags":
            rows.append(("groups", f"{self.n_members // self.group_size:,} of "
                                   f"{self.group_size}"))
            rows.append(("share per member", _share_reading(self._share)))
        return rows

    def _reading(self):
        return (f"a typical prediction is uncertain by ± {np.median(self.std_error):.3g} "
                "(one standard error)")

    def to_frame(self):
        """One row per point: mean, variance, std_error, raw_variance, correction."""
        import pandas as pd

        return pd.DataFrame({"point": np.arange(len(self.variance)), "mean": self.mean,
                             "variance": self.variance, "std_error": self.std_error,
                             "raw_variance": self.raw_variance, "correction": self.correction})


def _share_reading(share: float) -> str:
    """The share of rows per member, and whether it is large enough to bias little bags."""
    if not math.isfinite(share):
        return "n/a"
    measured = {s: r for s, r in LITTLE_BAGS_MEASURED_RATIO.items() if math.isfinite(r)}
    nearest = min(measured, key=lambda s: abs(s - share))
    hint = f"measured on trees: x{measured[nearest]:.2f} of the truth at {nearest:g}"
    if share <= LITTLE_BAGS_BIAS_SHARE:
        return f"{share:.2f} of the rows ({hint})"
    return (f"{share:.2f} of the rows: above {LITTLE_BAGS_BIAS_SHARE:g}, large enough to "
            f"overstate the variance ({hint})")


def _little_bags_iv(counts, group_size) -> tuple[np.ndarray, int, float]:
    """Checks that ``counts`` look like little bags drawn in consecutive groups of
    ``group_size`` (0/1, equal row sums, each group's members inside one half of the
    rows); returns them with ℓ and each member's share of the rows."""
    counts = _counts_iv(counts)
    if group_size is None:
        group_size = 2
    if isinstance(group_size, bool) or not isinstance(group_size, (int, np.integer)):
        raise TypeError(f"`group_size`: expected an integer, got {type(group_size).__name__}")
    group_size = int(group_size)
    n_members, n_rows = counts.shape
    if group_size < 2:
        raise ValueError("`group_size`: must be at least 2 (the within-group variance needs "
                         f"two members), got {group_size}")
    if n_members % group_size:
        raise ValueError(f"`group_size`: the {n_members} members do not split into whole "
                         f"groups of {group_size} (little bags lay members out in consecutive "
                         "groups, as `resample` draws them)")
    if counts.max() > 1:
        raise ValueError(f"`counts`: little bags draw each row at most once per member (0/1 "
                         f"counts), found a count of {int(counts.max())}")
    sums = counts.sum(axis=1, dtype=np.int64)
    if sums.min() != sums.max():
        raise ValueError(f"`counts`: little-bags members all draw the same number of rows; "
                         f"these draw between {sums.min()} and {sums.max()}")
    if sums[0] == 0:
        raise ValueError("`counts`: the members draw no rows")
    half = n_rows // 2
    used = counts.reshape(n_members // group_size, group_size, n_rows).any(axis=1).sum(axis=1)
    wide = np.flatnonzero(used > half)
    if len(wide):
        g = int(wide[0])
        raise ValueError(
            f"`counts`: the members of group {g} (members {g * group_size} to "
            f"{(g + 1) * group_size - 1}) use {int(used[g])} distinct rows, more than one half "
            f"({half} of {n_rows}); little bags keep each group inside one half - are the "
            f"members laid out in consecutive groups of {group_size}?")
    return counts, group_size, float(sums[0]) / n_rows


def _little_bags(members, counts, group_size, corrected, n_jobs) -> PredictionVariance:
    """The bootstrap-of-little-bags `PredictionVariance` (checked inputs)."""
    counts, group_size, share = _little_bags_iv(counts, group_size)
    members = _members_iv(members, counts.shape[0])
    raw, correction, _, mean = _core.little_bags_variance(members, group_size,
                                                          n_jobs_value(n_jobs))
    return PredictionVariance._from_parts(
        method="little_bags", corrected=corrected, raw=raw, correction=correction, mean=mean,
        n_members=counts.shape[0], n_rows=counts.shape[1], scheme="little_bags",
        n_without_out_of_bag=0, group_size=group_size, member_share=share)


def prediction_variance(members, counts, *, method="ij", corrected=True, scheme=None,
                        group_size=None, n_jobs=None) -> PredictionVariance:
    """Variance of the bagged prediction at every point, from one fitted ensemble.

    Parameters
    ----------
    members : array, shape (n_members, n_points)
        Each member's prediction at the points (or the probability of one class).
    counts : array of non-negative integers, shape (n_members, n_rows)
        The in-bag counts the members were fit with (any integer dtype; kept as is).
    method : {"ij", "jackknife", "little_bags"}
        ``"ij"``: infinitesimal jackknife V_IJ = Σ_i Cov_b(N_bi, t_b)² (Efron 2014).
        ``"jackknife"``: jackknife-after-bootstrap V_J = (n−1)/n Σ_i (t̄_(−i) − t̄)²
        (Wager, Hastie & Efron 2014); rows in every member have no t̄_(−i) and are left out
        (counted in ``n_without_out_of_bag``). Bootstrap draws only.
        ``"little_bags"``: the bootstrap of little bags (Sexton & Laake 2009; Athey,
        Tibshirani & Wager 2019, §4, eq. 12) for members drawn by
        ``resample(..., scheme="little_bags")``, laid out in consecutive groups of
        ``group_size``: S²_B − W/ℓ with S²_B the variance of the group means across groups
        (``raw_variance``) and W the mean within-group variance (``correction = W/ℓ``);
        unbiased for the variance of the half-sample mean, which approximates that of the
        ensemble mean over training sets while each member's share of the rows is small
        (derived in the Rust docs). Its member budget does not grow with ``n_rows``.
    corrected : bool
        Subtract the Monte-Carlo bias: (n/B²) Σ_b (t_b − t̄)² for the IJ, (e − 1) times that
        for the jackknife (Wager, Hastie & Efron 2014), W/ℓ for little bags. For subsamples
        of s rows the IJ is scaled by ((n−1)/n)(n/(n−s))² (Wager & Athey 2018) and the
        correction is s(n−s)/(n B²) Σ_b (t_b − t̄)² times that scale (derived in the Rust
        docs).
    scheme : {"bootstrap", "subsample", "little_bags"} or None
        None detects the scheme from the counts (bootstrap or subsample); the IJ and the
        jackknife refuse ``"little_bags"``, whose members are not independent draws.
    group_size : int, optional
        Members per group for ``method="little_bags"`` (default 2); the counts are checked
        to look like little bags (0/1, equal row sums, each group's members inside one half
        of the rows). Other methods refuse it.
    n_jobs : int, optional

    Returns
    -------
    PredictionVariance

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=200)
    >>> counts = bagwise.resample(200, 4000, rng=0).counts
    >>> bagged_means = (counts @ x / 200)[:, None]      # one "prediction" per member
    >>> result = bagwise.prediction_variance(bagged_means, counts)
    >>> ideal = x.var() / 200                            # Σ(x - x̄)² / n²
    >>> bool(abs(result.variance[0] / ideal - 1) < 0.1)
    True

    Little bags: 250 groups of 8 members, each member a fifth of the rows, drawn from its
    group's half; the variance of the mean over halves of the sample is
    ``x.var(ddof=1) / n`` (sampling without replacement).

    >>> draw = bagwise.resample(200, 2000, scheme="little_bags", fraction=0.2, group_size=8,
    ...                         rng=0)
    >>> subsample_means = (draw.counts @ x / 40)[:, None]
    >>> little = bagwise.prediction_variance(subsample_means, draw.counts, method="little_bags",
    ...                                      group_size=8)
    >>> bool(abs(little.variance[0] / (x.var(ddof=1) / 200) - 1) < 0.3)
    True
    """
    if method == "little_bags":
        if scheme not in (None, "little_bags"):
            raise ValueError(f"`scheme`: method='little_bags' reads little-bags counts, not "
                             f"scheme={scheme!r}")
        return _little_bags(members, counts, group_size, corrected, n_jobs)
    if method not in ("ij", "jackknife"):
        raise ValueError(f"`method`: expected 'ij', 'jackknife' or 'little_bags', got {method!r}")
    if group_size is not None:
        raise ValueError("`group_size`: only method='little_bags' reads groups of members")
    if scheme == "little_bags":
        raise ValueError(
            f"`scheme`: method={method!r} is not valid for little-bags counts (members of a "
            "group share a half-sample, so they are not independent draws); use "
            "method='little_bags'")
    gram = CountGram(counts, scheme=scheme, jackknife=(method == "jackknife"), n_jobs=n_jobs)
    return gram.prediction_variance(members, method=method, corrected=corrected, n_jobs=n_jobs)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Spread(Result):
    """Each point's member variance split into between (training data) and within (members).

    ``within(x)`` is the across-member variance of the predictions (ddof 1), the part more
    members average away; ``between(x)`` the bias-corrected infinitesimal-jackknife
    variance, i.e. the variance of the infinitely bagged predictor over training sets;
    ``total = between + within`` is σ²(x) and ``rho = between / total`` the correlation
    between two members. So Var(f_M) = ρσ² + (1 − ρ)σ²/M = between + within/M (Hastie,
    Tibshirani & Friedman 2009, ESL eq. 15.1).

    Attributes
    ----------
    between, within, total, rho : ndarray, shape (n_points,)
        Per point; ``between`` is never negative (clipped at zero, see ``n_clipped``).
    mean_between, mean_within, mean_total : float
        Means over points (``mean_total = mean_between + mean_within``).
    pooled_rho : float
        ``mean_between / mean_total``.
    n_members : int
        Members of the ensemble.
    n_clipped : int
        Points whose corrected between-variance was negative and clipped to zero.
    """

    _title: ClassVar[str] = "Spread"

    between: np.ndarray
    within: np.ndarray
    total: np.ndarray
    rho: np.ndarray
    mean_between: float
    mean_within: float
    mean_total: float
    pooled_rho: float
    n_members: int
    n_clipped: int

    @classmethod
    def _from_parts(cls, estimate: PredictionVariance, within: np.ndarray) -> Spread:
        """The one place a Spread is built: the corrected IJ ``estimate`` is the between
        part, ``within`` the across-member variance of the same call."""
        between = estimate.variance
        total = between + within
        with np.errstate(divide="ignore", invalid="ignore"):
            rho = np.where(total > 0, between / total, np.nan)
        mean_between = float(between.mean())
        mean_within = float(within.mean())
        mean_total = mean_between + mean_within
        return cls(between=between, within=within, total=total, rho=rho,
                   mean_between=mean_between, mean_within=mean_within, mean_total=mean_total,
                   pooled_rho=mean_between / mean_total if mean_total > 0 else math.nan,
                   n_members=estimate.n_members, n_clipped=estimate.n_clipped)

    def predicted_variance(self, n_members) -> np.ndarray:
        """Var(f_M) = ρσ² + (1 − ρ)σ²/M = between + within / M at each point (Hastie,
        Tibshirani & Friedman 2009, eq. 15.1) for an ensemble of ``n_members`` members (an
        array of sizes gives shape ``(n_points, len(n_members))``)."""
        m = _n_members_iv(n_members)
        if m.ndim == 0:
            return self.between + self.within / m
        return self.between[:, None] + self.within[:, None] / np.ravel(m)[None, :]

    def mean_predicted_variance(self, n_members):
        """eq. 15.1 from the means over points: ``mean_between + mean_within / M`` for
        ensembles of ``n_members`` members (an int gives a float, an array an array)."""
        value = self.mean_between + self.mean_within / _n_members_iv(n_members)
        return float(value) if value.ndim == 0 else value

    def members_needed(self, tolerance: float = 0.01) -> int | float:
        """The smallest M for which the variance of the M-member ensemble's mean,
        ρσ² + (1 − ρ)σ²/M (Hastie, Tibshirani & Friedman 2009, eq. 15.1), is within
        ``tolerance`` (relative) of its limit ρσ², from the means over points:
        ``mean_within / M <= tolerance * mean_between``.

        NaN with one `BagwiseWarning` when ``mean_between`` is not positive (no floor that
        more members could come near).
        """
        tolerance = check_tolerance(tolerance)
        return members_for(self.mean_within, self.mean_between, tolerance,
                           "the between variance (the limit) is not positive: more members "
                           "cannot make the remaining part small relative to it")

    def _rows(self):
        needed = _quiet(lambda: self.members_needed(0.01))
        return [("members", str(self.n_members)),
                ("between (training data)", f"{self.mean_between:.4g}"),
                ("within (members)", f"{self.mean_within:.4g}"),
                ("rho", f"{self.pooled_rho:.3f}"),
                ("members for 1% of between", str(needed))]

    def _reading(self):
        needed = _quiet(lambda: self.members_needed(0.01))
        return (f"members share {self.pooled_rho:.0%} of their variance through the training "
                f"data; {needed} members bring the rest within 1% of it")

    def to_frame(self):
        """One row per point: between, within, total, rho."""
        import pandas as pd

        return pd.DataFrame({"point": np.arange(len(self.between)), "between": self.between,
                             "within": self.within, "total": self.total, "rho": self.rho})


def _quiet(compute):
    """``compute()`` with its warnings silenced: a display never warns."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compute()


def _n_members_iv(n_members) -> np.ndarray:
    m = np.asarray(n_members)
    if m.dtype.kind not in "iu" or np.any(m < 1):
        raise ValueError(f"`n_members`: expected integers >= 1, got {n_members!r}")
    return m.astype(np.float64)


def spread(members, counts, *, scheme=None, n_jobs=None) -> Spread:
    """Split each point's member variance into between (training data) and within parts.

    See :class:`Spread`. ``members`` (n_members, n_points) and ``counts`` (n_members, n_rows)
    as in :func:`prediction_variance`.
    """
    return CountGram(counts, scheme=scheme, n_jobs=n_jobs).spread(members, n_jobs=n_jobs)
