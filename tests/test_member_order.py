"""The `MemberOrder` result: what its curves, `members_within`, `evaluate`, display, figure and
diagnosis section say, read against definitions computed here in numpy (the orders themselves
are checked against independent references in tests/test_ordering.py)."""

from __future__ import annotations

import json
import pickle
import warnings

import numpy as np
import pytest

import bagwise
from bagwise.plots import plot_member_order


def _regression(n_members=12, n_points=160, seed=0):
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n_points)
    # members share a signal, each with its own bias and noise (a bagged ensemble's look)
    members = (y + 0.6 * rng.normal(size=(n_members, 1)) + rng.normal(size=(n_members, n_points)))
    return members, y


def _classes(n_members=15, n_points=200, n_classes=3, seed=0):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, n_classes, size=n_points)
    logits = rng.normal(size=(n_members, n_points, n_classes))
    logits[:, np.arange(n_points), y] += rng.uniform(0.2, 1.5, size=(n_members, 1))
    probabilities = np.exp(logits) / np.exp(logits).sum(axis=2, keepdims=True)
    return probabilities, y


def _mean_loss(members, y, subset):
    """Loss of the members ``subset`` (common practice: squared error of the mean; error rate
    of the mean probability, ties to the lowest class)."""
    mean = members[subset].mean(axis=0)
    if members.ndim == 2:
        return float(np.mean((mean - y) ** 2))
    return float(np.mean(np.argmax(mean, axis=1) != y))


@pytest.mark.parametrize("data", [_regression, _classes])
def test_curves_are_the_losses_of_prefixes(data):
    members, y = data()
    result = bagwise.order_members(members, y, orders=4, rng=3)
    m = members.shape[0]
    np.testing.assert_array_equal(result.sizes, np.arange(1, m + 1))
    assert sorted(result.order.tolist()) == list(range(m))
    expected = [_mean_loss(members, y, result.order[:k]) for k in range(1, m + 1)]
    np.testing.assert_allclose(result.curve, expected, rtol=1e-12, atol=1e-15)
    random = np.mean([[_mean_loss(members, y, o[:k]) for k in range(1, m + 1)]
                      for o in result.member_orders], axis=0)
    np.testing.assert_allclose(result.random_curve, random, rtol=1e-12, atol=1e-15)
    assert result.member_orders.shape == (4, m)
    assert all(sorted(o.tolist()) == list(range(m)) for o in result.member_orders)
    assert result.ensemble_loss == pytest.approx(_mean_loss(members, y, np.arange(m)), rel=1e-12)
    # the honest curve ends at the full ensemble's loss (every fold's last size is all members)
    assert result.honest_curve[-1] == pytest.approx(result.ensemble_loss, rel=1e-12)


def test_the_honest_curve_is_the_cross_fitted_loss():
    members, y = _regression()
    result = bagwise.order_members(members, y, folds=3, rng=5)
    # rebuild the folds from the seed the result reports, as documented: point perm[i] goes
    # to fold i % folds, the permutation drawn after the random orders
    generator = np.random.default_rng(result.seed)
    for _ in range(result.orders):
        generator.permutation(members.shape[0])
    fold = np.empty(len(y), dtype=np.int64)
    fold[generator.permutation(len(y))] = np.arange(len(y)) % 3
    expected = np.zeros(members.shape[0])
    for f in range(3):
        held = fold == f
        chosen = bagwise.order_members(members[:, ~held], y[~held], folds=None).order
        expected += held.mean() * np.array(
            [_mean_loss(members[:, held], y[held], chosen[:k])
             for k in range(1, members.shape[0] + 1)])
    np.testing.assert_allclose(result.honest_curve, expected, rtol=1e-12)


def _oob_loss(members, counts, y, subset):
    """Out-of-bag loss of ``subset`` (Breiman 1996): each point's mean over the members of
    ``subset`` that did not draw it, averaged over the points some of them leave out."""
    out = counts[subset] == 0
    reached = out.any(axis=0)
    if not reached.any():
        return np.nan, 0
    mean = (np.where(out, members[subset], 0.0).sum(axis=0)[reached] / out.sum(axis=0)[reached])
    return float(np.mean((mean - y[reached]) ** 2)), int(reached.sum())


def test_the_honest_curve_out_of_bag_weights_folds_by_the_points_they_reach():
    members, y = _regression(n_members=8, n_points=60, seed=11)
    counts = bagwise.resample(60, 8, rng=11).counts
    result = bagwise.order_members(members, y, counts=counts, folds=2, rng=3)
    generator = np.random.default_rng(result.seed)
    for _ in range(result.orders):
        generator.permutation(8)
    fold = np.empty(60, dtype=np.int64)
    fold[generator.permutation(60)] = np.arange(60) % 2
    total, weight, share = np.zeros(8), np.zeros(8), np.zeros(8)
    for f in range(2):
        held = fold == f
        chosen = bagwise.order_members(members[:, ~held], y[~held], counts=counts[:, ~held],
                                       folds=None).order
        for k in range(1, 9):
            loss, reached = _oob_loss(members[:, held], counts[:, held], y[held], chosen[:k])
            if reached:
                total[k - 1] += loss * reached
                weight[k - 1] += reached
                share[k - 1] += loss * held.mean()
    with np.errstate(invalid="ignore"):
        np.testing.assert_allclose(result.honest_curve, total / weight, rtol=1e-12)
    # at all members every fold's reached points are the full ensemble's (ends where it does)
    assert result.honest_curve[-1] == pytest.approx(result.ensemble_loss, rel=1e-12)
    # the plausible wrong variant, weighting folds by their share of all points, misses it
    assert not np.allclose(share[~np.isnan(total / weight)], (total / weight)[weight > 0])


def test_members_within_reads_the_chosen_curve():
    members, y = _regression()
    result = bagwise.order_members(members, y)
    def stays(values, tolerance):
        inside = values <= (1 + tolerance) * result.ensemble_loss * (1 + 1e-12)
        # from `found` on every size is inside, and the size before it is not
        return next(k for k in range(1, len(values) + 1) if inside[k - 1:].all())

    for curve, values in (("honest", result.honest_curve), ("selected", result.curve)):
        for tolerance in (0.01, 0.1, 0.5):
            assert result.members_within(tolerance, curve) == stays(values, tolerance)
    # random: the median over the random orders of each order's own size (common practice:
    # one order against one order, not against the smoother mean of the curves)
    np.testing.assert_allclose(result.random_curves.mean(axis=0), result.random_curve)
    for tolerance in (0.01, 0.1, 0.5):
        sizes = [stays(c, tolerance) for c in result.random_curves]
        assert result.members_within(tolerance, "random") == int(np.ceil(np.median(sizes)))
    with pytest.warns(bagwise.BagwiseWarning, match="no honest curve"):
        assert np.isnan(bagwise.order_members(members, y, folds=None).members_within())
    with pytest.raises(ValueError, match="`curve`: expected one of"):
        result.members_within(0.01, "best")
    with pytest.raises(ValueError, match="`tolerance`"):
        result.members_within(0)


def test_evaluate_measures_the_order_on_new_points():
    members, y = _regression(n_points=300, seed=1)
    chosen = bagwise.order_members(members[:, :150], y[:150])
    held = chosen.evaluate(members[:, 150:], y[150:])
    assert held.held_out and held.n_points == 150
    np.testing.assert_array_equal(held.order, chosen.order)
    expected = [_mean_loss(members[:, 150:], y[150:], chosen.order[:k])
                for k in range(1, members.shape[0] + 1)]
    np.testing.assert_allclose(held.curve, expected, rtol=1e-12)
    np.testing.assert_array_equal(held.honest_curve, held.curve)
    with pytest.raises(ValueError, match="`members`: has 5 members but the order has 12"):
        chosen.evaluate(members[:5, 150:], y[150:])
    with pytest.raises(TypeError, match="`members`: the order was chosen on value"):
        chosen.evaluate(*_classes(n_members=12))


def test_out_of_bag_mode_reads_only_out_of_bag_entries():
    members, y = _regression(n_members=20, n_points=200)
    counts = bagwise.resample(200, members.shape[0], rng=2).counts
    hidden = np.where(counts > 0, np.nan, members)
    result = bagwise.order_members(hidden, y, counts=counts)
    again = bagwise.order_members(np.where(counts > 0, 1e6, members), y, counts=counts)
    np.testing.assert_array_equal(result.order, again.order)
    np.testing.assert_array_equal(result.curve, again.curve)
    assert result.selected_on == "out_of_bag"
    # the full ensemble's loss is bagwise.out_of_bag's (Breiman 1996 out-of-bag estimate)
    oob = bagwise.out_of_bag(np.where(counts > 0, 0.0, members), counts, y)
    assert result.ensemble_loss == pytest.approx(oob.ensemble_loss, rel=1e-12)


def test_results_do_not_depend_on_threads_and_pickle():
    members, y = _classes()
    one = bagwise.order_members(members, y, method="margin_distance", n_jobs=1)
    two = bagwise.order_members(members, y, method="margin_distance", n_jobs=2)
    for name in ("order", "curve", "random_curve", "honest_curve"):
        np.testing.assert_array_equal(getattr(one, name), getattr(two, name))
    back = pickle.loads(pickle.dumps(one))
    np.testing.assert_array_equal(back.order, one.order)


def test_display_frame_summary_and_figure():
    members, y = _classes()
    result = bagwise.order_members(members, y, method="complementarity")
    text = repr(result)
    assert "complementarity (Martínez-Muñoz & Suárez 2004)" in text
    assert "optimistic" not in text or "honest" in text
    assert f"a random order from {result.members_within(0.01, 'random')} on" in text
    assert "<table" in result._repr_html_()
    frame = result.to_frame()
    assert list(frame.columns) == ["size", "curve", "honest_curve", "random_curve"]
    assert len(frame) == members.shape[0]
    summary = result.summary()
    json.dumps(summary)
    assert summary["members_within"] == result.members_within(0.01)
    assert summary["best_loss"] == pytest.approx(np.nanmin(result.honest_curve))
    import matplotlib.pyplot as plt

    ax = plot_member_order(result)
    labels = [line.get_label() for line in ax.get_lines()]
    assert any("random order" in label for label in labels)
    assert any("cross-fitted" in label for label in labels)
    plt.close(ax.figure)
    with pytest.raises(TypeError, match="`member_order`"):
        plot_member_order(members)


@pytest.mark.parametrize("kwargs, error, match", [
    ({"method": "orientation"}, ValueError, "`method`: for regression expected one of"),
    ({"method": 3}, TypeError, "`method`: expected a string"),
    ({"folds": 1}, ValueError, "`folds`: cross-fitting needs at least 2 folds"),
    ({"folds": 10**6}, ValueError, "`folds`: 1000000 folds but only 160 points"),
    ({"orders": 0}, ValueError, "`orders`"),
    ({"orders": 10**12}, MemoryError, "`orders`"),
    ({"target_margin": 0.0}, ValueError, "`target_margin`: must lie in"),
    ({"target_margin": "small"}, TypeError, "`target_margin`: expected a number"),
    ({"n_classes": 3}, ValueError, "`n_classes`: only for class predictions"),
    ({"rng": -1}, ValueError, "`rng`"),
])
def test_bad_options_are_named(kwargs, error, match):
    members, y = _regression()
    with pytest.raises(error, match=match):
        bagwise.order_members(members, y, **kwargs)


def test_diagnose_reports_the_redundant_members():
    members, y = _regression(n_points=200)
    counts = bagwise.resample(150, members.shape[0], rng=0).counts
    rng = np.random.default_rng(4)
    y_train = rng.normal(size=150)
    train = y_train + rng.normal(size=(members.shape[0], 150))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # with the training rows: chosen out of bag there, measured on the diagnosed points
        diagnosis = bagwise.diagnose(members, y, counts=counts, train_members=train,
                                     y_train=y_train)
        alone = bagwise.diagnose(members, y)
    section = diagnosis.ordering
    assert section.held_out and section.selected_on == "out_of_bag"
    chosen = bagwise.order_members(train, y_train, counts=counts, folds=None)
    np.testing.assert_array_equal(section.order, chosen.order)
    np.testing.assert_allclose(section.curve, chosen.evaluate(members, y).curve)
    readings = " ".join(diagnosis.readings())
    within = section.members_within(0.01)
    assert f"from {within} of {members.shape[0]} members on, the loss stays within 1%" in readings
    assert "out-of-bag predictions" in readings
    assert diagnosis.summary()["ordering"]["members_within"] == within
    # without them: chosen and cross-fitted on the diagnosed points
    assert not alone.ordering.held_out and alone.ordering.folds == 2
    assert "cross-fitted over 2 folds" in " ".join(alone.readings())


def test_diagnose_orders_a_seeded_sample_of_many_points(monkeypatch):
    from bagwise.sections import ordering

    monkeypatch.setattr(ordering, "MAX_POINTS", 120)
    members, y = _regression(n_points=300)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first, again = bagwise.diagnose(members, y, rng=7), bagwise.diagnose(members, y, rng=7)
        other = bagwise.diagnose(members, y, rng=8)
    section = first.ordering
    assert section.n_points == 120
    np.testing.assert_array_equal(section.curve, again.ordering.curve)  # the seed fixes it
    assert not np.array_equal(section.curve, other.ordering.curve)
    # the sample: 120 distinct points drawn from the diagnosis seed's own stream, in order
    points = np.sort(np.random.default_rng([7, 15]).choice(300, 120, replace=False))
    direct = bagwise.order_members(members[:, points], y[points], rng=7)
    np.testing.assert_array_equal(section.order, direct.order)
    np.testing.assert_array_equal(section.honest_curve, direct.honest_curve)
    assert "(a sample of 120 of the 300 points)" in " ".join(first.readings())
