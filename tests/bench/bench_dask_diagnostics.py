"""Diagnostics over an on-disk member matrix: a 2-worker dask cluster against the in-process
chunked path, same run, same file.

The matrix (100 members × 5M points, float64, 4 GB) and its in-bag counts (uint8, 0.5 GB)
are written once as .npy files. The in-process path feeds a stream chunk by chunk from a
memory map; the cluster path passes the memory maps to the public function while a
``dask.distributed`` client is active, so each worker reads its own chunks from the file.
Printed: seconds of each, the cluster's throughput as a share of in-process (target ≥ 70%),
and the pickled size of one chunk's state, from which the note extrapolates a larger run.

Run: ``python tests/bench/bench_dask_diagnostics.py [folder]`` (release build; the folder
needs 4.5 GB free, default a temporary one removed at the end).
"""

from __future__ import annotations

import os
import pickle
import shutil
import sys
import tempfile
import time

import numpy as np

import bagwise
from bagwise import _chunked

N_MEMBERS = 100
N_POINTS = 5_000_000
BLOCK = 250_000


def write(folder):
    targets = os.path.join(folder, "y.npy")
    if os.path.exists(targets) and os.path.exists(os.path.join(folder, "counts.npy")):
        return np.load(targets)             # written by an earlier run into this folder
    rng = np.random.default_rng(7)
    y = rng.normal(size=N_POINTS)
    members = np.lib.format.open_memmap(os.path.join(folder, "members.npy"), mode="w+",
                                        dtype=np.float64, shape=(N_MEMBERS, N_POINTS))
    counts = np.lib.format.open_memmap(os.path.join(folder, "counts.npy"), mode="w+",
                                       dtype=np.uint8, shape=(N_MEMBERS, N_POINTS))
    for start in range(0, N_POINTS, BLOCK):
        stop = start + BLOCK
        members[:, start:stop] = y[start:stop] + rng.standard_normal((N_MEMBERS, stop - start))
        block = rng.poisson(1.0, size=(N_MEMBERS, stop - start)).astype(np.uint8)
        block[np.arange(start, stop) % N_MEMBERS, np.arange(stop - start)] = 0
        counts[:, start:stop] = block
    members.flush()
    counts.flush()
    np.save(targets, y)
    return y


def in_process(folder, y, step):
    members = np.load(os.path.join(folder, "members.npy"), mmap_mode="r")
    counts = np.load(os.path.join(folder, "counts.npy"), mmap_mode="r")
    timings, sizes = {}, {}
    start = time.perf_counter()
    stream = bagwise.decompose_stream()
    for a in range(0, N_POINTS, step):
        stream.update(members[:, a:a + step], y[a:a + step])
        if a == 0:
            sizes["decompose"] = len(pickle.dumps(stream))
    decomposition = stream.result()
    timings["decompose"] = time.perf_counter() - start
    start = time.perf_counter()
    stream = bagwise.out_of_bag_stream()
    for a in range(0, N_POINTS, step):
        stream.update(members[:, a:a + step], counts[:, a:a + step], y[a:a + step])
        if a == 0:
            sizes["out_of_bag"] = len(pickle.dumps(stream))
    oob = stream.result()
    timings["out_of_bag"] = time.perf_counter() - start
    return timings, sizes, decomposition, oob


def on_cluster(folder, y):
    from dask.distributed import Client, LocalCluster

    timings = {}
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=":0") as cluster, Client(cluster):
        members = np.load(os.path.join(folder, "members.npy"), mmap_mode="r")
        counts = np.load(os.path.join(folder, "counts.npy"), mmap_mode="r")
        # One untimed run first: the workers import bagwise and map the file once.
        bagwise.decompose(members, y)
        start = time.perf_counter()
        decomposition = bagwise.decompose(members, y)
        timings["decompose"] = time.perf_counter() - start
        start = time.perf_counter()
        oob = bagwise.out_of_bag(members, counts, y)
        timings["out_of_bag"] = time.perf_counter() - start
    return timings, decomposition, oob


def main():
    folder = sys.argv[1] if len(sys.argv) > 1 else tempfile.mkdtemp(prefix="bagwise-bench-")
    try:
        start = time.perf_counter()
        y = write(folder)
        print(f"wrote {N_MEMBERS} × {N_POINTS:,} float64 ({N_MEMBERS * N_POINTS * 8 / 1e9:.1f} GB)"
              f" and uint8 counts in {time.perf_counter() - start:.0f} s")
        step = _chunked.MEMMAP_CHUNK_BYTES // (N_MEMBERS * 8)
        local, sizes, d_local, oob_local = in_process(folder, y, step)
        cluster, d_cluster, oob_cluster = on_cluster(folder, y)
        assert abs(d_cluster.ambiguity - d_local.ambiguity) <= 1e-12 * abs(d_local.ambiguity)
        assert abs(oob_cluster.ensemble_loss - oob_local.ensemble_loss) <= (
            1e-12 * abs(oob_local.ensemble_loss))
        n_chunks = -(-N_POINTS // step)
        print(f"chunks of {step:,} points ({n_chunks} chunks)")
        for name in ("decompose", "out_of_bag"):
            share = local[name] / cluster[name]
            print(f"{name:11s} in-process {local[name]:6.1f} s   2-worker cluster "
                  f"{cluster[name]:6.1f} s   cluster throughput {share:.0%} of in-process "
                  f"(target ≥ 70%)   one chunk's pickled state {sizes[name] / 1e6:.2f} MB")
    finally:
        if len(sys.argv) <= 1:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
