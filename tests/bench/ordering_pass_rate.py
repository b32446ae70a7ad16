"""Pass rate over seeds of the check in tests/test_ordering_datasets.py: a bag of trees
ordered on its out-of-bag predictions and pruned to 20% has a mean test error over
``SPLITS`` random splits at most one standard error (of the mean paired difference) above
the full bag's (after Martínez-Muñoz, Hernández-Lobato & Suárez 2009, IEEE TPAMI 31(2)).

Each batch of splits is a pure function of its seed (`batch`); the unit test uses seed 0,
this script seeds 1, 2, ... For every data set and method it prints how often the pruned bag
passes (target >= 99%), how often the controls that should fail pass (the first two members
of the order; the last 20% of it: target 0%), and the mean and range of the standardised
difference mean(d) / SE(d). Not collected by pytest.

    python tests/bench/ordering_pass_rate.py [--batches 100] [--members 100] [--regression]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_ordering_datasets as check  # noqa: E402

VARIANTS = (("first 20%", "right", ">= 99%"), ("first 2", "control", "0%"),
            ("last 20%", "control", "0%"))


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--batches", type=int, default=100)
    parser.add_argument("--first", type=int, default=1, help="first seed")
    parser.add_argument("--members", type=int, default=check.MEMBERS)
    parser.add_argument("--splits", type=int, default=check.SPLITS)
    parser.add_argument("--regression", action="store_true",
                        help="also the regression sets (reduce_error)")
    parser.add_argument("--sets", default=",".join(check.CLASSIFICATION))
    args = parser.parse_args()
    names = args.sets.split(",") + (list(check.REGRESSION) if args.regression else [])
    seeds = range(args.first, args.first + args.batches)
    print(f"{args.batches} batches (seeds {seeds[0]}..{seeds[-1]}) of {args.splits} splits, "
          f"{args.members} members, keep {check.SHARE:.0%}", flush=True)
    for name in names:
        started = time.perf_counter()
        # not the cached `batch`: each seed is used once here
        runs = [check.batch.__wrapped__(name, seed, members=args.members, splits=args.splits)
                for seed in seeds]
        seconds = (time.perf_counter() - started) / args.batches
        methods = sorted({key[0] for key in runs[0] if key != "full"},
                         key=lambda m: (check.CLASS_METHODS + ("reduce_error",)).index(m))
        for method in methods:
            for variant, role, target in VARIANTS:
                results = [check.compare(run[method, variant], run["full"]) for run in runs]
                passes = sum(r.passes for r in results)
                z = np.array([r.difference / r.se if r.se > 0 else np.nan for r in results])
                print(f"{name:14s} {method:16s} {variant:9s} ({role}, target {target:>6s}) "
                      f"passes {passes}/{len(results)} ({passes / len(results):.1%})  "
                      f"mean(d)/SE mean {np.nanmean(z):+.2f} min {np.nanmin(z):+.2f} max {np.nanmax(z):+.2f}",
                      flush=True)
        print(f"{name:14s} {seconds:.1f} s per batch", flush=True)


if __name__ == "__main__":
    main()
