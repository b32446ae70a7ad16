"""`prune`: a smaller fitted bag of the first members of an order, which keeps its in-bag
counts, saves, loads, pickles and diagnoses exactly like the same members of the full bag."""

from __future__ import annotations

import pickle
import warnings

import numpy as np
import pytest
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

import bagwise
from bagwise.diagnosis import _diagnose


def _data(classification, n=160, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 4))
    signal = x[:, 0] + np.sin(2 * x[:, 1]) + 0.5 * x[:, 2] * x[:, 3]
    if classification:
        return x, np.where(signal + 0.5 * rng.normal(size=n) > 0, "wet", "dry")
    return x, signal + 0.5 * rng.normal(size=n)


BAGS = {
    "tree": lambda: bagwise.BagRegressor("tree", n_members=24, max_depth=6, random_state=1),
    "linear": lambda: bagwise.BagRegressor("linear", n_members=12, penalty=0.1, random_state=1),
    "neighbors": lambda: bagwise.BagRegressor("neighbors", n_members=10, neighbors=5,
                                              random_state=1),
    "tree_classes": lambda: bagwise.BagClassifier("tree", n_members=24, max_depth=5,
                                                  random_state=1),
    "wrapped": lambda: bagwise.BagRegressor(DecisionTreeRegressor(max_depth=4), n_members=12,
                                            random_state=1),
    "wrapped_classes": lambda: bagwise.BagClassifier(DecisionTreeClassifier(max_depth=3),
                                                     n_members=12, random_state=1),
}


def _fitted(name):
    bag = BAGS[name]()
    x, y = _data(isinstance(bag, bagwise.BagClassifier))
    return bag.fit(x[:120], y[:120]), x[120:], y[120:]


@pytest.fixture(scope="module", params=sorted(BAGS))
def fitted(request):
    return (request.param, *_fitted(request.param))


def _keep(bag, k):
    return np.sort(bag.order_members(folds=None).order[:k])


def test_pruned_members_are_the_full_bags_rows(fitted):
    name, bag, x, y = fitted
    k = bag.n_members // 3
    pruned = bag.prune(k)
    kept = _keep(bag, k)
    np.testing.assert_array_equal(pruned.member_indices_, kept)
    assert pruned.n_members == k and pruned.get_params()["n_members"] == k
    assert type(pruned) is type(bag) and pruned is not bag
    np.testing.assert_array_equal(pruned.in_bag_, bag.in_bag_[kept])
    # Member for member the same predictions (native `select`, or the same fitted clones).
    np.testing.assert_array_equal(pruned.member_predictions(x), bag.member_predictions(x)[kept])
    np.testing.assert_array_equal(pruned.out_of_bag_predictions(),
                                  bag.out_of_bag_predictions()[kept])
    # The ensemble prediction is the kept members' mean, summed in member order.
    members = bag.member_predictions(x)[kept]
    total = members[0].copy()
    for values in members[1:]:
        total += values
    mean = total / k
    if isinstance(bag, bagwise.BagClassifier):
        np.testing.assert_allclose(pruned.predict_proba(x), mean, rtol=0, atol=1e-15)
        np.testing.assert_array_equal(pruned.predict(x), bag.classes_[np.argmax(mean, axis=1)])
    else:
        np.testing.assert_allclose(pruned.predict(x), mean, rtol=1e-15, atol=1e-15)
    # The full bag is untouched.
    assert bag.in_bag_.shape[0] == bag.n_members and "member_indices_" not in bag.__dict__


@pytest.mark.filterwarnings("ignore")
def test_diagnostics_of_a_pruned_bag_equal_those_of_its_member_subset(fitted):
    name, bag, x, y = fitted
    k = max(2, bag.n_members // 2)
    pruned = bag.prune(k)
    kept = pruned.member_indices_
    oob = bagwise.out_of_bag(bag.out_of_bag_predictions()[kept], bag.in_bag_[kept],
                             bag._train_y)
    assert pruned.out_of_bag().ensemble_loss == oob.ensemble_loss
    mine = pruned.diagnose(x, y).summary()
    members = bag.member_predictions(x)[kept]
    train, train_y = bag._training_members()
    # The bag's diagnose is the generic one of its member arrays, given the same arguments.
    direct = _diagnose(members, bag._targets(y, len(y)), counts=bag.in_bag_[kept],
                       reference=None, train_members=train[kept], train_y=train_y, seed=0,
                       n_jobs=bag.n_jobs, members_are_training=False, member_count="fixed",
                       group_size=0, progress=False)
    assert mine == direct.summary()


@pytest.mark.parametrize("name", ["tree", "linear", "neighbors", "tree_classes"])
def test_save_load_and_pickle_keep_a_pruned_bag(name, tmp_path):
    bag, x, _ = _fitted(name)
    pruned = bag.prune(0.25)
    assert pruned.n_members == max(1, round(0.25 * bag.n_members))
    path = tmp_path / "pruned.bagwise"
    pruned.save(path)
    for back in (bagwise.load(path), pickle.loads(pickle.dumps(pruned))):
        assert type(back) is type(pruned)
        assert back.get_params() == pruned.get_params()
        np.testing.assert_array_equal(back.member_indices_, pruned.member_indices_)
        np.testing.assert_array_equal(back.in_bag_, pruned.in_bag_)
        np.testing.assert_array_equal(back.member_predictions(x), pruned.member_predictions(x))


def test_pruning_twice_composes_the_member_indices():
    bag, x, _ = _fitted("tree")
    once = bag.prune(12)
    twice = once.prune(5)
    np.testing.assert_array_equal(twice.member_indices_,
                                  once.member_indices_[_keep(once, 5)])
    np.testing.assert_array_equal(twice.member_predictions(x),
                                  bag.member_predictions(x)[twice.member_indices_])


def test_smallest_keeps_the_size_from_which_the_honest_curve_stays_within_tolerance():
    bag, _, _ = _fitted("tree")
    order = bag.order_members()
    curve, full = order.honest_curve, order.ensemble_loss
    # The definition, read off the curve directly (common practice for "within 1%"): the
    # size after the last one outside the band
    outside = [k for k in range(1, len(curve) + 1) if not curve[k - 1] <= 1.01 * full * (1 + 1e-12)]
    expected = outside[-1] + 1 if outside else 1
    pruned = bag.prune("smallest", order=order)
    assert pruned.n_members == expected
    np.testing.assert_array_equal(pruned.member_indices_, np.sort(order.order[:expected]))
    looser = bag.prune("smallest", tolerance=0.5, order=order)
    assert looser.n_members <= pruned.n_members


def test_a_validation_set_chooses_the_order():
    bag, x, y = _fitted("tree")
    chosen = bag.order_members(x, y, folds=None)
    assert chosen.selected_on == "points" and chosen.n_points == len(y)
    direct = bagwise.order_members(bag.member_predictions(x), y, folds=None, rng=bag.seed_)
    np.testing.assert_array_equal(chosen.order, direct.order)
    pruned = bag.prune(5, X=x, y=y)
    np.testing.assert_array_equal(pruned.member_indices_, np.sort(direct.order[:5]))


def test_a_refit_forgets_the_pruning():
    bag, x, _ = _fitted("tree")
    pruned = bag.prune(6)
    xs, ys = _data(False, seed=3)
    pruned.fit(xs, ys)
    assert "member_indices_" not in pruned.__dict__
    assert pruned.in_bag_.shape[0] == 6


@pytest.mark.parametrize("n_members, error, match", [
    (0, ValueError, "`n_members`: must lie in 1..24"),
    (25, ValueError, "`n_members`: must lie in 1..24"),
    (1.5, ValueError, "`n_members`: a share must lie in"),
    (0.0, ValueError, "`n_members`: a share must lie in"),
    ("all", ValueError, "`n_members`: expected a count"),
    (True, TypeError, "`n_members`: expected a count"),
    (None, TypeError, "`n_members`: expected a count"),
])
def test_bad_sizes_are_named(n_members, error, match):
    bag, _, _ = _fitted("tree")
    with pytest.raises(error, match=match):
        bag.prune(n_members)


def test_bad_orders_are_named():
    bag, _, _ = _fitted("tree")
    small, _, _ = _fitted("wrapped")
    with pytest.raises(ValueError, match="`order`: orders 12 members but this bag has 24"):
        bag.prune(3, order=small.order_members())
    with pytest.raises(TypeError, match="`order`: expected a MemberOrder"):
        bag.prune(3, order=np.arange(24))
    with pytest.raises(ValueError, match="`order`: has no honest curve"):
        bag.prune("smallest", order=bag.order_members(folds=None))


def test_a_loaded_bag_is_pruned_with_its_training_rows(tmp_path):
    bag, x, _ = _fitted("tree")
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    back = bagwise.load(path)
    with pytest.raises(ValueError, match="`X`: give the training rows"):
        back.prune(4)
    xs, ys = _data(False)
    order = back.order_members(xs[:120], ys[:120], out_of_bag=True)
    np.testing.assert_array_equal(order.order, bag.order_members().order)
    np.testing.assert_array_equal(back.prune(4, order=order).member_predictions(x),
                                  bag.prune(4).member_predictions(x))


def test_bayesian_weights_have_no_out_of_bag_order():
    xs, ys = _data(False)
    bag = bagwise.BagRegressor("linear", n_members=6, scheme="bayesian", random_state=0).fit(xs, ys)
    with pytest.raises(ValueError, match="`scheme`"):
        bag.prune(3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert bag.prune(3, X=xs, y=ys).n_members == 3   # a validation set still works
