"""Direct references for the member orders of `bagwise.order_members`, written from each
method's definition (sources beside each function; the out-of-bag rules, the fill of
uncovered points and the tie rules are the ones `src/ordering.rs` documents).

Every greedy method here recomputes the subensemble "chosen so far + candidate" from the raw
member predictions for every candidate at every step: no running sums, no Gram matrix, no
bitsets. Slow on purpose; only for small inputs.

Where a comparison decides an order and its scores can tie exactly (integer signatures,
Pearson correlations of two points), the scores are computed in exact rational arithmetic
(`fractions.Fraction`, numpy object arrays), so that a tie in the definition is a tie here
and goes to the documented tie rule instead of to rounding. Float scores (squared errors)
are compared as computed; the test inputs make them tie only through duplicated members,
whose scores are then computed by the same float operations.

Every function takes ``ties="lowest"`` (the documented rule: lowest member index among equal
scores) or ``"highest"`` (a wrong variant, to show that the tests can fail), and a few
take a switch for another plausible wrong variant of their definition.

Inputs: ``members`` values ``(M, n)``, probabilities ``(M, n, C)`` or integer labels
``(M, n)``; ``kind`` one of ``"values"``, ``"probabilities"``, ``"labels"``; ``counts``
``(M, n)`` in-bag counts or None. Member m is read at point i only where
``counts[m, i] == 0``; its other entries are never looked at (they may be NaN).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

__all__ = ["complementarity", "margin_distance", "order", "orientation", "prefix_losses",
           "reduce_error", "residual_correlation"]


# -- shared pieces -------------------------------------------------------------------------

def _read(members, counts):
    """(M, n) bool: where each member predicts (everywhere without counts)."""
    shape = members.shape[:2]
    return np.ones(shape, dtype=bool) if counts is None else np.asarray(counts) == 0


def _pick(candidates, scores, ties):
    """The candidate of lowest score; None scores (undefined) rank after every defined one;
    among equal scores the lowest member index (``ties="lowest"``, documented rule) or, as a
    wrong variant, the highest."""
    assert ties in ("lowest", "highest")
    defined = [(s, c) for c, s in zip(candidates, scores) if s is not None]
    pool = defined if defined else [(0, c) for c in candidates]
    best = min(s for s, _ in pool)
    tied = [c for s, c in pool if s == best]
    return min(tied) if ties == "lowest" else max(tied)


def _contributions(members, kind, read, n_classes):
    """(M, n, C) float: each member's vote at each point it predicts (its probabilities, or a
    one-hot row of its label), 0 where it does not predict (so unread NaN never enters)."""
    if kind == "probabilities":
        return np.where(read[:, :, None], members, 0.0)
    one_hot = np.zeros((*members.shape, n_classes))
    m_idx, i_idx = np.nonzero(read)
    one_hot[m_idx, i_idx, members[m_idx, i_idx]] = 1.0
    return one_hot


def _vote(totals, class_ties="lowest"):
    """Class of the aggregated vote: argmax, lowest class index among ties (np.argmax
    returns the first maximum; the tie rule of `members::vote`, documented in
    src/ordering.rs); ``class_ties="highest"`` is a wrong variant."""
    if class_ties == "highest":
        return totals.shape[-1] - 1 - np.argmax(totals[..., ::-1], axis=-1)
    return np.argmax(totals, axis=-1)


def _subensemble(members, kind, read, subset, n_classes, class_ties="lowest"):
    """(prediction, covered) of the members ``subset`` (a list, summed in its order): the
    mean value, or the vote of the summed probabilities / label counts, at each point over
    the members of ``subset`` that predict there; ``covered`` is k_i >= 1."""
    n = members.shape[1]
    k = np.zeros(n, dtype=np.int64)
    if kind == "values":
        total = np.zeros(n)
        for m in subset:
            total = total + np.where(read[m], members[m], 0.0)
            k += read[m]
        with np.errstate(invalid="ignore", divide="ignore"):
            return total / k, k > 0
    contrib = _contributions(members, kind, read, n_classes)
    totals = np.zeros((n, n_classes))
    for m in subset:
        totals = totals + contrib[m]
        k += read[m]
    return _vote(totals, class_ties), k > 0


def _member_right(members, kind, y, read):
    """(M, n) bool: member m is right at i (its label, or the argmax of its probabilities with
    ties to the lowest class, equals y_i) and predicts there."""
    if kind == "probabilities":
        labels = _vote(np.where(read[:, :, None], members, 0.0))
    else:
        labels = members
    return read & (labels == y[None, :])


def _signatures(members, kind, y, read):
    """(M, n) int: c_mi = +1 right, -1 wrong, 0 not predicting (Martínez-Muñoz & Suárez
    2006, from memory: c_ti = 2 I(h_t(x_i) = y_i) - 1; the 0 for points a member does not
    predict is the out-of-bag rule of src/ordering.rs)."""
    right = _member_right(members, kind, y, read)
    return np.where(read, np.where(right, 1, -1), 0).astype(np.int64)


def _signed_square(x):
    """sign(x) x², monotone in x, exact for Fractions (orders x without a square root)."""
    return x * x if x >= 0 else -(x * x)


# -- the methods -----------------------------------------------------------------------------

def reduce_error(members, kind, y, counts=None, n_classes=None, *, ties="lowest",
                 fill_uncovered=True, fill_as_error=False, class_ties="lowest"):
    """Reduce-error ordering: greedy forward selection, each step adding the member whose
    addition gives the subensemble of lowest loss on the points read (Margineantu &
    Dietterich 1997, "Pruning adaptive boosting", ICML, reduce-error pruning, from memory;
    here without its backfitting step, as src/ordering.rs states).

    Loss (src/ordering.rs "Loss of a subensemble", "greedy total"): regression the total
    squared error of the members' mean; classification the number of points whose vote
    (mean probability, or vote fractions, argmax lowest class) is not y. Out of bag, a point
    no member of the subensemble predicts counts at the mean loss of all the members that
    predict there: the share of them that are wrong, or the mean of (f_mi - y_i)²; 0 where
    none does. ``fill_uncovered=False`` is a wrong variant: the mean loss over the covered
    points only (the out-of-bag error of the subensemble); ``fill_as_error=True`` another
    (an uncovered point an error, or (y_i - ȳ)²); ``class_ties="highest"`` a third: vote
    ties to the highest class.
    """
    y = np.asarray(y)
    read = _read(members, counts)
    n_members, n_points = members.shape[:2]
    if kind == "values":
        with np.errstate(invalid="ignore"):
            own = np.where(read, (members - y) ** 2, 0.0)
        fill = [float(np.mean(own[read[:, i], i])) if read[:, i].any() else 0.0
                for i in range(n_points)]
        if fill_as_error:
            fill = list((y - float(np.mean(y))) ** 2)
    else:
        wrong = _signatures(members, kind, y, read) == -1
        fill = [Fraction(int(wrong[:, i].sum()), int(read[:, i].sum())) if read[:, i].any()
                else Fraction(0) for i in range(n_points)]
        if fill_as_error:
            fill = [Fraction(1)] * n_points
    fill = np.array(fill, dtype=object if kind != "values" else np.float64)
    chosen: list[int] = []
    while len(chosen) < n_members:
        candidates = [c for c in range(n_members) if c not in chosen]
        scores = []
        for c in candidates:
            prediction, covered = _subensemble(members, kind, read, chosen + [c], n_classes,
                                               class_ties)
            if kind == "values":
                with np.errstate(invalid="ignore"):
                    per_point = np.where(covered, (prediction - y) ** 2, fill)
            else:
                per_point = np.where(covered, (prediction != y).astype(object), fill)
            if fill_uncovered:
                scores.append(per_point.sum())
            else:
                scores.append(per_point[covered].mean() if covered.any() else None)
        chosen.append(_pick(candidates, scores, ties))
    return chosen


def complementarity(members, kind, y, counts=None, n_classes=None, *, ties="lowest",
                    uncovered_wrong=True):
    """Complementarity ordering (Martínez-Muñoz & Suárez 2004, "Aggregation ordering in
    bagging", the complementarity measure; Martínez-Muñoz, Hernández-Lobato & Suárez 2009,
    TPAMI 31(2); from memory): greedy; step u adds the member maximising the number of
    points where it is right and the subensemble of the members chosen so far is wrong,
    Σ_i I(h_m(x_i) = y_i and H_S(x_i) ≠ y_i).

    The subensemble's vote is its aggregated vote (mean probability or vote fractions, the
    loss definition of src/ordering.rs); an empty subensemble, or a point no chosen member
    predicts out of bag, is wrong (src/ordering.rs). ``uncovered_wrong=False`` is a wrong
    variant: such points count as right (never gained).
    """
    y = np.asarray(y)
    read = _read(members, counts)
    right = _member_right(members, kind, y, read)
    n_members = members.shape[0]
    chosen: list[int] = []
    while len(chosen) < n_members:
        vote, covered = _subensemble(members, kind, read, chosen, n_classes)
        wrong = np.where(covered, vote != y, uncovered_wrong)
        candidates = [c for c in range(n_members) if c not in chosen]
        # maximise the gain = minimise its negative
        scores = [-int(np.sum(right[c] & wrong)) for c in candidates]
        chosen.append(_pick(candidates, scores, ties))
    return chosen


def margin_distance(members, kind, y, counts=None, n_classes=None, *, target_margin,
                    ties="lowest", divide_by_size=True):
    """Margin distance minimisation (Martínez-Muñoz, Hernández-Lobato & Suárez 2009, IEEE
    TPAMI 31(2), "margin distance minimization"; from memory): with the reference point
    o = p (1, ..., 1), step u adds the member m minimising
    d(o, (1/u) (c_m + Σ_{j∈S} c_j)), c the signatures (+1 right, -1 wrong; 0 where a member
    does not predict, the out-of-bag rule of src/ordering.rs). The squared Euclidean
    distance is compared (same order), exactly. ``divide_by_size=False`` is a wrong
    variant: the distance of the summed signature, not the mean.
    """
    y = np.asarray(y)
    read = _read(members, counts)
    sig = _signatures(members, kind, y, read)
    n_members, n = sig.shape
    # the margin as written (0.2 is 1/5): a tie of the definition is a tie here
    p = Fraction(repr(float(target_margin)))
    chosen: list[int] = []
    while len(chosen) < n_members:
        u = len(chosen) + 1
        candidates = [c for c in range(n_members) if c not in chosen]
        scores = []
        for c in candidates:
            summed = sig[chosen + [c]].sum(axis=0).astype(object)
            mean = summed / Fraction(u) if divide_by_size else summed
            diff = np.full(n, p, dtype=object) - mean
            scores.append(sum(diff * diff))
        chosen.append(_pick(candidates, scores, ties))
    return chosen


def orientation(members, kind, y, counts=None, n_classes=None, *, ties="lowest",
                increasing_angle=True):
    """Orientation ordering (Martínez-Muñoz & Suárez 2006, "Pruning in ordered bagging
    ensembles", ICML; from memory): o is the projection of the diagonal (1, ..., 1) on the
    hyperplane orthogonal to the ensemble signature c_ens = Σ_m c_m,
    o = 1 - (⟨1, c_ens⟩ / ‖c_ens‖²) c_ens; the members are sorted by increasing angle
    between c_m and o, i.e. decreasing cos = ⟨c_m, o⟩ / (‖c_m‖ ‖o‖).

    Documented conventions of src/ordering.rs: o = 1 when c_ens = 0; when o = 0 (c_ens a
    non-zero multiple of the diagonal) by decreasing ⟨c_m, 1⟩ / ‖c_m‖; a member predicting
    nowhere (‖c_m‖ = 0) last; ties to the lowest index. Exact: ‖o‖ > 0 is common to all
    members, so cos is ordered by sign(⟨c_m, o⟩) ⟨c_m, o⟩² / ‖c_m‖².
    ``increasing_angle=False`` is a wrong variant: decreasing angle.
    """
    y = np.asarray(y)
    read = _read(members, counts)
    sig = _signatures(members, kind, y, read)
    n_members, n = sig.shape
    ens = sig.sum(axis=0)
    ones = np.full(n, Fraction(1), dtype=object)
    if not ens.any():
        o = ones
    else:
        o = ones - Fraction(int(ens.sum()), int((ens * ens).sum())) * ens.astype(object)
    if not any(o):
        o = ones  # the fallback: ⟨c_m, 1⟩ / ‖c_m‖
    keys = []
    for m in range(n_members):
        norm_sq = int((sig[m] * sig[m]).sum())
        if norm_sq == 0:
            keys.append(None)
            continue
        cosine = _signed_square(sum(sig[m].astype(object) * o)) / norm_sq
        keys.append(-cosine if increasing_angle else cosine)
    # a stable sort by key is the repeated pick of the smallest key, ties by the rule
    remaining = list(range(n_members))
    ordered: list[int] = []
    while remaining:
        best = _pick(remaining, [keys[m] for m in remaining], ties)
        ordered.append(best)
        remaining.remove(best)
    return ordered


def residual_correlation(members, kind, y, counts=None, n_classes=None, *, ties="lowest",
                         mean_residual=True, least_correlated=True, unit_ties=None):
    """Residual correlation ordering (regression; bagwise's own method, defined in
    src/ordering.rs in the spirit of complementarity): first the member of lowest mean
    squared error over the points it predicts; then, at each step, the member whose residual
    e_m = f_m - y has the smallest Pearson correlation with the subensemble's mean residual
    r_i = Σ_{s∈S, s predicts i} e_si / k_i over the points where both are defined.
    Undefined (ranks after every defined one): fewer than 3 common points, or a variance
    ≤ 1e-12 × the mean square of its values. Correlations are compared exactly, through
    sign(cov) cov² / (var_e var_r).

    Wrong variants: ``mean_residual=False`` correlates with the subensemble's summed residual
    (differs out of bag, where k_i varies); ``least_correlated=False`` takes the most
    correlated member.

    ``unit_ties``: a list to which the steps decided by a tie of two or more candidates at a
    correlation of exactly -1 or +1 are appended as (step, tied candidates).
    """
    y = np.asarray(y, dtype=np.float64)
    read = _read(members, counts)
    n_members, n = members.shape
    residual = np.full((n_members, n), None, dtype=object)
    for m in range(n_members):
        for i in np.flatnonzero(read[m]):
            residual[m, i] = Fraction(float(members[m, i])) - Fraction(float(y[i]))
    tiny = Fraction(1, 10**12)

    def spread(v):
        mean = sum(v) / len(v)
        centred = v - mean
        var = sum(centred * centred) / len(v)
        square = sum(v * v) / len(v)
        return centred, var, var <= tiny * square or var == 0

    chosen: list[int] = []
    while len(chosen) < n_members:
        candidates = [c for c in range(n_members) if c not in chosen]
        scores = []
        if not chosen:
            for c in candidates:
                points = np.flatnonzero(read[c])
                scores.append(sum(residual[c, points] ** 2) / len(points) if len(points)
                              else None)
            chosen.append(_pick(candidates, scores, ties))
            continue
        k = read[chosen].sum(axis=0)
        r = np.full(n, None, dtype=object)
        for i in np.flatnonzero(k):
            total = sum(residual[s, i] for s in chosen if read[s, i])
            r[i] = total / int(k[i]) if mean_residual else total
        for c in candidates:
            common = np.flatnonzero(read[c] & (k > 0))
            if len(common) < 3:  # on 2 points any correlation is ±1
                scores.append(None)
                continue
            ce, var_e, flat_e = spread(residual[c, common])
            cr, var_r, flat_r = spread(r[common])
            if flat_e or flat_r:
                scores.append(None)
                continue
            cov = sum(ce * cr) / len(common)
            key = _signed_square(cov) / (var_e * var_r)
            scores.append(key if least_correlated else -key)
        defined = [s for s in scores if s is not None]
        if unit_ties is not None and defined and abs(min(defined)) == 1:
            tied = [c for c, s in zip(candidates, scores) if s == min(defined)]
            if len(tied) > 1:
                unit_ties.append((len(chosen), tied))
        chosen.append(_pick(candidates, scores, ties))
    return chosen


def order(method, members, kind, y, counts=None, n_classes=None, *, target_margin=0.075,
          **variant):
    """The reference order of ``method`` (the names of `bagwise.order_members`)."""
    if method == "margin_distance":
        variant["target_margin"] = target_margin
    function = {"reduce_error": reduce_error, "complementarity": complementarity,
                "margin_distance": margin_distance, "orientation": orientation,
                "residual_correlation": residual_correlation}[method]
    return function(members, kind, y, counts, n_classes, **variant)


# -- curves ----------------------------------------------------------------------------------

def prefix_losses(members, kind, y, counts, member_order, n_classes=None, *,
                  over_all_points=False):
    """Loss of the first k members of ``member_order``, k = 1..M, recomputed for each k
    (src/ordering.rs `order_curves` and the `MemberOrder` docs; the out-of-bag error of
    Breiman 1996, as `bagwise.out_of_bag`): the mean over the points with at least one
    member among the first k predicting there of the squared error of their mean, or of the
    error of their vote; NaN when there is no such point. ``over_all_points=True`` is a wrong
    variant: dividing by every point instead of the covered ones."""
    y = np.asarray(y)
    read = _read(members, counts)
    losses = []
    for k in range(1, len(member_order) + 1):
        prediction, covered = _subensemble(members, kind, read, list(member_order[:k]),
                                           n_classes)
        if not covered.any():
            losses.append(np.nan)
            continue
        if kind == "values":
            per_point = (prediction[covered] - y[covered]) ** 2
        else:
            per_point = (prediction[covered] != y[covered]).astype(np.float64)
        losses.append(per_point.sum() / (len(y) if over_all_points else covered.sum()))
    return np.array(losses)
