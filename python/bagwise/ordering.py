"""Which members are redundant: ordered aggregation (member orders and their loss curves).

`order_members` orders the members of an ensemble so that the first ``k`` of them make a good
subensemble, and gives the loss of the first ``k`` members in that order next to the loss in
random orders. Bagging's members are exchangeable, so in a random order the loss falls slowly
towards the full ensemble's; in a good order it falls fast, often below the full ensemble's,
and a fraction of the members does as well as all of them (Martínez-Muñoz, Hernández-Lobato
& Suárez 2009, IEEE TPAMI 31(2): subensembles of about 15-30% of the members matched or beat
full bagging on most of their classification sets).

The methods, each defined in the core (``src/ordering.rs``) with its source:

- ``"reduce_error"``: greedy forward selection on the subensemble's loss (Margineantu &
  Dietterich 1997, "Pruning adaptive boosting", ICML); regression and classification.
- ``"complementarity"``: greedy; the member right on most points where the subensemble is
  wrong (Martínez-Muñoz & Suárez 2004, "Aggregation ordering in bagging").
- ``"margin_distance"``: greedy; the member that brings the subensemble's mean signature of
  right (+1) and wrong (-1) votes closest to a point of small equal margins
  ``target_margin`` (Martínez-Muñoz, Hernández-Lobato & Suárez 2009, margin distance
  minimisation).
- ``"orientation"``: members sorted by the angle between their signature and the
  ensemble's signature's orthogonal complement of the diagonal (Martínez-Muñoz & Suárez
  2006, "Pruning in ordered bagging ensembles", ICML); one pass, no greedy loop.
- ``"residual_correlation"`` (regression): greedy; the member whose residuals correlate
  least with the subensemble's mean residual.

A loss measured on the points that chose the order is optimistic: the order was fitted to
them. `MemberOrder.honest_curve` is the loss of the same procedure on points that did not
choose it (cross-fitting over ``folds``); `MemberOrder.evaluate` measures an order on
other points (e.g. a test set), and `BagRegressor.prune` / `BagClassifier.prune` keep the
first members of an order as a smaller fitted bag.
"""

from __future__ import annotations

import dataclasses
import math
import numbers

import numpy as np

from . import _chunked, _core
from ._display import fmt as _fmt
from ._members import in_bag_counts, members_array, n_classes_of, targets
from ._progress import progress_callback, stages
from ._results import Result, check_tolerance
from ._validation import n_jobs_value, positive_int, rng_seed
from ._warnings import warn

__all__ = ["METHODS", "TARGET_MARGIN", "MemberOrder", "order_members"]

#: The methods each task takes; the first is the default.
METHODS = {
    "regression": ("reduce_error", "residual_correlation"),
    "classification": ("reduce_error", "complementarity", "margin_distance", "orientation"),
}

#: The equal margin ``p`` of the reference point ``p·(1, ..., 1)`` of margin distance
#: minimisation (Martínez-Muñoz, Hernández-Lobato & Suárez 2009 use a small value such as
#: 0.075; from memory).
TARGET_MARGIN = 0.075

_SOURCES = {
    "reduce_error": "reduce-error (Margineantu & Dietterich 1997)",
    "complementarity": "complementarity (Martínez-Muñoz & Suárez 2004)",
    "margin_distance": "margin distance (Martínez-Muñoz, Hernández-Lobato & Suárez 2009)",
    "orientation": "orientation (Martínez-Muñoz & Suárez 2006)",
    "residual_correlation": "residual correlation",
}

_LOSS_WORDS = {"squared_error": "squared error", "error_rate": "error rate"}

#: Most entries of the random orders (and of their curves) kept: 2^26, 512 MiB of int64.
_LARGEST_ORDERS = 1 << 26

#: Curves `MemberOrder.members_within` reads.
CURVES = ("honest", "selected", "random")


def _task(kind: str) -> str:
    return "regression" if kind == "values" else "classification"


def _method_iv(method, kind):
    task = _task(kind)
    allowed = METHODS[task]
    if method is None:
        return allowed[0]
    if not isinstance(method, str):
        raise TypeError(f"`method`: expected a string, got {type(method).__name__}")
    if method not in allowed:
        raise ValueError(f"`method`: for {task} expected one of {allowed}, got {method!r}")
    return method


def _folds_iv(folds, n_points):
    if folds is None:
        return None
    folds = positive_int(folds, "folds")
    if folds < 2:
        raise ValueError(f"`folds`: cross-fitting needs at least 2 folds (or None), got {folds}")
    if folds > n_points:
        raise ValueError(f"`folds`: {folds} folds but only {n_points} points")
    return folds


def _target_margin_iv(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"`target_margin`: expected a number, got {type(value).__name__}")
    value = float(value)
    if not (0 < value <= 1):
        raise ValueError(f"`target_margin`: must lie in (0, 1], got {value!r}")
    return value


def _order_iv(members, y, method, counts, n_classes, folds, orders, target_margin):
    if _chunked.any_lazy(members, y, counts):
        # An order reads every point at every step: the arrays are brought here first.
        members, y, counts = (None if a is None else np.asarray(a) for a in (members, y, counts))
    kind, members = members_array(members, min_members=1, purpose="member ordering")
    n_members, n_points = members.shape[:2]
    y = targets(y, kind, n_points)
    if kind == "values":
        if n_classes is not None:
            raise ValueError("`n_classes`: only for class predictions")
    else:
        implied = members.shape[2] if kind == "probabilities" else None
        n_classes = n_classes_of(n_classes, members if implied is None else None, y,
                                 implied=implied)
    method = _method_iv(method, kind)
    if counts is not None:
        counts = in_bag_counts(counts, n_members=n_members, n_rows=n_points,
                               members_from="members", rows_from="members")
    folds = _folds_iv(folds, n_points)
    orders = positive_int(orders, "orders")
    if orders * n_members > _LARGEST_ORDERS:
        raise MemoryError(f"`orders`: {orders:,} random orders of {n_members:,} members exceed "
                          f"{_LARGEST_ORDERS:,} entries; a few dozen orders give a smooth curve")
    target_margin = _target_margin_iv(target_margin)
    return kind, members, y, method, counts, n_classes, folds, orders, target_margin


@dataclasses.dataclass(frozen=True)
class _Data:
    """The checked arrays an order is computed from (one place for the core's arguments)."""

    kind: str
    members: np.ndarray
    y: np.ndarray
    counts: np.ndarray | None
    n_classes: int | None
    n_jobs: int | None

    def order(self, method, target_margin, points=None, progress=None):
        return _core.order_members(self.members, self.y, self.counts, points, method=method,
                                   n_classes=self.n_classes, target_margin=target_margin,
                                   n_jobs=self.n_jobs, progress=progress)

    def curves(self, orders, points=None, progress=None):
        return _core.order_curves(self.members, self.y, np.ascontiguousarray(orders, np.int64),
                                  self.counts, points, n_classes=self.n_classes,
                                  n_jobs=self.n_jobs, progress=progress)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class MemberOrder(Result):
    """An order of the members and the loss of its first ``k`` members; see `order_members`.

    Attributes
    ----------
    method : str
        The ordering method (`METHODS`).
    loss : str
        ``"squared_error"`` (regression) or ``"error_rate"`` (classification).
    n_members, n_points : int
        Members ordered; points the curves are measured on.
    selected_on : str
        What chose the order: ``"out_of_bag"`` (each member's out-of-bag predictions of
        the training rows) or ``"points"`` (member predictions at the points given, e.g. a
        validation set).
    held_out : bool
        Whether ``curve`` is measured on points that did not choose the order (after
        `evaluate`); then ``honest_curve`` is ``curve``.
    folds : int or None
        Folds of the cross-fitting behind ``honest_curve`` (None: not computed).
    orders : int
        Random member orders behind ``random_curve``.
    seed : int
        The integer seed of the folds and the random orders (from ``rng``).
    target_margin : float
        The equal margin of margin distance minimisation's reference point (used by that
        method only).
    order : ndarray of int64, shape (n_members,)
        Member indices, the member to add first first.
    sizes : ndarray of int64
        Ensemble sizes ``1 .. n_members``.
    curve : ndarray of float64
        Loss of the first ``k`` members of ``order``. Measured on the points that chose
        the order, so optimistic (``held_out`` False), or on held-out points.
    member_orders : ndarray of int64, shape (orders, n_members)
        The random orders.
    random_curve : ndarray of float64
        Mean over ``member_orders`` of the loss of their first ``k`` members.
    random_curves : ndarray of float64, shape (orders, n_members)
        Each random order's own curve (``members_within(curve="random")`` reads them one
        by one: a mean of curves is smoother than any one order).
    honest_curve : ndarray of float64
        The loss at each size of a subensemble chosen by the same method without the
        points it is measured on: the points are split at random into ``folds`` folds, each
        fold's loss is that of the order chosen on the other folds, and the folds' curves
        are averaged weighted by their points. All NaN when ``folds`` is None.
    ensemble_loss : float
        Loss of all members (the curves' last value).

    Notes
    -----
    Losses: the squared error of the members' mean, or the error rate of the mean class
    probability (of the vote fractions for labels), ties to the lowest class index, as in
    `bagwise.out_of_bag`. Out of bag, the loss at ``k`` is the mean over the points with an
    out-of-bag member among the first ``k`` (NaN if none), as `bagwise.out_of_bag`'s curve.
    """

    _title = "MemberOrder"

    method: str
    loss: str
    n_members: int
    n_points: int
    selected_on: str
    held_out: bool
    folds: int | None
    orders: int
    seed: int
    target_margin: float
    order: np.ndarray
    sizes: np.ndarray
    curve: np.ndarray
    member_orders: np.ndarray
    random_curve: np.ndarray
    random_curves: np.ndarray
    honest_curve: np.ndarray
    ensemble_loss: float

    def _pick(self, curve):
        if not isinstance(curve, str):
            raise TypeError(f"`curve`: expected one of {CURVES}, got {type(curve).__name__}")
        if curve not in CURVES:
            raise ValueError(f"`curve`: expected one of {CURVES}, got {curve!r}")
        return {"honest": self.honest_curve, "selected": self.curve,
                "random": self.random_curve}[curve]

    def members_within(self, tolerance: float = 0.01, curve: str = "honest") -> int | float:
        """The smallest size ``k`` from which the loss on ``curve`` stays within
        ``tolerance`` (relative) of the full ensemble's: ``curve[j - 1] <= (1 + tolerance) ·
        ensemble_loss`` for every ``j >= k``. A curve that dips inside by chance at a small
        size (out of bag, the first members read few points) and leaves again does not
        count; a NaN loss (no point read) counts as outside.

        ``curve``: ``"honest"`` (default: the cross-fitted curve, or ``curve`` itself when
        ``held_out``), ``"selected"`` (the order on the points that chose it: optimistic)
        or ``"random"``: the median over the random orders of each one's size (rounded
        up), since one chosen order is compared with one order at a time, not with their
        smoother mean. At ``k = n_members`` every curve is the full ensemble's loss, so
        the answer is at most ``n_members``; NaN with one `BagwiseWarning` when the curve
        was not computed (``folds=None``) or the full ensemble's loss is NaN.
        """
        tolerance = check_tolerance(tolerance)
        values = self._pick(curve)
        if not math.isfinite(self.ensemble_loss) or np.all(np.isnan(values)):
            why = ("no honest curve (folds=None)" if curve == "honest" and not self.held_out
                   else "the full ensemble's loss is not defined on these points")
            warn(f"members_within: not estimable: {why}")
            return math.nan
        # A relative slack of 1e-12: the curves sum the same members in other orders.
        bound = (1 + tolerance) * self.ensemble_loss * (1 + 1e-12)

        def stays(values):
            outside = np.flatnonzero(~(values <= bound))
            return min(int(outside[-1]) + 2, self.n_members) if outside.size else 1

        if curve == "random":
            return int(math.ceil(np.median([stays(c) for c in self.random_curves])))
        return stays(values)

    def evaluate(self, members, y, *, counts=None, n_classes=None, n_jobs=None,
                 progress=False) -> MemberOrder:
        """The same order and random orders measured on other points (e.g. a test set the
        order never saw): a `MemberOrder` with ``held_out`` True whose ``curve``,
        ``random_curve`` and ``ensemble_loss`` are those points' and whose
        ``honest_curve`` is ``curve``.

        ``members`` (and ``counts``, for out-of-bag predictions) as in `order_members`,
        with the same members in the same positions.
        """
        kind, members, y, _, counts, n_classes, _, _, _ = _order_iv(
            members, y, None, counts, n_classes, None, 1, TARGET_MARGIN)
        if members.shape[0] != self.n_members:
            raise ValueError(f"`members`: has {members.shape[0]} members but the order has "
                             f"{self.n_members}")
        if ("regression" if kind == "values" else "classification") != (
                "regression" if self.loss == "squared_error" else "classification"):
            raise TypeError(f"`members`: the order was chosen on {_task_of(self.loss)} "
                            f"members, got {kind}")
        data = _Data(kind, members, y, counts, n_classes, n_jobs_value(n_jobs))
        with progress_callback(progress, "measuring orders", "order") as callback:
            curves = data.curves(np.vstack([self.order[None, :], self.member_orders]),
                                 progress=callback)
        _warn_uncovered(curves)
        curve = curves[0]
        return dataclasses.replace(
            self, n_points=members.shape[1], held_out=True, curve=curve,
            random_curve=curves[1:].mean(axis=0), random_curves=curves[1:].copy(),
            honest_curve=curve.copy(),
            ensemble_loss=float(curve[-1]))

    def to_frame(self):
        """One row per size: ``size``, ``curve``, ``honest_curve``, ``random_curve``."""
        import pandas as pd

        return pd.DataFrame({"size": self.sizes, "curve": self.curve,
                             "honest_curve": self.honest_curve,
                             "random_curve": self.random_curve})

    def summary(self) -> dict:
        """Key numbers, JSON-ready (glossary keys)."""
        from .sections._base import number, quiet

        def within(curve):
            return number(quiet(lambda: self.members_within(0.01, curve)))

        best = _best(self.honest_curve)
        return {"method": self.method, "loss": self.loss, "n_members": self.n_members,
                "ensemble_loss": number(self.ensemble_loss),
                "members_within": within("honest"), "members_within_random": within("random"),
                "best_size": None if best is None else best[0] + 1,
                "best_loss": None if best is None else number(best[1])}

    def _where(self) -> str:
        if self.held_out:
            return "points that did not choose the order"
        if self.selected_on == "out_of_bag":
            return "the out-of-bag predictions that chose it (optimistic)"
        return "the points that chose it (optimistic)"

    def _rows(self):
        from .sections._base import quiet

        loss = _LOSS_WORDS.get(self.loss, self.loss)
        rows = [("method", _SOURCES.get(self.method, self.method)),
                ("chosen on", "out-of-bag predictions of the training rows"
                 if self.selected_on == "out_of_bag" else "the member predictions given"),
                ("members", f"{self.n_members}"),
                (f"full ensemble's {loss}", _fmt(self.ensemble_loss))]
        honest = quiet(lambda: self.members_within(0.01, "honest"))
        random = quiet(lambda: self.members_within(0.01, "random"))
        basis = "held-out points" if self.held_out else f"cross-fitted, {self.folds} folds"
        rows.append(("within 1% of it, this order",
                     "not estimable (no cross-fitting: folds=None)"
                     if isinstance(honest, float) and math.isnan(honest)
                     else f"{_members(honest)} ({basis})"))
        if not (isinstance(random, float) and math.isnan(random)):
            rows.append(("within 1% of it, random order",
                         f"{_members(random)} (median of {self.orders} orders)"))
        best = _best(self.honest_curve)
        if best is not None:
            rows.append((f"lowest {loss}", f"{_fmt(best[1])} with {_members(best[0] + 1)} ({basis})"))
        return rows

    def _reading(self):
        from .sections._base import quiet

        honest = quiet(lambda: self.members_within(0.01, "honest"))
        random = quiet(lambda: self.members_within(0.01, "random"))
        if isinstance(honest, float) and math.isnan(honest):
            return (f"curve is measured on {self._where()}; pass folds to get an honest "
                    "estimate")
        return (f"from the first {honest} of {self.n_members} members on, this order stays "
                f"within 1% of the full ensemble's {_LOSS_WORDS.get(self.loss, self.loss)}; "
                f"a random order from {random} on")


def _members(count: int) -> str:
    return f"{count} member" if count == 1 else f"{count} members"


def _task_of(loss: str) -> str:
    return "value" if loss == "squared_error" else "class"


def _best(curve: np.ndarray):
    """(index, value) of the lowest finite value of ``curve``, or None."""
    if curve.size == 0 or np.all(np.isnan(curve)):
        return None
    index = int(np.nanargmin(curve))
    return index, float(curve[index])


def _warn_uncovered(*curves: np.ndarray) -> None:
    """One warning when a curve is NaN somewhere: out of bag, the first k members of an order
    may predict at no point."""
    columns = [np.isnan(np.atleast_2d(c)).any(axis=0) for c in curves]
    empty = [int(np.flatnonzero(nan)[-1]) + 1 for nan in columns if nan.any()]
    if empty:
        warn(f"`counts`: the first k members of some orders have no out-of-bag prediction at "
             f"any point, up to k = {max(empty)}; the curves are NaN there (more points or "
             "members)")


def _covered(counts: np.ndarray | None, order: np.ndarray, held: np.ndarray) -> np.ndarray:
    """How many ``held`` points the first k members of ``order`` predict, k = 1..M: all of
    them on given points, out of bag those where one of the k has count zero."""
    if counts is None:
        return np.full(len(order), float(held.sum()))
    columns = np.flatnonzero(held)
    reached = np.zeros(len(columns), dtype=bool)
    covered = np.empty(len(order))
    for k, member in enumerate(order):  # one pass over the counts, O(points) memory
        reached |= counts[member, columns] == 0
        covered[k] = reached.sum()
    return covered


def _fold_masks(n_points: int, folds: int, generator: np.random.Generator):
    """Balanced random folds: point ``perm[i]`` goes to fold ``i % folds``."""
    fold = np.empty(n_points, dtype=np.int64)
    fold[generator.permutation(n_points)] = np.arange(n_points) % folds
    return [fold == f for f in range(folds)]


def order_members(members, y, *, method=None, counts=None, n_classes=None, folds=2,
                  orders=10, target_margin=TARGET_MARGIN, rng=0, n_jobs=None,
                  progress=False) -> MemberOrder:
    """Order the members so that the first ``k`` make a good subensemble (ordered
    aggregation), with the loss of the first ``k`` against random orders.

    Parameters
    ----------
    members : array-like
        ``(n_members, n_points)`` values (regression), ``(n_members, n_points, n_classes)``
        class probabilities, or integer ``(n_members, n_points)`` class labels: the members'
        predictions at the points that choose the order (a validation set), or, with
        ``counts``, their out-of-bag predictions of the training rows (in-bag entries are
        ignored and may be NaN).
    y : array-like of shape (n_points,)
        Targets: values, or class indices ``0..n_classes-1``.
    method : str, optional
        ``"reduce_error"`` (default), ``"residual_correlation"`` (regression),
        ``"complementarity"``, ``"margin_distance"``, ``"orientation"`` (classification);
        see the module documentation for their sources.
    counts : array-like of shape (n_members, n_points), optional
        In-bag counts: member m is read at point i only where ``counts[m, i] == 0``. While
        choosing (reduce-error), a point no chosen member has out of bag yet counts at the
        mean loss of the members that have it out of bag (the share of them wrong, or their
        mean squared error), so covering it gains only when a member beats a typical one
        there and members fit on fewer distinct rows are not favoured for their larger
        out-of-bag sets. Complementarity counts such a point as wrong.
    n_classes : int, optional
        Number of classes of integer labels (default: the largest label + 1).
    folds : int or None
        Folds of the cross-fitting behind ``honest_curve`` (default 2; None skips it). Each
        fold's order is chosen on the other folds, so the curve costs ``folds`` more orders.
    orders : int
        Random member orders averaged in ``random_curve`` (default 10).
    target_margin : float
        The equal margin ``p`` of margin distance minimisation's reference point, in (0, 1]
        (default 0.075).
    rng : int, numpy.random.Generator or None
        Seed of the folds and the random orders (default 0).
    n_jobs : int, optional
        Worker threads (default: all cores); results do not depend on it.
    progress : bool or callable
        ``True`` for a tqdm bar, or a ``callback(done, total)``.

    Returns
    -------
    MemberOrder

    Notes
    -----
    Cost: the greedy methods score every remaining member at every step, each score
    updated from the subensemble's running sums rather than recomputed (regression on
    given points from the members' residual Gram matrix; classification error only where
    one member can change a point's vote), so an order costs about ``n_members / 2``
    passes over the predictions at worst; ``"orientation"`` costs one. Lazy (dask or
    zarr) inputs are brought into memory first: every step reads every point.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> y = rng.normal(size=300)
    >>> members = y + rng.normal(size=(30, 1)) * 0.5 + rng.normal(size=(30, 300))
    >>> result = bagwise.order_members(members, y)
    >>> result.order.shape, bool(result.curve[-1] == result.ensemble_loss)
    ((30,), True)
    """
    (kind, members, y, method, counts, n_classes, folds, orders,
     target_margin) = _order_iv(members, y, method, counts, n_classes, folds, orders,
                                target_margin)
    seed = rng_seed(rng)
    generator = np.random.default_rng(seed)
    n_members, n_points = members.shape[:2]
    data = _Data(kind, members, y, counts, n_classes, n_jobs_value(n_jobs))
    member_orders = np.stack([generator.permutation(n_members) for _ in range(orders)])
    masks = _fold_masks(n_points, folds, generator) if folds else []
    with progress_callback(progress, "ordering members", "step") as callback:
        steps = stages(callback, 2 + 2 * len(masks))
        order = data.order(method, target_margin, progress=steps[0])
        curves = data.curves(np.vstack([order[None, :], member_orders]), progress=steps[1])
        honest = np.full(n_members, np.nan)
        if masks:
            total = np.zeros(n_members)
            weight = np.zeros(n_members)
            for f, held in enumerate(masks):
                chosen = data.order(method, target_margin, points=~held,
                                    progress=steps[2 + 2 * f])
                fold_curve = data.curves(chosen[None, :], points=held,
                                         progress=steps[3 + 2 * f])[0]
                # each fold's curve is a mean over the points it covers at size k
                covered = _covered(counts, chosen, held)
                total += np.where(covered > 0, fold_curve, 0.0) * covered
                weight += covered
            with np.errstate(invalid="ignore", divide="ignore"):
                honest = np.where(weight > 0, total / weight, np.nan)
    _warn_uncovered(curves, *([honest] if masks else []))
    curve = curves[0]
    return MemberOrder(
        method=method, loss="squared_error" if kind == "values" else "error_rate",
        n_members=n_members, n_points=n_points,
        selected_on="out_of_bag" if counts is not None else "points", held_out=False,
        folds=folds, orders=orders, seed=seed, target_margin=target_margin,
        order=np.asarray(order, dtype=np.int64), sizes=np.arange(1, n_members + 1),
        curve=curve, member_orders=member_orders, random_curve=curves[1:].mean(axis=0),
        random_curves=curves[1:],
        honest_curve=honest, ensemble_loss=float(curve[-1]))
