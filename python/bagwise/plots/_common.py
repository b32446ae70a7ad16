"""Shared pieces of the plots: the lazy matplotlib import, axes creation, labels, the look.

The look is plain and greyscale-safe: every series differs from the others by line style
and marker as well as by shade, so a figure printed in black and white reads the same.
"""

from __future__ import annotations

import numbers

import numpy as np

#: Shades and styles shared by every plot (one dark ink, one blue-grey, one warm accent;
#: they stay distinguishable in greyscale because their lightness differs).
INK = "#1f1f1f"
SLATE = "#4a6a8a"
RUST = "#b0562a"
PALE = "#c9d3dc"
FAINT = "#8c8c8c"

_MISSING = ("bagwise.plots needs matplotlib, which is an optional dependency: "
            "install it with `pip install bagwise[plots]` (or `pip install matplotlib`)")


def pyplot():
    """``matplotlib.pyplot``, imported on first use, with an install hint when missing."""
    try:
        import matplotlib.pyplot as plt
    except ImportError as err:
        raise ImportError(_MISSING) from err
    return plt


def axes(ax):
    """``ax`` itself, or the axes of a new figure (default size) when ``ax`` is None."""
    plt = pyplot()
    if ax is None:
        _, ax = plt.subplots()
        return ax
    from matplotlib.axes import Axes

    if not isinstance(ax, Axes):
        raise TypeError(f"`ax`: expected a matplotlib Axes or None, got {type(ax).__name__}")
    return ax


def unit_iv(unit):
    """``None`` or a non-empty string."""
    if unit is None:
        return None
    if not isinstance(unit, str):
        raise TypeError(f"`unit`: expected a string such as 'kg', got {type(unit).__name__}")
    return unit.strip() or None


def squared_unit(unit):
    """``kg`` -> ``kg²``; ``t/ha`` -> ``(t/ha)²``."""
    if unit is None:
        return None
    if any(c in unit for c in " /*·^"):
        unit = f"({unit})"
    return f"{unit}²"


def with_unit(text, unit):
    """``text (kg)``; a unit that has its own parentheses follows a comma: ``text, (t/ha)²``."""
    if not unit:
        return text
    return f"{text}, {unit}" if unit.startswith("(") else f"{text} ({unit})"


def loss_label(loss, unit):
    """A loss named in words, with the squared unit of the targets for a squared error."""
    if loss == "squared_error":
        return with_unit("mean squared error", squared_unit(unit))
    if loss == "brier_score":
        return "Brier score"
    return "error rate (share misclassified)"


def plain_log_ticks(axis):
    """Label a logarithmic axis 1, 10, 100 rather than as powers of ten."""
    from matplotlib.ticker import FuncFormatter

    axis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:,.10g}"))


def bins_iv(bins, n_points=None):
    """A whole number of bins >= 1 (and, for bins of points, at most ``n_points``)."""
    if isinstance(bins, bool) or not isinstance(bins, numbers.Integral):
        raise TypeError(f"`bins`: expected an integer, got {type(bins).__name__}")
    bins = int(bins)
    if bins < 1:
        raise ValueError(f"`bins`: must be at least 1, got {bins}")
    if n_points is not None and bins > n_points:
        raise ValueError(f"`bins`: {bins} bins need at least as many points, got {n_points}")
    return bins


def equal_count_bins(key, bins):
    """Indices of the points in each of ``bins`` groups of (nearly) equal size, by ``key``.

    Points are ranked by ``key`` (stable sort, so ties keep their order) and the ranking is
    cut into ``bins`` consecutive runs whose sizes differ by at most one: quantile bins that
    are never empty, even when many keys are equal.
    """
    order = np.argsort(key, kind="stable")
    return np.array_split(order, bins)


def max_points_iv(max_points):
    if max_points is None:
        return None
    if isinstance(max_points, bool) or not isinstance(max_points, numbers.Integral):
        raise TypeError(f"`max_points`: expected an integer or None, got {type(max_points).__name__}")
    if max_points < 1:
        raise ValueError(f"`max_points`: must be at least 1, got {max_points}")
    return int(max_points)


def thin(n_points, max_points):
    """Indices of at most ``max_points`` of ``n_points`` points, evenly spaced by index
    (every point when ``max_points`` is None or not smaller)."""
    if max_points is None or n_points <= max_points:
        return np.arange(n_points)
    return np.unique(np.linspace(0, n_points - 1, max_points).round().astype(np.int64))


def finish(ax, *, xlabel, ylabel, legend=True):
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if legend and ax.get_legend_handles_labels()[0]:
        ax.legend(frameon=False, fontsize="small")
    return ax
