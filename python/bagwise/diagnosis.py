"""One report on a bagged ensemble: `diagnose` and its `Diagnosis` result.

`diagnose` bundles what the separate diagnostics say about the same member predictions:
the ambiguity decomposition (`decompose`), the ensemble-size curve and its finite-ensemble
law (`size_curve`), the residual correlation (`correlation`), the out-of-bag error
(`out_of_bag`) when predictions on the training rows are known, the standard errors of the
ensemble's predictions and the between/within split of the member variance
(`prediction_variance`, `spread`) when the in-bag counts are known, and the comparison with
a single model fit on all the data when its predictions are given. Every number in the
report is exactly what the standalone function returns for the same arrays.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ._display import html_block, safe_html, text_block
from ._validation import renamed_arguments, seed_value, n_jobs_value
from .decomposition import _members_array, _target, correlation, decompose, size_curve
from .diversity import diversity
from .out_of_bag import out_of_bag
from .uncertainty import CORRECTION_WARNING_SHARE, prediction_variance, spread

__all__ = ["Diagnosis", "diagnose"]

#: Ratios of ensemble to single-model loss below this read as "bagging helps"; from 0.97 up
#: the ensemble is within 3% of one model (common practice: a gain of a few per cent is
#: within the noise of one train/test split).
HELPS_BELOW = 0.97
#: Relative tolerance of the ``members_needed`` figures in the report.
TOLERANCE = 0.01


def _array(value, name):
    if isinstance(value, np.ndarray):
        return value
    try:
        return np.asarray(value)
    except (TypeError, ValueError) as err:
        raise TypeError(f"`{name}`: expected an array, got {type(value).__name__} ({err})") from None


def _diagnose_iv(members, y, counts, reference, train_members, train_y, seed, n_jobs):
    kind, members = _members_array(members)
    n_members, n_points = members.shape[:2]
    if n_members < 2:
        raise ValueError(f"`members`: a diagnosis needs at least 2 members, got {n_members}")
    y = _target(y, kind, n_points)
    if kind == "probabilities" and y.max() >= members.shape[2]:
        raise ValueError(f"`y`: label {int(y.max())} is outside 0..{members.shape[2] - 1}")
    if counts is not None:
        counts = _array(counts, "counts")
        if counts.dtype == np.bool_ or counts.dtype.kind not in "iu":
            raise TypeError(f"`counts`: expected integer in-bag counts, got dtype {counts.dtype}")
        if counts.ndim != 2 or counts.shape[0] != n_members:
            raise ValueError(f"`counts`: expected shape ({n_members}, n_train) (one row per "
                             f"member), got {counts.shape}")
    if (train_members is None) != (train_y is None):
        raise ValueError("`train_y`: give `train_members` and `train_y` together")
    if train_members is not None:
        if counts is None:
            raise ValueError("`counts`: `train_members` needs the in-bag counts they were fit with")
        train_members = _array(train_members, "train_members")
        if train_members.shape[:1] != (n_members,) or train_members.shape[1:2] != counts.shape[1:]:
            raise ValueError(f"`train_members`: expected ({n_members}, {counts.shape[1]}, ...) to "
                             f"match `counts`, got {train_members.shape}")
        train_kind, _ = _members_array(train_members, "train_members")
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
    return (kind, members, y, counts, reference, train_members, train_y, seed_value(seed),
            n_jobs_value(n_jobs))


def _reference_loss(kind, reference, y):
    """The single model's loss, in the loss the decomposition uses for ``kind``."""
    if kind == "values":
        return float(np.mean((reference - y) ** 2))
    if kind == "probabilities":
        onehot = np.zeros_like(reference)
        onehot[np.arange(len(y)), y] = 1.0
        return float(np.mean(np.sum((reference - onehot) ** 2, axis=1)))
    return float(np.mean(reference != y))


def diagnose(members, y, *, counts=None, reference=None, train_members=None, train_y=None,
             seed=0, n_jobs=None) -> Diagnosis:
    """Everything bagwise can say about an ensemble from its member predictions, in one call.

    Parameters
    ----------
    members : array
        The members' predictions at the points being diagnosed (usually a test set): float
        ``(members, n_points)`` values, float ``(members, n_points, n_classes)``
        probabilities or integer ``(members, n_points)`` labels; at least 2 members.
    y : array of shape (n_points,)
        Targets at the points (class indices for classification).
    counts : integer array of shape (members, n_train), optional
        The in-bag counts the members were fit with (e.g. ``bagwise.resample(...).counts`` or
        a fitted bag's ``in_bag_``). Enables the standard errors (``uncertainty``) and the
        between/within split (``spread``) and, with training-row predictions, the
        out-of-bag error.
    reference : array, optional
        Predictions at the points of one model of the same kind fit on all the training
        data: values ``(n_points,)``, probabilities ``(n_points, n_classes)`` or labels
        ``(n_points,)``. Reported as ``reference_loss`` and ``reference_ratio``.
    train_members, train_y : arrays, optional
        The members' predictions on the training rows, ``(members, n_train[, n_classes])``
        as ``members``, and the training targets; with ``counts`` they give the out-of-bag
        error. Entries of a member on its in-bag rows are not used, but must be valid
        numbers. When they are not given and ``counts`` has ``n_points`` columns,
        ``members`` themselves are taken to be the training-row predictions (so ``y`` the
        training targets) and the out-of-bag error is computed from them.
    seed : int
        Seed of the random member orders of the size curve.
    n_jobs : int, optional
        Worker threads; results do not depend on it.

    Returns
    -------
    Diagnosis

    Notes
    -----
    Losses follow the members' kind: squared error for values, the multi-class Brier score
    for probabilities, the majority-vote error rate for labels. The residual correlation,
    the standard errors and the spread need one number per member and point: for
    probabilities they use the probability of the last class (the positive class of a
    binary problem) against the indicator ``y == n_classes - 1``; for labels they are left
    out (None). Warnings of the parts (e.g. too few members for the bias correction of the
    standard errors, points without an out-of-bag member) are passed on as they are.

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(300, 3))
    >>> y = X @ [1.0, -2.0, 0.5] + rng.normal(size=300)
    >>> bag = bagwise.RegressionBag("linear", members=400, seed=0).fit(X[:100], y[:100])
    >>> report = bagwise.diagnose(bag.member_predictions(X[100:]), y[100:],
    ...                           counts=bag.in_bag_)
    >>> report.decomposition.ensemble_loss < report.decomposition.member_loss
    True
    >>> sorted(report.summary())
    ['correlation', 'decomposition', 'ensemble', 'size_curve', 'spread', 'uncertainty']
    """
    return _diagnose(members, y, counts=counts, reference=reference, train_members=train_members,
                     train_y=train_y, seed=seed, n_jobs=n_jobs, members_are_training=None)


def _diagnose(members, y, *, counts, reference, train_members, train_y, seed, n_jobs,
              members_are_training):
    """`diagnose`; ``members_are_training=False`` never reads ``members`` as training-row
    predictions (None: when ``counts`` has ``n_points`` columns)."""
    (kind, members, y, counts, reference, train_members, train_y, seed,
     n_jobs) = _diagnose_iv(members, y, counts, reference, train_members, train_y, seed,
                             n_jobs)
    decomposition = decompose(members, y, n_jobs=n_jobs)
    curve = size_curve(members, y, seed=seed, n_jobs=n_jobs)
    if kind == "labels":
        one, target = None, None
    elif kind == "probabilities":
        last = members.shape[2] - 1
        one, target = members[:, :, last], (y == last).astype(np.float64)
    else:
        one, target = members, y
    residuals = correlation(one, target, n_jobs=n_jobs) if one is not None else None
    oob = None
    if counts is not None:
        if train_members is not None:
            try:
                oob = out_of_bag(train_members, counts, train_y, n_jobs=n_jobs)
            except (ValueError, TypeError) as error:
                names = {"members": "train_members", "y": "train_y"}
                raise renamed_arguments(error, names) from None
        elif members_are_training is not False and counts.shape[1] == members.shape[1]:
            oob = out_of_bag(members, counts, y, n_jobs=n_jobs)
    uncertainty = between_within = None
    if counts is not None and one is not None:
        uncertainty = prediction_variance(one, counts, method="ij", corrected=True,
                                          n_jobs=n_jobs)
        between_within = spread(one, counts, n_jobs=n_jobs)
    reference_loss = reference_ratio = None
    if reference is not None:
        reference_loss = _reference_loss(kind, reference, y)
        if reference_loss > 0:
            reference_ratio = decomposition.ensemble_loss / reference_loss
        else:
            warnings.warn("`reference`: the single model's loss is 0, so the ratio is NaN",
                          RuntimeWarning, stacklevel=3)
            reference_ratio = math.nan
    members_diversity = diversity(members, y, n_jobs=n_jobs) if kind != "values" else None
    result = Diagnosis(kind=kind, decomposition=decomposition, size_curve=curve,
                       correlation=residuals, out_of_bag=oob, uncertainty=uncertainty,
                       spread=between_within, reference_loss=reference_loss,
                       reference_ratio=reference_ratio, diversity=members_diversity)
    if one is not None:
        # kept (references, not copies) for the figures of `to_html`
        result._points = (one, target)
    return result


def _number(value):
    """A JSON-friendly number: Python int/float, NaN as None."""
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    value = float(value)
    return None if math.isnan(value) or math.isinf(value) else value


def _quiet(call):
    """Call without the warnings a standalone result already gave when it was built."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return call()


class Diagnosis:
    """The bundled diagnostics of a bagged ensemble at a set of points.

    Attributes
    ----------
    kind : str
        ``"values"``, ``"probabilities"`` or ``"labels"``: what the members predict.
    decomposition : Decomposition
        `decompose` of the members at the points: ensemble loss, mean member loss,
        ambiguity (Krogh & Vedelsby 1995) and relative gain.
    size_curve : SizeCurve
        `size_curve` of the members: loss of the first-k-member ensemble, the spread ``W``,
        the infinite-ensemble loss and ``members_needed``.
    correlation : Correlation or None
        `correlation` of the residuals (values; last-class probabilities); None for labels.
    out_of_bag : OutOfBag or None
        `out_of_bag` on the training rows; None without counts and training predictions.
    uncertainty : PredictionVariance or None
        `prediction_variance` (infinitesimal jackknife, bias-corrected) of the ensemble at
        the points; None without counts or for labels.
    spread : Spread or None
        `spread` (between/within split, rho); None without counts or for labels.
    diversity : Diversity or None
        `diversity` of the members' class predictions (Kuncheva & Whitaker 2003): how
        differently they err, and which pairs are redundant; None for values.
    reference_loss : float or None
        Loss of the single model given as ``reference`` (same loss as the decomposition).
    reference_ratio : float or None
        ``decomposition.ensemble_loss / reference_loss``: below 1 the ensemble beats one
        model; NaN (with a warning) when the reference loss is 0.
    """

    def __init__(self, *, kind, decomposition, size_curve, correlation, out_of_bag,
                 uncertainty, spread, reference_loss, reference_ratio, diversity=None):
        self.kind = kind
        self.decomposition = decomposition
        self.size_curve = size_curve
        self.correlation = correlation
        self.out_of_bag = out_of_bag
        self.uncertainty = uncertainty
        self.spread = spread
        self.reference_loss = reference_loss
        self.reference_ratio = reference_ratio
        self.diversity = diversity
        # (members, targets) as the correlation and standard errors used them, set by
        # `diagnose`; the report draws the correlation heatmap and error figures from them
        self._points = None

    # -- numbers --------------------------------------------------------------------------
    @property
    def members_needed(self):
        """Members for the size-curve excess ``W/k`` to fall to 1% of the infinite-ensemble
        loss (None for error rates; NaN when it cannot)."""
        if self.size_curve.spread is None:
            return None
        return _quiet(lambda: self.size_curve.members_needed(TOLERANCE))

    def verdict(self) -> str | None:
        """One line: does bagging help this learner (None without ``reference``)."""
        ratio = self.reference_ratio
        if ratio is None:
            return None
        if math.isnan(ratio):
            return "no verdict: the single model's loss is 0"
        if ratio < HELPS_BELOW:
            return (f"bagging helps this learner: the ensemble's loss is {ratio:.0%} of a "
                    "single model's")
        return (f"bagging does not help this learner: the ensemble's loss is {ratio:.0%} of a "
                "single model's")

    def summary(self) -> dict:
        """The key numbers by section, as plain ints, floats and strings (NaN as None), ready
        for ``json.dumps``."""
        d = self.decomposition
        out = {
            "ensemble": {"kind": self.kind, "members": d.members, "points": d.n_points,
                         "loss": d.loss},
            "decomposition": {
                "ensemble_loss": _number(d.ensemble_loss),
                "member_loss": _number(d.member_loss),
                "ambiguity": _number(d.ambiguity),
                "vote_gain": _number(d.vote_gain),
                "relative_gain": _number(d.relative_gain),
            },
        }
        c = self.size_curve
        curve = {"full_loss": _number(c.full_loss), "loss_one_member": _number(c.curve[0])
                 if c.sizes[0] == 1 else None}
        if c.spread is not None:
            curve.update(spread=_number(c.spread), infinite_loss=_number(c.infinite_loss),
                         members_needed=_number(self.members_needed))
        out["size_curve"] = curve
        if self.correlation is not None:
            r = self.correlation
            out["correlation"] = {"mean_residual_variance": _number(r.mean_variance),
                                  "mean_correlation": _number(r.mean_correlation)}
        if self.out_of_bag is not None:
            o = self.out_of_bag
            out["out_of_bag"] = {"metric": o.metric, "error": _number(o.error),
                                 "points": o.n_points,
                                 "points_without_out_of_bag": o.n_without_out_of_bag}
        if self.uncertainty is not None:
            u = self.uncertainty
            share = u.correction_share
            out["uncertainty"] = {
                "median_std_error": _number(np.median(u.std_error)),
                "share_clipped": _number(u.n_clipped / len(u.variance)),
                "median_correction_share": _number(np.nanmedian(share))
                if np.isfinite(share).any() else None,
            }
        if self.spread is not None:
            s = self.spread
            out["spread"] = {"between": _number(s.mean_between), "within": _number(s.mean_within),
                             "rho": _number(s.pooled_rho),
                             "members_needed": _number(s.members_needed(TOLERANCE))}
        if self.diversity is not None:
            v = self.diversity
            (a, b, apart), = v.redundant_pairs(top=1)
            out["diversity"] = {"mean_disagreement": _number(v.mean_disagreement),
                                "mean_double_fault": _number(v.mean_double_fault),
                                "mean_yule_q": _number(v.mean_yule_q),
                                "kohavi_wolpert": _number(v.kohavi_wolpert),
                                "interrater_kappa": _number(v.interrater_kappa),
                                "closest_pair": [a, b], "closest_pair_disagreement": _number(apart)}
        if self.reference_ratio is not None:
            out["reference"] = {"reference_loss": _number(self.reference_loss),
                                "ratio": _number(self.reference_ratio)}
        return out

    def readings(self) -> list[str]:
        """One line in plain words per finding."""
        d, lines = self.decomposition, []
        if d.identity:
            lines.append(f"averaging removed {d.relative_gain:.0%} of the mean member loss "
                         f"({d.member_loss:.4g} -> {d.ensemble_loss:.4g})")
        else:
            lines.append(f"the majority vote errs on {d.ensemble_loss:.1%} of the points, the "
                         f"average member on {d.member_loss:.1%}")
        verdict = self.verdict()
        if verdict:
            lines.append(verdict)
        needed = self.members_needed
        if needed is not None:
            if isinstance(needed, float) and math.isnan(needed):
                lines.append("no ensemble size comes within 1% of the infinite-ensemble loss "
                             "(it is estimated at or below 0)")
            else:
                lines.append(f"{needed} members reach 1% of the infinite-ensemble loss "
                             f"({self.size_curve.infinite_loss:.4g}); this ensemble has "
                             f"{d.members}")
        if self.correlation is not None and not math.isnan(self.correlation.mean_correlation):
            lines.append(f"the members' errors correlate at {self.correlation.mean_correlation:.2f} "
                         "on average")
        if self.out_of_bag is not None:
            o = self.out_of_bag
            lines.append(f"out-of-bag {o.metric.replace('_', ' ')} {o.error:.4g} on the "
                         f"{o.n_points - o.n_without_out_of_bag:,} training rows, an estimate of "
                         "the error on new data")
        if self.uncertainty is not None:
            u = self.uncertainty
            line = (f"a typical prediction is uncertain by ± {np.median(u.std_error):.3g} "
                    "(one standard error, infinitesimal jackknife)")
            share = self.summary()["uncertainty"]["median_correction_share"]
            if share is not None and share > CORRECTION_WARNING_SHARE:
                line += (f"; rough: the bias correction is {share:.0%} of the raw estimate at "
                         "the median point, more members would steady it")
            lines.append(line)
        if self.spread is not None:
            s = self.spread
            needed = s.members_needed(TOLERANCE)
            if isinstance(needed, float) and math.isnan(needed):
                lines.append("the members share none of their variance through the training "
                             "data (between part 0), so no ensemble size is needed for it")
            else:
                lines.append(f"members share {s.pooled_rho:.0%} of their variance through the "
                             f"training data (rho); {needed} members bring the rest within 1% "
                             "of it")
        if self.diversity is not None:
            v = self.diversity
            lines.append(v._reading())
            (a, b, apart), = v.redundant_pairs(top=1)
            lines.append(f"the most alike pair, members {a} and {b}, disagree on {apart:.1%} of "
                         "the points" + ("; one of them adds nothing here" if apart == 0 else ""))
        return lines

    # -- display --------------------------------------------------------------------------
    def _parts(self):
        """``(attribute, title, rows, reading)`` of every section present."""
        titles = [("decomposition", "Ambiguity decomposition"), ("size_curve", "Ensemble size"),
                  ("correlation", "Residual correlation"), ("out_of_bag", "Out of bag"),
                  ("uncertainty", "Prediction uncertainty"), ("spread", "Between / within"),
                  ("diversity", "Diversity")]
        parts = []
        for attribute, title in titles:
            part = getattr(self, attribute)
            if part is not None:
                parts.append((attribute, title, part._rows(), part._reading()))
        if self.reference_ratio is not None:
            parts.append(("reference", "Single model", [
                ("reference loss", f"{self.reference_loss:.6g}"),
                ("ensemble / reference", f"{self.reference_ratio:.4g}")], self.verdict()))
        return parts

    def _sections(self):
        return [(title, rows, reading) for _, title, rows, reading in self._parts()]

    def __repr__(self) -> str:
        d = self.decomposition
        head = f"Diagnosis ({self.kind}: {d.members:,} members x {d.n_points:,} points)"
        blocks = [text_block(title, rows, reading) for title, rows, reading in self._sections()]
        readings = "\n".join(f"  - {line}" for line in self.readings())
        return "\n\n".join([head, *blocks, "Readings\n" + readings])

    def _repr_html_(self) -> str:
        def render():
            d = self.decomposition
            blocks = "".join(html_block(title, rows, reading)
                             for title, rows, reading in self._sections())
            items = "".join(f"<li>{_escape(line)}</li>" for line in self.readings())
            return (f"<div class='bagwise-diagnosis'><h4>Diagnosis ({_escape(self.kind)}: "
                    f"{d.members:,} members x {d.n_points:,} points)</h4>{blocks}"
                    f"<ul>{items}</ul></div>")

        return safe_html(self, render)

    def to_html(self, path=None, *, title=None, unit=None) -> str:
        """A self-contained HTML report: readings, key numbers, every section's table and
        its figures, the cautions at its foot.

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


def _escape(text: str) -> str:
    import html

    return html.escape(text)
