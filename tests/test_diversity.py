"""Classifier diversity (Kuncheva & Whitaker 2003): checks against straightforward numpy
written here, sklearn.metrics.cohen_kappa_score, numpy.corrcoef, statsmodels' Fleiss kappa,
the identities between the measures, real members of a scikit-learn BaggingClassifier on a
bundled open dataset, streaming from memory-mapped files, thread counts and bad input."""

from __future__ import annotations

import json
import math
import pickle

import numpy as np
import pytest
import sklearn.datasets
from sklearn.ensemble import BaggingClassifier
from sklearn.metrics import cohen_kappa_score
from sklearn.model_selection import train_test_split
from statsmodels.stats.inter_rater import fleiss_kappa

import bagwise

PAIRWISE = ("yule_q", "correct_correlation", "disagreement", "double_fault", "kappa")
SCALARS = ("mean_yule_q", "mean_correct_correlation", "mean_disagreement", "mean_double_fault",
           "mean_kappa", "entropy", "kohavi_wolpert", "interrater_kappa", "difficulty",
           "generalized_diversity", "coincident_failure")


# -- member predictions ---------------------------------------------------------------------

def random_labels(members=7, n=500, classes=3, seed=0):
    """Members right with member-specific accuracy, else a uniformly random class."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    accuracy = rng.uniform(0.4, 0.8, size=(members, 1))
    right = rng.random(size=(members, n)) < accuracy
    noise = rng.integers(0, classes, size=(members, n))
    return np.where(right, y, noise).astype(np.int64), y


def bagging_members(seed=0):
    """Label predictions of the members of a scikit-learn BaggingClassifier (decision trees
    on half the features) on held-out rows of the breast-cancer data."""
    # bundled open dataset: sklearn.datasets.load_breast_cancer
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.4, random_state=seed)
    bag = BaggingClassifier(n_estimators=12, max_features=0.5, max_samples=0.5,
                            random_state=seed).fit(X_train, y_train)
    # sklearn.ensemble.BaggingClassifier: estimators_ are fitted on estimators_features_
    # columns and predict class indices into classes_ (here 0/1, the original labels)
    labels = np.stack([est.predict(X_test[:, feats]) for est, feats
                       in zip(bag.estimators_, bag.estimators_features_)]).astype(np.int64)
    return labels, y_test.astype(np.int64)


# -- independent references (straightforward numpy from the definitions) -------------------

def reference_counts(labels, y):
    """The 2x2 tables of every pair, (N11, N10, N01, N00) as M x M integer matrices."""
    c = (labels == y).astype(np.int64)
    w = 1 - c
    return c @ c.T, c @ w.T, w @ c.T, w @ w.T


def reference_pairwise(labels, y, n_classes):
    # Kuncheva & Whitaker 2003, pairwise measures from the 2x2 table (from memory);
    # Cohen 1960 kappa between the labels
    n = y.size
    n11, n10, n01, n00 = (t.astype(np.float64) for t in reference_counts(labels, y))
    with np.errstate(divide="ignore", invalid="ignore"):
        q = (n11 * n00 - n01 * n10) / (n11 * n00 + n01 * n10)
        rho = (n11 * n00 - n01 * n10) / np.sqrt((n11 + n10) * (n01 + n00) * (n11 + n01) * (n10 + n00))
        onehot = np.eye(n_classes)[labels]                          # M x n x K
        theta1 = np.einsum("ipc,jpc->ij", onehot, onehot) / n
        shares = onehot.mean(axis=1)                                # M x K
        theta2 = shares @ shares.T
        kappa = (theta1 - theta2) / (1 - theta2)
    out = {"yule_q": q, "correct_correlation": rho, "disagreement": (n01 + n10) / n,
           "double_fault": n00 / n, "kappa": kappa}
    error = 1 - (labels == y).mean(axis=1)
    for name, diagonal in (("yule_q", 1.0), ("correct_correlation", 1.0), ("kappa", 1.0),
                           ("disagreement", 0.0), ("double_fault", error)):
        np.fill_diagonal(out[name], diagonal)
    return out


def reference_non_pairwise(labels, y):
    # Kuncheva & Whitaker 2003, non-pairwise measures from their definitions (from memory)
    m = labels.shape[0]
    correct = (labels == y).sum(axis=0)                             # l at every point
    failing = m - correct
    p = np.bincount(failing, minlength=m + 1) / y.size              # p_i, i members fail
    i = np.arange(m + 1)
    p1 = np.sum(i / m * p)
    p2 = np.sum(i * (i - 1) / (m * (m - 1)) * p)
    cfd = 0.0 if p[0] == 1 else np.sum((m - i[1:]) / (m - 1) * p[1:]) / (1 - p[0])
    mean_accuracy = correct.mean() / m
    return {
        "entropy": np.mean(np.minimum(correct, m - correct)) / (m - math.ceil(m / 2)),
        "kohavi_wolpert": np.mean(correct * (m - correct)) / m**2,
        "interrater_kappa": 1 - np.mean(correct * (m - correct))
        / (m * (m - 1) * mean_accuracy * (1 - mean_accuracy)),
        "difficulty": np.var(correct / m),                          # population variance
        "generalized_diversity": 1 - p2 / p1,
        "coincident_failure": cfd,
        "correct_tally": np.bincount(correct, minlength=m + 1),
    }


def assert_same(a, b):
    """Every attribute equal, exactly (NaN equal to NaN)."""
    for name in PAIRWISE + ("accuracy", "redundancy", "correct_tally"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    for name in SCALARS:
        x, y = getattr(a, name), getattr(b, name)
        assert x == y or (math.isnan(x) and math.isnan(y)), name
    assert (a.n_members, a.n_points) == (b.n_members, b.n_points)


CASES = [pytest.param(lambda s=s: random_labels(seed=s) + (3,), id=f"random-seed{s}")
         for s in (0, 1, 2)] + [pytest.param(lambda: bagging_members() + (2,), id="bagging")]


# -- pairwise measures ----------------------------------------------------------------------

@pytest.mark.parametrize("case", CASES)
def test_pair_tables_equal_numpy_counts(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    n = y.size
    n11, n10, n01, n00 = reference_counts(labels, y)
    # the 2x2 table recovered from the results: N00 = DF n, N01 + N10 = dis n,
    # N11 = n - N00 - (N01 + N10), N10 = a_i - N11 (common practice: the table's margins)
    got_n00 = np.rint(d.double_fault * n).astype(np.int64)
    got_n11 = n - got_n00 - np.rint(d.disagreement * n).astype(np.int64)
    got_n10 = np.rint(d.accuracy * n).astype(np.int64)[:, None] - got_n11
    off = ~np.eye(d.n_members, dtype=bool)
    np.testing.assert_array_equal(got_n00[off], n00[off])
    np.testing.assert_array_equal(got_n11[off], n11[off])
    np.testing.assert_array_equal(got_n10[off], n10[off])
    np.testing.assert_array_equal(got_n10.T[off], n01[off])
    # reference: numpy mean of the 0/1 correct vectors
    np.testing.assert_allclose(d.accuracy, (labels == y).mean(axis=1), rtol=0, atol=1e-15)


@pytest.mark.parametrize("case", CASES)
def test_pairwise_measures_equal_numpy_definitions(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    ref = reference_pairwise(labels, y, k)
    for name in PAIRWISE:
        # Kuncheva & Whitaker 2003 (from memory), straightforward numpy above
        np.testing.assert_allclose(getattr(d, name), ref[name], rtol=1e-12, atol=1e-14,
                                   err_msg=name)
        upper = ref[name][np.triu_indices(d.n_members, 1)]
        assert getattr(d, f"mean_{name}") == pytest.approx(np.nanmean(upper), rel=1e-12, abs=1e-15)
    # redundancy: a member's mean disagreement with the others (common practice)
    np.testing.assert_allclose(d.redundancy, ref["disagreement"].sum(axis=1) / (d.n_members - 1),
                               rtol=1e-12)


@pytest.mark.parametrize("case", CASES)
def test_kappa_equals_sklearn_cohen_kappa_for_every_pair(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    for i in range(d.n_members):
        for j in range(i + 1, d.n_members):
            # reference: sklearn.metrics.cohen_kappa_score (Cohen 1960)
            expected = cohen_kappa_score(labels[i], labels[j])
            assert d.kappa[i, j] == pytest.approx(expected, rel=1e-12, abs=1e-14)
            assert d.kappa[j, i] == d.kappa[i, j]


@pytest.mark.parametrize("case", CASES)
def test_correct_correlation_is_the_phi_coefficient_of_the_correct_vectors(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    # reference: numpy.corrcoef of the 0/1 correct vectors (Pearson's r of two binary
    # variables is the phi coefficient of their 2x2 table)
    expected = np.corrcoef((labels == y).astype(np.float64))
    np.testing.assert_allclose(d.correct_correlation, expected, rtol=1e-12, atol=1e-14)


# -- non-pairwise measures ------------------------------------------------------------------

@pytest.mark.parametrize("case", CASES)
def test_non_pairwise_measures_equal_numpy_definitions(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    ref = reference_non_pairwise(labels, y)
    for name in ("entropy", "kohavi_wolpert", "interrater_kappa", "difficulty",
                 "generalized_diversity", "coincident_failure"):
        # Kuncheva & Whitaker 2003 (from memory), straightforward numpy above
        assert getattr(d, name) == pytest.approx(ref[name], rel=1e-12, abs=1e-15), name
    np.testing.assert_array_equal(d.correct_tally, ref["correct_tally"])
    assert d.correct_tally.dtype == np.int64 and d.correct_tally.shape == (d.n_members + 1,)


@pytest.mark.parametrize("case", CASES)
def test_interrater_kappa_equals_statsmodels_fleiss_kappa(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    m = d.n_members
    correct = (labels == y).sum(axis=0)
    table = np.column_stack([correct, m - correct])
    # Fleiss' kappa with the two categories right/wrong and M raters per point:
    #   P_p  = (l^2 + (M-l)^2 - M) / (M (M-1)) = 1 - 2 l (M-l) / (M (M-1))
    #          (since l^2 + (M-l)^2 = M^2 - 2 l (M-l)),
    #   Pbar = 1 - 2 sum_p l (M-l) / (n M (M-1)),
    #   P_e  = pbar^2 + (1-pbar)^2 = 1 - 2 pbar (1-pbar),
    #   kappa = (Pbar - P_e)/(1 - P_e) = 1 - sum_p l (M-l) / (n M (M-1) pbar (1-pbar)),
    # which is Kuncheva & Whitaker's interrater agreement.
    # reference: statsmodels.stats.inter_rater.fleiss_kappa
    assert d.interrater_kappa == pytest.approx(fleiss_kappa(table), rel=1e-12)


@pytest.mark.parametrize("case", CASES)
def test_identities_between_measures(case):
    labels, y, k = case()
    d = bagwise.diversity(labels, y, n_classes=k)
    m = d.n_members
    pbar = float(np.mean(d.accuracy))
    # Kuncheva & Whitaker 2003 (from memory). At a point with l members right, l (M - l)
    # pairs i < j have one member right and one wrong, so
    # sum_{i<j} dis_ij = (1/n) sum_p l (M - l) and
    #   mean dis = 2 sum_p l (M-l) / (n M (M-1)).
    # Then KW = sum_p l (M-l) / (n M^2) = ((M-1)/(2M)) mean dis, and
    #   kappa = 1 - sum_p l (M-l) / (n M (M-1) pbar (1-pbar)) = 1 - mean dis / (2 pbar (1-pbar)).
    assert d.kohavi_wolpert == pytest.approx((m - 1) / (2 * m) * d.mean_disagreement, rel=0, abs=1e-12)
    assert d.interrater_kappa == pytest.approx(1 - d.mean_disagreement / (2 * pbar * (1 - pbar)),
                                               rel=0, abs=1e-12)


def test_hand_computed_example():
    # 3 members x 4 points worked by hand (see the Rust test of the same example)
    members = np.array([[0, 1, 0, 0], [0, 0, 0, 1], [1, 1, 1, 1]])
    d = bagwise.diversity(members, np.array([0, 1, 0, 1]))
    # pair (0, 1): N11 = 2, N10 = N01 = 1, N00 = 0 -> Q = -1, rho = -1/3; labels agree at
    # 2 of 4 points, chance agreement (3*3 + 1*1)/16 -> kappa = (1/2 - 5/8)/(3/8) = -1/3
    assert d.yule_q[0, 1] == -1.0
    assert d.correct_correlation[0, 1] == pytest.approx(-1 / 3, rel=1e-15)
    assert d.kappa[0, 1] == pytest.approx(-1 / 3, rel=1e-15)
    assert d.double_fault[2, 2] == 0.5
    np.testing.assert_array_equal(d.correct_tally, [0, 0, 4, 0])


# -- streams, layouts, n_jobs, probabilities -------------------------------------------------

def test_stream_over_chunks_and_memory_map_equals_in_memory(tmp_path):
    labels, y = random_labels(members=7, n=10_000, seed=3)
    whole = bagwise.diversity(labels, y, n_classes=3)
    np.save(tmp_path / "members.npy", labels)
    mapped = np.load(tmp_path / "members.npy", mmap_mode="r")
    stream = bagwise.diversity_stream(n_classes=3)
    for start, stop in [(0, 1), (1, 4096), (4096, 4097), (4097, 10_000)]:
        assert stream.update(mapped[:, start:stop], y[start:stop]) is stream
    # common practice: integer counts merge exactly, so chunked = in memory to the last bit
    assert_same(stream.result(), whole)


def test_stream_merge_of_two_halves_equals_the_whole_and_pickles():
    labels, y = random_labels(members=6, n=2_000, seed=10)
    whole = bagwise.diversity(labels, y, n_classes=3)
    first = bagwise.diversity_stream(n_classes=3).update(labels[:, :700], y[:700])
    second = bagwise.diversity_stream(n_classes=3).update(labels[:, 700:], y[700:])
    second = pickle.loads(pickle.dumps(second))
    assert first.merge(second) is first
    # common practice: integer counts add exactly, so the merge equals the whole bit for bit
    assert_same(first.result(), whole)
    resumed = pickle.loads(pickle.dumps(bagwise.diversity_stream(n_classes=3).update(
        labels[:, :700], y[:700])))
    assert_same(resumed.update(labels[:, 700:], y[700:]).result(), whole)
    assert_same(bagwise.diversity_stream(n_classes=3).merge(first).result(), whole)
    assert first.merge(bagwise.diversity_stream(n_classes=3)) is first
    assert "6 members" in repr(first)
    with pytest.raises(ValueError, match=r"^`other`: has 2 classes"):
        first.merge(bagwise.diversity_stream(n_classes=2))
    with pytest.raises(ValueError, match=r"^`other`: has 3 members"):
        first.merge(bagwise.diversity_stream(n_classes=3).update(labels[:3], y))
    with pytest.raises(TypeError, match=r"^`other`"):
        first.merge(None)


def test_core_state_rejects_corrupt_bytes():
    labels, y = random_labels(members=4, n=100, seed=11)
    state = bagwise._core.DiversityAccumulator(4, 3)
    state.update(labels, y)
    data = state.to_bytes()
    assert bagwise._core.DiversityAccumulator.from_bytes(data).n_points == 100
    with pytest.raises(ValueError, match=r"^`data`"):
        bagwise._core.DiversityAccumulator.from_bytes(data[:-2])
    with pytest.raises(ValueError, match=r"^`data`"):
        bagwise._core.DiversityAccumulator.from_bytes(b"\x09" + data[1:])


def test_thread_count_does_not_change_the_result():
    labels, y = random_labels(members=13, n=9_000, classes=5, seed=4)
    one = bagwise.diversity(labels, y, n_jobs=1)
    two = bagwise.diversity(labels, y, n_jobs=2)
    assert_same(one, two)


def test_layouts_and_integer_dtypes_give_the_same_result():
    labels, y = random_labels(members=6, n=800, seed=5)
    base = bagwise.diversity(labels, y, n_classes=3)
    wide = np.zeros((12, 1600), dtype=np.int64)
    wide[::2, ::2] = labels
    assert_same(bagwise.diversity(wide[::2, ::2], y[::-1][::-1], n_classes=3), base)
    assert_same(bagwise.diversity(np.asfortranarray(labels), y, n_classes=3), base)
    assert_same(bagwise.diversity(labels.astype(np.uint8), y.astype(np.int32), n_classes=3), base)
    # negative strides: the points in reverse order give the same counts
    assert_same(bagwise.diversity(labels[:, ::-1], y[::-1], n_classes=3), base)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_probabilities_equal_their_argmax_labels(dtype):
    rng = np.random.default_rng(6)
    y = rng.integers(0, 4, size=700)
    logits = rng.normal(size=(5, 700, 4)) + 1.2 * np.eye(4)[y]
    p = np.exp(logits)
    p = (p / p.sum(axis=2, keepdims=True)).astype(dtype)
    p[:, :50] = np.array([0.4, 0.1, 0.4, 0.1], dtype=dtype)       # ties between classes 0, 2
    p[:, 50:60] = np.array([0.1, 0.45, 0.0, 0.45], dtype=dtype)   # ties between classes 1, 3
    # reference: numpy.argmax returns the first (lowest) index among ties, the rule of
    # bagwise.vote_fractions
    labels = np.argmax(p, axis=2)
    assert_same(bagwise.diversity(p, y), bagwise.diversity(labels, y, n_classes=4))
    # any strides: every other point of a larger array
    big = np.zeros((5, 1400, 4), dtype=dtype)
    big[:, ::2] = p
    assert_same(bagwise.diversity(big[:, ::2], y), bagwise.diversity(labels, y, n_classes=4))


def test_classification_bag_diversity_equals_the_function_on_its_member_labels():
    # bundled open dataset: sklearn.datasets.load_breast_cancer
    X, y = sklearn.datasets.load_breast_cancer(return_X_y=True)
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.3, random_state=0)
    bag = bagwise.BagClassifier(learner="tree", n_members=15, random_state=0).fit(X_train, y_train)
    d = bag.diversity(X_test, y_test)
    # member labels: argmax of every member's class probabilities (numpy.argmax)
    labels = np.argmax(bag.member_predictions(X_test), axis=2)
    assert_same(d, bagwise.diversity(labels, y_test, n_classes=2))
    assert d.n_members == 15 and d.n_points == y_test.size


# -- undefined measures and bad input ---------------------------------------------------------

def test_members_always_right_give_nan_with_warnings():
    y = np.array([0, 1, 2, 1, 0])
    members = np.stack([y, y])
    with pytest.warns(bagwise.BagwiseWarning) as record:
        d = bagwise.diversity(members, y)
    messages = " | ".join(str(w.message) for w in record)
    for measure in ("Yule's Q", "correlation", "interrater agreement kappa",
                    "generalized diversity"):
        assert measure in messages
    assert len(record) == 4
    # N11 N00 + N01 N10 = 5*0 + 0*0 = 0: Q undefined by its definition (Kuncheva & Whitaker 2003)
    assert math.isnan(d.yule_q[0, 1]) and math.isnan(d.mean_yule_q)
    assert math.isnan(d.correct_correlation[0, 1]) and math.isnan(d.interrater_kappa)
    assert math.isnan(d.generalized_diversity)
    # identical labels: Cohen's kappa is 1 (reference: sklearn.metrics.cohen_kappa_score)
    assert d.kappa[0, 1] == pytest.approx(cohen_kappa_score(y, y))
    assert d.coincident_failure == 0.0 and d.mean_disagreement == 0.0
    assert d.summary()["mean_yule_q"] is None


def test_undefined_pairs_are_left_out_of_the_mean():
    rng = np.random.default_rng(7)
    y = rng.integers(0, 2, size=200)
    members = np.where(rng.random(size=(4, 200)) < 0.7, y, 1 - y)
    members[3] = y                                       # member 3 is always right
    with pytest.warns(bagwise.BagwiseWarning) as record:
        d = bagwise.diversity(members, y)
    messages = sorted(str(w.message) for w in record)
    assert len(messages) == 2
    assert "Yule's Q is undefined" in messages[0] and "for 3 of 6 pairs" in messages[0]
    assert "the correct correlation is undefined" in messages[1] and "for 3 of 6 pairs" in messages[1]
    ref = reference_pairwise(members, y, 2)["yule_q"]
    upper = ref[np.triu_indices(4, 1)]
    assert np.isnan(upper).sum() == 3
    # reference: numpy.nanmean over the defined pairs
    assert d.mean_yule_q == pytest.approx(np.nanmean(upper), rel=1e-12)


@pytest.mark.parametrize(("members", "y", "kwargs", "error", "match"), [
    (np.zeros((3, 4)), np.zeros(4, dtype=int), {}, TypeError, "need class predictions"),
    (np.zeros((3, 4, 2), dtype=np.float16), np.zeros(4, dtype=int), {}, TypeError, "float32"),
    (np.zeros((3, 4), dtype=bool), np.zeros(4, dtype=int), {}, TypeError, "dtype"),
    (np.zeros((1, 4), dtype=int), np.zeros(4, dtype=int), {}, ValueError, "at least 2"),
    (np.zeros((3, 0), dtype=int), np.zeros(0, dtype=int), {}, ValueError, "empty"),
    (np.zeros(4, dtype=int), np.zeros(4, dtype=int), {}, ValueError, "shape"),
    (np.full((3, 4), -1), np.zeros(4, dtype=int), {}, ValueError, "class indices"),
    (np.full((3, 4), 5), np.zeros(4, dtype=int), {"n_classes": 3}, ValueError, "class indices"),
    (np.full((3, 4, 2), np.nan), np.zeros(4, dtype=int), {}, ValueError, "NaN"),
])
def test_bad_members_name_the_argument(members, y, kwargs, error, match):
    with pytest.raises(error, match=rf"^`members`: .*{match}"):
        bagwise.diversity(members, y, **kwargs)


@pytest.mark.parametrize(("y", "kwargs", "error", "match", "name"), [
    (np.zeros(3, dtype=int), {}, ValueError, "has 3 values", "y"),
    (np.zeros(4), {}, TypeError, "integers", "y"),
    (np.zeros((4, 1), dtype=int), {}, ValueError, "1-D", "y"),
    (np.array([0, 1, 2, -1]), {}, ValueError, "class indices", "y"),
    (np.array([0, 1, 2, 3]), {"n_classes": 2}, ValueError, "class indices", "y"),
    (np.zeros(4, dtype=int), {"n_classes": 0}, ValueError, "at least 1", "n_classes"),
    (np.zeros(4, dtype=int), {"n_classes": 2.5}, TypeError, "integer", "n_classes"),
    (np.zeros(4, dtype=int), {"n_jobs": 0}, ValueError, "at least 1", "n_jobs"),
])
def test_bad_targets_and_options_name_the_argument(y, kwargs, error, match, name):
    members = np.zeros((3, 4), dtype=int)
    with pytest.raises(error, match=rf"^`{name}`: .*{match}"):
        bagwise.diversity(members, y, **kwargs)


def test_probabilities_with_the_wrong_number_of_classes():
    p = np.full((3, 4, 2), 0.5)
    with pytest.raises(ValueError, match=r"^`n_classes`: is 3 but `members` has 2 classes"):
        bagwise.diversity(p, np.zeros(4, dtype=int), n_classes=3)


def test_stream_checks_its_chunks():
    stream = bagwise.diversity_stream(n_classes=2)
    with pytest.raises(ValueError, match=r"^`members`: no points"):
        stream.result()
    stream.update(np.zeros((3, 4), dtype=int), np.zeros(4, dtype=int))
    with pytest.raises(ValueError, match=r"^`members`: this chunk has 2 members"):
        stream.update(np.zeros((2, 4), dtype=int), np.zeros(4, dtype=int))
    with pytest.raises(ValueError, match=r"^`members`: .*class indices"):
        stream.update(np.full((3, 4), 2), np.zeros(4, dtype=int))
    with pytest.warns(bagwise.BagwiseWarning):                   # every member always right
        assert stream.result().n_points == 4             # failed chunks added nothing
    with pytest.raises(TypeError, match=r"^`n_classes`"):
        bagwise.diversity_stream(n_classes=None)


# -- the result object ------------------------------------------------------------------------

def test_redundant_pairs_summary_frame_and_display():
    labels, y = random_labels(members=5, n=300, seed=8)
    labels[4] = labels[1]                                 # a duplicated member
    labels[3, :150] = labels[0, :150]
    d = bagwise.diversity(labels, y)
    pairs = d.redundant_pairs(top=3)
    assert pairs[0] == (1, 4, 0.0)
    # reference: numpy.lexsort of the upper-triangle disagreements, ties by indices
    a, b = np.triu_indices(5, 1)
    values = d.disagreement[a, b]
    order = np.lexsort((b, a, values))[:3]
    assert pairs == [(int(a[k]), int(b[k]), float(values[k])) for k in order]
    assert len(d.redundant_pairs()) == 10
    summary = d.summary()
    json.dumps(summary)
    assert summary["kohavi_wolpert"] == d.kohavi_wolpert and summary["n_members"] == 5
    frame = d.to_frame()
    assert list(frame.columns) == ["member_a", "member_b", *PAIRWISE]
    assert len(frame) == 10
    np.testing.assert_array_equal(frame["kappa"], d.kappa[a, b])
    assert "Diversity" in repr(d) and "Kohavi-Wolpert" in repr(d)
    assert "<table" in d._repr_html_()
    with pytest.raises(AttributeError):
        d.entropy = 0.0
    with pytest.raises(ValueError):
        d.kappa[0, 1] = 0.0
    assert_same(pickle.loads(pickle.dumps(d)), d)


def test_html_display_never_raises():
    labels, y = random_labels(members=3, n=50, seed=9)
    d = bagwise.diversity(labels, y)
    object.__setattr__(d, "accuracy", None)               # a broken object still renders
    assert d._repr_html_().startswith("<pre>")


def test_a_state_too_large_to_allocate_is_a_memory_error():
    # 2^28 members need two (2^28)^2-cell u64 pair tables: the allocation must fail as a
    # MemoryError naming the argument, not abort the interpreter.
    with pytest.raises(MemoryError, match=r"^`members`: needs \d+ bytes"):
        bagwise._core.DiversityAccumulator(1 << 28, 2)
