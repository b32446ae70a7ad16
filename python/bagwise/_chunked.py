"""Lazy inputs (dask arrays and DataFrames, zarr arrays): the one place that maps a family's
mergeable stream over chunks of points and reduces the states where the chunks live.

Every diagnostic that accepts a lazy ``members`` array goes through `reduce_streams` (a
statistic of all points: each chunk is turned into a stream state on the worker that holds
it, the states are merged pairwise in point order, and only the final state comes back) or
`map_points` (a per-point result: each chunk's per-point arrays come back and are joined in
point order). No chunk of the inputs is gathered to the client; what travels is a chunk's
state (or its per-point results) and, where a family needs one, a broadcast of O(members²)
or O(members × rows).

The scheduler is dask's current one: a ``dask.distributed.Client`` when one is active, the
threaded scheduler otherwise (a memory-mapped or zarr array on one machine then streams chunk
by chunk). dask is imported only when a lazy input is met.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

__all__ = ["aligned_blocks", "as_dask", "is_lazy", "join_points", "map_points",
           "reduce_streams", "shared"]

_LAZY_MODULES = ("dask", "dask_expr", "zarr")


def is_lazy(value) -> bool:
    """True for a dask array, DataFrame or Series, or a zarr array."""
    module = type(value).__module__ or ""
    return module.split(".")[0] in _LAZY_MODULES


def as_dask(value, name: str):
    """``value`` as a dask array (a zarr array read lazily; a DataFrame by its partitions,
    with their lengths computed so the point chunks are known)."""
    import dask.array as da

    module = (type(value).__module__ or "").split(".")[0]
    if module == "zarr":
        return da.from_zarr(value)
    if isinstance(value, da.Array):
        return value
    to_dask_array = getattr(value, "to_dask_array", None)
    if to_dask_array is not None:
        return to_dask_array(lengths=True)
    if isinstance(value, np.ndarray):
        return da.from_array(value, chunks=value.shape or ())
    raise TypeError(f"`{name}`: expected a dask or numpy array, got {type(value).__name__}")


def aligned_blocks(arrays: Sequence[tuple[Any, str, int | None]]) -> list[list[Any]]:
    """Blocks of ``arrays`` chunk by chunk along the points.

    ``arrays`` holds ``(value, name, point_axis)``; a ``None`` value stays ``None`` and a
    ``None`` axis marks an argument passed whole to every chunk. The chunks along the points
    are those of the first lazy array; every other array is rechunked to them (a numpy array
    is sliced on the client, so it travels once, a chunk to each task), and every other axis
    is made one chunk. Returns, for each chunk of points, the list of its blocks (dask
    delayed objects, or the whole values) in the order of ``arrays``.
    """
    import dask.array as da

    reference = None
    for value, name, axis in arrays:
        if value is not None and axis is not None and is_lazy(value):
            reference = as_dask(value, name).chunks[axis]
            break
    if reference is None:
        raise ValueError("no lazy array among the inputs")
    n_points = sum(reference)
    columns = []
    for value, name, axis in arrays:
        if value is None or axis is None:
            columns.append([value] * len(reference))
            continue
        array = as_dask(value, name) if is_lazy(value) else np.asarray(value)
        if array.shape[axis] != n_points:
            raise ValueError(f"`{name}`: has {array.shape[axis]:,} points along axis {axis} "
                             f"but the other arrays {n_points:,}")
        chunks = tuple(reference if a == axis else (size,) for a, size in enumerate(array.shape))
        array = (array.rechunk(chunks) if isinstance(array, da.Array)
                 else da.from_array(array, chunks=chunks))
        columns.append(list(np.ravel(array.to_delayed())))
    return [list(blocks) for blocks in zip(*columns, strict=True)]


def _merged(left, right):
    return left.merge(right)


def reduce_streams(start: Callable[[], Any], update: Callable[..., Any],
                   blocks: list[list[Any]]):
    """One stream over all chunks: ``update(start(), *chunk_blocks)`` on each chunk where it
    lives, then a pairwise tree of ``merge`` in point order; computes and returns the stream.

    ``update`` must return the stream; states must pickle and ``merge`` must add the other
    stream's points after its own (every bagwise stream does both).
    """
    import dask

    def chunk_state(*chunk):
        return update(start(), *chunk)

    states = [dask.delayed(chunk_state, pure=True)(*chunk) for chunk in blocks]
    while len(states) > 1:
        paired = [dask.delayed(_merged, pure=True)(states[i], states[i + 1])
                  for i in range(0, len(states) - 1, 2)]
        if len(states) % 2:
            paired.append(states[-1])
        states = paired
    (stream,) = dask.compute(states[0])
    return stream


def map_points(compute: Callable[..., Any], blocks: list[list[Any]]) -> list[Any]:
    """``compute(*chunk_blocks)`` on each chunk where it lives; the results, in point order."""
    import dask

    return list(dask.compute(*[dask.delayed(compute, pure=True)(*chunk) for chunk in blocks]))


def shared(value):
    """``value`` (any picklable object: a Gram, a tuple of training arrays) as one dask key.

    Pass it in `aligned_blocks` with a ``None`` axis: every chunk's task then depends on the
    same key, so the value travels to each worker once (the scheduler's peer transfers),
    never once per task as an argument embedded in every task would. The key is named
    uniquely rather than hashed, so large arrays are not tokenized.
    """
    import uuid

    import dask

    return dask.delayed(value, name=f"bagwise-shared-{uuid.uuid4().hex}", traverse=False)


def join_points(parts: list[tuple[np.ndarray, ...]]) -> tuple[np.ndarray, ...]:
    """The per-point arrays of `map_points`'s results (each a tuple of arrays whose first
    axis is the chunk's points), joined in point order."""
    return tuple(np.concatenate([part[k] for part in parts]) for k in range(len(parts[0])))
