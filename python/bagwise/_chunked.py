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

__all__ = ["aligned_blocks", "as_dask", "is_lazy", "map_points", "reduce_streams"]

_LAZY_MODULES = ("dask", "dask_expr", "zarr")


#: Bytes of one chunk when a memory-mapped file is split for the workers (64 MiB: a few
#: chunks per worker fit in any sensible ``memory_limit``, and per-task overhead stays small).
MEMMAP_CHUNK_BYTES = 64 << 20


def is_lazy(value) -> bool:
    """True for a dask array, DataFrame or Series, or a zarr array; and for a memory-mapped
    file (``np.load(path, mmap_mode="r")``) while a ``dask.distributed`` client is active, so
    the workers read their own chunks from the file instead of receiving them."""
    module = type(value).__module__ or ""
    if module.split(".")[0] in _LAZY_MODULES:
        return True
    return _memmap_file(value) is not None and _client_active()


def _client_active() -> bool:
    import sys

    if "distributed" not in sys.modules:
        return False
    from distributed import get_client

    try:
        get_client()
    except ValueError:
        return False
    return True


def _memmap_file(value) -> tuple[str, int] | None:
    """``(path, offset)`` of a memory map that covers its whole file region (as
    `numpy.load` returns it); None for anything else, e.g. a slice of a map."""
    if not isinstance(value, np.memmap) or getattr(value, "filename", None) is None:
        return None
    import mmap

    if not isinstance(value.base, mmap.mmap) or not value.flags.c_contiguous:
        return None
    return value.filename, value.offset


def _read_points(path, offset, dtype, shape, axis, start, stop):
    """One chunk of a memory-mapped file, read by the worker that computes it."""
    whole = np.memmap(path, dtype=dtype, mode="r", offset=offset, shape=shape)
    index = [slice(None)] * len(shape)
    index[axis] = slice(start, stop)
    return np.array(whole[tuple(index)])


def _from_memmap(value, path, offset, axis):
    """A dask array over a memory-mapped file, each chunk read from the file on its worker
    (the last axis is the points for a 1-D array, axis 1 for members)."""
    import dask
    import dask.array as da

    row_bytes = value.itemsize * (value.size // max(value.shape[axis], 1))
    step = max(1, MEMMAP_CHUNK_BYTES // max(row_bytes, 1))
    blocks = []
    for start in range(0, value.shape[axis], step):
        stop = min(start + step, value.shape[axis])
        shape = list(value.shape)
        shape[axis] = stop - start
        chunk = dask.delayed(_read_points, pure=True)(path, offset, value.dtype, value.shape,
                                                      axis, start, stop)
        blocks.append(da.from_delayed(chunk, shape=tuple(shape), dtype=value.dtype))
    return da.concatenate(blocks, axis=axis)


def as_dask(value, name: str, point_axis: int | None = None):
    """``value`` as a dask array (a zarr array read lazily; a DataFrame by its partitions,
    with their lengths computed so the point chunks are known; a memory-mapped file split
    along ``point_axis`` into chunks its workers read themselves)."""
    import dask.array as da

    source = _memmap_file(value)
    if source is not None:
        axis = point_axis if point_axis is not None else min(1, value.ndim - 1)
        return _from_memmap(value, *source, axis)
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
            reference = as_dask(value, name, axis).chunks[axis]
            break
    if reference is None:
        raise ValueError("no lazy array among the inputs")
    n_points = sum(reference)
    columns = []
    for value, name, axis in arrays:
        if value is None or axis is None:
            columns.append([value] * len(reference))
            continue
        array = as_dask(value, name, axis) if is_lazy(value) else np.asarray(value)
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
