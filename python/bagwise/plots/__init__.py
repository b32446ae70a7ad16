"""Figures of the diagnostics, drawn with matplotlib (an optional extra).

Install with ``pip install bagwise[plots]``. matplotlib is imported only when a function
here is called, so ``import bagwise`` and ``import bagwise.plots`` work without it. Every
figure is ``plot_<name>(result, *, ax=None, ...) -> Axes``: it takes a result (and, where
needed, the targets) positionally, everything else by keyword, draws on ``ax`` (a new
figure when it is None) and returns the Axes, so figures compose with ``plt.subplots``.
The functions without the prefix compute the numbers a figure shows.

- `plot_size_curve`: error against ensemble size, with the finite-ensemble law, the
  infinite-ensemble error, the members needed and the out-of-bag curve;
- `plot_decomposition`, `plot_ambiguity_by_point`: what averaging removed;
- `plot_std_error_check`: standard errors of the ensemble's mean checked against ensembles
  refitted on independent training sets; `plot_rho`, `plot_between_within`: the
  between/within variance split;
- `plot_prediction_coverage`: prediction intervals (or class sets) for a new observation
  checked against test targets, by interval width (or set size);
- `plot_correlation_matrix`: the members x members residual correlation, ordered;
- `plot_reliability`, `plot_margins`: vote fractions and vote margins of a classifier;
- `plot_kappa_error`: the kappa-error diagram of the pairs of classifier members;
- `plot_learner_comparison`: does bagging help each learner, ratios with their intervals;
- `plot_member_order`: which members are redundant, the loss of the first k members in a
  chosen order against a random order.
"""

from .classification import margins, plot_margins, plot_reliability, reliability
from .compare import plot_learner_comparison
from .correlation import member_order, plot_correlation_matrix
from .decomposition import plot_ambiguity_by_point, plot_decomposition
from .diversity import kappa_error_points, plot_kappa_error
from .intervals import plot_prediction_coverage, prediction_coverage
from .ordering import plot_member_order
from .size_curve import plot_size_curve
from .uncertainty import (
    binned_std_errors,
    plot_between_within,
    plot_rho,
    plot_std_error_check,
)

__all__ = [
    "binned_std_errors",
    "kappa_error_points",
    "margins",
    "member_order",
    "prediction_coverage",
    "plot_ambiguity_by_point",
    "plot_between_within",
    "plot_correlation_matrix",
    "plot_decomposition",
    "plot_learner_comparison",
    "plot_kappa_error",
    "plot_margins",
    "plot_member_order",
    "plot_prediction_coverage",
    "plot_reliability",
    "plot_rho",
    "plot_size_curve",
    "plot_std_error_check",
    "reliability",
]
