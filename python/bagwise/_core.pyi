from collections.abc import Callable
from typing import Any, final

import numpy as np
import numpy.typing as npt

__all__ = [
    "DecompositionAccumulator",
    "Resampler",
    "SizeCurveAccumulator",
    "__version__",
    "correlation_matrix",
    "majority_vote",
    "mean_prediction",
    "residual_correlation",
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

# -- decomposition -------------------------------------------------------------------------

def mean_prediction(
    members: npt.NDArray[np.floating],
    weights: npt.NDArray[np.float64] | None = None,
    threads: int | None = None,
) -> npt.NDArray[np.float64]: ...
def majority_vote(
    members: npt.NDArray[np.int64],
    n_classes: int,
    weights: npt.NDArray[np.float64] | None = None,
    threads: int | None = None,
) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.float64]]: ...
def residual_correlation(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    threads: int | None = None,
) -> dict[str, Any]: ...
def correlation_matrix(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64],
    threads: int | None = None,
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
        threads: int | None = None,
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
        threads: int | None = None,
    ) -> None: ...
    def finish(self) -> dict[str, Any]: ...
