"""Benchmark: the lazy (dask) path of the statistics of all points, measured in one run.

1. What travels per chunk: the pickled size of one chunk's stream state for every family,
   at several member counts and chunk lengths (the state sizes the docstrings state).
2. Throughput on a 2-worker ``LocalCluster`` (processes) over a memory-mapped ``.npy``
   member matrix, as a ratio against the in-process chunked path over the same file and
   chunks (the stream fed chunk by chunk in one process), for `decompose` and
   `out_of_bag`.

Run with ``make bench`` (release build):

    python tests/bench/bench_dask_streams.py [--members 100] [--points 400000] [--chunk 50000]
"""

from __future__ import annotations

import argparse
import pickle
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

import bagwise


def state_bytes(m: int, p: int) -> dict[str, int]:
    """Pickled bytes of one chunk's stream state, per family."""
    rng = np.random.default_rng(0)
    y = rng.normal(size=p)
    values = y + rng.normal(size=(m, p))
    labels_y = rng.integers(0, 3, size=p)
    labels = np.where(rng.random((m, p)) < 0.6, labels_y, rng.integers(0, 3, size=(m, p)))
    counts = bagwise.resample(p, m, rng=0).counts
    stack = rng.normal(size=(4, m, p))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        streams = {
            "decompose": bagwise.decompose_stream().update(values, y),
            "size_curve": bagwise.size_curve_stream(orders=20).update(values, y),
            "correlation": bagwise.correlation_stream().update(values, y),
            "diversity": bagwise.diversity_stream(n_classes=3).update(labels, labels_y),
            "out_of_bag": bagwise.out_of_bag_stream().update(values, counts, y),
            "replicate_spread": bagwise.replicate_spread_stream().update(stack, y),
        }
    return {name: len(pickle.dumps(stream)) for name, stream in streams.items()}


def best(function, repeats=2):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def _read(path: str, lo: int, hi: int) -> np.ndarray:
    return np.load(path, mmap_mode="r")[:, lo:hi]


def throughput(m: int, n: int, chunk: int) -> None:
    warnings.simplefilter("ignore", bagwise.BagwiseWarning)
    import dask
    import dask.array as da
    from dask.distributed import Client, LocalCluster

    with tempfile.TemporaryDirectory() as folder:
        rng = np.random.default_rng(1)
        y = rng.normal(size=n)
        path = Path(folder) / "members.npy"
        stored = np.lib.format.open_memmap(path, mode="w+", dtype=np.float64, shape=(m, n))
        for b in range(m):
            stored[b] = y + rng.normal(size=n)
        stored.flush()
        counts_path = Path(folder) / "counts.npy"
        np.save(counts_path, bagwise.resample(n, m, rng=1).counts)
        counts = np.load(counts_path, mmap_mode="r")
        members = np.load(path, mmap_mode="r")
        starts = range(0, n, chunk)

        def in_process_decompose():
            stream = bagwise.decompose_stream()
            for s in starts:
                stream.update(members[:, s:s + chunk], y[s:s + chunk])
            return stream.result()

        def in_process_out_of_bag():
            stream = bagwise.out_of_bag_stream()
            for s in starts:
                stream.update(members[:, s:s + chunk], counts[:, s:s + chunk], y[s:s + chunk])
            return stream.result()

        # Each chunk is read from the file on the worker that computes it (no data in the
        # graph), as a user's loader would.
        def read(file, dtype):
            return da.concatenate([
                da.from_delayed(dask.delayed(_read)(str(file), s, min(s + chunk, n)),
                                shape=(m, min(s + chunk, n) - s), dtype=dtype)
                for s in starts], axis=1)

        lazy, lazy_counts = read(path, np.float64), read(counts_path, counts.dtype)
        reference = {"decompose": best(in_process_decompose),
                     "out_of_bag": best(in_process_out_of_bag)}
        with LocalCluster(processes=True, n_workers=2, threads_per_worker=1,
                          dashboard_address=":0") as cluster, Client(cluster):
            bagwise.decompose(lazy[:, :chunk], y[:chunk])  # warm the workers' imports
            ours = {"decompose": best(lambda: bagwise.decompose(lazy, y)),
                    "out_of_bag": best(lambda: bagwise.out_of_bag(lazy, lazy_counts, y))}
        gib = m * n * 8 / 2**30
        for name in ours:
            print(f"{name:12s} in-process {reference[name]:7.2f} s   cluster {ours[name]:7.2f} s   "
                  f"throughput ratio {reference[name] / ours[name]:.2f}  ({gib:.2f} GiB)")


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--members", type=int, default=100)
    parser.add_argument("--points", type=int, default=400_000)
    parser.add_argument("--chunk", type=int, default=50_000)
    args = parser.parse_args()
    print("pickled bytes of one chunk's stream state (what travels per chunk)")
    sizes = [(10, 1_000), (10, 10_000), (100, 1_000), (100, 10_000)]
    table = {shape: state_bytes(*shape) for shape in sizes}
    print(f"{'family':18s}" + "".join(f"  M={m:<4d}P={p:<7,d}" for m, p in sizes))
    for name in table[sizes[0]]:
        print(f"{name:18s}" + "".join(f"  {table[s][name]:>15,d}" for s in sizes))
    throughput(args.members, args.points, args.chunk)


if __name__ == "__main__":
    main()
