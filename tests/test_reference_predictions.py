"""Same seeds, same bits: every benchmark ensemble refitted with the seeds of
tests/data/make_reference_predictions.py gives the member predictions, and the resampler the
counts, saved in tests/data/reference_predictions.npz before the speed work. The refits run
on one thread (the file was written with two), so the check also covers thread counts."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

DATA = Path(__file__).parent / "data"


def _script():
    spec = importlib.util.spec_from_file_location(
        "make_reference_predictions", DATA / "make_reference_predictions.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


SCRIPT = _script()
SAVED = dict(np.load(DATA / "reference_predictions.npz"))


def _first_difference(saved, now):
    where = np.argwhere(saved != now)
    at = tuple(where[0])
    return f"{len(where)} of {saved.size} values differ; first at {at}: {saved[at]!r} -> {now[at]!r}"


@pytest.fixture(scope="module")
def refitted():
    cases = dict(SCRIPT.tree_cases(n_jobs=1))
    cases.update(SCRIPT.other_cases(n_jobs=1))
    return cases


def test_every_saved_case_is_refitted(refitted):
    fitted = set(refitted) | {f"counts/{name}" for name in SCRIPT.COUNT_CASES}
    assert fitted == set(SAVED)


@pytest.mark.parametrize("case", sorted(k for k in SAVED if not k.startswith("counts/")))
def test_member_predictions_are_unchanged(refitted, case):
    saved, now = SAVED[case], refitted[case]
    assert now.shape == saved.shape
    # Bit for bit (NaN never occurs here): a moved threshold or a changed leaf shows.
    assert np.array_equal(saved.view(np.uint64), now.view(np.uint64)), _first_difference(saved, now)


@pytest.mark.parametrize("n_jobs", [1, 2])
@pytest.mark.parametrize("case", sorted(SCRIPT.COUNT_CASES))
def test_resampling_counts_are_unchanged(case, n_jobs):
    digest = SCRIPT.count_digest(n_jobs, **SCRIPT.COUNT_CASES[case])
    assert digest == str(SAVED[f"counts/{case}"])

