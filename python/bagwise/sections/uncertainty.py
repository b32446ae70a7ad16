"""The prediction-uncertainty section: standard errors of the ensemble's mean prediction
(`prediction_variance`, bias-corrected infinitesimal jackknife), with their Monte-Carlo
status: a standard error that is not steady is never read out as a number."""

from __future__ import annotations

import numpy as np

from ._base import Needed, Section, number, quiet


class UncertaintySection(Section):
    key = "uncertainty"
    title = "Uncertainty of the ensemble's mean"
    result_type = "PredictionVariance"
    doc = ("`prediction_variance` (infinitesimal jackknife, bias-corrected; the bootstrap of "
           "little bags for a bag fitted with scheme='little_bags') of the ensemble at the "
           "points, every class's probability for class probabilities; None without counts "
           "or for labels.")

    def compute(self, inputs, done):
        from ..uncertainty import prediction_variance

        if inputs.counts is None or inputs.kind == "labels":
            return None
        if inputs.group_size:
            return prediction_variance(inputs.members, inputs.counts, method="little_bags",
                                       group_size=inputs.group_size, n_jobs=inputs.n_jobs)
        return prediction_variance(inputs.members, inputs.counts, method="ij",
                                   corrected=True, n_jobs=inputs.n_jobs)

    def summary(self, result, diagnosis):
        from ..uncertainty import _at_predicted_class

        counts = result.status_counts()
        total = max(sum(counts.values()), 1)
        typical = result._typical()
        error = _at_predicted_class(result.std_error, result.mean)
        share = result.correction_share
        return {"median_std_error": number(np.median(error)) if typical is not None else None,
                "share_clipped": number(result.n_clipped / result.variance.size),
                "share_steady": number(counts["steady"] / total),
                "share_not_estimable": number(counts["not estimable"] / total),
                "members_needed": number(quiet(result.members_needed)),
                "median_correction_share": (number(np.nanmedian(share))
                                            if np.isfinite(share).any() else None)}

    def readings(self, result, diagnosis):
        counts = result.status_counts()
        total = max(sum(counts.values()), 1)
        line = result._reading()
        if result._typical() is not None and counts["steady"] < total:
            line += f"; steady at {counts['steady'] / total:.0%} of points"
        method = ("bootstrap of little bags" if result.method == "little_bags"
                  else "infinitesimal jackknife")
        return [f"{line} ({method})"]

    def needed(self, result, tolerance):
        from ..uncertainty import STEADY_NOISE

        return [Needed("standard error of the ensemble's mean: steady",
                       result.members_needed(STEADY_NOISE),
                       f"Monte-Carlo noise of the variance <= {STEADY_NOISE:.0%} of it at the "
                       "median point")]


section = UncertaintySection()
