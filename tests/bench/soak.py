"""Soak: every main entry point called many times in one process, with resident memory,
threads and open file descriptors read before and after.

    python tests/bench/soak.py [--calls 1000] [--only NAME ...]

For each entry point: a warm-up (allocator arenas, lazy imports and caches fill here), then
``--calls`` calls. The table gives the resident set (RSS, from /proc/self/statm) after the
warm-up, its growth over the calls and over their second half (a leak grows linearly, so it
shows in both; an allocator settling shows only in the first), and the change in threads
(/proc/self/task) and file descriptors (/proc/self/fd). The script exits non-zero if any
entry point leaks: threads or descriptors left behind, or RSS growing by more than
``--max-growth`` MiB over the calls. 2 MiB is far below what one leaked result per call
would cost (at least 1000 × a few KiB here) and above glibc's arena jitter (common practice).

Linux only (it reads /proc). Use a release build (`make soak` builds one).
"""

from __future__ import annotations

import argparse
import contextlib
import gc
import io
import os
import pickle
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

PAGE = os.sysconf("SC_PAGE_SIZE")
#: Entry points run ``--slow-calls`` times: they take about a second a call (the report
#: draws its figures; the verdict and the comparison refit bags in cross-validation).
SLOW = {"CLI report (html + json)", "bag.verdict", "compare_learners"}


def resident_mib() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * PAGE / 2**20


def threads() -> int:
    return len(os.listdir("/proc/self/task"))


def descriptors() -> int:
    return len(os.listdir("/proc/self/fd"))


def settled(read, baseline: int, wait: float = 3.0) -> int:
    """``read()`` once it is back at ``baseline`` or after ``wait`` seconds: a dropped
    thread pool's threads exit shortly after the call that owned it returns."""
    deadline = time.monotonic() + wait
    value = read()
    while value != baseline and time.monotonic() < deadline:
        time.sleep(0.05)
        value = read()
    return value


def entry_points(tmp: Path) -> dict:
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.tree import DecisionTreeRegressor

    import bagwise as bw

    rng = np.random.default_rng(7)
    n_rows, n_features, n_points = 400, 5, 300
    X = rng.normal(size=(n_rows, n_features))
    y = X[:, 0] + np.sin(2 * X[:, 1]) + 0.3 * rng.normal(size=n_rows)
    labels = (X[:, 0] + 0.5 * rng.normal(size=n_rows) > 0).astype(np.int64)
    X_new = rng.normal(size=(n_points, n_features))
    y_new = X_new[:, 0] + np.sin(2 * X_new[:, 1])

    reg = bw.BagRegressor(n_members=16, random_state=0).fit(X, y)
    clf = bw.BagClassifier(n_members=16, random_state=0).fit(X, labels)
    members = reg.member_predictions(X_new)
    train_members = reg.member_predictions(X)
    counts = reg.in_bag_
    votes = clf.member_predictions(X_new).argmax(axis=-1)
    label_new = (X_new[:, 0] > 0).astype(np.int64)
    replicates = rng.normal(size=(4, 16, n_points))
    forest = RandomForestRegressor(n_estimators=8, max_depth=4, random_state=0).fit(X, y)
    path = tmp / "bag.bagwise"

    def stream_round_trip():
        a = bw.decompose_stream().update(members[:, :150], y_new[:150])
        b = bw.decompose_stream().update(members[:, 150:], y_new[150:])
        return pickle.loads(pickle.dumps(a)).merge(b).result()

    def save_load():
        reg.save(path)
        return bw.load(path)

    np.save(tmp / "members.npy", train_members)
    np.save(tmp / "targets.npy", y)
    np.save(tmp / "counts.npy", counts)

    def cli_report():
        from bagwise.__main__ import main as cli
        with contextlib.redirect_stdout(io.StringIO()):
            return cli(["report", "--members", str(tmp / "members.npy"), "--targets",
                    str(tmp / "targets.npy"), "--counts", str(tmp / "counts.npy"),
                    "--out", str(tmp / "report.html"), "--json", str(tmp / "report.json"),
                       "--quiet"])

    def diagnose_shown():
        d = bw.diagnose(members, y_new)
        return repr(d), d._repr_html_(), d.to_frame()

    return {
        "fit tree regressor": lambda: bw.BagRegressor(n_members=8, random_state=1).fit(X, y),
        "fit tree classifier": lambda: bw.BagClassifier(n_members=8, random_state=1).fit(X, labels),
        "fit tree, 2 threads": lambda: bw.BagRegressor(n_members=8, n_jobs=2).fit(X, y),
        "fit linear": lambda: bw.BagRegressor("linear", n_members=8).fit(X, y),
        "fit neighbours": lambda: bw.BagRegressor("neighbors", n_members=8).fit(X, y),
        "fit wrapped sklearn tree": lambda: bw.BagRegressor(
            DecisionTreeRegressor(max_depth=4), n_members=4).fit(X, y),
        "member_predictions": lambda: reg.member_predictions(X_new),
        "predict": lambda: reg.predict(X_new),
        "predict_proba": lambda: clf.predict_proba(X_new),
        "bag.out_of_bag": lambda: reg.out_of_bag(),
        "bag.prediction_variance": lambda: reg.prediction_variance(X_new),
        "bag.prediction_interval": lambda: reg.prediction_interval(X_new),
        "bag.diagnose": lambda: reg.diagnose(X_new, y_new),
        "bag.spread": lambda: reg.spread(X_new),
        "bag.verdict": lambda: reg.verdict(),
        "compare_learners": lambda: bw.compare_learners(
            X, y, ["tree", "linear"], n_members=8, random_state=0),
        "CLI report (html + json)": cli_report,
        "aggregate": lambda: bw.aggregate(members),
        "vote_fractions": lambda: bw.vote_fractions(votes, n_classes=2),
        "decompose": lambda: bw.decompose(members, y_new),
        "size_curve": lambda: bw.size_curve(members, y_new),
        "correlation (matrix)": lambda: bw.correlation(members, y_new, matrix=True),
        "diversity": lambda: bw.diversity(votes, label_new, n_classes=2),
        "out_of_bag": lambda: bw.out_of_bag(train_members, counts, y),
        "replicate_spread": lambda: bw.replicate_spread(replicates, y_new),
        "count_gram (jackknife)": lambda: bw.count_gram(counts, jackknife=True),
        "prediction_variance ij": lambda: bw.prediction_variance(members, counts),
        "prediction_variance jackknife": lambda: bw.prediction_variance(
            members, counts, method="jackknife"),
        "spread": lambda: bw.spread(members, counts),
        "prediction_interval": lambda: bw.prediction_interval(members, counts, train_members, y),
        "diagnose + repr/html/frame": diagnose_shown,
        "resample": lambda: bw.resample(n_rows, 16, rng=3),
        "read_ensemble (sklearn forest)": lambda: bw.read_ensemble(forest, X_new),
        "stream pickle/merge/result": stream_round_trip,
        "save/load": save_load,
        "pickle round trip": lambda: pickle.loads(pickle.dumps(reg)),
    }


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--calls", type=int, default=1000)
    parser.add_argument("--warm-up", type=int, default=30)
    parser.add_argument("--max-growth", type=float, default=2.0, help="MiB per entry point")
    parser.add_argument("--slow-calls", type=int, default=100,
                        help="calls of the entry points that take a second each (the report)")
    parser.add_argument("--only", nargs="*", default=None)
    args = parser.parse_args(argv)

    # Small ensembles make the uncertainty calls warn on every call; the warnings are
    # tested elsewhere and would only flood the table.
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        calls = entry_points(Path(tmp))
        if args.only:
            calls = {k: v for k, v in calls.items() if any(s in k for s in args.only)}
        start_rss = resident_mib()
        start_threads, start_fds = threads(), descriptors()
        print(f"{args.calls} calls per entry point after {args.warm_up} warm-up calls; "
              f"process RSS at start {start_rss:.1f} MiB, {start_threads} threads, "
              f"{start_fds} descriptors")
        print(f"{'entry point':32} {'calls':>6} {'RSS MiB':>8} {'growth':>7} {'2nd half':>8} "
              f"{'threads':>7} {'fds':>4} {'s':>6}")
        failures = []
        for name, call in calls.items():
            for _ in range(args.warm_up):
                call()
            gc.collect()
            base_threads = settled(threads, threads())
            base_fds = descriptors()
            base = resident_mib()
            half = None
            began = time.perf_counter()
            n_calls = args.slow_calls if name in SLOW else args.calls
            for i in range(n_calls):
                call()
                if i + 1 == n_calls // 2:
                    gc.collect()
                    half = resident_mib()
            elapsed = time.perf_counter() - began
            gc.collect()
            end = resident_mib()
            d_threads = settled(threads, base_threads) - base_threads
            d_fds = settled(descriptors, base_fds) - base_fds
            growth, second = end - base, end - half
            print(f"{name:32} {n_calls:6d} {base:8.1f} {growth:+7.2f} {second:+8.2f} {d_threads:+7d} "
                  f"{d_fds:+4d} {elapsed:6.1f}", flush=True)
            if growth > args.max_growth or d_threads or d_fds:
                failures.append(name)
        end_rss = resident_mib()
        print(f"process RSS at end {end_rss:.1f} MiB ({end_rss - start_rss:+.1f} MiB over the "
              f"run, warm-ups included); {threads() - start_threads:+d} threads, "
              f"{descriptors() - start_fds:+d} descriptors")
    if failures:
        print("LEAK: " + ", ".join(failures))
        return 1
    print("no leak")
    return 0


if __name__ == "__main__":
    sys.exit(main())
