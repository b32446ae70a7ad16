"""Ctrl-C stops every family of long calls within the one bound, and leaves things usable.

One child process per family (see `_interrupt.ctrl_c`): its call is sized to run for many
seconds, the signal comes 0.5 s into it, and after the KeyboardInterrupt the child calls
again on a small input (the objects are usable) and, for the streams, checks that the
interrupted update left the state as it was. The fit and the resampling have their own
Ctrl-C tests in test_ensemble.py, test_tree.py and test_resampling.py, on the same bound.
"""

from __future__ import annotations

import sys

import pytest
from _interrupt import STOPS_WITHIN, ctrl_c

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")


def test_ctrl_c_stops_tree_prediction_and_the_bag_predicts_after():
    # The tiled tree prediction (member groups x blocks of points): 1,000 trees at 600,000
    # points are 6e8 walks, many seconds in a development build.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(0)
        x = rng.normal(size=(1_000, 5))
        bag = bagwise.BagRegressor("tree", n_members=1_000, max_depth=7).fit(x, x[:, 0])
        points = rng.normal(size=(600_000, 5))
    """
    then = """
        small = bag.predict(x[:50])
        one = bag.member_predictions(x[:50])
        print(bool(np.allclose(small, one.mean(axis=0))))
    """
    # The core model's own mean (bag.predict averages member_predictions, whose output is
    # members x points: too large at this size).
    out, latency = ctrl_c(setup, "bag._model.predict(points)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "True", out


def test_ctrl_c_stops_a_neighbors_fit_while_it_reads_the_bags():
    # A neighbors model keeps every member's bag: 1,500 members on 200,000 rows are about
    # 3 GB of row indices and weights, seconds of work that were once read before the core
    # call, holding the GIL and deaf to Ctrl-C.
    setup = """
        import numpy as np, bagwise
        x = np.random.default_rng(0).normal(size=(200_000, 4))
        y = x.sum(axis=1)
        counts = bagwise.resample(200_000, 1_500, rng=0).counts
        fit = bagwise._core.NeighborsEnsemble.fit
    """
    then = """
        small = fit(x[:100], y[:100], np.ones((3, 100), dtype=np.uint8), task="regression")
        print(small.n_members)
    """
    out, latency = ctrl_c(setup, 'fit(x, y, counts, task="regression")', then, after=0.3)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "3", out


def test_ctrl_c_stops_the_diagnostics_and_they_run_after():
    # `diagnose` runs every section (decomposition, size curve, correlation, ...) one after
    # the other, repeated: about a second per call on 200 members x 100,000 points.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(1)
        y = rng.normal(size=100_000).astype(np.float32)
        members = (y + rng.normal(size=(200, 100_000))).astype(np.float32)
    """
    then = """
        d = bagwise.diagnose(members[:20, :200], y[:200])
        c = bagwise.correlation(members[:20, :200], y[:200], matrix=True)
        print(d.decomposition.n_members, c.residual_correlation.shape)
    """
    out, latency = ctrl_c(setup, "for _ in range(100): bagwise.diagnose(members, y)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "20 (20, 20)", out


def test_ctrl_c_stops_the_correlation_matrix():
    # O(members^2 x points): 500 members at 60,000 points are 7.5e9 products.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(2)
        y = rng.normal(size=60_000).astype(np.float32)
        members = (y + rng.normal(size=(500, 60_000))).astype(np.float32)
    """
    then = """
        print(bagwise.correlation(members[:5, :50], y[:50], matrix=True).n_points)
    """
    out, latency = ctrl_c(setup, "bagwise.correlation(members, y, matrix=True)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "50", out


def test_ctrl_c_stops_the_count_gram_and_the_variance():
    # The count Gram with the jackknife's out-of-bag Gram: O(members^2 x rows), 1,200
    # members of 30,000 rows; then the variance at points, O(members^2 x points).
    setup = """
        import numpy as np, bagwise
        counts = np.random.default_rng(0).poisson(1.0, size=(1_200, 30_000)).astype(np.uint8)
        small = bagwise.resample(50, 10, rng=1).counts
        members = np.random.default_rng(3).normal(size=(10, 30))
    """
    then = """
        v = bagwise.prediction_variance(members, small, method="jackknife")
        print(v.variance.shape)
    """
    out, latency = ctrl_c(setup, "bagwise.count_gram(counts, jackknife=True)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "(30,)", out

    setup = """
        import numpy as np, bagwise
        counts = bagwise.resample(300, 1_500, rng=0).counts
        gram = bagwise.count_gram(counts)
        members = np.random.default_rng(4).normal(size=(1_500, 20_000)).astype(np.float32)
    """
    then = """
        print(gram.prediction_variance(members[:, :40]).variance.shape)
    """
    out, latency = ctrl_c(setup, "gram.prediction_variance(members)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "(40,)", out


def test_ctrl_c_stops_a_prediction_interval():
    # The jackknife+ ranks n_rows bounds at every point: 20,000 points x 40,000 rows.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(5)
        counts = bagwise.resample(40_000, 60, rng=0).counts
        y_train = rng.normal(size=40_000)
        train = y_train + rng.normal(size=(60, 40_000))
        members = rng.normal(size=(60, 20_000))
    """
    then = """
        small = bagwise.prediction_interval(members[:, :10], counts, train, y_train)
        print(small.lower.shape)
    """
    call = "bagwise.prediction_interval(members, counts, train, y_train)"
    out, latency = ctrl_c(setup, call, then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "(10,)", out


def test_ctrl_c_in_a_stream_update_keeps_the_previous_state():
    # A size-curve stream with many member orders: one big chunk is O(orders x members x
    # points). After the interrupted update the stream holds exactly its first chunk.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(6)
        y = rng.normal(size=600_000).astype(np.float32)
        members = (y + rng.normal(size=(100, 600_000))).astype(np.float32)
        stream = bagwise.size_curve_stream(orders=150, rng=0)
        stream.update(members[:, :1_000], y[:1_000])
        alone = bagwise.size_curve(members[:, :1_000], y[:1_000], orders=150, rng=0)
        gram = bagwise.count_gram_stream()
        gram.update(bagwise.resample(50, 10, rng=2).counts)
    """
    then = """
        same = np.array_equal(stream.result().curve, alone.curve)
        stream.update(members[:, 1_000:1_100], y[1_000:1_100])
        both = bagwise.size_curve(members[:, :1_100], y[:1_100], orders=150, rng=0)
        print(same, bool(np.allclose(stream.result().curve, both.curve, rtol=1e-12)))
    """
    out, latency = ctrl_c(setup, "stream.update(members, y)", then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "True True", out


def test_ctrl_c_stops_the_verdicts_cross_validated_fits():
    # `compare_learners` fits each ensemble, then the verdict's K single-model fits
    # (Python loops around core fits): a deep tree on 300,000 rows per fold.
    setup = """
        import numpy as np, bagwise
        rng = np.random.default_rng(7)
        x = rng.normal(size=(300_000, 6))
        y = x[:, 0] + rng.normal(size=300_000)
    """
    then = """
        small = bagwise.compare_learners(x[:200], y[:200], ["linear"], n_members=10, folds=3)
        print(small.learners)
    """
    call = 'bagwise.compare_learners(x, y, ["tree"], n_members=200, folds=10)'
    out, latency = ctrl_c(setup, call, then)
    assert latency < STOPS_WITHIN, latency
    assert out.strip() == "('linear',)", out
