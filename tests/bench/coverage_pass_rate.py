"""Pass rate over seeds of the statistical checks in tests/test_intervals.py.

Each block of 20 consecutive seeds is one run of a coverage test (20 random splits or
simulated samples); the script reruns every check on many blocks and prints how often it
passes (target >= 99%), with the mean coverage. Not collected by pytest.

    python tests/bench/coverage_pass_rate.py [--blocks 100] [--cases simulated,diabetes-jackknife+]
"""

from __future__ import annotations

import argparse
import pathlib
import sys

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_intervals as t  # noqa: E402


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--blocks", type=int, default=100)
    parser.add_argument("--cases", default=",".join(["simulated-jackknife+", "simulated-out_of_bag_residual",
                                                     *t.CASES]))
    args = parser.parse_args()
    for case in args.cases.split(","):
        passes, means, wrong_fails = 0, [], 0
        for block in range(args.blocks):
            first = 1000 + 20 * block     # seeds not used by the test itself
            if case.startswith("simulated"):
                method = case.split("-", 1)[1]
                coverages = t.simulated_coverages(first, method=method)
                wrong = t.simulated_coverages(first, method=method, in_bag=True)
                wrong_fails += not t.coverage_check(wrong, 0.8)[0]
                passed, mean, _ = t.coverage_check(coverages, 0.8, t.conservative(method))
            else:
                passed, mean, _ = t.coverage_check(t.case_coverages(case, first), 0.8,
                                                   t.conservative(t.CASES[case][1]))
            passes += bool(passed)
            means.append(mean)
        wrong_text = f", in-bag variant fails {wrong_fails}/{args.blocks}" if case.startswith("sim") else ""
        print(f"{case}: passes {passes}/{args.blocks} ({passes / args.blocks:.1%}), "
              f"mean coverage {np.mean(means):.4f}{wrong_text}", flush=True)
        t._FITTED.clear()
        t._SIMULATED.clear()


if __name__ == "__main__":
    main()
