"""The ensemble-size curve: the loss of the first-k-member ensemble over random orders.

`size_curve` scores the ensemble of the first ``k`` members for ``k`` on a grid, averaged
over random member orders, with the exact finite-ensemble law
``E loss(k) = infinite_loss + mean_within / k`` for squared error and Brier score;
`size_curve_stream` computes it from chunks of points, and its streams merge and pickle.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import _chunked, _core
from ._display import fmt as _fmt
from ._display import plus_minus
from ._members import as_array, loss_for, loss_option, members_array, n_classes_of, targets
from ._progress import all_or_nothing, progress_callback, reporting
from ._results import Result, check_tolerance, members_for, not_estimable
from ._validation import n_jobs_value, positive_int, rng_seed
from ._warnings import warn

__all__ = ["SizeCurve", "SizeCurveStream", "size_curve", "size_curve_stream"]


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class SizeCurve(Result):
    """Loss of the first-k-member ensemble, averaged over random member orders.

    Attributes
    ----------
    loss : str
        ``"squared_error"``, ``"brier_score"`` or ``"error_rate"``.
    n_members, n_points : int
        Shape of the predictions (``M`` members).
    orders : int
        Number of random member orders.
    seed : int
        The integer seed of the orders (from ``rng``).
    member_orders : ndarray of int64, shape (orders, n_members)
        The orders themselves.
    sizes : ndarray of int64
        Ensemble sizes ``k``.
    curve : ndarray of float64
        Mean over orders of the loss of the first-``k`` ensemble.
    std_error : ndarray of float64
        Standard error of ``curve`` across orders (0 at ``k = M``; NaN for one order).
    per_order : ndarray of float64, shape (orders, sizes)
        The loss of every order at every size.
    ensemble_loss : float
        Loss of the ensemble of all members, ``loss(M)``.
    mean_within : float or None
        ``W``: mean over points of the across-member variance (ddof 1; summed over classes
        for Brier), the within part. NaN (with a warning) for one member; None for error
        rates.
    infinite_loss : float or None
        ``loss(M) - W/M``, the estimated loss of an infinite ensemble; None for error rates.
    """

    _title = "SizeCurve"

    loss: str
    n_members: int
    n_points: int
    orders: int
    seed: int
    member_orders: np.ndarray
    sizes: np.ndarray
    curve: np.ndarray
    std_error: np.ndarray
    per_order: np.ndarray
    ensemble_loss: float
    mean_within: float | None
    infinite_loss: float | None

    def _require_law(self, name):
        if self.mean_within is None:
            raise ValueError(f"`{name}`: the finite-ensemble law holds for squared error and "
                             "Brier score only, not for error rates")

    def law(self, k):
        """``infinite_loss + W/k`` (= ``loss(M) + W (1/k - 1/M)``) at ensemble sizes ``k``."""
        self._require_law("law")
        k = np.asarray(k, dtype=np.float64)
        if np.any(~(k >= 1)):
            raise ValueError("`k`: ensemble sizes must be at least 1")
        value = self.infinite_loss + self.mean_within / k
        return float(value) if value.ndim == 0 else value

    def members_needed(self, tolerance: float = 0.01):
        """Smallest ``k`` whose expected loss comes within ``tolerance`` (relative) of
        ``infinite_loss``: ``W/k <= tolerance * infinite_loss``.

        ``W/k`` (``mean_within / k``) is the expected excess loss of ``k`` members over an
        infinite ensemble, so this bounds the expected loss of ``k`` members. It may exceed
        ``n_members``; 1 when the members agree (``W = 0``). NaN with one `BagwiseWarning`
        when it cannot be estimated: a single member (``W`` is NaN) or
        ``infinite_loss <= 0`` (no size is close in relative terms) or an error rate, which
        follows no such law.
        """
        tolerance = check_tolerance(tolerance)
        if self.mean_within is None:
            return not_estimable("the size law holds for squared error and Brier score only, "
                                 "not for error rates")
        within, limit = self.mean_within, self.infinite_loss
        if math.isnan(within):
            return not_estimable("a single member has no within part (mean_within is NaN)")
        if within == 0:
            return 1
        k = members_for(within, limit, tolerance, "infinite_loss <= 0, so no ensemble size "
                        "comes within a relative tolerance of it")
        if math.isnan(k):
            return k
        bound = tolerance * limit
        while k > 1 and within / (k - 1) <= bound:  # the exact smallest k despite rounding
            k -= 1
        while within / k > bound:
            k += 1
        return k

    def _rows(self):
        rows = [
            ("loss", self.loss),
            ("members x points", f"{self.n_members:,} x {self.n_points:,}"),
            ("orders (seed)", f"{self.orders} ({self.seed})"),
            ("loss(1)", plus_minus(_fmt(float(self.curve[0])), float(self.std_error[0]),
                                   _fmt(float(self.std_error[0])))
             if self.sizes[0] == 1 else "-"),
            ("loss(M)", _fmt(self.ensemble_loss)),
        ]
        if self.mean_within is not None:
            rows += [("mean within W", _fmt(self.mean_within)),
                     ("infinite loss", _fmt(self.infinite_loss))]
        return rows

    def _reading(self):
        if self.mean_within is None:
            return "error rates follow no exact size law; read the curve and its standard errors"
        return "E[loss(k)] = infinite loss + W/k (exact for the order-averaged curve)"

    def to_frame(self):
        """One row per size: ``size``, loss, std_error and (squared-type losses) the law."""
        import pandas as pd

        frame = pd.DataFrame({"size": self.sizes, "loss": self.curve,
                              "std_error": self.std_error})
        if self.mean_within is not None:
            frame["law"] = self.law(self.sizes)
        return frame


def _size_curve(loss, orders, seed, member_orders, table) -> SizeCurve:
    """The one place a `SizeCurve` is built: from the core's typed table, with the warnings
    of its edge cases."""
    n_members = int(table.n_members)
    ensemble_loss = float(table.ensemble_loss)
    if loss == "error_rate":
        mean_within, infinite_loss = None, None
    else:
        if n_members == 1:
            warn("`members`: a single member has no within part; mean_within, infinite_loss "
                 "and the law are NaN")
        mean_within = float(table.mean_within)
        infinite_loss = ensemble_loss - mean_within / n_members
    if orders == 1:
        warn("`orders`: one order gives no standard error (NaN)")
    return SizeCurve(
        loss=loss, n_members=n_members, n_points=int(table.n_points), orders=orders, seed=seed,
        member_orders=member_orders, sizes=np.asarray(table.sizes, dtype=np.int64),
        curve=table.curve, std_error=table.std_error, per_order=table.per_order,
        ensemble_loss=ensemble_loss, mean_within=mean_within, infinite_loss=infinite_loss,
    )


def _default_sizes(n_members):
    """About 20 roughly log-spaced sizes from 1 to n_members, always including both ends."""
    grid = np.unique(np.round(np.geomspace(1, n_members, num=min(n_members, 20))).astype(np.int64))
    return [int(k) for k in np.union1d(grid, [1, n_members])]


def _sizes_iv(sizes, n_members):
    if sizes is None:
        return _default_sizes(n_members)
    array = as_array(sizes, "sizes")
    if array.ndim != 1 or array.size == 0:
        raise ValueError(f"`sizes`: expected a non-empty 1-D list of sizes, got shape {array.shape}")
    if array.dtype.kind not in "iu":
        raise TypeError(f"`sizes`: expected integers, got dtype {array.dtype}")
    if array.min() < 1 or array.max() > n_members:
        raise ValueError(f"`sizes`: every size must lie in 1..{n_members} (the number of members)")
    return [int(k) for k in np.unique(array)]


class SizeCurveStream:
    """The ensemble-size curve computed from chunks of points; see `size_curve_stream`.

    ``update(members, y) -> self`` adds a chunk, ``merge(other) -> self`` adds the points
    of another stream set up alike (same loss, sizes, orders and seed), ``result()`` gives
    the `SizeCurve`; streams pickle (the core state travels as bytes).
    """

    def __init__(self, loss=None, sizes=None, orders=20, rng=0, n_jobs=None):
        self.loss = loss_option(loss)
        self._sizes_arg = sizes
        self.orders = positive_int(orders, "orders")
        self.seed = rng_seed(rng)
        self._n_jobs = n_jobs_value(n_jobs)
        self._core = None
        self._n_members = None

    _callback = None

    @all_or_nothing
    def update(self, members, y) -> SizeCurveStream:
        """Add the predictions of every member at a chunk of points and their targets."""
        kind, members = members_array(members)
        if self._core is None:
            self.loss = loss_for(self.loss, kind)
            self._n_members = members.shape[0]
            sizes = _sizes_iv(self._sizes_arg, self._n_members)
            self._core = _core.SizeCurveAccumulator(self.loss, self._n_members, sizes,
                                                    self.orders, self.seed)
        else:
            loss_for(self.loss, kind)
            if members.shape[0] != self._n_members:
                raise ValueError(f"`members`: this chunk has {members.shape[0]} members but "
                                 f"earlier chunks had {self._n_members}")
        y = targets(y, kind, members.shape[1])
        n_classes = n_classes_of(None, members, y, blame_labels=True) if kind == "labels" else None
        if kind == "probabilities" and y.max() >= members.shape[2]:
            raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
        self._core.update(members, y, n_classes, self._n_jobs, progress=self._callback)
        return self

    def merge(self, other: SizeCurveStream) -> SizeCurveStream:
        """Add the points of ``other`` (same loss, sizes, orders and seed) after this
        stream's points."""
        if not isinstance(other, SizeCurveStream):
            raise TypeError(f"`other`: expected a SizeCurveStream, got {type(other).__name__}")
        if (other.orders, other.seed) != (self.orders, self.seed):
            raise ValueError("`other`: was set up with other orders or another seed")
        if other._core is None:
            return self
        if self._core is None:
            if self.loss is not None and self.loss != other.loss:
                raise ValueError(f"`other`: has loss {other.loss!r} but this stream {self.loss!r}")
            self.loss, self._n_members = other.loss, other._n_members
            self._core = _core.SizeCurveAccumulator.from_bytes(other._core.to_bytes())
        else:
            self._core.merge(other._core)
        return self

    def result(self) -> SizeCurve:
        """The curve over all points added so far."""
        if self._core is None:
            raise ValueError("`members`: no points were added (call update first)")
        return _size_curve(self.loss, self.orders, self.seed, self._core.orders(),
                           self._core.result())


def size_curve_stream(*, loss=None, sizes=None, orders=20, rng=0, n_jobs=None) -> SizeCurveStream:
    """Start an ensemble-size curve fed by chunks of points.

    ``.update(members_chunk, y_chunk)`` for consecutive chunks, then ``.result()``; the
    result equals `size_curve` on all points up to rounding. The member orders are drawn
    from the seed at the first chunk, when the number of members is known. Streams over
    different points, set up alike, combine with ``.merge(other)``; they pickle.

    Parameters
    ----------
    loss, sizes, orders, rng, n_jobs
        As in `size_curve`.

    Returns
    -------
    SizeCurveStream

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> members, y = rng.normal(size=(30, 900)), np.zeros(900)
    >>> stream = bagwise.size_curve_stream(rng=3)
    >>> for start in range(0, 900, 400):
    ...     _ = stream.update(members[:, start:start + 400], y[start:start + 400])
    >>> whole = bagwise.size_curve(members, y, rng=3)
    >>> bool(np.allclose(stream.result().curve, whole.curve, rtol=1e-12))
    True
    """
    return SizeCurveStream(loss=loss, sizes=sizes, orders=orders, rng=rng, n_jobs=n_jobs)


def size_curve(members, y, *, sizes=None, orders=20, rng=0, loss=None, n_jobs=None,
               progress=False) -> SizeCurve:
    """Loss of the ensemble of the first k members, for k on a grid, over random orders.

    For each of ``orders`` random member orders (order ``o`` uses member stream ``o`` drawn
    from the seed and a Fisher-Yates shuffle), the ensemble of the first ``k`` members is
    scored: squared loss of the mean (values), Brier score of the soft vote
    (probabilities), or error rate of the majority vote (labels; ties to the lowest class).
    The curve is the mean over orders, with its standard error across orders.

    For squared-type losses the finite-ensemble law is exact. Members fit on independent
    resamples are, given the data, i.i.d. draws at a point with mean ``mu`` and variance
    ``sigma**2``; for ``k`` of them ``E[(mean_k - y)**2] = (mu - y)**2 + sigma**2 / k``, so
    ``E[loss(k)] = loss(inf) + W / k`` with ``W`` (``mean_within``) the mean over points of
    the across-member variance. Estimated from the ``M`` members at hand (``W`` with ddof 1):
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
        Ensemble sizes in ``1..n_members`` (default: about 20 roughly log-spaced sizes,
        always including 1 and ``n_members``).
    orders : int
        Number of random member orders (default 20).
    rng : int, numpy.random.Generator or None
        Seed of the orders: an int seeds the member streams directly; a Generator gives
        ``int(rng.integers(2**63))``; ``None`` a fresh seed. The integer used is kept in
        ``SizeCurve.seed``.
    loss : {"squared_error", "brier_score", "error_rate"}, optional
        Must fit the members' kind.
    n_jobs : int, optional
        Worker threads; results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    SizeCurve

    Notes
    -----
    Lazy inputs: ``members`` and ``y`` may be dask or zarr arrays chunked along the points
    (``members`` also a dask DataFrame, one row per point and one column per member; ``y`` a
    dask Series). Each point chunk becomes a `SizeCurveStream` on the worker holding it (the
    member orders are drawn there from the one seed, so every chunk scores the same orders),
    and the streams merge pairwise in point order on the workers. What travels per chunk:
    its state, O(orders x sizes) loss sums plus O(orders x members) member orders,
    independent of the points; ``sizes`` goes once to each worker. The client holds the
    finished curve only. Equal to the in-memory result to about 1e-15 relative.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(2)
    >>> y = np.zeros(2000)
    >>> members = 0.5 + rng.normal(size=(40, 2000))     # bias 0.5, member variance 1
    >>> curve = bagwise.size_curve(members, y, orders=10)
    >>> round(curve.mean_within, 1), round(curve.infinite_loss, 2)
    (1.0, 0.25)
    >>> curve.members_needed(0.1)                        # W/k <= 10% of loss(inf)
    40
    """
    if _chunked.any_lazy(members, y):
        return _lazy_size_curve(members, y, sizes, orders, rng, loss, n_jobs, progress)
    stream = size_curve_stream(loss=loss, sizes=sizes, orders=orders, rng=rng, n_jobs=n_jobs)
    with progress_callback(progress, "size curve", "point") as callback, reporting(stream, callback):
        return stream.update(members, y).result()


def _size_curve_update(stream, members, y):
    return stream.update(members, y)


def _lazy_size_curve(members, y, sizes, orders, rng, loss, n_jobs, progress=False) -> SizeCurve:
    """`size_curve` over the point chunks of lazy arrays: one `SizeCurveStream` per chunk
    (each draws the same member orders from the one seed), merged pairwise in point order.
    The seed is fixed here, so a Generator or None is drawn from once."""
    seed = rng_seed(rng)
    loss, orders, n_jobs = loss_option(loss), positive_int(orders, "orders"), n_jobs_value(n_jobs)
    sizes = None if sizes is None else np.asarray(sizes)
    members = _chunked.point_major(members, "members")
    stream = _chunked.reduce_over(
        [(members, "members", 1), (y, "y", 0)],
        lambda k: SizeCurveStream(loss=loss, sizes=k, orders=orders, rng=seed, n_jobs=n_jobs),
        _size_curve_update, whole=[sizes], progress=progress)
    return stream.result()
