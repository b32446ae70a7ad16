"""Benchmark: a pruned bag predicts faster in proportion to the members it keeps, and
pruning itself (ordering on the out-of-bag predictions included) costs a few predictions.

Run after ``maturin develop --release``:

    python tests/bench/bench_prune.py [--rows 20000] [--members 200] [--repeat 3]

Prints, for native trees (regression and a two-class classifier) and linear members, the
prediction time of the full bag over that of bags pruned to 50%, 20% and 10%, next to the
ratio of members (the target: the time ratio is at least 80% of the member ratio), and the
time of ``prune(0.2)`` (out-of-bag predictions, the order with its cross-fitted curve, and
the member selection) as a multiple of one full prediction of the training rows.
"""

from __future__ import annotations

import argparse
import time

from sklearn.datasets import make_classification, make_friedman1

import bagwise


def best_of(repeat, run):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=20_000)
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    x, y = make_friedman1(2 * args.rows, noise=1.0, random_state=0)
    xc, yc = make_classification(2 * args.rows, n_features=10, random_state=0)
    cases = [
        ("tree, regression", bagwise.BagRegressor("tree", n_members=args.members,
                                                  random_state=0), x, y),
        ("tree, two classes", bagwise.BagClassifier("tree", n_members=args.members,
                                                    random_state=0), xc, yc),
        ("linear", bagwise.BagRegressor("linear", n_members=args.members, random_state=0), x, y),
    ]
    failed = False
    print(f"{args.rows:,} training rows, {args.rows:,} test rows, {args.members} members; "
          "best of", args.repeat)
    print(f"{'bag':<18} {'kept':>5} {'members ratio':>14} {'time ratio':>11} {'share':>6}")
    for name, bag, features, target in cases:
        train, test = features[:args.rows], features[args.rows:]
        bag.fit(train, target[:args.rows])
        full = best_of(args.repeat, lambda bag=bag, test=test: bag.predict(test))
        start = time.perf_counter()
        order = bag.order_members()
        ordering = time.perf_counter() - start
        predict_train = best_of(1, lambda bag=bag: bag.out_of_bag_predictions())
        for share in (0.5, 0.2, 0.1):
            pruned = bag.prune(share, order=order)
            seconds = best_of(args.repeat, lambda pruned=pruned, test=test: pruned.predict(test))
            members_ratio = bag.n_members / pruned.n_members
            time_ratio = full / seconds
            ok = time_ratio >= 0.8 * members_ratio
            failed |= not ok
            print(f"{name:<18} {pruned.n_members:>5} {members_ratio:>14.1f} {time_ratio:>11.1f} "
                  f"{time_ratio / members_ratio:>6.0%}{'' if ok else '  BELOW TARGET'}")
        print(f"{name:<18} order_members (with 2-fold honest curve): {ordering:.2f} s = "
              f"{ordering / predict_train:.1f} out-of-bag predictions of the training rows")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
