"""`python -m bagwise demo`: the whole available pipeline on the bundled demo data."""

from __future__ import annotations

import time
from typing import TextIO

import numpy as np

from . import __version__
from .datasets import find_vineyards_csv, load_vineyards
from .resampling import resample


def _table(header: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    def line(r):
        return ("  " + "  ".join(str(c).ljust(w) for c, w in zip(r, widths))).rstrip()

    return "\n".join([line(header), "  " + "  ".join("-" * w for w in widths),
                      *map(line, rows)])


def resampling_section(data: dict[str, np.ndarray], members: int, seed: int) -> str:
    n = len(data["yield_kg"])
    rows = []

    def timed(**kwargs):
        start = time.perf_counter()
        draw = resample(n, members, seed=seed, **kwargs)
        return draw, time.perf_counter() - start

    def oob_cell(draw):
        share = draw.out_of_bag_share()
        se = share.std(ddof=1) / np.sqrt(len(share))
        return f"{share.mean():.4f} ± {se:.4f}", f"{draw.expected_out_of_bag_share():.4f}"

    draw, seconds = timed()
    ok = bool((draw.counts.sum(axis=1) == n).all())
    rows.append(["bootstrap, rows", f"{n:,}", *oob_cell(draw), str(draw.counts.max()),
                 f"every member draws {n:,} rows: {'yes' if ok else 'NO'}", f"{seconds * 1e3:.1f}"])

    draw, seconds = timed(scheme="subsample", fraction=0.5)
    ok = bool((draw.counts <= 1).all())
    rows.append(["subsample 0.5, rows", f"{draw.draws_per_member:,}", *oob_cell(draw),
                 str(draw.counts.max()), f"no row drawn twice: {'yes' if ok else 'NO'}",
                 f"{seconds * 1e3:.1f}"])

    variety = data["variety"]
    draw, seconds = timed(strata=variety)
    kept = all(
        bool((draw.counts[:, variety == v].sum(axis=1) == (variety == v).sum()).all())
        for v in np.unique(variety)
    )
    rows.append(["bootstrap, strata = variety", f"{n:,}", *oob_cell(draw), str(draw.counts.max()),
                 f"variety sizes kept exactly: {'yes' if kept else 'NO'}", f"{seconds * 1e3:.1f}"])

    vineyard = data["vineyard"]
    draw, seconds = timed(groups=vineyard)
    shared = all(
        bool((draw.counts[:, vineyard == v] == draw.counts[:, [np.flatnonzero(vineyard == v)[0]]]).all())
        for v in np.unique(vineyard)
    )
    rows.append(["bootstrap, groups = vineyard", f"~{draw.draws_per_member:,}", *oob_cell(draw),
                 str(draw.counts.max()),
                 f"vines of a vineyard share a count: {'yes' if shared else 'NO'}",
                 f"{seconds * 1e3:.1f}"])

    draw, seconds = timed(block_length=50)
    starts = draw.block_starts
    rows.append(["bootstrap, blocks of 50 rows", f"{n:,}", *oob_cell(draw), str(draw.counts.max()),
                 f"{starts.shape[1]} blocks of consecutive harvest days per member",
                 f"{seconds * 1e3:.1f}"])

    draw, seconds = timed(scheme="bayesian")
    w = draw.weights
    rows.append(["bayesian, rows", f"{n:,}", "none (all rows weighted)", "-", "-",
                 f"weight variance {w.var(axis=1, ddof=1).mean():.4f} "
                 f"(Rubin 1981: {(n - 1) / (n + 1):.4f})", f"{seconds * 1e3:.1f}"])

    header = ["scheme, design", "draws", "out-of-bag share", "expected", "max count", "check", "ms"]
    return (f"1. Resampling: the vines each of {members} members is fit on\n"
            + _table(header, rows))


def run(path: str | None = None, *, members: int = 200, seed: int = 0, out: TextIO) -> None:
    """Print the demo report for the data at ``path`` (default: the bundled CSV)."""
    csv_path = find_vineyards_csv(path)
    data = load_vineyards(csv_path)
    n = len(data["yield_kg"])
    print(f"bagwise {__version__} demo: hillside vineyard cooperative ({csv_path})", file=out)
    print(f"{n:,} vines, {len(np.unique(data['vineyard']))} vineyards, "
          f"{len(np.unique(data['variety']))} varieties, {len(np.unique(data['season']))} seasons; "
          f"target: yield per vine (mean {data['yield_kg'].mean():.2f} kg)\n", file=out)
    print(resampling_section(data, members, seed), file=out)
    print("\nDiagnostics describe these data and learners, not a guarantee for deployment.",
          file=out)
