"""Peak memory of a fit and of its checks at 200,000 rows, as a multiple of the design's
size (rows x coefficients doubles), measured by tracemalloc (numpy reports its arrays to
it): deterministic counts of bytes, not timings. Before the long sums went by row blocks,
the refined fit peaked at 11x the design and the checks at 8.7x (15.5x with the White
test's n x 35 auxiliary design of a three-predictor surface). Data invented, fixed seeds.
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest

from xlbridge import checks, fit

ROWS = 200_000


def _peak(fn, *args):
    """(result, peak bytes allocated above the start while fn ran)."""
    tracemalloc.start()
    try:
        start = tracemalloc.get_traced_memory()[0]
        out = fn(*args)
        return out, tracemalloc.get_traced_memory()[1] - start
    finally:
        tracemalloc.stop()


def _quadratic(n):
    rng = np.random.default_rng(7)
    x = rng.uniform(5.0, 120.0, n)
    return 40.0 + 3.1 * x + 0.018 * x**2 + rng.normal(0.0, 6.0, n), x


def _surface(n):
    rng = np.random.default_rng(8)
    x = rng.uniform(0.0, 10.0, (n, 3))
    return 1.0 + x @ [1.0, 2.0, 3.0] + 0.1 * (x**2).sum(axis=1) + rng.normal(0, 1, n), x


@pytest.fixture(scope="module", autouse=True)
def _warm():
    """Import what a fit and its checks load on first use, outside the measurement."""
    y, x = _quadratic(500)
    checks(fit(y, x, 2))


def test_refined_fit_and_its_checks_peak_at_a_few_designs():
    y, x = _quadratic(ROWS)
    res, fit_peak = _peak(fit, y, x, 2)
    assert res.method == "refined"  # the double-double path, the one with the long sums
    design = ROWS * 3 * 8
    assert fit_peak <= 4.5 * design, fit_peak / design
    _, checks_peak = _peak(checks, res)
    assert checks_peak <= 3.5 * design, checks_peak / design


def test_checks_of_a_surface_never_hold_the_white_design():
    """A second-order surface in three predictors: 10 coefficients, and the White test
    regresses on 35 columns (every product of two terms); its auxiliary design alone
    would be 3.5x the model's design."""
    y, x = _surface(ROWS)
    res = fit(y, x, "surface")
    _, peak = _peak(checks, res)
    assert peak <= 1.5 * ROWS * 10 * 8, peak / (ROWS * 10 * 8)
