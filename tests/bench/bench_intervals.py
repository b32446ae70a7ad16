"""Benchmark: bagwise.prediction_interval (jackknife+) against one numpy float64 matrix
product of the same shape, measured in the same run.

Run with ``make bench`` (release build), or on its own after a release build:

    python tests/bench/bench_intervals.py [--rows 20000] [--members 200] [--points 5000]

Target: the jackknife+ interval within 2x the time of ``(n_rows x n_members) @ (n_members x
n_points)`` in numpy, the product at the heart of the computation (the leave-out means of
every training row at every new point). bagwise forms that product without the zeros of
the out-of-bag mask (about e^-1 of the members per row), a chunk of points at a time, and
takes two order statistics per point by selection; it never holds the full
(n_rows x n_points) matrix that numpy writes.
"""

from __future__ import annotations

import argparse
import os
import time
import warnings

import numpy as np

import bagwise


def best_of(repeat, run):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return min(times)


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=20_000)
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--points", type=int, default=5_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    n_rows, n_members, n_points = args.rows, args.members, args.points
    counts = rng.poisson(1.0, size=(n_members, n_rows)).astype(np.uint8)
    members = rng.normal(size=(n_members, n_points))
    train_members = rng.normal(size=(n_members, n_rows))
    y_train = rng.normal(size=n_rows)
    mask = (counts == 0).T.astype(np.float64)          # (n_rows, n_members)

    reference = best_of(args.repeat, lambda: mask @ members)

    def run():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", bagwise.BagwiseWarning)
            bagwise.prediction_interval(members, counts, train_members, y_train, level=0.9)

    ours = best_of(args.repeat, run)
    print(f"shape: rows {n_rows:,} x members {n_members} x points {n_points:,}; "
          f"cores {os.cpu_count()}")
    print(f"numpy float64 matmul      {reference:8.3f} s")
    print(f"prediction_interval (j+)  {ours:8.3f} s")
    print(f"ratio {ours / reference:.2f} (target <= 2)")


if __name__ == "__main__":
    main()
