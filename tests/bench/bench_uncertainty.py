"""Benchmark: bagwise.prediction_variance (IJ) against the best vectorised numpy route.

The numpy route is the same Gram formulation: float64 counts, G = N Nᵀ by OpenBLAS GEMM,
then the quadratic forms t̃ᵀ G t̃ / B². Each contender runs in its own subprocess so its
peak resident memory is read from getrusage. Run with ``make bench`` (release build).

    python tests/bench/bench_uncertainty.py [--quick]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

CHILD = r"""
import json, resource, sys, time, warnings
import numpy as np
import bagwise

b, n_train, n_points, which = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
rss = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

def numpy_route():
    # The Gram built from float64 column blocks (no members x n_train float copy at once),
    # so the reference is the fastest plain-numpy form we know, not a memory-bound one.
    gram = np.zeros((b, b))
    for start in range(0, n_train, 8192):
        block = counts[:, start:start + 8192].astype(np.float64)
        gram += block @ block.T
    centred = members - members.mean(axis=0)
    raw = np.einsum("bp,bp->p", centred, gram @ centred) / b**2
    return raw - n_train / b**2 * (centred**2).sum(axis=0)

def ours():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = bagwise.prediction_variance(members, counts)
    return r.raw_variance - r.correction

def matmul():
    a = np.random.default_rng(1).normal(size=(2000, 2000))
    start = time.perf_counter()
    a @ a
    return 2 * 2000**3 / (time.perf_counter() - start) / 1e9

if which == "matmul":
    print(json.dumps({"gflops": max(matmul() for _ in range(3))}))
    sys.exit()
if which.startswith("gram_"):
    # The Gram alone, best of three calls in one process (warm memory for both).
    from bagwise._core import CountGram
    counts = bagwise.resample(n_train, b, rng=0).counts
    def numpy_gram():
        gram = np.zeros((b, b))
        for start in range(0, n_train, 8192):
            block = counts[:, start:start + 8192].astype(np.float64)
            gram += block @ block.T
        return gram
    run = numpy_gram if which == "gram_numpy" else lambda: CountGram(counts).gram
    times = []
    for _ in range(3):
        start = time.perf_counter()
        gram = run()
        times.append(time.perf_counter() - start)
    print(json.dumps({"seconds": min(times), "first": times[0],
                      "checksum": float(np.asarray(gram).sum())}))
    sys.exit()
counts = bagwise.resample(n_train, b, rng=0).counts
members = np.random.default_rng(0).normal(size=(b, n_points))
before = rss()
start = time.perf_counter()
value = {"numpy": numpy_route, "bagwise": ours}[which]()
seconds = time.perf_counter() - start
gram_flops = 2 * b * b * n_train + 2 * b * b * n_points
print(json.dumps({"seconds": seconds, "peak_extra_mib": rss() - before,
                  "gflops": gram_flops / seconds / 1e9, "checksum": float(np.sum(value))}))
"""


def run(*args) -> dict:
    # OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE slow a current OpenBLAS down; drop both together
    # for the measurement so numpy runs its best kernel.
    env = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")}
    out = subprocess.run([sys.executable, "-c", CHILD, *map(str, args)], check=True,
                         capture_output=True, text=True, env=env)
    return json.loads(out.stdout)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes only")
    args = parser.parse_args()
    sizes = [(100, 5_000, 2_000)] if args.quick else [(500, 100_000, 10_000),
                                                      (1000, 20_000, 20_000)]
    practical = run(0, 0, 0, "matmul")["gflops"]
    print(f"plain numpy float64 matmul (2000 x 2000): {practical:.1f} GFLOP/s")
    b, n_train = (100, 5_000) if args.quick else (500, 100_000)
    ref, ours = run(b, n_train, 0, "gram_numpy"), run(b, n_train, 0, "gram_ours")
    print(f"count Gram alone, B={b}, n_train={n_train:,} (uint8), best of 3 in one process"
          f"{'' if ref['checksum'] == ours['checksum'] else '  RESULTS DIFFER'}")
    print(f"  numpy float64 GEMM route {ref['seconds']:.3f} s (first call {ref['first']:.3f} s); "
          f"bagwise {ours['seconds']:.3f} s (first call {ours['first']:.3f} s)")
    print(f"  time ratio bagwise / numpy (warm): {ours['seconds'] / ref['seconds']:.2f} "
          "(target <= 1.0)")
    for b, n_train, n_points in sizes:
        ref = run(b, n_train, n_points, "numpy")
        ours = run(b, n_train, n_points, "bagwise")
        agree = abs(ref["checksum"] - ours["checksum"]) <= 1e-8 * abs(ref["checksum"])
        print(f"B={b}, n_train={n_train:,}, n_points={n_points:,} (uint8 counts)"
              f"{'' if agree else '  RESULTS DIFFER'}")
        for name, r in (("numpy Gram", ref), ("bagwise", ours)):
            print(f"  {name:<11} {r['seconds']:7.3f} s  peak extra {r['peak_extra_mib']:8.1f} MiB"
                  f"  {r['gflops']:6.1f} G(FL)OP/s equivalent")
        print(f"  time ratio bagwise / numpy: {ours['seconds'] / ref['seconds']:.2f} (target <= 1.0)"
              f"; memory ratio: {ours['peak_extra_mib'] / max(ref['peak_extra_mib'], 1e-9):.2f}"
              " (target <= 0.25)")


if __name__ == "__main__":
    main()
