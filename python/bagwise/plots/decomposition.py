"""What averaging removed: the ambiguity decomposition as bars and point by point."""

from __future__ import annotations

import math

import numpy as np

from ..decomposition import Decomposition
from . import _common as c

__all__ = ["plot_ambiguity_by_point", "plot_decomposition"]


def _decomposition_iv(decomposition, unit):
    if not isinstance(decomposition, Decomposition):
        raise TypeError("`decomposition`: expected the Decomposition returned by "
                        f"bagwise.decompose, got {type(decomposition).__name__}")
    return c.unit_iv(unit)


def plot_decomposition(decomposition, *, ax=None, unit=None):
    """Mean member loss, ambiguity and ensemble loss as two bars of equal height.

    For squared and Brier losses the left bar is the mean loss of one member; the right bar
    stacks the ensemble's loss (bottom) and the ambiguity (top, hatched), which add up to
    the same height exactly (Krogh & Vedelsby 1995): the hatched part is what averaging
    removed. For error rates, where no such identity holds, the two bars are the mean
    member error rate and the majority-vote error rate, and the gap between them (the vote
    gain, which can be negative) is written above them.

    Parameters
    ----------
    decomposition : Decomposition
        From `bagwise.decompose`.
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).
    unit : str, optional
        Unit of the targets (squared loss), e.g. ``"kg"``.

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_decomposition
    >>> rng = np.random.default_rng(1)
    >>> y = rng.normal(size=300)
    >>> d = bagwise.decompose(y + rng.normal(size=(20, 300)), y)
    >>> ax = plot_decomposition(d)
    >>> [round(p.get_height(), 3) for p in ax.patches] == [round(v, 3) for v in
    ...     (d.member_loss, d.ensemble_loss, d.ambiguity)]
    True
    >>> plt.close(ax.figure)
    """
    unit = _decomposition_iv(decomposition, unit)
    ax = c.axes(ax)
    d = decomposition
    width = 0.55
    ax.bar([0], [d.member_loss], width=width, color=c.FAINT, edgecolor=c.INK,
           label="mean loss of one member")
    ax.bar([1], [d.ensemble_loss], width=width, color=c.SLATE, edgecolor=c.INK,
           label="loss of the combined prediction")
    if d.identity:
        ax.bar([1], [d.ambiguity], bottom=[d.ensemble_loss], width=width, color="white",
               edgecolor=c.INK, hatch="///", label="ambiguity: removed by averaging")
        share = d.relative_gain
        if math.isfinite(share):
            ax.annotate(f"{share:.0%} removed", xy=(1, d.member_loss), xytext=(0, 4),
                        textcoords="offset points", ha="center", va="bottom", fontsize="small")
        names = ["one member\n(mean)", "ensemble +\nambiguity"]
    else:
        gain = d.vote_gain
        ax.annotate(f"vote gain {gain:+.3g}", xy=(0.5, max(d.member_loss, d.ensemble_loss)),
                    xytext=(0, 6), textcoords="offset points", ha="center", va="bottom",
                    fontsize="small")
        names = ["one member\n(mean)", "majority\nvote"]
    ax.set_xticks([0, 1], names)
    ax.set_xlim(-0.6, 1.6)
    top = max(d.member_loss, d.ensemble_loss)
    ax.set_ylim(0, top * 1.25 if top > 0 else 1)
    ax.set_title(f"{d.n_members:,} members, {d.n_points:,} points", fontsize="medium")
    return c.finish(ax, xlabel="", ylabel=c.loss_label(d.loss, unit))


def plot_ambiguity_by_point(decomposition, *, ax=None, unit=None, max_points=20_000):
    """Per-point ambiguity against per-point mean member loss.

    Each point is one observation. The reference line ``ambiguity = member loss`` is where
    averaging removes all of the loss; a point's vertical distance below it is the loss of
    the combined prediction there (``ensemble = member loss - ambiguity``, Krogh & Vedelsby
    1995). Points near the horizontal axis are those where the members agree and averaging
    removes little. Squared and Brier losses only (no identity holds for error rates).

    Parameters
    ----------
    decomposition : Decomposition
        From `bagwise.decompose` with a squared or Brier loss.
    ax : matplotlib Axes, optional
    unit : str, optional
        Unit of the targets (squared loss).
    max_points : int or None
        Draw at most this many points, evenly spaced by index (default 20,000; None: all),
        so a figure of millions of points stays light; the legend says how many are shown.

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_ambiguity_by_point
    >>> rng = np.random.default_rng(1)
    >>> y = rng.normal(size=300)
    >>> ax = plot_ambiguity_by_point(bagwise.decompose(y + rng.normal(size=(20, 300)), y))
    >>> len(ax.collections[0].get_offsets())
    300
    >>> plt.close(ax.figure)
    """
    unit = _decomposition_iv(decomposition, unit)
    max_points = c.max_points_iv(max_points)
    d = decomposition
    if not d.identity:
        raise ValueError("`decomposition`: error rates have no ambiguity (no identity holds for "
                         "a majority vote); use a squared or Brier loss")
    ax = c.axes(ax)
    shown = c.thin(d.n_points, max_points)
    member, ambiguity = d.member_loss_per_point[shown], d.ambiguity_per_point[shown]
    count = (f"{d.n_points:,} in all" if shown.size == d.n_points
             else f"{shown.size:,} of {d.n_points:,} shown")
    ax.scatter(member, ambiguity, s=6, color=c.SLATE, alpha=0.5, linewidths=0,
               label=f"one point ({count})", rasterized=shown.size > 5000)
    top = float(np.max(d.member_loss_per_point)) if d.n_points else 1.0
    top = top if top > 0 else 1.0
    ax.plot([0, top], [0, top], color=c.INK, linestyle="--", linewidth=1.2,
            label="ambiguity = member loss (all removed)")
    ax.set_xlim(0, top * 1.05)
    ax.set_ylim(0, top * 1.05)
    if d.loss == "squared_error":
        words = "squared error" + (f", {c.squared_unit(unit)}" if unit else "")
    else:
        words = "Brier score"
    return c.finish(ax, xlabel=f"mean member loss at the point ({words})",
                    ylabel=f"ambiguity at the point ({words})")
