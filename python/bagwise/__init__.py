"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from .decomposition import (
    Correlation,
    Decomposition,
    DecompositionStream,
    SizeCurve,
    SizeCurveStream,
    aggregate,
    correlation,
    decompose,
    decompose_stream,
    size_curve,
    size_curve_stream,
    vote_fractions,
)
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
    "aggregate",
    "ClassificationBag",
    "Correlation",
    "correlation",
    "count_gram",
    "CountGram",
    "decompose",
    "decompose_stream",
    "Decomposition",
    "DecompositionStream",
    "load",
    "prediction_variance",
    "PredictionVariance",
    "RegressionBag",
    "Resample",
    "resample",
    "save",
    "size_curve",
    "size_curve_stream",
    "SizeCurve",
    "SizeCurveStream",
    "Spread",
    "spread",
    "vote_fractions",
]
