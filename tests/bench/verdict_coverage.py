"""Coverage of the interval of `BagRegressor.verdict` by simulation (not collected).

Known generator: Friedman #1 (Friedman 1991; `sklearn.datasets.make_friedman1`, noise sd
1). For every replicate training set D of ``--rows`` rows the bag and its verdict are
computed, and the two fitted models (the bag, and the single model of the same learner
fit on all of D) are scored on a large independent test set. The estimand is

    R_n = E_D[test loss of the bag fit on D] / E_D[test loss of the single model fit on D],

the ratio of the expected losses over training sets of this size, estimated from all the
replicates' test sets. Printed: the coverage of R_n, of each replicate's own ratio of its
two fitted models (the conditional ratio, which the interval does not target), and of the
wrong variant that scores the ensemble on its own training rows instead of out of bag.
``--pass-rate B`` reruns the unit tests' checks (tests/test_compare.py) on B blocks of
seeds the tests do not use and prints how often each passes (target >= 99%).

    python tests/bench/verdict_coverage.py [--replicates 200] [--learner tree] [--folds 5]
    python tests/bench/verdict_coverage.py --pass-rate 20
"""

from __future__ import annotations

import argparse
import math
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_compare as t  # noqa: E402


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--replicates", type=int, default=200)
    parser.add_argument("--learner", default="tree")
    parser.add_argument("--rows", type=int, default=100)
    parser.add_argument("--members", type=int, default=50)
    parser.add_argument("--test-rows", type=int, default=5000)
    parser.add_argument("--folds", type=int, default=None)
    parser.add_argument("--first-seed", type=int, default=10_000)
    parser.add_argument("--pass-rate", type=int, default=0)
    args = parser.parse_args()
    if args.pass_rate:
        pairs = full = 0
        for block in range(args.pass_rate):
            first = 20_000 + 1000 * block
            mc = math.sqrt(0.95 * 0.05 / 400)
            pairs += abs(t.simulated_pairs_coverage(first) - 0.95) <= 3 * mc
            draws = t.verdict_replicates(range(first, first + 100))
            coverage, wrong, _, _ = t.verdict_coverage(draws)
            mc = math.sqrt(0.95 * 0.05 / 100)
            full += abs(coverage - 0.95) <= 3 * mc and abs(wrong - 0.95) > 3 * mc
            print(f"block {block}: pairs {pairs}/{block + 1}, verdict {full}/{block + 1} "
                  f"(coverage {coverage:.3f})", flush=True)
        return
    seeds = range(args.first_seed, args.first_seed + args.replicates)
    draws = t.verdict_replicates(seeds, args.learner, args.rows, args.members, args.test_rows,
                                 args.folds)
    coverage, wrong, truth, conditional = t.verdict_coverage(draws)
    mc = math.sqrt(0.95 * 0.05 / len(draws))
    print(f"{args.learner}, {args.rows} rows, {args.members} members, folds "
          f"{args.folds or 'default'}, {args.replicates} training sets: R_n = {truth:.4f}; "
          f"mean estimated ratio {draws[:, 0].mean():.4f}; coverage of R_n {coverage:.3f} "
          f"(nominal 0.95, MC se {mc:.3f}); of the conditional ratio {conditional:.3f}; "
          f"in-sample variant {wrong:.3f}")


if __name__ == "__main__":
    main()
