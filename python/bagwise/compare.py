"""Does bagging help this learner? The ensemble against one model of the same learner,
without a hold-out set: `compare_learners`, the estimators' ``verdict`` and their results
`Verdict` and `LearnerComparison`.

For every training row the ensemble's **out-of-bag** loss (the members that did not see
the row, Breiman 1996) is paired with the **K-fold cross-validated** loss of the single
learner fit on all rows (same learner, same settings: a native learner as a bag of one
member with ``scheme="none"``, a wrapped estimator as a `sklearn.base.clone`). The ratio
of the two mean losses gets a confidence interval from the paired per-row losses by the
delta method on the log scale, and the interval decides the verdict in three words:
``"helps"`` (upper end below 1), ``"hurts"`` (lower end above 1) or ``"no clear
difference"``.
"""

from __future__ import annotations

import dataclasses
import html
import math
import numbers
from statistics import NormalDist

import numpy as np

from ._display import fmt, safe_html
from ._progress import progress_callback, progress_iv, stages
from ._results import Result, check_tolerance, members_for, not_estimable
from ._warnings import once_per_call, warn

__all__ = ["LearnerComparison", "Verdict", "compare_learners"]

#: The losses computed for each task, the verdict's default first. Regression: squared
#: error. Classification: the error rate (the loss Breiman 1996 judged bagged classifiers
#: by). The Brier score and log loss are reported beside it, labelled, but are not the
#: default: a single full-depth tree predicts probabilities of 0 and 1 only, so its Brier
#: score is twice its error rate and its log loss is set by the 1e-15 floor; against those
#: the ensemble gains merely by having probabilities at all, which overstates what bagging
#: does to the predicted classes. Choose ``loss="brier_score"`` when the probabilities
#: themselves are used.
LOSSES = {"regression": ("squared_error", "absolute_error"),
          "classification": ("error_rate", "brier_score", "log_loss")}
LOG_LOSS_FLOOR = 1e-15
#: The three words of a verdict, and the word when the interval cannot be computed.
HELPS, HURTS, NO_CLEAR_DIFFERENCE, NOT_ESTIMABLE = (
    "helps", "hurts", "no clear difference", "not estimable")
#: The loss the ambiguity decomposition is exact for, per task (Krogh & Vedelsby 1995).
IDENTITY_LOSS = {"regression": "squared_error", "classification": "brier_score"}


# -- the statistics ---------------------------------------------------------------------

def ratio_interval(ensemble, reference, level):
    """``(ratio, lower, upper)`` of ``mean(ensemble) / mean(reference)`` from paired
    per-row losses, by the delta method on the log scale.

    With ``a_i``, ``b_i`` the two losses of row i (i = 1..n), ``ā``, ``b̄`` their means
    and ``R = ā / b̄``, a first-order expansion of ``log R = log ā − log b̄`` around the
    expected means gives
    ``log R − log R_0 ≈ (1/n) Σ_i u_i`` with ``u_i = a_i/E a − b_i/E b``, so
    ``se(log R) = sd(u) / √n``, estimated with ``u_i = a_i/ā − b_i/b̄`` (ddof 1). The
    interval is ``R · exp(±z se)``, z the normal quantile of ``(1 + level)/2``. The pairing
    enters through ``sd(u)``: a row that is hard for both models moves both terms alike.
    NaN when either mean is 0 or fewer than 2 rows remain.
    """
    a = np.asarray(ensemble, dtype=np.float64)
    b = np.asarray(reference, dtype=np.float64)
    n = a.shape[0]
    mean_a = float(a.mean()) if n else math.nan
    mean_b = float(b.mean()) if n else math.nan
    if n < 2 or not (mean_a > 0 and mean_b > 0):
        ratio = mean_a / mean_b if n and mean_b > 0 else math.nan
        return ratio, math.nan, math.nan
    ratio = mean_a / mean_b
    u = a / mean_a - b / mean_b
    se = float(np.std(u, ddof=1)) / math.sqrt(n)
    z = NormalDist().inv_cdf(0.5 + level / 2)
    return ratio, ratio * math.exp(-z * se), ratio * math.exp(z * se)


#: A change of the loss smaller than this share is no difference a user would act on: an
#: interval inside 1 ± this reads "no clear difference" even when it excludes 1 (common
#: practice: a region of practical equivalence around no change).
PRACTICAL_MARGIN = 0.01


def verdict_word(lower, upper) -> str:
    """The three words an interval of the ratio decides (NaN ends: "not estimable"):
    "helps" when it lies below 1 and reaches below 1 − `PRACTICAL_MARGIN`, "hurts" when it
    lies above 1 and reaches above 1 + `PRACTICAL_MARGIN`, else "no clear difference"."""
    if not (math.isfinite(lower) and math.isfinite(upper)):
        return NOT_ESTIMABLE
    if upper < 1 and lower < 1 - PRACTICAL_MARGIN:
        return HELPS
    if lower > 1 and upper > 1 + PRACTICAL_MARGIN:
        return HURTS
    return NO_CLEAR_DIFFERENCE


def per_row_losses(task, y, prediction, probabilities=None) -> dict:
    """Every loss of ``task`` row by row: ``prediction`` the values (regression), or
    ``probabilities`` ``(n, n_classes)`` with ``prediction`` the class index (ties to the
    lowest) and ``y`` class codes (classification)."""
    if task == "regression":
        residual = np.asarray(prediction, dtype=np.float64) - y
        return {"squared_error": residual ** 2, "absolute_error": np.abs(residual)}
    rows = np.arange(len(y))
    onehot = np.zeros_like(probabilities)
    onehot[rows, y] = 1.0
    return {"error_rate": (np.asarray(prediction) != y).astype(np.float64),
            "brier_score": np.sum((probabilities - onehot) ** 2, axis=1),
            "log_loss": -np.log(np.maximum(probabilities[rows, y], LOG_LOSS_FLOOR))}


def _out_of_bag_decomposition(task, members, counts, y, prediction, probabilities):
    """The ambiguity decomposition of each covered row's out-of-bag ensemble (Krogh &
    Vedelsby 1995): the members with count 0 at the row, their mean, and per row
    ``(f − y)² = mean_b (t_b − y)² − mean_b (t_b − f)²`` (summed over classes for
    probabilities); also the across-member variance with ddof 1, the ``W`` of the size law.
    """
    from .decomposition import Decomposition

    out = counts == 0
    n_out = out.sum(axis=0)
    if task == "regression":
        target, centre = y[None, :], prediction[None, :]
        member = np.where(out, (members - target) ** 2, 0.0).sum(axis=0) / n_out
        spread = np.where(out, (members - centre) ** 2, 0.0).sum(axis=0) / n_out
        ensemble = (prediction - y) ** 2
    else:
        onehot = np.zeros(probabilities.shape)
        onehot[np.arange(len(y)), y] = 1.0
        mask = out[:, :, None]
        member = np.where(mask, (members - onehot) ** 2, 0.0).sum(axis=(0, 2)) / n_out
        spread = np.where(mask, (members - probabilities) ** 2, 0.0).sum(axis=(0, 2)) / n_out
        ensemble = np.sum((probabilities - onehot) ** 2, axis=1)
    member_loss = float(member.mean())
    ambiguity = float(spread.mean())
    decomposition = Decomposition(
        loss=IDENTITY_LOSS[task], identity=True, n_members=int(counts.shape[0]),
        n_points=len(y), member_weights=None, ensemble_loss=float(ensemble.mean()),
        member_loss=member_loss, ambiguity=ambiguity, vote_gain=None,
        relative_gain=ambiguity / member_loss if member_loss > 0 else math.nan,
        ensemble_loss_per_point=ensemble, member_loss_per_point=member,
        ambiguity_per_point=spread, vote_gain_per_point=None)
    with np.errstate(divide="ignore", invalid="ignore"):
        within = np.where(n_out > 1, spread * n_out / (n_out - 1), np.nan)
    return decomposition, within


# -- the verdict of one fitted bag ------------------------------------------------------

#: The default number of folds: leave-one-out up to this many rows, then this many folds.
#: The out-of-bag prediction of a row comes from members fit on resamples of the other
#: n - 1 rows, so the single model should learn from nearly as many: with 5 or 10 folds
#: it learns from 80% or 90% of the rows and its loss is too high, which biases the ratio
#: toward "helps" (measured in tests/bench/verdict_coverage.py: least squares on Friedman
#: #1 with 100 rows, coverage of the expected-loss ratio at 95% 0.730 at 5 folds, 0.925
#: leave-one-out).
MAX_DEFAULT_FOLDS = 100


def _folds_iv(folds, n_rows):
    if folds is None:
        return min(n_rows, MAX_DEFAULT_FOLDS)
    if isinstance(folds, bool):
        raise TypeError("`folds`: expected an integer >= 2 or a scikit-learn splitter, got bool")
    if isinstance(folds, numbers.Integral):
        if not 2 <= folds <= n_rows:
            raise ValueError(f"`folds`: must lie in 2..{n_rows} (the training rows), got {folds}")
        return int(folds)
    if isinstance(folds, (str, bytes)) or not callable(getattr(folds, "split", None)):
        raise TypeError("`folds`: expected an integer >= 2 or an object with split(X, y) "
                        f"such as sklearn.model_selection.KFold, got {type(folds).__name__}")
    return folds


def _level_iv(level):
    if isinstance(level, bool) or not isinstance(level, numbers.Real):
        raise TypeError(f"`level`: expected a number in (0, 1), got {type(level).__name__}")
    if not 0 < level < 1:
        raise ValueError(f"`level`: must lie in (0, 1), got {level!r}")
    return float(level)


def _loss_iv(loss, task):
    allowed = LOSSES[task]
    if loss is None:
        return allowed[0]
    if loss not in allowed:
        raise ValueError(f"`loss`: for {task} expected one of {allowed}, got {loss!r}")
    return loss


def _splitter(folds, seed):
    from sklearn.model_selection import KFold

    if not isinstance(folds, int):
        return folds
    state = int(np.random.SeedSequence(seed).generate_state(1)[0] & 0x7FFFFFFF)
    return KFold(n_splits=folds, shuffle=True, random_state=state)


def single_model(bag):
    """An unfitted single model of ``bag``'s learner and settings: a wrapped estimator's
    `sklearn.base.clone`; for a native learner a bag of one member that sees every row
    once (``n_members=1, scheme="none"``), seeded like ``bag``."""
    from sklearn.base import clone

    if not isinstance(bag.learner, str):
        return clone(bag.learner)
    return clone(bag).set_params(n_members=1, scheme="none", fraction=1.0, progress=False,
                                 random_state=bag.seed_)


def single_predictions(bag, model, X):
    """``model``'s values at ``X`` (regression) or its class probabilities in the columns
    of ``bag.classes_`` (classification; a class the model never saw gets 0)."""
    if not bag._classification:
        return np.asarray(model.predict(X), dtype=np.float64).reshape(-1)
    proba = np.asarray(model.predict_proba(X), dtype=np.float64)
    out = np.zeros((proba.shape[0], len(bag.classes_)))
    out[:, np.searchsorted(bag.classes_, model.classes_)] = proba
    return out


def _cross_validated(bag, X, target, folds):
    """Each row's prediction by the single model fit on the other folds."""
    import warnings

    from sklearn.utils import _safe_indexing

    from .ensemble import _MEMBER_FEATURE_NAMES

    classification = bag._classification
    fit_y = bag.classes_[target] if classification else target
    n = len(target)
    shape = (n, len(bag.classes_)) if classification else (n,)
    predictions = np.full(shape, np.nan)
    seen = np.zeros(n, dtype=np.int64)
    splitter = _splitter(folds, bag.seed_)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", _MEMBER_FEATURE_NAMES, UserWarning)
        for train, test in splitter.split(X, fit_y):
            train, test = np.asarray(train), np.asarray(test)
            model = single_model(bag)
            model.fit(_safe_indexing(X, train), fit_y[train])
            predictions[test] = single_predictions(bag, model, _safe_indexing(X, test))
            seen[test] += 1
    if np.any(seen != 1):
        raise ValueError(f"`folds`: every row must be held out exactly once; "
                         f"{int(np.sum(seen != 1))} of {n} rows are not")
    return predictions


def bag_verdict(bag, X=None, y=None, *, folds=None, level=0.95, loss=None) -> Verdict:
    """`_Bag.verdict` (see its docstring)."""
    from sklearn.utils.validation import check_is_fitted

    from .out_of_bag import out_of_bag

    check_is_fitted(bag)
    task = "classification" if bag._classification else "regression"
    loss = _loss_iv(loss, task)
    level = _level_iv(level)
    if (X is None) != (y is None):
        raise ValueError("`y`: give the training rows `X` and targets `y` together, or neither")
    if X is None:
        if "_train_X" not in bag.__dict__:
            raise ValueError("`X`: give the training rows (a loaded ensemble does not keep them)")
        X = bag._train_X
    else:
        X = bag._check_X(X)
    counts = bag._integer_counts("the verdict")
    folds = _folds_iv(folds, counts.shape[1])
    with once_per_call():
        members, target = bag._training_members(X, y)
        oob = out_of_bag(members, counts, target, n_jobs=bag.n_jobs)
        single = _cross_validated(bag, X, target, folds)
        covered = oob.n_out_of_bag > 0
        classification_task = task == "classification"
        if classification_task:
            ensemble_losses = per_row_losses(task, target[covered], oob.prediction[covered],
                                             oob.probabilities[covered])
            single_losses = per_row_losses(task, target[covered],
                                           np.argmax(single[covered], axis=1), single[covered])
        else:
            ensemble_losses = per_row_losses(task, target[covered], oob.prediction[covered])
            single_losses = per_row_losses(task, target[covered], single[covered])
        decomposition, within = _out_of_bag_decomposition(
            task, members[:, covered], counts[:, covered], target[covered],
            oob.prediction[covered] if not classification_task else None,
            oob.probabilities[covered] if classification_task else None)
        # Each row's out-of-bag ensemble has only n_i (about M/e) members; for the losses
        # with an exact size law (squared error, Brier) move it to the whole ensemble of M:
        # E loss(M) = E loss(n_i) - W_i (1/n_i - 1/M) (the finite-ensemble law; rows with
        # fewer than 2 out-of-bag members keep their loss).
        n_out = oob.n_out_of_bag[covered]
        shift = np.where(np.isfinite(within), within, 0.0) * (1 / n_out - 1 / counts.shape[0])
        identity_loss = IDENTITY_LOSS[task]
        ensemble_losses[identity_loss] = ensemble_losses[identity_loss] - shift
        by_loss = {}
        for name in LOSSES[task]:
            ratio, lower, upper = ratio_interval(ensemble_losses[name], single_losses[name],
                                                 level)
            by_loss[name] = (float(ensemble_losses[name].mean()) if covered.any() else math.nan,
                             float(single_losses[name].mean()) if covered.any() else math.nan,
                             ratio, lower, upper, verdict_word(lower, upper))
        ensemble_loss, reference_loss, ratio, lower, upper, word = by_loss[loss]
        if word == NOT_ESTIMABLE:
            warn(f"`loss`: the ratio of {loss} has no interval ({int(covered.sum())} rows "
                 "with an out-of-bag member; a mean loss of 0 has no ratio on the log scale), "
                 "so the verdict is 'not estimable'")
    return Verdict(
        task=task, loss=loss, level=level, folds=_folds_count(folds, X),
        n_members=int(counts.shape[0]), n_rows=int(counts.shape[1]),
        n_rows_used=int(covered.sum()), n_without_out_of_bag=int((~covered).sum()),
        ensemble_loss=ensemble_loss, reference_loss=reference_loss, reference_ratio=ratio,
        ratio_lower=lower, ratio_upper=upper, verdict=word, decomposition=decomposition,
        ensemble_loss_per_point=ensemble_losses[loss],
        reference_loss_per_point=single_losses[loss], _by_loss=by_loss,
        _within=within, _n_out_of_bag=oob.n_out_of_bag[covered])


def _folds_count(folds, X):
    if isinstance(folds, int):
        return folds
    try:
        return int(folds.get_n_splits(X))
    except Exception:  # noqa: BLE001 - a splitter without get_n_splits: count unknown
        return -1


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Verdict(Result):
    """Does bagging help this learner: the ensemble's out-of-bag loss against the
    cross-validated loss of a single model of the same learner, on the same training rows.

    Attributes
    ----------
    task : str
        ``"regression"`` or ``"classification"``.
    loss : str
        The loss the verdict is decided on (``loss=``).
    level : float
        Nominal coverage of the interval of the ratio.
    folds : int
        Folds of the cross-validation of the single model (-1 when a splitter object did
        not say).
    n_members, n_rows : int
        Members of the ensemble; training rows.
    n_rows_used, n_without_out_of_bag : int
        Rows with at least one out-of-bag member (the rows compared); rows without one,
        left out of both losses.
    ensemble_loss : float
        The ensemble's out-of-bag loss, mean over the rows used. A row's out-of-bag
        ensemble has only the ``n_i`` members (about ``n_members / e``) that did not see
        it; for squared error and the Brier score each row's loss is moved to the whole
        ensemble by the finite-ensemble law, ``loss_i − W_i (1/n_i − 1/n_members)`` with
        ``W_i`` the across-member variance of its out-of-bag members (ddof 1), so it
        estimates the loss of the ensemble of ``n_members``; the other losses (absolute
        error, error rate, log loss) follow no exact size law and describe an ensemble of
        about ``n_members / e``.
    reference_loss : float
        The single model's K-fold cross-validated loss, mean over the same rows.
    reference_ratio : float
        ``ensemble_loss / reference_loss``: below 1 the ensemble does better.
    ratio_lower, ratio_upper : float
        The ends of the interval of the ratio at ``level`` (NaN when not estimable).
    verdict : str
        ``"helps"`` (``ratio_upper < 1``), ``"hurts"`` (``ratio_lower > 1``), ``"no clear
        difference"``, or ``"not estimable"`` (with a `BagwiseWarning`) when a mean loss is
        0 or fewer than 2 rows are compared.
    decomposition : Decomposition
        The ambiguity decomposition of the out-of-bag ensembles of the rows used (Krogh &
        Vedelsby 1995), in squared error (regression) or Brier score (classification):
        ``ambiguity`` is what averaging removed from the mean member loss.
    ensemble_loss_per_point, reference_loss_per_point : ndarray of float64, shape (n_rows_used,)
        The two losses row by row (``loss``), the pairs the interval is computed from.
    """

    _title = "Verdict"

    task: str
    loss: str
    level: float
    folds: int
    n_members: int
    n_rows: int
    n_rows_used: int
    n_without_out_of_bag: int
    ensemble_loss: float
    reference_loss: float
    reference_ratio: float
    ratio_lower: float
    ratio_upper: float
    verdict: str
    decomposition: object
    ensemble_loss_per_point: np.ndarray
    reference_loss_per_point: np.ndarray
    _by_loss: dict = dataclasses.field(repr=False)
    _within: np.ndarray = dataclasses.field(repr=False)
    _n_out_of_bag: np.ndarray = dataclasses.field(repr=False)

    def members_needed(self, tolerance: float = 0.01):
        """Smallest ensemble size ``k`` whose expected loss comes within ``tolerance``
        (relative) of an infinite ensemble's, by the size law ``W/k <= tolerance ·
        infinite_loss`` in the decomposition's loss, with ``W`` the mean over the rows used
        of the across-member variance of each row's out-of-bag members (ddof 1) and
        ``infinite_loss`` the mean of ``(f_i − y_i)² − W_i / n_i`` (``n_i`` the row's
        out-of-bag members). NaN with one `BagwiseWarning` when it cannot be estimated."""
        tolerance = check_tolerance(tolerance)
        within = self._within
        usable = np.isfinite(within)
        if not usable.any():
            return not_estimable("no row has 2 out-of-bag members, so the member variance "
                                 "is unknown")
        mean_within = float(within[usable].mean())
        if mean_within == 0:
            return 1
        # each row's own law: E (f_n - y)^2 = (f_inf - y)^2 + W_i / n_i
        limit = float(np.mean(self.decomposition.ensemble_loss_per_point[usable]
                              - within[usable] / self._n_out_of_bag[usable]))
        return members_for(mean_within, limit, tolerance,
                           "the infinite-ensemble loss is not positive")

    def _rows(self):
        rows = [("loss", self.loss.replace("_", " ")),
                ("rows compared", f"{self.n_rows_used:,} of {self.n_rows:,}"
                 + (f" ({self.n_without_out_of_bag:,} without an out-of-bag member)"
                    if self.n_without_out_of_bag else "")),
                ("single model (cross-validated)", f"{fmt(self.reference_loss)} "
                 f"({self.folds} folds)" if self.folds > 0 else fmt(self.reference_loss)),
                ("ensemble (out of bag)", fmt(self.ensemble_loss)),
                ("ratio", _ratio_text(self.reference_ratio, self.ratio_lower,
                                      self.ratio_upper, self.level)),
                ("verdict", self.verdict)]
        for name, (ens, ref, ratio, lower, upper, _) in self._by_loss.items():
            if name != self.loss:
                rows.append((f"{name.replace('_', ' ')} (not decided on)",
                             f"{fmt(ens)} / {fmt(ref)} = "
                             + _ratio_text(ratio, lower, upper, self.level)))
        d = self.decomposition
        rows.append((f"averaging removed ({d.loss.replace('_', ' ')})",
                     f"ambiguity {fmt(d.ambiguity)} of mean member loss {fmt(d.member_loss)}"
                     + (f" ({d.relative_gain:.0%})" if math.isfinite(d.relative_gain) else "")))
        return rows

    def _reading(self):
        return reading(self.verdict, self.reference_ratio, self.ratio_lower, self.ratio_upper,
                       self.level, f"{self.n_rows_used:,} training rows, out of bag against "
                       "cross-validated")

    def to_frame(self):
        """One row per loss: ``loss``, ``ensemble_loss``, ``reference_loss``,
        ``reference_ratio``, ``ratio_lower``, ``ratio_upper``, ``verdict`` (each loss's own
        three words; the verdict of the result is the row of ``loss``)."""
        import pandas as pd

        names = list(self._by_loss)
        columns = list(zip(*self._by_loss.values()))
        return pd.DataFrame({"loss": names, "ensemble_loss": columns[0],
                             "reference_loss": columns[1], "reference_ratio": columns[2],
                             "ratio_lower": columns[3], "ratio_upper": columns[4],
                             "verdict": columns[5]})


def _ratio_text(ratio, lower, upper, level):
    if not math.isfinite(ratio):
        return "not estimable"
    if not (math.isfinite(lower) and math.isfinite(upper)):
        return f"{ratio:.3f} (interval not estimable)"
    return f"{ratio:.3f} ({level:.0%} interval {lower:.3f} to {upper:.3f})"


def reading(word, ratio, lower, upper, level, basis) -> str:
    """The plain-word line of a verdict."""
    if word == NOT_ESTIMABLE:
        return "no verdict: the ratio of the losses has no interval here"
    width = upper - lower
    digits = 0 if width >= 0.02 else 1 if width >= 0.002 else 2   # ends that differ
    share = (f"the ensemble's loss is {ratio:.{digits}%} of a single model's ({level:.0%} "
             f"interval {lower:.{digits}%} to {upper:.{digits}%}; {basis})")
    if word == HELPS:
        return f"bagging helps this learner: {share}"
    if word == HURTS:
        return f"bagging hurts this learner: {share}"
    return f"no clear difference between bagging and a single model: {share}"


# -- several learners -------------------------------------------------------------------

def _task_of(y, task):
    if task is not None:
        if task not in ("regression", "classification"):
            raise ValueError(f"`task`: expected 'regression' or 'classification', got {task!r}")
        return task
    if y.dtype.kind == "f":
        return "regression"
    if y.dtype.kind in "biuUSO":
        return "classification"
    raise ValueError(f"`y`: expected values or class labels, got dtype {y.dtype}")


def _learner_name(spec):
    if isinstance(spec, str):
        return spec
    if isinstance(spec, tuple):
        return str(spec[0])
    from .ensemble import _Bag

    if isinstance(spec, _Bag):
        learner = spec.learner
        return learner if isinstance(learner, str) else type(learner).__name__
    return type(spec).__name__


def _learners_iv(learners):
    """``[(name, spec), ...]`` from a list or a dict; names made unique."""
    if isinstance(learners, dict):
        pairs = [(str(name), spec) for name, spec in learners.items()]
    elif isinstance(learners, (list, tuple)):
        pairs = [(_learner_name(spec), spec) for spec in learners]
    else:
        raise TypeError("`learners`: expected a list or a dict of learners, got "
                        f"{type(learners).__name__}")
    if not pairs:
        raise ValueError("`learners`: give at least one learner (a name such as 'tree', a "
                         "(name, settings) pair or a scikit-learn estimator)")
    seen: dict[str, int] = {}
    named = []
    for name, spec in pairs:
        seen[name] = seen.get(name, 0) + 1
        named.append((name if seen[name] == 1 else f"{name} ({seen[name]})", spec))
    return named


def _bag_of(name, spec, task, n_members, seed, n_jobs):
    """The unfitted bag of one entry of ``learners``."""
    from sklearn.base import clone

    from ._learners import LEARNERS
    from .ensemble import BagClassifier, BagRegressor, _Bag

    cls = BagClassifier if task == "classification" else BagRegressor
    common = {"n_members": n_members, "random_state": seed, "n_jobs": n_jobs}
    known = tuple(LEARNERS)
    if isinstance(spec, _Bag):
        if spec._classification != (task == "classification"):
            raise ValueError(f"`learners`: {name!r} is a {type(spec).__name__}, but the "
                             f"targets are for {task}")
        return clone(spec)
    if isinstance(spec, str):
        if spec not in LEARNERS:
            raise ValueError(f"`learners`: unknown learner {spec!r}; expected one of {known}, "
                             "a (name, settings) pair or a scikit-learn estimator")
        return cls(spec, **common)
    if isinstance(spec, tuple):
        if len(spec) != 2 or not isinstance(spec[0], str) or not isinstance(spec[1], dict):
            raise TypeError(f"`learners`: {name!r}: a pair must be (name, settings dict), e.g. "
                            "('tree', {'max_depth': 3})")
        learner, settings = spec
        if learner not in LEARNERS:
            raise ValueError(f"`learners`: unknown learner {learner!r}; expected one of "
                             f"{known}")
        bag = cls(learner, **common)
        unknown = sorted(set(settings) - set(bag.get_params(deep=False)))
        if unknown:
            raise ValueError(f"`learners`: {name!r}: unknown settings {unknown}")
        return bag.set_params(**settings)
    needed = "predict_proba" if task == "classification" else "predict"
    if not (callable(getattr(spec, "fit", None)) and callable(getattr(spec, needed, None))):
        raise TypeError(f"`learners`: {name!r}: expected one of {known}, a (name, settings) "
                        f"pair or an estimator with fit and {needed}, got "
                        f"{type(spec).__name__}")
    return cls(clone(spec), **common)


def compare_learners(X, y, learners, *, n_members=100, folds=None, level=0.95, loss=None,
                     task=None, random_state=None, n_jobs=None, progress=False) -> LearnerComparison:
    """Does bagging help each of several learners? One `Verdict` per learner, side by side.

    Each learner is bagged on ``(X, y)`` (`BagRegressor` or `BagClassifier`, the same
    ``n_members`` and seed for all) and judged by its estimator's ``verdict``: the
    ensemble's out-of-bag loss against the ``folds``-fold cross-validated loss of one
    model of the same learner on the same rows, the ratio with its interval, and the
    verdict in three words. Beside it: ρ, the share of a member's variance that comes
    from the training data (``pooled_rho`` of the estimator's ``spread`` at the training
    rows; "not estimable" when its ``pooled_status`` says so), and the members needed for
    the ensemble's expected loss to come within 1% of an infinite ensemble's
    (`Verdict.members_needed`).

    Parameters
    ----------
    X : array-like of shape (n_rows, n_features)
    y : array-like of shape (n_rows,)
        Targets: values (regression) or class labels (classification).
    learners : list or dict
        Each entry is a native learner's name (``"tree"``, ``"linear"``, ``"neighbors"``)
        with its defaults, a ``(name, settings)`` pair such as ``("tree", {"max_depth":
        3})``, a scikit-learn estimator (bagged as a wrapped learner) or a `BagRegressor` /
        `BagClassifier` (used as configured). A dict gives the rows' names; a list names
        them by the learner (repeats get " (2)", " (3)", ...).
    n_members : int
        Members of every ensemble.
    folds : int, splitter or None
        Folds of the single model's cross-validation (see the estimators' ``verdict``;
        default leave-one-out up to 100 rows, else 100 folds).
    level : float
        Nominal coverage of the intervals of the ratios.
    loss : str, optional
        The loss the verdicts are decided on (default: squared error, or the error rate
        for classification).
    task : {"regression", "classification"}, optional
        Default: regression when ``y`` has a float dtype, classification otherwise
        (strings, booleans, integers; pass ``task="regression"`` for integer counts).
    random_state : int, numpy.random.RandomState or None
        One seed for every learner's members and folds (None: a fresh one, shared).
    n_jobs : int, optional
        Worker threads of each ensemble.
    progress : bool or callable, optional
        ``True`` shows a tqdm progress bar on stderr; a callable receives ``(done, total)``
        as the work advances (monotone, ending at ``total``); ``False`` (default) reports
        nothing. Ctrl-C stops the call within about a second either way.

    Returns
    -------
    LearnerComparison

    Examples
    --------
    >>> import numpy as np, bagwise
    >>> rng = np.random.default_rng(0)
    >>> X = rng.uniform(-2, 2, size=(200, 2))
    >>> y = np.sin(2 * X[:, 0]) + X[:, 1] + rng.normal(scale=0.3, size=200)
    >>> table = bagwise.compare_learners(X, y, ["tree", "linear"], n_members=40,
    ...                                  random_state=0)
    >>> table.learners
    ('tree', 'linear')
    >>> table.verdicts[0].verdict
    'helps'
    """
    from sklearn.utils.validation import check_consistent_length

    from ._validation import n_jobs_value, naming, positive_int
    from .ensemble import _seed_of

    named = _learners_iv(learners)
    n_members = positive_int(n_members, "n_members")
    level = _level_iv(level)
    if X is None or y is None:
        raise ValueError(f"`{'X' if X is None else 'y'}`: give the training rows and targets")
    try:
        with naming("X"):
            check_consistent_length(X, y)
    except ValueError:
        raise ValueError(f"`y`: has {len(y)} targets but `X` has {len(X)} rows") from None
    y_array = np.asarray(y)
    if y_array.ndim != 1:
        raise ValueError(f"`y`: expected one target per row, got shape {y_array.shape}")
    task = _task_of(y_array, task)
    loss = _loss_iv(loss, task)
    seed = _seed_of(random_state)
    n_jobs = n_jobs_value(n_jobs)
    progress_iv(progress)
    bags = [(name, _bag_of(name, spec, task, n_members, seed, n_jobs)) for name, spec in named]
    verdicts, rho, status, needed = [], [], [], []
    with once_per_call(), progress_callback(progress, "comparing learners", "step") as callback:
        # Per learner: its fit (reported member by member), then its verdict and spread.
        steps = iter(stages(callback, 2 * len(bags)))
        for _, bag in bags:
            fitting, judging = next(steps), next(steps)
            given = bag.progress
            bag.set_params(progress=fitting or False)
            try:
                bag.fit(X, y)
            finally:
                bag.set_params(progress=given)
            verdicts.append(bag.verdict(folds=folds, level=level, loss=loss))
            import warnings

            try:
                with warnings.catch_warnings():
                    # the table reads a not-estimable rho out as such
                    warnings.simplefilter("ignore")
                    spread = bag.spread(bag._train_X)
            except ValueError:   # continuous weights (scheme="bayesian"): no counts
                rho.append(math.nan)
                status.append(NOT_ESTIMABLE)
            else:
                status.append(str(spread.pooled_status))
                rho.append(math.nan if status[-1] == NOT_ESTIMABLE
                           else float(spread.pooled_rho))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                needed.append(verdicts[-1].members_needed())
            if judging is not None:
                judging(1, 1)
    return LearnerComparison(
        task=task, loss=loss, level=level, n_members=n_members,
        learners=tuple(name for name, _ in bags), verdicts=tuple(verdicts),
        pooled_rho=tuple(rho), pooled_status=tuple(status), members_needed=tuple(needed))


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class LearnerComparison(Result):
    """One `Verdict` per learner: does bagging help each of them.

    Attributes
    ----------
    task, loss : str
        The task and the loss the verdicts are decided on.
    level : float
        Nominal coverage of the intervals of the ratios.
    n_members : int
        Members of every ensemble.
    learners : tuple of str
        The rows' names.
    verdicts : tuple of Verdict
        Each learner's verdict (losses, ratio, interval, out-of-bag decomposition).
    pooled_rho : tuple of float
        Each ensemble's share of the member variance that comes through the training data,
        at the training rows (NaN where ``pooled_status`` is "not estimable").
    pooled_status : tuple of str
        Whether each ``pooled_rho`` is "steady", "noisy" or "not estimable".
    members_needed : tuple of int or float
        Each ensemble's members needed for its expected loss to come within 1% of an
        infinite ensemble's (`Verdict.members_needed`; NaN when not estimable).
    """

    _title = "Does bagging help?"

    task: str
    loss: str
    level: float
    n_members: int
    learners: tuple
    verdicts: tuple
    pooled_rho: tuple
    pooled_status: tuple
    members_needed: tuple

    def __len__(self) -> int:
        return len(self.learners)

    def __getitem__(self, learner: str) -> Verdict:
        """The `Verdict` of ``learner``."""
        if learner not in self.learners:
            raise KeyError(f"`learner`: no row {learner!r} (there are: "
                           f"{', '.join(self.learners)})")
        return self.verdicts[self.learners.index(learner)]

    def _rho_text(self, i):
        if self.pooled_status[i] == NOT_ESTIMABLE or not math.isfinite(self.pooled_rho[i]):
            return NOT_ESTIMABLE
        return f"{self.pooled_rho[i]:.2f}" + ("" if self.pooled_status[i] == "steady"
                                              else f" ({self.pooled_status[i]})")

    def _cells(self):
        header = ("learner", "single (CV)", "ensemble (OOB)", "ratio",
                  f"{self.level:.0%} interval", "verdict", "rho", "members needed")
        rows = []
        for i, (name, v) in enumerate(zip(self.learners, self.verdicts)):
            interval = ("not estimable" if not math.isfinite(v.ratio_lower)
                        else f"{v.ratio_lower:.3g} to {v.ratio_upper:.3g}")
            needed = self.members_needed[i]
            rows.append((name, fmt(v.reference_loss), fmt(v.ensemble_loss),
                         f"{v.reference_ratio:.3g}" if math.isfinite(v.reference_ratio)
                         else NOT_ESTIMABLE, interval, v.verdict, self._rho_text(i),
                         NOT_ESTIMABLE if isinstance(needed, float) and math.isnan(needed)
                         else f"{needed:,}"))
        return header, rows

    def _reading(self):
        words = [f"{name}: {v.verdict}" for name, v in zip(self.learners, self.verdicts)]
        return (f"{self.loss.replace('_', ' ')}, out of bag against cross-validated; "
                + "; ".join(words))

    def __repr__(self) -> str:
        header, rows = self._cells()
        table = [header, *rows]
        widths = [max(len(row[j]) for row in table) for j in range(len(header))]
        lines = [f"{self._title} ({self.task}, {self.n_members:,} members, "
                 f"{self.loss.replace('_', ' ')})"]
        lines += ["  " + "  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip()
                  for row in table]
        lines.append(f"  -> {self._reading()}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        def render():
            header, rows = self._cells()
            head = "".join(f"<th style='text-align:left;padding-right:1em'>{html.escape(h)}"
                           "</th>" for h in header)
            body = "".join("<tr>" + "".join(f"<td style='padding-right:1em'>"
                                            f"{html.escape(cell)}</td>" for cell in row)
                           + "</tr>" for row in rows)
            title = html.escape(f"{self._title} ({self.task}, {self.n_members:,} members)")
            return (f"<div class='bagwise-result'><strong>{title}</strong>"
                    f"<table style='border-collapse:collapse'><tr>{head}</tr>{body}</table>"
                    f"<p style='margin:0.3em 0'>{html.escape(self._reading())}</p></div>")

        return safe_html(self, render)

    def to_frame(self):
        """One row per learner: ``learner``, ``loss``, ``reference_loss`` (the single
        model, cross-validated), ``ensemble_loss`` (out of bag), ``reference_ratio``,
        ``ratio_lower``, ``ratio_upper``, ``verdict``, ``pooled_rho`` (NaN when not
        estimable), ``pooled_status``, ``members_needed``, ``n_rows_used``,
        ``n_without_out_of_bag``."""
        import pandas as pd

        v = self.verdicts
        rho = [r if s != NOT_ESTIMABLE else math.nan
               for r, s in zip(self.pooled_rho, self.pooled_status)]
        return pd.DataFrame({
            "learner": list(self.learners), "loss": [x.loss for x in v],
            "reference_loss": [x.reference_loss for x in v],
            "ensemble_loss": [x.ensemble_loss for x in v],
            "reference_ratio": [x.reference_ratio for x in v],
            "ratio_lower": [x.ratio_lower for x in v], "ratio_upper": [x.ratio_upper for x in v],
            "verdict": [x.verdict for x in v], "pooled_rho": rho,
            "pooled_status": list(self.pooled_status),
            "members_needed": list(self.members_needed),
            "n_rows_used": [x.n_rows_used for x in v],
            "n_without_out_of_bag": [x.n_without_out_of_bag for x in v]})
