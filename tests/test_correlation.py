"""Tests of `bagwise.correlation` against independent references (numpy, scikit-learn,
published identities); the source of each check is named beside it."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _members_data import LY, PY, L, P, T, Y, _with, regression

import bagwise


def test_correlation_against_numpy_corrcoef_and_cov():
    t, y = regression(members=25, n=4000)
    r = t - y
    c = bagwise.correlation(t, y, matrix=True)
    off = ~np.eye(25, dtype=bool)
    # numpy.corrcoef / numpy.cov off-diagonal means (rows are members)
    np.testing.assert_allclose(c.mean_residual_correlation, np.corrcoef(r)[off].mean(), rtol=1e-10)
    np.testing.assert_allclose(c.mean_residual_covariance, np.cov(r)[off].mean(), rtol=1e-10)
    np.testing.assert_allclose(c.residual_variance, r.var(axis=1, ddof=1), rtol=1e-12)
    np.testing.assert_allclose(c.mean_residual_variance, r.var(axis=1, ddof=1).mean(), rtol=1e-12)
    np.testing.assert_allclose(c.residual_correlation, np.corrcoef(r), rtol=1e-10, atol=1e-13)
    assert bagwise.correlation(t, y).residual_correlation is None


def test_constant_members_and_one_member_give_nan_with_a_warning():
    t, y = regression(members=6, n=500)
    t[2] = y + 1.5  # constant residual
    with pytest.warns(bagwise.BagwiseWarning, match="constant"):
        c = bagwise.correlation(t, y, matrix=True)
    r = t - y
    with np.errstate(invalid="ignore", divide="ignore"):
        ref = np.corrcoef(r)  # numpy.corrcoef: NaN rows for a constant variable
    keep = np.array([b != 2 for b in range(6)])
    sub = ref[np.ix_(keep, keep)]
    np.testing.assert_allclose(c.mean_residual_correlation, sub[~np.eye(5, dtype=bool)].mean(), rtol=1e-10)
    np.testing.assert_array_equal(c.constant_members, [2])
    assert np.isnan(c.residual_correlation[2]).all() and np.isnan(c.residual_correlation[:, 2]).all()
    with pytest.warns(bagwise.BagwiseWarning, match="single member"):
        one = bagwise.correlation(t[:1], y)
    assert math.isnan(one.mean_residual_correlation) and math.isnan(one.mean_residual_covariance)


def test_display_and_frame():
    t, y = regression(members=8, n=300)
    c = bagwise.correlation(t, y)
    assert "correlation" in repr(c) and c._repr_html_().startswith("<div")
    assert list(c.to_frame().columns) == ["member", "residual_variance", "constant"]


BAD = [
    (bagwise.correlation, (P, PY), {}, "members", TypeError),
    (bagwise.correlation, (L, LY), {}, "members", TypeError),
    (bagwise.correlation, (T, Y), {"matrix": "yes"}, "matrix", TypeError),
    (bagwise.correlation, (_with(T, (2, 2), -np.inf), Y), {}, "members", ValueError),
]


@pytest.mark.parametrize(("fn", "args", "kwargs", "argument", "error"), BAD)
def test_bad_input_names_the_argument(fn, args, kwargs, argument, error):
    with pytest.raises(error, match=f"`{argument}`"):
        fn(*args, **kwargs)
