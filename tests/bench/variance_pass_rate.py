"""Pass rate over seeds of the Monte-Carlo checks in tests/test_uncertainty.py.

Every check there is a pure function of its seed (`CHECKS`: the corrected IJ, the corrected
jackknife-after-bootstrap and the subsample IJ on bagged statistics with a closed-form truth,
the corrected IJ on native bagged trees, and the jackknife's correction constant by
simulation). This script reruns each on seeds the unit tests do not use and prints how often
the right estimator passes (target >= 99%) and how often each wrong variant passes (target
0%), with the mean ratio to the truth, its mean standard error and the mean of
(ratio - 1) / SE. Not collected by pytest.

    python tests/bench/variance_pass_rate.py [--seeds 200] [--cases ij,jackknife]
"""

from __future__ import annotations

import argparse
import pathlib
import sys
import time

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_uncertainty as t  # noqa: E402


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--first", type=int, default=1000, help="first seed")
    parser.add_argument("--cases", default=",".join(t.CHECKS))
    args = parser.parse_args()
    print(f"Z = {t.Z}; seeds {args.first}..{args.first + args.seeds - 1}", flush=True)
    for case in args.cases.split(","):
        started = time.perf_counter()
        runs = [t.CHECKS[case](seed) for seed in range(args.first, args.first + args.seeds)]
        seconds = (time.perf_counter() - started) / args.seeds
        for variant in runs[0]:
            checks = [run[variant] for run in runs]
            passes = sum(check.passes for check in checks)
            ratio = np.mean([check.ratio for check in checks])
            se = np.mean([check.se for check in checks])
            z = np.mean([(check.ratio - 1) / check.se for check in checks])
            role = "right" if variant == "right" else "wrong"
            print(f"{case:20s} {variant:20s} ({role}) passes {passes}/{args.seeds} "
                  f"({passes / args.seeds:.1%})  mean ratio {ratio:.4f}  mean SE {se:.4f}  "
                  f"mean z {z:+.2f}", flush=True)
        print(f"{case:20s} {seconds:.2f} s per seed", flush=True)


if __name__ == "__main__":
    main()
