from collections.abc import Callable
from typing import final

import numpy as np
import numpy.typing as npt

__all__ = [
    "OutOfBagState",
    "Resampler",
    "__version__",
    "default_sizes",
    "out_of_bag_chunk",
    "replicate_spread_arrays",
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
    threads: int | None = None,
) -> tuple[
    OutOfBagState,
    tuple[npt.NDArray[np.float64], npt.NDArray[np.int64], npt.NDArray[np.float64] | None],
]: ...
def default_sizes(members: int) -> list[int]: ...

# -- replicates ---------------------------------------------------------------------------

def replicate_spread_arrays(
    members: npt.NDArray[np.floating],
    y: npt.NDArray[np.float64] | None = None,
    threads: int | None = None,
) -> tuple[dict[str, npt.NDArray[np.float64]], dict[str, float]]: ...
