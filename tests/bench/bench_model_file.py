"""Benchmark: the size of a saved native tree ensemble per node, and the memory a save needs
beyond the fitted model, as ratios measured in one run.

Run with ``make bench`` or directly after a release build (``maturin develop --release``):

    python tests/bench/bench_model_file.py [--quick]

Bytes per node = file size / total nodes of the ensemble, for 25 fully grown trees on
100,000 rows of: Friedman #1 (sklearn.datasets.make_friedman1, 10 features, regression),
two-class and ten-class sklearn.datasets.make_classification (20 features; ten classes
with 10 informative features). Targets: at most 12 bytes per node for regression and two
classes (the ten-class figure is reported only).

Save memory: in a fresh subprocess a 100-tree regression ensemble is fit on 200,000 rows
of Friedman #1 with 20 features, the peak resident size is reset (``/proc/self/clear_refs``,
Linux) and ``bagwise.save`` runs; (peak RSS from ``resource.getrusage`` minus the RSS before
the save) / file size is the number of file-sized copies the save held at once. Target:
at most 1.5 (one copy of the file, plus slack for the allocator).

``--quick``: 20,000 rows and 40,000 rows for the save.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

BYTES_PER_NODE_TARGET = 12.0
SAVE_COPIES_TARGET = 1.5

SIZE_CHILD = r"""
import json, os, sys, tempfile
import numpy as np
from sklearn.datasets import make_classification, make_friedman1
import bagwise

rows = int(sys.argv[1])
tasks = {
    "regression (Friedman #1)": (bagwise.BagRegressor,
                                 make_friedman1(n_samples=rows, n_features=10, noise=1.0,
                                                random_state=0)),
    "two classes": (bagwise.BagClassifier,
                    make_classification(n_samples=rows, n_features=20, random_state=0)),
    "ten classes": (bagwise.BagClassifier,
                    make_classification(n_samples=rows, n_features=20, n_informative=10,
                                        n_classes=10, random_state=0)),
}
out = {}
with tempfile.TemporaryDirectory() as folder:
    for name, (cls, (x, y)) in tasks.items():
        bag = cls("tree", n_members=25, random_state=0).fit(x, y)
        path = os.path.join(folder, "bag.bagwise")
        bag.save(path)
        nodes = int(sum(bag._model.node_counts))
        size = os.path.getsize(path)
        back = bagwise.load(path)
        same = bool(np.array_equal(back.member_predictions(x[:2000]),
                                   bag.member_predictions(x[:2000])))
        out[name] = {"nodes": nodes, "bytes": size, "bytes_per_node": size / nodes,
                     "same_predictions": same}
print(json.dumps(out))
"""

SAVE_CHILD = r"""
import gc, json, os, resource, sys, tempfile
from sklearn.datasets import make_friedman1
import bagwise

rows = int(sys.argv[1])
x, y = make_friedman1(n_samples=rows, n_features=20, noise=1.0, random_state=0)
bag = bagwise.BagRegressor("tree", n_members=100, random_state=0).fit(x, y)
del x, y
gc.collect()

def rss_now():
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")

with open("/proc/self/clear_refs", "w") as f:
    f.write("5")  # resets the peak RSS to the current RSS (Linux >= 4.0)
before = rss_now()
with tempfile.TemporaryDirectory() as folder:
    path = os.path.join(folder, "bag.bagwise")
    bagwise.save(bag, path)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    size = os.path.getsize(path)
print(json.dumps({"file_bytes": size, "rss_before": before, "rss_peak": peak,
                  "nodes": int(sum(bag._model.node_counts))}))
"""


def _child(code: str, *args) -> dict:
    done = subprocess.run([sys.executable, "-c", code, *map(str, args)], check=True,
                          capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    rows, save_rows = (20_000, 40_000) if args.quick else (100_000, 200_000)

    sizes = _child(SIZE_CHILD, rows)
    print(f"model file bytes per node, 25 trees on {rows:,} rows")
    for name, s in sizes.items():
        print(f"  {name:26s} {s['bytes_per_node']:6.2f} B/node  ({s['nodes']:,} nodes, "
              f"{s['bytes'] / 2**20:.1f} MiB)")
    save = _child(SAVE_CHILD, save_rows)
    copies = (save["rss_peak"] - save["rss_before"]) / save["file_bytes"]
    mib = 2**20
    print(f"save of 100 trees on {save_rows:,} rows: file {save['file_bytes'] / mib:.0f} MiB, "
          f"RSS {save['rss_before'] / mib:.0f} MiB before, peak {save['rss_peak'] / mib:.0f} MiB: "
          f"{copies:.2f} file sizes held at once")

    for name in ("regression (Friedman #1)", "two classes"):
        assert sizes[name]["bytes_per_node"] <= BYTES_PER_NODE_TARGET, (name, sizes[name])
    for name, s in sizes.items():
        assert s["same_predictions"], f"{name}: predictions changed by save and load"
    assert copies <= SAVE_COPIES_TARGET, save


if __name__ == "__main__":
    main()
