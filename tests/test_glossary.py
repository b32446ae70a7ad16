"""Every public name follows the glossary of DEVELOPERS.md: the fields, attributes,
properties and methods of every class `bagwise` exports, every `Diagnosis.summary` key,
every `to_frame()` column and the keyword names of every public function and method are
either a glossary name or a plain word of the short allow-list below."""

from __future__ import annotations

import dataclasses
import inspect
import re
import warnings
from pathlib import Path

import numpy as np

import bagwise
from bagwise import plots

DEVELOPERS = Path(__file__).parents[1] / "DEVELOPERS.md"

#: Plain words that name no quantity of their own, each with why it needs no glossary entry.
ALLOWED = {
    # options naming a choice among spellings the docstrings list
    "kind": "what the members predict: values, probabilities or labels",
    "task": "regression or classification",
    "method": "which variance estimator (ij, jackknife) or member ordering (reduce_error, ...)",
    "scheme": "which resampling scheme",
    "order": "the ordering of a heatmap's members",
    "orders": "how many random member orders a size curve or a member order's random curve averages",
    "member_order": "the MemberOrder result a figure draws",
    "level": "the coverage level of an interval",
    "bins": "how many bins a figure groups points into",
    "top": "how many pairs to list",
    "fraction": "the draw size as a share of the rows",
    "corrected": "whether the Monte-Carlo bias correction is subtracted",
    "matrix": "ask for (or hold) the full members x members matrix",
    "per_point": "return one value per point instead of the mean",
    "unit": "the unit of the targets on a figure's axes",
    "title": "a report's heading",
    "path": "a file to read or write",
    "max_points": "how many points a scatter figure draws at most",
    "max_members": "how many members a heatmap draws at most",
    # the estimators' data and learner settings (scikit-learn's words)
    "X": "the design matrix (scikit-learn)",
    "X_train": "the training design matrix",
    "y_train": "the training targets",
    "learner": "the member model",
    "max_depth": "a tree's largest depth",
    "min_leaf": "a tree's smallest leaf weight",
    "split_features": "features a tree tries per split",
    "splitter": "how a tree finds splits",
    "neighbors": "k of the nearest-neighbour learner",
    "penalty": "the ridge penalty",
    "use_sample_weight": "pass row weights to a wrapped estimator",
    "strata": "resampling within strata",
    "groups": "resampling whole groups",
    "block_length": "resampling blocks of consecutive rows",
    # verbs of the result and stream API (DEVELOPERS.md, Shapes of the API)
    "to_frame": "tidy table", "to_html": "HTML report", "summary": "key numbers",
    "readings": "findings in words", "verdict": "does bagging help",
    "mean_interval": "the interval mean ± z std_error around the ensemble's mean",
    "law": "the size law at sizes k",
    # frame and summary labels
    "section": "a frame's section column", "quantity": "a frame's quantity column",
    "value": "a frame's value column", "point": "a frame's point index",
    "member": "a frame's member index",
    "ensemble": "the summary's part about the ensemble as a whole",
    "bounded": "what a members-needed figure bounds", "basis": "how it is computed",
    "sections": "the section each members-needed row comes from",
    # scikit-learn's estimator API and parameter names
    "fit": "scikit-learn", "predict": "scikit-learn", "predict_proba": "scikit-learn",
    "estimator": "scikit-learn", "criterion": "a tree's impurity (scikit-learn's word)",
    "stratify": "resample within classes (scikit-learn's train_test_split word)",
}


def glossary_names() -> set[str]:
    """The backticked names of the glossary's tables (a row defines names in its meaning
    too, e.g. ``pooled_rho``) and of its "Shapes of the API"."""
    text = DEVELOPERS.read_text(encoding="utf-8")
    section = text.split("## Glossary", 1)[1].split("\n## ", 1)[0]
    names = set()
    for line in section.splitlines():
        if line.startswith(("| ", "- ")) and not line.startswith("| ---"):
            for code in re.findall(r"`([^`]+)`", line):
                names.update(re.findall(r"[A-Za-z_][A-Za-z0-9_]*(?:<[a-z]+>)?", code))
    return names


def family_names() -> set[str]:
    """A family is named by its function (`bagwise.diversity`), and a diagnosis's section
    by the same name (`Diagnosis.diversity`, `summary()["diversity"]`)."""
    from bagwise.sections import SECTIONS

    functions = {name for name in bagwise.__all__ if inspect.isfunction(getattr(bagwise, name))}
    return functions | {section.key for section in SECTIONS}


def known(name: str, names: set[str]) -> bool:
    if name in names or name in ALLOWED or name in family_names():
        return True
    # `mean_<q>`: the mean over points of a glossary quantity <q>
    if name.startswith("mean_") and "mean_<q>" in names:
        return known(name[len("mean_"):], names)
    # `plot_<name>`: a figure (Shapes of the API)
    if name.startswith("plot_"):
        return True
    return False


def _results():
    """One instance of every result class `bagwise` exports (small inputs)."""
    rng = np.random.default_rng(0)
    counts = bagwise.resample(40, 60, rng=0).counts
    y_test, y_train = rng.normal(size=50), rng.normal(size=40)
    test = y_test + counts @ rng.normal(size=(40, 50)) / 40 + 0.1 * rng.normal(size=(60, 50))
    train = y_train + counts @ rng.normal(size=(40, 40)) / 40
    labels_y = rng.integers(0, 3, size=80)
    labels = np.where(rng.random((6, 80)) < 0.7, labels_y, rng.integers(0, 3, size=(6, 80)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return [
            bagwise.resample(40, 60, rng=0),
            bagwise.decompose(test, y_test),
            bagwise.size_curve(test, y_test),
            bagwise.correlation(test, y_test),
            bagwise.out_of_bag(train, counts, y_train),
            bagwise.prediction_variance(test, counts),
            bagwise.spread(test, counts),
            bagwise.replicate_spread(rng.normal(size=(10, 1, 30)) + rng.normal(size=(10, 8, 30))),
            bagwise.diversity(labels, labels_y),
            bagwise.order_members(test, y_test),
            bagwise.order_members(labels, labels_y, method="margin_distance"),
            bagwise.diagnose(test, y_test, counts=counts, train_members=train,
                             y_train=y_train, reference=y_test + 0.5),
            bagwise.diagnose(labels, labels_y),
            _read_ensemble(),
            bagwise.BagRegressor("linear", n_members=10, random_state=0).fit(
                rng.normal(size=(40, 2)), y_train).verdict(),
            bagwise.compare_learners(rng.normal(size=(40, 2)), y_train, ["linear"],
                                     n_members=10, random_state=0),
        ]


def _read_ensemble():
    from sklearn.ensemble import RandomForestClassifier

    rng = np.random.default_rng(1)
    X = rng.normal(size=(60, 3))
    y = np.where(X[:, 0] > 0, "yes", "no")
    forest = RandomForestClassifier(n_estimators=5, random_state=0).fit(X, y)
    return bagwise.read_ensemble(forest, X[:10], X_train=X, y_train=y)


def _public(names):
    return {n for n in names if not n.startswith("_")}


def _keywords(function) -> set[str]:
    try:
        parameters = inspect.signature(function).parameters.values()
    except (TypeError, ValueError):
        return set()
    return {p.name for p in parameters if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)
            and p.name not in ("self", "cls") and not p.name.startswith("_")}


def _own_members(cls):
    """Public methods and properties defined by bagwise (not inherited from scikit-learn
    or object)."""
    for name, member in inspect.getmembers(cls):
        if name.startswith("_"):
            continue
        target = member.fget if isinstance(member, property) else member
        module = getattr(target, "__module__", "") or ""
        if module.startswith("bagwise"):
            yield name, member


def used_names() -> dict[str, set[str]]:
    """Every public name, with where it occurs."""
    where: dict[str, set[str]] = {}

    def add(name, place):
        where.setdefault(name, set()).add(place)

    for name in bagwise.__all__:
        obj = getattr(bagwise, name)
        if inspect.isclass(obj):
            if issubclass(obj, Warning):
                continue
            for keyword in _keywords(obj.__init__):
                add(keyword, f"{name}()")
            for member, value in _own_members(obj):
                add(member, f"{name}.{member}")
                if callable(value):
                    for keyword in _keywords(value):
                        add(keyword, f"{name}.{member}()")
        elif callable(obj) and name != "__version__":
            for keyword in _keywords(obj):
                add(keyword, f"{name}()")
    for name in plots.__all__:
        for keyword in _keywords(getattr(plots, name)):
            add(keyword, f"plots.{name}()")
    for result in _results():
        kind = type(result).__name__
        fields = ({f.name for f in dataclasses.fields(result)}
                  if dataclasses.is_dataclass(result) else set())
        for attribute in _public(set(vars(result)) | fields):
            add(attribute, f"{kind}.{attribute}")
        if hasattr(result, "to_frame"):
            for column in result.to_frame().columns:
                add(str(column), f"{kind}.to_frame()")
        if isinstance(result, bagwise.Diagnosis):
            for section, numbers in result.summary().items():
                add(section, "Diagnosis.summary()")
                for key in numbers:
                    add(key, f"Diagnosis.summary()[{section!r}]")
            table = result.members_needed()
            for column in table.to_frame().columns:
                add(str(column), "Diagnosis.members_needed().to_frame()")
            for field in dataclasses.fields(table):
                add(field.name, "MembersNeeded")
            for key, *_ in result._parts():
                section = getattr(result, key)
                if dataclasses.is_dataclass(section):
                    for field in _public({f.name for f in dataclasses.fields(section)}):
                        add(field, f"Diagnosis.{key}")
    return where


def test_the_glossary_parses():
    names = glossary_names()
    # a few rows of each table, as DEVELOPERS.md writes them
    assert {"members", "n_members", "counts", "ensemble_loss", "std_error", "rng",
            "n_jobs", "members_needed", "mean_<q>", "plot_<name>", "y_train",
            "pooled_rho"} <= names
    assert "meaning" not in names and "name" not in names  # the header row is no name


def test_every_public_name_is_in_the_glossary():
    names = glossary_names()
    where = used_names()
    unknown = {name: sorted(places) for name, places in where.items() if not known(name, names)}
    listing = "\n".join(f"  {name}: {', '.join(places)}" for name, places in sorted(unknown.items()))
    assert not unknown, ("names neither in the DEVELOPERS.md glossary nor in the test's "
                         f"allow-list:\n{listing}")
