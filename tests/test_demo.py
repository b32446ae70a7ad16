"""The demo command runs end to end on the bundled data and its checks hold."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np

from bagwise.datasets import load_vineyards

ROOT = Path(__file__).resolve().parents[1]


def test_demo_prints_plain_findings_within_100_columns():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "1. Resampling" in out
    assert max(len(line) for line in out.splitlines()) <= 100
    # every section ends in plain words; --members applies to every section
    sections = out.split("\n\n")
    numbered = [part for part in sections if part[:2] in ("1.", "2.", "3.", "4.")]
    assert len(numbered) >= 4
    assert out.count("In plain words:") == 4
    assert out.count("60 members") >= 4 and "100 members" not in out
    # no self-checks shown to users, and no "± 0"
    assert "yes" not in out.split() and ": NO" not in out and "± 0 " not in out


def _row(out, table_head, learner):
    """The cells of ``learner``'s row in the table whose header starts with ``table_head``."""
    lines = out.splitlines()
    start = next(i for i, line in enumerate(lines)
                 if line.split()[:len(table_head.split())] == table_head.split())
    for line in lines[start + 2:]:
        if line.strip().startswith(learner):
            return line.strip()[len(learner):].split()
    raise AssertionError(f"no row {learner!r}")


def test_demo_bagging_section_reads_right():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "2. Bagging a stable and an unstable learner" in out
    linear = _row(out, "learner test loss", "linear")
    tree = next(name for name in ("tree (native)", "tree (sklearn, wrapped)") if name in out)
    bagged = _row(out, "learner test loss", tree)
    for cells in (linear, bagged):
        test_loss, member, ambiguity = (float(v) for v in cells[:3])
        # Krogh & Vedelsby 1995: ensemble = mean member - ambiguity (printed to 4 decimals)
        assert abs(test_loss - (member - ambiguity)) <= 2e-4
        oob = float(cells[8])
        # the out-of-bag error estimates the test error (Breiman 1996): same scale
        assert 0.8 < oob / test_loss < 1.25, (oob, test_loss)
    # common practice: bagging leaves least squares as it is and roughly halves a tree's error
    assert 0.97 <= float(linear[5]) <= 1.03
    assert float(bagged[5]) < 0.8
    # Breiman 1996: least squares is stable (no clear difference); a tree is not
    assert "linear: no clear difference between bagging and a single model" in out
    assert f"{tree}: bagging helps this learner" in out
    spread_linear = _row(out, "learner median SE", "linear")
    spread_tree = _row(out, "learner median SE", tree)
    for cells in (spread_linear, spread_tree):
        # a standard error, or "n/e" (not estimable with these members) and then the
        # members a steady one needs, more than the demo has
        if cells[0] == "n/e":
            assert int(cells[2].replace(",", "")) > 60
        else:
            assert float(cells[0]) > 0
        assert cells[5] == "n/e" or 0 <= float(cells[5]) <= 1          # rho
    # trees decorrelate more than least squares (members share less through the data),
    # where both splits are estimable
    if "n/e" not in (spread_tree[5], spread_linear[5]):
        assert float(spread_tree[5]) < float(spread_linear[5])


def test_demo_diversity_section_reads_right():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "3. Diversity of bagged classifiers" in out
    shallow = _row(out, "learner member acc", "tree, depth 2")
    deep = _row(out, "learner member acc", "tree, full depth")
    for cells in (shallow, deep):
        # Kuncheva & Whitaker 2003 (from memory): KW = (M-1)/(2M) * mean disagreement
        m = 60
        assert abs(float(cells[5]) - (m - 1) / (2 * m) * float(cells[2])) < 1e-3
        assert 0 <= float(cells[2]) <= 1                   # disagreement is a share
    assert "most alike pairs" in out
    # common practice: fully grown trees disagree more than stumps of depth 2
    assert float(deep[2]) > float(shallow[2])


def test_demo_redundancy_section_reads_right():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "4. Redundant members" in out
    for target, order in (("yield_kg", "reduce-error"), ("premium_grade", "reduce-error"),
                          ("premium_grade", "complementarity")):
        lines = out.split("4. Redundant members", 1)[1].splitlines()
        cells = next(line.split()[2:] for line in lines if line.split()[:2] == [target, order])
        full, smallest_k, smallest, fifth_k, fifth = cells[:5]
        within, random = int(cells[5]), int(cells[6])
        # the pruned sizes: "smallest" at most all members; 20% of 60 is 12
        assert 1 <= int(smallest_k) <= 60 and int(fifth_k) == 12
        assert 1 <= within <= 60 and 1 <= random <= 60
        # losses are shares or squared errors, printed as numbers (never "nan")
        assert all(float(v) >= 0 for v in (full, smallest, fifth))
    assert "yield_kg: from the first" in out


def test_demo_reports_a_missing_file():
    run = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--data", "missing.csv"],
                         cwd=ROOT, capture_output=True, text=True)
    assert run.returncode == 2
    assert "missing.csv" in run.stderr


def test_demo_data_is_regenerated_exactly(tmp_path):
    # The shipped CSV is what the committed generator writes (fixed seed).
    shipped = ROOT / "python" / "bagwise" / "data" / "vineyards.csv"
    subprocess.run([sys.executable, str(ROOT / "demo-data" / "make_vineyards.py"),
                    str(tmp_path / "vineyards.csv")], check=True, capture_output=True)
    assert (tmp_path / "vineyards.csv").read_bytes() == shipped.read_bytes()
    data = load_vineyards()                      # the package's own copy
    assert len(data["yield_kg"]) == 3000
    assert np.all(np.diff(data["season"] * 1000 + data["harvest_day"]) >= 0)
    assert shipped.stat().st_size < 2 * 2**20


def test_demo_runs_outside_the_repository(tmp_path):
    # After `pip install` there is no checkout: the data comes from the package.
    run = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "20"],
                         cwd=tmp_path, capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "1. Resampling" in run.stdout
