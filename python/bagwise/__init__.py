"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from .ensemble import ClassificationBag, RegressionBag
from .persistence import load, save
from .resampling import Resample, resample
from .uncertainty import (
    CountGram,
    PredictionVariance,
    Spread,
    count_gram,
    prediction_variance,
    spread,
)

__all__ = [
    "__version__",
    "ClassificationBag",
    "count_gram",
    "CountGram",
    "load",
    "prediction_variance",
    "PredictionVariance",
    "RegressionBag",
    "Resample",
    "resample",
    "save",
    "Spread",
    "spread",
]
