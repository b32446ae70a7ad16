"""The members x members residual-correlation matrix as an ordered heatmap."""

from __future__ import annotations

import numbers

import numpy as np

from ..correlation import Correlation
from . import _common as c

__all__ = ["member_order", "plot_correlation_matrix"]

_TICKS_UP_TO = 30


_ORDERS = ("eigenvector", "cluster", "given")


def member_order(matrix, order="eigenvector") -> np.ndarray:
    """An order of the members that puts similar members next to each other.

    - ``"eigenvector"`` (default): members sorted by their entry in the leading eigenvector
      of the correlation matrix. Members that load alike on the main direction of shared
      error sit together, so blocks of mutually correlated members show as blocks. The
      eigenvector's sign is fixed so that its entries sum to a non-negative number, and ties
      keep the members' own order, so the order is reproducible.
    - ``"cluster"``: the leaves of an average-linkage hierarchical clustering on the
      distance ``1 - correlation`` (``scipy.cluster.hierarchy``; needs scipy). It follows
      more than one direction of structure.
    - ``"given"``: the members' own order.

    Undefined correlations (NaN, members with constant residuals) count as 0.

    Parameters
    ----------
    matrix : array of shape (members, members)
        A symmetric correlation matrix, e.g. ``Correlation.residual_correlation``.
    order : {"eigenvector", "cluster", "given"}

    Returns
    -------
    ndarray of int64, shape (members,)
        A permutation of ``0..members-1``.

    Examples
    --------
    >>> import numpy as np
    >>> from bagwise.plots import member_order
    >>> m = np.array([[1.0, 0.0, 0.9], [0.0, 1.0, 0.0], [0.9, 0.0, 1.0]])
    >>> member_order(m).tolist()                 # members 0 and 2 belong together
    [1, 0, 2]
    >>> member_order(m, "cluster").tolist()
    [1, 0, 2]
    """
    matrix = np.asarray(matrix, dtype=np.float64)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1]:
        raise ValueError(f"`matrix`: expected a square (members, members) matrix, got {matrix.shape}")
    if order not in _ORDERS:
        raise ValueError(f"`order`: expected one of {_ORDERS}, got {order!r}")
    members = matrix.shape[0]
    if order == "given" or members < 3:
        return np.arange(members, dtype=np.int64)
    filled = np.nan_to_num(matrix, nan=0.0)
    filled = (filled + filled.T) / 2
    if order == "cluster":
        try:
            from scipy.cluster.hierarchy import leaves_list, linkage
            from scipy.spatial.distance import squareform
        except ImportError as err:
            raise ImportError("`order`: 'cluster' needs scipy (pip install scipy); the default "
                              "'eigenvector' order needs only numpy") from err
        distance = np.clip(1.0 - filled, 0.0, 2.0)
        np.fill_diagonal(distance, 0.0)
        tree = linkage(squareform(distance, checks=False), method="average")
        return leaves_list(tree).astype(np.int64)
    _, vectors = np.linalg.eigh(filled)
    leading = vectors[:, -1]
    if leading.sum() < 0:
        leading = -leading
    return np.argsort(leading, kind="stable").astype(np.int64)


def _correlation_iv(correlation, max_members):
    if not isinstance(correlation, Correlation):
        raise TypeError("`correlation`: expected the Correlation returned by bagwise.correlation, "
                        f"got {type(correlation).__name__}")
    if isinstance(max_members, bool) or not isinstance(max_members, numbers.Integral):
        raise TypeError(f"`max_members`: expected an integer, got {type(max_members).__name__}")
    if correlation.residual_correlation is None:
        raise ValueError("`correlation`: holds no matrix; compute it with "
                         "bagwise.correlation(members, y, matrix=True)")
    if correlation.n_members > max_members:
        raise ValueError(f"`correlation`: {correlation.n_members:,} members are more than "
                         f"`max_members` = {max_members:,}; a heatmap that large shows no single "
                         "member - plot a subset (correlation of members[:300]) or raise "
                         "max_members")


def plot_correlation_matrix(correlation, *, ax=None, max_members=300, order="eigenvector"):
    """Heatmap of the residual correlation between every pair of members.

    Rows and columns are the members in the order of `member_order` (by default the
    leading eigenvector), so groups of members whose errors move together show as blocks; the
    colour bar gives the correlation. Undefined correlations (members with constant
    residuals) are left blank. The diagonal is 1 by definition.

    Parameters
    ----------
    correlation : Correlation
        From ``bagwise.correlation(members, y, matrix=True)``.
    ax : matplotlib Axes, optional
    max_members : int
        Refuse more members than this (default 300): beyond a few hundred a cell is smaller
        than a screen pixel.
    order : {"eigenvector", "cluster", "given"}
        How to order the members; see `member_order`.

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> import matplotlib.pyplot as plt
    >>> from bagwise.plots import plot_correlation_matrix
    >>> rng = np.random.default_rng(3)
    >>> members = rng.normal(size=4000) + rng.normal(size=(12, 4000))
    >>> result = bagwise.correlation(members, np.zeros(4000), matrix=True)
    >>> ax = plot_correlation_matrix(result)
    >>> ax.images[0].get_array().shape
    (12, 12)
    >>> plt.close(ax.figure)
    """
    _correlation_iv(correlation, max_members)
    ordering = member_order(correlation.residual_correlation, order)
    ax = c.axes(ax)
    shown = correlation.residual_correlation[np.ix_(ordering, ordering)]
    c.pyplot()
    import matplotlib

    colours = matplotlib.colormaps["cividis"].with_extremes(bad="white")
    finite = shown[np.isfinite(shown)]
    low = min(0.0, float(finite.min())) if finite.size else 0.0
    image = ax.imshow(np.ma.masked_invalid(shown), cmap=colours, vmin=low, vmax=1.0,
                      interpolation="nearest", origin="upper")
    ax.figure.colorbar(image, ax=ax, label="correlation of the members' residuals")
    members = correlation.n_members
    if members <= _TICKS_UP_TO:
        ax.set_xticks(np.arange(members), [str(i) for i in ordering], fontsize="x-small")
        ax.set_yticks(np.arange(members), [str(i) for i in ordering], fontsize="x-small")
        words = "member (its index)"
    else:
        ax.set_xticks([])
        ax.set_yticks([])
        words = "member"
    ax.set_title(f"mean pairwise correlation {correlation.mean_residual_correlation:.2f}",
                 fontsize="medium")
    how = {"eigenvector": "ordered by shared error", "cluster": "ordered by clusters",
           "given": "in their own order"}[order]
    return c.finish(ax, xlabel=f"{words}, {how}", ylabel=f"{words}, {how}", legend=False)
