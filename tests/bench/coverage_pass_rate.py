"""Pass rate over seeds of the statistical checks in tests/test_intervals.py.

Each block of 20 consecutive seeds is one run of a coverage test (20 random splits or
simulated samples); the script reruns every check on many blocks and prints how often it
passes (target >= 99%), with the mean coverage, and how often the wrong variant (in-bag
scores; the wrong Binomial probability) fails. The fits of one block are shared by the
methods of a dataset. Not collected by pytest.

    python tests/bench/coverage_pass_rate.py [--blocks 50] [--cases member_count,diabetes-jackknife+]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
from collections import defaultdict

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_intervals as t  # noqa: E402

SIMULATED = ["simulated-jackknife+", "simulated-out_of_bag_residual"]
WRONG = {"diabetes-jackknife+", "breast_cancer-least_ambiguous"}


def check(case, first):
    """(passed, mean coverage, wrong variant failed or None) of one block."""
    if case == "member_count":
        counts = t.member_count_draws(first * 150, 3000)
        passed = t.binomial_check(counts, 60, 0.9 ** 9)[0]
        wrong = not t.binomial_check(counts, 60, (1 - 1 / 9) ** 9)[0]
        return passed, float(counts.mean()), wrong
    if case.startswith("simulated"):
        method = case.split("-", 1)[1]
        passed, mean, _ = t.coverage_check(t.simulated_coverages(first, method=method), 0.8,
                                           t.conservative(method))
        wrong = not t.coverage_check(t.simulated_coverages(first, method=method, in_bag=True),
                                     0.8)[0]
        return passed, mean, wrong
    passed, mean, _ = t.coverage_check(t.case_coverages(case, first), 0.8,
                                       t.conservative(t.CASES[case][1]))
    wrong = None
    if case in WRONG:
        wrong = not t.coverage_check(t.case_coverages(case, first, in_bag=True), 0.8)[0]
    return passed, mean, wrong


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--blocks", type=int, default=50)
    parser.add_argument("--cases", default=",".join(["member_count", *t.CASES, *SIMULATED]))
    args = parser.parse_args()
    cases = args.cases.split(",")
    passes, means, wrongs = defaultdict(int), defaultdict(list), defaultdict(list)
    for block in range(args.blocks):
        first = 1000 + 20 * block     # seeds not used by the test itself
        for case in cases:
            passed, mean, wrong = check(case, first)
            passes[case] += bool(passed)
            means[case].append(mean)
            if wrong is not None:
                wrongs[case].append(wrong)
        t._FITTED.clear()
        t._SIMULATED.clear()
        done = block + 1
        if done % 5 == 0 or done == args.blocks:
            print(f"-- after {done} blocks", flush=True)
            for case in cases:
                wrong = (f", wrong variant fails {sum(wrongs[case])}/{len(wrongs[case])}"
                         if wrongs[case] else "")
                print(f"{case}: passes {passes[case]}/{done} ({passes[case] / done:.1%}), "
                      f"mean {np.mean(means[case]):.4f}{wrong}", flush=True)


if __name__ == "__main__":
    main()
