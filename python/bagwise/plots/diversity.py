"""The kappa-error diagram of a classifier ensemble (Margineantu & Dietterich 1997)."""

from __future__ import annotations

import numpy as np

from ..diversity import Diversity
from . import _common as c

__all__ = ["kappa_error_points", "plot_kappa_error"]


def kappa_error_points(diversity) -> tuple[np.ndarray, np.ndarray]:
    """The points of the kappa-error diagram, one per pair of members ``i < j`` (in the
    order of ``numpy.triu_indices``): x = Cohen's kappa between the pair's labels, y = the
    mean of the two members' error rates.

    Parameters
    ----------
    diversity : Diversity
        From ``bagwise.diversity``.

    Returns
    -------
    (kappa, error) : two ndarrays of float64, shape (members (members - 1) / 2,)

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> from bagwise.plots import kappa_error_points
    >>> d = bagwise.diversity(np.array([[0, 1, 0, 0], [0, 0, 0, 1]]), np.array([0, 1, 0, 1]))
    >>> kappa, error = kappa_error_points(d)
    >>> kappa.tolist(), error.tolist()
    ([-0.3333333333333333], [0.25])
    """
    if not isinstance(diversity, Diversity):
        raise TypeError("`diversity`: expected the Diversity returned by bagwise.diversity, got "
                        f"{type(diversity).__name__}")
    a, b = np.triu_indices(diversity.n_members, k=1)
    error = 1.0 - diversity.accuracy
    return diversity.kappa[a, b].copy(), (error[a] + error[b]) / 2


def plot_kappa_error(diversity, *, ax=None):
    """Kappa-error diagram: every pair of members as a point, x = the pair's Cohen's kappa
    (agreement beyond chance; lower is more diverse), y = the pair's mean error rate
    (Margineantu & Dietterich 1997, from memory). A good ensemble has its cloud low
    (accurate members) and to the left (diverse members). Pairs with an undefined kappa
    are left out.

    Parameters
    ----------
    diversity : Diversity
        From ``bagwise.diversity``.
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_kappa_error
    >>> rng = np.random.default_rng(0)
    >>> y = rng.integers(0, 3, size=400)
    >>> members = np.where(rng.random((6, 400)) < 0.7, y, rng.integers(0, 3, (6, 400)))
    >>> ax = plot_kappa_error(bagwise.diversity(members, y))
    >>> len(ax.collections[0].get_offsets())    # 6 members: 15 pairs
    15
    >>> plt.close(ax.figure)
    """
    kappa, error = kappa_error_points(diversity)
    ax = c.axes(ax)
    shown = np.isfinite(kappa)
    ax.scatter(kappa[shown], error[shown], s=14, color=c.SLATE, edgecolors="none", alpha=0.8,
               label=f"pairs of members ({shown.sum():,})")
    ax.set_title(f"mean kappa {diversity.mean_kappa:.2f}, mean member error "
                 f"{1.0 - float(np.mean(diversity.accuracy)):.3f}", fontsize="medium")
    return c.finish(ax, xlabel="Cohen's kappa of the pair (lower: more diverse)",
                    ylabel="mean error rate of the pair", legend=False)
