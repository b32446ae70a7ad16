"""Benchmark: bagwise.out_of_bag against the memory floor (np.sum over the same members) and
against a vectorised numpy formulation, all measured in one run.

Run with ``make bench`` (release build), or on its own after ``maturin develop --release``:

    python tests/bench/bench_out_of_bag.py [--points 500000] [--members 200] [--repeat 3]

Targets: out_of_bag within 2x of np.sum(members) (it must read every prediction once) and
at least 5x faster than the numpy reference, which keeps running per-point sums member by
member and evaluates the error curve at the same ensemble sizes.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import bagwise


def best_of(repeat, run):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        value = run()
        times.append(time.perf_counter() - start)
    return min(times), value


def numpy_reference(members, counts, y, sizes):
    """The straightforward vectorised formulation: one numpy pass per member over all points
    (a single fully broadcast expression would need a members-sized temporary)."""
    n = members.shape[1]
    sums = np.zeros(n)
    n_oob = np.zeros(n, dtype=np.int64)
    grid = set(sizes)
    curve = []
    for m in range(members.shape[0]):
        out = counts[m] == 0
        sums += np.where(out, members[m], 0.0)
        n_oob += out
        if m + 1 in grid:
            covered = n_oob > 0
            pred = sums[covered] / n_oob[covered]
            curve.append(np.mean((pred - y[covered]) ** 2))
    return curve


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=500_000)
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    n, m = args.points, args.members
    rng = np.random.default_rng(0)
    y = rng.normal(size=n)
    members64 = rng.standard_normal((m, n))
    members64 += y
    counts = bagwise.resample(n, m, rng=0).counts
    print(f"members ({m}, {n}), counts {counts.dtype}; best of {args.repeat}")
    sizes = bagwise.out_of_bag(members64[:, :1000], counts[:, :1000], y[:1000]).sizes.tolist()

    for name, members in (("float64", members64), ("float32", members64.astype(np.float32))):
        t_sum, _ = best_of(args.repeat, lambda members=members: np.sum(members))
        t_ours, oob = best_of(args.repeat, lambda members=members: bagwise.out_of_bag(members, counts, y))
        t_ref, ref = best_of(max(1, args.repeat - 2),
                             lambda members=members: numpy_reference(members, counts, y, sizes))
        agree = np.allclose(oob.curve, ref, rtol=1e-9 if name == "float64" else 1e-6)
        print(f"{name}: out_of_bag {t_ours:.3f} s   np.sum {t_sum:.3f} s   numpy reference "
              f"{t_ref:.3f} s   (curve agrees: {agree})")
        print(f"  out_of_bag / np.sum     = {t_ours / t_sum:.2f}   (target <= 2)")
        print(f"  reference / out_of_bag  = {t_ref / t_ours:.1f}   (target >= 5)")


if __name__ == "__main__":
    main()
