"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from typing import TYPE_CHECKING

from ._core import __version__
from ._warnings import BagwiseWarning
from .aggregation import aggregate, vote_fractions
from .compare import LearnerComparison, Verdict, compare_learners
from .correlation import Correlation, CorrelationStream, correlation, correlation_stream
from .decomposition import Decomposition, DecompositionStream, decompose, decompose_stream
from .diagnosis import Diagnosis, diagnose
from .diversity import Diversity, DiversityStream, diversity, diversity_stream
from .intervals import PredictionInterval, PredictionSet, prediction_interval
from .ordering import MemberOrder, order_members
from .out_of_bag import OutOfBag, OutOfBagStream, out_of_bag, out_of_bag_stream
from .persistence import load, save
from .read_ensemble import EnsembleArrays, read_ensemble
from .replicates import (
    ReplicateSpread,
    ReplicateSpreadStream,
    replicate_spread,
    replicate_spread_stream,
)
from .resampling import Resample, resample
from .size_curve import SizeCurve, SizeCurveStream, size_curve, size_curve_stream
from .uncertainty import (
    CountGram,
    CountGramStream,
    PredictionVariance,
    Spread,
    count_gram,
    count_gram_stream,
    prediction_variance,
    spread,
)

if TYPE_CHECKING:
    from .ensemble import BagClassifier, BagRegressor

# The estimators load scikit-learn (about 1.5 s and 150 MB with scipy and pandas); they are
# imported on first use, so the diagnostics alone (e.g. on a dask worker) stay light.
_LAZY = {"BagClassifier": "ensemble", "BagRegressor": "ensemble"}


def __getattr__(name: str):
    if name == "plots":  # `bagwise.plots.plot_...` without importing matplotlib up front
        import importlib

        return importlib.import_module(".plots", __name__)
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'bagwise' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


__all__ = [
    "__version__",
    "aggregate",
    "BagwiseWarning",
    "BagClassifier",
    "BagRegressor",
    "compare_learners",
    "Correlation",
    "correlation",
    "correlation_stream",
    "CorrelationStream",
    "count_gram",
    "count_gram_stream",
    "CountGram",
    "CountGramStream",
    "decompose",
    "decompose_stream",
    "Decomposition",
    "DecompositionStream",
    "diagnose",
    "Diagnosis",
    "diversity",
    "Diversity",
    "diversity_stream",
    "DiversityStream",
    "EnsembleArrays",
    "LearnerComparison",
    "load",
    "MemberOrder",
    "order_members",
    "out_of_bag",
    "out_of_bag_stream",
    "OutOfBag",
    "OutOfBagStream",
    "prediction_interval",
    "PredictionInterval",
    "PredictionSet",
    "prediction_variance",
    "PredictionVariance",
    "read_ensemble",
    "replicate_spread",
    "ReplicateSpread",
    "replicate_spread_stream",
    "ReplicateSpreadStream",
    "Resample",
    "resample",
    "save",
    "size_curve",
    "size_curve_stream",
    "SizeCurve",
    "SizeCurveStream",
    "Spread",
    "spread",
    "Verdict",
    "vote_fractions",
]
