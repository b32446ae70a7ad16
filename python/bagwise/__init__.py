"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
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
    "CountGram",
    "PredictionVariance",
    "Resample",
    "Spread",
    "__version__",
    "count_gram",
    "prediction_variance",
    "resample",
    "spread",
]
