from collections.abc import Callable
from typing import Any, final

import numpy as np
import numpy.typing as npt

__all__ = [
    "__version__",
    "correlation_matrix",
    "CountGram",
    "crc32",
    "DecompositionAccumulator",
    "DiversityAccumulator",
    "default_sizes",
    "LinearEnsemble",
    "majority_vote",
    "mean_prediction",
    "NeighborsEnsemble",
    "out_of_bag_chunk",
    "OutOfBagState",
    "pack_container",
    "prediction_interval_arrays",
    "prediction_set_arrays",
    "replicate_spread_arrays",
    "Resampler",
    "residual_correlation",
    "SizeCurveAccumulator",
    "TreeEnsemble",
    "unpack_container",
]
__version__: str

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
    ) -> Resampler: ...
    @property
    def draws_per_member(self) -> int: ...
    @property
    def max_possible_count(self) -> int: ...
    def counts(
        self,
        seed: int,
        members: int,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.unsignedinteger]: ...
    def bayesian_weights(
        self,
        seed: int,
        members: int,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def block_starts(
        self, seed: int, members: int, n_jobs: int | None = None
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
        n_classes: int = 0,
        penalty: float = 0.0,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> LinearEnsemble: ...
    def member_predictions(
        self, x: _Design, n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def predict(self, x: _Design, n_jobs: int | None = None) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    @property
    def members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int: ...
    @property
    def penalty(self) -> float: ...
    @property
    def intercepts(self) -> npt.NDArray[np.float64]: ...
    @property
    def coefficients(self) -> npt.NDArray[np.float64]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> LinearEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], LinearEnsemble], tuple[bytes]]: ...

@final
class NeighborsEnsemble:
    @staticmethod
    def fit(
        x: _Design,
        y: npt.NDArray[np.float64],
        counts: _Counts,
        *,
        task: str,
        n_classes: int = 0,
        neighbors: int = 5,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> NeighborsEnsemble: ...
    def member_predictions(
        self, x: _Design, n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def predict(self, x: _Design, n_jobs: int | None = None) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    @property
    def members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int: ...
    @property
    def neighbors(self) -> int: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> NeighborsEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], NeighborsEnsemble], tuple[bytes]]: ...

# -- persistence ---------------------------------------------------------------------------

def pack_container(kind: str, metadata: str, payload: bytes) -> bytes: ...
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
        self, members: npt.NDArray[np.floating], method: str, n_jobs: int | None = None
    ) -> tuple[
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
    ]: ...
    @property
    def members(self) -> int: ...
    @property
    def n_train(self) -> int: ...
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
# -- decomposition -------------------------------------------------------------------------

def mean_prediction(
    members: npt.NDArray[np.floating],
    weights: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
) -> npt.NDArray[np.float64]: ...
def majority_vote(
    members: npt.NDArray[np.int64],
    n_classes: int,
    weights: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.float64]]: ...
def residual_correlation(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    n_jobs: int | None = None,
) -> dict[str, Any]: ...
def correlation_matrix(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    n_jobs: int | None = None,
) -> npt.NDArray[np.float64]: ...
@final
class DecompositionAccumulator:
    def __new__(
        cls, loss: str, weights: npt.NDArray[np.float64] | None = None
    ) -> DecompositionAccumulator: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[Any],
        n_classes: int | None = None,
        n_jobs: int | None = None,
    ) -> tuple[
        npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64]
    ]: ...
    @property
    def members(self) -> int | None: ...
    def moments(self) -> dict[str, Any]: ...

@final
class SizeCurveAccumulator:
    def __new__(
        cls, loss: str, members: int, sizes: list[int], orders: int, seed: int
    ) -> SizeCurveAccumulator: ...
    def orders(self) -> npt.NDArray[np.int64]: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[Any],
        n_classes: int | None = None,
        n_jobs: int | None = None,
    ) -> None: ...
    def finish(self) -> dict[str, Any]: ...
# -- diversity ---------------------------------------------------------------------------

@final
class DiversityAccumulator:
    def __new__(cls, members: int, n_classes: int) -> DiversityAccumulator: ...
    def update(
        self,
        members: npt.NDArray[Any],
        y: npt.NDArray[np.int64],
        n_jobs: int | None = None,
    ) -> None: ...
    def merge(self, other: DiversityAccumulator) -> None: ...
    @property
    def members(self) -> int: ...
    @property
    def n_points(self) -> int: ...
    def finish(self) -> dict[str, Any]: ...

# -- out of bag ---------------------------------------------------------------------------

@final
class OutOfBagState:
    def merge(self, other: OutOfBagState) -> OutOfBagState: ...
    @property
    def task(self) -> str: ...
    @property
    def members(self) -> int: ...
    @property
    def points(self) -> int: ...
    @property
    def sizes(self) -> list[int]: ...
    @property
    def without_out_of_bag(self) -> int: ...
    def curve(self) -> dict[str, list[float] | list[int]]: ...

def out_of_bag_chunk(
    members: npt.NDArray[np.floating] | npt.NDArray[np.integer],
    counts: npt.NDArray[np.integer],
    y: npt.NDArray[np.float64],
    weights: npt.NDArray[np.float64] | None,
    sizes: list[int],
    kind: str,
    n_classes: int | None = None,
    n_jobs: int | None = None,
) -> tuple[
    OutOfBagState,
    tuple[npt.NDArray[np.float64], npt.NDArray[np.int64], npt.NDArray[np.float64] | None],
]: ...
def default_sizes(members: int) -> list[int]: ...

# -- replicates ---------------------------------------------------------------------------

def prediction_interval_arrays(
    members: npt.NDArray[np.floating],
    counts: npt.NDArray[np.unsignedinteger],
    train_members: npt.NDArray[np.floating],
    y_train: npt.NDArray[np.float64],
    level: float,
    method: str,
    n_jobs: int | None = None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], int, bool]: ...
def prediction_set_arrays(
    members: npt.NDArray[np.floating],
    counts: npt.NDArray[np.unsignedinteger],
    train_members: npt.NDArray[np.floating],
    y_train: npt.NDArray[np.int64],
    level: float,
    method: str,
    n_jobs: int | None = None,
) -> tuple[npt.NDArray[np.bool_], int, bool]: ...
def replicate_spread_arrays(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64] | None = None,
    n_jobs: int | None = None,
) -> tuple[dict[str, npt.NDArray[np.float64]], dict[str, float]]: ...

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
        members: int | None = None,
        n_jobs: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> TreeEnsemble: ...
    def member_predictions(
        self, x: npt.NDArray[np.floating], n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self,
        x: npt.NDArray[np.floating],
        counts: npt.NDArray[np.unsignedinteger],
        n_jobs: int | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def predict(
        self, x: npt.NDArray[np.floating], n_jobs: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    @property
    def members(self) -> int: ...
    @property
    def n_features(self) -> int: ...
    @property
    def n_classes(self) -> int | None: ...
    @property
    def node_counts(self) -> list[int]: ...
    def to_bytes(self) -> bytes: ...
    @staticmethod
    def from_bytes(data: bytes) -> TreeEnsemble: ...
    def __reduce__(self) -> tuple[Callable[[bytes], TreeEnsemble], tuple[bytes]]: ...
