"""Lazy inputs (dask arrays and DataFrames, zarr arrays): the one place that maps a family's
mergeable stream over chunks of points and reduces the states where the chunks live.

Every diagnostic that accepts a lazy ``members`` array goes through `reduce_streams` (a
statistic of all points: each chunk is turned into a stream state on the worker that holds
it, the states are merged pairwise in point order, and only the final state comes back; a
stream's per-point parts come back chunk by chunk instead of riding the merge tree) or
`map_points` (a per-point result: each chunk's per-point arrays come back and are joined in
point order). No chunk of the inputs is gathered to the client; what travels is a chunk's
state (or its per-point results) and, where a family needs one, a broadcast of O(members²)
or O(members × rows).

The scheduler is dask's current one: a ``dask.distributed.Client`` when one is active, the
threaded scheduler otherwise (a zarr array on one machine then streams chunk by chunk). A
memory-mapped file is lazy only while a client is active (each task reads its own chunk
from the file); without one it goes to the core as it is, which reads it through the map.
dask is imported only when a lazy input is met.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from ._progress import finish, progress_callback

__all__ = ["aligned_blocks", "any_lazy", "as_dask", "is_lazy", "join_points", "largest",
           "map_points", "map_over", "point_major", "point_starts", "reduce_over",
           "reduce_streams", "shared"]

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


def any_lazy(*values) -> bool:
    """True when any of ``values`` is lazy (see `is_lazy`)."""
    return any(is_lazy(value) for value in values)


def largest(values: Sequence[tuple[Any, str]]) -> list[int | None]:
    """The largest element of each array of ``values`` (``(value, name)`` pairs; None for a
    None value): a lazy array's where its chunks live, in one pass (one number per chunk
    travels), a numpy array's here. Infers a class count from labels without gathering
    them."""
    import dask

    lazy = [as_dask(value, name).max() if is_lazy(value) else None for value, name in values]
    computed = iter(dask.compute(*[top for top in lazy if top is not None]))
    return [None if value is None else int(next(computed)) if top is not None
            else int(np.max(value)) for (value, _), top in zip(values, lazy, strict=True)]


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


def _from_memmap(value, path, offset, axis, chunks=None):
    """A dask array over a memory-mapped file, each chunk read from the file on its worker
    (the last axis is the points for a 1-D array, axis 1 for members). ``chunks`` (points
    per chunk) reads it directly in another array's chunks, without a rechunk."""
    import dask
    import dask.array as da

    if chunks is None:
        row_bytes = value.itemsize * (value.size // max(value.shape[axis], 1))
        step = max(1, MEMMAP_CHUNK_BYTES // max(row_bytes, 1))
        chunks = [min(step, value.shape[axis] - start)
                  for start in range(0, value.shape[axis], step)]
    bounds = np.cumsum([0, *chunks])
    blocks = []
    for start, stop in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True):
        shape = list(value.shape)
        shape[axis] = stop - start
        chunk = dask.delayed(_read_points, pure=False)(path, offset, value.dtype, value.shape,
                                                      axis, start, stop)
        blocks.append(da.from_delayed(chunk, shape=tuple(shape), dtype=value.dtype))
    return da.concatenate(blocks, axis=axis)


def as_dask(value, name: str, point_axis: int | None = None, chunks=None):
    """``value`` as a dask array (a zarr array read lazily; a DataFrame by its partitions,
    with their lengths computed so the point chunks are known; a memory-mapped file split
    along ``point_axis`` into chunks its workers read themselves, ``chunks`` points each
    when given)."""
    import dask.array as da

    source = _memmap_file(value)
    if source is not None:
        axis = point_axis if point_axis is not None else min(1, value.ndim - 1)
        return _from_memmap(value, *source, axis, chunks)
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


def point_major(value, name: str):
    """``value`` with the points on its last axis: a dask DataFrame holds one row per point
    and one column per member (or class, ...), so it becomes the transposed dask array of
    its partitions, ``(n_columns, n_points)`` chunked along the points; anything else is
    returned as is."""
    if is_lazy(value) and hasattr(value, "columns"):
        return as_dask(value, name).T
    return value


def aligned_blocks(arrays: Sequence[tuple[Any, str, int | None]]) -> list[list[Any]]:
    """Blocks of ``arrays`` chunk by chunk along the points.

    ``arrays`` holds ``(value, name, point_axis)``; a ``None`` value stays ``None`` and a
    ``None`` axis marks an argument passed whole to every chunk. The chunks along the points
    are those of the first lazy array; every other array is rechunked to them (a numpy array
    is sliced on the client, so it travels once, a piece with each task), and every other
    axis is made one chunk. Returns, for each chunk of points, the list of its blocks (dask
    delayed objects, numpy pieces, or the whole values) in the order of ``arrays``.
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
        source = _memmap_file(value) if is_lazy(value) else None
        if source is not None and value.shape[axis] == n_points:
            columns.append(_file_slices(value, *source, axis,
                                        np.cumsum((0,) + tuple(reference))))
            continue
        array = as_dask(value, name, axis) if is_lazy(value) else np.asarray(value)
        if array.shape[axis] != n_points:
            raise ValueError(f"`{name}`: has {array.shape[axis]:,} points along axis {axis} "
                             f"but the other arrays {n_points:,}")
        if not isinstance(array, da.Array):
            # Sliced here: each task carries its own piece (no whole array in the graph).
            bounds = np.cumsum((0,) + tuple(reference))
            lead = (slice(None),) * axis
            pieces = [array[(*lead, slice(lo, hi))]
                      for lo, hi in zip(bounds[:-1], bounds[1:], strict=True)]
            columns.append(_scattered(pieces) if array.nbytes > SCATTER_BYTES else pieces)
            continue
        chunks = tuple(reference if a == axis else (size,) for a, size in enumerate(array.shape))
        columns.append(list(np.ravel(array.rechunk(chunks).to_delayed())))
    return [list(blocks) for blocks in zip(*columns, strict=True)]


#: An in-memory argument larger than this (1 MiB) is sent to the workers ahead of the graph
#: when a distributed client is active, piece by piece, so the graph itself stays small.
SCATTER_BYTES = 1 << 20


def _scattered(pieces: list[np.ndarray]) -> list[Any]:
    """``pieces`` on the cluster's workers (futures) when a client is active; else as they are."""
    if not _client_active():
        return pieces
    from distributed import get_client

    return get_client().scatter(pieces, hash=False)


def point_starts(arrays: Sequence[tuple[Any, str, int | None]]) -> list[int]:
    """The first point of every chunk `aligned_blocks` makes of the same ``arrays``."""
    for value, name, axis in arrays:
        if value is not None and axis is not None and is_lazy(value):
            return [int(v) for v in np.cumsum((0,) + as_dask(value, name).chunks[axis][:-1])]
    raise ValueError("no lazy array among the inputs")


_NUMBERED = re.compile(r"\b(point|row) (\d+)")


class _FileSlice:
    """A chunk of a memory-mapped file, read by the task that uses it: the read is part of
    that task, so a chunk is never read by one worker and sent to another."""

    def __init__(self, path, offset, dtype, shape, axis, start, stop):
        self.where = (path, offset, dtype, shape, axis, start, stop)

    def read(self) -> np.ndarray:
        # A view of the map, not a copy: the core reads any strides, and the pages are
        # read once, by the core itself.
        path, offset, dtype, shape, axis, start, stop = self.where
        whole = np.memmap(path, dtype=dtype, mode="r", offset=offset, shape=shape)
        index = [slice(None)] * len(shape)
        index[axis] = slice(start, stop)
        return whole[tuple(index)]


def _file_slices(value, path, offset, axis, bounds) -> list[_FileSlice]:
    return [_FileSlice(path, offset, value.dtype, value.shape, axis, lo, hi)
            for lo, hi in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True)]


def _in_chunk(function: Callable[..., Any], start: int | None) -> Callable[..., Any]:
    """``function`` that reads its `_FileSlice` arguments first, and whose ValueError /
    TypeError / OverflowError messages number points from the first point of all chunks
    rather than of its chunk (``start`` added to every "point N" / "row N"), so a chunk
    reports bad input as the in-memory call does."""

    def shifted(*args):
        args = [arg.read() if isinstance(arg, _FileSlice) else arg for arg in args]
        if not start:
            return function(*args)
        try:
            return function(*args)
        except (ValueError, TypeError, OverflowError) as error:
            if type(error) not in (ValueError, TypeError, OverflowError):
                raise
            message = _NUMBERED.sub(lambda m: f"{m[1]} {int(m[2]) + start}", str(error))
            raise type(error)(message) from None

    return shifted


def _merged(left, right):
    # Streams merge in place, without a copy (a state of per-point parts can be most of a
    # worker's memory). Safe: each state feeds exactly one merge, and a merge whose worker
    # is lost loses its in-place input with it, so both are recomputed from their chunks.
    return left.merge(right)


def _shared(whole: Sequence[Any]) -> list[Any]:
    """Whole arguments as one graph key each (numpy arrays; other values stay literals),
    so an array travels once to each worker that needs it rather than once per task."""

    return [shared(value) if isinstance(value, np.ndarray) else value for value in whole]


def _compute(chunks: list[Any], rest: list[Any], progress) -> tuple[list[Any], list[Any]]:
    """``dask.compute`` of the per-chunk outputs ``chunks`` and the other outputs ``rest``,
    reporting the chunks done to ``progress`` (the user's argument: a bool or a callable):
    on the workers of an active client as each chunk's future completes; on dask's local
    schedulers as each chunk's task finishes (a scheduler callback, run on the calling
    thread). Ctrl-C on the client stops the wait, and the released futures are cancelled."""
    import dask

    with progress_callback(progress, "chunks", "chunk") as callback:
        if callback is None:
            out = dask.compute(*chunks, *rest)
        elif _client_active():
            from distributed import as_completed, get_client

            client = get_client()
            futures = client.compute([*chunks, *rest])
            per_chunk = {future.key for future in futures[:len(chunks)]}
            done = 0
            callback(0, len(chunks))
            for future in as_completed(futures):
                if future.key in per_chunk:
                    done += 1
                    callback(done, len(chunks))
            out = client.gather(futures)
        else:
            from dask.callbacks import Callback

            keys = {chunk.key for chunk in chunks}
            done = [0]

            def finished(key, *_):
                if key in keys and done[0] < len(chunks):
                    done[0] += 1
                    callback(done[0], len(chunks))

            callback(0, len(chunks))
            with Callback(posttask=finished):
                out = dask.compute(*chunks, *rest)
        finish(callback, len(chunks))
    return list(out[:len(chunks)]), list(out[len(chunks):])


def reduce_streams(start: Callable[..., Any], update: Callable[..., Any],
                   blocks: list[list[Any]], whole: Sequence[Any] = (),
                   starts: Sequence[int] | None = None, progress=False):
    """One stream over all chunks: ``update(start(*whole), *chunk_blocks)`` on each chunk
    where it lives, then a pairwise tree of ``merge`` in point order; computes and returns
    the stream.

    ``update`` must return the stream; states must pickle and ``merge`` must add the other
    stream's points after its own (every bagwise stream does both). ``whole`` holds the
    arguments every chunk needs in full (member weights, a class count): numpy arrays among
    them become one graph key each, sent once to each worker. With ``starts`` (the first
    point of every chunk, `point_starts`), the point numbers in a chunk's error messages
    count from the first point of all chunks. ``progress`` (a bool or a callable) hears the
    chunks done.
    """
    import dask

    n_whole = len(whole)

    def chunk_state(*args):
        return _split_parts(update(start(*args[:n_whole]), *args[n_whole:]))

    shared = _shared(whole)
    starts = starts or [None] * len(blocks)
    split = [dask.delayed(_in_chunk(chunk_state, first), pure=False, nout=2)(*shared, *chunk)
             for chunk, first in zip(blocks, starts, strict=True)]
    states = [state for state, _ in split]
    while len(states) > 1:
        paired = [dask.delayed(_merged, pure=False)(states[i], states[i + 1])
                  for i in range(0, len(states) - 1, 2)]
        if len(states) % 2:
            paired.append(states[-1])
        states = paired
    parts, (stream,) = _compute([chunk_parts for _, chunk_parts in split], [states[0]],
                                progress)
    if parts and parts[0] is not None:
        stream._parts = [part for chunk_parts in parts for part in chunk_parts]
    return stream


def _split_parts(stream) -> tuple[Any, list | None]:
    """A chunk's stream without its per-point parts, and the parts: the parts come back to
    the client chunk by chunk (O(points of one chunk) each), so the merge tree carries only
    the O(members) state, never the per-point arrays of many chunks on one worker. The
    stream keeps an empty-rowed copy of its first part, so merges still see its columns."""
    parts = getattr(stream, "_parts", None)
    if not isinstance(parts, list) or not parts:
        return stream, None
    stream._parts = [_no_rows(parts[0])]
    return stream, parts


def _no_rows(part):
    if isinstance(part, np.ndarray):
        return part[:0]
    if isinstance(part, tuple):
        return tuple(_no_rows(item) for item in part)
    return part


def reporting(progress) -> dict:
    """``{"progress": progress}`` when progress is asked for, else nothing: the keyword a
    lazy map passes on only when it is used."""
    return {"progress": progress} if progress is not None and progress is not False else {}


def map_points(compute: Callable[..., Any], blocks: list[list[Any]],
               whole: Sequence[Any] = (), starts: Sequence[int] | None = None,
               progress=False) -> list[Any]:
    """``compute(*whole, *chunk_blocks)`` on each chunk where it lives; the results, in
    point order (``whole``, ``starts`` and ``progress`` as in `reduce_streams`)."""
    import dask

    shared = _shared(whole)
    starts = starts or [None] * len(blocks)
    tasks = [dask.delayed(_in_chunk(compute, first), pure=False)(*shared, *chunk)
             for chunk, first in zip(blocks, starts, strict=True)]
    return _compute(tasks, [], progress)[0]


def reduce_over(arrays: Sequence[tuple[Any, str, int | None]], start: Callable[..., Any],
                update: Callable[..., Any], whole: Sequence[Any] = (), progress=False):
    """`reduce_streams` over the `aligned_blocks` of ``arrays``, with their `point_starts`:
    the one call a family's lazy path makes."""
    return reduce_streams(start, update, aligned_blocks(arrays), whole, point_starts(arrays),
                          progress)


def map_over(arrays: Sequence[tuple[Any, str, int | None]], compute: Callable[..., Any],
             whole: Sequence[Any] = (), progress=False) -> list[Any]:
    """`map_points` over the `aligned_blocks` of ``arrays``, with their `point_starts`."""
    return map_points(compute, aligned_blocks(arrays), whole, point_starts(arrays), progress)


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
