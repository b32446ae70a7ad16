"""Benchmark: native bagged trees against scikit-learn's random forest with all features tried
at every split (i.e. bagged CART trees), measured side by side in one run.

Run with ``make bench`` or directly after a release build (``maturin develop --release``).
Each contender runs in its own subprocess so its peak resident memory can be read from
``getrusage`` without the other's allocations.

    python tests/bench/bench_trees.py [--quick] [--members 100] [--splitter auto]
        [--task regression|classification] [--rows 10000]

Regression: sklearn.datasets.make_friedman1(noise=1.0), test MSE. Classification:
sklearn.datasets.make_classification(n_features=20), test accuracy. Training sizes 100,000
and 10,000 rows, 20,000 test rows (``--quick``: 10,000 and 2,000 rows, 20 members).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

CHILD = r"""
import json, resource, sys, time
import numpy as np

task, n, n_test, members, which, splitter = sys.argv[1:7]
n, n_test, members = int(n), int(n_test), int(members)

def rss_mib():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

if task == "regression":
    from sklearn.datasets import make_friedman1
    x, y = make_friedman1(n_samples=n + n_test, noise=1.0, random_state=0)
else:
    from sklearn.datasets import make_classification
    x, y = make_classification(n_samples=n + n_test, n_features=20, random_state=0)
xtr, ytr, xte, yte = x[:n], y[:n], x[n:], y[n:]
import bagwise
from bagwise._core import TreeEnsemble
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor
before = rss_mib()

start = time.perf_counter()
if which == "sklearn":
    # Bagged CART trees in the general-purpose library: bootstrap, every feature tried.
    if task == "regression":
        model = RandomForestRegressor(n_estimators=members, max_features=1.0, bootstrap=True,
                                      n_jobs=2, random_state=0).fit(xtr, ytr)
    else:
        model = RandomForestClassifier(n_estimators=members, max_features=None, bootstrap=True,
                                       n_jobs=2, random_state=0).fit(xtr, ytr)
else:
    counts = bagwise.resample(n, members, rng=0).counts
    if task == "regression":
        model = TreeEnsemble.fit(xtr, ytr, counts, task="regression", splitter=splitter,
                                 seed=0, n_jobs=2)
    else:
        model = TreeEnsemble.fit(xtr, ytr.astype(np.int64), counts, task="classification",
                                 n_classes=2, splitter=splitter, seed=0, n_jobs=2)
fit_seconds = time.perf_counter() - start

if which == "sklearn":
    if task == "regression":
        predict = lambda: np.array([t.predict(xte) for t in model.estimators_])
    else:
        predict = lambda: np.array([t.predict_proba(xte) for t in model.estimators_])
else:
    predict = lambda: model.member_predictions(xte, n_jobs=2)
# The first call, and the best of three more, each after the previous result is released:
# a shared machine slows single calls by up to 3x, and on a virtual machine the first touch
# of memory the process has never used (here the (members, points, classes) result) can
# cost more than the walks themselves. Both contenders get the same treatment.
calls, members_out = [], None
for _ in range(4):
    members_out = None
    start = time.perf_counter()
    members_out = predict()
    calls.append(time.perf_counter() - start)
first_call, predict_seconds = calls[0], min(calls[1:])
mean = members_out.mean(axis=0)
if task == "regression":
    score = float(np.mean((mean - yte) ** 2))
else:
    score = float(np.mean(mean.argmax(axis=1) == yte))
print(json.dumps({"fit": fit_seconds, "members": predict_seconds, "first_call": first_call,
                  "score": score,
                  "peak_extra_mib": rss_mib() - before}))
"""


def measure(task: str, n: int, n_test: int, members: int, which: str, splitter: str) -> dict:
    out = subprocess.run([sys.executable, "-c", CHILD, task, str(n), str(n_test), str(members),
                          which, splitter], check=True, capture_output=True, text=True)
    return json.loads(out.stdout)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, 20 members")
    parser.add_argument("--members", type=int, default=None)
    parser.add_argument("--splitter", default="auto", choices=["auto", "histogram", "exact"])
    parser.add_argument("--task", choices=["regression", "classification"], default=None,
                        help="only this task (default: both)")
    parser.add_argument("--rows", type=int, default=None, help="only this training size")
    args = parser.parse_args()
    sizes, n_test, members = ([10_000, 2_000], 2_000, 20) if args.quick else \
        ([100_000, 10_000], 20_000, 100)
    members = args.members or members
    sizes = [args.rows] if args.rows else sizes
    for task in [args.task] if args.task else ["regression", "classification"]:
        metric = "test MSE" if task == "regression" else "test accuracy"
        for n in sizes:
            ref = measure(task, n, n_test, members, "sklearn", args.splitter)
            ours = measure(task, n, n_test, members, "bagwise", args.splitter)
            print(f"{task}, {n:,} training rows, {n_test:,} test rows, {members} members "
                  f"(splitter={args.splitter!r})")
            for name, r in (("sklearn", ref), ("bagwise", ours)):
                print(f"  {name:<8} fit {r['fit']:8.2f} s   member predictions "
                      f"{r['members']:7.3f} s (first call {r['first_call']:7.3f} s)   "
                      f"{metric} {r['score']:.4f}   "
                      f"peak extra {r['peak_extra_mib']:8.1f} MiB")
            if task == "regression":
                quality = f"MSE ratio {ours['score'] / ref['score']:.3f} (target <= 1.02)"
            else:
                quality = f"accuracy difference {ours['score'] - ref['score']:+.4f}"
            print(f"  fit speed-up {ref['fit'] / ours['fit']:.1f}x (target >= 10x), "
                  f"member predictions {ref['members'] / ours['members']:.1f}x (target >= 3x; "
                  f"first call {ref['first_call'] / ours['first_call']:.1f}x), "
                  f"{quality}, peak memory ratio "
                  f"{ours['peak_extra_mib'] / max(ref['peak_extra_mib'], 1e-9):.2f} (target <= 1)")


if __name__ == "__main__":
    main()
