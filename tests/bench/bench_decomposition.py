"""Benchmark: bagwise.decompose against the memory-bandwidth floor and a vectorised numpy
reference, measured in one run.

Run with ``make bench`` (release build). Each dtype runs in its own subprocess; inside it
bagwise runs before the numpy reference so the peak resident memory read from
``getrusage`` after bagwise holds only bagwise's own allocations.

    python tests/bench/bench_decomposition.py [--members 200] [--points 500000]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

CHILD = r"""
import json, resource, sys, time
import numpy as np
import bagwise

members, n, dtype = int(sys.argv[1]), int(sys.argv[2]), np.dtype(sys.argv[3])

def rss_mib():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

def best(fn, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return min(times), out

def numpy_reference(t, y):
    # The vectorised formulation: mean, then the two squared deviations over the members.
    f = t.mean(axis=0, dtype=np.float64)
    member = ((t - y) ** 2).mean(axis=0)
    ambiguity = ((t - f) ** 2).mean(axis=0)
    return float(((f - y) ** 2).mean()), float(member.mean()), float(ambiguity.mean())

rng = np.random.default_rng(0)
y = rng.normal(size=n)
t = np.empty((members, n), dtype=dtype)
for b in range(members):
    t[b] = y + rng.normal(size=n)
bagwise.decompose(t[:, :1000], y[:1000])  # load and warm up
base = rss_mib()
floor, _ = best(lambda: np.sum(t), 3)
ours, d = best(lambda: bagwise.decompose(t, y), 3)
ours_extra = rss_mib() - base
ref, r = best(lambda: numpy_reference(t, y), 1)
print(json.dumps({
    "floor": floor, "ours": ours, "reference": ref, "ours_extra_mib": ours_extra,
    "members_mib": t.nbytes / 2**20, "per_point_outputs_mib": 3 * n * 8 / 2**20,
    "agree": float(abs(d.ambiguity - r[2]) / r[2]),
}))
"""


def measure(members: int, points: int, dtype: str) -> dict:
    out = subprocess.run([sys.executable, "-c", CHILD, str(members), str(points), dtype],
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--points", type=int, default=500_000)
    args = parser.parse_args()
    for dtype in ("float64", "float32"):
        r = measure(args.members, args.points, dtype)
        print(f"decompose(({args.members:,}, {args.points:,}) {dtype}), "
              f"{r['members_mib']:.0f} MiB of members")
        print(f"  np.sum(members)     {r['floor']:8.3f} s   (memory-bandwidth floor)")
        print(f"  bagwise.decompose   {r['ours']:8.3f} s   peak extra {r['ours_extra_mib']:.1f} MiB "
              f"(per-point outputs {r['per_point_outputs_mib']:.1f} MiB)")
        print(f"  numpy reference     {r['reference']:8.3f} s   (ambiguity agrees to {r['agree']:.1e})")
        print(f"  time / floor:       {r['ours'] / r['floor']:.2f}x (target <= 1.5x)")
        print(f"  speed-up vs numpy:  {r['reference'] / r['ours']:.1f}x (target >= 5x)")


if __name__ == "__main__":
    main()
