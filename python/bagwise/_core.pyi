from collections.abc import Callable
from typing import final

import numpy as np
import numpy.typing as npt

__all__ = [
    "CountGram",
    "LinearEnsemble",
    "NeighborsEnsemble",
    "Resampler",
    "__version__",
    "crc32",
    "pack_container",
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
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.unsignedinteger]: ...
    def bayesian_weights(
        self,
        seed: int,
        members: int,
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def block_starts(
        self, seed: int, members: int, threads: int | None = None
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
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> LinearEnsemble: ...
    def member_predictions(
        self, x: _Design, threads: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def predict(self, x: _Design, threads: int | None = None) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, threads: int | None = None
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
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> NeighborsEnsemble: ...
    def member_predictions(
        self, x: _Design, threads: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def predict(self, x: _Design, threads: int | None = None) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self, x: _Design, counts: _Counts, threads: int | None = None
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
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> CountGram: ...
    def variance(
        self, members: npt.NDArray[np.floating], method: str, threads: int | None = None
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
