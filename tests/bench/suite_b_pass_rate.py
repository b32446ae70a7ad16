"""Pass rate over seeds of the statistical checks that have no script of their own:

* "size law"          tests/test_size_curve.py `curve_law_checks` (|curve − law| ≤ Z SE at every
                      size; wrong variant W with ddof 0)
* "std error figure"  tests/test_plots.py `std_error_check` (binned standard-error figure
                      against refitted ensembles; wrong variant a standard error 1.6x too large)
* "paired bootstrap"  tests/test_compare.py `paired_bootstrap_check` (delta-method SE of the
                      verdict's ratio against a paired bootstrap; wrong variant unpaired)
* "pairs coverage"    tests/test_compare.py `simulated_pairs_coverage` (400 intervals of the
                      ratio on a known generator within 3 MC SE of 0.95; wrong variant unpaired)
* "fitted interval"   tests/test_intervals.py `fitted_interval_check` (one split of diabetes,
                      coverage above 1 − 2α; wrong variant the level read as the miss rate)
* "fitted sets"       tests/test_intervals.py `fitted_sets_check` (one split of breast cancer;
                      same wrong variant)

For each it prints how often the right check passes (target >= 99%) and how often the wrong
variant is caught (target 100%), over seeds the unit tests do not use. The other
statistical checks have their own scripts: variance_pass_rate.py (test_uncertainty,
including the spread's closed form, and test_replicates), noise_pass_rate.py
(test_variance_status), coverage_pass_rate.py (test_intervals' coverage over splits),
verdict_coverage.py --pass-rate (test_compare's coverage of the verdict over
refitted bags). Not collected by pytest.

    python tests/bench/suite_b_pass_rate.py [--seeds 200] [--cases "size law,fitted sets"]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time

import matplotlib

matplotlib.use("Agg")

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_compare as compare  # noqa: E402
import test_intervals as intervals  # noqa: E402
import test_plots as plots  # noqa: E402
import test_size_curve as size_curve  # noqa: E402

import bagwise  # noqa: E402


def size_law(seed):
    checks = size_curve.curve_law_checks(seed)
    return checks["right"] <= size_curve.Z, checks["W with ddof 0"] > size_curve.Z


def std_error_figure(seed):
    return plots.std_error_check(seed), plots.std_error_check(seed, 1.6)


def paired_bootstrap(seed):
    x, y = compare.sklearn.datasets.load_diabetes(return_X_y=True)
    bag = bagwise.BagRegressor("tree", n_members=100, random_state=seed).fit(x, y)
    return compare.paired_bootstrap_check(bag.verdict(), seed)


def pairs_coverage(seed):
    """test_compare's coverage of 400 simulated pairs within 3 Monte-Carlo SE of 0.95; the
    wrong variant (unpaired) must overcover beyond it."""
    mc = compare.math.sqrt(0.95 * 0.05 / 400)
    return (abs(compare.simulated_pairs_coverage(seed) - 0.95) <= 3 * mc,
            compare.simulated_pairs_coverage(seed, paired=False) - 0.95 > 3 * mc)


CASES = {
    "size law": size_law,
    "pairs coverage": pairs_coverage,
    "std error figure": std_error_figure,
    "paired bootstrap": paired_bootstrap,
    "fitted interval": intervals.fitted_interval_check,
    "fitted sets": intervals.fitted_sets_check,
}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--first", type=int, default=5000, help="first seed")
    parser.add_argument("--cases", default=",".join(CASES))
    args = parser.parse_args()
    seeds = range(args.first, args.first + args.seeds)
    for case in args.cases.split(","):
        started = time.perf_counter()
        runs = [CASES[case](seed) for seed in seeds]
        right = sum(bool(r) for r, _ in runs)
        caught = sum(bool(w) for _, w in runs)
        print(f"{case:18s} right passes {right}/{len(runs)} ({right / len(runs):.1%}); "
              f"wrong variant caught {caught}/{len(runs)} ({caught / len(runs):.1%}); "
              f"{(time.perf_counter() - started) / len(runs):.2f} s per seed", flush=True)


if __name__ == "__main__":
    main()
