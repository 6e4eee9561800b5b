"""Scale-safe numerics: least squares is scale-equivariant in y, so scaling y by 10^k must
multiply estimates, standard errors and intervals by 10^k and leave t, p, R^2 and F alone,
over the whole finite range; terms that leave the double range get a SCALE message naming
the term. References: the unscaled fit and statsmodels' OLS/WLS on the unscaled data
(computed independently)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from xlbridge import ModelError, fit
from xlbridge.engine.errors import ModelErrorKind

POWERS = (-300, -200, -160, 0, 160, 200, 290)
SCALE_TOL = 1e-12


def _data(seed: int, n: int = 20):
    rng = np.random.default_rng(seed)
    x = np.linspace(1, 10, n) + rng.uniform(-0.2, 0.2, n)
    y = 3 + 0.5 * x + 0.02 * x**2 + rng.normal(0, 0.3, n)  # all y in (1, 10): 10^k y normal
    return x, y


def _close(a, b, what):
    np.testing.assert_allclose(a, b, rtol=SCALE_TOL, atol=0, err_msg=what)


def _assert_equivariant(res, base, k):
    f = 10.0**k
    _close(res.estimates / f, base.estimates, f"estimates at 1e{k}")
    _close(res.std_errors / f, base.std_errors, f"standard errors at 1e{k}")
    _close([c.ci_lower / f for c in res.coefficients],
           [c.ci_lower for c in base.coefficients], f"interval at 1e{k}")
    _close([c.t_ratio for c in res.coefficients], [c.t_ratio for c in base.coefficients],
           f"t at 1e{k}")
    _close([c.p_value for c in res.coefficients], [c.p_value for c in base.coefficients],
           f"p at 1e{k}")
    for name in ("r2", "adj_r2", "f_stat", "f_p_value", "pred_r2"):
        _close(getattr(res.stats, name), getattr(base.stats, name), f"{name} at 1e{k}")
    _close(res.stats.rmse / f, base.stats.rmse, f"rmse at 1e{k}")
    p, pb = res.predict([4.5]), base.predict([4.5])
    _close((p.pi_upper - p.pi_lower) / f, pb.pi_upper - pb.pi_lower, f"interval at 1e{k}")


@pytest.mark.parametrize("k", POWERS)
@pytest.mark.parametrize("opts", [{}, {"weights": "w"}, {"se": "hc3"}])
def test_scaling_y_by_powers_of_ten(k, opts):
    x, y = _data(1)
    if opts.get("weights") == "w":
        opts = {"weights": np.linspace(1, 3, len(y))}
    base = fit(y, x, 2, **opts)
    _assert_equivariant(fit(y * 10.0**k, x, 2, **opts), base, k)


@pytest.mark.parametrize("k", POWERS)
def test_scaled_fit_against_statsmodels(k):
    """statsmodels OLS on the unscaled data: the scaled fit's t, p and R^2 agree."""
    x, y = _data(2)
    ref = sm.OLS(y, np.column_stack([np.ones_like(x), x, x * x])).fit()
    res = fit(y * 10.0**k, x, 2)
    np.testing.assert_allclose(res.estimates / 10.0**k, ref.params, rtol=1e-9)
    np.testing.assert_allclose(res.std_errors / 10.0**k, ref.bse, rtol=1e-9)
    np.testing.assert_allclose([c.t_ratio for c in res.coefficients], ref.tvalues, rtol=1e-9)
    np.testing.assert_allclose([c.p_value for c in res.coefficients], ref.pvalues, rtol=1e-8)
    np.testing.assert_allclose(res.stats.r2, ref.rsquared, rtol=1e-12)


@settings(max_examples=30, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 10_000), st.sampled_from(POWERS), st.integers(1, 3))
def test_scale_invariance_property(seed, k, degree):
    x, y = _data(seed, 15)
    _assert_equivariant(fit(y * 10.0**k, x, degree), fit(y, x, degree), k)


@pytest.mark.parametrize("k", (-100, 100))
def test_percent_error_is_scale_invariant(k):
    x, y = _data(3)
    base = fit(y, x, 1, error="percent")
    res = fit(y * 10.0**k, x, 1, error="percent")
    _close(res.estimates / 10.0**k, base.estimates, "estimates")
    _close([c.t_ratio for c in res.coefficients], [c.t_ratio for c in base.coefficients], "t")
    _close(res.stats.rmse, base.stats.rmse, "percent rmse (a fraction)")


def test_overflowing_term_names_the_term():
    x, y = _data(4)
    with pytest.raises(ModelError) as err:
        fit(y, x * 3e259 / 10, "x*x*x")
    assert err.value.kind is ModelErrorKind.SCALE
    assert "x^3" in str(err.value)


def test_huge_used_column_is_a_scale_error_not_aliased():
    x, y = _data(5)
    for col in (np.linspace(1e307, 1.7e308, len(y)), np.where(x > 5, 1e308, x)):
        with pytest.raises(ModelError) as err:
            fit(y, col, 1)
        assert err.value.kind is ModelErrorKind.SCALE


def test_unused_columns_never_matter():
    x, y = _data(6)
    base = fit(y, np.column_stack([x, x]), "x1, x1^2")
    for big in (9.4e307, 1.7e308, -1.7e308):
        other = np.linspace(big / 2, big, len(y))
        res = fit(y, np.column_stack([x, other]), "x1, x1^2")
        np.testing.assert_array_equal(res.estimates, base.estimates)
        np.testing.assert_array_equal(res.std_errors, base.std_errors)


def test_wald_f_with_a_singular_covariance():
    """A covariance with a zero-variance direction (found by the fuzz): the Wald F is
    b' C^+ b / q (pseudo-inverse, hand computed) when b lies in C's range, else infinite."""
    from xlbridge.engine.inference import wald_f

    c = np.array([[2.0, 0.0], [0.0, 0.0]])
    assert wald_f(np.array([1.0, 0.0]), c, [0, 1]) == pytest.approx(0.25)
    assert wald_f(np.array([1.0, 2.0]), c, [0, 1]) == np.inf
