"""Classification: how far vote fractions can be trusted, and how clear the votes are."""

from __future__ import annotations

import numpy as np

from ..aggregation import vote_fractions
from . import _common as c

__all__ = ["margins", "plot_margins", "plot_reliability", "reliability"]

PROBABILITY_TOLERANCE = 1e-6


def _labels_iv(y, n_points, n_classes=None):
    y = np.asarray(y)
    if y.dtype.kind not in "iu":
        raise TypeError(f"`y`: class labels must be integers 0..n_classes-1, got dtype {y.dtype}")
    if y.shape != (n_points,):
        raise ValueError(f"`y`: expected shape ({n_points},) (one label per point), got {y.shape}")
    y = y.astype(np.int64, copy=False)
    if y.size and y.min() < 0:
        raise ValueError(f"`y`: labels are class indices 0..n_classes-1; got {y.min()}")
    if n_classes is not None and y.size and y.max() >= n_classes:
        raise ValueError(f"`y`: label {y.max()} is outside 0..{n_classes - 1}")
    return y


def _fractions_iv(probabilities, name):
    p = np.asarray(probabilities)
    if p.dtype.kind != "f":
        raise TypeError(f"`{name}`: expected float class probabilities, got dtype {p.dtype}")
    if p.ndim != 2 or p.shape[0] == 0 or p.shape[1] < 2:
        raise ValueError(f"`{name}`: expected shape (n_points, n_classes) with at least two "
                         f"classes, got {p.shape}")
    p = p.astype(np.float64, copy=False)
    if not np.all(np.isfinite(p)):
        raise ValueError(f"`{name}`: contains NaN or infinite values (out-of-bag probabilities "
                         "are NaN where a point has no out-of-bag member: pass "
                         "`oob.probabilities[oob.covered]`)")
    if p.min() < -PROBABILITY_TOLERANCE or p.max() > 1 + PROBABILITY_TOLERANCE:
        raise ValueError(f"`{name}`: probabilities must lie in [0, 1]")
    worst = float(np.max(np.abs(p.sum(axis=1) - 1)))
    if worst > PROBABILITY_TOLERANCE:
        raise ValueError(f"`{name}`: every row must sum to 1 (within {PROBABILITY_TOLERANCE:g}); "
                         f"the worst is off by {worst:.3g}")
    return p


def reliability(probabilities, y, bins=10):
    """The numbers `plot_reliability` draws.

    The prediction at each point is the class with the largest probability (ties: the
    lowest class index) and its confidence that probability. Confidences are cut into
    ``bins`` equal-width bins on [0, 1]; for each non-empty bin the mean confidence, the
    share of points whose predicted class is right, and the number of points.

    Returns
    -------
    (mean_confidence, accuracy, count) : three ndarrays, one entry per non-empty bin

    Examples
    --------
    >>> import numpy as np
    >>> from bagwise.plots import reliability
    >>> p = np.array([[0.9, 0.1], [0.8, 0.2], [0.3, 0.7], [0.45, 0.55]])
    >>> confidence, accuracy, count = reliability(p, np.array([0, 1, 1, 0]), bins=4)
    >>> confidence.round(3).tolist(), accuracy.tolist(), count.tolist()
    ([0.625, 0.85], [0.5, 0.5], [2, 2])
    """
    p = _fractions_iv(probabilities, "probabilities")
    y = _labels_iv(y, p.shape[0], p.shape[1])
    bins = c.bins_iv(bins)
    predicted = np.argmax(p, axis=1)
    confidence = p[np.arange(p.shape[0]), predicted]
    right = predicted == y
    index = np.clip(np.floor(confidence * bins).astype(np.int64), 0, bins - 1)
    count = np.bincount(index, minlength=bins)
    filled = count > 0
    total_confidence = np.bincount(index, weights=confidence, minlength=bins)
    total_right = np.bincount(index, weights=right.astype(np.float64), minlength=bins)
    return (total_confidence[filled] / count[filled], total_right[filled] / count[filled],
            count[filled])


def plot_reliability(probabilities, y, *, bins=10, ax=None):
    """Reliability curve: the confidence of the predicted class against how often it is right.

    ``probabilities`` are vote fractions (`bagwise.vote_fractions`) or mean member
    probabilities (a soft vote). At every point the predicted class is the one with the
    largest probability and its probability is the confidence; points are grouped into
    ``bins`` equal-width bins of confidence on [0, 1]. Each marker is one non-empty bin:
    its mean confidence across, the share of its points predicted right up, with a bar of
    ± one binomial standard error. On the diagonal the fractions are calibrated; below it
    the ensemble is over-confident.

    Parameters
    ----------
    probabilities : float array of shape (n_points, n_classes)
        Rows summing to 1 (within 1e-6).
    y : integer array of shape (n_points,)
        True class indices.
    bins : int
        Number of confidence bins (default 10).
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_reliability
    >>> p = np.array([[0.9, 0.1], [0.8, 0.2], [0.3, 0.7], [0.45, 0.55]])
    >>> ax = plot_reliability(p, np.array([0, 1, 1, 0]), bins=5)
    >>> ax.containers[0].lines[0].get_ydata().tolist()    # bins 0.4-0.6, 0.6-0.8, 0.8-1
    [0.0, 1.0, 0.5]
    >>> plt.close(ax.figure)
    """
    confidence, accuracy, count = reliability(probabilities, y, bins)
    ax = c.axes(ax)
    spread = np.sqrt(accuracy * (1 - accuracy) / count)
    ax.errorbar(confidence, accuracy, yerr=spread, color=c.INK, linestyle="-", marker="o",
                markersize=5, capsize=3,
                label=f"observed ({int(count.sum()):,} points, {len(count)} bins)")
    ax.plot([0, 1], [0, 1], color=c.SLATE, linestyle="--", label="calibrated: right as often as stated")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.02)
    ax.set_aspect("equal")
    return c.finish(ax, xlabel="probability of the predicted class (vote share)",
                    ylabel="share of points predicted right")


def margins(members, y):
    """Majority-vote margin at every point (Breiman 2001, Random Forests, section 2.1).

    ``margin = share of votes for the true class - largest share for any other class``,
    between -1 and 1; the vote is right where it is positive (a tie gives 0).

    Parameters
    ----------
    members : array
        Integer member labels of shape (members, n_points), or float vote fractions (or
        mean probabilities) of shape (n_points, n_classes).
    y : integer array of shape (n_points,)

    Returns
    -------
    ndarray of float64, shape (n_points,)

    Examples
    --------
    >>> import numpy as np
    >>> from bagwise.plots import margins
    >>> margins(np.array([[0, 1], [0, 2], [1, 2], [0, 2]]), np.array([0, 1])).tolist()
    [0.5, -0.5]
    """
    data = np.asarray(members)
    name = "members"
    if data.dtype.kind in "iu":
        if data.ndim != 2:
            raise ValueError(f"`{name}`: integer member labels must have shape (members, n_points), "
                             f"got {data.shape}")
        y = _labels_iv(y, data.shape[1])
        top = max(int(data.max()), int(y.max()) if y.size else 0)
        fractions = vote_fractions(data, n_classes=max(top + 1, 2))
    elif data.dtype.kind == "f":
        fractions = _fractions_iv(data, name)
        y = _labels_iv(y, fractions.shape[0], fractions.shape[1])
    else:
        raise TypeError(f"`{name}`: expected integer member labels or float vote fractions, got "
                        f"dtype {data.dtype}")
    rows = np.arange(fractions.shape[0])
    true_share = fractions[rows, y]
    others = fractions.copy()
    others[rows, y] = -np.inf
    return true_share - others.max(axis=1)


def plot_margins(members, y, *, bins=40, ax=None):
    """Histogram of the majority-vote margin over points (Breiman 2001).

    The margin is the vote share of the true class minus the largest share of any other
    class (see `margins`): near 1 the members agree on the right class, below 0 the vote is
    wrong, near 0 it is narrow. The line at 0 separates right from wrong votes and the
    legend gives the share of points on each side.

    Parameters
    ----------
    members : array
        Integer member labels (members, n_points) or float vote fractions
        (n_points, n_classes).
    y : integer array of shape (n_points,)
        True class indices.
    bins : int
        Number of equal-width bins on [-1, 1] (default 40).
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_margins
    >>> labels = np.array([[0, 1, 1], [0, 2, 1], [1, 2, 1], [0, 2, 0]])
    >>> ax = plot_margins(labels, np.array([0, 1, 1]), bins=4)
    >>> [int(p.get_height()) for p in ax.patches]   # margins 0.5, -0.5, 0.5
    [0, 1, 0, 2]
    >>> plt.close(ax.figure)
    """
    values = margins(members, y)
    bins = c.bins_iv(bins)
    ax = c.axes(ax)
    wrong = float(np.mean(values < 0))
    tied = float(np.mean(values == 0))
    ax.hist(values, bins=np.linspace(-1.0, 1.0, bins + 1), color=c.PALE, edgecolor=c.INK,
            linewidth=0.6, label=f"{values.size:,} points")
    text = f"vote wrong left of 0: {wrong:.1%} of points"
    if tied:
        text += f" (ties at 0: {tied:.1%})"
    ax.axvline(0.0, color=c.RUST, linestyle="--", label=text)
    ax.set_xlim(-1, 1)
    return c.finish(ax, xlabel="vote margin: true-class share minus largest other share",
                    ylabel="number of points")
