"""The ensemble-size section: the loss of the first k members and its law (`size_curve`)."""

from __future__ import annotations

from ._base import TOLERANCE, Figure, Needed, Section, is_nan, number, quiet


class SizeCurveSection(Section):
    key = "size_curve"
    title = "Ensemble size"
    result_type = "SizeCurve"
    doc = ("`size_curve` of the members: loss of the first-k-member ensemble, the spread "
           "``W``, the infinite-ensemble loss and ``members_needed``.")

    def compute(self, inputs, done):
        from ..size_curve import size_curve

        return size_curve(inputs.members, inputs.y, rng=inputs.seed, n_jobs=inputs.n_jobs)

    @staticmethod
    def _has_law(result):
        # error rates follow no size law, so they give no members needed
        return result.mean_within is not None

    def summary(self, result, diagnosis):
        # the law's W is the mean across-member variance, the glossary's mean_within
        out = {"ensemble_loss": number(result.ensemble_loss),
               "loss_one_member": number(result.curve[0]) if result.sizes[0] == 1 else None}
        if self._has_law(result):
            out.update(mean_within=number(result.mean_within),
                       infinite_loss=number(result.infinite_loss),
                       members_needed=number(quiet(lambda: result.members_needed(TOLERANCE))))
        return out

    def readings(self, result, diagnosis):
        if not self._has_law(result):
            return []
        needed = quiet(lambda: result.members_needed(TOLERANCE))
        if is_nan(needed):
            return [f"no ensemble size comes within {TOLERANCE:.0%} of the infinite-ensemble "
                    "loss (it is estimated at or below 0)"]
        return [f"{needed} members reach {TOLERANCE:.0%} of the infinite-ensemble loss "
                f"({result.infinite_loss:.4g}); this ensemble has {result.n_members}"]

    def needed(self, result, tolerance):
        if not self._has_law(result):
            return []
        return [Needed("expected loss: its excess W/k over the infinite-ensemble loss",
                       result.members_needed(tolerance),
                       f"size curve: W/k <= {tolerance * 100:g}% of the infinite loss")]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        oob = getattr(diagnosis, "out_of_bag", None)
        caption = "error against ensemble size" + (", with the out-of-bag curve" if oob else "")
        return [Figure(caption, lambda ax: plots.plot_size_curve(result, out_of_bag=oob, ax=ax,
                                                                 unit=unit))]


section = SizeCurveSection()
