"""Generated bad input on every public call (hypothesis): one argument of a valid baseline
replaced at a time by an edge or bad value; every case is accepted with finite numbers (or
documented NaN with its BagwiseWarning, and the numbers of the plain float64 copy when only
the layout changed) or refused with a documented exception naming the argument. The table of
calls, the replacements and the contract are in `_properties.py`; the profiles in
`conftest.py`."""

from __future__ import annotations

import pytest
from _properties import all_calls, attempt, run_case
from hypothesis import given, settings

CALLS = all_calls()


@pytest.mark.parametrize("call", CALLS, ids=[call.name for call in CALLS])
def test_contract(call):
    examples = max(1, round(settings().max_examples * call.weight))

    @settings(max_examples=examples)
    @given(call.cases())
    def case(generated):
        argument, bad = generated
        run_case(call, argument, bad)

    case()


@pytest.mark.parametrize("call", CALLS, ids=[call.name for call in CALLS])
def test_baseline_is_accepted(call):
    """Every call's baseline is valid, so each generated case changes one thing only."""
    assert attempt(call, call.base()).kind == "accepted"
