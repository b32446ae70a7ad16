"""Checking standard errors against refitted ensembles; the between/within split of the
variance."""

from __future__ import annotations

import math

import numpy as np

from ..uncertainty import PredictionVariance, Spread
from . import _common as c

__all__ = ["binned_std_errors", "plot_between_within", "plot_rho", "plot_std_error_check"]



def _check_iv(prediction_variance, replicates, bins, unit):
    from ..replicates import ReplicateSpread

    if not isinstance(prediction_variance, PredictionVariance):
        raise TypeError("`prediction_variance`: expected the PredictionVariance returned by "
                        f"bagwise.prediction_variance, got {type(prediction_variance).__name__}")
    if prediction_variance.variance.ndim != 1:
        raise ValueError("`prediction_variance`: holds one variance per class; the check "
                         "compares one value per point")
    if not isinstance(replicates, ReplicateSpread):
        raise TypeError("`replicates`: expected the ReplicateSpread of ensembles refitted on "
                        "independent training sets (bagwise.replicate_spread), got "
                        f"{type(replicates).__name__}")
    n_points = len(prediction_variance.mean)
    if replicates.n_points != n_points:
        raise ValueError(f"`replicates`: has {replicates.n_points} points but "
                         f"`prediction_variance` has {n_points}")
    estimable = prediction_variance.status != "not estimable"
    return estimable, c.bins_iv(bins, max(int(estimable.sum()), 1)), c.unit_iv(unit)


def binned_std_errors(prediction_variance, replicates, bins=10):
    """Per bin of predicted standard error, over the points whose estimate is not "not
    estimable": the root mean predicted variance, the root mean true variance of the
    ensemble's mean from ensembles refitted on independent training sets
    (``replicates.between``, the variance of the infinitely bagged prediction, which the
    corrected estimators target), that truth's standard error (delta method) and the bin
    size — four arrays, the numbers `plot_std_error_check` draws. Bins hold (nearly) equal
    numbers of points.
    """
    estimable, bins, _ = _check_iv(prediction_variance, replicates, bins, None)
    points = np.flatnonzero(estimable)
    groups = [points[g] for g in c.equal_count_bins(prediction_variance.std_error[points],
                                                    bins)] if points.size else []
    predicted = np.array([math.sqrt(prediction_variance.variance[g].mean()) for g in groups])
    truth, spread = [], []
    for g in groups:
        between = replicates.between[g]
        mean = max(float(between.mean()), 0.0)
        truth.append(math.sqrt(mean))
        sem = between.std(ddof=1) / math.sqrt(len(g)) if len(g) > 1 else math.nan
        spread.append(sem / (2 * math.sqrt(mean)) if mean > 0 else math.nan)
    return predicted, np.array(truth), np.array(spread), np.array([len(g) for g in groups])


def plot_std_error_check(prediction_variance, replicates, *, bins=10, ax=None, unit=None):
    """Predicted standard error of the ensemble's mean against the truth it estimates: the
    spread of the ensemble's mean over ensembles refitted on independent training sets.

    This compares like with like — both measure how the ensemble's mean moves when the
    training set is drawn again; neither includes the noise of a new observation. Points are
    ranked by their predicted standard error and cut into ``bins`` bins of (nearly) equal
    size; each marker is one bin: the root mean predicted variance across, the root mean
    refitted variance up (with a bar of ± one standard error). On the diagonal the
    standard errors are right; points whose estimate is "not estimable" are left out (the
    caption says how many).

    Parameters
    ----------
    prediction_variance : PredictionVariance
        From `bagwise.prediction_variance` at some points.
    replicates : ReplicateSpread
        From `bagwise.replicate_spread` of ensembles refitted on independent training sets
        from the same source, predicting at the same points.
    bins : int
    ax : matplotlib Axes, optional
    unit : str, optional

    Returns
    -------
    matplotlib Axes
    """
    estimable, bins, unit = _check_iv(prediction_variance, replicates, bins, unit)
    ax = c.axes(ax)
    predicted, truth, spread, _ = binned_std_errors(prediction_variance, replicates, bins)
    left_out = int((~estimable).sum())
    ax.errorbar(predicted, truth, yerr=np.nan_to_num(spread), color=c.INK, linestyle="none",
                marker="o", markersize=5, capsize=3,
                label=f"{bins} bins of equal size"
                + (f"; {left_out} points not estimable, left out" if left_out else ""))
    top = max(float(np.max(predicted, initial=0.0)), float(np.max(truth, initial=0.0)))
    top = top * 1.1 if top > 0 else 1.0
    ax.plot([0, top], [0, top], color=c.SLATE, linestyle="--",
            label="right: predicted = refitted")
    ax.set_xlim(-0.02 * top, top)
    ax.set_ylim(0, None)
    return c.finish(ax, xlabel=c.with_unit("predicted standard error of the ensemble's mean",
                                           unit),
                    ylabel=c.with_unit("its spread over refitted ensembles", unit))


def _spread_iv(spread):
    if not isinstance(spread, Spread):
        raise TypeError(f"`spread`: expected the Spread returned by bagwise.spread, got "
                        f"{type(spread).__name__}")


def plot_rho(spread, *, bins=30, ax=None):
    """Histogram over points of rho(x), the share of a member's variance that comes from
    the training data (``between / (between + within)``; see `bagwise.Spread`).

    Near 1, members move together and more members barely help; near 0, the members'
    own randomness dominates and averaging more of them removes most of the variance. The
    pooled value ``mean_between / mean_total`` is the vertical line. Points whose total
    variance is zero (rho undefined) are left out and counted in the legend.

    Parameters
    ----------
    spread : Spread
        From `bagwise.spread`.
    bins : int
        Number of equal-width bins on [0, 1] (default 30).
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_rho
    >>> rng = np.random.default_rng(0)
    >>> counts = bagwise.resample(100, 1000, rng=0).counts
    >>> data = (counts @ rng.normal(size=100) / 100)[:, None]       # shared through the data
    >>> members = data + rng.uniform(0.01, 0.2, size=50) * rng.normal(size=(1000, 50))
    >>> ax = plot_rho(bagwise.spread(members, counts))
    >>> int(sum(p.get_height() for p in ax.patches))
    50
    >>> plt.close(ax.figure)
    """
    _spread_iv(spread)
    rho = spread.rho[np.isfinite(spread.rho)]
    bins = c.bins_iv(bins)
    ax = c.axes(ax)
    left_out = spread.rho.size - rho.size
    note = f"{rho.size:,} points" + (f" ({left_out:,} without variance left out)" if left_out else "")
    ax.hist(rho, bins=np.linspace(0.0, 1.0, bins + 1), color=c.PALE, edgecolor=c.INK,
            linewidth=0.6, label=note)
    if math.isfinite(spread.pooled_rho):
        ax.axvline(spread.pooled_rho, color=c.RUST, linestyle="--",
                   label=f"pooled over points: {spread.pooled_rho:.2f}")
    ax.set_xlim(0, 1)
    return c.finish(ax, xlabel="share of member variance from the training data (rho)",
                    ylabel="number of points")


def plot_between_within(spread, *, ax=None, unit=None, max_points=20_000):
    """Between (training-data) against within (member) variance per point, log-log.

    Two reference lines: ``between = within`` (rho = 1/2) and ``between = within / M``
    with ``M`` the members at hand: below that line the remaining member noise
    ``within / M`` still exceeds the training-data variance at the point, so more members
    would pay there. Points with a zero between or within variance cannot show on a
    logarithmic axis; they are left out and counted in the legend.

    Parameters
    ----------
    spread : Spread
        From `bagwise.spread`.
    ax : matplotlib Axes, optional
    unit : str, optional
        Unit of the predictions; the variances are in its square.
    max_points : int or None
        Draw at most this many points, evenly spaced by index (default 20,000; None: all).

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_between_within
    >>> rng = np.random.default_rng(0)
    >>> counts = bagwise.resample(100, 1000, rng=0).counts
    >>> data = (counts @ rng.normal(size=100) / 100)[:, None]       # shared through the data
    >>> members = data + rng.uniform(0.01, 0.2, size=50) * rng.normal(size=(1000, 50))
    >>> ax = plot_between_within(bagwise.spread(members, counts))
    >>> len(ax.collections[0].get_offsets())
    50
    >>> plt.close(ax.figure)
    """
    _spread_iv(spread)
    unit = c.unit_iv(unit)
    max_points = c.max_points_iv(max_points)
    ax = c.axes(ax)
    keep = (spread.between > 0) & (spread.within > 0)
    left_out = keep.size - int(keep.sum())
    positive = np.flatnonzero(keep)
    shown = positive[c.thin(positive.size, max_points)]
    within, between = spread.within[shown], spread.between[shown]
    count = (f"{within.size:,}" if shown.size == positive.size
             else f"{shown.size:,} of {positive.size:,} shown")
    note = f"one point ({count})" + (f"; {left_out:,} with a zero part left out"
                                     if left_out else "")
    ax.scatter(within, between, s=8, color=c.SLATE, alpha=0.6, linewidths=0, label=note,
               rasterized=within.size > 5000)
    if positive.size:
        low = min(float(spread.within[keep].min()), float(spread.between[keep].min()))
        high = max(float(spread.within[keep].max()), float(spread.between[keep].max()))
        grid = np.array([low / 2, high * 2])
        ax.plot(grid, grid, color=c.INK, linestyle="--", linewidth=1.2,
                label="between = within (rho = 1/2)")
        ax.plot(grid, grid / spread.n_members, color=c.RUST, linestyle="-.", linewidth=1.2,
                label=f"between = within / {spread.n_members} (the members at hand)")
        ax.set_xlim(grid[0], grid[1])
        ax.set_ylim(grid[0] / spread.n_members, grid[1])
    ax.set_xscale("log")
    ax.set_yscale("log")
    square = c.squared_unit(unit)
    return c.finish(ax, xlabel=c.with_unit("within variance: across members", square),
                    ylabel=c.with_unit("between variance: across training sets", square))
