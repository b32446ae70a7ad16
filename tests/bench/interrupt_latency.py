"""Ctrl-C latency per long call: seconds from SIGINT to the KeyboardInterrupt.

For every long call, a child process sets up inputs large enough that the call runs for
seconds on a release build, then runs it ``ROUNDS`` times; each time the parent sends SIGINT
at a random moment 0.2-1.0 s into the call, and the child notes the wall-clock time at
which the call raised KeyboardInterrupt (the same clock as the parent's on one machine; the
child's exit is not counted). Memory-bound calls (one pass over the members) are repeated in
a loop over a 200-400 MB input, so the signal lands inside one of the calls or between two.

Prints a table (median and max per call) and the share of calls with max <= 1 s, the
target; tests/_interrupt.py holds the bound of the unit tests. Run on a release build
(`make bench` does) — never a debug or fastdev build:

    python tests/bench/interrupt_latency.py [--rounds 3] [--only NAME]
"""

from __future__ import annotations

import argparse
import random
import signal
import statistics
import subprocess
import sys
import textwrap
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from _interrupt import RESTORE_CTRL_C, TARGET  # noqa: E402

COMMON = """
import numpy as np, bagwise, warnings
warnings.simplefilter("ignore")
rng = np.random.default_rng(0)
"""

# name -> (setup, call); the call must run for well over a second on a release build.
CALLS = {
    "fit tree": (
        "x = rng.normal(size=(200_000, 8)); y = x[:, 0] + rng.normal(size=200_000)",
        "bagwise.BagRegressor('tree', n_members=2_000).fit(x, y)"),
    "fit linear": (
        "x = rng.normal(size=(200_000, 8)); y = x.sum(axis=1)",
        "bagwise.BagRegressor('linear', n_members=20_000).fit(x, y)"),
    "fit wrapped (scikit-learn)": (
        "from sklearn.tree import DecisionTreeRegressor\n"
        "x = rng.normal(size=(50_000, 8)); y = x[:, 0]",
        "bagwise.BagRegressor(DecisionTreeRegressor(), n_members=2_000).fit(x, y)"),
    "tree member_predictions": (
        "x = rng.normal(size=(2_000, 5))\n"
        "bag = bagwise.BagRegressor('tree', n_members=300).fit(x, x[:, 0])\n"
        "points = rng.normal(size=(100_000, 5))",
        "for _ in range(100): bag.member_predictions(points)"),
    "tree core predict (tiled mean)": (
        "x = rng.normal(size=(2_000, 5))\n"
        "bag = bagwise.BagRegressor('tree', n_members=2_000).fit(x, x[:, 0])\n"
        "points = rng.normal(size=(1_000_000, 5))",
        "bag._model.predict(points)"),
    "tree out_of_bag_predictions": (
        "x = rng.normal(size=(100_000, 5))\n"
        "bag = bagwise.BagRegressor('tree', n_members=300, max_depth=10).fit(x, x[:, 0])",
        "for _ in range(100): bag.out_of_bag_predictions()"),
    "linear member_predictions": (
        "x = rng.normal(size=(1_000, 20))\n"
        "bag = bagwise.BagRegressor('linear', n_members=2_000).fit(x, x[:, 0])\n"
        "points = rng.normal(size=(20_000, 20))",
        "for _ in range(100): bag.member_predictions(points)"),
    "neighbors member_predictions": (
        "x = rng.normal(size=(20_000, 5))\n"
        "bag = bagwise.BagRegressor('neighbors', n_members=200).fit(x, x[:, 0])",
        "bag.member_predictions(x)"),
    "classifier predict_proba": (
        "x = rng.normal(size=(2_000, 5))\n"
        "bag = bagwise.BagClassifier('tree', n_members=200).fit(x, x[:, 0] > 0)\n"
        "points = rng.normal(size=(100_000, 5))",
        "for _ in range(100): bag.predict_proba(points)"),
    "resample": ("", "bagwise.resample(1_000_000, 5_000, rng=0)"),
    "aggregate": (
        "m = rng.normal(size=(100, 1_000_000)).astype(np.float32)",
        "for _ in range(1000): bagwise.aggregate(m)"),
    "vote_fractions": (
        "m = rng.integers(0, 5, size=(100, 1_000_000)).astype(np.int32)",
        "for _ in range(1000): bagwise.vote_fractions(m, n_classes=5)"),
    "decompose": (
        "y = rng.normal(size=1_000_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(100, 1_000_000))).astype(np.float32)",
        "for _ in range(1000): bagwise.decompose(m, y)"),
    "size_curve": (
        "y = rng.normal(size=1_000_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(100, 1_000_000))).astype(np.float32)",
        "for _ in range(1000): bagwise.size_curve(m, y)"),
    "correlation (matrix)": (
        "y = rng.normal(size=200_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(500, 200_000))).astype(np.float32)",
        "bagwise.correlation(m, y, matrix=True)"),
    "diversity": (
        "m = rng.integers(0, 3, size=(300, 300_000)); c = rng.integers(0, 3, size=300_000)",
        "for _ in range(1000): bagwise.diversity(m, c, n_classes=3)"),
    "out_of_bag": (
        "y = rng.normal(size=1_000_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(100, 1_000_000))).astype(np.float32)\n"
        "counts = bagwise.resample(1_000_000, 100, rng=0).counts",
        "for _ in range(1000): bagwise.out_of_bag(m, counts, y)"),
    "replicate_spread": (
        "y = rng.normal(size=500_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(10, 20, 500_000))).astype(np.float32)",
        "for _ in range(1000): bagwise.replicate_spread(m, y)"),
    "diagnose": (
        "y = rng.normal(size=300_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(200, 300_000))).astype(np.float32)\n"
        "counts = bagwise.resample(300_000, 200, rng=0).counts",
        "for _ in range(100): bagwise.diagnose(m, y, counts=counts)"),
    "count_gram": (
        "counts = bagwise.resample(100_000, 2_000, rng=0).counts",
        "bagwise.count_gram(counts)"),
    "count_gram (jackknife)": (
        "counts = bagwise.resample(100_000, 2_000, rng=0).counts",
        "bagwise.count_gram(counts, jackknife=True)"),
    "prediction_variance (ij)": (
        "counts = bagwise.resample(1_000, 2_000, rng=0).counts\n"
        "m = rng.normal(size=(2_000, 30_000)).astype(np.float32)",
        "bagwise.prediction_variance(m, counts)"),
    "prediction_variance (little bags)": (
        "counts = bagwise.resample(1_000, 1_000, scheme='little_bags', group_size=10,"
        " rng=0).counts\n"
        "m = rng.normal(size=(1_000, 100_000)).astype(np.float32)",
        "for _ in range(1000): bagwise.prediction_variance(m, counts, method='little_bags',"
        " group_size=10)"),
    "spread": (
        "counts = bagwise.resample(1_000, 2_000, rng=0).counts\n"
        "m = rng.normal(size=(2_000, 30_000)).astype(np.float32)",
        "bagwise.spread(m, counts)"),
    "prediction_interval (jackknife+)": (
        "counts = bagwise.resample(50_000, 100, rng=0).counts\n"
        "y = rng.normal(size=50_000); train = y + rng.normal(size=(100, 50_000))\n"
        "m = rng.normal(size=(100, 100_000))",
        "bagwise.prediction_interval(m, counts, train, y)"),
    "prediction_interval (class sets)": (
        "counts = bagwise.resample(50_000, 100, rng=0).counts\n"
        "c = rng.integers(0, 3, size=50_000)\n"
        "train = rng.dirichlet(np.ones(3), size=(100, 50_000))\n"
        "m = rng.dirichlet(np.ones(3), size=(100, 100_000))",
        "bagwise.prediction_interval(m, counts, train, c, method='adaptive')"),
    "stream update (size curve)": (
        "y = rng.normal(size=500_000).astype(np.float32)\n"
        "m = (y + rng.normal(size=(100, 500_000))).astype(np.float32)\n"
        "stream = bagwise.size_curve_stream(orders=200)",
        "stream.update(m, y)"),
    "compare_learners (CV fits)": (
        "x = rng.normal(size=(300_000, 6)); y = x[:, 0] + rng.normal(size=300_000)",
        "bagwise.compare_learners(x, y, ['tree'], n_members=200, folds=10)"),
}


def child_code(setup: str, call: str, rounds: int) -> str:
    return RESTORE_CTRL_C + COMMON + textwrap.dedent(setup) + textwrap.dedent(f"""
        import time as _time
        for _round in range({rounds}):
            print("ready", flush=True)
            try:
        {textwrap.indent(call, " " * 8)}
            except KeyboardInterrupt:
                print(f"caught {{_time.time()!r}}", flush=True)
            else:
                print("finished", flush=True)
        """)


def measure(name: str, rounds: int, rng: random.Random) -> list[float]:
    setup, call = CALLS[name]
    proc = subprocess.Popen([sys.executable, "-c", child_code(setup, call, rounds)],
                            stdout=subprocess.PIPE, text=True)
    latencies = []
    try:
        for _ in range(rounds):
            line = proc.stdout.readline().strip()
            if line != "ready":
                raise RuntimeError(f"{name}: child said {line!r}")
            time.sleep(rng.uniform(0.2, 1.0))
            sent = time.time()
            proc.send_signal(signal.SIGINT)
            line = proc.stdout.readline().strip()
            if not line.startswith("caught "):
                raise RuntimeError(f"{name}: the call ended before the signal ({line!r})")
            latencies.append(float(line.split()[1]) - sent)
        proc.wait(timeout=120)
    finally:
        proc.kill()
    return latencies


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--only", action="append", help="run only this call (repeatable)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()
    rng = random.Random(args.seed)
    names = args.only or list(CALLS)
    print(f"Ctrl-C latency (s) over {args.rounds} interrupts at random moments; target <= "
          f"{TARGET:g} s")
    print(f"{'call':<36} {'median':>8} {'max':>8}")
    worst = []
    for name in names:
        try:
            latencies = measure(name, args.rounds, rng)
        except RuntimeError as err:
            print(f"{name:<36} {'failed':>8}  {err}")
            continue
        worst.append(max(latencies))
        print(f"{name:<36} {statistics.median(latencies):8.3f} {max(latencies):8.3f}",
              flush=True)
    if worst:
        within = sum(w <= TARGET for w in worst)
        print(f"calls with max <= {TARGET:g} s: {within} of {len(worst)}; worst "
              f"{max(worst):.3f} s")


if __name__ == "__main__":
    main()
