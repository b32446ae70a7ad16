"""Does bagging help each learner: the ratio of the ensemble's loss to a single model's,
with its interval."""

from __future__ import annotations

import math

from ..compare import LearnerComparison, Verdict
from . import _common as c

__all__ = ["plot_learner_comparison"]


def plot_learner_comparison(result, *, ax=None):
    """One row per learner: the ratio of the ensemble's out-of-bag loss to the single
    model's cross-validated loss, its interval as a bar, the line at 1 (no difference)
    and the verdict written beside it. A ratio that is not estimable is written as such,
    never drawn.

    Parameters
    ----------
    result : LearnerComparison or Verdict
        From `bagwise.compare_learners` (or one estimator's ``verdict``).
    ax : matplotlib Axes, optional
        Where to draw (default: a new figure).

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_learner_comparison
    >>> rng = np.random.default_rng(0)
    >>> X = rng.uniform(-2, 2, size=(150, 2))
    >>> y = np.sin(2 * X[:, 0]) + X[:, 1] + rng.normal(scale=0.3, size=150)
    >>> table = bagwise.compare_learners(X, y, ["tree", "linear"], n_members=30,
    ...                                  random_state=0)
    >>> ax = plot_learner_comparison(table)
    >>> [t.get_text() for t in ax.get_yticklabels()]
    ['tree', 'linear']
    >>> plt.close(ax.figure)
    """
    if isinstance(result, Verdict):
        names, verdicts, level, loss = ["learner"], [result], result.level, result.loss
    elif isinstance(result, LearnerComparison):
        names, verdicts = list(result.learners), list(result.verdicts)
        level, loss = result.level, result.loss
    else:
        raise TypeError("`result`: expected the LearnerComparison of "
                        "bagwise.compare_learners or a Verdict, got "
                        f"{type(result).__name__}")
    ax = c.axes(ax)
    rows = range(len(names))
    ax.axvline(1.0, color=c.INK, linestyle="--", linewidth=1,
               label="1: no difference")
    drawn = False
    for row, v in zip(rows, verdicts):
        if math.isfinite(v.ratio_lower) and math.isfinite(v.ratio_upper):
            ax.errorbar([v.reference_ratio], [row],
                        xerr=[[v.reference_ratio - v.ratio_lower],
                              [v.ratio_upper - v.reference_ratio]],
                        fmt="o", color=c.SLATE, ecolor=c.SLATE, capsize=4,
                        label=None if drawn else f"ratio and {level:.0%} interval")
            drawn = True
            text, at = f"  {v.verdict}", v.ratio_upper
        else:
            text, at = "  not estimable", 1.0
        ax.annotate(text, xy=(at, row), va="center", ha="left", fontsize="small")
    ax.set_yticks(list(rows))
    ax.set_yticklabels(names)
    ax.set_ylim(len(names) - 0.5, -0.5)
    ax.set_xlabel(f"ensemble loss (out of bag) / single model's (cross-validated), "
                  f"{loss.replace('_', ' ')}")
    ax.set_title("Does bagging help?")
    ax.legend(loc="best", fontsize="small", frameon=False)
    return ax
