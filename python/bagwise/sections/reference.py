"""The single-model section: the ensemble's loss against one model fit on all the data."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .._results import Result
from .._warnings import warn
from ._base import Section, number

#: Nominal coverage of the interval of the ratio on the test points.
LEVEL = 0.95


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Reference(Result):
    """A single model's loss at the points against the ensemble's.

    The points are a test set independent of the training rows, so the interval of the
    ratio (the delta method on the log scale from the paired per-point losses, as in
    `bagwise.compare.ratio_interval`) covers the ratio of the two fitted models' expected
    losses on new points drawn like these; it says nothing about other training sets.

    Attributes
    ----------
    reference_loss : float
        Loss of the single model given as ``reference`` to `diagnose` (the loss of the
        decomposition: squared error, multi-class Brier score or error rate).
    reference_ratio : float
        ``ensemble_loss / reference_loss``: below 1 the ensemble beats one model; NaN (with
        a warning) when the reference loss is 0.
    ratio_lower, ratio_upper : float
        The ends of its interval at ``level`` (NaN when the ratio is).
    level : float
        Nominal coverage of the interval.
    """

    reference_loss: float
    reference_ratio: float
    ratio_lower: float = math.nan
    ratio_upper: float = math.nan
    level: float = LEVEL

    _title = "Single model"

    def verdict(self) -> str:
        """One line: does bagging help this learner ("helps", "hurts" or "no clear
        difference", decided by the interval of the ratio)."""
        from ..compare import reading, verdict_word

        if math.isnan(self.reference_ratio):
            return "no verdict: the single model's loss is 0"
        word = verdict_word(self.ratio_lower, self.ratio_upper)
        return reading(word, self.reference_ratio, self.ratio_lower, self.ratio_upper,
                       self.level, "test points")

    def _rows(self):
        interval = ("n/a" if math.isnan(self.ratio_lower) else
                    f"{self.ratio_lower:.4g} to {self.ratio_upper:.4g}")
        return [("reference loss", f"{self.reference_loss:.6g}"),
                ("ensemble / reference", f"{self.reference_ratio:.4g}"),
                (f"{self.level:.0%} interval", interval)]

    def _reading(self):
        return self.verdict()

    def to_frame(self):
        """One row: ``reference_loss``, ``reference_ratio``, ``ratio_lower``,
        ``ratio_upper``."""
        import pandas as pd

        return pd.DataFrame({"reference_loss": [self.reference_loss],
                             "reference_ratio": [self.reference_ratio],
                             "ratio_lower": [self.ratio_lower],
                             "ratio_upper": [self.ratio_upper]})


def reference_loss(kind, reference, y):
    """The single model's loss, in the loss the decomposition uses for ``kind``."""
    return float(np.mean(reference_loss_per_point(kind, reference, y)))


def reference_loss_per_point(kind, reference, y):
    """The same loss point by point."""
    if kind == "values":
        return (reference - y) ** 2
    if kind == "probabilities":
        onehot = np.zeros_like(reference)
        onehot[np.arange(len(y)), y] = 1.0
        return np.sum((reference - onehot) ** 2, axis=1)
    return (reference != y).astype(np.float64)


class ReferenceSection(Section):
    key = "reference"
    title = "Single model"
    result_type = "Reference"
    doc = ("The loss of the single model given as ``reference`` and the ensemble's loss "
           "over it; None without ``reference``.")

    def compute(self, inputs, done):
        if inputs.reference is None:
            return None
        from ..compare import ratio_interval

        per_point = reference_loss_per_point(inputs.kind, inputs.reference, inputs.y)
        loss = float(np.mean(per_point))
        if loss > 0:
            # the numbers this section reads from another: the decomposition's losses
            ensemble = done["decomposition"]
            ratio = ensemble.ensemble_loss / loss
            _, lower, upper = ratio_interval(ensemble.ensemble_loss_per_point, per_point,
                                             LEVEL)
        else:
            warn("`reference`: the single model's loss is 0, so the ratio is NaN")
            ratio = lower = upper = math.nan
        return Reference(reference_loss=loss, reference_ratio=ratio, ratio_lower=lower,
                         ratio_upper=upper)

    def summary(self, result, diagnosis):
        return {"reference_loss": number(result.reference_loss),
                "reference_ratio": number(result.reference_ratio),
                "ratio_lower": number(result.ratio_lower),
                "ratio_upper": number(result.ratio_upper)}

    def readings(self, result, diagnosis):
        return [result.verdict()]


section = ReferenceSection()
