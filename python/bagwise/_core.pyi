from collections.abc import Callable
from typing import final

import numpy as np
import numpy.typing as npt

__all__ = ["CountGram", "Resampler", "__version__"]
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
