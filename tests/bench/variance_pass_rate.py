"""Pass rate over seeds of the Monte-Carlo checks in tests/test_uncertainty.py and
tests/test_replicates.py.

Every check there is a pure function of its seed: in test_uncertainty `CHECKS` (the corrected
IJ, the corrected jackknife-after-bootstrap and the subsample IJ on bagged statistics with a
closed-form truth, the corrected IJ on native bagged trees, the jackknife's correction
constant by simulation, the spread's total, rho and M-member variance against their closed
form), in test_replicates `equicorrelated_errors`. This script reruns each
on seeds the unit tests do not use and prints how often the right estimator passes (target
>= 99%) and how often each wrong variant passes (target 0%), with the mean ratio to the truth
and its mean standard error where the check is a ratio, and the mean and range of the
standardised error z (a check passes when |z| <= Z; for the replicate spread, the right
estimator's z is its largest |z| over the quantities compared). Not collected by pytest.

    python tests/bench/variance_pass_rate.py [--seeds 200] [--cases ij,jackknife]
"""

from __future__ import annotations

import argparse
import dataclasses
import pathlib
import sys
import time

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_replicates as replicates  # noqa: E402
import test_uncertainty as uncertainty  # noqa: E402


@dataclasses.dataclass(frozen=True)
class Standardised:
    """A check known only by its standardised error."""

    z: float

    @property
    def passes(self) -> bool:
        return abs(self.z) <= replicates.Z


def replicate_checks(seed):
    right, wrong = replicates.equicorrelated_errors(seed)
    return {"right": Standardised(max(right.values(), key=abs)),
            **{name: Standardised(z) for name, z in wrong.items()}}


CHECKS = {**uncertainty.CHECKS, "replicate spread": replicate_checks}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=200)
    parser.add_argument("--first", type=int, default=1000, help="first seed")
    parser.add_argument("--cases", default=",".join(CHECKS))
    args = parser.parse_args()
    print(f"Z = {uncertainty.Z} (test_uncertainty), {replicates.Z} (test_replicates); "
          f"seeds {args.first}..{args.first + args.seeds - 1}", flush=True)
    for case in args.cases.split(","):
        started = time.perf_counter()
        runs = [CHECKS[case](seed) for seed in range(args.first, args.first + args.seeds)]
        seconds = (time.perf_counter() - started) / args.seeds
        for variant in runs[0]:
            checks = [run[variant] for run in runs]
            passes = sum(check.passes for check in checks)
            z = np.array([check.z for check in checks])
            if hasattr(checks[0], "ratio"):
                ratio = (f"mean ratio {np.mean([c.ratio for c in checks]):.4f}  "
                         f"mean SE {np.mean([c.se for c in checks]):.4f}  ")
            else:
                ratio = ""
            role = ("right" if variant == "right" or variant in uncertainty.SPREAD_RIGHT
                    else "wrong")
            print(f"{case:20s} {variant:20s} ({role}) passes {passes}/{args.seeds} "
                  f"({passes / args.seeds:.1%})  {ratio}"
                  f"z mean {z.mean():+.2f} min {z.min():+.2f} max {z.max():+.2f}", flush=True)
        if case == "spread":   # the unit test needs all three right quantities to pass
            both = sum(all(run[name].passes for name in uncertainty.SPREAD_RIGHT)
                       for run in runs)
            print(f"{case:20s} all of {', '.join(uncertainty.SPREAD_RIGHT)} pass {both}/"
                  f"{args.seeds} ({both / args.seeds:.1%})", flush=True)
        print(f"{case:20s} {seconds:.2f} s per seed", flush=True)


if __name__ == "__main__":
    main()
