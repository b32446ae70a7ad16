"""Bagged ensembles on dask: member predictions of a lazy ``X`` chunked by points, and fits
that grow groups of members on the workers of a ``dask.distributed`` cluster.

What travels
------------
- Predictions at a lazy ``X``: the fitted model (native ensemble, or the fitted clones
  and classes) is one key that every chunk's task depends on (scattered once to every
  worker and kept for later calls when a client is active, else one key of the graph),
  so each worker receives it once, whatever the number of chunks; each chunk is
  predicted on a worker and stays there until the result is computed.
- A fit: the training rows are joined into one array on one worker (a lazy ``X``) or
  scattered from the client to every worker (an in-memory ``X``), and fetched once by each
  worker that fits a group; the targets are broadcast once; each group receives only its
  own rows of the in-bag counts and sends back its fitted members, which the client joins
  into one ensemble in member order. The counts are drawn on the client, exactly as in the
  one-machine fit, and member m of every group draws from member stream m, so the joined
  ensemble is the one-machine ensemble, member for member.

dask and distributed are imported only here, and only when a lazy input or the dask
backend is met.
"""

from __future__ import annotations

import numpy as np

from ._chunked import as_dask, is_lazy
from ._progress import progress_callback

__all__ = ["FIT_MEMORY_FACTOR", "fit_client", "fit_native", "fit_wrapped",
           "in_memory", "lazy_design", "lazy_points", "member_ranges", "schema"]

# A worker holds the training rows and, while fitting, the learner's own copies: the
# trees' value orders and ranks (about 9 bytes per value beside the 8 of a float64) and
# each growing member's sorted in-bag lists, or a wrapped member's resampled rows. A fit
# is refused when the rows take more than 1/FIT_MEMORY_FACTOR of a worker's memory limit.
FIT_MEMORY_FACTOR = 3

# Member groups per worker of a native fit.
GROUPS_PER_WORKER = 2


def _joblib_dask() -> bool:
    """Whether joblib's active backend is dask's (``joblib.parallel_backend("dask")``)."""
    from joblib.parallel import get_active_backend

    backend, _ = get_active_backend()
    return type(backend).__name__ == "DaskDistributedBackend"


def _current_client():
    """The active ``dask.distributed`` client, or None."""
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - distributed comes with the test extras
        return None
    try:
        return Client.current()
    except ValueError:
        return None


def fit_client(backend: str, X, y):
    """The client a fit runs on, or None to fit in this process.

    ``"local"`` fits here; ``"dask"`` needs an active client; ``"auto"`` fits on the
    cluster when ``X`` or ``y`` is lazy or joblib's dask backend is active, and a client
    is there (a lazy input without a client is computed here and fitted in process).
    """
    if backend == "local":
        return None
    joblib_dask = _joblib_dask()
    if backend == "auto" and not (is_lazy(X) or is_lazy(y) or joblib_dask):
        return None
    client = _current_client()
    if client is None and (backend == "dask" or joblib_dask):
        raise ValueError(
            "`backend`: 'dask' fits member groups on the workers of a dask.distributed "
            "Client, and none is active; start one (e.g. `Client(LocalCluster())`) or use "
            "backend='local'")
    return client


def in_memory(value):
    """A lazy ``value`` computed here (numpy for arrays, pandas for frames); others as is."""
    if value is None or not is_lazy(value):
        return value
    if (type(value).__module__ or "").startswith("zarr"):
        return np.asarray(value[...])
    computed = value.compute()
    return computed if hasattr(computed, "iloc") else np.asarray(computed)


def _is_frame(value) -> bool:
    return is_lazy(value) and hasattr(value, "to_delayed") and hasattr(value, "columns")


def schema(X):
    """What scikit-learn's feature checks read of ``X``: a lazy DataFrame as an empty
    pandas frame with its columns (nothing is computed); anything else as is."""
    if _is_frame(X):
        import pandas as pd

        return pd.DataFrame(columns=X.columns)
    return X


def lazy_design(X, name: str = "X"):
    """A lazy design as a 2-D float32/float64 dask array (a DataFrame by its partitions,
    other number types cast to float64 lazily)."""
    array = as_dask(X, name)
    if array.ndim != 2:
        raise ValueError(f"`{name}`: expected a 2-D array (points, features), got "
                         f"{array.ndim} dimensions")
    if array.dtype.kind not in "fiub":
        raise TypeError(f"`{name}`: expected numbers, got dtype {array.dtype}")
    if array.dtype not in (np.float32, np.float64):
        array = array.astype(np.float64)
    return array


def _point_parts(X, frame: bool):
    """(delayed chunks of ``X`` along the points, their lengths). A DataFrame stays a
    frame when ``frame`` (wrapped estimators read its columns by name)."""
    if frame and _is_frame(X):
        parts = list(X.to_delayed())
        lengths = tuple(int(n) for n in X.map_partitions(len).compute())
        return parts, lengths
    array = as_dask(X, "X")
    if array.ndim == 2:
        array = array.rechunk({1: -1})
    parts = list(np.ravel(array.to_delayed()))
    return parts, tuple(int(n) for n in array.chunks[0])


def _predict_block(predictor, what: str, block):
    return getattr(predictor, what)(block)


def _model_key(predictor, scattered: dict):
    """The one key of ``predictor`` that every chunk's task depends on.

    With a ``dask.distributed`` client: ``predictor`` scattered to every worker once and
    kept in ``scattered`` (by client), so later predictions send nothing again; without
    one, a single named key of the graph (never hashed: a model can be large).
    """
    import uuid

    import dask

    client = _current_client()
    if client is None:
        return dask.delayed(predictor, name=f"bagwise-model-{uuid.uuid4().hex}",
                            traverse=False)
    future = scattered.get(client.id)
    if future is None or future.status != "finished":
        future = client.scatter(predictor, broadcast=True, hash=False)
        scattered.clear()
        scattered[client.id] = future
    return future


def lazy_points(X, predictor, what: str, leading: tuple, trailing: tuple, dtype, *,
                frame: bool, scattered: dict):
    """``predictor.<what>`` of every chunk of ``X`` along the points, as one dask array of
    shape ``leading + (n_points,) + trailing`` chunked like ``X``'s points.

    ``predictor`` is one key that every chunk's task depends on (see `_model_key`): a
    worker receives it once, not once per chunk.
    """
    import dask
    import dask.array as da

    parts, lengths = _point_parts(X, frame)
    model = _model_key(predictor, scattered)
    blocks = [
        da.from_delayed(dask.delayed(_predict_block, pure=False)(model, what, part),
                        shape=leading + (n,) + trailing, dtype=dtype)
        for part, n in zip(parts, lengths, strict=True)
    ]
    return da.concatenate(blocks, axis=len(leading))


def member_ranges(n_members: int, weights: list[int]) -> list[tuple[int, int]]:
    """Consecutive member ranges ``[first, end)`` covering ``0 .. n_members``, one per
    weight, sized in proportion to it (empty ranges are dropped)."""
    total = sum(weights)
    bounds = [0] + [round(n_members * c / total) for c in np.cumsum(weights)]
    return [(a, b) for a, b in zip(bounds[:-1], bounds[1:], strict=True) if b > a]


def _workers(client) -> list[tuple[str, int, int]]:
    """(address, threads, memory limit in bytes or 0) of every worker, by address."""
    try:
        info = client.scheduler_info(n_workers=-1)["workers"]
    except TypeError:  # distributed before 2025 lists every worker without being asked
        info = client.scheduler_info()["workers"]
    if not info:
        raise ValueError("`backend`: the dask.distributed Client has no workers")
    return sorted((address, int(w.get("nthreads", 1)), int(w.get("memory_limit") or 0))
                  for address, w in info.items())


def _nbytes(X) -> int:
    if _is_frame(X):
        return int(X.memory_usage(deep=True).sum().compute())
    if is_lazy(X):
        return int(as_dask(X, "X").nbytes)
    usage = getattr(X, "memory_usage", None)
    if usage is not None:
        return int(usage(deep=True).sum())
    return int(np.asarray(X).nbytes)


def _check_fits(nbytes: int, workers) -> None:
    """Refuse a training set that cannot be copied whole to every worker."""
    limits = [limit for _, _, limit in workers if limit > 0]
    if limits and FIT_MEMORY_FACTOR * nbytes > min(limits):
        raise ValueError(
            f"`X`: the training rows take {nbytes / 2**20:,.1f} MiB and a distributed fit "
            f"copies them whole to every worker, where fitting needs about "
            f"{FIT_MEMORY_FACTOR} times that; the smallest worker's memory limit is "
            f"{min(limits) / 2**20:,.1f} MiB. Give the workers more memory, fit on a sample "
            "of the rows, or fit in one process with backend='local'")


def _concat_rows(parts):
    return parts[0] if len(parts) == 1 else np.concatenate(parts, axis=0)


def _concat_frames(parts):
    import pandas as pd

    return parts[0] if len(parts) == 1 else pd.concat(parts, axis=0)


def _training_rows(client, X, frame: bool):
    """A future of the whole training set on the cluster: a lazy ``X`` joined on one
    worker (other workers fetch it once when they first need it), an in-memory one
    scattered to every worker."""
    import dask

    if not is_lazy(X):
        return client.scatter(X, broadcast=True)
    if frame and _is_frame(X):
        joined = dask.delayed(_concat_frames, pure=False)(list(X.to_delayed()))
    else:
        array = X.rechunk({1: -1})
        joined = dask.delayed(_concat_rows, pure=False)(list(np.ravel(array.to_delayed())))
    return client.compute(joined)


def _fit_native_group(core_class: str, x, y, counts, n_jobs: int, options: dict):
    from . import _core

    return getattr(_core, core_class).fit(x, y, counts, n_jobs=n_jobs, **options)


def _fit_wrapped_group(template, x, y, counts, use_sample_weight: bool, states: list):
    from .ensemble import _fit_member

    return [_fit_member(template, x, y, counts[j], use_sample_weight, states[j])
            for j in range(len(states))]


def _run_groups(client, submit, slots, n_members: int, progress):
    """Submit one group per slot ``(worker, n_jobs)`` and gather the groups in member
    order, reporting fitted members to ``progress``; on any error the other groups are
    cancelled."""
    from distributed import as_completed

    ranges = member_ranges(n_members, [n_jobs for _, n_jobs in slots])
    futures = [submit(first, end, address, n_jobs)
               for (first, end), (address, n_jobs) in zip(ranges, slots, strict=False)]
    size = {future.key: end - first for future, (first, end) in zip(futures, ranges, strict=True)}
    position = {future.key: k for k, future in enumerate(futures)}
    groups = [None] * len(futures)
    try:
        with progress_callback(progress, "fitting") as callback:
            done = 0
            # Each group is fetched (and unpickled here) as soon as it is fitted, while
            # the workers go on with the later groups.
            for future in as_completed(futures):
                groups[position[future.key]] = future.result()
                done += size[future.key]
                if callback is not None:
                    callback(done, n_members)
        return groups
    except BaseException:
        client.cancel(futures)
        raise


def fit_native(client, learner, X, target, counts, options: dict, progress):
    """The native ensemble of ``counts`` fitted in member groups, one per worker (with
    its threads), joined in member order."""
    workers = _workers(client)
    _check_fits(_nbytes(X), workers)
    x = _training_rows(client, X, frame=False)
    y = client.scatter(target, broadcast=True)

    def submit(first, end, address, n_jobs):
        part = client.scatter(np.ascontiguousarray(counts[first:end]), workers=[address])
        group = dict(options, first_member=first) if learner.member_streams else options
        return client.submit(_fit_native_group, learner.core_class, x, y, part, n_jobs, group,
                             workers=[address], pure=False)

    # GROUPS_PER_WORKER groups per worker, in turn: a worker's first groups travel back
    # while it fits its last one.
    slots = [(address, threads) for _ in range(GROUPS_PER_WORKER)
             for address, threads, _ in workers]
    parts = _run_groups(client, submit, slots, counts.shape[0], progress)
    return learner.core().join(parts)


def fit_wrapped(client, X, y, counts, template, use_sample_weight, states, progress):
    """The fitted clones of ``template``, one group per worker thread, in member order."""
    workers = _workers(client)
    _check_fits(_nbytes(X), workers)
    x = _training_rows(client, X, frame=True)
    y = client.scatter(np.asarray(y), broadcast=True)

    def submit(first, end, address, _):
        part = client.scatter(np.ascontiguousarray(counts[first:end]), workers=[address])
        return client.submit(_fit_wrapped_group, template, x, y, part, use_sample_weight,
                             states[first:end], workers=[address], pure=False)

    slots = [(address, 1) for address, threads, _ in workers for _ in range(threads)]
    groups = _run_groups(client, submit, slots, counts.shape[0], progress)
    return [member for group in groups for member in group]
