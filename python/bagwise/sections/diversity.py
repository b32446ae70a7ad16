"""The diversity section: how differently classifier members err, and which pairs are
redundant (`diversity`, Kuncheva & Whitaker 2003)."""

from __future__ import annotations

from ._base import Figure, Section, number

#: The kappa-error diagram is drawn up to this many members (one point per pair).
DIAGRAM_MEMBERS = 300


class DiversitySection(Section):
    key = "diversity"
    title = "Diversity"
    result_type = "Diversity"
    doc = ("`diversity` of the members' class predictions (Kuncheva & Whitaker 2003): how "
           "differently they err, and which pairs are redundant; None for values.")

    def compute(self, inputs, done):
        from ..diversity import diversity

        if inputs.kind == "values":
            return None
        return diversity(inputs.members, inputs.y, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        (a, b, apart), = result.redundant_pairs(top=1)
        return {"mean_disagreement": number(result.mean_disagreement),
                "mean_double_fault": number(result.mean_double_fault),
                "mean_yule_q": number(result.mean_yule_q),
                "kohavi_wolpert": number(result.kohavi_wolpert),
                "interrater_kappa": number(result.interrater_kappa),
                "closest_pair": [a, b], "closest_pair_disagreement": number(apart)}

    def readings(self, result, diagnosis):
        (a, b, apart), = result.redundant_pairs(top=1)
        return [result._reading(),
                f"the most alike pair, members {a} and {b}, disagree on {apart:.1%} of the "
                "points" + ("; one of them adds nothing here" if apart == 0 else "")]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        if result.n_members > DIAGRAM_MEMBERS:
            return []
        return [Figure("kappa-error diagram: one point per pair of members; high kappa means "
                       "the pair is redundant", lambda ax: plots.plot_kappa_error(result, ax=ax))]


section = DiversitySection()
