"""The prediction-uncertainty section: standard errors of the ensemble's predictions
(`prediction_variance`, bias-corrected infinitesimal jackknife)."""

from __future__ import annotations

import numpy as np

from ._base import Figure, Section, number

#: Bins of the standard-error figures (fewer when there are fewer points).
BINS = 10


def _median_correction_share(result):
    share = result.correction_share
    return number(np.nanmedian(share)) if np.isfinite(share).any() else None


class UncertaintySection(Section):
    key = "uncertainty"
    title = "Prediction uncertainty"
    result_type = "PredictionVariance"
    doc = ("`prediction_variance` (infinitesimal jackknife, bias-corrected) of the ensemble "
           "at the points; None without counts or for labels.")

    def compute(self, inputs, done):
        from ..uncertainty import prediction_variance

        if inputs.counts is None or inputs.one_value is None:
            return None
        return prediction_variance(inputs.one_value[0], inputs.counts, method="ij",
                                   corrected=True, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        return {"median_std_error": number(np.median(result.std_error)),
                "share_clipped": number(result.n_clipped / len(result.variance)),
                "median_correction_share": _median_correction_share(result)}

    def readings(self, result, diagnosis):
        from ..uncertainty import CORRECTION_WARNING_SHARE

        line = (f"a typical prediction is uncertain by ± {np.median(result.std_error):.3g} "
                "(one standard error, infinitesimal jackknife)")
        share = _median_correction_share(result)
        if share is not None and share > CORRECTION_WARNING_SHARE:
            line += (f"; rough: the bias correction is {share:.0%} of the raw estimate at the "
                     "median point, more members would steady it")
        return [line]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        inputs = diagnosis._inputs
        if inputs is None or inputs.one_value is None:
            return []
        target = inputs.one_value[1]
        bins = max(1, min(BINS, len(target)))
        return [
            Figure("predicted standard error against the observed error",
                   lambda ax: plots.plot_error_vs_std_error(result, target, bins=bins, ax=ax,
                                                            unit=unit)),
            Figure("coverage of the 90% intervals by bin of standard error",
                   lambda ax: plots.plot_interval_coverage(result, target, bins=bins, ax=ax,
                                                           unit=unit)),
        ]


section = UncertaintySection()
