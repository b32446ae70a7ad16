"""Pass rate over seeds of the Monte-Carlo checks in tests/test_variance_status.py: the
stated noise of the corrected IJ and jackknife against reseeded members (and of the wrong
noise without its 4V²/B term), and members_needed against the noise it promises (and half
as many members). Each check is a pure function of its seed; the unit tests use one seed.
Not collected by pytest.

    python tests/bench/noise_pass_rate.py [--seeds 200]
"""

from __future__ import annotations

import argparse
import pathlib
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import test_variance_status as status  # noqa: E402


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=200)
    args = parser.parse_args()
    seeds = range(2000, 2000 + args.seeds)
    for method in ("ij", "jackknife"):
        results = [status.noise_check(seed, method) for seed in seeds]
        right = sum(r for r, _ in results) / len(results)
        wrong = sum(w for _, w in results) / len(results)
        print(f"stated noise, {method:9}: right passes {right:.1%}, wrong (no 4V²/B) "
              f"passes {wrong:.1%}  ({len(results)} seeds)")
    results = [status.members_needed_check(seed) for seed in seeds]
    right = sum(r for r, _ in results) / len(results)
    halved = sum(h for _, h in results) / len(results)
    print(f"members_needed: noise 0.2 as promised {right:.1%}, half the members clearly "
          f"noisier {halved:.1%}  ({len(results)} seeds)")


if __name__ == "__main__":
    main()
