"""One report on a bagged ensemble: `diagnose` and its `Diagnosis` result.

`diagnose` bundles what the separate diagnostics say about the same member predictions:
the ambiguity decomposition (`decompose`), the ensemble-size curve and its finite-ensemble
law (`size_curve`), the residual correlation (`correlation`), the out-of-bag error
(`out_of_bag`) when predictions on the training rows are known, the standard errors of the
ensemble's predictions and the between/within split of the member variance
(`prediction_variance`, `spread`) when the in-bag counts are known, and the comparison with
a single model fit on all the data when its predictions are given. Every number in the
report is exactly what the standalone function returns for the same arrays.

Each of these is a section of `bagwise.sections` (computed, summarised, read and drawn by
its own module); `Diagnosis` holds one attribute per registered section.
"""

from __future__ import annotations

import dataclasses
import html
import textwrap
from typing import Any

import numpy as np

from . import _chunked
from ._display import html_block, safe_html, text_block
from ._members import PROBABILITY_TOLERANCE, in_bag_counts, members_array, targets
from ._progress import progress_callback, progress_iv
from ._results import Result, check_tolerance
from ._validation import n_jobs_value, rng_seed
from ._warnings import once_per_call
from .read_ensemble import EnsembleArrays, _targets
from .sections import SECTIONS, TOLERANCE, Inputs
from .sections._base import quiet

__all__ = ["Diagnosis", "MembersNeeded", "diagnose"]


def _array(value, name):
    if isinstance(value, np.ndarray):
        return value
    try:
        return np.asarray(value)
    except (TypeError, ValueError) as err:
        raise TypeError(f"`{name}`: expected an array, got {type(value).__name__} ({err})") from None


def _members_of(value, name: str) -> tuple[str, Any]:
    """``(kind, array)`` of members in memory (`members_array`) or lazy: then a dask array
    (points on axis 1) whose kind is read from its dtype and shape, nothing computed."""
    if not _chunked.is_lazy(value):
        return members_array(value, name)
    array = _chunked.as_dask(_chunked.point_major(value, name), name, 1)
    if array.ndim in (2, 3) and 0 in array.shape:
        raise ValueError(f"`{name}`: has an empty axis, shape {array.shape}")
    stand_in = np.zeros((array.shape[0], 1, *array.shape[2:]), dtype=array.dtype)
    kind, _ = members_array(stand_in, name)
    return kind, array


def _in_memory(value, name: str):
    """A lazy per-point argument (targets, a reference) computed here: O(points), as the
    per-point results a diagnosis holds."""
    if value is None or not _chunked.is_lazy(value):
        return value
    import dask

    return np.asarray(dask.compute(_chunked.as_dask(value, name))[0])


def _lazy_counts_iv(counts, n_members: int, n_rows: int | None):
    """Shape and dtype checks of lazy ``counts``; their values are checked chunk by chunk
    where they live, by the sections that read them."""
    counts = _chunked.as_dask(_chunked.point_major(counts, "counts"), "counts", 1)
    if counts.ndim != 2 or counts.shape[0] != n_members:
        raise ValueError(f"`counts`: expected ({n_members}, n_rows) (one row per member of "
                         f"`members`), got shape {counts.shape}")
    if n_rows is not None and counts.shape[1] != n_rows:
        raise ValueError(f"`counts`: has {counts.shape[1]:,} rows but `train_members` has "
                         f"{n_rows:,}")
    if counts.dtype.kind not in "iu":
        raise TypeError(f"`counts`: in-bag counts are non-negative integers, got dtype "
                        f"{counts.dtype}")
    return counts


def _reference_values_iv(kind, reference, y):
    """Probabilities that are probabilities (in [0, 1], summing to 1 within the members'
    tolerance); values whose squared error against ``y`` is a finite number."""
    if kind == "probabilities":
        sums = reference.sum(axis=1)
        if (reference.min() < -PROBABILITY_TOLERANCE or reference.max() > 1 + PROBABILITY_TOLERANCE
                or np.any(np.abs(sums - 1) > PROBABILITY_TOLERANCE)):
            raise ValueError("`reference`: class probabilities must lie in [0, 1] and sum to 1 "
                             f"(within {PROBABILITY_TOLERANCE:g}) at every point")
        return
    with np.errstate(over="ignore", invalid="ignore"):
        squares = (reference - y) ** 2
    if not np.all(np.isfinite(squares)):
        raise ValueError("`reference`: values so large their squared error against `y` "
                         "overflows float64")


def _diagnose_iv(members, y, counts, reference, train_members, y_train, seed, n_jobs):
    y, y_train, reference = (_in_memory(y, "y"), _in_memory(y_train, "y_train"),
                             _in_memory(reference, "reference"))
    kind, members = _members_of(members, "members")
    n_members, n_points = members.shape[:2]
    if n_members < 2:
        raise ValueError(f"`members`: a diagnosis needs at least 2 members, got {n_members}")
    y = targets(y, kind, n_points)
    if kind == "probabilities" and y.max() >= members.shape[2]:
        raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
    if (train_members is None) != (y_train is None):
        raise ValueError("`y_train`: give `train_members` and `y_train` together")
    n_rows = None
    if train_members is not None:
        if counts is None:
            raise ValueError("`counts`: `train_members` needs the in-bag counts they were fit with")
        train_members = (_chunked.as_dask(_chunked.point_major(train_members, "train_members"),
                                          "train_members", 1)
                         if _chunked.is_lazy(train_members)
                         else _array(train_members, "train_members"))
        if train_members.ndim < 2 or train_members.shape[0] != n_members:
            raise ValueError(f"`train_members`: expected ({n_members}, n_rows, ...) (one row per "
                             f"member of `members`), got {train_members.shape}")
        n_rows = train_members.shape[1]
    if counts is not None and _chunked.is_lazy(counts):
        counts = _lazy_counts_iv(counts, n_members, n_rows)
    elif counts is not None:
        # Members from `members`; training rows from `train_members` when given.
        counts = in_bag_counts(counts, n_members=n_members, n_rows=n_rows,
                               rows_from="train_members")
    if train_members is not None:
        train_kind, train_members = _members_of(train_members, "train_members")
        if train_kind != kind:
            raise ValueError(f"`train_members`: holds {train_kind} but `members` holds {kind}")
    if reference is not None:
        reference = _array(reference, "reference")
        expected = (n_points, members.shape[2]) if kind == "probabilities" else (n_points,)
        if reference.shape != expected:
            raise ValueError(f"`reference`: expected shape {expected} (the single model's "
                             f"{'probabilities' if kind == 'probabilities' else 'predictions'} "
                             f"at the points), got {reference.shape}")
        if kind == "labels":
            if reference.dtype.kind not in "iu":
                raise TypeError(f"`reference`: label members need integer labels, got dtype "
                                f"{reference.dtype}")
        elif reference.dtype.kind not in "fiu":
            raise TypeError(f"`reference`: expected numbers, got dtype {reference.dtype}")
        else:
            reference = reference.astype(np.float64, copy=False)
            if not np.all(np.isfinite(reference)):
                raise ValueError("`reference`: contains NaN or infinite values")
            _reference_values_iv(kind, reference, y)
    return (kind, members, y, counts, reference, train_members, y_train, rng_seed(seed),
            n_jobs_value(n_jobs))


def diagnose(members, y, *, counts=None, reference=None, train_members=None, y_train=None,
             rng=0, n_jobs=None, progress=False) -> Diagnosis:
    """Everything bagwise can say about an ensemble from its member predictions, in one call.

    Parameters
    ----------
    members : array or EnsembleArrays
        The members' predictions at the points being diagnosed (usually a test set): float
        ``(members, n_points)`` values, float ``(members, n_points, n_classes)``
        probabilities or integer ``(members, n_points)`` labels; at least 2 members. Or
        what `bagwise.read_ensemble` read from a fitted ensemble: its members, counts and
        training-row predictions and targets are used (leave ``counts`` and
        ``train_members`` out), and ``y`` is given as the model's class labels.
    y : array of shape (n_points,)
        Targets at the points (class indices for classification; the model's class labels
        with an `EnsembleArrays`).
    counts : integer array of shape (members, n_train), optional
        The in-bag counts the members were fit with (e.g. ``bagwise.resample(...).counts`` or
        a fitted bag's ``in_bag_``). Enables the standard errors (``uncertainty``) and the
        between/within split (``spread``) and, with training-row predictions, the
        out-of-bag error.
    reference : array, optional
        Predictions at the points of one model of the same kind fit on all the training
        data: values ``(n_points,)``, probabilities ``(n_points, n_classes)`` or labels
        ``(n_points,)``. Reported as ``reference_loss`` and ``reference_ratio``.
    train_members, y_train : arrays, optional
        The members' predictions on the training rows, ``(members, n_train[, n_classes])``
        as ``members``, and the training targets; with ``counts`` they give the out-of-bag
        error and the prediction intervals (or class sets) for a new observation at the
        points (``intervals``, level 0.9, with their observed coverage of ``y``). Entries
        of a member on its in-bag rows are not used, but must be valid numbers. When they
        are not given and ``counts`` has ``n_points`` columns,
        ``members`` themselves are taken to be the training-row predictions (so ``y`` the
        training targets) and the out-of-bag error is computed from them.
    rng : int, numpy.random.Generator or None
        Seed of the random member orders of the size curve (SPEC 7).
    n_jobs : int, optional
        Worker threads; results do not depend on it.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    Diagnosis

    Notes
    -----
    Losses follow the members' kind: squared error for values, the multi-class Brier score
    for probabilities, the majority-vote error rate for labels. The residual correlation,
    the residual correlation needs one number per member and point: for probabilities it
    uses the probability each member gives the observed class (residual ``p(y) - 1``). The
    standard errors and the spread of probabilities are estimated for every class (arrays
    ``(n_points, n_classes)``); their readings summarise the predicted class's probability.
    For labels these sections are left out (None). A standard error, ρ or between figure
    that is not estimable with the members given is read out as "not estimable with M
    members; about N needed", never as a number. Each warning of the sections (e.g. too
    few members for steady standard errors, points without an out-of-bag member) is given
    once per call, attributed to the line that called `diagnose`.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(300, 3))
    >>> y = X @ [1.0, -2.0, 0.5] + rng.normal(size=300)
    >>> bag = bagwise.BagRegressor("linear", n_members=400, random_state=0).fit(X[:100], y[:100])
    >>> report = bagwise.diagnose(bag.member_predictions(X[100:]), y[100:],
    ...                           counts=bag.in_bag_)
    >>> report.decomposition.ensemble_loss < report.decomposition.member_loss
    True
    >>> sorted(report.summary())  # doctest: +NORMALIZE_WHITESPACE
    ['correlation', 'decomposition', 'ensemble', 'intervals', 'ordering', 'size_curve',
     'spread', 'uncertainty']
    """
    if isinstance(members, EnsembleArrays):
        return _diagnose_read(members, y, counts=counts, reference=reference,
                              train_members=train_members, y_train=y_train, seed=rng,
                              n_jobs=n_jobs, progress=progress)
    return _diagnose(members, y, counts=counts, reference=reference, train_members=train_members,
                     train_y=y_train, seed=rng, n_jobs=n_jobs, members_are_training=None,
                     progress=progress)


def _diagnose_read(read, y, *, counts, reference, train_members, y_train, seed, n_jobs,
                   progress=False):
    """`diagnose` of an `EnsembleArrays`: its members, counts and training-row predictions;
    ``y`` (and a ``y_train`` it lacks) as class labels of the model, read through
    ``read.class_codes``. Its members are never read as training-row predictions."""
    for name, value in (("counts", counts), ("train_members", train_members)):
        if value is not None:
            raise ValueError(f"`{name}`: comes from the ensemble read (`members` is an "
                             "EnsembleArrays); leave it out")
    if y_train is not None and read.y_train is not None:
        raise ValueError("`y_train`: comes from the ensemble read (`members` is an "
                         "EnsembleArrays, read with y_train); leave it out")
    if y_train is not None:
        y_train = _targets(y_train, read.classes, "y_train")
        if len(y_train) != read.n_rows:
            raise ValueError(f"`y_train`: has {len(y_train):,} values but the ensemble was fit "
                             f"on {read.n_rows:,} rows")
    else:
        y_train = read.y_train
    train = read.train_members
    if train is None or y_train is None:
        # The out-of-bag error needs both; without them that section is left out.
        train = y_train = None
    return _diagnose(read.members, read.class_codes(y), counts=read.counts, reference=reference,
                     train_members=train, train_y=y_train, seed=seed, n_jobs=n_jobs,
                     members_are_training=False, progress=progress)


def _diagnose(members, y, *, counts, reference, train_members, train_y, seed, n_jobs,
              members_are_training, member_count=None, group_size=0, progress=False):
    """`diagnose` (``train_y`` is its ``y_train``); ``members_are_training=False`` never
    reads ``members`` as training-row predictions (None: when ``counts`` has ``n_points``
    columns). Each warning of the
    sections is given once, at the caller's line; ``progress`` hears the sections done."""
    progress_iv(progress)
    with once_per_call(), progress_callback(progress, "diagnose", "section") as callback:
        (kind, members, y, counts, reference, train_members, train_y, seed,
         n_jobs) = _diagnose_iv(members, y, counts, reference, train_members, train_y, seed,
                                n_jobs)
        inputs = Inputs(kind=kind, members=members, y=y, counts=counts,
                        train_members=train_members, y_train=train_y, reference=reference,
                        seed=seed, n_jobs=n_jobs, members_are_training=members_are_training,
                        member_count=member_count, group_size=group_size)
        done: dict[str, Any] = {}
        for section in SECTIONS:
            done[section.key] = section.compute(inputs, done)
            if callback is not None:
                callback(len(done), len(SECTIONS))
    return Diagnosis(kind=kind, n_members=members.shape[0], n_points=members.shape[1],
                     _inputs=inputs, **done)


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class MembersNeeded(Result):
    """Every "members needed" figure of a diagnosis, side by side.

    The figures differ because each bounds a different quantity: the size curve bounds the
    ensemble's expected loss, the between/within split the variance of its prediction.

    Attributes
    ----------
    tolerance : float
        The relative tolerance every figure was computed at.
    sections : tuple of str
        The section that gives each row (a `Diagnosis` attribute).
    bounded : tuple of str
        What each row bounds, in words.
    members_needed : tuple of int or float
        The smallest ensemble size that brings it within ``tolerance`` of its
        infinite-ensemble limit (NaN where it cannot be estimated).
    basis : tuple of str
        The inequality each figure solves, and which result it reads.
    """

    tolerance: float
    sections: tuple
    bounded: tuple
    members_needed: tuple
    basis: tuple

    _title = "Members needed"

    def __len__(self) -> int:
        return len(self.sections)

    def __getitem__(self, section: str):
        """The members needed by the row of ``section`` (KeyError when it gives none)."""
        if section not in self.sections:
            raise KeyError(f"`section`: no members-needed figure for {section!r} (there are: "
                           f"{', '.join(self.sections) or 'none'})")
        return self.members_needed[self.sections.index(section)]

    def __contains__(self, section) -> bool:
        return section in self.sections

    def _rows(self):
        return [(bounded, f"{_count(members)}  ({basis})")
                for bounded, members, basis in zip(self.bounded, self.members_needed,
                                                   self.basis)]

    def _reading(self):
        return (f"each row is the smallest ensemble within {self.tolerance:.0%} of its own "
                "infinite-ensemble limit; they differ because they bound different things")

    def _text(self) -> str:
        """The three-column table of the text report."""
        header = ("what is bounded", "members", "basis")
        rows = [header] + [(bounded, _count(members), basis) for bounded, members, basis
                           in zip(self.bounded, self.members_needed, self.basis)]
        widths = [max(len(row[i]) for row in rows) for i in range(2)]
        lines = [f"Members needed (within {self.tolerance:.0%})"]
        lines += [f"  {a:<{widths[0]}}  {b:>{widths[1]}}  {c}" for a, b, c in rows]
        return "\n".join(lines)

    def _html(self) -> str:
        """The same table in HTML."""
        cells = "".join(
            f"<tr><td>{html.escape(bounded)}</td><td style='text-align:right'>"
            f"{html.escape(_count(members))}</td><td>{html.escape(basis)}</td></tr>"
            for bounded, members, basis in zip(self.bounded, self.members_needed, self.basis))
        return (f"<div class='bagwise-result'><strong>Members needed (within "
                f"{self.tolerance:.0%})</strong><table style='border-collapse:collapse'>"
                "<tr><th style='text-align:left'>what is bounded</th><th>members</th>"
                f"<th style='text-align:left'>basis</th></tr>{cells}</table></div>")

    def to_frame(self):
        """One row per figure: ``section``, ``bounded``, ``members_needed``, ``basis``."""
        import pandas as pd

        return pd.DataFrame({"section": list(self.sections), "bounded": list(self.bounded),
                             "members_needed": list(self.members_needed),
                             "basis": list(self.basis)})


def _count(value) -> str:
    if isinstance(value, float) and value != value:
        return "nan"
    return f"{value:,}"


def _with_section_fields(cls):
    """Make ``cls`` a frozen dataclass with one field per registered section (None when
    the section does not apply), documented from the section's ``doc``."""
    annotations = dict(cls.__dict__.get("__annotations__", {}))
    docs = []
    for section in SECTIONS:
        annotations[section.key] = "Any"
        setattr(cls, section.key, None)
        text = textwrap.fill(section.doc, width=80, initial_indent=" " * 8,
                             subsequent_indent=" " * 8)
        docs.append(f"    {section.key} : {section.result_type} or None\n{text}\n")
    annotations["_inputs"] = "Inputs | None"
    cls._inputs = dataclasses.field(default=None, repr=False)
    cls.__annotations__ = annotations
    cls.__doc__ = cls.__doc__.rstrip() + "\n" + "".join(docs)
    return dataclasses.dataclass(frozen=True, repr=False, eq=False)(cls)


@_with_section_fields
class Diagnosis(Result):
    """The bundled diagnostics of a bagged ensemble at a set of points.

    One attribute per section of `bagwise.sections.SECTIONS`; a section that does not
    apply to the members' kind or to the inputs given is None.

    Attributes
    ----------
    kind : str
        ``"values"``, ``"probabilities"`` or ``"labels"``: what the members predict.
    n_members, n_points : int
        Members, and points they were diagnosed at.
    """

    kind: str
    n_members: int
    n_points: int

    _title = "Diagnosis"

    def _present(self):
        """``(section, result)`` of every section that applies."""
        return [(section, getattr(self, section.key)) for section in SECTIONS
                if getattr(self, section.key) is not None]

    # -- numbers --------------------------------------------------------------------------
    @property
    def reference_loss(self) -> float | None:
        """``reference.reference_loss`` (None without ``reference``)."""
        return None if self.reference is None else self.reference.reference_loss

    @property
    def reference_ratio(self) -> float | None:
        """``reference.reference_ratio`` (None without ``reference``)."""
        return None if self.reference is None else self.reference.reference_ratio

    def verdict(self) -> str | None:
        """One line: does bagging help this learner (None without ``reference``)."""
        return None if self.reference is None else self.reference.verdict()

    def members_needed(self, tolerance: float = TOLERANCE) -> MembersNeeded:
        """Every "members needed" figure of the sections, as one small table.

        Each row says what it bounds, the smallest ensemble that brings it within
        ``tolerance`` (relative) of its infinite-ensemble limit, and the inequality it
        solves; NaN with one `BagwiseWarning` where a figure cannot be estimated.
        """
        tolerance = check_tolerance(tolerance)
        keys, bounded, members, basis = [], [], [], []
        with once_per_call():
            for section, result in self._present():
                for row in section.needed(result, tolerance):
                    keys.append(section.key)
                    bounded.append(row.bounded)
                    members.append(row.members_needed)
                    basis.append(row.basis)
        return MembersNeeded(tolerance=tolerance, sections=tuple(keys), bounded=tuple(bounded),
                             members_needed=tuple(members), basis=tuple(basis))

    def summary(self) -> dict:
        """The key numbers by section, as plain ints, floats and strings (NaN as None), ready
        for ``json.dumps``."""
        ensemble = {"kind": self.kind, "n_members": self.n_members, "n_points": self.n_points}
        present = self._present()
        for section, result in present:
            ensemble.update(section.ensemble(result))
        out = {"ensemble": ensemble}
        for section, result in present:
            out[section.key] = section.summary(result, self)
        return out

    def readings(self) -> list[str]:
        """One line in plain words per finding."""
        return [line for section, result in self._present()
                for line in section.readings(result, self)]

    # -- display --------------------------------------------------------------------------
    def _parts(self):
        """``(key, title, rows, note)`` of every section present."""
        return [(section.key, section.title, section.rows(result, self),
                 section.note(result, self)) for section, result in self._present()]

    def _head(self) -> str:
        return (f"Diagnosis ({self.kind}: {self.n_members:,} members x {self.n_points:,} "
                "points)")

    def _quiet_needed(self) -> MembersNeeded:
        """The members-needed table without warnings (`diagnose` has given them)."""
        return quiet(self.members_needed)

    def __repr__(self) -> str:
        blocks = [text_block(title, rows, note) for _, title, rows, note in self._parts()]
        needed = self._quiet_needed()
        if len(needed):
            blocks.append(needed._text())
        readings = "\n".join(f"  - {line}" for line in self.readings())
        return "\n\n".join([self._head(), *blocks, "Readings\n" + readings])

    def _repr_html_(self) -> str:
        def render():
            blocks = "".join(html_block(title, rows, note)
                             for _, title, rows, note in self._parts())
            needed = self._quiet_needed()
            if len(needed):
                blocks += needed._html()
            items = "".join(f"<li>{html.escape(line)}</li>" for line in self.readings())
            return (f"<div class='bagwise-diagnosis'><h4>{html.escape(self._head())}</h4>"
                    f"{blocks}<ul>{items}</ul></div>")

        return safe_html(self, render)

    def to_html(self, path=None, *, title=None, unit=None) -> str:
        """A self-contained HTML report: readings, key numbers, the members-needed table,
        every section's table and its figures, the cautions at its foot.

        Figures are drawn with `bagwise.plots` and embedded as PNG data URIs; the page
        fetches nothing (inline CSS, no scripts), so it reads offline. Without matplotlib
        the report has the tables and a note on installing ``bagwise[plots]``. The
        correlation heatmap is drawn for up to 300 members, the standard-error figures when
        the diagnosis was made by `diagnose` with counts (it keeps references to the arrays).

        Parameters
        ----------
        path : str or path-like, optional
            Also write the report there (UTF-8).
        title : str, optional
            Heading and page title (default "bagwise diagnosis").
        unit : str, optional
            Unit of the targets for the figure labels, e.g. ``"kg"``.

        Returns
        -------
        str
            The HTML document.

        Examples
        --------
        >>> import numpy as np, bagwise
        >>> rng = np.random.default_rng(0)
        >>> y = rng.normal(size=200)
        >>> members = y + rng.normal(size=(20, 200))
        >>> page = bagwise.diagnose(members, y).to_html()
        >>> page.startswith("<!DOCTYPE html>"), "Cautions" in page
        (True, True)
        """
        from .report import render

        page = render(self, title=title, unit=unit)
        if path is not None:
            with open(path, "w", encoding="utf-8") as handle:
                handle.write(page)
        return page

    def to_frame(self):
        """Tidy long table of `summary`: one row per number, columns section, quantity,
        value."""
        import pandas as pd

        rows = [(section, quantity, value) for section, numbers in self.summary().items()
                for quantity, value in numbers.items()]
        return pd.DataFrame(rows, columns=["section", "quantity", "value"])
