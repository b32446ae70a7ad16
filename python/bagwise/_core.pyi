from collections.abc import Callable
from typing import final

import numpy as np
import numpy.typing as npt

__all__ = ["Resampler", "TreeEnsemble", "__version__"]
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
        threads: int | None = None,
        progress: Callable[[int, int], object] | None = None,
    ) -> TreeEnsemble: ...
    def member_predictions(
        self, x: npt.NDArray[np.floating], threads: int | None = None
    ) -> npt.NDArray[np.float64]: ...
    def out_of_bag_predictions(
        self,
        x: npt.NDArray[np.floating],
        counts: npt.NDArray[np.unsignedinteger],
        threads: int | None = None,
    ) -> npt.NDArray[np.float64]: ...
    def predict(
        self, x: npt.NDArray[np.floating], threads: int | None = None
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
