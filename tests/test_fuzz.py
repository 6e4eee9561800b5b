"""Deterministic fuzz of every worksheet function (tests/fuzzcases.py): seeded random
arguments in every value shape a runtime passes (floats, ints, flat lists, scalars, None,
error text, dates, numbers from 5e-324 to 1.79e308), random models and options. Every
answer is a 2-D list with no internal error and no NaN or infinite cell, within the
per-call limit. scripts/fuzz_worksheet.py runs as many calls as asked."""

from __future__ import annotations

import warnings

import pytest

from xlbridge import worksheet

from .fuzzcases import CALL_LIMIT, run

CALLS = 2000


@pytest.fixture(scope="module")
def tally():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # numpy's overflow warnings are not the subject
        return run(CALLS, seed=2026)


def test_every_function_is_fuzzed(tally):
    assert set(tally.calls) == set(worksheet.FUNCTIONS)
    assert sum(tally.calls.values()) == CALLS


def test_no_internal_error_no_nan_cell_no_slow_call(tally):
    assert tally.problems == []
    assert tally.slowest < CALL_LIMIT
