"""Repeated calls leave no threads or open files behind (resident memory over 1,000 calls
is measured by tests/bench/soak.py; it has no place in a unit test)."""

from __future__ import annotations

import contextlib
import gc
import io
import os
import sys
import time

import numpy as np
import pytest

import bagwise as bw

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")


def _threads() -> int:
    return len(os.listdir("/proc/self/task"))


def _descriptors() -> set[str]:
    found = set()
    for fd in os.listdir("/proc/self/fd"):
        try:
            found.add(os.readlink(f"/proc/self/fd/{fd}"))
        except FileNotFoundError:  # the directory listing's own descriptor, already closed
            pass
    return found


def _after(read, baseline, wait: float = 5.0):
    """``read()`` once it equals ``baseline``, or after ``wait`` seconds: a dropped thread
    pool's threads exit shortly after the call that owned it returns."""
    deadline = time.monotonic() + wait
    value = read()
    while value != baseline and time.monotonic() < deadline:
        time.sleep(0.05)
        value = read()
    return value


def _repeat(call, times=20, wait=5.0):
    call()  # warm-up: lazy imports, rayon's global pool, matplotlib's font cache
    gc.collect()
    threads, files = _after(_threads, _threads()), _descriptors()
    for _ in range(times):
        call()
    gc.collect()
    assert _after(_threads, threads, wait) == threads
    assert _after(_descriptors, files, wait) == files


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(200, 4))
    y = X[:, 0] + 0.3 * rng.normal(size=200)
    return X, y


def test_fits_on_their_own_thread_pools_leave_no_threads(data):
    X, y = data
    _repeat(lambda: bw.BagRegressor(n_members=4, n_jobs=2).fit(X, y).predict(X))


def test_diagnostics_on_their_own_thread_pools_leave_no_threads(data):
    X, y = data
    bag = bw.BagRegressor(n_members=30, random_state=0).fit(X, y)
    members = bag.member_predictions(X)

    def calls():
        bw.decompose(members, y, n_jobs=3)
        bw.out_of_bag(members, bag.in_bag_, y, n_jobs=3)
        bw.count_gram(bag.in_bag_, n_jobs=3)
        bw.correlation(members, y, matrix=True, n_jobs=3)

    _repeat(calls)


def test_save_and_load_close_their_files(data, tmp_path):
    X, y = data
    bag = bw.BagRegressor(n_members=4, random_state=0).fit(X, y)
    path = tmp_path / "bag.bagwise"
    _repeat(lambda: (bag.save(path), bw.load(path)))


def test_a_corrupt_file_refused_is_closed(data, tmp_path):
    path = tmp_path / "broken.bagwise"
    path.write_bytes(b"not a model file at all")

    def refused():
        with pytest.raises(ValueError):
            bw.load(path)

    _repeat(refused)


# The report warns that so few members cannot estimate every figure; that is its job here.
@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
def test_the_report_command_releases_its_memory_mapped_inputs(data, tmp_path):
    from bagwise.__main__ import main as cli

    X, y = data
    bag = bw.BagRegressor(n_members=40, random_state=0).fit(X, y)
    np.save(tmp_path / "members.npy", bag.member_predictions(X))
    np.save(tmp_path / "targets.npy", y)
    np.save(tmp_path / "counts.npy", bag.in_bag_)
    argv = ["report", "--members", str(tmp_path / "members.npy"),
            "--targets", str(tmp_path / "targets.npy"), "--counts", str(tmp_path / "counts.npy"),
            "--out", str(tmp_path / "report.html"), "--quiet"]

    def report():
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            assert cli(argv) == 0

    _repeat(report, times=2)


def test_the_check_catches_a_leaked_file_and_a_leaked_thread(tmp_path):
    import threading

    opened = []
    with pytest.raises(AssertionError):
        _repeat(lambda: opened.append(open(tmp_path / f"f{len(opened)}", "w")), times=2,  # noqa: SIM115
                wait=0.2)
    for f in opened:  # noqa: SIM115
        f.close()
    stop = threading.Event()
    with pytest.raises(AssertionError):
        _repeat(lambda: threading.Thread(target=stop.wait, daemon=True).start(), times=2, wait=0.2)
    stop.set()
