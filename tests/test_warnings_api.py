"""The shared warning helper and the members-needed edge behaviour."""

import math
import warnings

import pytest

import bagwise
from bagwise import _results, _warnings


def test_warning_is_attributed_to_the_callers_line():
    with warnings.catch_warnings(record=True) as records:
        warnings.simplefilter("always")
        _warnings.warn("`members`: something is rough")
    (record,) = records
    assert record.category is bagwise.BagwiseWarning
    assert issubclass(record.category, UserWarning)
    # the frame that called into bagwise is this test file, not bagwise/_warnings.py
    assert record.filename == __file__


def test_once_per_call_collapses_repeats_and_keeps_distinct_ones():
    with warnings.catch_warnings(record=True) as records:
        warnings.simplefilter("always")
        with _warnings.once_per_call():
            for _ in range(3):
                _warnings.warn("`y`: repeated")
            _warnings.warn("`y`: another")
    assert [str(r.message) for r in records] == ["`y`: repeated", "`y`: another"]
    assert all(r.filename == __file__ for r in records)


@pytest.mark.parametrize("tolerance", [0, -0.1, 1, 1.5, math.nan])
def test_tolerance_outside_the_open_unit_interval_is_refused(tolerance):
    with pytest.raises(ValueError, match="^`tolerance`"):
        _results.check_tolerance(tolerance)


def test_tolerance_of_the_wrong_type_is_refused():
    with pytest.raises(TypeError, match="^`tolerance`"):
        _results.check_tolerance("small")


def test_members_for_is_the_smallest_size_meeting_the_bound():
    # excess/M <= tol * limit  <=>  M >= excess / (tol * limit); 2 / (0.01 * 1) = 200
    assert _results.members_for(2.0, 1.0, 0.01, "never") == 200
    assert _results.members_for(2.0001, 1.0, 0.01, "never") == 201
    # no excess: one member already meets any bound
    assert _results.members_for(0.0, 1.0, 0.01, "never") == 1


@pytest.mark.parametrize("excess, limit", [(1.0, 0.0), (1.0, -1.0), (math.nan, 1.0), (1.0, math.inf)])
def test_members_for_is_nan_with_one_warning_when_not_estimable(excess, limit):
    with pytest.warns(bagwise.BagwiseWarning, match="not estimable: the limit is zero") as records:
        value = _results.members_for(excess, limit, 0.01, "the limit is zero")
    assert math.isnan(value)
    assert len(records) == 1
