"""Pass rate over seeds of every statistical check in the resampling, little-bags, tree,
ensemble, linear and replicate tests: each check's core is a function of its seed in its
test module (the unit test runs one seed); here it runs on many seeds and the share of
seeds on which the right code passes, and on which each wrong variant passes, is printed.
The right code must pass on >= 99% of seeds and every wrong variant on (nearly) none.
Not collected by pytest.

    python tests/bench/suite_a_pass_rate.py [--seeds 200] [--only NAME ...] [--list]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time
import warnings

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_ensemble as ensemble  # noqa: E402
import test_ensemble_diagnostics as diagnostics  # noqa: E402
import test_linear as linear  # noqa: E402
import test_little_bags as little_bags  # noqa: E402
import test_replicates as replicates  # noqa: E402
import test_resampling as resampling  # noqa: E402
import test_tree as tree  # noqa: E402


def threshold(value_of, passes):
    """A check with a sourced threshold and no wrong variant of its own: (passes, {})."""
    return lambda seed: (passes(value_of(seed)), {})


def replicate_check(seed):
    right, wrong = replicates.equicorrelated_errors(seed)
    return (all(abs(z) <= replicates.Z for z in right.values()),
            {name: abs(z) <= replicates.Z for name, z in wrong.items()})


def oob_check(seed):
    oob, cv, single = diagnostics.oob_against_cv(seed)
    return (abs(oob - cv) <= diagnostics.oob_tolerance(oob, cv, 569) and cv < single, {})


CHECKS = {
    # test_resampling.py
    "out-of-bag share": resampling.out_of_bag_share_check,
    "one row binomial": resampling.one_row_binomial_check,
    "multinomial covariance": resampling.multinomial_check,
    "bayesian dirichlet": resampling.bayesian_check,
    "bayesian strata": resampling.stratified_bayesian_check,
    "bayesian groups": resampling.grouped_bayesian_check,
    "subsample inclusion": resampling.subsample_check,
    "group out-of-bag": resampling.grouped_count_check,
    "block out-of-bag": resampling.block_check,
    "block starts uniform": resampling.block_starts_check,
    # test_little_bags.py (the kernel and tree checks: tests/bench/bench_little_bags.py)
    "little bags inclusion": little_bags.little_bags_draw_check,
    # test_tree.py
    "split features k=1": lambda seed: tree.candidate_features_check(seed, 1),
    "split features k=2": lambda seed: tree.candidate_features_check(seed, 2),
    "split features k=3": lambda seed: tree.candidate_features_check(seed, 3),
    "tree friedman ratio": threshold(tree.friedman_ratio, lambda r: r <= tree.FRIEDMAN_RATIO),
    "tree breast cancer gain": threshold(tree.breast_cancer_gain,
                                         lambda g: g > tree.BREAST_CANCER_GAIN),
    # test_ensemble.py
    "native friedman ratio": threshold(ensemble.native_friedman_ratio,
                                       lambda r: r <= ensemble.FRIEDMAN_RATIO),
    "wrapped friedman ratio": threshold(ensemble.wrapped_friedman_ratio,
                                        lambda r: r <= ensemble.FRIEDMAN_RATIO),
    # test_ensemble_diagnostics.py
    "diagnose stable ratio": threshold(
        diagnostics.stable_ratio,
        lambda rv: diagnostics.STABLE_RATIO[0] <= rv[0] < diagnostics.STABLE_RATIO[1]),
    "diagnose friedman ratios": threshold(
        diagnostics.friedman_ratios,
        lambda rs: sum(rs) / len(rs) <= diagnostics.FRIEDMAN_RATIO
        and all(r < diagnostics.FRIEDMAN_EACH for r in rs)),
    "out-of-bag against cv": oob_check,
    # test_linear.py
    "linear stable ratio": threshold(linear.stable_ratio,
                                     lambda r: linear.STABLE_RATIO[0] <= r
                                     < linear.STABLE_RATIO[1]),
    # test_replicates.py
    "replicate spread": replicate_check,
}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--first", type=int, default=1000, help="first seed (the unit "
                        "tests use small seeds)")
    parser.add_argument("--only", nargs="*", default=None)
    parser.add_argument("--list", action="store_true")
    args = parser.parse_args()
    if args.list:
        print("\n".join(CHECKS))
        return
    names = args.only or list(CHECKS)
    seeds = range(args.first, args.first + args.seeds)
    for name in names:
        check = CHECKS[name]
        start = time.perf_counter()
        right, wrong = 0, {}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for seed in seeds:
                passed, variants = check(seed)
                right += bool(passed)
                for variant, ok in variants.items():
                    wrong[variant] = wrong.get(variant, 0) + bool(ok)
        n = len(seeds)
        line = f"{name:26} right passes {right / n:6.1%}"
        line += "".join(f"; wrong '{v}' passes {c / n:.1%}" for v, c in wrong.items())
        print(f"{line}  ({n} seeds, {time.perf_counter() - start:.0f} s)", flush=True)


if __name__ == "__main__":
    main()
