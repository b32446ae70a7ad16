"""The opt-in ``progress=`` of every long call: a callable hears a monotone (done, total)
that ends at total; ``True`` draws a tqdm bar on stderr; anything else is refused by name.

The contract is the docstring's (``progress : bool or callable``); the sources of each
call's figures are tested in its own file, here only the reports are checked, and that a
call with a progress callback gives the same result as one without (reporting never
changes results)."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.tree import DecisionTreeRegressor

import bagwise

N_POINTS = 9_000          # three chunks of the core's 4,096 points, so reports can repeat
N_MEMBERS = 24


class Recorder:
    """A progress callable that keeps every report."""

    def __init__(self):
        self.seen: list[tuple[int, int]] = []

    def __call__(self, done, total):
        self.seen.append((int(done), int(total)))

    def check(self):
        """Monotone, one total, ending at it; returns the number of reports."""
        assert self.seen, "no progress report"
        totals = {total for _, total in self.seen}
        assert len(totals) == 1, self.seen
        (total,) = totals
        done = [d for d, _ in self.seen]
        assert done == sorted(done), self.seen
        assert 0 <= done[0] and done[-1] == total, self.seen
        return len(self.seen)


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(0)
    y = rng.normal(size=N_POINTS)
    members = y + rng.normal(size=(N_MEMBERS, N_POINTS))
    labels = rng.integers(0, 3, size=(N_MEMBERS, N_POINTS))
    classes = rng.integers(0, 3, size=N_POINTS)
    probabilities = rng.dirichlet(np.ones(3), size=(N_MEMBERS, N_POINTS))
    counts = bagwise.resample(N_POINTS, N_MEMBERS, rng=1).counts
    little = bagwise.resample(400, N_MEMBERS, scheme="little_bags", group_size=4, fraction=0.2,
                              rng=2).counts
    replicates = y + rng.normal(size=(3, 8, N_POINTS))
    return dict(y=y, members=members, labels=labels, classes=classes,
                probabilities=probabilities, counts=counts, little=little,
                replicates=replicates)


CALLS = {
    "decompose": lambda d, p: bagwise.decompose(d["members"], d["y"], progress=p).ensemble_loss,
    "size_curve": lambda d, p: bagwise.size_curve(d["members"], d["y"], progress=p).curve,
    "correlation": lambda d, p: bagwise.correlation(d["members"], d["y"], matrix=True,
                                                    progress=p).residual_correlation,
    "diversity": lambda d, p: bagwise.diversity(d["labels"], d["classes"], n_classes=3,
                                                progress=p).disagreement,
    "out_of_bag": lambda d, p: bagwise.out_of_bag(d["members"], d["counts"], d["y"],
                                                  progress=p).prediction,
    "replicate_spread": lambda d, p: bagwise.replicate_spread(d["replicates"], d["y"],
                                                              progress=p).between,
    "aggregate": lambda d, p: bagwise.aggregate(d["probabilities"], progress=p),
    "vote_fractions": lambda d, p: bagwise.vote_fractions(d["labels"], n_classes=3, progress=p),
    "count_gram": lambda d, p: bagwise.count_gram(d["counts"], jackknife=True, progress=p).gram,
    "prediction_variance_ij": lambda d, p: bagwise.prediction_variance(
        d["members"][:, :500], d["counts"], progress=p).variance,
    "prediction_variance_jackknife": lambda d, p: bagwise.prediction_variance(
        d["members"][:, :500], d["counts"], method="jackknife", progress=p).variance,
    "prediction_variance_little_bags": lambda d, p: bagwise.prediction_variance(
        d["members"], d["little"], method="little_bags", group_size=4, progress=p).variance,
    "gram_prediction_variance": lambda d, p: bagwise.count_gram(d["counts"]).prediction_variance(
        d["members"], progress=p).variance,
    "spread": lambda d, p: bagwise.spread(d["members"][:, :500], d["counts"], progress=p).between,
    "prediction_interval": lambda d, p: bagwise.prediction_interval(
        d["members"][:, :300], d["counts"], d["members"], d["y"], progress=p).lower,
    "prediction_set": lambda d, p: bagwise.prediction_interval(
        d["probabilities"][:, :300], d["counts"], d["probabilities"], d["classes"],
        progress=p).sets,
    "diagnose": lambda d, p: bagwise.diagnose(d["members"], d["y"], counts=d["counts"],
                                              progress=p).decomposition.ensemble_loss,
}


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
@pytest.mark.parametrize("name", sorted(CALLS))
def test_a_callable_hears_monotone_progress_ending_at_total(data, name):
    recorder = Recorder()
    with_progress = CALLS[name](data, recorder)
    recorder.check()
    np.testing.assert_array_equal(with_progress, CALLS[name](data, False))


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
@pytest.mark.parametrize("name", ["decompose", "count_gram", "diagnose", "prediction_interval"])
def test_progress_true_draws_a_tqdm_bar_on_stderr(data, name, capsys):
    pytest.importorskip("tqdm")
    CALLS[name](data, True)
    err = capsys.readouterr().err
    assert "100%" in err, err      # tqdm's bar at its end


@pytest.mark.parametrize("name", ["decompose", "count_gram", "diagnose", "spread",
                                  "prediction_interval"])
@pytest.mark.parametrize("bad", ["yes", 1.5, [1]])
def test_a_bad_progress_is_refused_by_name(data, name, bad):
    with pytest.raises(TypeError, match="^`progress`"):
        CALLS[name](data, bad)


def test_a_raising_callable_stops_the_call_and_its_exception_comes_through(data):
    class Stop(Exception):
        pass

    def stop(done, total):
        raise Stop

    with pytest.raises(Stop):
        bagwise.count_gram(data["counts"], progress=stop)


@pytest.mark.parametrize("learner", ["tree", "linear", "neighbors", "wrapped"])
def test_estimator_predictions_report_through_the_estimators_progress(learner):
    rng = np.random.default_rng(3)
    x = rng.normal(size=(300, 4))
    chosen = DecisionTreeRegressor(max_depth=3) if learner == "wrapped" else learner
    bag = bagwise.BagRegressor(chosen, n_members=6, random_state=0).fit(x, x[:, 0])
    points = rng.normal(size=(5_000, 4))
    plain = bag.member_predictions(points), bag.predict(points), bag.out_of_bag_predictions()
    for method, args, expected in [("member_predictions", (points,), plain[0]),
                                   ("predict", (points,), plain[1]),
                                   ("out_of_bag_predictions", (), plain[2])]:
        recorder = Recorder()
        bag.set_params(progress=recorder)
        np.testing.assert_array_equal(getattr(bag, method)(*args), expected)
        recorder.check()
        bag.set_params(progress=False)


def test_classifier_probabilities_report_through_the_estimators_progress():
    rng = np.random.default_rng(4)
    x = rng.normal(size=(300, 4))
    bag = bagwise.BagClassifier("tree", n_members=6, random_state=0).fit(x, x[:, 0] > 0)
    recorder = Recorder()
    bag.set_params(progress=recorder)
    bag.predict_proba(x)
    recorder.check()


@pytest.mark.filterwarnings("ignore::bagwise.BagwiseWarning")
def test_compare_learners_reports_every_learner():
    rng = np.random.default_rng(5)
    x = rng.normal(size=(200, 3))
    y = x[:, 0] + rng.normal(size=200)
    recorder = Recorder()
    bagwise.compare_learners(x, y, ["linear", "tree"], n_members=8, folds=3,
                             progress=recorder)
    assert recorder.check() >= 4          # each learner's fit and verdict


def test_a_lazy_input_reports_the_chunks_done(data):
    da = pytest.importorskip("dask.array")
    members = da.from_array(data["members"], chunks=(N_MEMBERS, 2_000))
    recorder = Recorder()
    lazy = bagwise.decompose(members, data["y"], progress=recorder)
    recorder.check()
    assert recorder.seen[-1] == (5, 5)                   # 9,000 points in chunks of 2,000
    assert lazy.ensemble_loss == pytest.approx(
        bagwise.decompose(data["members"], data["y"]).ensemble_loss, rel=1e-12)
