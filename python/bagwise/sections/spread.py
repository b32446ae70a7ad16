"""The between/within section: how much of a member's variance comes through the training
data and how much more members average away (`spread`)."""

from __future__ import annotations

from ._base import TOLERANCE, Figure, Needed, Section, is_nan, number, quiet


class SpreadSection(Section):
    key = "spread"
    title = "Between / within"
    result_type = "Spread"
    doc = ("`spread` (between/within split, rho; every class's probability for class "
           "probabilities); None without counts or for labels. The between part and rho are "
           "read out only where the between part is estimable.")

    def compute(self, inputs, done):
        from ..uncertainty import spread

        if inputs.counts is None or inputs.kind == "labels" or inputs.group_size:
            return None           # the split rests on the IJ, not valid for little bags
        return spread(inputs.members, inputs.counts, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        estimable = result.pooled_status != "not estimable"
        return {"mean_between": number(result.mean_between) if estimable else None,
                "mean_within": number(result.mean_within),
                "pooled_rho": number(result.pooled_rho) if estimable else None,
                "pooled_status": result.pooled_status,
                "members_needed": number(quiet(lambda: result.members_needed(TOLERANCE)))}

    def readings(self, result, diagnosis):
        of = "" if diagnosis.kind == "values" else " (class probabilities, all classes)"
        if result.pooled_status == "not estimable":
            return ["the split of the member variance into training data and members is "
                    f"{result._not_estimable_words()}{of}"]
        needed = quiet(lambda: result.members_needed(TOLERANCE))
        rough = "" if result.pooled_status == "steady" else "roughly "
        if is_nan(needed):
            return [f"the members share {rough}none of their variance through the training "
                    f"data (between part 0), so no ensemble size is needed for it{of}"]
        return [f"members share {rough}{result.pooled_rho:.0%} of their variance through the "
                f"training data (rho); {needed} members bring the rest within "
                f"{TOLERANCE:.0%} of it{of}"]

    def needed(self, result, tolerance):
        return [Needed("variance of the prediction: its member part within/M",
                       result.members_needed(tolerance),
                       f"between/within: mean_within/M <= {tolerance * 100:g}% of mean_between")]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        if result.pooled_status == "not estimable" or result.between.ndim != 1:
            return []
        return [
            Figure("rho: share of a member's variance that comes from the training data",
                   lambda ax: plots.plot_rho(result, ax=ax)),
            Figure("between (training data) against within (member) variance per point",
                   lambda ax: plots.plot_between_within(result, ax=ax, unit=unit)),
        ]


section = SpreadSection()
