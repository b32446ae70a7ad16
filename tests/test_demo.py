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
