"""Figures of the diagnostics: what each plot draws (line data, band vertices, markers,
bar heights, scatter offsets, heatmap cells) checked against the result objects and against
references written here with numpy, pandas, scipy and scikit-learn; axes reuse; bad input;
the optional matplotlib dependency. Rendered headless with the Agg backend."""

from __future__ import annotations

import collections
import math
import subprocess
import sys

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402

import bagwise  # noqa: E402
from bagwise import plots  # noqa: E402


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


# -- simulated ensembles --------------------------------------------------------------------

def regression(members=30, n=600, seed=0):
    """Members fit on bootstrap draws: shared signal error, member noise, in-bag counts."""
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    preds = y + 0.4 * rng.normal(size=n) + 0.1 + 0.8 * rng.normal(size=(members, n))
    counts = bagwise.resample(n, members, rng=seed).counts
    return preds, y, counts


def labels(members=25, n=800, classes=3, seed=2, accuracy=0.55):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    right = rng.random(size=(members, n)) < accuracy
    noise = rng.integers(0, classes, size=(members, n))
    return np.where(right, y, noise).astype(np.int64), y


def linear_statistic(points=600, n_train=200, members=1000, seed=0):
    """Members that are bootstrap means of scaled copies of one sample: the standard error
    differs from point to point (it is proportional to the scale)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n_train)
    scales = rng.uniform(0.2, 3.0, size=points)
    counts = bagwise.resample(n_train, members, rng=seed).counts
    preds = counts @ np.outer(z, scales) / n_train
    return preds, counts


def line_labelled(ax, start):
    found = [line for line in ax.lines if line.get_label().startswith(start)]
    assert len(found) == 1, [line.get_label() for line in ax.lines]
    return found[0]


def plain_words(text):
    """Axis text in words: non-empty, no attribute names (underscores), not a bare symbol."""
    return bool(text) and "_" not in text and len(text.split()) >= 2


# -- size curve -----------------------------------------------------------------------------

def test_size_curve_draws_curve_band_law_infinite_loss_and_marker():
    preds, y, _ = regression()
    curve = bagwise.size_curve(preds, y, orders=8, rng=1)
    needed = curve.members_needed(0.05)
    assert 1 < needed <= 100 * curve.n_members
    ax = plots.plot_size_curve(curve, tolerance=0.05, unit="kg")

    empirical = line_labelled(ax, "test points")
    np.testing.assert_array_equal(empirical.get_xdata(), curve.sizes)
    np.testing.assert_array_equal(empirical.get_ydata(), curve.curve)

    law = line_labelled(ax, "law")
    k = np.asarray(law.get_xdata())
    assert k[0] == 1 and np.all(np.diff(k) > 0) and k[-1] >= curve.n_members
    np.testing.assert_allclose(law.get_ydata(), curve.law(k), rtol=1e-12)
    # The law from plain numpy on the members (Cochran 1977, Theorem 2.2: the mean k-subset
    # loss is loss(M) + W (1/k − 1/M), W the mean across-member variance, ddof 1):
    w = preds.var(axis=0, ddof=1).mean()
    loss_m = np.mean((preds.mean(axis=0) - y) ** 2)
    np.testing.assert_allclose(law.get_ydata(), loss_m + w * (1 / k - 1 / curve.n_members),
                               rtol=1e-10)

    flat = line_labelled(ax, "infinite ensemble")
    np.testing.assert_allclose(flat.get_ydata(), [curve.infinite_loss] * 2, rtol=1e-15)

    marker = line_labelled(ax, f"{needed:,} members")
    np.testing.assert_array_equal(marker.get_xdata(), [needed, needed])
    assert ax.get_xlim()[1] > needed
    (label,) = ax.texts
    assert label.get_text() == f"{needed:,}" and label.xy[0] == needed

    bands = [coll for coll in ax.collections if isinstance(coll, PolyCollection)]
    assert len(bands) == 1
    vertices = bands[0].get_paths()[0].vertices
    for size, mean, se in zip(curve.sizes, curve.curve, curve.std_error):
        for edge in (mean - se, mean + se):
            assert np.any(np.isclose(vertices[:, 0], size) & np.isclose(vertices[:, 1], edge,
                                                                         rtol=1e-12))
    assert vertices[:, 1].max() == pytest.approx(float(np.max(curve.curve + curve.std_error)))

    assert ax.get_xscale() == "log"
    ax.figure.canvas.draw()
    ticks = {t.get_text() for t in ax.get_xticklabels()}
    assert {"1", "10"} <= ticks                       # plain numbers, not powers of ten
    assert ax.get_xlabel() == "members in the ensemble"
    assert "kg²" in ax.get_ylabel() and plain_words(ax.get_ylabel())
    # Greyscale: every series differs by line style or marker, not by colour alone.
    styles = [(str(line.get_linestyle()), str(line.get_marker())) for line in ax.lines]
    assert len(set(styles)) == len(styles) == 4


def test_size_curve_stretches_the_axis_to_a_members_needed_beyond_the_ensemble():
    preds, y, _ = regression(members=12)
    curve = bagwise.size_curve(preds, y, orders=5, rng=0)
    needed = curve.members_needed(0.01)
    assert needed > curve.n_members            # W/k against 1% of the infinite loss
    ax = plots.plot_size_curve(curve)
    np.testing.assert_array_equal(line_labelled(ax, f"{needed:,} members").get_xdata(),
                                  [needed, needed])
    law = line_labelled(ax, "law")
    assert law.get_xdata()[-1] >= needed
    assert ax.get_ylabel() == "mean squared error"


def test_size_curve_with_out_of_bag_curve_on_the_same_axes():
    preds, y, counts = regression()
    curve = bagwise.size_curve(preds, y, orders=6, rng=2)
    oob = bagwise.out_of_bag(preds, counts, y, loss="absolute_error")
    ax = plots.plot_size_curve(curve, out_of_bag=oob)
    line = line_labelled(ax, "training points: out-of-bag")
    np.testing.assert_array_equal(line.get_xdata(), oob.sizes)
    # The squared error is drawn whatever the headline metric, to match the squared loss.
    np.testing.assert_array_equal(line.get_ydata(), oob.loss_curve("squared_error"))
    assert len(ax.lines) == 5
    assert len(ax.get_legend().get_texts()) == 6          # five lines and the band


def test_size_curve_of_probabilities_with_out_of_bag_brier_score():
    rng = np.random.default_rng(8)
    y = rng.integers(0, 3, size=300)
    logits = rng.normal(size=(20, 300, 3)) + 1.2 * np.eye(3)[y]
    p = np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)
    counts = bagwise.resample(300, 20, rng=8).counts
    curve = bagwise.size_curve(p, y, orders=4)
    oob = bagwise.out_of_bag(p, counts, y)                  # headline metric: error rate
    ax = plots.plot_size_curve(curve, out_of_bag=oob)
    np.testing.assert_array_equal(line_labelled(ax, "training points").get_ydata(),
                                  oob.loss_curve("brier_score"))
    np.testing.assert_allclose(line_labelled(ax, "law").get_ydata(),
                               curve.law(line_labelled(ax, "law").get_xdata()), rtol=1e-12)
    assert ax.get_ylabel() == "Brier score"


def test_size_curve_of_one_order_has_no_band():
    preds, y, _ = regression(members=10)
    with pytest.warns(UserWarning, match="one order"):
        curve = bagwise.size_curve(preds, y, orders=1)
    ax = plots.plot_size_curve(curve)
    assert not [coll for coll in ax.collections if isinstance(coll, PolyCollection)]
    assert len(ax.lines) == 4


def test_size_curve_of_error_rates_has_no_law():
    members, y = labels()
    curve = bagwise.size_curve(members, y, orders=4)
    ax = plots.plot_size_curve(curve)
    assert len(ax.lines) == 1
    assert ax.get_ylabel() == "error rate (share misclassified)"


def test_size_curve_bad_input():
    preds, y, counts = regression()
    curve = bagwise.size_curve(preds, y, orders=3)
    with pytest.raises(TypeError, match="`size_curve`"):
        plots.plot_size_curve(preds)
    with pytest.raises(TypeError, match="`out_of_bag`"):
        plots.plot_size_curve(curve, out_of_bag=curve)
    with pytest.raises(ValueError, match="`tolerance`"):
        plots.plot_size_curve(curve, tolerance=0)
    with pytest.raises(TypeError, match="`unit`"):
        plots.plot_size_curve(curve, unit=3)
    with pytest.raises(TypeError, match="`ax`"):
        plots.plot_size_curve(curve, ax="left")
    member_labels, classes = labels(n=600)
    oob = bagwise.out_of_bag(member_labels, counts[:25], classes)
    with pytest.raises(ValueError, match="`out_of_bag`: is a classification result"):
        plots.plot_size_curve(curve, out_of_bag=oob)


# -- decomposition --------------------------------------------------------------------------

def test_decomposition_bars_are_the_decomposition_numbers():
    preds, y, _ = regression()
    d = bagwise.decompose(preds, y)
    ax = plots.plot_decomposition(d, unit="t/ha")
    member, ensemble, ambiguity = ax.patches
    assert member.get_height() == d.member_loss
    assert ensemble.get_height() == d.ensemble_loss
    assert ambiguity.get_height() == d.ambiguity
    assert ambiguity.get_y() == d.ensemble_loss            # stacked on the ensemble loss
    assert ensemble.get_x() == ambiguity.get_x() != member.get_x()
    # Krogh & Vedelsby 1995, eq. 5-6: the stacked bar is as tall as the member bar.
    assert ambiguity.get_y() + ambiguity.get_height() == pytest.approx(member.get_height(),
                                                                       rel=1e-12)
    assert ambiguity.get_hatch() and not ensemble.get_hatch()
    assert ax.get_ylabel() == "mean squared error, (t/ha)²"
    assert [t.get_text() for t in ax.texts] == [f"{d.relative_gain:.0%} removed"]
    assert all(plain_words(t.get_text().replace("\n", " ")) for t in ax.get_xticklabels())


def test_decomposition_of_error_rates_shows_member_and_vote_error():
    members, y = labels()
    d = bagwise.decompose(members, y)
    ax = plots.plot_decomposition(d)
    assert len(ax.patches) == 2
    # Straightforward numpy: mean member error rate; majority vote from bagwise.aggregate.
    assert ax.patches[0].get_height() == pytest.approx(np.mean(members != y), rel=1e-12)
    vote = bagwise.aggregate(members)
    assert ax.patches[1].get_height() == pytest.approx(np.mean(vote != y), rel=1e-12)
    assert ax.texts[0].get_text() == f"vote gain {d.vote_gain:+.3g}"


def test_scatters_thin_out_many_points_evenly(spread_case):
    preds, y, _ = regression(n=600)
    d = bagwise.decompose(preds, y)
    ax = plots.plot_ambiguity_by_point(d, max_points=100)
    offsets = ax.collections[0].get_offsets()
    rows = np.round(np.linspace(0, 599, 100)).astype(int)       # every ~6th point
    assert offsets.shape == (100, 2)
    np.testing.assert_array_equal(offsets[:, 0], d.member_loss_per_point[rows])
    np.testing.assert_array_equal(offsets[:, 1], d.ambiguity_per_point[rows])
    assert "100 of 600 shown" in ax.collections[0].get_label()
    # The reference line still spans every point, shown or not.
    assert ax.lines[0].get_xdata()[-1] == d.member_loss_per_point.max()
    assert len(plots.plot_ambiguity_by_point(d, max_points=None).collections[0]
               .get_offsets()) == 600
    keep = np.flatnonzero((spread_case.between > 0) & (spread_case.within > 0))
    ax = plots.plot_between_within(spread_case, max_points=40)
    picked = keep[np.round(np.linspace(0, keep.size - 1, 40)).astype(int)]
    np.testing.assert_array_equal(ax.collections[0].get_offsets()[:, 0], spread_case.within[picked])
    with pytest.raises(ValueError, match="`max_points`"):
        plots.plot_between_within(spread_case, max_points=0)
    with pytest.raises(TypeError, match="`max_points`"):
        plots.plot_ambiguity_by_point(d, max_points=2.5)


def test_decomposition_of_probabilities_uses_the_brier_score():
    rng = np.random.default_rng(3)
    y = rng.integers(0, 3, size=400)
    logits = rng.normal(size=(15, 400, 3)) + 1.5 * np.eye(3)[y]
    p = np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)
    d = bagwise.decompose(p, y)
    ax = plots.plot_decomposition(d)
    # Multi-class Brier score (Brier 1950) of the soft vote, straightforward numpy.
    soft = p.mean(axis=0)
    assert ax.patches[1].get_height() == pytest.approx(
        ((soft - np.eye(3)[y]) ** 2).sum(axis=1).mean(), rel=1e-10)
    assert ax.get_ylabel() == "Brier score"
    scatter = plots.plot_ambiguity_by_point(d)
    assert scatter.get_xlabel() == "mean member loss at the point (Brier score)"
    assert len(scatter.collections[0].get_offsets()) == 400


def test_ambiguity_by_point_scatter_and_reference_line():
    preds, y, _ = regression()
    d = bagwise.decompose(preds, y)
    ax = plots.plot_ambiguity_by_point(d, unit="kg")
    offsets = ax.collections[0].get_offsets()
    assert offsets.shape == (d.n_points, 2)
    # Straightforward numpy (Krogh & Vedelsby 1995 per point): member loss and ambiguity.
    f = preds.mean(axis=0)
    np.testing.assert_allclose(offsets[:, 0], ((preds - y) ** 2).mean(axis=0), rtol=1e-10)
    np.testing.assert_allclose(offsets[:, 1], ((preds - f) ** 2).mean(axis=0), rtol=1e-10)
    (reference,) = ax.lines
    np.testing.assert_array_equal(reference.get_xdata(), reference.get_ydata())
    assert reference.get_xdata()[-1] == pytest.approx(offsets[:, 0].max())
    assert ax.get_xlabel() == "mean member loss at the point (squared error, kg²)"
    assert ax.get_ylabel() == "ambiguity at the point (squared error, kg²)"
    with pytest.raises(ValueError, match="error rates have no ambiguity"):
        plots.plot_ambiguity_by_point(bagwise.decompose(*labels()))
    with pytest.raises(TypeError, match="`decomposition`"):
        plots.plot_decomposition(bagwise.size_curve(preds, y, orders=2))


# -- uncertainty ----------------------------------------------------------------------------

@pytest.fixture(scope="module")
def variance_case():
    preds, counts = linear_statistic()
    estimate = bagwise.prediction_variance(preds, counts)
    # Targets from a known data-generating process, not from the estimate: the true value
    # at every point is 0 (the sample of `linear_statistic` has mean 0) and a target is
    # the true value plus N(0, 1) noise (here only an array of the wrong type for the
    # `replicates` argument).
    y = np.random.default_rng(7).normal(size=estimate.mean.size)
    return estimate, y


#: Standard errors the binned standard-error figure may stray from its ideal line (common
#: practice for a z-check over 6 bins; false-failure rate measured, see
#: `std_error_check_draw`).
Z = 4.0


def std_error_check_draw(seed, *, n_rows=100, n_points=60, n_replicates=40, n_members=200,
                         bins=6):
    """The figure of `plot_std_error_check` for one seed: its binned points, their allowed
    distance from the ideal line, and the frame it was drawn from.

    The truth comes from a known data-generating process, not from the estimate: point j's
    rows are i.i.d. N(0, s_j²), the members are bootstrap means, so the ensemble mean's
    variance over training sets is s_j²/n (Efron & Tibshirani 1993), which the refitted
    ensembles' between part measures (Monte-Carlo, with its standard error).
    """
    rng = np.random.default_rng(seed)
    scales = np.geomspace(1.0, 10.0, n_points)
    members = np.empty((n_replicates, n_members, n_points))
    for r in range(n_replicates):
        x = rng.normal(size=(n_rows, n_points)) * scales
        counts = bagwise.resample(n_rows, n_members, rng=int(rng.integers(2**62))).counts
        members[r] = counts @ x / n_rows
    replicates = bagwise.replicate_spread(members)
    x = rng.normal(size=(n_rows, n_points)) * scales
    counts = bagwise.resample(n_rows, 2000, rng=int(rng.integers(2**62))).counts
    estimate = bagwise.prediction_variance(counts @ x / n_rows, counts)
    ax = plots.plot_std_error_check(estimate, replicates, bins=bins, unit="kg")
    data = ax.containers[0].lines[0]
    keep = estimate.status != "not estimable"
    frame = pd.DataFrame({"se": estimate.std_error, "variance": estimate.variance,
                          "between": replicates.between})[keep]
    frame["bin"] = pd.qcut(frame["se"], bins, labels=False)
    grouped = frame.groupby("bin").agg(["mean", "sem"])
    truth = np.sqrt(grouped[("between", "mean")].clip(lower=0)).to_numpy()
    # Delta method: the SE of √(mean between) is sem / (2 √mean).
    bars = (grouped[("between", "sem")] / (2 * truth)).to_numpy()
    # Each bin also carries the sampling noise of the one training set: relative SD
    # √(2/n) of a variance over n rows, over the bin's points (common practice).
    own = data.get_xdata() * math.sqrt(2 / n_rows) / math.sqrt(n_points / bins) / 2
    allowed = Z * np.hypot(bars, own)
    plt.close(ax.figure)
    return ax, data, grouped, truth, allowed


def std_error_check(seed, factor=1.0):
    """Whether the figure's binned points lie within `allowed` of ``factor`` times the
    predicted standard error (factor 1 the right check; the wrong variant 1.6 must fail:
    at least 4 of the 6 bins outside)."""
    _, data, _, _, allowed = std_error_check_draw(seed)
    off = np.abs(data.get_ydata() - factor * data.get_xdata()) >= allowed
    return not off.any() if factor == 1.0 else int(off.sum()) >= 4


def test_std_error_check_against_refitted_ensembles():
    """The check compares like with like: the predicted standard error of the ensemble's
    mean against the spread of that mean over ensembles refitted on independent training
    sets (here bagged means of independent samples, whose true variance is σ²/n; Efron &
    Tibshirani 1993). Bins from pandas.qcut; a standard error 1.6x too large must show.
    False-failure rate over 200 seeds (tests/bench/suite_b_pass_rate.py, case
    "std error figure", seeds 5000-5199, fastdev build): passes 200/200. The smallest wrong
    variant checked, a standard error 1.6 times too large, is caught on 200/200."""
    ax, data, grouped, truth, allowed = std_error_check_draw(3)
    np.testing.assert_allclose(data.get_xdata(), np.sqrt(grouped[("variance", "mean")]),
                               rtol=1e-12)
    np.testing.assert_allclose(data.get_ydata(), truth, rtol=1e-12)
    assert np.all(np.abs(data.get_ydata() - data.get_xdata()) < allowed)
    assert np.sum(np.abs(data.get_ydata() - 1.6 * data.get_xdata()) >= allowed) >= 4
    assert ax.get_xlabel() == "predicted standard error of the ensemble's mean (kg)"


def test_uncertainty_bad_input(variance_case):
    estimate, y = variance_case
    with pytest.raises(TypeError, match="`replicates`"):
        plots.plot_std_error_check(estimate, y)
    with pytest.raises(TypeError, match="`prediction_variance`"):
        plots.plot_std_error_check(estimate.std_error, y)
    with pytest.raises(TypeError, match="`spread`"):
        plots.plot_rho(estimate)



@pytest.fixture(scope="module")
def spread_case():
    rng = np.random.default_rng(4)
    n_train, members = 150, 2000
    z = rng.normal(size=n_train)
    counts = bagwise.resample(n_train, members, rng=4).counts
    # Point j: a bootstrap mean (shared through the data) plus member noise of scale s_j.
    scales = rng.uniform(0.02, 0.3, size=200)
    preds = (counts @ z / n_train)[:, None] + scales * rng.normal(size=(members, 200))
    return bagwise.spread(preds, counts)


def test_rho_histogram(spread_case):
    ax = plots.plot_rho(spread_case, bins=20)
    heights = [p.get_height() for p in ax.patches]
    # Reference: numpy.histogram on the same bins.
    expected, _ = np.histogram(spread_case.rho[np.isfinite(spread_case.rho)],
                               bins=np.linspace(0, 1, 21))
    np.testing.assert_array_equal(heights, expected)
    np.testing.assert_array_equal(line_labelled(ax, "pooled").get_xdata(),
                                  [spread_case.pooled_rho] * 2)
    assert ax.get_ylabel() == "number of points" and plain_words(ax.get_xlabel())
    with pytest.raises(TypeError, match="`bins`"):
        plots.plot_rho(spread_case, bins="ten")


def test_between_within_scatter(spread_case):
    ax = plots.plot_between_within(spread_case, unit="kg")
    keep = (spread_case.between > 0) & (spread_case.within > 0)
    offsets = ax.collections[0].get_offsets()
    assert offsets.shape == (int(keep.sum()), 2)
    np.testing.assert_array_equal(offsets[:, 0], spread_case.within[keep])
    np.testing.assert_array_equal(offsets[:, 1], spread_case.between[keep])
    same = line_labelled(ax, "between = within (")
    np.testing.assert_array_equal(same.get_xdata(), same.get_ydata())
    less = line_labelled(ax, f"between = within / {spread_case.n_members}")
    np.testing.assert_allclose(np.asarray(less.get_ydata()) * spread_case.n_members,
                               less.get_xdata(), rtol=1e-15)
    assert ax.get_xscale() == ax.get_yscale() == "log"
    assert ax.get_xlabel() == "within variance: across members (kg²)"


# -- correlation ----------------------------------------------------------------------------

def blocks(seed=5, n=3000):
    """Twelve members in two shuffled groups: a strongly and a weakly shared error."""
    rng = np.random.default_rng(seed)
    shared, strong, weak = rng.normal(size=(3, n))
    group = rng.permutation(np.repeat([0, 1], 6))
    noise = rng.normal(size=(12, n))
    preds = shared + np.where(group[:, None] == 0, 1.5 * strong, 0.3 * weak) + noise
    return preds, group


def test_correlation_heatmap_is_the_reordered_matrix():
    preds, group = blocks()
    result = bagwise.correlation(preds, np.zeros(preds.shape[1]), matrix=True)
    ax = plots.plot_correlation_matrix(result)
    order = plots.member_order(result.residual_correlation)
    np.testing.assert_array_equal(np.sort(order), np.arange(12))       # a permutation
    shown = np.asarray(ax.images[0].get_array())
    np.testing.assert_array_equal(shown, result.residual_correlation[np.ix_(order, order)])
    # The same cells as the matrix, only moved: sorted values agree.
    np.testing.assert_array_equal(np.sort(shown, axis=None), np.sort(result.residual_correlation, axis=None))
    # Ordering by the leading eigenvector (numpy.linalg.eigh) puts each group together.
    assert np.count_nonzero(np.diff(group[order])) == 1
    leading = np.linalg.eigh(result.residual_correlation)[1][:, -1]
    loads = np.abs(leading)[order]
    assert np.all(np.diff(loads) >= -1e-12)
    # Straightforward numpy reference: correlations of the residuals (numpy.corrcoef).
    np.testing.assert_allclose(shown, np.corrcoef(preds)[np.ix_(order, order)], atol=1e-12)
    assert len(ax.figure.axes) == 2                                       # the colour bar
    assert ax.figure.axes[1].get_ylabel() == "correlation of the members' residuals"
    assert [t.get_text() for t in ax.get_xticklabels()] == [str(i) for i in order]
    assert plain_words(ax.get_xlabel()) and plain_words(ax.get_ylabel())


@pytest.mark.parametrize("order", ["cluster", "given"])
def test_correlation_heatmap_other_orders(order):
    preds, group = blocks(seed=6)
    result = bagwise.correlation(preds, np.zeros(preds.shape[1]), matrix=True)
    ax = plots.plot_correlation_matrix(result, order=order)
    ordering = plots.member_order(result.residual_correlation, order)
    np.testing.assert_array_equal(np.sort(ordering), np.arange(12))
    np.testing.assert_array_equal(ax.images[0].get_array(),
                                  result.residual_correlation[np.ix_(ordering, ordering)])
    if order == "cluster":
        # Average linkage on 1 - correlation (scipy.cluster.hierarchy) keeps groups together.
        assert np.count_nonzero(np.diff(group[ordering])) == 1
        assert ax.get_xlabel() == "member (its index), ordered by clusters"
    else:
        np.testing.assert_array_equal(ordering, np.arange(12))
    with pytest.raises(ValueError, match="`order`"):
        plots.plot_correlation_matrix(result, order="random")


def test_correlation_heatmap_leaves_undefined_cells_blank():
    preds, _ = blocks()
    preds[4] = 0.0                                   # a constant member: residuals constant
    with pytest.warns(UserWarning, match="constant"):
        result = bagwise.correlation(preds, np.zeros(preds.shape[1]), matrix=True)
    ax = plots.plot_correlation_matrix(result)
    shown = ax.images[0].get_array()
    order = plots.member_order(result.residual_correlation)
    np.testing.assert_array_equal(np.ma.getmaskarray(shown),
                                  np.isnan(result.residual_correlation[np.ix_(order, order)]))
    assert np.ma.getmaskarray(shown).sum() == 2 * 12 - 1


def test_correlation_heatmap_refuses_missing_matrix_and_too_many_members():
    preds, _ = blocks()
    y = np.zeros(preds.shape[1])
    with pytest.raises(ValueError, match=r"matrix=True"):
        plots.plot_correlation_matrix(bagwise.correlation(preds, y))
    with pytest.raises(ValueError, match="more than `max_members` = 10"):
        plots.plot_correlation_matrix(bagwise.correlation(preds, y, matrix=True), max_members=10)
    with pytest.raises(TypeError, match="`correlation`"):
        plots.plot_correlation_matrix(np.eye(3))
    with pytest.raises(ValueError, match="`matrix`"):
        plots.member_order(np.ones((2, 3)))


def test_correlation_heatmap_hides_ticks_for_many_members():
    rng = np.random.default_rng(0)
    preds = rng.normal(size=(40, 500))
    ax = plots.plot_correlation_matrix(bagwise.correlation(preds, np.zeros(500), matrix=True))
    assert ax.get_xticks().size == 0 and ax.images[0].get_array().shape == (40, 40)


# -- classification -------------------------------------------------------------------------

def reliability_by_loops(p, y, bins):
    """The reliability table written with a loop over bins (common practice: equal-width
    confidence bins, confidence = largest probability)."""
    out = []
    predicted = p.argmax(axis=1)
    confidence = p.max(axis=1)
    for b in range(bins):
        low, high = b / bins, (b + 1) / bins
        inside = (confidence >= low) & ((confidence < high) if b < bins - 1 else (confidence <= high))
        if inside.any():
            out.append((confidence[inside].mean(), np.mean(predicted[inside] == y[inside]),
                        inside.sum()))
    return np.array(out).T


def test_reliability_curve():
    members, y = labels()
    fractions = bagwise.vote_fractions(members)
    ax = plots.plot_reliability(fractions, y, bins=8)
    data = ax.containers[0].lines[0]
    confidence, accuracy, count = reliability_by_loops(fractions, y, 8)
    np.testing.assert_allclose(data.get_xdata(), confidence, rtol=1e-12)
    np.testing.assert_allclose(data.get_ydata(), accuracy, rtol=1e-12)
    assert count.sum() == y.size
    diagonal = line_labelled(ax, "calibrated")
    np.testing.assert_array_equal(diagonal.get_xdata(), diagonal.get_ydata())
    assert ax.get_xlabel() == "probability of the predicted class (vote share)"
    assert ax.get_ylabel() == "share of points predicted right"
    # Overall accuracy of the argmax agrees with scikit-learn's accuracy_score.
    from sklearn.metrics import accuracy_score

    mean_accuracy = np.average(data.get_ydata(), weights=count)
    assert mean_accuracy == pytest.approx(accuracy_score(y, fractions.argmax(axis=1)), rel=1e-12)


def test_reliability_bad_input():
    p = np.array([[0.6, 0.4], [0.2, 0.7]])
    with pytest.raises(ValueError, match="sum to 1"):
        plots.plot_reliability(p, np.array([0, 1]))
    with pytest.raises(ValueError, match="oob.covered"):
        plots.plot_reliability(np.array([[0.5, 0.5], [np.nan, np.nan]]), np.array([0, 1]))
    with pytest.raises(ValueError, match="`y`: label 2"):
        plots.plot_reliability(np.array([[0.5, 0.5], [0.1, 0.9]]), np.array([0, 2]))
    with pytest.raises(TypeError, match="`y`"):
        plots.plot_reliability(np.array([[0.5, 0.5], [0.1, 0.9]]), np.array([0.0, 1.0]))
    with pytest.raises(TypeError, match="`probabilities`"):
        plots.plot_reliability(np.array([[1, 0], [0, 1]]), np.array([0, 1]))


def breiman_margins(members, y):
    """Breiman (2001), Random Forests, section 2.1: av_k I(h_k = y) - max_{j != y} av_k
    I(h_k = j), counted point by point."""
    out = []
    for j in range(members.shape[1]):
        votes = collections.Counter(members[:, j].tolist())
        others = [share for label, share in votes.items() if label != y[j]]
        out.append((votes.get(y[j], 0) - max(others, default=0)) / members.shape[0])
    return np.array(out)


def test_margins_histogram_against_breiman_definition():
    members, y = labels()
    expected = breiman_margins(members, y)
    np.testing.assert_allclose(plots.margins(members, y), expected, atol=1e-12)
    np.testing.assert_allclose(plots.margins(bagwise.vote_fractions(members), y), expected,
                               atol=1e-12)
    ax = plots.plot_margins(members, y, bins=20)
    counts, _ = np.histogram(plots.margins(members, y), bins=np.linspace(-1, 1, 21))
    assert [p.get_height() for p in ax.patches] == counts.tolist()
    assert sum(counts) == y.size
    # Below zero exactly where the majority vote (bagwise.aggregate) is wrong, ties aside.
    vote = bagwise.aggregate(members)
    untied = expected != 0
    np.testing.assert_array_equal((expected < 0)[untied], (vote != y)[untied])
    zero = line_labelled(ax, "vote wrong")
    np.testing.assert_array_equal(zero.get_xdata(), [0, 0])
    assert f"{np.mean(expected < 0):.1%}" in zero.get_label()
    assert plain_words(ax.get_xlabel()) and ax.get_ylabel() == "number of points"


def test_margins_bad_input():
    members, y = labels(n=50)
    with pytest.raises(ValueError, match="`y`: expected shape"):
        plots.plot_margins(members, y[:-1])
    with pytest.raises(TypeError, match="`members`"):
        plots.plot_margins(members.astype(str), y)
    with pytest.raises(ValueError, match="`members`"):
        plots.plot_margins(members[0], y)


# -- every plot -----------------------------------------------------------------------------

def every_plot(variance_case, spread_case):
    preds, y, counts = regression(members=20, n=300)
    member_labels, classes = labels(n=300)
    estimate, target = variance_case
    d = bagwise.decompose(preds, y)
    return [
        (plots.plot_size_curve, (bagwise.size_curve(preds, y, orders=3),)),
        (plots.plot_decomposition, (d,)),
        (plots.plot_ambiguity_by_point, (d,)),
        (plots.plot_rho, (spread_case,)),
        (plots.plot_between_within, (spread_case,)),
        (plots.plot_correlation_matrix, (bagwise.correlation(preds, y, matrix=True),)),
        (plots.plot_reliability, (bagwise.vote_fractions(member_labels), classes)),
        (plots.plot_margins, (member_labels, classes)),
    ]


def test_every_plot_reuses_the_given_axes_and_labels_in_words(variance_case, spread_case):
    for function, args in every_plot(variance_case, spread_case):
        fig, (left, right) = plt.subplots(1, 2)
        assert function(*args, ax=right) is right, function.__name__
        assert not left.has_data()
        assert plain_words(right.get_ylabel()), function.__name__
        if function is not plots.plot_decomposition:        # categories instead of an x axis
            assert plain_words(right.get_xlabel()), function.__name__
        fig.canvas.draw()                                     # renders without a warning
        plt.close(fig)
        new = function(*args)
        assert new.figure is not fig and len(new.figure.axes) >= 1
        plt.close(new.figure)


def test_plots_render_to_png(tmp_path, variance_case, spread_case):
    for function, args in every_plot(variance_case, spread_case):
        ax = function(*args)
        path = tmp_path / f"{function.__name__}.png"
        ax.figure.savefig(path)
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        plt.close(ax.figure)


# -- the optional dependency ----------------------------------------------------------------

def run_python(code):
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, check=False)


def test_import_bagwise_does_not_import_matplotlib():
    result = run_python("import sys, bagwise, bagwise.plots; print('matplotlib' in sys.modules)")
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "False"


def test_missing_matplotlib_names_the_extra():
    code = (
        "import sys\n"
        "sys.modules['matplotlib'] = None\n"
        "import numpy as np, bagwise\n"
        "from bagwise import plots\n"
        "y = np.zeros(50)\n"
        "d = bagwise.decompose(np.random.default_rng(0).normal(size=(5, 50)), y)\n"
        "try:\n"
        "    plots.plot_decomposition(d)\n"
        "except ImportError as err:\n"
        "    print(err)\n"
    )
    result = run_python(code)
    assert result.returncode == 0, result.stderr
    assert "pip install bagwise[plots]" in result.stdout


# -- kappa-error diagram ------------------------------------------------------------------------

def test_plot_kappa_error_draws_one_point_per_pair():
    from sklearn.metrics import cohen_kappa_score

    members, y = labels(members=8, n=500, seed=11)
    d = bagwise.diversity(members, y)
    ax = plots.plot_kappa_error(d)
    offsets = ax.collections[0].get_offsets()
    # Margineantu & Dietterich 1997 (from memory): x = the pair's kappa, y = its mean error;
    # reference: sklearn.metrics.cohen_kappa_score and numpy error rates, pairs i < j in
    # the order of numpy.triu_indices
    error = (members != y).mean(axis=1)
    expected = np.array([(cohen_kappa_score(members[i], members[j]), (error[i] + error[j]) / 2)
                         for i, j in zip(*np.triu_indices(8, 1))])
    assert offsets.shape == (28, 2)
    np.testing.assert_allclose(np.asarray(offsets), expected, rtol=1e-12, atol=1e-14)
    _, reused = plt.subplots()
    assert plots.plot_kappa_error(d, ax=reused) is reused


def test_plot_kappa_error_leaves_out_undefined_pairs_and_checks_its_input():
    y = np.array([0, 0, 0, 1, 1])
    members = np.array([[0, 0, 0, 0, 0], [0, 0, 0, 0, 0], [0, 1, 0, 1, 1]])
    with pytest.warns(bagwise.BagwiseWarning, match="Cohen's kappa is undefined .* for 1 of 3 pairs"):
        d = bagwise.diversity(members, y)
    ax = plots.plot_kappa_error(d)
    # members 0 and 1 always say class 0: chance agreement 1, kappa undefined (Cohen 1960)
    assert len(ax.collections[0].get_offsets()) == 2
    with pytest.raises(TypeError, match=r"^`diversity`"):
        plots.plot_kappa_error(object())


def test_every_figure_is_plot_name_with_a_keyword_ax():
    # the shape of every figure (DEVELOPERS.md): plot_<name>(result, *, ax=None) -> Axes;
    # a function that draws on an `ax` carries the prefix, and nothing else does
    import inspect

    drawing = set()
    for name in plots.__all__:
        parameters = inspect.signature(getattr(plots, name)).parameters
        if "ax" in parameters:
            drawing.add(name)
            assert parameters["ax"].kind is inspect.Parameter.KEYWORD_ONLY, name
            assert parameters["ax"].default is None, name
            first = next(iter(parameters.values()))
            assert first.kind is inspect.Parameter.POSITIONAL_OR_KEYWORD, name
    assert drawing == {name for name in plots.__all__ if name.startswith("plot_")}
    assert "plot_kappa_error" in drawing
