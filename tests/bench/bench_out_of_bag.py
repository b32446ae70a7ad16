"""Benchmark: bagwise.out_of_bag against the memory floor (np.sum over the same members) and
against a vectorised numpy formulation, all measured in one run.

Run with ``make bench`` (release build), or on its own after ``maturin develop --release``:

    python tests/bench/bench_out_of_bag.py [--points 500000] [--members 200] [--repeat 5]

Targets: out_of_bag within 1.5x of np.sum(members) for every kind of members (it must read
every prediction once): values and probabilities in float64 and float32, integer labels;
and, for values, at least 5x faster than the numpy reference, which keeps running
per-point sums member by member and evaluates the error curve at the same ensemble sizes.
np.sum runs on one thread (pairwise summation); out_of_bag on its default pool, whose size
is printed. Probabilities get points // classes points, so every member array holds the
same number of predictions. Every ratio is printed first; the targets are asserted at the
end.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

import bagwise

SUM_TARGET = 1.5
REFERENCE_TARGET = 5.0


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


def default_threads():
    """The size of rayon's default pool: RAYON_NUM_THREADS, else the cores available."""
    setting = os.environ.get("RAYON_NUM_THREADS", "")
    if setting.isdigit() and int(setting) > 0:
        return int(setting)
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=500_000)
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--classes", type=int, default=3)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    n, m, k = args.points, args.members, args.classes
    rng = np.random.default_rng(0)
    y = rng.normal(size=n)
    members64 = rng.standard_normal((m, n))
    members64 += y
    counts = bagwise.resample(n, m, rng=0).counts
    print(f"members ({m}, {n}), counts {counts.dtype}; best of {args.repeat}; threads: "
          f"np.sum 1, out_of_bag {default_threads()} (default pool)")
    sizes = bagwise.out_of_bag(members64[:, :1000], counts[:, :1000], y[:1000]).sizes.tolist()

    classes = rng.integers(0, k, size=n)
    labels = (classes + (rng.random((m, n)) < 0.3) * rng.integers(1, k, size=(m, n))) % k
    n_prob = n // k
    probabilities = rng.random((m, n_prob, k))
    probabilities[np.arange(m)[:, None], np.arange(n_prob), classes[:n_prob]] += 1.0
    probabilities /= probabilities.sum(axis=2, keepdims=True)
    cases = [
        ("values float64", members64, counts, y),
        ("values float32", members64.astype(np.float32), counts, y),
        (f"labels {labels.dtype}", labels, counts, classes),
        ("probabilities float64", probabilities, counts[:, :n_prob], classes[:n_prob]),
        ("probabilities float32", probabilities.astype(np.float32), counts[:, :n_prob],
         classes[:n_prob]),
    ]
    del members64, probabilities

    failures = []
    for name, members, case_counts, targets in cases:
        t_sum, _ = best_of(args.repeat, lambda members=members: np.sum(members))
        t_ours, oob = best_of(args.repeat, lambda members=members, c=case_counts, t=targets:
                              bagwise.out_of_bag(members, c, t))
        ratio = t_ours / t_sum
        print(f"{name:22s} shape {members.shape}: out_of_bag {t_ours:.3f} s   np.sum "
              f"{t_sum:.3f} s   out_of_bag / np.sum = {ratio:.2f}   (target <= {SUM_TARGET})")
        # Where the time goes: the pass over the members with the loss at the full size only,
        # against the same call with the whole default curve.
        t_pass, _ = best_of(args.repeat, lambda members=members, c=case_counts, t=targets:
                            bagwise.out_of_bag(members, c, t, sizes=[m]))
        print(f"{'':22s} of which the pass with the loss at {m} members only: {t_pass:.3f} s "
              f"({t_pass / t_sum:.2f} x np.sum); the other {len(sizes) - 1} curve sizes: "
              f"{t_ours - t_pass:.3f} s")
        if ratio > SUM_TARGET:
            failures.append(f"{name}: out_of_bag / np.sum = {ratio:.2f} > {SUM_TARGET}")
        if name.startswith("values"):
            t_ref, ref = best_of(max(1, args.repeat - 4), lambda members=members:
                                 numpy_reference(members, counts, y, sizes))
            agree = np.allclose(oob.curve, ref, rtol=1e-9 if "64" in name else 1e-6)
            print(f"{'':22s} numpy reference {t_ref:.3f} s: reference / out_of_bag = "
                  f"{t_ref / t_ours:.1f}   (target >= {REFERENCE_TARGET}; curve agrees: {agree})")
            if not agree:
                failures.append(f"{name}: the curve differs from the numpy reference")
            if t_ref / t_ours < REFERENCE_TARGET:
                failures.append(f"{name}: reference / out_of_bag = {t_ref / t_ours:.1f} < "
                                f"{REFERENCE_TARGET}")
    assert not failures, "; ".join(failures)


if __name__ == "__main__":
    main()
