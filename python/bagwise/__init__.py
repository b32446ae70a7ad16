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
from .resampling import Resample, resample

__all__ = [
    "Correlation",
    "Decomposition",
    "DecompositionStream",
    "Resample",
    "SizeCurve",
    "SizeCurveStream",
    "__version__",
    "aggregate",
    "correlation",
    "decompose",
    "decompose_stream",
    "resample",
    "size_curve",
    "size_curve_stream",
    "vote_fractions",
]
