"""A member matrix several times larger than each worker's memory, on disk, diagnosed on a
cluster of two worker processes: every chunk is read from the file by the worker that needs
it, and nothing larger than a chunk's state travels.

The matrix is written once per session (about 1.3 GB, float64); the workers are limited to
400 MB each, of which about 130 MB is the worker itself, so the matrix is more than four
times what a worker may hold. A worker that went over its limit would be restarted by its
nanny (its process id would change) or paused; both are checked.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

import bagwise

distributed = pytest.importorskip("distributed")

N_MEMBERS = 40
N_POINTS = 4_000_000           # 40 × 4M × 8 bytes = 1.28 GB
WORKER_MEMORY = "400MB"
POINTS_PER_WRITE = 250_000


@pytest.fixture(scope="module")
def on_disk(tmp_path_factory):
    """The member matrix as a .npy file, the targets, and in-bag counts;
    written block by block so the test process never holds the matrix either."""
    folder = tmp_path_factory.mktemp("out_of_core")
    rng = np.random.default_rng(20261203)
    y = rng.normal(size=N_POINTS)
    counts = rng.integers(0, 3, size=(N_MEMBERS, N_POINTS), dtype=np.uint8)
    # Every point out of bag for at least one member, so no point is left uncovered.
    counts[np.arange(N_POINTS) % N_MEMBERS, np.arange(N_POINTS)] = 0
    np.save(folder / "counts.npy", counts)
    path = folder / "members.npy"
    members = np.lib.format.open_memmap(path, mode="w+", dtype=np.float64,
                                        shape=(N_MEMBERS, N_POINTS))
    # One block of noise, its members rotated from block to block: cheap to write, and
    # still a different matrix in every block.
    noise = rng.standard_normal((N_MEMBERS, POINTS_PER_WRITE))
    for number, start in enumerate(range(0, N_POINTS, POINTS_PER_WRITE)):
        stop = start + POINTS_PER_WRITE
        members[:, start:stop] = y[start:stop] + np.roll(noise, number, axis=0)
    members.flush()
    del members
    return path, y, folder / "counts.npy"


@pytest.fixture(scope="module")
def small_workers():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       memory_limit=WORKER_MEMORY, dashboard_address=":0")
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


def _pids(client) -> dict:
    return client.run(os.getpid)


def _losses_by_numpy(path, y):
    """Ensemble and mean member squared error straight from their definitions, block by
    block with numpy (common practice: mean of (mean_b t_b - y)^2 and of (t_b - y)^2)."""
    members = np.load(path, mmap_mode="r")
    ensemble = member = 0.0
    for start in range(0, N_POINTS, POINTS_PER_WRITE):
        block = np.asarray(members[:, start:start + POINTS_PER_WRITE])
        target = y[start:start + POINTS_PER_WRITE]
        ensemble += np.sum((block.mean(axis=0) - target) ** 2)
        member += np.sum((block - target) ** 2) / N_MEMBERS
    return ensemble / N_POINTS, member / N_POINTS


def test_memory_mapped_matrix_larger_than_a_worker(on_disk, small_workers):
    path, y, _ = on_disk
    assert os.path.getsize(path) > 3 * 400e6
    before = _pids(small_workers)
    result = bagwise.decompose(np.load(path, mmap_mode="r"), y)
    ensemble, member = _losses_by_numpy(path, y)
    # Reference: numpy on the definitions (above); the decomposition's identity makes the
    # ambiguity their difference (Krogh & Vedelsby 1995, eq. 6).
    np.testing.assert_allclose(result.ensemble_loss, ensemble, rtol=1e-12)
    np.testing.assert_allclose(result.member_loss, member, rtol=1e-12)
    np.testing.assert_allclose(result.ambiguity, member - ensemble, rtol=1e-9)
    assert _pids(small_workers) == before, "a worker was restarted"


def test_out_of_bag_of_a_matrix_larger_than_a_worker(on_disk, small_workers):
    path, y, counts = on_disk
    before = _pids(small_workers)
    result = bagwise.out_of_bag(np.load(path, mmap_mode="r"), np.load(counts, mmap_mode="r"), y)
    # Reference: the in-memory path of the same function, on the same file read through
    # numpy's memory map in this process.
    expected = bagwise.out_of_bag(np.asarray(np.load(path, mmap_mode="r")), np.load(counts), y)
    np.testing.assert_allclose(result.ensemble_loss, expected.ensemble_loss, rtol=1e-12)
    np.testing.assert_allclose(result.curve, expected.curve, rtol=1e-12)
    np.testing.assert_array_equal(result.prediction, expected.prediction)
    np.testing.assert_array_equal(result.n_out_of_bag, expected.n_out_of_bag)
    assert _pids(small_workers) == before, "a worker was restarted"
