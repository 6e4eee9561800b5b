"""Property tests of the engine (hypothesis) and checks of the exact arithmetic."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from xlbridge import ModelError, fit
from xlbridge.engine.ddarith import dd_total
from xlbridge.engine.exact import bareiss_solve, dyadic

FAST = settings(max_examples=25, suppress_health_check=[HealthCheck.too_slow])


def _data(seed: int, n: int = 25):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 9, n)
    y = 4 - 2 * x + 0.7 * x**2 + rng.normal(0, 1, n)
    return x, y


@FAST
@given(seed=st.integers(0, 10_000), degree=st.integers(1, 4), perm_seed=st.integers(0, 999))
def test_row_order_does_not_change_the_fit(seed, degree, perm_seed):
    x, y = _data(seed)
    perm = np.random.default_rng(perm_seed).permutation(len(y))
    a, b = fit(y, x, degree), fit(y[perm], x[perm], degree)
    np.testing.assert_allclose(a.estimates, b.estimates, rtol=1e-12, atol=1e-12 * np.max(
        np.abs(a.estimates)))
    np.testing.assert_allclose(a.std_errors, b.std_errors, rtol=1e-11)
    assert a.stats.r2 == pytest.approx(b.stats.r2, rel=1e-13)


@FAST
@given(seed=st.integers(0, 10_000), degree=st.integers(1, 4), k=st.integers(-6, 6))
def test_scaling_x_scales_coefficients_by_powers_of_ten(seed, degree, k):
    """x -> x * 10^k maps the coefficient of x^j to coefficient / 10^(k j), to ~12 digits.
    x * 10^k is itself rounded, so a coefficient that is zero within its standard error
    (here the cubic term of a quadratic) is compared on the scale of that error."""
    x, y = _data(seed)
    a, b = fit(y, x, degree), fit(y, x * 10.0**k, degree)
    scale = 10.0 ** (k * np.arange(degree + 1))
    expect = a.estimates / scale
    np.testing.assert_allclose(b.estimates, expect, rtol=1e-12,
                               atol=1e-9 * float(np.min(a.std_errors / scale)))
    np.testing.assert_allclose(b.std_errors, a.std_errors / 10.0 ** (k * np.arange(degree + 1)),
                               rtol=1e-11)


@FAST
@given(seed=st.integers(0, 10_000), c=st.floats(-5, 5).filter(lambda v: abs(v) > 1e-3))
def test_exactly_collinear_column_is_reported(seed, c):
    rng = np.random.default_rng(seed)
    a = rng.uniform(0, 10, 20)
    b = rng.uniform(0, 10, 20)
    x = np.column_stack([a, b, 3.0 * a - c * b])  # third column = combination of the others
    with pytest.raises(ModelError, match="aliased"):
        fit(rng.normal(size=20), x, "linear")


@FAST
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), min_size=1,
                max_size=30))
def test_dyadic_is_exact(values):
    ints, e = dyadic(np.array(values))
    for v, m in zip(values, ints):
        assert Fraction(v) == Fraction(m) * Fraction(2) ** e


@FAST
@given(st.integers(1, 6), st.integers(0, 10_000))
def test_bareiss_solve_matches_fractions(p, seed):
    rng = np.random.default_rng(seed)
    a = rng.integers(-50, 50, (p, p)).tolist()
    b = rng.integers(-50, 50, (p, 2)).tolist()
    fa = [[Fraction(v) for v in row] for row in a]
    try:
        det, num = bareiss_solve(a, b)
    except ArithmeticError:
        # singular: check with an independent rank computation
        assert np.linalg.matrix_rank(np.array(a, dtype=float)) < p
        return
    x = [[Fraction(v, det) for v in row] for row in num]
    for i in range(p):
        for j in range(2):
            assert sum(fa[i][m] * x[m][j] for m in range(p)) == b[i][j]


def test_wampler_like_exact_fit_has_zero_residual():
    """y an exact polynomial in integer x: the exact path reports zero error, R^2 = 1."""
    x = np.arange(21.0)
    y = 1 + x + x**2 + x**3 + x**4 + x**5
    r = fit(y, x, 5)
    assert r.stats.sse == 0.0 and r.stats.rmse == 0.0 and r.stats.r2 == 1.0
    assert r.estimates.tolist() == [1.0] * 6


def test_large_well_conditioned_fit_stays_in_double_precision():
    """Big, well-conditioned data take a fast path (no exact arithmetic) and still match a
    long-double reference solve of the centered normal equations to ~12 digits."""
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 1, 50_000)
    y = 1 + 2 * x - 3 * x**2 + rng.normal(0, 0.1, x.size)
    r = fit(y, x, 2)
    assert r.method in ("qr", "cholesky", "refined")
    ref = np.polynomial.polynomial.polyfit(x, y, 2)
    np.testing.assert_allclose(r.estimates, ref, rtol=1e-10)


@FAST
@given(st.lists(st.tuples(st.sampled_from([1e308, -1e308, 1e154, 3e200]),
                          st.floats(-1e3, 1e3)), min_size=1, max_size=3),
       st.integers(1, 3))
def test_numbers_too_large_to_square_get_a_message(big, degree):
    """Huge magnitudes either fit or raise ModelError saying to rescale: never an overflow
    escaping as another exception, never a non-finite estimate."""
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 10, 12)
    y = 1 + x + rng.normal(0, 0.1, 12)
    for i, (v, xv) in enumerate(big):
        y[i], x[i] = v, xv
    try:
        r = fit(y, x, degree)
    except ModelError as exc:
        assert "rescale" in str(exc) or "distinct" in str(exc)
    else:
        assert np.all(np.isfinite(r.estimates))


@settings(max_examples=120, derandomize=True)
@given(st.lists(st.floats(min_value=-1e250, max_value=1e250, allow_nan=False), min_size=0,
                max_size=300),
       st.integers(0, 6))
def test_double_double_total_is_the_correctly_rounded_sum(values, repeat):
    """Property: ``dd_total`` (the unit statistics' sum of long columns) is within one unit
    in the last place of ``math.fsum`` (Python's correctly rounded sum, the reference)
    whenever the terms do not cancel by more than its stated bound; always within that bound
    of the exact sum (``fractions.Fraction``)."""
    a = np.array(values * (repeat + 1), dtype=float)
    got, want = dd_total(a), math.fsum(a)
    exact = sum((Fraction(v) for v in a.tolist()), Fraction(0))
    n, u = max(len(a), 1), 2.0**-53
    bound = (2 + math.log2(n)) * u * abs(float(exact)) + n * u * u * float(np.sum(np.abs(a)))
    if float(np.sum(np.abs(a))) * n < 1e15 * abs(want):
        assert abs(got - want) <= math.ulp(want)
    assert abs(Fraction(got) - exact) <= Fraction(bound) + Fraction(u * abs(want))
