"""The prediction-interval section: an interval (values) or class set (probabilities) for
a new observation at each diagnosed point, calibrated on the out-of-bag predictions of the
training rows (`prediction_interval`), and how often it held the observed targets."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ._base import Figure, Section, number

#: The nominal coverage the diagnosis reports (the default of `prediction_interval`).
LEVEL = 0.9

#: Bins of the coverage figure (fewer when there are fewer points).
BINS = 10


@dataclasses.dataclass(frozen=True)
class NotEstimated:
    """The section's entry when the intervals cannot be computed: what is missing, in words."""

    reason: str

    def _rows(self):
        return [("interval for a new observation", "not estimated")]

    def _reading(self):
        return self.reason


def _missing(inputs) -> str | None:
    if inputs.counts is None:
        return ("no interval for a new observation: it needs the in-bag counts (`counts`) and "
                "the members' predictions on the training rows (`train_members`, `y_train`)")
    if inputs.train_members is None:
        return ("no interval for a new observation: it needs the members' predictions on the "
                "training rows and their targets (`train_members`, `y_train`), which were not "
                "given")
    return None


def _observed(result, y):
    """``(coverage, binomial standard error, n_points)`` of the targets ``y``."""
    coverage = result.coverage(y)
    n_points = len(y)
    return coverage, math.sqrt(coverage * (1 - coverage) / n_points), n_points


class IntervalsSection(Section):
    key = "intervals"
    title = "Prediction intervals for a new observation"
    result_type = "PredictionInterval, PredictionSet"
    doc = (f"`prediction_interval` at level {LEVEL} for a new observation at the points "
           "(jackknife+ for values, least-ambiguous class sets for probabilities), calibrated "
           "on the out-of-bag training predictions; a note in words when the counts or the "
           "training predictions are missing; None for labels.")

    def compute(self, inputs, done):
        from ..intervals import _prediction_interval

        if inputs.kind == "labels":
            return None
        reason = _missing(inputs)
        if reason is not None:
            return NotEstimated(reason)
        members, train = inputs.members, inputs.train_members
        if members.dtype.kind != "f":
            members = members.astype(np.float64)
        if train.dtype.kind != "f":
            train = train.astype(np.float64)
        try:
            return _prediction_interval(members, inputs.counts, train, inputs.y_train,
                                        level=LEVEL, method=None, n_jobs=inputs.n_jobs,
                                        member_count=inputs.member_count)
        except ValueError as error:   # e.g. no training row out of bag for any member
            return NotEstimated(f"no interval for a new observation: {error}")

    def rows(self, result, diagnosis):
        if isinstance(result, NotEstimated):
            return result._rows()
        rows = result._rows()
        coverage, std_error, n_points = _observed(result, diagnosis._inputs.y)
        rows.append(("observed coverage", f"{coverage:.1%} ± {std_error:.1%} over "
                                          f"{n_points:,} points"))
        return rows

    def note(self, result, diagnosis):
        if isinstance(result, NotEstimated):
            return result.reason
        return result.guarantee

    def summary(self, result, diagnosis):
        if isinstance(result, NotEstimated):
            return {"level": LEVEL, "coverage": None}
        coverage, std_error, _ = _observed(result, diagnosis._inputs.y)
        out = {"level": result.level, "method": result.method,
               "n_rows_used": result.n_rows_used}
        if hasattr(result, "width"):
            out["mean_width"] = number(np.mean(result.width))
        else:
            out["mean_set_size"] = number(np.mean(result.set_size))
        out["coverage"] = number(coverage)
        out["coverage_std_error"] = number(std_error)
        return out

    def readings(self, result, diagnosis):
        if isinstance(result, NotEstimated):
            return [result.reason]
        coverage, std_error, n_points = _observed(result, diagnosis._inputs.y)
        if hasattr(result, "width"):
            mean_width = float(np.mean(result.width))
            if not math.isfinite(mean_width):
                size = ("the interval for a new observation is unbounded: too few training "
                        "rows are out of bag for this level")
            else:
                size = (f"an interval for a new observation is {mean_width:.4g} wide on "
                        f"average at {result.level:.0%}")
            what = "its interval"
        else:
            size = (f"a class set for a new observation holds {np.mean(result.set_size):.3g} "
                    f"classes on average at {result.level:.0%}")
            what = "its set"
        return [f"{size}; the observed target falls in {what} at {coverage:.1%} of the "
                f"{n_points:,} points (± {std_error:.1%}, binomial standard error; nominal "
                f"{result.level:.0%})"]

    def figures(self, result, diagnosis, unit):
        from .. import plots

        if isinstance(result, NotEstimated) or diagnosis._inputs is None:
            return []
        y = diagnosis._inputs.y
        interval = hasattr(result, "width")
        if interval and not np.all(np.isfinite(result.width)):
            return []
        bins = max(1, min(BINS, len(y)))
        caption = (f"share of new observations inside their {result.level:.0%} interval, by "
                   "bin of interval width (bars: one binomial standard error)" if interval else
                   f"share of new observations whose class is in their {result.level:.0%} "
                   "set, by set size (bars: one binomial standard error)")
        return [Figure(caption, lambda ax: plots.plot_prediction_coverage(
            result, y, bins=bins, ax=ax, unit=unit if interval else None))]


section = IntervalsSection()
