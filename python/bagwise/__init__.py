"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from .resampling import Resample, resample

__all__ = ["Resample", "__version__", "resample"]
