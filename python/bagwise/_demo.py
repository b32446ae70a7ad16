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

#: The widest line the demo prints.
WIDTH = 100


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


def _notes(*lines: str) -> list[str]:
    """Indented note lines, wrapped at `WIDTH` characters."""
    import textwrap

    return [wrapped for line in lines
            for wrapped in textwrap.wrap(line, WIDTH, initial_indent="  ",
                                         subsequent_indent="  ")]


def _reading(*lines: str) -> list[str]:
    """The plain-word findings that end a section, wrapped at `WIDTH` characters."""
    import textwrap

    return ["  In plain words:"] + [
        wrapped for line in lines
        for wrapped in textwrap.wrap(line, WIDTH, initial_indent="  - ",
                                     subsequent_indent="    ")]


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
    boot_share = float(draw.out_of_bag_share().mean())
    rows.append(["bootstrap, rows", f"{n:,}", *oob_cell(draw), str(draw.counts.max()),
                 f"{seconds * 1e3:.1f}"])
    draw, seconds = timed(scheme="subsample", fraction=0.5)
    rows.append(["subsample 0.5, rows", f"{draw.draws_per_member:,}", *oob_cell(draw),
                 str(draw.counts.max()), f"{seconds * 1e3:.1f}"])
    draw, seconds = timed(strata=data["variety"])
    rows.append(["bootstrap, strata = variety", f"{n:,}", *oob_cell(draw),
                 str(draw.counts.max()), f"{seconds * 1e3:.1f}"])
    draw, seconds = timed(groups=data["vineyard"])
    group_share = float(draw.out_of_bag_share().mean())
    rows.append(["bootstrap, groups = vineyard", f"~{draw.draws_per_member:,}", *oob_cell(draw),
                 str(draw.counts.max()), f"{seconds * 1e3:.1f}"])
    draw, seconds = timed(block_length=50)
    rows.append(["bootstrap, blocks of 50 rows", f"{n:,}", *oob_cell(draw),
                 str(draw.counts.max()), f"{seconds * 1e3:.1f}"])
    draw, seconds = timed(scheme="bayesian")
    rows.append(["bayesian, rows", f"{n:,}", "none (weights)", "-", "-",
                 f"{seconds * 1e3:.1f}"])
    header = ["scheme, design", "draws", "out-of-bag share", "expected", "max count", "ms"]
    lines = [f"1. Resampling: the vines each of {members} members is fit on",
             _table(header, rows),
             *_notes("out-of-bag share: vines a member never saw, mean over members ± its "
                     "standard error; expected: its exact expectation for the design."),
             *_reading(
                 f"a bootstrap member never sees {boot_share:.0%} of the vines, about e^-1 = "
                 "37% (Efron & Tibshirani 1993); those vines are its out-of-bag test set",
                 f"drawing whole vineyards leaves out {group_share:.0%} of the vines: use "
                 "groups= when vines of a vineyard are alike, so out-of-bag vines are "
                 "really new")]
    return "\n".join(lines)


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
    lines = [f"2. Bagging a stable and an unstable learner: yield_kg from {X.shape[1]} "
             f"readings,", f"   {n_train:,} training vines, {len(test):,} test vines, "
             f"{members} members (seed {seed})"]
    loss_rows, spread_rows, readings = [], [], []
    for name, learner in (("linear", "linear"), (tree_name, tree)):
        start = time.perf_counter()
        bag = BagRegressor(learner, n_members=members, random_state=seed).fit(X[train], y[train])
        single = BagRegressor(learner, n_members=1, scheme="none",
                              random_state=seed).fit(X[train], y[train])
        with warnings.catch_warnings():
            # the tables below say where a figure is not estimable
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
        readings.append(f"{name}: {report.verdict()}; its out-of-bag error "
                        f"{o['ensemble_loss']:.4f} (no test set needed) against "
                        f"{d['ensemble_loss']:.4f} on the test vines")
        readings.append(f"{name}: {report.uncertainty._reading()}")
    lines.append(_table(["learner", "test loss", "member", "ambig", "gain", "single",
                         "ratio", "inf loss", "k 1%", "OOB loss", "fit s"], loss_rows))
    lines += _notes(
        "squared error in kg^2 on the test vines; test loss = member - ambig, the ambiguity "
        "(Krogh & Vedelsby 1995); gain = ambig / member; ratio = test loss / single model's; "
        "inf loss = loss(M) - W/M; k 1% = smallest k with W/k <= 1% of it; OOB loss: "
        "out-of-bag error on the training vines (Breiman 1996); fit s: seconds to fit and "
        "diagnose.")
    lines.append("")
    lines.append(_table(["learner", "median SE", "steady", "M steady", "between", "within",
                         "rho", "M for 1%"], spread_rows))
    lines += _notes(
        "SE: standard error of the ensemble's mean, bias-corrected infinitesimal jackknife "
        "(Efron 2014; Wager, Hastie & Efron 2014); steady: share of test vines whose estimate's "
        "Monte-Carlo noise is at most 20% of it; M steady: members for that at the median "
        "vine; n/e: not estimable with these members. Var(f_M) = between + within/M (ESL "
        "eq. 15.1), rho = between / (between + within); M for 1%: smallest M with within/M "
        "<= 1% of between.")
    lines += _reading(*readings)
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
    rows, readings = [], []
    for name, depth in (("tree, depth 2", 2), ("tree, full depth", None)):
        bag = BagClassifier("tree", n_members=members, max_depth=depth, random_state=seed)
        bag.fit(X[train], y[train])
        d = bag.diversity(X[test], y[test])
        vote = float(bag.score(X[test], y[test]))
        rows.append([name, f"{np.mean(d.accuracy):.3f}", f"{vote:.3f}",
                     f"{d.mean_disagreement:.3f}", f"{d.mean_yule_q:.3f}", f"{d.mean_kappa:.3f}",
                     f"{d.kohavi_wolpert:.4f}", f"{d.interrater_kappa:.3f}",
                     f"{d.generalized_diversity:.3f}"])
        pairs = d.redundant_pairs(top=3)
        listed = ", ".join(f"{a} & {b} ({apart:.1%})" for a, b, apart in pairs)
        readings.append(f"{name}: {d._reading()}; the vote gets {vote:.1%} right against "
                        f"{np.mean(d.accuracy):.1%} for a typical member")
        readings.append(f"{name}: most alike pairs (share of vines they disagree on): {listed}")
    lines.append(_table(["learner", "member acc", "vote acc", "disagree", "Q", "kappa", "KW",
                         "interrater", "GD"], rows))
    lines += _notes("measures of Kuncheva & Whitaker (2003) on the test vines: disagree, Q "
                    "(Yule), kappa: means over pairs of members; KW: Kohavi-Wolpert variance; "
                    "interrater: interrater agreement; GD: generalized diversity.")
    lines += _reading(*readings)
    return "\n".join(lines)


def redundancy_section(data: dict[str, np.ndarray], members: int, seed: int) -> str:
    """Order the members of bagged trees on their out-of-bag predictions, prune them, and
    print what the smaller bags lose on the test vines."""
    import warnings

    from .ensemble import BagClassifier

    X, _ = feature_matrix(data)
    order = np.random.default_rng(seed).permutation(len(X))
    train, test = order[: len(X) // 2], order[len(X) // 2:]
    lines = [f"4. Redundant members: ordered on their out-of-bag predictions, pruned, "
             f"{members} members (seed {seed})"]
    rows, readings = [], []
    tasks = (("yield_kg", BagRegressor, np.float64, "reduce_error"),
             ("premium_grade", BagClassifier, np.int64, "reduce_error"),
             ("premium_grade", BagClassifier, np.int64, "complementarity"))
    for target, cls, dtype, method in tasks:
        y = data[target].astype(dtype)
        bag = cls("tree", n_members=members, random_state=seed).fit(X[train], y[train])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # a few rows out of bag of no member early on
            chosen = bag.order_members(method=method)
        full_test = bag.member_predictions(X[test])
        held_out = chosen.evaluate(full_test, bag._targets(y[test], len(test)))
        smallest = bag.prune("smallest", order=chosen)
        fifth = bag.prune(0.2, order=chosen)

        def test_loss(model, y_test=y[test], values=cls is BagRegressor):
            predicted = model.predict(X[test])
            if values:
                return f"{np.mean((predicted - y_test) ** 2):.4f}"
            return f"{np.mean(predicted != y_test):.4f}"

        start = time.perf_counter()
        bag.predict(X[test])
        full_seconds = time.perf_counter() - start
        start = time.perf_counter()
        fifth.predict(X[test])
        fifth_seconds = time.perf_counter() - start
        rows.append([target, method.replace("_", "-"), test_loss(bag),
                     f"{smallest.n_members}", test_loss(smallest), f"{fifth.n_members}",
                     test_loss(fifth), f"{held_out.members_within(0.01)}",
                     f"{held_out.members_within(0.01, 'random')}",
                     f"{full_seconds / max(fifth_seconds, 1e-9):.1f}x"])
        if method == "reduce_error":
            readings.append(f"{target}: {held_out._reading()} (on the test vines)")
    lines.append(_table(["target", "order", "all", "k", "smallest", "k", "20%",
                         "within 1%", "random", "20% speed"], rows))
    lines += _notes(
        "test loss (squared error in kg^2, or error rate) of all members, of the smallest bag "
        "within 1% of the full one on the cross-fitted out-of-bag curve (k members), and of "
        "the best 20%; within 1%: members in the chosen order (and, median of 10, in a random "
        "order) from "
        "which on the test loss stays within 1% of all members'; 20% speed: prediction time of all "
        "members over the pruned bag's. Orders: reduce-error (Margineantu & Dietterich 1997), "
        "complementarity (Martinez-Munoz & Suarez 2004).")
    lines += _reading(*readings)
    return "\n".join(lines)


def run(path: str | None = None, *, members: int = 100, seed: int = 0, out: TextIO) -> None:
    """Print the demo report for the data at ``path`` (default: the copy shipped in the
    package), every section with ``members`` members."""
    csv_path = find_vineyards_csv(path)
    data = load_vineyards(csv_path)
    n = len(data["yield_kg"])
    print(f"bagwise {__version__} demo: hillside vineyard cooperative", file=out)
    print(f"{n:,} vines, {len(np.unique(data['vineyard']))} vineyards, "
          f"{len(np.unique(data['variety']))} varieties, {len(np.unique(data['season']))} "
          f"seasons; target: yield per vine (mean {data['yield_kg'].mean():.2f} kg)\n", file=out)
    print(resampling_section(data, members, seed), file=out)
    print("\n" + bagging_section(data, members, seed), file=out)
    print("\n" + diversity_section(data, members, seed), file=out)
    print("\n" + redundancy_section(data, members, seed), file=out)
    print("\nDiagnostics describe these data and learners, not a guarantee for deployment.",
          file=out)
