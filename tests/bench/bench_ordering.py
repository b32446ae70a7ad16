"""Benchmark: the time and memory of bagwise.order_members against passes over the member
predictions, all measured in one run.

Run after ``maturin develop --release``:

    python tests/bench/bench_ordering.py [--points 100000] [--members 500] [--repeat 2]

The target (from the issue): "time comparable to a few passes over the member predictions;
memory O(points)". Each case and mode runs in its own process (the memory one call leaves
to the allocator would hide part of the next call's rise): it builds the member
predictions, runs ``order_members`` in one of two modes,

- ``order``: the order alone (``folds=None, orders=1``: the order and one random curve);
- ``default``: the default call (``folds=2, orders=10``: the order, the curves of 11 orders
  and a 2-fold cross-fitted curve, i.e. two more orders on half the points each);

then times one ``np.sum(members, axis=0)`` over the same array (a "pass", best of
``--repeat``), and prints each time in passes, with the peak extra memory of the call: the
rise of the process's peak resident set (VmHWM, reset before the call through /proc/self/clear_refs,
Linux) above its resident set before the call, and the peak of tracemalloc (the Python-side
allocations numpy reports; the Rust core's own allocations are not traced), both as a
multiple of the size of the member array and in bytes per point. Nothing is asserted.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
import tracemalloc

import numpy as np

CASES = [
    # (name, kind, method, out of bag)
    ("values reduce_error", "values", "reduce_error", False),
    ("values residual_correlation", "values", "residual_correlation", False),
    ("probabilities reduce_error", "probabilities", "reduce_error", False),
    ("probabilities complementarity", "probabilities", "complementarity", False),
    ("probabilities margin_distance", "probabilities", "margin_distance", False),
    ("probabilities orientation", "probabilities", "orientation", False),
    ("values reduce_error, out of bag", "values", "reduce_error", True),
    ("probabilities reduce_error, out of bag", "probabilities", "reduce_error", True),
]

N_CLASSES = 3


def make_members(kind, n_members, n_points, seed=0):
    """Member predictions with a shared signal and member-specific noise (a bagged
    ensemble's look), built member by member to keep the peak near the final array."""
    rng = np.random.default_rng(seed)
    if kind == "values":
        y = rng.normal(size=n_points)
        members = np.empty((n_members, n_points))
        for m in range(n_members):
            members[m] = y + 0.5 * rng.normal() + rng.normal(size=n_points)
        return members, y
    y = rng.integers(0, N_CLASSES, size=n_points)
    members = np.empty((n_members, n_points, N_CLASSES))
    rows = np.arange(n_points)
    for m in range(n_members):
        logits = rng.normal(size=(n_points, N_CLASSES))
        logits[rows, y] += rng.uniform(0.2, 1.5)
        np.exp(logits, out=logits)
        members[m] = logits / logits.sum(axis=1, keepdims=True)
    return members, y


def rss_bytes(field):
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith(field + ":"):
                return int(line.split()[1]) * 1024
    raise RuntimeError(f"no {field} in /proc/self/status")


def measured(run):
    """(seconds, peak RSS rise, tracemalloc peak) of ``run()``."""
    with open("/proc/self/clear_refs", "w") as handle:
        handle.write("5")                     # reset VmHWM to the current resident set
    before = rss_bytes("VmRSS")
    tracemalloc.start()
    start = time.perf_counter()
    run()
    seconds = time.perf_counter() - start
    _, traced = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return seconds, rss_bytes("VmHWM") - before, traced


MODES = {"order": dict(folds=None, orders=1), "default": dict(folds=2, orders=10)}


def one_case(index, mode, n_members, n_points, repeat):
    """One mode of one case, in a fresh process: the memory a call leaves to the allocator
    would otherwise hide part of the next call's rise."""
    import bagwise

    name, kind, method, out_of_bag = CASES[index]
    members, y = make_members(kind, n_members, n_points)
    counts = bagwise.resample(n_points, n_members, rng=0).counts if out_of_bag else None
    seconds, rss, traced = measured(lambda: bagwise.order_members(
        members, y, method=method, counts=counts, **MODES[mode]))
    # the reference passes after the call, so they cannot lower its memory rise
    one_pass = min(measured(lambda: np.sum(members, axis=0))[0] for _ in range(repeat))
    return {"name": name, "bytes": members.nbytes, "pass": one_pass,
            mode: {"seconds": seconds, "rss": rss, "traced": traced}}


def main():
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--points", type=int, default=100_000)
    parser.add_argument("--members", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--cases", default=",".join(str(i) for i in range(len(CASES))),
                        help="indices into CASES")
    parser.add_argument("--case", type=int, help=argparse.SUPPRESS)   # one case, in a child
    parser.add_argument("--mode", choices=MODES, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.case is not None:
        print(json.dumps(one_case(args.case, args.mode, args.members, args.points,
                                  args.repeat)))
        return
    print(f"{args.members} members, {args.points:,} points, {N_CLASSES} classes for "
          f"probabilities; a pass = np.sum(members, axis=0), best of {args.repeat}; "
          "order = folds=None, orders=1; default = folds=2, orders=10", flush=True)
    head = " | ".join(f"{'pass':>7s} {mode:>7s} {'passes':>7s} {'RSS+':>6s} {'B/pt':>6s} "
                      f"{'traced':>6s}" for mode in MODES)
    print(f"{'case':40s} {'array':>8s} | {head}", flush=True)
    for index in map(int, args.cases.split(",")):
        runs = {}
        for mode in MODES:
            child = subprocess.run(
                [sys.executable, __file__, "--case", str(index), "--mode", mode,
                 "--members", str(args.members), "--points", str(args.points),
                 "--repeat", str(args.repeat)],
                check=True, capture_output=True, text=True)
            runs[mode] = json.loads(child.stdout.strip().splitlines()[-1])
        size = runs["order"]["bytes"]
        line = f"{runs['order']['name']:40s} {size / 2**20:6.0f}MB"
        for mode, r in runs.items():
            m = r[mode]
            line += (f" | {r['pass']:6.3f}s {m['seconds']:6.2f}s {m['seconds'] / r['pass']:7.1f} "
                     f"{m['rss'] / size:6.3f} {m['rss'] / args.points:6.0f} "
                     f"{m['traced'] / size:6.3f}")
        print(line, flush=True)
    print("RSS+ and traced: peak extra memory of the call as a multiple of the member array; "
          "B/pt: the RSS rise in bytes per point", flush=True)


if __name__ == "__main__":
    main()
