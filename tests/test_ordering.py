"""The member orders of `bagwise.order_members`, each method against a direct reference
written from its definition (tests/_ordering_reference.py: the subensemble recomputed for
every candidate at every step), on many small seeded inputs, on given points and out of bag;
the out-of-bag curves against the prefix losses recomputed for each size; and, for every
method, plausible wrong variants of the reference that the same inputs tell apart, so that
each comparison can fail.

The inputs are built to tie: duplicated members (with their in-bag counts), labels and
probabilities in eighths (exact sums, ties in argmax and in the vote), few points, and one
member or one point. Out of bag, the entries a member does not predict are NaN (values,
probabilities), or the true class (labels: the value most likely to change an order if it
were read), so that reading them would show.
"""

from __future__ import annotations

import functools
import warnings
from fractions import Fraction

import _ordering_reference as ref
import numpy as np
import pytest

import bagwise

N_CASES = 60
KINDS = ("values", "probabilities", "labels")
METHODS = {
    "values": ("reduce_error", "residual_correlation"),
    "probabilities": ("reduce_error", "complementarity", "margin_distance", "orientation"),
    "labels": ("reduce_error", "complementarity", "margin_distance", "orientation"),
}
MARGINS = (0.075, 0.075, 0.2, 0.5, 1.0)


def _shape(seed, rng):
    """(n_members, n_points): 1 member, 1 point and both among the first cases, a few
    points every fifth case (signatures repeat, scores tie), else 1-12 members, 1-40
    points."""
    special = {0: (1, int(rng.integers(2, 41))), 1: (int(rng.integers(2, 13)), 1), 2: (1, 1)}
    if seed in special:
        return special[seed]
    if seed % 5 == 3:
        return int(rng.integers(2, 13)), int(rng.integers(2, 6))
    return int(rng.integers(1, 13)), int(rng.integers(1, 41))


@functools.cache
def _case(kind, seed):
    """One seeded input: members on given points, in-bag counts (`bagwise.resample`), the
    class count and a target margin."""
    rng = np.random.default_rng([seed, KINDS.index(kind)])
    n_members, n_points = _shape(seed, rng)
    n_classes = int(rng.integers(2, 5))
    if kind == "values":
        y = rng.normal(size=n_points)
        # a shared signal, a bias per member and noise (bagged members' look)
        members = (y + 0.7 * rng.normal(size=(n_members, 1))
                   + rng.normal(size=(n_members, n_points)))
    else:
        y = rng.integers(0, n_classes, size=n_points)
        skill = rng.uniform(0.2, 0.9, size=n_members)
        if kind == "labels":
            guess = rng.integers(0, n_classes, size=(n_members, n_points))
            members = np.where(rng.random((n_members, n_points)) < skill[:, None], y, guess)
        else:
            # eighths: exact float sums, so ties in the argmax and in the vote are real
            members = np.empty((n_members, n_points, n_classes))
            for m in range(n_members):
                for i in range(n_points):
                    weights = np.full(n_classes, (1 - skill[m]) / n_classes)
                    weights[y[i]] += skill[m]
                    members[m, i] = rng.multinomial(8, weights) / 8
    counts = np.array(bagwise.resample(n_points, n_members, rng=seed).counts, dtype=np.int64)
    # duplicated members (same predictions and counts): exact ties in every score
    for _ in range(int(rng.integers(0, 3)) if n_members > 1 else 0):
        source, target = rng.choice(n_members, size=2, replace=False)
        members[target] = members[source]
        counts[target] = counts[source]
    margin = MARGINS[seed % len(MARGINS)]
    return members, y, counts, n_classes, margin


def _inputs(kind, seed, out_of_bag):
    """(members, y, counts or None, n_classes) as given to the library and the reference;
    out of bag, every in-bag entry (one its member does not predict) is poisoned: NaN, or
    for labels the true class."""
    members, y, counts, n_classes, _ = _case(kind, seed)
    if not out_of_bag:
        return members, y, None, n_classes
    if kind == "labels":
        members = np.where(counts > 0, y[None, :], members)
    else:
        members = members.copy()
        members[counts > 0] = np.nan
    return members, y, counts, n_classes


@functools.cache
def _library(kind, method, seed, out_of_bag):
    members, y, counts, n_classes = _inputs(kind, seed, out_of_bag)
    with warnings.catch_warnings():
        # out of bag the first members may predict nowhere: curves NaN there, one warning
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        return bagwise.order_members(members, y, method=method, counts=counts,
                                     n_classes=None if kind == "values" else n_classes,
                                     folds=None, orders=3, target_margin=_case(kind, seed)[4],
                                     rng=seed)


def _reference(kind, method, seed, out_of_bag, **variant):
    members, y, counts, n_classes = _inputs(kind, seed, out_of_bag)
    return ref.order(method, members, kind, y, counts, n_classes,
                     target_margin=_case(kind, seed)[4], **variant)


CASES = [(kind, method, oob) for kind in KINDS for method in METHODS[kind]
         for oob in (False, True)]


def _id(case):
    kind, method, oob = case
    return f"{kind}-{method}-{'out_of_bag' if oob else 'points'}"


# -- the orders ------------------------------------------------------------------------------

@functools.cache
def _reference_order(kind, method, seed, out_of_bag):
    """(reference order, whether residual correlation decided a step by an exact tie at a
    correlation of ±1)."""
    ties = []
    extra = {"unit_ties": ties} if method == "residual_correlation" else {}
    return _reference(kind, method, seed, out_of_bag, **extra), bool(ties)


def _seeds(method, oob):
    """The cases of the main comparison."""
    return list(range(N_CASES))


def _mismatches(kind, method, oob, seeds):
    wrong = []
    for seed in seeds:
        got = _library(kind, method, seed, oob).order.tolist()
        expected = _reference_order(kind, method, seed, oob)[0]
        if got != expected:
            wrong.append(f"seed {seed}: library {got}, reference {expected}")
    return wrong


@pytest.mark.parametrize("case", CASES, ids=_id)
def test_order_is_the_reference_order(case):
    # Sources: each reference function's docstring (Margineantu & Dietterich 1997;
    # Martínez-Muñoz & Suárez 2004, 2006; Martínez-Muñoz, Hernández-Lobato & Suárez 2009;
    # residual correlation and every out-of-bag and tie rule: src/ordering.rs).
    kind, method, oob = case
    seeds = _seeds(method, oob)
    assert len(seeds) >= 40
    wrong = _mismatches(kind, method, oob, seeds)
    assert not wrong, f"{len(wrong)} of {len(seeds)} orders differ:\n" + "\n".join(wrong[:5])


# -- exact ties of the definitions ------------------------------------------------------------
# src/ordering.rs: "Ties: lowest index" for every method, and "exact results; the incremental
# forms give the orders of recomputing the ensemble per candidate". In the cases below the
# definition gives candidates exactly equal scores, where a float rearrangement of it would
# leave them a rounding error apart (each was such a defect once). Each is a minimal input,
# checked against the reference, with the premise (an exact tie) asserted on its side.


def test_residual_correlation_on_two_points_is_undefined():
    # two points: member 0 has the lowest squared error; a Pearson correlation of two points
    # is ±1 whatever the residuals (numpy.corrcoef), so it tells members 1 and 2 nothing:
    # both are undefined, and the tie goes to the lower index
    members, y = np.array([[0.1, 0.2], [2.0, 1.4], [1.6, 0.4]]), np.zeros(2)
    for m in (1, 2):
        assert abs(np.corrcoef(members[m] - y, members[0] - y)[0, 1]) == pytest.approx(1.0)
    expected = ref.residual_correlation(members, "values", y)
    assert expected == [0, 1, 2]
    result = bagwise.order_members(members, y, method="residual_correlation", folds=None,
                                   orders=1)
    assert result.order.tolist() == expected


def test_orientation_exact_tie_of_angles_minimal():
    # 6 points, all of class 0; signatures c_0 = (-1,-1,-1,-1,+1,+1), c_1 = (+1,+1,+1,+1,-1,+1),
    # c_2 = (+1,+1,-1,+1,-1,-1); c_ens = (1,1,-1,1,-1,1), a = 2/6, o = 1 - c_ens/3 and
    # <c_0, o> = <c_2, o> = -4/3 with |c_0| = |c_2|: equal angles, so 0 before 2
    labels = np.array([[1, 1, 1, 1, 0, 0], [0, 0, 0, 0, 1, 0], [0, 0, 1, 0, 1, 1]])
    y = np.zeros(6, dtype=np.int64)
    signatures = np.where(labels == y, 1, -1)
    ens = signatures.sum(axis=0)
    o = 1 - Fraction(int(ens.sum()), int(ens @ ens)) * ens.astype(object)
    assert sum(signatures[0] * o) == sum(signatures[2] * o)  # the premise: an exact tie
    expected = ref.orientation(labels, "labels", y, n_classes=2)
    result = bagwise.order_members(labels, y, method="orientation", n_classes=2, folds=None,
                                   orders=1)
    assert result.order.tolist() == expected


def test_reduce_error_out_of_bag_duplicate_of_a_chosen_member_minimal():
    # member 0 predicts nowhere (in bag at both points), members 1 and 2 are equal and out of
    # bag at both. Member 1 first (lower loss than the fill); then adding member 0 or the
    # duplicate 2 leaves every point's mean, so the total loss, exactly unchanged: a tie, so
    # 0 before 2 (src/ordering.rs: greedy total, ties to the lowest index)
    members = np.array([[np.nan, np.nan], [0.3, -0.6], [0.3, -0.6]])
    y = np.array([1.0, -0.3])
    counts = np.array([[1, 1], [0, 0], [0, 0]])
    expected = ref.reduce_error(members, "values", y, counts)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bagwise.BagwiseWarning)
        result = bagwise.order_members(members, y, counts=counts, folds=None, orders=1)
    assert result.order.tolist() == expected


def test_the_cases_cover_the_edges():
    # the edges the comparisons rely on, checked rather than assumed: 1 member, 1 point, both,
    # the size ranges, duplicated members, members predicting nowhere out of bag, 2-4 classes
    shapes = [_case("labels", seed)[0].shape for seed in range(N_CASES)]
    assert (1, 1) in shapes and any(m == 1 and n > 1 for m, n in shapes)
    assert any(n == 1 and m > 1 for m, n in shapes)
    assert all(1 <= m <= 12 and 1 <= n <= 40 for m, n in shapes)
    duplicated = sum(len({r.tobytes() for r in _case(k, s)[0]}) < _case(k, s)[0].shape[0]
                     for k in KINDS for s in range(N_CASES))
    assert duplicated >= 30
    nowhere = sum(bool(((_case(k, s)[2] > 0).all(axis=1)).any())
                  for k in KINDS for s in range(N_CASES))
    assert nowhere >= 10
    assert {_case("labels", s)[3] for s in range(N_CASES)} == {2, 3, 4}


# -- the comparisons can fail ------------------------------------------------------------------

CLASSES = ("probabilities", "labels")
BOTH = (False, True)
VARIANTS = [
    # (method, kinds, out-of-bag modes, wrong variant of the reference); the right version and
    # its source: the reference function's docstring
    # every method: ties to the highest index (right: lowest, src/ordering.rs)
    *[(method, kinds, BOTH, {"ties": "highest"}) for method, kinds in [
        ("reduce_error", KINDS), ("complementarity", CLASSES), ("margin_distance", CLASSES),
        ("orientation", CLASSES), ("residual_correlation", ("values",))]],
    # greedy on the out-of-bag error of the covered points (right: the greedy total with the
    # fill of uncovered points, src/ordering.rs)
    ("reduce_error", KINDS, (True,), {"fill_uncovered": False}),
    # an uncovered point counted as an error / at the mean target (the fill before the
    # members' mean loss: it favoured members with many out-of-bag rows)
    ("reduce_error", KINDS, (True,), {"fill_as_error": True}),
    # vote ties to the highest class (right: lowest, src/ordering.rs, members::vote)
    ("reduce_error", CLASSES, BOTH, {"class_ties": "highest"}),
    # an empty subensemble / an uncovered point counted as right (src/ordering.rs: wrong)
    ("complementarity", CLASSES, BOTH, {"uncovered_wrong": False}),
    # the distance of the summed signature (Martínez-Muñoz, Hernández-Lobato & Suárez 2009:
    # of the mean signature, 1/u)
    ("margin_distance", CLASSES, BOTH, {"divide_by_size": False}),
    # decreasing angle (Martínez-Muñoz & Suárez 2006: increasing)
    ("orientation", CLASSES, BOTH, {"increasing_angle": False}),
    # the most correlated member; the summed residual out of bag (src/ordering.rs: least
    # correlated with the mean residual)
    ("residual_correlation", ("values",), BOTH, {"least_correlated": False}),
    ("residual_correlation", ("values",), (True,), {"mean_residual": False}),
]
VARIANT_CASES = [(kind, method, oob, variant) for method, kinds, modes, variant in VARIANTS
                 for kind in kinds for oob in modes]


def _variant_id(case):
    kind, method, oob, variant = case
    (name, value), = variant.items()
    return f"{_id((kind, method, oob))}-{name}={value}"


@pytest.mark.parametrize("case", VARIANT_CASES, ids=_variant_id)
def test_a_wrong_variant_gives_another_order(case):
    kind, method, oob, variant = case
    # on the cases the main comparison checks (where the library agrees with the reference)
    differ = any(_reference(kind, method, seed, oob, **variant)
                 != _library(kind, method, seed, oob).order.tolist()
                 for seed in _seeds(method, oob))
    assert differ, f"the wrong variant {variant} agrees with the library on every case"


# -- the out-of-bag curves ------------------------------------------------------------------

@pytest.mark.parametrize("kind", KINDS)
def test_out_of_bag_curves_are_the_prefix_losses(kind):
    # the out-of-bag error of the first k members (Breiman 1996; the mean over the points
    # with >= 1 out-of-bag member among them, NaN where none: src/ordering.rs, MemberOrder)
    method = METHODS[kind][0]
    seen_nan = caught = 0
    for seed in range(N_CASES):
        members, y, counts, n_classes = _inputs(kind, seed, True)
        result = _library(kind, method, seed, True)
        expected = ref.prefix_losses(members, kind, y, counts, result.order, n_classes)
        np.testing.assert_allclose(result.curve, expected, rtol=1e-12, atol=0,
                                   err_msg=f"seed {seed}")
        randoms = [ref.prefix_losses(members, kind, y, counts, o, n_classes)
                   for o in result.member_orders]
        random = np.mean(randoms, axis=0)
        np.testing.assert_allclose(result.random_curve, random, rtol=1e-12, atol=0,
                                   err_msg=f"seed {seed}")
        seen_nan += bool(np.isnan([expected, *randoms]).any())
        wrong = ref.prefix_losses(members, kind, y, counts, result.order, n_classes,
                                  over_all_points=True)
        caught += not np.allclose(result.curve, wrong, rtol=1e-12, atol=0, equal_nan=True)
    assert seen_nan >= 5  # the NaN rule is exercised
    assert caught >= 1  # dividing by every point instead of the covered ones is told apart
