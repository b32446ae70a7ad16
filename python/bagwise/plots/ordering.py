"""Which members are redundant: the loss of the first k members in a chosen order and in
random orders."""

from __future__ import annotations

import math
import warnings

import numpy as np

from .._results import check_tolerance
from ..ordering import MemberOrder
from . import _common as c

__all__ = ["plot_member_order"]


def _within(result, tolerance, curve):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # not estimable: nothing to mark
        found = result.members_within(tolerance, curve)
    return None if isinstance(found, float) and math.isnan(found) else int(found)


def plot_member_order(member_order, *, ax=None, tolerance=0.01, unit=None):
    """The loss of the first k members in the chosen order against a random order.

    Draws, against the ensemble size k:

    - the random order: the mean loss of the first k members over the result's random
      orders (circles);
    - the chosen order, as honest as the result allows: measured on held-out points
      (after `MemberOrder.evaluate`), or cross-fitted (each fold measured with the order
      the other folds chose), solid;
    - the chosen order on the points that chose it (optimistic), dotted, when it is not
      the honest curve;
    - the full ensemble's loss and the band within ``tolerance`` of it, and, for each
      order, the first size inside the band (`MemberOrder.members_within`).

    Parameters
    ----------
    member_order : MemberOrder
        From `bagwise.order_members`, a bag's ``order_members`` or `MemberOrder.evaluate`.
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).
    tolerance : float
        Relative tolerance of the band and the markers (default 1%).
    unit : str, optional
        Unit of the targets, e.g. ``"kg"``; a squared error is labelled in its square.

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_member_order
    >>> rng = np.random.default_rng(0)
    >>> y = rng.normal(size=200)
    >>> members = y + rng.normal(size=(20, 200))
    >>> ax = plot_member_order(bagwise.order_members(members, y))
    >>> ax.get_xlabel()
    'members in the ensemble'
    >>> plt.close(ax.figure)
    """
    if not isinstance(member_order, MemberOrder):
        raise TypeError("`member_order`: expected the MemberOrder returned by "
                        f"bagwise.order_members, got {type(member_order).__name__}")
    tolerance = check_tolerance(tolerance)
    unit = c.unit_iv(unit)
    ax = c.axes(ax)
    sizes = member_order.sizes.astype(np.float64)
    full = member_order.ensemble_loss
    if math.isfinite(full):
        ax.axhspan(min(full, full * (1 + tolerance)), max(full, full * (1 + tolerance)),
                   color=c.PALE, linewidth=0, zorder=1,
                   label=f"within {tolerance * 100:.3g}% of all {member_order.n_members} members")
        ax.axhline(full, color=c.FAINT, linestyle=":", linewidth=1.2, zorder=2,
                   label=f"all members: {full:.4g}")
    ax.plot(sizes, member_order.random_curve, color=c.SLATE, linestyle="-", marker="o",
            markersize=3, label=f"random order (mean of {member_order.orders})", zorder=3)
    honest = member_order.honest_curve
    if member_order.held_out:
        label = f"{member_order.method.replace('_', '-')} order, on held-out points"
    else:
        label = (f"{member_order.method.replace('_', '-')} order, cross-fitted "
                 f"({member_order.folds} folds)")
    if not np.all(np.isnan(honest)):
        ax.plot(sizes, honest, color=c.RUST, linestyle="-", linewidth=2, label=label, zorder=4)
    if not member_order.held_out:
        ax.plot(sizes, member_order.curve, color=c.RUST, linestyle=":", linewidth=1.5,
                label="the same order on the points that chose it (optimistic)", zorder=4)
    for curve, color in (("honest", c.RUST), ("random", c.SLATE)):
        k = _within(member_order, tolerance, curve)
        if k is not None:
            ax.axvline(k, color=color, linestyle="-.", linewidth=1, zorder=2)
            ax.annotate(f"{k:,}", xy=(k, 0.0), xycoords=("data", "axes fraction"),
                        xytext=(3, 4), textcoords="offset points", color=color,
                        fontsize="small")
    ax.set_xscale("log")
    c.plain_log_ticks(ax.xaxis)
    ax.set_xlim(0.9, sizes.max() * 1.1)
    return c.finish(ax, xlabel="members in the ensemble",
                    ylabel=c.loss_label(member_order.loss, unit))
