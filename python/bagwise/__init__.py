"""bagwise: fit bagged ensembles and diagnose them from their member predictions."""

from ._core import __version__
from ._warnings import BagwiseWarning
from .aggregation import aggregate, vote_fractions
from .compare import LearnerComparison, Verdict, compare_learners
from .correlation import Correlation, correlation
from .decomposition import Decomposition, DecompositionStream, decompose, decompose_stream
from .diagnosis import Diagnosis, diagnose
from .diversity import Diversity, DiversityStream, diversity, diversity_stream
from .ensemble import BagClassifier, BagRegressor
from .intervals import PredictionInterval, PredictionSet, prediction_interval
from .out_of_bag import OutOfBag, OutOfBagStream, out_of_bag, out_of_bag_stream
from .persistence import load, save
from .read_ensemble import EnsembleArrays, read_ensemble
from .replicates import ReplicateSpread, replicate_spread
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

__all__ = [
    "__version__",
    "aggregate",
    "BagwiseWarning",
    "BagClassifier",
    "BagRegressor",
    "compare_learners",
    "Correlation",
    "correlation",
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
