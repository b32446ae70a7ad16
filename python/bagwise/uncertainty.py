"""A standard error for every bagged prediction, from one fitted ensemble.

`prediction_variance` gives the infinitesimal-jackknife (Efron 2014) or
jackknife-after-bootstrap variance of the ensemble mean at each point, with the Monte-Carlo
bias corrections of Wager, Hastie & Efron (2014); `spread` splits each point's member
variance into the part shared through the training data (between) and the part more members
average away (within). Both work from the members' predictions and the in-bag counts they
were fit with, through Gram matrices of the counts (`CountGram`) that can be built once and
reused for any number of new points.
"""

from __future__ import annotations

import math
import warnings
from statistics import NormalDist

import numpy as np

from . import _core
from ._display import html_block, safe_html, text_block
from ._validation import n_jobs_value

__all__ = ["CountGram", "PredictionVariance", "Spread", "count_gram", "prediction_variance",
           "spread"]

#: Above this median share of the raw estimate, the bias correction dominates and a warning
#: suggests more members (common practice: the correction should be a small adjustment).
CORRECTION_WARNING_SHARE = 0.5


def _counts_iv(counts) -> np.ndarray:
    counts = np.asarray(counts)
    if counts.dtype == np.bool_ or counts.dtype.kind not in "iu":
        raise TypeError(f"`counts`: expected integer in-bag counts, got dtype {counts.dtype}")
    if counts.ndim != 2:
        raise ValueError(f"`counts`: expected shape (members, n_train), got {counts.shape}")
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
    members = np.asarray(members)
    if members.dtype.kind in "iub":
        members = members.astype(np.float64)
    elif members.dtype not in (np.float32, np.float64):
        raise TypeError(f"`members`: expected float predictions, got dtype {members.dtype}")
    if members.ndim == 1:
        members = members[:, None]
    if members.ndim != 2:
        raise ValueError(f"`members`: expected shape (members, n_points), got {members.shape}")
    if members.shape[0] != n_members:
        raise ValueError(f"`members`: has {members.shape[0]} members (rows) but `counts` has "
                         f"{n_members}")
    if members.shape[1] == 0:
        raise ValueError("`members`: has no points")
    return members


class CountGram:
    """Gram matrices of an ensemble's in-bag counts, built once, reused for any points.

    G = N Nᵀ (members × members, exact integer arithmetic on the counts' own dtype) gives the
    infinitesimal jackknife as the quadratic form t̃ᵀ G t̃ / B²; the weighted Gram of the
    out-of-bag indicators gives the jackknife-after-bootstrap. Building costs
    O(B² · n_train); each point afterwards costs O(B²).

    Parameters
    ----------
    counts : array of non-negative integers, shape (members, n_train)
    scheme : {"bootstrap", "subsample"} or None
        How rows were drawn. None detects it: 0/1 counts with the same number of rows ``s``
        in every member, ``s < n_train``, are a subsample; anything else a bootstrap.
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
    def members(self) -> int:
        return self._gram.members

    @property
    def n_train(self) -> int:
        return self._gram.n_train

    @property
    def scheme(self) -> str:
        return self._gram.scheme

    @property
    def gram(self) -> np.ndarray:
        """G = N Nᵀ, shape (members, members)."""
        return self._gram.gram

    def prediction_variance(self, members, *, method="ij", corrected=True, n_jobs=None):
        """Variance of the ensemble mean at each point; see :func:`prediction_variance`."""
        if method not in ("ij", "jackknife"):
            raise ValueError(f"`method`: expected 'ij' or 'jackknife', got {method!r}")
        members = _members_iv(members, self.members)
        if method == "jackknife" and not self._gram.has_jackknife:
            raise ValueError("`method`: this CountGram was built without jackknife=True")
        raw, correction, within, mean = self._gram.variance(members, method,
                                                            n_jobs_value(n_jobs))
        return PredictionVariance._from_parts(
            method=method, corrected=corrected, raw=raw, correction=correction, mean=mean,
            within=within, members=self.members, n_train=self.n_train, scheme=self.scheme,
            rows_never_out_of_bag=(self._gram.rows_never_out_of_bag
                                   if method == "jackknife" else 0))

    def spread(self, members, *, n_jobs=None):
        """Between/within split of the member variance; see :func:`spread`."""
        estimate = self.prediction_variance(members, method="ij", corrected=True,
                                            n_jobs=n_jobs)
        return Spread._from_estimate(estimate)

    def __reduce__(self):
        return (_restore_gram, (self._gram.to_bytes(),))

    def __repr__(self):
        return (f"CountGram(members={self.members}, n_train={self.n_train}, "
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


class PredictionVariance:
    """Variance and standard error of a bagged prediction at each point.

    Attributes
    ----------
    method : str
        ``"ij"`` (infinitesimal jackknife) or ``"jackknife"`` (after bootstrap).
    corrected : bool
        Whether the Monte-Carlo bias correction was subtracted.
    variance : ndarray, shape (n_points,)
        The estimate; corrected values below zero are clipped to zero (see ``n_clipped``).
    std_error : ndarray, shape (n_points,)
        ``sqrt(variance)``.
    raw_variance, correction : ndarray, shape (n_points,)
        The uncorrected estimate and the correction term (corrected = raw − correction).
    correction_share : ndarray, shape (n_points,)
        ``correction / raw_variance``: near 1 means too few members for a stable estimate.
    mean : ndarray, shape (n_points,)
        The ensemble mean prediction the standard errors belong to.
    members, n_train : int
    scheme : str
        ``"bootstrap"`` or ``"subsample"`` (which fixes the scale; see the module notes).
    n_clipped : int
        Points whose corrected variance was negative and clipped to zero.
    rows_never_out_of_bag : int
        Training rows in every member (jackknife only): no leave-one-out mean exists for
        them, so they are left out of the jackknife sum.
    """

    @classmethod
    def _from_parts(cls, *, method, corrected, raw, correction, mean, within, members, n_train,
                    scheme, rows_never_out_of_bag):
        self = cls.__new__(cls)
        self.method, self.corrected, self.members, self.n_train = method, corrected, members, n_train
        self.scheme = scheme
        self.raw_variance, self.correction, self.mean = raw, correction, mean
        self._within = within
        with np.errstate(divide="ignore", invalid="ignore"):
            self.correction_share = np.where(raw > 0, correction / raw, np.nan)
        value = raw - correction if corrected else raw.copy()
        negative = value < 0
        self.n_clipped = int(negative.sum())
        self.variance = np.where(negative, 0.0, value)
        self.std_error = np.sqrt(self.variance)
        self.rows_never_out_of_bag = rows_never_out_of_bag
        share = float(np.nanmedian(self.correction_share)) if np.isfinite(
            self.correction_share).any() else math.nan
        if corrected and share > CORRECTION_WARNING_SHARE:
            warnings.warn(
                f"the Monte-Carlo correction is {share:.0%} of the raw variance at the median "
                f"point: {members} members are too few for a stable estimate; use more members",
                RuntimeWarning, stacklevel=3)
        if corrected and self.n_clipped:
            warnings.warn(f"{self.n_clipped} of {len(value)} corrected variances were negative "
                          "and were clipped to zero", RuntimeWarning, stacklevel=3)
        return self

    def interval(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """Normal-approximation interval ``mean ± z · std_error`` at ``level``.

        The normal approximation is an assumption (Wager, Hastie & Efron 2014 use it too);
        it ignores the ensemble's bias.
        """
        if not 0 < level < 1:
            raise ValueError(f"`level`: must lie in (0, 1), got {level}")
        z = NormalDist().inv_cdf(0.5 + level / 2)
        return self.mean - z * self.std_error, self.mean + z * self.std_error

    def _rows(self):
        name = {"ij": "infinitesimal jackknife", "jackknife": "jackknife-after-bootstrap"}
        rows = [
            ("method", name[self.method] + (" (bias-corrected)" if self.corrected else "")),
            ("members x training rows", f"{self.members:,} x {self.n_train:,}"),
            ("points", f"{len(self.variance):,}"),
            ("median standard error", f"{np.median(self.std_error):.4g}"),
            ("median correction share", f"{np.nanmedian(self.correction_share):.1%}"
             if np.isfinite(self.correction_share).any() else "n/a"),
            ("clipped at zero", str(self.n_clipped)),
        ]
        if self.method == "jackknife":
            rows.append(("rows never out of bag", str(self.rows_never_out_of_bag)))
        return rows

    def _reading(self):
        return (f"a typical prediction is uncertain by ± {np.median(self.std_error):.3g} "
                "(one standard error)")

    def __repr__(self):
        return text_block("PredictionVariance", self._rows(), self._reading())

    def _repr_html_(self):
        return safe_html(self, lambda: html_block("PredictionVariance", self._rows(),
                                                  self._reading()))

    def to_frame(self):
        """One row per point: mean, variance, std_error, raw_variance, correction."""
        import pandas as pd

        return pd.DataFrame({"point": np.arange(len(self.variance)), "mean": self.mean,
                             "variance": self.variance, "std_error": self.std_error,
                             "raw_variance": self.raw_variance, "correction": self.correction})


def prediction_variance(members, counts, *, method="ij", corrected=True, scheme=None,
                        n_jobs=None) -> PredictionVariance:
    """Variance of the bagged prediction at every point, from one fitted ensemble.

    Parameters
    ----------
    members : array, shape (members, n_points)
        Each member's prediction at the points (or the probability of one class).
    counts : array of non-negative integers, shape (members, n_train)
        The in-bag counts the members were fit with (any integer dtype; kept as is).
    method : {"ij", "jackknife"}
        ``"ij"``: infinitesimal jackknife V_IJ = Σ_i Cov_b(N_bi, t_b)² (Efron 2014).
        ``"jackknife"``: jackknife-after-bootstrap V_J = (n−1)/n Σ_i (t̄_(−i) − t̄)²
        (Wager, Hastie & Efron 2014); rows in every member have no t̄_(−i) and are left out
        (counted in ``rows_never_out_of_bag``). Bootstrap draws only.
    corrected : bool
        Subtract the Monte-Carlo bias: (n/B²) Σ_b (t_b − t̄)² for the IJ, (e − 1) times that
        for the jackknife (Wager, Hastie & Efron 2014). For subsamples of s rows the IJ is
        scaled by ((n−1)/n)(n/(n−s))² (Wager & Athey 2018) and the correction is
        s(n−s)/(n B²) Σ_b (t_b − t̄)² times that scale (derived in the Rust docs).
    scheme : {"bootstrap", "subsample"} or None
        None detects the scheme from the counts.
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
    """
    gram = CountGram(counts, scheme=scheme, jackknife=(method == "jackknife"), n_jobs=n_jobs)
    return gram.prediction_variance(members, method=method, corrected=corrected, n_jobs=n_jobs)


class Spread:
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
    mean_between, mean_within, mean_total : float
        Means over points.
    pooled_rho : float
        ``mean_between / mean_total``.
    members : int
    n_clipped : int
        Points whose corrected between-variance was negative and clipped to zero.
    """

    @classmethod
    def _from_estimate(cls, estimate: PredictionVariance):
        self = cls.__new__(cls)
        self.between = estimate.variance
        self.within = estimate._within
        self.total = self.between + self.within
        with np.errstate(divide="ignore", invalid="ignore"):
            self.rho = np.where(self.total > 0, self.between / self.total, np.nan)
        self.mean_between = float(self.between.mean())
        self.mean_within = float(self.within.mean())
        self.mean_total = self.mean_between + self.mean_within
        self.pooled_rho = self.mean_between / self.mean_total if self.mean_total > 0 else math.nan
        self.members = estimate.members
        self.n_clipped = estimate.n_clipped
        return self

    def predicted_variance(self, members: int) -> np.ndarray:
        """Var(f_M) = between + within / M at each point for an ensemble of ``members``."""
        if members < 1:
            raise ValueError(f"`members`: must be at least 1, got {members}")
        return self.between + self.within / members

    def members_needed(self, tolerance: float = 0.01) -> int | float:
        """Smallest M with mean_within / M ≤ tolerance · mean_between (``nan`` if between
        is zero: more members cannot make the remaining part small relative to it)."""
        if not tolerance > 0:
            raise ValueError(f"`tolerance`: must be positive, got {tolerance}")
        if self.mean_between <= 0:
            return math.nan
        return max(1, math.ceil(self.mean_within / (tolerance * self.mean_between)))

    def _rows(self):
        return [("members", str(self.members)),
                ("between (training data)", f"{self.mean_between:.4g}"),
                ("within (members)", f"{self.mean_within:.4g}"),
                ("rho", f"{self.pooled_rho:.3f}"),
                ("members for 1% of between", str(self.members_needed(0.01)))]

    def _reading(self):
        return (f"members share {self.pooled_rho:.0%} of their variance through the training "
                f"data; {self.members_needed(0.01)} members bring the rest within 1% of it")

    def __repr__(self):
        return text_block("Spread", self._rows(), self._reading())

    def _repr_html_(self):
        return safe_html(self, lambda: html_block("Spread", self._rows(), self._reading()))

    def to_frame(self):
        """One row per point: between, within, total, rho."""
        import pandas as pd

        return pd.DataFrame({"point": np.arange(len(self.between)), "between": self.between,
                             "within": self.within, "total": self.total, "rho": self.rho})


def spread(members, counts, *, scheme=None, n_jobs=None) -> Spread:
    """Split each point's member variance into between (training data) and within parts.

    See :class:`Spread`. ``members`` (members, n_points) and ``counts`` (members, n_train)
    as in :func:`prediction_variance`.
    """
    return CountGram(counts, scheme=scheme, n_jobs=n_jobs).spread(members, n_jobs=n_jobs)
