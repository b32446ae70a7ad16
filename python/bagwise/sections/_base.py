"""What every section of a `Diagnosis` supplies, and the inputs it is computed from."""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

#: Relative tolerance of the "members needed" figures in the report.
TOLERANCE = 0.01


@dataclasses.dataclass(frozen=True, eq=False)
class Inputs:
    """The checked arguments of `diagnose` (the arrays are references, not copies).

    ``members_are_training`` False never reads ``members`` as predictions on the training
    rows; None reads them so when ``counts`` has one column per point. ``member_count`` says
    how the number of members was chosen: ``"random"`` (a fitted bag's
    ``random_member_count``), ``"fixed"``, or None (not known: arrays from elsewhere).
    """

    kind: str
    members: np.ndarray
    y: np.ndarray
    counts: np.ndarray | None = None
    train_members: np.ndarray | None = None
    y_train: np.ndarray | None = None
    reference: np.ndarray | None = None
    seed: Any = 0
    n_jobs: int | None = None
    members_are_training: bool | None = None
    member_count: str | None = None
    #: Members per group when the counts come from the bootstrap of little bags (then the
    #: standard errors use its estimator and the IJ-based spread is left out); 0 otherwise.
    group_size: int = 0

    @functools.cached_property
    def one_value(self) -> tuple[np.ndarray, np.ndarray] | None:
        """``(members, targets)`` with one number per member and point: the values; for
        class probabilities the probability each member gives the **observed** class,
        against 1 (so a residual is ``p(y) - 1`` for any number of classes); None for
        labels."""
        if self.kind == "labels":
            return None
        if self.kind == "probabilities":
            if not isinstance(self.members, np.ndarray):
                return _observed_lazy(self.members, self.y), np.ones(self.members.shape[1])
            observed = self.members[:, np.arange(self.members.shape[1]), self.y]
            return observed, np.ones(self.members.shape[1])
        return self.members, self.y


def _observed(members: np.ndarray, y: np.ndarray) -> np.ndarray:
    return members[:, np.arange(members.shape[1]), y]


def _observed_lazy(members, y: np.ndarray):
    """`Inputs.one_value`'s observed-class probabilities of lazy members, chunk by chunk
    where the chunks live (a dask array (members, n_points))."""
    import dask.array as da

    members = members.rechunk({0: -1, 2: -1})
    targets = da.from_array(y, chunks=(members.chunks[1],))
    return da.blockwise(_observed, "ij", members, "ijk", targets, "j", concatenate=True,
                        dtype=members.dtype)


@dataclasses.dataclass(frozen=True)
class Figure:
    """One figure of a section: ``draw(ax)`` draws it on a matplotlib Axes."""

    caption: str
    draw: Callable[[Any], Any]
    figsize: tuple[float, float] = (6.4, 4.0)


@dataclasses.dataclass(frozen=True)
class Needed:
    """One "members needed" figure: what it bounds, the members, and the basis."""

    bounded: str
    members_needed: int | float
    basis: str


class Section:
    """One family's part of a `Diagnosis`.

    A subclass sets ``key`` (the `Diagnosis` attribute and `Diagnosis.summary` key),
    ``title`` (the heading of its block), ``result_type`` and ``doc`` (its entry in the
    `Diagnosis` Attributes), and overrides `compute` and whichever of the other hooks apply. Each hook
    gets the section's own result and the whole diagnosis (to read the inputs or another
    section's result object, never that object's attributes).
    """

    key: str = ""
    title: str = ""
    result_type: str = "Result"
    doc: str = ""

    def compute(self, inputs: Inputs, done: Mapping[str, Any]):
        """The section's result from the inputs (``done``: the results of the sections
        registered before it, by key), or None when it does not apply."""
        raise NotImplementedError

    def rows(self, result, diagnosis) -> list[tuple[str, str]]:
        """``(label, value)`` rows of the section's text block."""
        return result._rows()

    def note(self, result, diagnosis) -> str:
        """The one line under the section's block."""
        return result._reading()

    def readings(self, result, diagnosis) -> list[str]:
        """Findings in plain words for the diagnosis's readings."""
        return []

    def summary(self, result, diagnosis) -> dict:
        """The key numbers, JSON-ready (see `number`)."""
        return {}

    def ensemble(self, result) -> dict:
        """Entries the section adds to the ``"ensemble"`` part of the summary."""
        return {}

    def needed(self, result, tolerance: float) -> list[Needed]:
        """The "members needed" figures the section can give at ``tolerance``."""
        return []

    def figures(self, result, diagnosis, unit) -> list[Figure]:
        """The section's figures in the HTML report."""
        return []


def number(value):
    """A JSON-friendly number: Python int/float/bool, NaN and infinities as None."""
    import math

    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    value = float(value)
    return None if math.isnan(value) or math.isinf(value) else value


def quiet(call):
    """Call without the warnings the result already gave when `diagnose` built it."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return call()


def is_nan(value) -> bool:
    return isinstance(value, float) and value != value
