"""The ambiguity decomposition section: what averaging removed (`decompose`)."""

from __future__ import annotations

from ._base import Figure, Section, number


class DecompositionSection(Section):
    key = "decomposition"
    title = "Ambiguity decomposition"
    result_type = "Decomposition"
    doc = ("`decompose` of the members at the points: ensemble loss, mean member loss, "
           "ambiguity (Krogh & Vedelsby 1995) and relative gain.")

    def compute(self, inputs, done):
        from ..decomposition import decompose

        return decompose(inputs.members, inputs.y, n_jobs=inputs.n_jobs)

    def ensemble(self, result):
        return {"loss": result.loss}

    def summary(self, result, diagnosis):
        return {"ensemble_loss": number(result.ensemble_loss),
                "member_loss": number(result.member_loss),
                "ambiguity": number(result.ambiguity),
                "vote_gain": number(result.vote_gain),
                "relative_gain": number(result.relative_gain)}

    def readings(self, result, diagnosis):
        if result.identity:
            return [f"averaging removed {result.relative_gain:.0%} of the mean member loss "
                    f"({result.member_loss:.4g} -> {result.ensemble_loss:.4g})"]
        return [f"the majority vote errs on {result.ensemble_loss:.1%} of the points, the "
                f"average member on {result.member_loss:.1%}"]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        figures = [Figure("what averaging removed: mean member loss, ambiguity and ensemble "
                          "loss", lambda ax: plots.plot_decomposition(result, ax=ax, unit=unit))]
        if result.identity:
            figures.append(Figure("per-point ambiguity against per-point member loss",
                                  lambda ax: plots.plot_ambiguity_by_point(result, ax=ax,
                                                                           unit=unit)))
        return figures


section = DecompositionSection()
