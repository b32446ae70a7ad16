"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from .ensemble import ClassificationBag, RegressionBag
from .persistence import load, save
from .resampling import Resample, resample

__all__ = [
    "ClassificationBag",
    "RegressionBag",
    "Resample",
    "__version__",
    "load",
    "resample",
    "save",
]
