"""`python -m bagwise demo`: the whole available pipeline on the bundled demo data."""

from __future__ import annotations

import time
from typing import TextIO

import numpy as np

from . import __version__, _core
from ._display import plus_minus
from .datasets import feature_matrix, find_vineyards_csv, load_vineyards
from .ensemble import BagRegressor
from .resampling import resample


def _or_not(value, spec: str) -> str:
    """A summary number, or "n/e" where it is not estimable (None or NaN)."""
    if value is None or value != value:
        return "n/e"
    return format(value, spec)


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
        draw = resample(n, members, rng=seed, **kwargs)
        return draw, time.perf_counter() - start

    def oob_cell(draw):
        share = draw.out_of_bag_share()
        se = share.std(ddof=1) / np.sqrt(len(share))
        return (plus_minus(f"{share.mean():.4f}", se, f"{se:.4f}"),
                f"{draw.expected_out_of_bag_share():.4f}")

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
    w = draw.row_weights
    rows.append(["bayesian, rows", f"{n:,}", "none (all rows weighted)", "-", "-",
                 f"weight variance {w.var(axis=1, ddof=1).mean():.4f} "
                 f"(Rubin 1981: {(n - 1) / (n + 1):.4f})", f"{seconds * 1e3:.1f}"])

    header = ["scheme, design", "draws", "out-of-bag share", "expected", "max count", "check", "ms"]
    return (f"1. Resampling: the vines each of {members} members is fit on\n"
            + _table(header, rows))


def _tree_learner(seed: int):
    """The native tree when this build has it, else a wrapped scikit-learn tree."""
    if hasattr(_core, "TreeEnsemble"):
        return "tree", "tree (native)"
    from sklearn.tree import DecisionTreeRegressor

    return DecisionTreeRegressor(random_state=seed), "tree (sklearn, wrapped)"


def bagging_section(data: dict[str, np.ndarray], members: int, seed: int) -> str:
    """Fit a stable (linear) and an unstable (tree) learner, bagged and single, and print
    what the diagnostics say about each."""
    import warnings

    X, _ = feature_matrix(data)
    y = data["yield_kg"].astype(np.float64)
    order = np.random.default_rng(seed).permutation(len(y))
    n_train = len(y) // 2
    train, test = order[:n_train], order[n_train:]
    tree, tree_name = _tree_learner(seed)
    lines = [f"2. Bagging a stable and an unstable learner: yield_kg from "
             f"{X.shape[1]} readings, {n_train:,} training vines, {len(test):,} test vines, "
             f"{members} members (seed {seed})"]
    loss_rows, spread_rows, readings = [], [], []
    for name, learner in (("linear", "linear"), (tree_name, tree)):
        start = time.perf_counter()
        bag = BagRegressor(learner, n_members=members, random_state=seed).fit(X[train], y[train])
        single = BagRegressor(learner, n_members=1, scheme="none", random_state=seed).fit(X[train], y[train])
        with warnings.catch_warnings():
            # the report itself shows the correction share and the clipped points
            warnings.simplefilter("ignore")
            report = bag.diagnose(X[test], y[test], reference=single.predict(X[test]))
        seconds = time.perf_counter() - start
        # the numbers through the diagnosis's summary, whose keys the sections fix
        numbers = report.summary()
        d, r, c, u, s, o = (numbers[key] for key in ("decomposition", "reference", "size_curve",
                                                     "uncertainty", "spread", "out_of_bag"))
        loss_rows.append([name, f"{d['ensemble_loss']:.4f}", f"{d['member_loss']:.4f}",
                          f"{d['ambiguity']:.4f}", f"{d['relative_gain']:.1%}",
                          f"{r['reference_loss']:.4f}", f"{r['reference_ratio']:.3f}",
                          f"{c['infinite_loss']:.4f}", str(c["members_needed"]),
                          f"{o['ensemble_loss']:.4f}", f"{seconds:.1f}"])
        spread_rows.append([name, _or_not(u["median_std_error"], ".4f"),
                            f"{u['share_steady']:.0%}", _or_not(u["members_needed"], ","),
                            _or_not(s["mean_between"], ".4f"), f"{s['mean_within']:.4f}",
                            _or_not(s["pooled_rho"], ".3f"), _or_not(s["members_needed"], ",")])
        readings.append(f"  {name}: {report.verdict()}; out-of-bag error {o['ensemble_loss']:.4f} vs "
                        f"test error {d['ensemble_loss']:.4f}")
    lines.append(_table(["learner", "test loss", "member", "ambiguity", "gain", "single",
                         "ratio", "loss(inf)", "k for 1%", "OOB loss", "s"], loss_rows))
    lines.append("  squared error in kg^2 on the test vines; test loss = member - ambiguity "
                 "(Krogh & Vedelsby 1995); gain = ambiguity / member;\n"
                 "  ratio = test loss / single model's (does bagging help?); loss(inf) = "
                 "loss(M) - W/M, k for 1% = smallest k with W/k <= 1% of it;\n"
                 "  OOB loss: out-of-bag error on the training vines (Breiman 1996)\n")
    lines.append(_table(["learner", "median SE", "steady", "M steady", "between", "within",
                         "rho", "M for 1%"], spread_rows))
    lines.append("  SE: standard error of the ensemble's mean, bias-corrected infinitesimal "
                 "jackknife (Efron 2014; Wager, Hastie & Efron 2014);\n"
                 "  steady = share of points whose estimate's Monte-Carlo noise is <= 20% of "
                 "it, M steady = members for that at the median point;\n"
                 "  n/e = not estimable with these members; Var(f_M) = between + within/M "
                 "(ESL eq. 15.1), rho = between / (between + within),\n"
                 "  M for 1% = smallest M with within/M <= 1% of between")
    lines += readings
    return "\n".join(lines)


def diversity_section(data: dict[str, np.ndarray], members: int, seed: int) -> str:
    """Bag trees that grade vines premium or not and print how differently they err."""
    from .ensemble import BagClassifier

    X, _ = feature_matrix(data)
    y = data["premium_grade"].astype(np.int64)
    order = np.random.default_rng(seed).permutation(len(y))
    train, test = order[: len(y) // 2], order[len(y) // 2:]
    lines = [f"3. Diversity of bagged classifiers: premium_grade from {X.shape[1]} readings, "
             f"{members} members (seed {seed})"]
    rows = []
    for name, depth in (("tree, depth 2", 2), ("tree, full depth", None)):
        bag = BagClassifier("tree", n_members=members, max_depth=depth, random_state=seed)
        bag.fit(X[train], y[train])
        d = bag.diversity(X[test], y[test])
        vote = float(bag.score(X[test], y[test]))
        m = d.n_members
        holds = abs(d.kohavi_wolpert - (m - 1) / (2 * m) * d.mean_disagreement) < 1e-12
        rows.append([name, f"{np.mean(d.accuracy):.3f}", f"{vote:.3f}",
                     f"{d.mean_disagreement:.3f}", f"{d.mean_yule_q:.3f}", f"{d.mean_kappa:.3f}",
                     f"{d.kohavi_wolpert:.4f}", f"{d.interrater_kappa:.3f}",
                     f"{d.generalized_diversity:.3f}", "yes" if holds else "NO"])
    lines.append(_table(["learner", "member acc", "vote acc", "disagree", "Q", "kappa", "KW",
                         "interrater", "GD", "KW identity"], rows))
    lines.append("  measures of Kuncheva & Whitaker (2003) on the test vines; KW identity: "
                 "KW = (M-1)/(2M) * mean disagreement holds")
    return "\n".join(lines)


def run(path: str | None = None, *, members: int = 200, seed: int = 0, out: TextIO,
        bag_members: int = 100) -> None:
    """Print the demo report for the data at ``path`` (default: the bundled CSV)."""
    csv_path = find_vineyards_csv(path)
    data = load_vineyards(csv_path)
    n = len(data["yield_kg"])
    print(f"bagwise {__version__} demo: hillside vineyard cooperative ({csv_path})", file=out)
    print(f"{n:,} vines, {len(np.unique(data['vineyard']))} vineyards, "
          f"{len(np.unique(data['variety']))} varieties, {len(np.unique(data['season']))} seasons; "
          f"target: yield per vine (mean {data['yield_kg'].mean():.2f} kg)\n", file=out)
    print(resampling_section(data, members, seed), file=out)
    print("\n" + bagging_section(data, bag_members, seed), file=out)
    print("\n" + diversity_section(data, bag_members, seed), file=out)
    print("\nDiagnostics describe these data and learners, not a guarantee for deployment.",
          file=out)
