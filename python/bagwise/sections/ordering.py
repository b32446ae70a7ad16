"""The redundancy section: how many members, in a good order, do as well as all of them
(`order_members`)."""

from __future__ import annotations

import numpy as np

from ._base import TOLERANCE, Figure, Section, is_nan, quiet

#: Points an order of the diagnosis reads at most: each greedy step reads every point, and
#: a sample this size already tells a good order from a random one.
MAX_POINTS = 10_000


def _sample(n_points: int, seed) -> np.ndarray | None:
    """Sorted point indices of a seeded sample of `MAX_POINTS`, or None for all points."""
    if n_points <= MAX_POINTS:
        return None
    generator = np.random.default_rng([int(seed), 15])  # its own stream of the diagnosis seed
    return np.sort(generator.choice(n_points, MAX_POINTS, replace=False))


def _columns(value, points: np.ndarray | None):
    """``value``'s points (axis 1 of members and counts, axis 0 of targets) at ``points``,
    in memory: a lazy array gathers only those."""
    from .. import _chunked

    axis = 0 if value.ndim == 1 else 1
    if _chunked.is_lazy(value):
        import dask

        value = _chunked.as_dask(value, "members", axis)
        if points is not None:
            value = value[(slice(None),) * axis + (points,)]
        return np.asarray(dask.compute(value)[0])
    if points is None:
        return value
    return np.take(value, points, axis=axis)


class OrderingSection(Section):
    key = "ordering"
    title = "Redundant members"
    result_type = "MemberOrder"
    doc = ("`order_members` (reduce-error): chosen on the out-of-bag predictions of the "
           "training rows and measured on the diagnosed points when both are given, else "
           f"chosen and cross-fitted on the diagnosed points; on at most {MAX_POINTS:,} of "
           "them (a seeded sample, the same in memory and on a cluster).")

    def compute(self, inputs, done):
        from .._validation import renamed_arguments
        from ..ordering import order_members

        if inputs.counts is not None and inputs.train_members is not None:
            rows = _sample(inputs.train_members.shape[1], inputs.seed)
            try:
                chosen = order_members(_columns(inputs.train_members, rows),
                                       _columns(inputs.y_train, rows),
                                       counts=_columns(inputs.counts, rows), folds=None,
                                       rng=inputs.seed, n_jobs=inputs.n_jobs)
            except (ValueError, TypeError) as error:
                raise renamed_arguments(error, {"members": "train_members",
                                                "y": "y_train"}) from None
            points = _sample(inputs.members.shape[1], inputs.seed)
            return chosen.evaluate(_columns(inputs.members, points), _columns(inputs.y, points),
                                   n_jobs=inputs.n_jobs)
        training = (inputs.counts is not None and inputs.members_are_training is not False
                    and inputs.counts.shape[1] == inputs.members.shape[1])
        points = _sample(inputs.members.shape[1], inputs.seed)
        return order_members(_columns(inputs.members, points), _columns(inputs.y, points),
                             counts=_columns(inputs.counts, points) if training else None,
                             rng=inputs.seed, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        return result.summary()

    def readings(self, result, diagnosis):
        honest = quiet(lambda: result.members_within(TOLERANCE, "honest"))
        random = quiet(lambda: result.members_within(TOLERANCE, "random"))
        loss = {"squared_error": "squared error"}.get(result.loss, "error rate")
        if is_nan(honest):
            return []
        if result.held_out:
            how = ("in the order chosen on the training rows' out-of-bag predictions "
                   "(reduce-error), measured on these points")
        else:
            how = (f"in the order chosen by reduce-error, cross-fitted over {result.folds} "
                   "folds of these points (each fold measured with the order the others chose)")
        sample = (f" (a sample of {result.n_points:,} of the {diagnosis.n_points:,} points)"
                  if result.n_points < diagnosis.n_points else "")
        out = [f"from {honest} of {result.n_members} members on, the loss stays within "
               f"{TOLERANCE:.0%} of the full ensemble's {loss} ({result.ensemble_loss:.4g}) {how}"
               f"{sample}; in a random order from {random} on"]
        best = int(result.sizes[int(np.nanargmin(result.honest_curve))])
        lowest = float(result.honest_curve[best - 1])
        if lowest < result.ensemble_loss * (1 - TOLERANCE):
            out.append(f"the first {best} members in that order reach {lowest:.4g}, below the "
                       f"full ensemble's {result.ensemble_loss:.4g}")
        return out

    def figures(self, result, diagnosis, unit):
        from .. import plots

        return [Figure("loss of the first k members: chosen order against random order",
                       lambda ax: plots.plot_member_order(result, ax=ax, unit=unit))]


section = OrderingSection()
