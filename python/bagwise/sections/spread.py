"""The between/within section: how much of a member's variance comes through the training
data and how much more members average away (`spread`)."""

from __future__ import annotations

from ._base import TOLERANCE, Figure, Needed, Section, is_nan, number, quiet


class SpreadSection(Section):
    key = "spread"
    title = "Between / within"
    result_type = "Spread"
    doc = "`spread` (between/within split, rho); None without counts or for labels."

    def compute(self, inputs, done):
        from ..uncertainty import spread

        if inputs.counts is None or inputs.one_value is None:
            return None
        return spread(inputs.one_value[0], inputs.counts, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        return {"mean_between": number(result.mean_between),
                "mean_within": number(result.mean_within),
                "pooled_rho": number(result.pooled_rho),
                "members_needed": number(quiet(lambda: result.members_needed(TOLERANCE)))}

    def readings(self, result, diagnosis):
        needed = quiet(lambda: result.members_needed(TOLERANCE))
        if is_nan(needed):
            return ["the members share none of their variance through the training data "
                    "(between part 0), so no ensemble size is needed for it"]
        return [f"members share {result.pooled_rho:.0%} of their variance through the "
                f"training data (rho); {needed} members bring the rest within "
                f"{TOLERANCE:.0%} of it"]

    def needed(self, result, tolerance):
        return [Needed("variance of the prediction: its member part within/M",
                       result.members_needed(tolerance),
                       f"between/within: mean_within/M <= {tolerance * 100:g}% of mean_between")]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        return [
            Figure("rho: share of a member's variance that comes from the training data",
                   lambda ax: plots.plot_rho(result, ax=ax)),
            Figure("between (training data) against within (member) variance per point",
                   lambda ax: plots.plot_between_within(result, ax=ax, unit=unit)),
        ]


section = SpreadSection()
