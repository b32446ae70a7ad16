"""The demo command runs end to end on the bundled data and its checks hold."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np

from bagwise.datasets import load_vineyards

ROOT = Path(__file__).resolve().parents[1]


def test_demo_prints_the_report():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "Resampling" in out
    assert ": NO" not in out
    for check in ("variety sizes kept exactly: yes", "vines of a vineyard share a count: yes",
                  "no row drawn twice: yes"):
        assert check in out


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
        assert float(cells[0]) > 0                      # a standard error was computed
        assert 0 <= float(cells[5]) <= 1                 # rho
    # trees decorrelate more than least squares (members share less through the data)
    assert float(spread_tree[5]) < float(spread_linear[5])


def test_demo_diversity_section_reads_right():
    out = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--members", "60"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "3. Diversity of bagged classifiers" in out
    shallow = _row(out, "learner member acc", "tree, depth 2")
    deep = _row(out, "learner member acc", "tree, full depth")
    for cells in (shallow, deep):
        # Kuncheva & Whitaker 2003 (from memory): KW = (M-1)/(2M) * mean disagreement
        assert cells[-1] == "yes"
        assert 0 <= float(cells[2]) <= 1                   # disagreement is a share
    # common practice: fully grown trees disagree more than stumps of depth 2
    assert float(deep[2]) > float(shallow[2])


def test_demo_reports_a_missing_file():
    run = subprocess.run([sys.executable, "-m", "bagwise", "demo", "--data", "missing.csv"],
                         cwd=ROOT, capture_output=True, text=True)
    assert run.returncode == 2
    assert "missing.csv" in run.stderr


def test_demo_data_is_regenerated_exactly(tmp_path):
    # The committed CSV is what the committed generator writes (fixed seed).
    script = ROOT / "demo-data" / "make_vineyards.py"
    copy = tmp_path / "make_vineyards.py"
    copy.write_text(script.read_text())
    subprocess.run([sys.executable, str(copy)], check=True, capture_output=True)
    assert (tmp_path / "vineyards.csv").read_bytes() == (ROOT / "demo-data" / "vineyards.csv").read_bytes()
    data = load_vineyards(ROOT / "demo-data" / "vineyards.csv")
    assert len(data["yield_kg"]) == 3000
    assert np.all(np.diff(data["season"] * 1000 + data["harvest_day"]) >= 0)
    assert (ROOT / "demo-data" / "vineyards.csv").stat().st_size < 2 * 2**20
