"""The redundancy section: how many members, in a good order, do as well as all of them
(`order_members`)."""

from __future__ import annotations

import numpy as np

from ._base import TOLERANCE, Figure, Section, is_nan, quiet


class OrderingSection(Section):
    key = "ordering"
    title = "Redundant members"
    result_type = "MemberOrder"
    doc = ("`order_members` (reduce-error): chosen on the out-of-bag predictions of the "
           "training rows and measured on the diagnosed points when both are given, else "
           "chosen and cross-fitted on the diagnosed points; None for lazy inputs.")

    def compute(self, inputs, done):
        from .. import _chunked
        from .._validation import renamed_arguments
        from ..ordering import order_members

        if _chunked.any_lazy(inputs.members, inputs.train_members):
            return None  # an order reads every point at every step: not on a cluster
        if inputs.counts is not None and inputs.train_members is not None:
            try:
                chosen = order_members(inputs.train_members, inputs.y_train,
                                       counts=inputs.counts, folds=None, rng=inputs.seed,
                                       n_jobs=inputs.n_jobs)
            except (ValueError, TypeError) as error:
                raise renamed_arguments(error, {"members": "train_members",
                                                "y": "y_train"}) from None
            return chosen.evaluate(inputs.members, inputs.y, n_jobs=inputs.n_jobs)
        training = (inputs.counts is not None and inputs.members_are_training is not False
                    and inputs.counts.shape[1] == inputs.members.shape[1])
        return order_members(inputs.members, inputs.y,
                             counts=inputs.counts if training else None,
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
        out = [f"{honest} of {result.n_members} members come within {TOLERANCE:.0%} of the full "
               f"ensemble's {loss} ({result.ensemble_loss:.4g}) {how}; in a random order "
               f"{random} do"]
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
