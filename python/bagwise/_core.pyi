from collections.abc import Callable, Sequence
from typing import Any, final

import numpy as np
import numpy.typing as npt

__all__ = [
    "__version__",
    "correlation_matrix",
    "CorrelationAccumulator",
    "CorrelationSummary",
    "CountGram",
    "CountGramAccumulator",
    "count_row_totals",
    "crc32",
    "DecompositionAccumulator",
    "DecompositionMeans",
    "DiversityAccumulator",
    "DiversityMeasures",
    "default_sizes",
    "LinearEnsemble",
    "little_bags_variance",
    "LossCurves",
    "majority_vote",
    "mean_prediction",
    "NeighborsEnsemble",
    "order_curves",
    "order_members",
    "out_of_bag_chunk",
    "OutOfBagState",
    "pack_container",
    "pack_model",
    "prediction_interval_arrays",
    "prediction_set_arrays",
    "random_member_count",
    "replicate_spread",
    "ReplicateSpreadAccumulator",
    "ReplicateSpreadParts",
    "Resampler",
    "residual_correlation",
    "SizeCurveAccumulator",
    "SizeCurveTable",
    "TreeEnsemble",
    "unpack_container",
]
__version__: str

def count_row_totals(
    counts: npt.NDArray[np.integer],
) -> tuple[npt.NDArray[np.float64], int]: ...
@final
class Resampler:
    def __new__(
        cls,
        n_rows: int,
        scheme: str,
        fraction: float,
        strata: npt.NDArray[np.int64] | None = None,
        groups: npt.NDArray[np.int64] | None = None,
        block_length: int | None = None,
        group_size: int = 0,
    ) -> Resampler: ...
    @property
    def draws_per_member(self) -> int: ...
    @property
    def group_size(self) -> int: ...
    @property
    def max_possible_count(self) -> int: ...
    def counts(
        self,
        seed: int,
        n_members: int,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.unsignedinteger]: ...
    def bayesian_weights(
        self,
        seed: int,
        n_members: int,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def block_starts(
        self, seed: int, n_members: int, n_jobs: int | None = None
    ) -> npt.NDArray[np.uint64]: ...

# -- native learners ---------------------------------------------------------------------

_Counts = npt.NDArray[np.unsignedinteger] | npt.NDArray[np.float64]
_Design = npt.NDArray[np.float32] | npt.NDArray[np.float64]

@final
class LinearEnsemble:
    @staticmethod
    def fit(
        x: _Design,
        y: npt.NDArray[np.float64],
        counts: _Counts,
        *,
        task: str = "regression",
        n_classes: int | None = None,
        penalty: float = 0.0,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> LinearEnsemble: ...
    def member_predictions(
        self, x: _Design, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def predict(
        self, x: _Design, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int | None: ...
    @property
    def penalty(self) -> float: ...
    @property
    def intercepts(self) -> npt.NDArray[np.float64]: ...
    @property
    def coefficients(self) -> npt.NDArray[np.float64]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def join(parts: list[LinearEnsemble]) -> LinearEnsemble: ...
    def select(self, members: Sequence[int]) -> LinearEnsemble: ...
    @staticmethod
    def from_bytes(data: bytes) -> LinearEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], LinearEnsemble], tuple[bytes]]: ...

@final
class NeighborsEnsemble:
    @staticmethod
    def fit(
        x: _Design,
        y: npt.NDArray[np.float64] | npt.NDArray[np.int64],
        counts: _Counts,
        *,
        task: str,
        n_classes: int | None = None,
        neighbors: int = 5,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> NeighborsEnsemble: ...
    def member_predictions(
        self, x: _Design, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def predict(
        self, x: _Design, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int | None: ...
    @property
    def neighbors(self) -> int: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def join(parts: list[NeighborsEnsemble]) -> NeighborsEnsemble: ...
    def select(self, members: Sequence[int]) -> NeighborsEnsemble: ...
    @staticmethod
    def from_bytes(data: bytes) -> NeighborsEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], NeighborsEnsemble], tuple[bytes]]: ...

# -- persistence ---------------------------------------------------------------------------

def pack_container(kind: str, metadata: str, payload: bytes) -> bytes: ...
def pack_model(
    kind: str, metadata: str, model: LinearEnsemble | NeighborsEnsemble | TreeEnsemble
) -> bytes: ...
def unpack_container(data: bytes) -> tuple[str, str, bytes]: ...
def crc32(data: bytes) -> int: ...

@final
class CountGram:
    def __new__(
        cls,
        counts: npt.NDArray[np.unsignedinteger],
        *,
        scheme: str | None = None,
        subsample_rows: int | None = None,
        jackknife: bool = False,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> CountGram: ...
    def variance(
        self, members: npt.NDArray[np.floating], method: str, n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> tuple[
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
    ]: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_rows(self) -> int: ...
    @property
    def scheme(self) -> str: ...
    @property
    def subsample_rows(self) -> int | None: ...
    @property
    def has_jackknife(self) -> bool: ...
    @property
    def rows_never_out_of_bag(self) -> int: ...
    @property
    def gram(self) -> npt.NDArray[np.float64]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> CountGram: ...

@final
class CountGramAccumulator:
    def __new__(cls, jackknife: bool = False) -> CountGramAccumulator: ...
    def update(
        self, counts: npt.NDArray[np.unsignedinteger], n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> None: ...
    def merge(self, other: CountGramAccumulator) -> None: ...
    def finish(
        self, scheme: str | None = None, subsample_rows: int | None = None
    ) -> CountGram: ...
    @property
    def n_members(self) -> int | None: ...
    @property
    def n_rows(self) -> int: ...
    @property
    def max_count(self) -> int: ...
    @property
    def jackknife(self) -> bool: ...
    @property
    def row_totals(self) -> npt.NDArray[np.uint64]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> CountGramAccumulator: ...
    def __reduce__(self) -> tuple[Callable[[bytes], CountGramAccumulator], tuple[bytes]]: ...

def little_bags_variance(
    members: npt.NDArray[np.floating], group_size: int, n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> tuple[
    npt.NDArray[np.float64],
    npt.NDArray[np.float64],
    npt.NDArray[np.float64],
    npt.NDArray[np.float64],
]: ...

# -- aggregation ---------------------------------------------------------------------------

def mean_prediction(
    members: npt.NDArray[np.floating],
    member_weights: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> npt.NDArray[np.float64]: ...
def majority_vote(
    members: npt.NDArray[np.int64],
    n_classes: int,
    member_weights: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.float64]]: ...

# -- decomposition -------------------------------------------------------------------------

@final
class DecompositionMeans:
    """Means over the points of a decomposition's per-point losses."""

    @property
    def n_points(self) -> int: ...
    @property
    def ensemble_loss(self) -> float: ...
    @property
    def member_loss(self) -> float: ...
    @property
    def gain(self) -> float: ...

@final
class DecompositionAccumulator:
    def __new__(
        cls, loss: str, member_weights: npt.NDArray[np.float64] | None = None
    ) -> DecompositionAccumulator: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[Any],
        n_classes: int | None = None,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> tuple[
        npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64]
    ]: ...
    def merge(self, other: DecompositionAccumulator) -> None: ...
    @property
    def n_members(self) -> int | None: ...
    def result(self) -> DecompositionMeans: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> DecompositionAccumulator: ...
    def __reduce__(self) -> tuple[Any, tuple[bytes]]: ...

# -- size curve ----------------------------------------------------------------------------

@final
class SizeCurveTable:
    """The finished size curve."""

    @property
    def sizes(self) -> npt.NDArray[np.int64]: ...
    @property
    def curve(self) -> npt.NDArray[np.float64]: ...
    @property
    def std_error(self) -> npt.NDArray[np.float64]: ...
    @property
    def per_order(self) -> npt.NDArray[np.float64]: ...
    @property
    def ensemble_loss(self) -> float: ...
    @property
    def mean_within(self) -> float: ...
    @property
    def n_points(self) -> int: ...
    @property
    def n_members(self) -> int: ...

@final
class SizeCurveAccumulator:
    def __new__(
        cls, loss: str, n_members: int, sizes: list[int], orders: int, seed: int
    ) -> SizeCurveAccumulator: ...
    def orders(self) -> npt.NDArray[np.int64]: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[Any],
        n_classes: int | None = None,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> None: ...
    def merge(self, other: SizeCurveAccumulator) -> None: ...
    def result(self) -> SizeCurveTable: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> SizeCurveAccumulator: ...
    def __reduce__(self) -> tuple[Any, tuple[bytes]]: ...

# -- correlation ---------------------------------------------------------------------------

@final
class CorrelationSummary:
    """Residual variances and their mean pairwise covariance and correlation."""

    @property
    def residual_variance(self) -> npt.NDArray[np.float64]: ...
    @property
    def mean_residual_variance(self) -> float: ...
    @property
    def mean_residual_covariance(self) -> float: ...
    @property
    def mean_residual_correlation(self) -> float: ...
    @property
    def constant_members(self) -> npt.NDArray[np.int64]: ...

@final
class CorrelationAccumulator:
    def __new__(cls) -> CorrelationAccumulator: ...
    def update(
        self, members: npt.NDArray[Any], y: npt.NDArray[np.float64], n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> None: ...
    def merge(self, other: CorrelationAccumulator) -> None: ...
    @property
    def n_members(self) -> int | None: ...
    @property
    def n_points(self) -> int: ...
    def result(self) -> CorrelationSummary: ...
    def matrix(self) -> npt.NDArray[np.float64]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> CorrelationAccumulator: ...
    def __reduce__(self) -> tuple[Any, tuple[bytes]]: ...

def residual_correlation(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> CorrelationSummary: ...
def correlation_matrix(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> npt.NDArray[np.float64]: ...

# -- diversity ---------------------------------------------------------------------------

@final
class DiversityAccumulator:
    def __new__(cls, n_members: int, n_classes: int) -> DiversityAccumulator: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[np.int64],
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> None: ...
    def merge(self, other: DiversityAccumulator) -> None: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_classes(self) -> int: ...
    @property
    def n_points(self) -> int: ...
    def result(self) -> DiversityMeasures: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> DiversityAccumulator: ...
    def __reduce__(self) -> tuple[Callable[[bytes], DiversityAccumulator], tuple[bytes]]: ...

@final
class DiversityMeasures:
    @property
    def yule_q(self) -> npt.NDArray[np.float64]: ...
    @property
    def correct_correlation(self) -> npt.NDArray[np.float64]: ...
    @property
    def disagreement(self) -> npt.NDArray[np.float64]: ...
    @property
    def double_fault(self) -> npt.NDArray[np.float64]: ...
    @property
    def kappa(self) -> npt.NDArray[np.float64]: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_points(self) -> int: ...
    @property
    def mean_yule_q(self) -> float: ...
    @property
    def mean_correct_correlation(self) -> float: ...
    @property
    def mean_disagreement(self) -> float: ...
    @property
    def mean_double_fault(self) -> float: ...
    @property
    def mean_kappa(self) -> float: ...
    @property
    def undefined_yule_q(self) -> int: ...
    @property
    def undefined_correct_correlation(self) -> int: ...
    @property
    def undefined_kappa(self) -> int: ...
    @property
    def entropy(self) -> float: ...
    @property
    def kohavi_wolpert(self) -> float: ...
    @property
    def interrater_kappa(self) -> float: ...
    @property
    def difficulty(self) -> float: ...
    @property
    def generalized_diversity(self) -> float: ...
    @property
    def coincident_failure(self) -> float: ...
    @property
    def accuracy(self) -> npt.NDArray[np.float64]: ...
    @property
    def redundancy(self) -> npt.NDArray[np.float64]: ...
    @property
    def correct_tally(self) -> npt.NDArray[np.int64]: ...

# -- out of bag ---------------------------------------------------------------------------

@final
class OutOfBagState:
    def merge(self, other: OutOfBagState) -> OutOfBagState: ...
    @property
    def task(self) -> str: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_points(self) -> int: ...
    @property
    def sizes(self) -> list[int]: ...
    @property
    def n_without_out_of_bag(self) -> int: ...
    def losses(self) -> LossCurves: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> OutOfBagState: ...
    def __reduce__(self) -> tuple[Callable[[bytes], OutOfBagState], tuple[bytes]]: ...

@final
class LossCurves:
    @property
    def n_covered(self) -> list[int]: ...
    @property
    def squared_error(self) -> list[float] | None: ...
    @property
    def absolute_error(self) -> list[float] | None: ...
    @property
    def error_rate(self) -> list[float] | None: ...
    @property
    def brier_score(self) -> list[float] | None: ...
    @property
    def log_loss(self) -> list[float] | None: ...

def out_of_bag_chunk(
    members: npt.NDArray[np.floating] | npt.NDArray[np.integer],
    counts: npt.NDArray[np.integer],
    y: npt.NDArray[np.float64] | npt.NDArray[np.int64],
    point_weights: npt.NDArray[np.float64] | None,
    sizes: list[int],
    kind: str,
    n_classes: int | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> tuple[
    OutOfBagState,
    tuple[npt.NDArray[np.float64], npt.NDArray[np.int64], npt.NDArray[np.float64] | None],
    float,
]: ...
def default_sizes(n_members: int) -> list[int]: ...

# -- ordering ------------------------------------------------------------------------------

def order_members(
    members: npt.NDArray[np.floating] | npt.NDArray[np.int64],
    y: npt.NDArray[np.float64] | npt.NDArray[np.int64],
    counts: npt.NDArray[np.integer] | None = None,
    points: npt.NDArray[np.bool_] | None = None,
    *,
    method: str,
    n_classes: int | None = None,
    target_margin: float = 0.075,
    size: int | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> npt.NDArray[np.int64]: ...
def order_curves(
    members: npt.NDArray[np.floating] | npt.NDArray[np.int64],
    y: npt.NDArray[np.float64] | npt.NDArray[np.int64],
    orders: npt.NDArray[np.int64],
    counts: npt.NDArray[np.integer] | None = None,
    points: npt.NDArray[np.bool_] | None = None,
    *,
    n_classes: int | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> npt.NDArray[np.float64]: ...

# -- replicates ---------------------------------------------------------------------------

def random_member_count(
    n_members: int, n_rows: int, draws: int, with_replacement: bool, seed: int
) -> tuple[int, float]: ...
def prediction_interval_arrays(
    members: npt.NDArray[np.floating],
    counts: npt.NDArray[np.unsignedinteger],
    train_members: npt.NDArray[np.floating],
    y_train: npt.NDArray[np.float64],
    level: float,
    method: str,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], int, bool]: ...
def prediction_set_arrays(
    members: npt.NDArray[np.floating],
    counts: npt.NDArray[np.unsignedinteger],
    train_members: npt.NDArray[np.floating],
    y_train: npt.NDArray[np.int64],
    level: float,
    method: str,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> tuple[npt.NDArray[np.bool_], int, bool]: ...
@final
class ReplicateSpreadParts:
    @property
    def within(self) -> npt.NDArray[np.float64]: ...
    @property
    def between(self) -> npt.NDArray[np.float64]: ...
    @property
    def variance(self) -> npt.NDArray[np.float64]: ...
    @property
    def bias(self) -> npt.NDArray[np.float64] | None: ...
    @property
    def member_variance(self) -> npt.NDArray[np.float64] | None: ...
    @property
    def covariance(self) -> npt.NDArray[np.float64] | None: ...
    @property
    def expected_squared_error(self) -> npt.NDArray[np.float64] | None: ...
    @property
    def mean_within(self) -> float: ...
    @property
    def mean_between(self) -> float: ...
    @property
    def mean_variance(self) -> float: ...
    @property
    def n_negative_between(self) -> int: ...
    @property
    def mean_bias_squared(self) -> float | None: ...
    @property
    def mean_member_variance(self) -> float | None: ...
    @property
    def mean_covariance(self) -> float | None: ...
    @property
    def mean_expected_squared_error(self) -> float | None: ...

def replicate_spread(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
    progress: Callable[[int, int], object] | None = None,
) -> ReplicateSpreadParts: ...

@final
class ReplicateSpreadAccumulator:
    def __new__(cls) -> ReplicateSpreadAccumulator: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[np.float64] | None = None,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def merge(self, other: ReplicateSpreadAccumulator) -> None: ...
    @property
    def shape(self) -> tuple[int, int] | None: ...
    @property
    def n_points(self) -> int: ...
    def result(
        self,
    ) -> tuple[float, float, float, int, list[float | None]]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> ReplicateSpreadAccumulator: ...
    def __reduce__(self) -> tuple[Any, tuple[bytes]]: ...

@final
class TreeEnsemble:
    @staticmethod
    def fit(
        x: npt.NDArray[np.floating],
        y: npt.NDArray[np.float64] | npt.NDArray[np.int64],
        counts: npt.NDArray[np.unsignedinteger] | None,
        *,
        task: str,
        n_classes: int | None = None,
        max_depth: int | None = None,
        min_leaf: int = 1,
        split_features: int | None = None,
        criterion: str | None = None,
        splitter: str = "auto",
        seed: int = 0,
        n_members: int | None = None,
        first_member: int = 0,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> TreeEnsemble: ...
    def member_predictions(
        self, x: npt.NDArray[np.floating], n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self,
        x: npt.NDArray[np.floating],
        counts: npt.NDArray[np.unsignedinteger],
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def predict(
        self, x: npt.NDArray[np.floating], n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    @property
    def n_members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int | None: ...
    @property
    def node_counts(self) -> list[int]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def join(parts: list[TreeEnsemble]) -> TreeEnsemble: ...
    def select(self, members: Sequence[int]) -> TreeEnsemble: ...
    @staticmethod
    def from_bytes(data: bytes) -> TreeEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], TreeEnsemble], tuple[bytes]]: ...
