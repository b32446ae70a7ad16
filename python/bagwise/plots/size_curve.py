"""Where more members stop paying: the ensemble-size curve with its finite-ensemble law."""

from __future__ import annotations

import math
import numbers
import warnings

import numpy as np

from ..out_of_bag import OutOfBag
from ..size_curve import SizeCurve
from . import _common as c

__all__ = ["plot_size_curve"]

#: The x axis is stretched to show members_needed up to this many times the members at hand.
_MAX_EXTRAPOLATION = 100
_LAW_POINTS = 200


def _size_curve_iv(size_curve, out_of_bag, tolerance, unit):
    if not isinstance(size_curve, SizeCurve):
        raise TypeError("`size_curve`: expected the SizeCurve returned by bagwise.size_curve, got "
                        f"{type(size_curve).__name__}")
    if out_of_bag is not None:
        if not isinstance(out_of_bag, OutOfBag):
            raise TypeError("`out_of_bag`: expected the OutOfBag returned by bagwise.out_of_bag, "
                            f"got {type(out_of_bag).__name__}")
        metric = size_curve.loss  # both use the glossary's loss spellings
        if metric not in out_of_bag._curves:
            raise ValueError(f"`out_of_bag`: is a {out_of_bag.task} result, which has no {metric} "
                             f"to compare with a {size_curve.loss} size curve")
    if isinstance(tolerance, bool) or not isinstance(tolerance, numbers.Real):
        raise TypeError(f"`tolerance`: expected a number, got {type(tolerance).__name__}")
    if not (0 < tolerance and math.isfinite(tolerance)):
        raise ValueError(f"`tolerance`: must be positive and finite, got {tolerance}")
    return float(tolerance), c.unit_iv(unit)


def _needed(size_curve, tolerance):
    """members_needed, or None where the law gives no answer (the plot then leaves it out)."""
    if size_curve.mean_within is None or not math.isfinite(size_curve.mean_within):
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # NaN cases: nothing to mark
        needed = size_curve.members_needed(tolerance)
    return None if isinstance(needed, float) and math.isnan(needed) else int(needed)


def plot_size_curve(size_curve, *, out_of_bag=None, ax=None, tolerance=0.01, unit=None):
    """The error of the first k members against k, with the law it follows.

    Draws, on a logarithmic axis of ensemble sizes:

    - the size curve, taken to be measured on held-out (test) points: the error of the
      first ``k`` members averaged over random member orders (circles), with a band of
      ± one standard error across orders (left out for a single order);
    - for squared and Brier losses, the finite-ensemble law ``infinite_loss + W/k``
      (a smooth line; see `bagwise.size_curve`), the infinite-ensemble error
      ``infinite_loss`` as a horizontal line, and ``members_needed(tolerance)`` as a vertical
      line: the size whose expected excess error ``W/k`` is at most ``tolerance`` of the
      infinite-ensemble error. The axis is stretched to show it when it lies beyond the
      members at hand (up to 100 times as many; the law is then an extrapolation);
    - with ``out_of_bag``, the out-of-bag error of the first ``k`` members (squares), so the
      error on the test points and on the training points' left-out predictions read
      together.

    Parameters
    ----------
    size_curve : SizeCurve
        From `bagwise.size_curve`.
    out_of_bag : OutOfBag, optional
        From `bagwise.out_of_bag` on the same ensemble; its curve of the matching metric
        (squared error, Brier score or error rate) is drawn.
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).
    tolerance : float
        Relative tolerance of the members-needed marker (default 1%).
    unit : str, optional
        Unit of the targets, e.g. ``"kg"``; a squared error is labelled in its square.

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_size_curve
    >>> rng = np.random.default_rng(0)
    >>> members, y = 0.5 + rng.normal(size=(40, 500)), np.zeros(500)
    >>> curve = bagwise.size_curve(members, y, orders=10)
    >>> ax = plot_size_curve(curve, unit="kg")
    >>> ax.get_xlabel(), ax.get_ylabel()
    ('members in the ensemble', 'mean squared error (kg²)')
    >>> plt.close(ax.figure)
    """
    tolerance, unit = _size_curve_iv(size_curve, out_of_bag, tolerance, unit)
    ax = c.axes(ax)
    sizes = size_curve.sizes.astype(np.float64)
    curve, error = size_curve.curve, size_curve.std_error
    x_high = float(sizes.max())
    if out_of_bag is not None:
        x_high = max(x_high, float(out_of_bag.sizes.max()))
    needed = _needed(size_curve, tolerance)
    if needed is not None and needed <= _MAX_EXTRAPOLATION * size_curve.n_members:
        x_high = max(x_high, needed * 1.25)

    if np.all(np.isfinite(error)):
        ax.fill_between(sizes, curve - error, curve + error, color=c.PALE, linewidth=0,
                        label="± 1 standard error across orders", zorder=1)
    ax.plot(sizes, curve, color=c.INK, linestyle="-", marker="o", markersize=4,
            label=f"test points: first k members ({size_curve.orders} random orders)", zorder=3)

    if size_curve.mean_within is not None and math.isfinite(size_curve.mean_within):
        grid = np.geomspace(1.0, x_high, _LAW_POINTS)
        ax.plot(grid, size_curve.law(grid), color=c.SLATE, linestyle="--", linewidth=1.5,
                label="law: infinite-ensemble error + W/k", zorder=2)
        ax.axhline(size_curve.infinite_loss, color=c.FAINT, linestyle=":", linewidth=1.5,
                   label=f"infinite ensemble: {size_curve.infinite_loss:.4g}", zorder=2)
    if needed is not None:
        shown = needed <= x_high
        share = f"{tolerance * 100:.3g}%"
        text = (f"{needed:,} members come within {share} of it" if shown else
                f"{needed:,} members needed to come within {share} (beyond the axis)")
        if shown:
            ax.axvline(needed, color=c.RUST, linestyle="-.", linewidth=1.5, label=text, zorder=2)
            ax.annotate(f"{needed:,}", xy=(needed, 0.0), xycoords=("data", "axes fraction"),
                        xytext=(3, 4), textcoords="offset points", color=c.RUST,
                        fontsize="small")
        else:
            ax.plot([], [], linestyle="none", label=text)

    if out_of_bag is not None:
        metric = size_curve.loss  # both use the glossary's loss spellings
        ax.plot(out_of_bag.sizes.astype(np.float64), out_of_bag.loss_curve(metric),
                color=c.RUST, linestyle=(0, (1, 1)), marker="s", markersize=4,
                markerfacecolor="white", label="training points: out-of-bag, first k members",
                zorder=3)

    ax.set_xscale("log")
    c.plain_log_ticks(ax.xaxis)
    ax.set_xlim(0.9, x_high * 1.1)
    return c.finish(ax, xlabel="members in the ensemble", ylabel=c.loss_label(size_curve.loss, unit))
