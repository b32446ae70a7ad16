"""Benchmark: a bag fitted on a 2-worker dask LocalCluster against the same bag fitted in
this process, and member predictions at a lazy X against the in-memory call, in one run.

Run after a release build (``maturin develop --release``, or ``make bench``):

    python tests/bench/bench_dask_fit.py [--quick] [--rows 100000] [--members 100]

Data: sklearn.datasets.make_friedman1(n_features=10, noise=1.0). The in-process fit uses
both cores (n_jobs=2); the cluster has 2 worker processes with one thread each, so both
sides have the same 2 cores. Each timing is the best of ``--repeats`` runs; the cluster is
started and warmed up (workers import bagwise) before any timing. Printed: seconds, and
throughput ratios in-process time / dask time (target for the fit: at least 0.70). Both
sides must give the same member predictions bit for bit, or the run stops.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np


def best_of(repeats, run):
    times, result = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - start)
    return min(times), result


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="10,000 rows, 20 members")
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--members", type=int, default=100)
    parser.add_argument("--points", type=int, default=100_000)
    parser.add_argument("--chunk", type=int, default=25_000, help="rows per dask chunk")
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()
    if args.quick:
        args.rows, args.members, args.points, args.chunk = 10_000, 20, 10_000, 2_500

    import dask.array as da
    from distributed import Client, LocalCluster, wait
    from sklearn.datasets import make_friedman1

    import bagwise

    X, y = make_friedman1(n_samples=args.rows + args.points, n_features=10, noise=1.0,
                          random_state=0)
    X_train, y_train, X_test = X[:args.rows], y[:args.rows], X[args.rows:]
    lazy_X = da.from_array(X_train, chunks=(args.chunk, 10))
    lazy_y = da.from_array(y_train, chunks=args.chunk)

    def bag(backend):
        return bagwise.BagRegressor("tree", n_members=args.members, random_state=0, n_jobs=2,
                                    backend=backend)

    print(f"Friedman #1: {args.rows:,} rows x 10 features, {args.members} trees; "
          f"{args.points:,} test points; chunks of {args.chunk:,} rows")
    local_fit, local = best_of(args.repeats, lambda: bag("local").fit(X_train, y_train))
    local_members, reference = best_of(args.repeats, lambda: local.member_predictions(X_test))

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cluster = LocalCluster(processes=True, n_workers=2, threads_per_worker=1,
                               dashboard_address=":0")
        client = Client(cluster)
    try:
        # Warm-up: every worker imports bagwise and scikit-learn before any timing.
        bagwise.BagRegressor("tree", n_members=4, random_state=0).fit(lazy_X[:200], lazy_y[:200])
        dask_fit, remote = best_of(args.repeats, lambda: bag("auto").fit(lazy_X, lazy_y))
        if not np.array_equal(remote.member_predictions(X_test), reference):
            raise SystemExit("the distributed fit differs from the in-process fit")
        runs = iter(range(10 * args.repeats))

        def fresh_points():
            # Other keys each run, so no run reuses the previous run's results.
            return da.from_array(X_test, chunks=(args.chunk, 10), name=f"points-{next(runs)}")

        start = time.perf_counter()
        members = local.member_predictions(fresh_points()).compute()
        first_call = time.perf_counter() - start
        if not np.array_equal(members, reference):
            raise SystemExit("lazy member predictions differ from the in-memory call")
        lazy_members, _ = best_of(
            args.repeats, lambda: local.member_predictions(fresh_points()).compute())

        def on_workers():
            persisted = client.persist(local.member_predictions(fresh_points()))
            wait(persisted)
            return persisted

        lazy_resident, _ = best_of(args.repeats, on_workers)
    finally:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            client.close()
            cluster.close()

    rows = [
        ("fit, in process (n_jobs=2)", local_fit, None),
        ("fit on 2 dask workers", dask_fit, local_fit / dask_fit),
        ("member predictions, in memory", local_members, None),
        ("member predictions, lazy, first call (scatters the model)", first_call,
         local_members / first_call),
        ("member predictions, lazy, computed to the client", lazy_members,
         local_members / lazy_members),
        ("member predictions, lazy, kept on the workers", lazy_resident,
         local_members / lazy_resident),
    ]
    print(f"{'':60} {'seconds':>8} {'throughput vs in process':>25}")
    for name, seconds, ratio in rows:
        shown = "" if ratio is None else f"{ratio:.2f}"
        print(f"{name:60} {seconds:8.2f} {shown:>25}")
    print(f"distributed fit throughput: {local_fit / dask_fit:.2f} of in process (target 0.70); "
          f"members identical bit for bit")


if __name__ == "__main__":
    main()
