"""The single-model section: the ensemble's loss against one model fit on all the data."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .._results import Result
from .._warnings import warn
from ._base import Section, number

#: Ratios of ensemble to single-model loss below this read as "bagging helps"; from 0.97 up
#: the ensemble is within 3% of one model (common practice: a gain of a few per cent is
#: within the noise of one train/test split).
HELPS_BELOW = 0.97


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Reference(Result):
    """A single model's loss at the points against the ensemble's.

    Attributes
    ----------
    reference_loss : float
        Loss of the single model given as ``reference`` to `diagnose` (the loss of the
        decomposition: squared error, multi-class Brier score or error rate).
    reference_ratio : float
        ``ensemble_loss / reference_loss``: below 1 the ensemble beats one model; NaN (with
        a warning) when the reference loss is 0.
    """

    reference_loss: float
    reference_ratio: float

    _title = "Single model"

    def verdict(self) -> str:
        """One line: does bagging help this learner."""
        ratio = self.reference_ratio
        if math.isnan(ratio):
            return "no verdict: the single model's loss is 0"
        helps = "helps" if ratio < HELPS_BELOW else "does not help"
        return (f"bagging {helps} this learner: the ensemble's loss is {ratio:.0%} of a single "
                "model's")

    def _rows(self):
        return [("reference loss", f"{self.reference_loss:.6g}"),
                ("ensemble / reference", f"{self.reference_ratio:.4g}")]

    def _reading(self):
        return self.verdict()

    def to_frame(self):
        """One row: ``reference_loss``, ``reference_ratio``."""
        import pandas as pd

        return pd.DataFrame({"reference_loss": [self.reference_loss],
                             "reference_ratio": [self.reference_ratio]})


def reference_loss(kind, reference, y):
    """The single model's loss, in the loss the decomposition uses for ``kind``."""
    if kind == "values":
        return float(np.mean((reference - y) ** 2))
    if kind == "probabilities":
        onehot = np.zeros_like(reference)
        onehot[np.arange(len(y)), y] = 1.0
        return float(np.mean(np.sum((reference - onehot) ** 2, axis=1)))
    return float(np.mean(reference != y))


class ReferenceSection(Section):
    key = "reference"
    title = "Single model"
    result_type = "Reference"
    doc = ("The loss of the single model given as ``reference`` and the ensemble's loss "
           "over it; None without ``reference``.")

    def compute(self, inputs, done):
        if inputs.reference is None:
            return None
        loss = reference_loss(inputs.kind, inputs.reference, inputs.y)
        if loss > 0:
            # the one number this section reads from another: the decomposition's loss
            ratio = done["decomposition"].ensemble_loss / loss
        else:
            warn("`reference`: the single model's loss is 0, so the ratio is NaN")
            ratio = math.nan
        return Reference(reference_loss=loss, reference_ratio=ratio)

    def summary(self, result, diagnosis):
        return {"reference_loss": number(result.reference_loss),
                "reference_ratio": number(result.reference_ratio)}

    def readings(self, result, diagnosis):
        return [result.verdict()]


section = ReferenceSection()
