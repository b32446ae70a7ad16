"""Checking prediction intervals and class sets for a new observation against targets."""

from __future__ import annotations

import numpy as np

from ..intervals import PredictionInterval, PredictionSet
from . import _common as c

__all__ = ["plot_prediction_coverage", "prediction_coverage"]


def _coverage_iv(result, y, bins):
    if not isinstance(result, (PredictionInterval, PredictionSet)):
        raise TypeError("`prediction_interval`: expected the PredictionInterval or PredictionSet returned by "
                        f"bagwise.prediction_interval, got {type(result).__name__}")
    if isinstance(result, PredictionInterval):
        n_points = len(result.lower)
        result.coverage(y)   # raises on a bad `y`, naming it
        y = np.asarray(y, dtype=np.float64)
        inside = (result.lower <= y) & (y <= result.upper)
        return inside, c.bins_iv(bins, n_points)
    result.coverage(y)
    y = np.asarray(y)
    inside = result.sets[np.arange(len(y)), y]
    return inside, c.bins_iv(bins)


def prediction_coverage(prediction_interval, y, bins=10):
    """Per group of points: the mean interval width (or the set size), the share of the
    targets ``y`` inside their interval (or set), and the group's size (the numbers
    `plot_prediction_coverage` draws).

    Intervals are cut into ``bins`` groups of (nearly) equal size by width; class sets are
    grouped by their size (``bins`` is not used). Groups of points with an unbounded
    interval are kept, with width ``inf``.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> from bagwise.plots import prediction_coverage
    >>> interval = bagwise.PredictionInterval(
    ...     lower=np.array([0.0, 0, 0, 0]), upper=np.array([1.0, 1, 3, 3]),
    ...     width=np.array([1.0, 1, 3, 3]), level=0.9, method="jackknife+", n_rows_used=9,
    ...     n_rows=9, n_members=5, guarantee="")
    >>> width, share, size = prediction_coverage(interval, np.array([0.5, 2, 2, 2]), bins=2)
    >>> width.tolist(), share.tolist(), size.tolist()
    ([1.0, 3.0], [0.5, 1.0], [2, 2])
    """
    result = prediction_interval
    inside, bins = _coverage_iv(result, y, bins)
    if isinstance(result, PredictionInterval):
        groups = c.equal_count_bins(result.width, bins)
        key = np.array([result.width[g].mean() for g in groups])
    else:
        sizes = np.unique(result.set_size)
        groups = [np.flatnonzero(result.set_size == s) for s in sizes]
        key = sizes.astype(np.float64)
    return (key, np.array([inside[g].mean() for g in groups]),
            np.array([len(g) for g in groups]))


def plot_prediction_coverage(prediction_interval, y, *, bins=10, ax=None, unit=None):
    """Share of new observations inside their prediction interval (or class set), by bin
    of interval width (or by set size).

    ``prediction_interval`` is a `PredictionInterval` or `PredictionSet` at points whose observed
    targets ``y`` were not used to fit or calibrate it (a test set: each is a new
    observation). Each marker is one group of points with a bar of ± one binomial standard
    error ``sqrt(p (1 - p) / n)``; the dashed line is the nominal level, the dotted one the
    share over all points. Groups below the nominal line hold intervals that are too narrow
    for their points.

    Parameters
    ----------
    prediction_interval : PredictionInterval or PredictionSet
    y : array of shape (n_points,)
        Observed targets (class codes for a `PredictionSet`).
    bins : int
        Number of bins of equal size by interval width (default 10); class sets are
        grouped by set size instead.
    ax : matplotlib Axes, optional
    unit : str, optional
        Unit of the targets (the width axis).

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_prediction_coverage
    >>> interval = bagwise.PredictionInterval(
    ...     lower=np.array([0.0, 0, 0, 0]), upper=np.array([1.0, 1, 3, 3]),
    ...     width=np.array([1.0, 1, 3, 3]), level=0.9, method="jackknife+", n_rows_used=9,
    ...     n_rows=9, n_members=5, guarantee="")
    >>> ax = plot_prediction_coverage(interval, np.array([0.5, 2, 2, 2]), bins=2)
    >>> ax.get_ylabel()
    'share of new observations inside the 90% interval'
    >>> plt.close(ax.figure)
    """
    result = prediction_interval
    inside, _ = _coverage_iv(result, y, bins)
    unit = c.unit_iv(unit)
    ax = c.axes(ax)
    key, share, size = prediction_coverage(result, y, bins)
    spread = np.sqrt(share * (1 - share) / size)
    finite = np.isfinite(key)
    interval = isinstance(result, PredictionInterval)
    grouping = f"{len(size)} bins of equal size" if interval else "one group per set size"
    ax.errorbar(key[finite], share[finite], yerr=spread[finite], color=c.INK, linestyle="-",
                marker="o", markersize=5, capsize=3, label=f"observed, {grouping}")
    level = result.level
    ax.axhline(level, color=c.SLATE, linestyle="--", label=f"nominal level {level:.0%}")
    overall = float(np.mean(inside))
    ax.axhline(overall, color=c.FAINT, linestyle=":", label=f"all points: {overall:.1%}")
    ax.set_ylim(0, 1.02)
    what = "interval" if interval else "class set"
    xlabel = (c.with_unit("width of the interval for a new observation", unit) if interval
              else "classes in the set")
    return c.finish(ax, xlabel=xlabel,
                    ylabel=f"share of new observations inside the {level:.0%} {what}")
