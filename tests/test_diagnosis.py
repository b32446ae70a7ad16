"""bagwise.diagnose: every bundled number is the standalone function's, the reference ratio
against sklearn.metrics, the out-of-bag part through scikit-learn's bagging."""

from __future__ import annotations

import dataclasses
import json
import math
import warnings

import numpy as np
import pytest
import sklearn.datasets
import sklearn.ensemble
import sklearn.metrics

import bagwise


def _regression_members(members=200, n_train=60, n_test=120, seed=0):
    """Bagged means: member b predicts ``y + counts_b @ Z / n_train`` at every test point,
    so the members vary through their resamples only (more members than training rows
    keeps the Monte-Carlo correction of the variance estimates small)."""
    rng = np.random.default_rng(seed)
    counts = bagwise.resample(n_train, members, rng=seed).counts
    y_test = rng.normal(size=n_test)
    z = rng.normal(size=(n_train, n_test))
    test = y_test + 0.3 + counts @ z / n_train
    return test, y_test, counts


def _close(a, b):
    if a is None or b is None:
        return a is b
    if isinstance(a, float) and math.isnan(a):
        return isinstance(b, float) and math.isnan(b)
    return a == pytest.approx(b, rel=1e-12, abs=0)


def test_every_number_equals_the_standalone_result():
    members, y, counts = _regression_members()
    report = bagwise.diagnose(members, y, counts=counts, rng=3)
    # The headline numbers against plain numpy first (the standalone calls below check the
    # wiring, not the values): Krogh & Vedelsby (1995) parts, numpy.corrcoef of the
    # residuals, the size law's W and loss(∞) = loss(M) − W/M (Cochran 1977, Thm 2.2), the
    # across-member variance (numpy.var, ddof 1) of the spread.
    f = members.mean(axis=0)
    ensemble, member = np.mean((f - y) ** 2), np.mean((members - y) ** 2)
    ambiguity = np.mean((members - f) ** 2)
    assert report.decomposition.ensemble_loss == pytest.approx(ensemble, rel=1e-12)
    assert report.decomposition.member_loss == pytest.approx(member, rel=1e-12)
    assert report.decomposition.ambiguity == pytest.approx(ambiguity, rel=1e-10)
    w = members.var(axis=0, ddof=1).mean()
    assert report.size_curve.mean_within == pytest.approx(w, rel=1e-12)
    assert report.size_curve.infinite_loss == pytest.approx(ensemble - w / len(members),
                                                           rel=1e-10)
    off = ~np.eye(len(members), dtype=bool)
    assert report.correlation.mean_residual_correlation == pytest.approx(
        np.corrcoef(members - y)[off].mean(), rel=1e-9)
    assert report.spread.mean_within == pytest.approx(w, rel=1e-12)
    d = bagwise.decompose(members, y)
    for name in ("ensemble_loss", "member_loss", "ambiguity", "relative_gain"):
        assert _close(getattr(report.decomposition, name), getattr(d, name)), name
    c = bagwise.size_curve(members, y, rng=3)
    np.testing.assert_array_equal(report.size_curve.curve, c.curve)
    assert _close(report.size_curve.infinite_loss, c.infinite_loss)
    assert _close(report.size_curve.mean_within, c.mean_within)
    assert report.members_needed()["size_curve"] == c.members_needed(0.01)
    r = bagwise.correlation(members, y)
    assert _close(report.correlation.mean_residual_correlation, r.mean_residual_correlation)
    assert _close(report.correlation.mean_residual_variance, r.mean_residual_variance)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = bagwise.prediction_variance(members, counts)
        s = bagwise.spread(members, counts)
    np.testing.assert_array_equal(report.uncertainty.std_error, u.std_error)
    assert report.uncertainty.method == "ij" and report.uncertainty.corrected
    assert _close(report.spread.mean_between, s.mean_between)
    assert _close(report.spread.mean_within, s.mean_within)
    assert _close(report.spread.pooled_rho, s.pooled_rho)
    summary = report.summary()
    np.testing.assert_array_equal(report.uncertainty.status, u.status)
    typical = None if u._typical() is None else float(np.median(u.std_error))
    assert summary["uncertainty"]["median_std_error"] == typical
    assert summary["uncertainty"]["share_clipped"] == u.n_clipped / len(y)
    assert summary["uncertainty"]["median_correction_share"] == pytest.approx(
        float(np.nanmedian(u.correction_share)), rel=1e-15)
    assert summary["spread"]["members_needed"] == s.members_needed(0.01)
    assert summary["size_curve"]["members_needed"] == c.members_needed(0.01)
    assert summary["size_curve"]["mean_within"] == c.mean_within           # the law's W
    assert summary["size_curve"]["ensemble_loss"] == c.ensemble_loss == d.ensemble_loss
    assert summary["size_curve"]["loss_one_member"] == c.curve[0]
    # test points differ from the training rows: no out-of-bag part
    assert report.out_of_bag is None and "out_of_bag" not in summary


def test_reference_ratio_against_sklearn_mean_squared_error():
    members, y, counts = _regression_members(seed=1)
    rng = np.random.default_rng(7)
    reference = y + rng.normal(scale=1.0, size=len(y))
    report = bagwise.diagnose(members, y, reference=reference)
    # sklearn.metrics.mean_squared_error of the single model and of the ensemble mean
    single = sklearn.metrics.mean_squared_error(y, reference)
    ensemble = sklearn.metrics.mean_squared_error(y, members.mean(axis=0))
    assert report.reference_loss == pytest.approx(single, rel=1e-12)
    assert report.reference_ratio == pytest.approx(ensemble / single, rel=1e-12)
    verdict = report.verdict()
    # the words follow the interval of the ratio (three words, decided by its ends)
    r = report.reference
    assert r.ratio_lower < report.reference_ratio < r.ratio_upper
    expected = ("bagging helps this learner" if r.ratio_upper < 1 else
                "bagging hurts this learner" if r.ratio_lower > 1 else "no clear difference")
    assert verdict.startswith(expected)
    assert f"{ensemble / single:.0%}" in verdict
    assert verdict in report.readings()


def test_verdict_when_bagging_hurts():
    members, y, _ = _regression_members(seed=2)
    better = members.mean(axis=0) * 0.5 + y * 0.5                  # a closer single model
    report = bagwise.diagnose(members, y, reference=better)
    assert report.reference_ratio > 1
    assert report.reference.ratio_lower > 1
    assert report.verdict().startswith("bagging hurts this learner")


def test_out_of_bag_through_sklearn_bagging_regressor():
    # sklearn.datasets.load_diabetes; sklearn.ensemble.BaggingRegressor(oob_score=True):
    # counts rebuilt from estimators_samples_ with np.bincount.
    X, y = sklearn.datasets.load_diabetes(return_X_y=True)
    n = len(y)
    bag = sklearn.ensemble.BaggingRegressor(n_estimators=40, oob_score=True,
                                            random_state=0).fit(X, y)
    counts = np.array([np.bincount(s, minlength=n) for s in bag.estimators_samples_])
    train = np.array([est.predict(X[:, f])
                      for est, f in zip(bag.estimators_, bag.estimators_features_)])
    # 1. members given on the training rows themselves (counts.shape[1] == n_points)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bagwise.diagnose(train, y, counts=counts)
    np.testing.assert_allclose(report.out_of_bag.prediction, bag.oob_prediction_, rtol=1e-10)
    # BaggingRegressor.oob_score_ is sklearn.metrics.r2_score of its OOB prediction
    assert sklearn.metrics.r2_score(y, report.out_of_bag.prediction) == pytest.approx(
        bag.oob_score_, rel=1e-10)
    # 2. a separate test set with train_members / y_train
    rng = np.random.default_rng(0)
    X_test = X[rng.permutation(n)[:100]] + rng.normal(scale=0.01, size=(100, X.shape[1]))
    y_test = rng.normal(size=100)
    test = np.array([est.predict(X_test[:, f])
                     for est, f in zip(bag.estimators_, bag.estimators_features_)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        split = bagwise.diagnose(test, y_test, counts=counts, train_members=train, y_train=y)
        oob = bagwise.out_of_bag(train, counts, y)
    assert split.out_of_bag.ensemble_loss == pytest.approx(oob.ensemble_loss, rel=1e-12)
    assert split.summary()["out_of_bag"]["ensemble_loss"] == pytest.approx(
        sklearn.metrics.mean_squared_error(y, bag.oob_prediction_), rel=1e-10)
    assert split.decomposition.n_points == 100


def test_probabilities_use_every_class_and_labels_skip_uncertainty():
    # sklearn.datasets.load_breast_cancer; sklearn.ensemble.BaggingClassifier
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    n = len(y)
    bag = sklearn.ensemble.BaggingClassifier(n_estimators=30, random_state=1).fit(X, y)
    counts = np.array([np.bincount(s, minlength=n) for s in bag.estimators_samples_])
    probs = np.array([est.predict_proba(X[:, f])
                      for est, f in zip(bag.estimators_, bag.estimators_features_)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bagwise.diagnose(probs, y, counts=counts, reference=probs[0])
        u = bagwise.prediction_variance(probs, counts)
        one = bagwise.prediction_variance(probs[:, :, 1], counts)
    np.testing.assert_array_equal(report.uncertainty.variance, u.variance)
    # every class gets its own estimate: class 1's equals the estimate of its column alone
    np.testing.assert_array_equal(u.variance[:, 1], one.variance)
    # residuals of the probability each member gives the observed class
    observed = probs[:, np.arange(n), y]
    r = bagwise.correlation(observed, np.ones(n))
    assert _close(report.correlation.mean_residual_correlation, r.mean_residual_correlation)
    # multi-class Brier of a single member: sum_c (p_c - [y = c])**2 = 2 x
    # sklearn.metrics.brier_score_loss for two classes
    single = sklearn.metrics.brier_score_loss(y, probs[0][:, 1])
    assert report.reference_loss == pytest.approx(2 * single, rel=1e-12)
    # out-of-bag error rate = 1 - BaggingClassifier's soft-vote OOB accuracy (numpy here)
    oob = bagwise.out_of_bag(probs, counts, y)
    assert report.out_of_bag.ensemble_loss == oob.ensemble_loss
    labels = probs.argmax(axis=2)
    hard = bagwise.diagnose(labels, y, counts=counts)
    assert hard.uncertainty is None and hard.spread is None and hard.correlation is None
    # majority-vote error rate against sklearn.metrics.accuracy_score of the vote
    vote = bagwise.aggregate(labels)
    assert hard.decomposition.ensemble_loss == pytest.approx(
        1 - sklearn.metrics.accuracy_score(y, vote), rel=1e-12)
    # error rates follow no size law: no members-needed figure from the size curve
    assert "size_curve" not in hard.members_needed()


def test_summary_is_json_and_frame_and_display():
    members, y, counts = _regression_members(seed=4)
    report = bagwise.diagnose(members, y, counts=counts, reference=members[0])
    text = json.dumps(report.summary(), allow_nan=False)
    back = json.loads(text)
    assert back["decomposition"]["ambiguity"] == pytest.approx(report.decomposition.ambiguity)
    assert back["reference"]["reference_ratio"] == pytest.approx(report.reference_ratio)
    frame = report.to_frame()
    assert list(frame.columns) == ["section", "quantity", "value"]
    assert len(frame) == sum(len(v) for v in report.summary().values())
    row = frame[(frame.section == "spread") & (frame.quantity == "mean_within")]
    assert row.value.iloc[0] == pytest.approx(report.spread.mean_within)
    shown = repr(report)
    for title in ("Ambiguity decomposition", "Ensemble size", "Residual correlation",
                  "Uncertainty of the ensemble's mean", "Between / within", "Single model", "Readings"):
        assert title in shown
    assert f"averaging removed {report.decomposition.relative_gain:.0%}" in shown
    assert "<table" in report._repr_html_()
    broken = dataclasses.replace(report, decomposition=object())  # a broken result still displays
    assert broken._repr_html_().startswith("<pre>")


def test_members_needed_reading():
    members, y, _ = _regression_members(seed=5)
    report = bagwise.diagnose(members, y)
    k = bagwise.size_curve(members, y).members_needed(0.01)
    assert any(line.startswith(f"{k} members reach 1% of the infinite-ensemble loss")
               for line in report.readings())


def test_rough_standard_errors_are_flagged():
    # few members against many training rows: the Monte-Carlo correction dominates
    # (Wager, Hastie & Efron 2014) and the reading says so
    rng = np.random.default_rng(6)
    counts = bagwise.resample(400, 20, rng=6).counts
    members = rng.normal(size=(20, 50))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = bagwise.diagnose(members, rng.normal(size=50), counts=counts)
    result = report.uncertainty
    # Members unrelated to the counts: the true variance is 0, so the corrected IJ is
    # Monte-Carlo noise around 0 and about half the points land at or below 0, which are
    # "not estimable" by definition; the others are within their noise of 0 (common
    # practice: more than half).
    assert np.mean(result.status == "not estimable") > 0.5
    needed = result.members_needed()
    assert needed > 20
    assert any(f"not estimable with 20 members; at least {needed:,} needed" in line
               for line in report.readings())
    assert not any("±" in line for line in report.readings())


@pytest.mark.parametrize("change, error, match", [
    (dict(members=np.zeros((1, 10))), ValueError, "`members`: a diagnosis needs at least 2"),
    (dict(y=np.zeros(9)), ValueError, "`y`"),
    (dict(y=np.r_[np.zeros(9), np.nan]), ValueError, "`y`"),
    (dict(counts=np.ones((3, 10), np.int64)), ValueError, "`counts`"),
    (dict(counts=np.ones((4, 10))), TypeError, "`counts`"),
    (dict(counts=-np.ones((4, 10), np.int64)), ValueError, "`counts`"),
    (dict(reference=np.zeros(9)), ValueError, "`reference`"),
    (dict(reference=np.full(10, np.inf)), ValueError, "`reference`"),
    (dict(train_members=np.zeros((4, 12))), ValueError, "`y_train`"),
    (dict(train_members=np.zeros((4, 12)), y_train=np.zeros(12)), ValueError, "`counts`"),
    (dict(members=np.full((4, 10), np.nan)), ValueError, "`members`"),
])
def test_bad_input(change, error, match):
    rng = np.random.default_rng(0)
    args = dict(members=rng.normal(size=(4, 10)), y=rng.normal(size=10))
    args.update(change)
    members, y = args.pop("members"), args.pop("y")
    with pytest.raises(error, match=match):
        bagwise.diagnose(members, y, **args)


def test_bad_training_members_are_reported_under_their_own_names():
    rng = np.random.default_rng(1)
    counts = bagwise.resample(12, 4, rng=0).counts
    train = rng.normal(size=(4, 12))
    member, row = np.argwhere(counts == 0)[0]
    train[member, row] = np.nan  # out-of-bag entries are used, so this one is an error
    with pytest.raises(ValueError, match=r"^`train_members`: contains NaN"):
        bagwise.diagnose(rng.normal(size=(4, 10)), rng.normal(size=10), counts=counts,
                         train_members=train, y_train=rng.normal(size=12))
    with pytest.raises(ValueError, match=r"^`y_train`"):
        bagwise.diagnose(rng.normal(size=(4, 10)), rng.normal(size=10), counts=counts,
                         train_members=rng.normal(size=(4, 12)),
                         y_train=np.r_[np.zeros(11), np.inf])


def test_class_members_get_the_diversity_section():
    # The section is bagwise.diversity of the same members (tested against sklearn,
    # statsmodels and numpy in tests/test_diversity.py); here: present, equal, reported.
    rng = np.random.default_rng(3)
    y = rng.integers(0, 3, size=300)
    labels = np.where(rng.random((9, 300)) < 0.7, y, rng.integers(0, 3, size=(9, 300)))
    report = bagwise.diagnose(labels, y)
    alone = bagwise.diversity(labels, y)
    assert report.diversity is not None
    np.testing.assert_array_equal(report.diversity.disagreement, alone.disagreement)
    section = report.summary()["diversity"]
    assert section["mean_disagreement"] == alone.mean_disagreement
    assert section["interrater_kappa"] == alone.interrater_kappa
    (a, b, apart), = alone.redundant_pairs(top=1)
    assert section["closest_pair"] == [a, b]
    assert section["closest_pair_disagreement"] == apart
    assert f"the most alike pair, members {a} and {b}, disagree on {apart:.1%}" in \
        "\n".join(report.readings())
    assert "Diversity" in repr(report)
    # probabilities: a member's label is its most probable class
    proba = np.eye(3)[labels] * 0.8 + 0.2 / 3
    assert bagwise.diagnose(proba, y).diversity.mean_disagreement == alone.mean_disagreement
    # values have no class predictions, so no diversity section
    values = rng.normal(size=(5, 40))
    assert bagwise.diagnose(values, rng.normal(size=40)).diversity is None


def test_each_warning_once_per_call_at_the_callers_line():
    # few members against many training rows: the bias correction of the standard errors
    # is rough, which both the standard errors and the between/within split compute
    rng = np.random.default_rng(6)
    counts = bagwise.resample(400, 20, rng=6).counts
    members, y = rng.normal(size=(20, 50)), rng.normal(size=50)
    with warnings.catch_warnings(record=True) as records:
        warnings.simplefilter("always")
        bagwise.diagnose(members, y, counts=counts)
    messages = [(r.category, str(r.message)) for r in records]
    assert any("not estimable" in text for _, text in messages)
    assert len(messages) == len(set(messages)), messages          # each condition once
    assert all(r.filename == __file__ for r in records), [r.filename for r in records]
    # the diagnosis's own warning: a reference with loss 0
    with warnings.catch_warnings(record=True) as records:
        warnings.simplefilter("always")
        report = bagwise.diagnose(members, y, reference=y)
    assert [(r.category, r.filename) for r in records] == [(bagwise.BagwiseWarning, __file__)]
    assert "`reference`" in str(records[0].message) and math.isnan(report.reference_ratio)
    assert report.verdict() == "no verdict: the single model's loss is 0"


def test_members_needed_is_one_table_of_every_figure():
    members, y, counts = _regression_members(seed=4)
    report = bagwise.diagnose(members, y, counts=counts, rng=2)
    table = report.members_needed()
    # the size curve bounds the expected loss, the between/within split the variance of
    # the ensemble's prediction: two rows, each the standalone result's own figure
    assert table.sections == ("size_curve", "uncertainty", "spread")
    curve = bagwise.size_curve(members, y, rng=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        split = bagwise.spread(members, counts)
        variance = bagwise.prediction_variance(members, counts)
    # the standard errors' row: members for steady estimates, whatever the tolerance
    assert table["uncertainty"] == variance.members_needed(0.2)
    assert table["size_curve"] == curve.members_needed(0.01)
    assert table["spread"] == split.members_needed(0.01)
    assert report.members_needed(0.05)["size_curve"] == curve.members_needed(0.05)
    assert report.members_needed(0.05)["spread"] == split.members_needed(0.05)
    frame = table.to_frame()
    assert list(frame.columns) == ["section", "bounded", "members_needed", "basis"]
    assert frame.members_needed.tolist() == list(table.members_needed)
    assert all(frame.bounded.str.len() > 0) and all(frame.basis.str.len() > 0)
    shown = repr(report)
    assert "Members needed (within 1%)" in shown
    for bounded, basis in zip(table.bounded, table.basis):
        assert bounded in shown and basis in shown
    assert "Members needed" in report._repr_html_()
    assert "Members needed" in repr(table) and "<table" in table._repr_html_()
    with pytest.raises(KeyError, match="out_of_bag"):
        table["out_of_bag"]
    with pytest.raises(ValueError, match="`tolerance`"):
        report.members_needed(0)


def test_diagnosis_has_one_attribute_per_registered_section():
    from bagwise.sections import SECTIONS

    keys = [section.key for section in SECTIONS]
    assert len(set(keys)) == len(keys)
    fields = [f.name for f in dataclasses.fields(bagwise.Diagnosis) if not f.name.startswith("_")]
    assert fields == ["kind", "n_members", "n_points", *keys]
    for section in SECTIONS:
        assert f"{section.key} : " in bagwise.Diagnosis.__doc__
    members, y, counts = _regression_members(seed=4)
    report = bagwise.diagnose(members, y, counts=counts, reference=members[0])
    present = [key for key in keys if getattr(report, key) is not None]
    assert list(report.summary()) == ["ensemble", *present]
    assert [key for key, *_ in report._parts()] == present
    with pytest.raises(dataclasses.FrozenInstanceError):
        report.kind = "labels"


def test_a_registered_section_reaches_every_output(monkeypatch):
    # Diagnosis, its summary, readings and report read the registry, nothing else: a
    # section swapped in the registry shows up everywhere
    from bagwise import sections
    from bagwise.sections import Figure
    from bagwise.sections.spread import SpreadSection

    class Louder(SpreadSection):
        def readings(self, result, diagnosis):
            return ["an extra finding"]

        def summary(self, result, diagnosis):
            return {"extra": 1}

        def figures(self, result, diagnosis, unit):
            return [Figure("an extra figure", lambda ax: ax.plot([0, 1], [0, 1])[0].axes)]

    registry = list(sections.SECTIONS)
    registry[[s.key for s in registry].index("spread")] = Louder()
    monkeypatch.setattr(bagwise.diagnosis, "SECTIONS", registry)
    members, y, counts = _regression_members(seed=4)
    report = bagwise.diagnose(members, y, counts=counts)
    assert report.summary()["spread"] == {"extra": 1}
    assert "an extra finding" in report.readings()
    page = report.to_html()
    assert "an extra figure" in page and "an extra finding" in page
