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
import functools
import math
import warnings
from statistics import NormalDist
from typing import ClassVar

import numpy as np

from . import _chunked, _core
from ._members import as_array, in_bag_counts, members_array
from ._progress import all_or_nothing, progress_callback, stages
from ._results import Result, check_tolerance, members_for, not_estimable
from ._validation import n_jobs_value
from ._warnings import warn

__all__ = ["CountGram", "CountGramStream", "PredictionVariance", "Spread", "count_gram",
           "count_gram_stream", "prediction_variance", "spread"]

#: A variance estimate is "steady" when its Monte-Carlo noise (standard deviation over
#: reseeded members on the same training rows) is at most this share of it: the standard
#: error then moves by about half that, 10% (common practice for a figure shown with two
#: digits). It is the default ``tolerance`` of `PredictionVariance.members_needed`.
STEADY_NOISE = 0.2
#: ... and "not estimable" when the noise is at least this share of it (the estimate lies
#: within two noise standard deviations of zero) or the estimate is not positive.
ESTIMABLE_NOISE = 0.5
#: The values of every ``status`` array, best first.
STATUSES = ("steady", "noisy", "not estimable")

#: Little bags: above this share of the rows per member, the half-sampling argument's
#: higher-order terms bias the variance upward noticeably (tests/bench/bench_little_bags.py:
#: median ratio to the Monte-Carlo truth 1.15 ± 0.10 at share 0.1, 1.28 ± 0.06 at 0.2).
LITTLE_BAGS_BIAS_SHARE = 0.15
#: The measured median ratio (little-bags variance / Monte-Carlo truth) by share, for the
#: reading of a result; from tests/bench/bench_little_bags.py (Friedman #1 with noise 1,
#: n = 4000, 300 native trees in groups of 2, 100 training sets).
LITTLE_BAGS_MEASURED_RATIO = {0.1: 1.15, 0.2: 1.28, 0.3: 1.51, 0.4: 2.10}


def _counts_iv(counts) -> np.ndarray:
    from ._members import in_bag_counts

    return in_bag_counts(counts, min_members=2, min_rows=2, unsigned=True)


def _members_iv(members, n_members: int) -> tuple[np.ndarray, tuple[int, ...]]:
    """``(array, shape)``: the members as ``(n_members, n_values)`` for the core, and the
    shape of one member's values — ``(n_points,)`` for values (integers and booleans read as
    values; a 1-D array is one point per member), ``(n_points, n_classes)`` for class
    probabilities, whose every class is estimated (flattened point-major; one copy only when
    the array is not C-contiguous)."""
    array = as_array(members, "members")
    if array.ndim == 1:
        array = array[:, None]
    _, array = members_array(array, kinds=("values", "probabilities"), numbers_as_values=True,
                             purpose="standard errors")
    if array.shape[0] != n_members:
        raise ValueError(f"`members`: has {array.shape[0]} members (rows) but `counts` has "
                         f"{n_members}")
    shape = array.shape[1:]
    if array.ndim == 3:
        array = array.reshape(n_members, -1)
    return array, shape


def _lazy_counts(counts, *, min_members: int = 2, min_rows: int = 2):
    """Lazy ``counts`` as a dask array, checked by what the client knows without reading a
    chunk (dtype and shape); the values are checked chunk by chunk where they live."""
    array = _chunked.as_dask(counts, "counts")
    if array.dtype.kind not in "iu":
        raise TypeError(f"`counts`: expected integer in-bag counts (n_members, n_rows), got "
                        f"dtype {array.dtype}")
    if array.ndim != 2:
        raise ValueError(f"`counts`: expected shape (n_members, n_rows), one row per member "
                         f"and one column per training row, got {array.shape}")
    if array.shape[0] < min_members or array.shape[1] < min_rows:
        raise ValueError(f"`counts`: needs at least {min_members} members (rows) and "
                         f"{min_rows} training rows (columns), got shape {array.shape}")
    return array


def _lazy_points(members, n_members: int, compute, *arguments, progress=None):
    """The per-point arrays of ``compute(chunk, arguments)`` over the chunks of points of
    lazy ``members``, joined in point order. ``arguments`` (the Gram, options) travel as one
    shared key, once per worker; only each chunk's per-point arrays come back."""
    array = _chunked.as_dask(members, "members")
    if array.ndim == 1:
        array = array[:, None]
    if array.ndim not in (2, 3):
        raise ValueError(f"`members`: expected shape (n_members, n_points) or (n_members, "
                         f"n_points, n_classes), got {array.shape}")
    if array.shape[0] != n_members:
        raise ValueError(f"`members`: has {array.shape[0]} members (rows) but `counts` has "
                         f"{n_members}")
    blocks = _chunked.aligned_blocks([(array, "members", 1),
                                      (_chunked.shared(arguments), "arguments", None)])
    return _chunked.join_points(_chunked.map_points(compute, blocks, **_chunked.reporting(progress)))


def _gram_chunk(chunk, arguments):
    """A chunk of points' (raw, correction, within, mean) from the shared core Gram."""
    gram, method, n_jobs = arguments
    members, shape = _members_iv(chunk, gram.n_members)
    return tuple(part.reshape(shape) for part in gram.variance(members, method, n_jobs))


def _little_bags_chunk(chunk, arguments):
    """A chunk of points' (raw, correction, within, mean) of the bootstrap of little bags."""
    n_members, group_size, n_jobs = arguments
    members, shape = _members_iv(chunk, n_members)
    return tuple(part.reshape(shape)
                 for part in _core.little_bags_variance(members, group_size, n_jobs))


def _subsample_rows(max_count: int, sums: np.ndarray) -> int:
    """The rows per member of ``scheme="subsample"`` counts, from their largest count and
    the members' row totals."""
    if max_count > 1 or not np.all(sums == sums[0]):
        raise ValueError("`scheme`: 'subsample' needs 0/1 counts with the same number "
                         "of rows in every member")
    return int(sums[0])


def _finite_estimate(*parts: np.ndarray) -> None:
    """Variances from members so large their squares overflow float64 are refused, never
    carried on as infinities."""
    if not all(np.all(np.isfinite(part)) for part in parts):
        raise ValueError("`members`: values so large their variance overflows float64")


def _jackknife_iv(jackknife) -> bool:
    if not isinstance(jackknife, (bool, np.bool_)):
        raise TypeError(f"`jackknife`: expected True or False, got {jackknife!r}")
    return bool(jackknife)


def _scheme_iv(scheme):
    if scheme not in (None, "bootstrap", "subsample"):
        raise ValueError(f"`scheme`: expected 'bootstrap', 'subsample' or None, got {scheme!r}")
    return scheme


class CountGramStream:
    """The `CountGram` of in-bag counts fed by chunks of training rows; see
    `count_gram_stream`.

    ``update(counts) -> self`` adds a chunk of columns of ``counts`` (every member, some
    training rows), ``merge(other) -> self`` adds the rows of another stream, ``result()``
    gives the `CountGram`. The sums are exact integers, so any chunking and any merge order
    give the same Gram as `count_gram` on all rows at once; streams pickle (the core state
    travels as bytes).
    """

    def __init__(self, *, scheme=None, jackknife=False, n_jobs=None):
        self.scheme = _scheme_iv(scheme)
        _jackknife_iv(jackknife)
        self.jackknife = bool(jackknife)
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = _core.CountGramAccumulator(self.jackknife)

    _callback = None

    @property
    def n_members(self) -> int | None:
        """Members (None before the first chunk)."""
        return self._core.n_members

    @property
    def n_rows(self) -> int:
        """Training rows added so far."""
        return self._core.n_rows

    @all_or_nothing
    def update(self, counts) -> CountGramStream:
        """Add a chunk of training rows: ``counts`` of shape (n_members, rows in the chunk)."""
        counts = in_bag_counts(counts, n_members=self._core.n_members, members_from="counts",
                               unsigned=True, whole=False)
        self._core.update(counts, self._n_jobs, progress=self._callback)
        return self

    def merge(self, other: CountGramStream) -> CountGramStream:
        """Add the training rows of ``other`` (same options)."""
        if not isinstance(other, CountGramStream):
            raise TypeError(f"`other`: expected a CountGramStream, got {type(other).__name__}")
        if (other.scheme, other.jackknife) != (self.scheme, self.jackknife):
            raise ValueError(f"`other`: has scheme={other.scheme!r}, jackknife="
                             f"{other.jackknife} but this stream scheme={self.scheme!r}, "
                             f"jackknife={self.jackknife}")
        self._core.merge(other._core)
        return self

    def result(self) -> CountGram:
        """The `CountGram` of every training row added so far."""
        if self._core.n_members is None:
            raise ValueError("`counts`: no chunk was added (call update first)")
        rows = None
        if self.scheme == "subsample":
            rows = _subsample_rows(self._core.max_count, self._core.row_totals)
        return CountGram._wrap(self._core.finish(self.scheme, rows))

    def __repr__(self):
        return (f"CountGramStream(n_members={self.n_members}, n_rows={self.n_rows}, "
                f"scheme={self.scheme!r}, jackknife={self.jackknife})")


def count_gram_stream(*, scheme=None, jackknife=False, n_jobs=None) -> CountGramStream:
    """Start a `CountGram` fed by chunks of training rows (columns of ``counts``).

    Each chunk adds its partial Grams in exact integer arithmetic: G = N Nᵀ is a sum over
    rows, and so is the jackknife's out-of-bag Gram, whose row weights depend only on the
    row's own number of out-of-bag members. Streams over different chunks merge (in any
    order) and pickle, so the chunks can be reduced where they live; `count_gram` on a dask
    or zarr ``counts`` array does exactly that.

    Parameters
    ----------
    scheme : {"bootstrap", "subsample"} or None
        As in `CountGram`; None detects it from the counts of all chunks.
    jackknife : bool
        Also build the out-of-bag Gram needed by ``method="jackknife"``.
    n_jobs : int, optional

    Returns
    -------
    CountGramStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> counts = bagwise.resample(100, 20, rng=0).counts
    >>> stream = bagwise.count_gram_stream(jackknife=True)
    >>> for start in range(0, 100, 30):
    ...     _ = stream.update(counts[:, start:start + 30])
    >>> bool(np.array_equal(stream.result().gram, bagwise.count_gram(counts).gram))
    True
    """
    return CountGramStream(scheme=scheme, jackknife=jackknife, n_jobs=n_jobs)


def _update_counts(stream: CountGramStream, chunk) -> CountGramStream:
    return stream.update(chunk)


def _lazy_count_gram(counts, scheme, jackknife, n_jobs, progress=False) -> CountGram:
    """The `CountGram` of lazy ``counts``: one stream state per chunk of training rows where
    it lives, merged pairwise; only the O(members²) states travel."""
    array = _lazy_counts(counts)
    start = functools.partial(count_gram_stream, scheme=_scheme_iv(scheme),
                              jackknife=jackknife, n_jobs=n_jobs)
    blocks = _chunked.aligned_blocks([(array, "counts", 1)])
    return _chunked.reduce_streams(start, _update_counts, blocks, progress=progress).result()


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

    Lazy inputs: ``counts`` may be a dask or zarr array chunked along the training rows (axis 1): each
    chunk becomes a partial state on the worker that holds it (exact integer sums, see
    `count_gram_stream`), the states are merged pairwise and the client receives one
    O(members²) state (times the number of distinct out-of-bag counts with
    ``jackknife=True``); the Gram is equal to the in-memory one entry for entry. ``members``
    of `prediction_variance` and `spread` may be a dask or zarr array chunked along the
    points: the Gram travels once to each worker, each chunk's per-point results come back
    and are joined in point order, and the not-estimable warning is given once.
    """

    def __init__(self, counts, *, scheme=None, jackknife=False, n_jobs=None, progress=False):
        if _chunked.is_lazy(counts):
            self._gram = _lazy_count_gram(counts, scheme, jackknife, n_jobs, progress)._gram
            return
        scheme = _scheme_iv(scheme)
        jackknife = _jackknife_iv(jackknife)
        counts = _counts_iv(counts)
        subsample_rows = None
        if scheme == "subsample":
            subsample_rows = _subsample_rows(int(counts.max()), counts.sum(axis=1))
        with progress_callback(progress, "count Gram", "tile") as callback:
            self._gram = _core.CountGram(counts, scheme=scheme, subsample_rows=subsample_rows,
                                         jackknife=jackknife, n_jobs=n_jobs_value(n_jobs),
                                         progress=callback)

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

    def prediction_variance(self, members, *, method="ij", corrected=True, n_jobs=None,
                            progress=False):
        """Variance of the ensemble mean at each point; see :func:`prediction_variance`
        (``progress`` as there).

        Lazy inputs: dask or zarr ``members`` chunked along the points; this Gram
        (O(members²)) travels once to each worker, each chunk's per-point arrays come back.
        """
        if method not in ("ij", "jackknife"):
            raise ValueError(f"`method`: expected 'ij' or 'jackknife', got {method!r}")
        with progress_callback(progress, "prediction variance", "point") as callback:
            return self._estimate(members, method, corrected, n_jobs, callback)[0]

    def spread(self, members, *, n_jobs=None, progress=False):
        """Between/within split of the member variance; see :func:`spread` (``progress`` as
        there).

        Lazy inputs: as in `prediction_variance`.
        """
        with progress_callback(progress, "spread", "point") as callback:
            return Spread._from_parts(*self._estimate(members, "ij", True, n_jobs, callback))

    def _estimate(self, members, method, corrected, n_jobs, callback=None):
        """The PredictionVariance of ``members`` and their across-member variance."""
        if method == "jackknife" and not self._gram.has_jackknife:
            raise ValueError("`method`: this CountGram was built without jackknife=True")
        if _chunked.is_lazy(members):
            raw, correction, within, mean = _lazy_points(
                members, self.n_members, _gram_chunk, self._gram, method, n_jobs_value(n_jobs),
                progress=callback)
        else:
            members, shape = _members_iv(members, self.n_members)
            raw, correction, within, mean = (
                part.reshape(shape)
                for part in self._gram.variance(members, method, n_jobs_value(n_jobs),
                                                callback))
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


def count_gram(counts, *, scheme=None, jackknife=False, n_jobs=None, progress=False) -> CountGram:
    """Build the :class:`CountGram` of ``counts`` once, for repeated use on new points.

    Lazy inputs: dask or zarr ``counts`` chunked along the training rows are reduced where
    they live (`count_gram_stream`): each chunk sends one O(members²) partial state (times
    the distinct out-of-bag counts with ``jackknife=True``), the client holds the Gram.

    ``progress``: ``True`` shows a tqdm bar on stderr, a callable receives ``(done, total)``
    (tiles of the Gram done; chunks for lazy ``counts``); Ctrl-C stops the build within
    about a second.

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
    return CountGram(counts, scheme=scheme, jackknife=jackknife, n_jobs=n_jobs, progress=progress)


def _monte_carlo_noise(method, corrected, raw, correction, value, n_rows, n_members,
                       group_size):
    """The Monte-Carlo standard deviation of a variance estimate: how much it would move if
    the members were redrawn on the same training rows.

    Infinitesimal jackknife and jackknife: the raw estimate is a scaled sum over the n rows
    of squared Monte-Carlo estimates Ĉ_i = C_i + ε_i (a covariance with the row's count, or
    a leave-out mean's deviation), the ε_i nearly uncorrelated with a common variance e. Its
    Monte-Carlo bias is the correction c = n·e (times the scheme's scale; Wager, Hastie &
    Efron 2014 give it as n·v/B for the IJ). For near-Gaussian ε_i, Var(Σ ε_i²) = 2 n e² =
    2c²/n. The cross term 2 Σ C_i ε_i = (2/B) Σ_b u_b (t_b − t̄) − …, with u_b = Σ_i C_i
    (N_bi − 1) the linear part of t_b (Var u_b = Cov(u_b, t_b) = V), has variance
    4 (V v + V²)/B = 4Vc/n + 4V²/B for near-Gaussian (u_b, t_b). So the corrected estimate
    V̂ = raw − c has noise √((2c² + 4Vc)/n + 4V²/B), V = max(V̂, 0); a reseeding simulation
    checks it (tests/test_uncertainty.py).
    Little bags: V̂ = S²_B − W/ℓ, with S²_B the variance of G group means; for near-Gaussian
    group means Var(S²_B) = 2 E[S²_B]² / (G − 1), so the noise is √(2 / (G − 1)) · S²_B.
    An uncorrected estimate also carries its bias: the root mean square √(noise² + c²).
    """
    if method == "little_bags":
        n_groups = n_members // max(group_size, 1)
        noise = math.sqrt(2.0 / max(n_groups - 1, 1)) * np.abs(raw)
    else:
        positive = np.maximum(value, 0.0)
        noise = np.sqrt((2.0 * correction**2 + 4.0 * positive * correction) / max(n_rows, 1)
                        + 4.0 * positive**2 / n_members)
    if not corrected:
        noise = np.hypot(noise, correction)
    return noise


def _status_of(value, noise) -> np.ndarray:
    """"steady" / "noisy" / "not estimable" from an estimate and its Monte-Carlo noise (see
    `STEADY_NOISE`, `ESTIMABLE_NOISE`); members that agree exactly (estimate and noise both
    0) give a steady 0."""
    value = np.asarray(value, dtype=np.float64)
    noise = np.asarray(noise, dtype=np.float64)
    status = np.full(value.shape, STATUSES[2], dtype="<U13")
    with np.errstate(invalid="ignore"):
        status[(value > 0) & (noise < ESTIMABLE_NOISE * value)] = STATUSES[1]
        status[((value > 0) & (noise <= STEADY_NOISE * value))
               | ((value == 0) & (noise == 0))] = STATUSES[0]
    return status


def _at_predicted_class(array: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Per point: ``array`` itself for values; for class probabilities ``(n_points,
    n_classes)``, its entry at the class with the largest mean probability."""
    if array.ndim == 1:
        return array
    return array[np.arange(array.shape[0]), np.argmax(mean, axis=1)]


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class PredictionVariance(Result):
    """Variance and standard error of the **ensemble's mean prediction** at each point: how
    much the bagged prediction would move if the training set were drawn again (not the
    spread of a new observation: for that, see `bagwise.prediction_interval`).

    Every estimate comes with its Monte-Carlo ``noise`` (it is computed from finitely many
    members) and a ``status``: "steady" when the noise is at most `STEADY_NOISE` (20%) of
    the variance, "not estimable" when it is at least `ESTIMABLE_NOISE` (50%) or the
    estimate is not positive, "noisy" in between. `members_needed` says how many members
    would make it steady.

    Attributes
    ----------
    method : str
        ``"ij"`` (infinitesimal jackknife), ``"jackknife"`` (after bootstrap) or
        ``"little_bags"`` (bootstrap of little bags).
    corrected : bool
        Whether the Monte-Carlo bias correction was subtracted.
    variance : ndarray, shape (n_points,) or (n_points, n_classes)
        The variance of the ensemble's mean prediction over training sets (of each class's
        probability for class probabilities); corrected values below zero are clipped to
        zero (see ``n_clipped``) and have status "not estimable".
    std_error : ndarray
        ``sqrt(variance)``.
    raw_variance, correction : ndarray
        The uncorrected estimate and the correction term (corrected = raw − correction).
    correction_share : ndarray
        ``correction / raw_variance``: near 1 means too few members for a stable estimate;
        0 where both are 0 (the members agree exactly, nothing is removed), NaN where only
        ``raw_variance`` is 0 (such a point is "not estimable").
    noise : ndarray
        The Monte-Carlo standard deviation of ``variance`` (before clipping): how much it
        would move if the members were redrawn on the same training rows (derived in
        `_monte_carlo_noise`).
    status : ndarray of str
        Per point (and class): "steady", "noisy" or "not estimable".
    mean : ndarray
        The ensemble mean prediction the standard errors belong to.
    quantity : str
        What the variance is of: ``"value"`` (the prediction) or ``"class probability"``
        (each class's probability; readings summarise the predicted class's).
    n_members, n_rows : int
        Members and training rows of the in-bag counts.
    scheme : str
        ``"bootstrap"``, ``"subsample"`` or ``"little_bags"`` (which fixes the scale; see the
        module notes).
    n_clipped : int
        Entries whose corrected variance was negative and clipped to zero.
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
    noise: np.ndarray
    status: np.ndarray
    mean: np.ndarray
    quantity: str
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
        _finite_estimate(raw, correction)
        with np.errstate(divide="ignore", invalid="ignore"):
            # Members that agree exactly at a point have raw = correction = 0: nothing is
            # removed, share 0 (not 0/0). A zero raw estimate with a non-zero correction
            # stays NaN; such a point is "not estimable" and warned about below.
            correction_share = np.where(raw > 0, correction / raw,
                                        np.where(correction == 0, 0.0, np.nan))
        value = raw - correction if corrected else raw.copy()
        noise = _monte_carlo_noise(method, corrected, raw, correction, value,
                                   n_rows - n_without_out_of_bag, n_members, group_size)
        status = _status_of(value, noise)
        negative = value < 0
        variance = np.where(negative, 0.0, value)
        result = cls(method=method, corrected=corrected, variance=variance,
                     std_error=np.sqrt(variance), raw_variance=raw, correction=correction,
                     correction_share=correction_share, noise=noise, status=status, mean=mean,
                     quantity="value" if mean.ndim == 1 else "class probability",
                     n_members=n_members, n_rows=n_rows, scheme=scheme,
                     n_clipped=int(negative.sum()),
                     n_without_out_of_bag=n_without_out_of_bag, group_size=group_size,
                     _share=member_share)
        headline = _at_predicted_class(status, mean)
        n_not = int((headline == STATUSES[2]).sum())
        if n_not:
            needed = result._needed_words()
            more = (f"; {needed} members would make the typical point steady"
                    if needed is not None else "")
            warn(f"the standard error of the ensemble's mean is not estimable with "
                 f"{n_members} members at {n_not} of {len(headline)} points (see `status`)"
                 f"{more}")
        return result

    def members_needed_at_points(self, tolerance: float = STEADY_NOISE) -> np.ndarray:
        """Per point (and class): the smallest ensemble whose variance estimate would have
        Monte-Carlo noise within ``tolerance`` of the variance (``tolerance=STEADY_NOISE``
        is the "steady" status), with the same training rows and method.

        Derivation (see `_monte_carlo_noise`): for the jackknifes the correction scales as
        c·M/M' with M' members, so M' solves a c'² + b c' ≤ τ²V² with a = 2/n (plus 1 when
        uncorrected: the bias stays) and b = 4V/n; for little bags the noise scales as
        √(2/(G − 1)) S²_B with G groups of ``group_size``. Where the variance is not
        estimable it is replaced by the largest value the noise allows, V̂₊ + 2·noise, so
        the figure is then a lower bound. Float array; NaN where no size would do (an
        uncorrected little-bags estimate whose bias alone exceeds the tolerance).
        """
        tau = check_tolerance(tolerance)
        value = self.raw_variance - self.correction if self.corrected else self.raw_variance
        target = np.where(self.status == STATUSES[2],
                          np.maximum(value, 0.0) + 2.0 * self.noise, value)
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.method == "little_bags":
                groups = 1.0 + 2.0 * (np.abs(self.raw_variance) / (tau * target)) ** 2
                needed = self.group_size * np.ceil(groups)
                if not self.corrected:
                    needed = np.where(self.correction <= tau * target, needed, np.nan)
            else:
                # With M' members the correction is K/M', K = c·M: the noise² of
                # `_monte_carlo_noise` (plus c'² when uncorrected) is a u² + b u in u = 1/M'.
                n = max(self.n_rows - self.n_without_out_of_bag, 1)
                k = self.correction * self.n_members
                a = k * k * (2.0 / n + (0.0 if self.corrected else 1.0))
                b = 4.0 * target * k / n + 4.0 * target**2
                limit = (tau * target) ** 2
                largest = np.where(a > 0, (-b + np.sqrt(b * b + 4.0 * a * limit))
                                   / np.where(a > 0, 2.0 * a, 1.0), limit / b)
                needed = np.ceil(1.0 / largest)
            needed = np.where(target > 0, np.maximum(needed, 2.0), np.nan)
        return needed

    def members_needed(self, tolerance: float = STEADY_NOISE) -> int | float:
        """The smallest ensemble whose variance estimate would be steady (Monte-Carlo noise
        within ``tolerance`` of the variance) at the median point — the predicted class's
        probability for class probabilities; see `members_needed_at_points`. NaN with one
        `BagwiseWarning` when no point gives a figure."""
        needed = _at_predicted_class(self.members_needed_at_points(tolerance), self.mean)
        finite = needed[np.isfinite(needed)]
        if not finite.size:
            return not_estimable("no point has a positive variance or noise to scale from")
        return int(np.ceil(np.median(finite)))

    def mean_interval(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """Normal-approximation interval ``mean ± z · std_error`` at ``level`` for the
        **ensemble's mean prediction** (what a refit on new training data would average to),
        not for a new observation: for that, use `bagwise.prediction_interval`. Only as
        good as ``status`` says.

        The normal approximation is an assumption (Wager, Hastie & Efron 2014 use it too);
        it ignores the ensemble's bias.
        """
        if not 0 < level < 1:
            raise ValueError(f"`level`: must lie in (0, 1), got {level}")
        z = NormalDist().inv_cdf(0.5 + level / 2)
        return self.mean - z * self.std_error, self.mean + z * self.std_error

    # -- readings -------------------------------------------------------------------------
    def _of(self) -> str:
        return ("the ensemble's mean prediction" if self.quantity == "value"
                else "the ensemble's mean probability of the predicted class")

    def status_counts(self) -> dict[str, int]:
        """Points by status (the predicted class's entry for class probabilities)."""
        headline = _at_predicted_class(self.status, self.mean)
        return {name: int((headline == name).sum()) for name in STATUSES}

    def _needed_words(self) -> str | None:
        """"about N" members for steady estimates, "at least N" when the typical point's
        variance is itself not estimable (its figure then rests on an upper bound)."""
        needed = _quiet(self.members_needed)
        if _is_nan(needed):
            return None
        status = _at_predicted_class(self.status, self.mean)
        share_not = np.mean(status == STATUSES[2])
        return f"{'at least' if share_not >= 0.5 else 'about'} {needed:,}"

    def _not_estimable_words(self) -> str:
        needed = self._needed_words()
        words = f"not estimable with {self.n_members:,} members"
        if needed is not None:
            words += f"; {needed} needed"
        if self.method != "little_bags":
            words += " (or fit with scheme='little_bags')"
        return words

    def _typical(self) -> str | None:
        """The median standard error in words, or None when the median point is not
        estimable (never "± 0" from a clipped estimate)."""
        status = _at_predicted_class(self.status, self.mean)
        error = _at_predicted_class(self.std_error, self.mean)
        order = np.argsort(error, kind="stable")
        middle = order[len(order) // 2]
        if status[middle] == STATUSES[2]:
            return None
        if error[middle] == 0:
            return "0 (the members agree exactly at a typical point)"
        rough = "" if status[middle] == STATUSES[0] else " (rough: Monte-Carlo noisy)"
        return f"± {np.median(error):.3g}{rough}"

    def _rows(self):
        name = {"ij": "infinitesimal jackknife", "jackknife": "jackknife-after-bootstrap",
                "little_bags": "bootstrap of little bags"}
        counts = self.status_counts()
        typical = self._typical()
        rows = [
            ("method", name.get(self.method, self.method)
             + (" (bias-corrected)" if self.corrected else "")),
            ("of", self._of()),
            ("members x training rows", f"{self.n_members:,} x {self.n_rows:,}"),
            ("points", f"{len(self.variance):,}"),
            ("steady / noisy / not estimable",
             " / ".join(f"{counts[name]:,}" for name in STATUSES)),
            ("median standard error", typical if typical is not None
             else self._not_estimable_words()),
            ("median correction share", f"{np.nanmedian(self.correction_share):.1%}"
             if np.isfinite(self.correction_share).any() else "n/a"),
            ("members for steady estimates", self._needed_words() or "n/a"),
        ]
        if self.method == "jackknife":
            rows.append(("rows never out of bag", str(self.n_without_out_of_bag)))
        if self.method == "little_bags":
            rows.append(("groups", f"{self.n_members // self.group_size:,} of "
                                   f"{self.group_size}"))
            rows.append(("share per member", _share_reading(self._share)))
        return rows

    def _reading(self):
        typical = self._typical()
        if typical is None:
            return f"standard error of {self._of()}: {self._not_estimable_words()}"
        return f"{self._of()} at a typical point is uncertain by {typical} (one standard error)"

    def to_frame(self):
        """One row per point (and class): mean, variance, std_error, raw_variance,
        correction, noise, status."""
        return _per_point_frame(self, ("mean", "variance", "std_error", "raw_variance",
                                       "correction", "noise", "status"))


def _per_point_frame(result, names):
    """One row per point (and per class, with a ``class`` column, for class probabilities)
    holding the per-point arrays ``names`` of ``result``."""
    import pandas as pd

    first = getattr(result, names[0])
    n_points = first.shape[0]
    columns = {"point": np.arange(n_points)}
    if first.ndim == 2:
        n_classes = first.shape[1]
        columns = {"point": np.repeat(np.arange(n_points), n_classes),
                   "class": np.tile(np.arange(n_classes), n_points)}
    for name in names:
        columns[name] = np.ravel(getattr(result, name))
    return pd.DataFrame(columns)


def _is_nan(value) -> bool:
    return isinstance(value, float) and math.isnan(value)


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


def _little_bags_figures(counts, group_size: int):
    """``(n_members, n_rows, largest count, member row totals, distinct rows per group)``
    of ``counts`` in memory or lazy (then O(members) reductions computed where the chunks
    live; no chunk travels)."""
    if not _chunked.is_lazy(counts):
        counts = _counts_iv(counts)
        n_members, n_rows = counts.shape
        if n_members % group_size:
            return n_members, n_rows, None, None, None
        used = counts.reshape(n_members // group_size, group_size, n_rows).any(axis=1)
        return (n_members, n_rows, int(counts.max()), counts.sum(axis=1, dtype=np.int64),
                used.sum(axis=1))
    import dask

    array = _lazy_counts(counts).rechunk({0: -1})
    n_members, n_rows = array.shape
    if n_members % group_size:
        return n_members, n_rows, None, None, None
    groups = n_members // group_size
    used = array.map_blocks(
        lambda block: (block > 0).reshape(groups, group_size, -1).any(axis=1),
        chunks=((groups,), array.chunks[1]), dtype=bool).sum(axis=1)
    low, high, sums, used = dask.compute(array.min(), array.max(),
                                         array.sum(axis=1, dtype=np.int64), used)
    if low < 0:
        raise ValueError(f"`counts`: in-bag counts must be non-negative, got {low}")
    return n_members, n_rows, int(high), sums, used


def _little_bags_iv(counts, group_size) -> tuple[int, int, int, float]:
    """Checks that ``counts`` look like little bags drawn in consecutive groups of
    ``group_size`` (0/1, equal row sums, each group's members inside one half of the
    rows); returns the members, rows, ℓ and each member's share of the rows."""
    if group_size is None:
        group_size = 2
    if isinstance(group_size, bool) or not isinstance(group_size, (int, np.integer)):
        raise TypeError(f"`group_size`: expected an integer, got {type(group_size).__name__}")
    group_size = int(group_size)
    if group_size < 2:
        raise ValueError("`group_size`: must be at least 2 (the within-group variance needs "
                         f"two members), got {group_size}")
    n_members, n_rows, largest, sums, used = _little_bags_figures(counts, group_size)
    if n_members % group_size:
        raise ValueError(f"`group_size`: the {n_members} members do not split into whole "
                         f"groups of {group_size} (little bags lay members out in consecutive "
                         "groups, as `resample` draws them)")
    if largest > 1:
        raise ValueError(f"`counts`: little bags draw each row at most once per member (0/1 "
                         f"counts), found a count of {largest}")
    if sums.min() != sums.max():
        raise ValueError(f"`counts`: little-bags members all draw the same number of rows; "
                         f"these draw between {sums.min()} and {sums.max()}")
    if sums[0] == 0:
        raise ValueError("`counts`: the members draw no rows")
    half = n_rows // 2
    wide = np.flatnonzero(used > half)
    if len(wide):
        g = int(wide[0])
        raise ValueError(
            f"`counts`: the members of group {g} (members {g * group_size} to "
            f"{(g + 1) * group_size - 1}) use {int(used[g])} distinct rows, more than one half "
            f"({half} of {n_rows}); little bags keep each group inside one half - are the "
            f"members laid out in consecutive groups of {group_size}?")
    return n_members, n_rows, group_size, float(sums[0]) / n_rows


def _little_bags(members, counts, group_size, corrected, n_jobs,
                 callback=None) -> PredictionVariance:
    """The bootstrap-of-little-bags `PredictionVariance` (checked inputs)."""
    n_members, n_rows, group_size, share = _little_bags_iv(counts, group_size)
    if _chunked.is_lazy(members):
        raw, correction, _, mean = _lazy_points(members, n_members, _little_bags_chunk,
                                                n_members, group_size, n_jobs_value(n_jobs),
                                                progress=callback)
    else:
        members, shape = _members_iv(members, n_members)
        raw, correction, _, mean = (
            part.reshape(shape)
            for part in _core.little_bags_variance(members, group_size, n_jobs_value(n_jobs),
                                                   callback))
    return PredictionVariance._from_parts(
        method="little_bags", corrected=corrected, raw=raw, correction=correction, mean=mean,
        n_members=n_members, n_rows=n_rows, scheme="little_bags",
        n_without_out_of_bag=0, group_size=group_size, member_share=share)


def prediction_variance(members, counts, *, method="ij", corrected=True, scheme=None,
                        group_size=None, n_jobs=None, progress=False) -> PredictionVariance:
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
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Lazy inputs: ``members`` may be a dask or zarr array chunked along the points (axis 1),
    ``counts`` one chunked along the training rows. The counts are reduced to the
    O(members²) `CountGram` where their chunks live (little bags: O(members) row totals and
    group figures), which then travels once to each worker; each chunk of points sends back
    only its per-point arrays (O(points of one chunk)), joined in point order on the
    client, which holds the per-point result and gives the not-estimable warning once.

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
        with progress_callback(progress, "prediction variance", "point") as callback:
            return _little_bags(members, counts, group_size, corrected, n_jobs, callback)
    if method not in ("ij", "jackknife"):
        raise ValueError(f"`method`: expected 'ij', 'jackknife' or 'little_bags', got {method!r}")
    if group_size is not None:
        raise ValueError("`group_size`: only method='little_bags' reads groups of members")
    if scheme == "little_bags":
        raise ValueError(
            f"`scheme`: method={method!r} is not valid for little-bags counts (members of a "
            "group share a half-sample, so they are not independent draws); use "
            "method='little_bags'")
    with progress_callback(progress, "prediction variance", "step") as callback:
        build, estimate = stages(callback, 2)
        gram = CountGram(counts, scheme=scheme, jackknife=(method == "jackknife"), n_jobs=n_jobs,
                         progress=build or False)
        return gram.prediction_variance(members, method=method, corrected=corrected,
                                        n_jobs=n_jobs, progress=estimate or False)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Spread(Result):
    """Each point's member variance split into between (training data) and within (members).

    ``within(x)`` is the across-member variance of the predictions (ddof 1), the part more
    members average away; ``between(x)`` the bias-corrected infinitesimal-jackknife
    variance, i.e. the variance of the infinitely bagged predictor over training sets;
    ``total = between + within`` is σ²(x) and ``rho = between / total`` the correlation
    between two members. So Var(f_M) = ρσ² + (1 − ρ)σ²/M = between + within/M (Hastie,
    Tibshirani & Friedman 2009, ESL eq. 15.1).

    The between part is a variance estimate with Monte-Carlo noise like any
    `PredictionVariance` (its ``status`` per point); the pooled figures (``mean_between``,
    ``pooled_rho``, `members_needed`) are only read out when ``pooled_status`` is not "not
    estimable". For class probabilities every array has shape (n_points, n_classes).

    Attributes
    ----------
    between, within, total, rho : ndarray, shape (n_points,) or (n_points, n_classes)
        Per point; ``between`` is never negative (clipped at zero, see ``n_clipped``);
        ``rho`` is NaN where ``total`` is 0 (the members agree exactly: no share defined).
    noise, status : ndarray
        The between part's Monte-Carlo noise and status (as in `PredictionVariance`).
    mean_between, mean_within, mean_total : float
        Means over points (``mean_total = mean_between + mean_within``).
    pooled_rho : float
        ``mean_between / mean_total``; NaN when ``mean_total`` is 0.
    pooled_status : str
        The status of the mean over points of the corrected between part, against the mean
        of its noise (an upper bound of the mean's noise, since the points share members).
    n_members : int
        Members of the ensemble.
    n_clipped : int
        Entries whose corrected between-variance was negative and clipped to zero.
    """

    _title: ClassVar[str] = "Spread"

    between: np.ndarray
    within: np.ndarray
    total: np.ndarray
    rho: np.ndarray
    noise: np.ndarray
    status: np.ndarray
    mean_between: float
    mean_within: float
    mean_total: float
    pooled_rho: float
    pooled_status: str
    n_members: int
    n_clipped: int
    _estimate: PredictionVariance = dataclasses.field(repr=False)

    @classmethod
    def _from_parts(cls, estimate: PredictionVariance, within: np.ndarray) -> Spread:
        """The one place a Spread is built: the corrected IJ ``estimate`` is the between
        part, ``within`` the across-member variance of the same call."""
        between = estimate.variance
        _finite_estimate(within)
        total = between + within
        with np.errstate(divide="ignore", invalid="ignore"):
            rho = np.where(total > 0, between / total, np.nan)
        mean_between = float(between.mean())
        mean_within = float(within.mean())
        mean_total = mean_between + mean_within
        unclipped = float(np.mean(estimate.raw_variance - estimate.correction))
        pooled_status = str(_status_of(unclipped, float(np.mean(estimate.noise))))
        return cls(between=between, within=within, total=total, rho=rho,
                   noise=estimate.noise, status=estimate.status,
                   mean_between=mean_between, mean_within=mean_within, mean_total=mean_total,
                   pooled_rho=mean_between / mean_total if mean_total > 0 else math.nan,
                   pooled_status=pooled_status, n_members=estimate.n_members,
                   n_clipped=estimate.n_clipped, _estimate=estimate)

    def predicted_variance(self, n_members) -> np.ndarray:
        """Var(f_M) = ρσ² + (1 − ρ)σ²/M = between + within / M at each point (Hastie,
        Tibshirani & Friedman 2009, eq. 15.1) for an ensemble of ``n_members`` members (an
        array of sizes adds a last axis of ``len(n_members)``)."""
        m = _n_members_iv(n_members)
        if m.ndim == 0:
            return self.between + self.within / m
        return self.between[..., None] + self.within[..., None] / np.ravel(m)

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

        NaN with one `BagwiseWarning` when the pooled between part is not estimable with
        these members (it would be a ratio of noise) or not positive.
        """
        tolerance = check_tolerance(tolerance)
        if self.pooled_status == STATUSES[2]:
            return not_estimable(f"the between part is {self._not_estimable_words()} for "
                                 "a steady estimate")
        return members_for(self.mean_within, self.mean_between, tolerance,
                           "the between variance (the limit) is not positive: more members "
                           "cannot make the remaining part small relative to it")

    def _not_estimable_words(self) -> str:
        return self._estimate._not_estimable_words()

    def _rows(self):
        rows = [("members", str(self.n_members)),
                ("within (members)", f"{self.mean_within:.4g}"),
                ("between: steady / noisy / not estimable",
                 " / ".join(f"{n:,}" for n in self._estimate.status_counts().values()))]
        if self.pooled_status == STATUSES[2]:
            words = self._not_estimable_words()
            return rows + [("between (training data)", words), ("rho", words)]
        needed = _quiet(lambda: self.members_needed(0.01))
        rough = "" if self.pooled_status == STATUSES[0] else " (rough)"
        return rows + [("between (training data)", f"{self.mean_between:.4g}{rough}"),
                       ("rho", f"{self.pooled_rho:.3f}{rough}"),
                       ("members for 1% of between", str(needed))]

    def _reading(self):
        if self.pooled_status == STATUSES[2]:
            return ("the split of the member variance into training data and members is "
                    + self._not_estimable_words())
        needed = _quiet(lambda: self.members_needed(0.01))
        rough = "" if self.pooled_status == STATUSES[0] else "roughly "
        return (f"members share {rough}{self.pooled_rho:.0%} of their variance through the "
                f"training data; {needed} members bring the rest within 1% of it")

    def to_frame(self):
        """One row per point (and class): between, within, total, rho, noise, status."""
        return _per_point_frame(self, ("between", "within", "total", "rho", "noise",
                                       "status"))


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


def spread(members, counts, *, scheme=None, n_jobs=None, progress=False) -> Spread:
    """Split each point's member variance into between (training data) and within parts.

    See :class:`Spread`. ``members`` (n_members, n_points) and ``counts`` (n_members, n_rows)
    as in :func:`prediction_variance`.

    Lazy inputs: as in :func:`prediction_variance`: dask or zarr ``members`` chunked along
    the points and ``counts`` chunked along the training rows; the O(members²) Gram travels
    once to each worker and each chunk's per-point between/within arrays come back.
    ``progress`` as in :func:`prediction_variance`.
    """
    with progress_callback(progress, "spread", "step") as callback:
        build, estimate = stages(callback, 2)
        gram = CountGram(counts, scheme=scheme, n_jobs=n_jobs, progress=build or False)
        return gram.spread(members, n_jobs=n_jobs, progress=estimate or False)
