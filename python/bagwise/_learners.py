"""The one registry of native learners and of the estimators that use them.

Each native learner is named once here: the name users pass as ``learner=``, the class of
``bagwise._core`` that fits it, the tag its saved files carry, which tasks and weights it
takes, and how an estimator's parameters become the core's options. `ensemble.py` fits
through this table and `persistence.py` saves and loads through it, so neither module
needs the other's names (and neither imports the other's internals).

The core checks every learner parameter once (``max_depth``, ``min_leaf``,
``split_features``, ``penalty``, ``neighbors``) and names the argument in its message;
the options below only convert (e.g. a fraction of the features into a count).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from . import _core

__all__ = ["LEARNERS", "Learner", "estimator_class", "learner_of_model", "learner_of_tag",
           "register_estimator"]


@dataclass(frozen=True)
class Learner:
    """A native learner: its ``learner=`` name, core class and file tag."""

    name: str
    core_class: str
    tag: str
    classification: bool
    weighted: bool
    # (estimator, X, classification, seed) -> keyword options of the core's ``fit``
    options: Callable[[object, np.ndarray, bool, int], dict]
    # Whether members draw from their member streams while fitting: a fit of members
    # ``first .. first + k`` then passes ``first_member=first`` so they draw as in the
    # whole fit (the other learners are determined by their rows of the counts).
    member_streams: bool = False

    @property
    def available(self) -> bool:
        """Whether this build of the core has the learner."""
        return hasattr(_core, self.core_class)

    def core(self) -> type:
        """The class of ``bagwise._core`` that fits the learner."""
        return getattr(_core, self.core_class)


def _tree_options(est, X, classification, seed):
    split = est.split_features
    if isinstance(split, float):
        # A fraction of the features, at least one (Breiman 2001 uses a count).
        split = max(1, round(split * X.shape[1]))
    return {"max_depth": est.max_depth, "min_leaf": est.min_leaf, "split_features": split,
            "criterion": est.criterion if classification else "squared_error",
            "splitter": est.splitter, "seed": seed}


LEARNERS: dict[str, Learner] = {
    learner.name: learner
    for learner in (
        Learner("tree", "TreeEnsemble", "tree", classification=True, weighted=False,
                options=_tree_options, member_streams=True),
        Learner("linear", "LinearEnsemble", "linear", classification=False, weighted=True,
                options=lambda est, X, classification, seed: {"penalty": est.penalty}),
        Learner("neighbors", "NeighborsEnsemble", "neighbors", classification=True,
                weighted=False,
                options=lambda est, X, classification, seed: {"neighbors": est.neighbors}),
    )
}


def learner_of_model(model) -> Learner:
    """The registry entry of a fitted core ensemble."""
    for learner in LEARNERS.values():
        if type(model).__name__ == learner.core_class:
            return learner
    raise TypeError(f"`model`: {type(model).__name__} is not a native bagwise ensemble")


def learner_of_tag(tag: str) -> Learner:
    """The registry entry of a saved file's learner tag."""
    for learner in LEARNERS.values():
        if learner.tag == tag:
            return learner
    raise ValueError(f"unknown learner kind {tag!r}")


# Estimator class name -> class, filled by `ensemble.py` when it defines them. Files
# written before the estimators were renamed carry the old names.
_ESTIMATORS: dict[str, type] = {}
_FORMER_NAMES = {"RegressionBag": "BagRegressor", "ClassificationBag": "BagClassifier"}


def register_estimator(cls: type) -> type:
    """Record an estimator class under its name (a class decorator)."""
    _ESTIMATORS[cls.__name__] = cls
    return cls


def estimator_class(name: str) -> type:
    """The estimator class saved under ``name`` (current or former spelling)."""
    return _ESTIMATORS[_FORMER_NAMES.get(name, name)]


def estimator_classes() -> tuple[type, ...]:
    """Every registered estimator class."""
    return tuple(_ESTIMATORS.values())
