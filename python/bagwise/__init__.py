"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from .out_of_bag import OutOfBag, OutOfBagStream, out_of_bag, out_of_bag_stream
from .replicates import ReplicateSpread, replicate_spread
from .resampling import Resample, resample

__all__ = [
    "OutOfBag",
    "OutOfBagStream",
    "ReplicateSpread",
    "Resample",
    "__version__",
    "out_of_bag",
    "out_of_bag_stream",
    "replicate_spread",
    "resample",
]
