"""Resampling engine: statistical checks against published results and scipy, structure of
stratified / grouped / block draws, reproducibility, and bad input."""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
import textwrap

import numpy as np
import pytest
import scipy.stats
from _interrupt import STOPS_WITHIN, interrupt

import bagwise


def test_out_of_bag_share_matches_efron_tibshirani():
    # Efron & Tibshirani (1993), An Introduction to the Bootstrap: a row is left out of a
    # bootstrap draw with probability (1 - 1/n)^n -> e^-1 ≈ 0.368.
    n, members = 2000, 3000
    share = bagwise.resample(n, members, rng=11).out_of_bag_share()
    expected = (1 - 1 / n) ** n
    se = share.std(ddof=1) / np.sqrt(members)
    assert abs(share.mean() - expected) < 4 * se
    assert abs(expected - np.exp(-1)) < 1e-4


def test_counts_of_one_row_are_binomial():
    # N_i ~ Binomial(n, 1/n) (Efron & Tibshirani 1993); chi-square goodness of fit with
    # scipy.stats.chisquare against scipy.stats.binom probabilities.
    n, members = 50, 20000
    counts = bagwise.resample(n, members, rng=3).counts[:, 7].astype(np.int64)
    top = 4  # pool counts >= 4 so every expected cell is large (common practice: >= 5)
    observed = np.bincount(np.minimum(counts, top), minlength=top + 1)
    probs = scipy.stats.binom.pmf(np.arange(top), n, 1 / n)
    probs = np.append(probs, 1 - probs.sum())
    result = scipy.stats.chisquare(observed, probs * members)
    assert result.pvalue > 1e-3, (observed, probs * members)


def test_counts_are_multinomial_across_rows():
    # Cov(N_i, N_j) = -1/n and Var N_i = 1 - 1/n for a multinomial draw (Efron & Tibshirani
    # 1993); checked against the sample covariance of many members.
    n, members = 20, 40000
    counts = bagwise.resample(n, members, rng=5).counts.astype(np.float64)
    cov = np.cov(counts, rowvar=False)
    off = cov[~np.eye(n, dtype=bool)]
    assert abs(np.diag(cov).mean() - (1 - 1 / n)) < 0.01
    assert abs(off.mean() + 1 / n) < 0.003


def test_bayesian_weights_have_dirichlet_moments():
    # Rubin (1981): weights / n ~ Dirichlet(1, ..., 1); compare with scipy.stats.dirichlet.
    n, members = 30, 20000
    draw = bagwise.resample(n, members, scheme="bayesian", rng=8)
    share = draw.row_weights / n
    np.testing.assert_allclose(draw.row_weights.sum(axis=1), n, rtol=1e-12)
    alpha = np.ones(n)
    mean, var = scipy.stats.dirichlet.mean(alpha), scipy.stats.dirichlet.var(alpha)
    se_mean = np.sqrt(var / members)
    assert np.all(np.abs(share.mean(axis=0) - mean) < 5 * se_mean)
    # Relative error of a variance estimate of an approximately exponential variable is
    # about sqrt(8 / members) ≈ 0.02 (fourth moment of Exp(1) is 24).
    np.testing.assert_allclose(share.var(axis=0, ddof=1).mean(), var.mean(), rtol=0.02)
    with pytest.raises(ValueError, match="bayesian"):
        _ = draw.counts
    with pytest.raises(ValueError, match="bayesian"):
        _ = draw.out_of_bag


def test_subsample_draws_distinct_rows():
    # Bühlmann & Yu (2002) subagging: round(n * fraction) rows without replacement.
    draw = bagwise.resample(101, 500, scheme="subsample", fraction=0.5, rng=2)
    assert draw.counts.max() == 1
    np.testing.assert_array_equal(draw.counts.sum(axis=1), 51)
    # Every row equally likely: inclusion frequency 51/101 per row (binomial standard error).
    freq = draw.counts.mean(axis=0)
    se = np.sqrt(51 / 101 * 50 / 101 / 500)
    assert np.all(np.abs(freq - 51 / 101) < 5 * se)


def test_stratified_draws_keep_every_stratum_size():
    rng = np.random.default_rng(0)
    labels = rng.choice(np.array(["a", "b", "c"]), size=300, p=[0.6, 0.3, 0.1])
    for scheme, fraction in (("bootstrap", 1.0), ("subsample", 0.6), ("bootstrap", 0.5)):
        draw = bagwise.resample(300, 200, scheme=scheme, fraction=fraction, strata=labels)
        for value in "abc":
            size = (labels == value).sum()
            expected = max(1, round(size * fraction))
            np.testing.assert_array_equal(draw.counts[:, labels == value].sum(axis=1), expected)
        np.testing.assert_array_equal(draw.strata, labels)


def test_grouped_draws_share_counts_within_groups():
    rng = np.random.default_rng(1)
    groups = rng.integers(0, 17, size=400)
    draw = bagwise.resample(400, 300, groups=groups, rng=4)
    for g in np.unique(groups):
        block = draw.counts[:, groups == g]
        assert (block == block[:, :1]).all()
    # Per group, the count is Binomial(G, 1/G) (cluster bootstrap), mean 1.
    first_rows = [np.flatnonzero(groups == g)[0] for g in np.unique(groups)]
    group_counts = draw.counts[:, first_rows]
    np.testing.assert_array_equal(group_counts.sum(axis=1), 17)
    assert abs(draw.out_of_bag_share().mean() - draw.expected_out_of_bag_share()) < 0.02


def test_moving_blocks_are_consecutive_rows():
    # Künsch (1989): blocks of L consecutive rows drawn with replacement until n rows.
    n, length, members = 120, 12, 200
    draw = bagwise.resample(n, members, block_length=length, rng=9)
    starts = draw.block_starts
    assert starts.shape == (members, n // length)
    assert starts.min() >= 0 and starts.max() <= n - length
    rebuilt = np.zeros((members, n), dtype=np.int64)
    for m in range(members):
        for s in starts[m]:
            rebuilt[m, s:s + length] += 1
    np.testing.assert_array_equal(draw.counts, rebuilt)
    np.testing.assert_array_equal(draw.counts.sum(axis=1), n)
    # Starts are uniform on 0..n-L: chi-square against equal frequencies (scipy.stats).
    freq = np.bincount(starts.ravel(), minlength=n - length + 1)
    assert scipy.stats.chisquare(freq).pvalue > 1e-3


def test_moving_blocks_cut_the_last_block():
    draw = bagwise.resample(103, 20, block_length=10, rng=1)
    assert draw.block_starts.shape == (20, 11)
    np.testing.assert_array_equal(draw.counts.sum(axis=1), 103)
    share = bagwise.resample(103, 4000, block_length=10, rng=2).out_of_bag_share()
    assert abs(share.mean() - draw.expected_out_of_bag_share()) < 4 * share.std() / np.sqrt(4000)


def test_members_do_not_change_when_more_are_drawn():
    for kwargs in ({}, {"scheme": "subsample", "fraction": 0.3}, {"block_length": 7},
                   {"groups": np.arange(90) % 9}, {"strata": np.arange(90) % 4}):
        few = bagwise.resample(90, 5, rng=21, **kwargs).counts
        many = bagwise.resample(90, 300, rng=21, **kwargs).counts
        np.testing.assert_array_equal(few, many[:5])
    few = bagwise.resample(90, 5, rng=21, scheme="bayesian").row_weights
    many = bagwise.resample(90, 300, rng=21, scheme="bayesian").row_weights
    np.testing.assert_array_equal(few, many[:5])


def test_results_do_not_depend_on_thread_count():
    one = bagwise.resample(5000, 64, rng=13, n_jobs=1).counts
    two = bagwise.resample(5000, 64, rng=13, n_jobs=2).counts
    np.testing.assert_array_equal(one, two)
    assert not np.array_equal(one, bagwise.resample(5000, 64, rng=14).counts)


@pytest.mark.parametrize("n_jobs", ["1", "2"])
def test_rayon_num_threads_gives_identical_draws(n_jobs, tmp_path):
    code = "import bagwise, sys; sys.stdout.buffer.write(bagwise.resample(3000, 40, rng=5).counts.tobytes())"
    env = {**os.environ, "RAYON_NUM_THREADS": n_jobs}
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, check=True)
    here = bagwise.resample(3000, 40, rng=5).counts.tobytes()
    assert out.stdout == here


def test_counts_use_a_wider_dtype_instead_of_wrapping():
    # 3 rows, 3000 draws: counts near 1000 do not fit uint8.
    draw = bagwise.resample(3, 10, fraction=1000, rng=0)
    assert draw.counts.dtype == np.uint16
    np.testing.assert_array_equal(draw.counts.sum(axis=1, dtype=np.int64), 3000)
    assert bagwise.resample(1000, 3).counts.dtype == np.uint8


def test_row_weights_are_counts_as_floats():
    draw = bagwise.resample(50, 4, rng=1)
    assert draw.row_weights.dtype == np.float64
    np.testing.assert_array_equal(draw.row_weights, draw.counts)
    np.testing.assert_array_equal(draw.out_of_bag, draw.counts == 0)


def test_rng_none_records_the_seed_used():
    draw = bagwise.resample(100, 3, rng=None)
    again = bagwise.resample(100, 3, rng=draw.seed)
    np.testing.assert_array_equal(draw.counts, again.counts)


def test_rng_generator_seeds_with_its_next_integer():
    # SPEC 7: a Generator gives the seed int(rng.integers(2**63)); the result keeps it.
    draw = bagwise.resample(100, 3, rng=np.random.default_rng(7))
    expected = int(np.random.default_rng(7).integers(2**63))
    assert draw.seed == expected
    np.testing.assert_array_equal(draw.counts, bagwise.resample(100, 3, rng=expected).counts)
    generator = np.random.default_rng(7)
    first, second = (bagwise.resample(100, 3, rng=generator) for _ in range(2))
    assert first.seed != second.seed   # the Generator advances


def test_resample_is_a_frozen_result():
    draw = bagwise.resample(40, 6, rng=0)
    assert isinstance(draw, bagwise._results.Result)
    with pytest.raises(AttributeError):
        draw.n_members = 7
    assert "members x rows" in repr(draw) and "6 x 40" in repr(draw)
    assert "Resample" in draw._repr_html_()
    frame = draw.to_frame()
    assert frame["member"].tolist() == list(range(6))
    assert draw.to_frame().shape[0] == draw.n_members


def test_progress_callback_and_interrupt():
    calls = []
    bagwise.resample(100_000, 200, progress=lambda done, total: calls.append((done, total)))
    assert calls and calls[-1] == (200, 200)
    assert all(b[0] > a[0] for a, b in zip(calls, calls[1:]))

    def stop(done, total):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        bagwise.resample(100_000, 200, progress=stop)


def test_progress_bar_with_tqdm(capsys):
    draw = bagwise.resample(10_000, 50, progress=True)
    assert draw.counts.shape == (50, 10_000)
    assert "resampling" in capsys.readouterr().err


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
def test_ctrl_c_stops_a_long_draw_quickly():
    code = textwrap.dedent("""
        import sys, time, bagwise
        print("ready", flush=True)
        start = time.perf_counter()
        try:
            bagwise.resample(1_000_000, 400, fraction=50.0, rng=0)  # ~10 s of work
        except KeyboardInterrupt:
            print(f"interrupted {time.perf_counter() - start:.3f}", flush=True)
    """)
    out, waited = interrupt(code, after=0.5, timeout=30)
    assert out.startswith("interrupted"), out
    assert waited < STOPS_WITHIN, waited


def test_resample_pickles_and_displays():
    draw = bagwise.resample(200, 10, strata=np.arange(200) % 3, rng=2)
    back = pickle.loads(pickle.dumps(draw))
    np.testing.assert_array_equal(back.counts, draw.counts)
    text = repr(draw)
    assert "strata" in text and "out-of-bag share" in text
    html = draw._repr_html_()
    assert html.startswith("<div") and "out-of-bag share" in html
    frame = draw.to_frame()
    assert list(frame.columns) == ["member", "rows_drawn", "distinct_rows", "out_of_bag_share",
                                   "largest_count"]
    np.testing.assert_array_equal(frame["rows_drawn"], 200)
    np.testing.assert_allclose(frame["out_of_bag_share"], draw.out_of_bag.mean(axis=1))
    bayes = bagwise.resample(20, 3, scheme="bayesian").to_frame()
    assert list(bayes.columns) == ["member", "weight_min", "weight_max", "weight_std"]


@pytest.mark.parametrize(
    ("kwargs", "argument", "error"),
    [
        ({"n_rows": 0}, "n_rows", ValueError),
        ({"n_rows": -5}, "n_rows", ValueError),
        ({"n_rows": 10.5}, "n_rows", TypeError),
        ({"n_members": 0}, "n_members", ValueError),
        ({"n_members": True}, "n_members", TypeError),
        ({"scheme": "jackknife"}, "scheme", ValueError),
        ({"fraction": 0.0}, "fraction", ValueError),
        ({"fraction": -1.0}, "fraction", ValueError),
        ({"fraction": float("nan")}, "fraction", ValueError),
        ({"fraction": "half"}, "fraction", TypeError),
        ({"scheme": "subsample", "fraction": 1.5}, "fraction", ValueError),
        ({"scheme": "bayesian", "fraction": 0.5}, "fraction", ValueError),
        ({"strata": np.arange(9)}, "strata", ValueError),
        ({"strata": np.array([0.0, np.nan] * 5)}, "strata", ValueError),
        ({"strata": np.array([None, "a"] * 5, dtype=object)}, "strata", ValueError),
        ({"strata": np.zeros((5, 2))}, "strata", ValueError),
        ({"groups": np.arange(11)}, "groups", ValueError),
        ({"groups": np.array([1.0, np.inf] * 5)}, "groups", ValueError),
        ({"block_length": 0}, "block_length", ValueError),
        ({"block_length": 11}, "block_length", ValueError),
        ({"block_length": 3, "scheme": "subsample", "fraction": 0.5}, "block_length", ValueError),
        ({"block_length": 3, "scheme": "bayesian"}, "block_length", ValueError),
        ({"strata": np.arange(10) % 2, "groups": np.arange(10) % 5}, "strata", ValueError),
        ({"groups": np.arange(10) % 5, "block_length": 2}, "groups", ValueError),
        ({"rng": -1}, "rng", ValueError),
        ({"rng": 2**64}, "rng", ValueError),
        ({"rng": 1.5}, "rng", TypeError),
        ({"n_jobs": 0}, "n_jobs", ValueError),
        ({"progress": "yes"}, "progress", TypeError),
    ],
)
def test_bad_input_names_the_argument(kwargs, argument, error):
    args = {"n_rows": 10, "n_members": 3, **kwargs}
    with pytest.raises(error, match=f"`{argument}`"):
        bagwise.resample(args.pop("n_rows"), args.pop("n_members"), **args)


def test_impossible_allocation_is_a_memory_error():
    with pytest.raises(MemoryError):
        bagwise.resample(10**9, 10**6)


def test_core_errors_name_the_argument():
    # The compiled layer validates too, for callers that bypass the Python wrapper.
    with pytest.raises(ValueError, match="`n_rows`"):
        bagwise._core.Resampler(0, "bootstrap", 1.0)
    with pytest.raises(ValueError, match="`scheme`"):
        bagwise._core.Resampler(5, "nope", 1.0)
    with pytest.raises(ValueError, match="`strata`"):
        bagwise._core.Resampler(3, "bootstrap", 1.0, strata=np.array([0, -1, 2]))
    with pytest.raises(TypeError):
        bagwise._core.Resampler(3, "bootstrap", 1.0, strata=np.array([0.5, 1.0, 2.0]))
    with pytest.raises(ValueError, match="`n_members`"):
        bagwise._core.Resampler(3, "bootstrap", 1.0).counts(0, 0)


def test_bayesian_weights_respect_strata_and_groups():
    # Rubin (1981) weights applied per stratum (each stratum keeps its total) or per group
    # (rows of a group share a weight); totals are exact by construction (common practice).
    labels = np.arange(60) % 4
    strat = bagwise.resample(60, 50, scheme="bayesian", strata=labels, rng=3).row_weights
    for s in range(4):
        np.testing.assert_allclose(strat[:, labels == s].sum(axis=1), 15, rtol=1e-12)
    groups = np.arange(60) // 6
    grouped = bagwise.resample(60, 50, scheme="bayesian", groups=groups, rng=3).row_weights
    np.testing.assert_allclose(grouped.sum(axis=1), 60, rtol=1e-12)
    for g in range(10):
        block = grouped[:, groups == g]
        assert (block == block[:, :1]).all()
