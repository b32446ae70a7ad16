"""The residual-correlation section: how alike the members err (`correlation`)."""

from __future__ import annotations

import math

from ._base import Figure, Section, number, quiet

#: The members x members correlation heatmap is drawn up to this many members.
HEATMAP_MEMBERS = 300


class CorrelationSection(Section):
    key = "correlation"
    title = "Residual correlation"
    result_type = "Correlation"
    doc = ("`correlation` of the residuals (values; for class probabilities, of the "
           "probability given to the observed class); None for labels.")

    def compute(self, inputs, done):
        from ..correlation import correlation

        if inputs.one_value is None:
            return None
        return correlation(*inputs.one_value, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        return {"mean_residual_variance": number(result.mean_residual_variance),
                "mean_residual_correlation": number(result.mean_residual_correlation)}

    def readings(self, result, diagnosis):
        if math.isnan(result.mean_residual_correlation):
            return []
        of = ("" if diagnosis.kind == "values"
              else " (errors in the probability given to the observed class)")
        return [f"the members' errors correlate at {result.mean_residual_correlation:.2f} on "
                f"average{of}"]

    def figures(self, result, diagnosis, unit):
        from .. import plots
        from ..correlation import correlation

        inputs = diagnosis._inputs
        if inputs is None or inputs.one_value is None or result.n_members > HEATMAP_MEMBERS:
            return []
        full = quiet(lambda: correlation(*inputs.one_value, matrix=True))
        return [Figure("residual correlation between members, ordered so groups show as "
                       "blocks", lambda ax: plots.plot_correlation_matrix(full, ax=ax),
                       figsize=(6.0, 5.0))]


section = CorrelationSection()
