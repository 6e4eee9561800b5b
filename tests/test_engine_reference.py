"""Cross-checks of the engine against statsmodels (computed independently here, on the raw
design), brute-force leave-one-out, and textbook identities."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.outliers_influence import variance_inflation_factor

from xlbridge import ModelError, fit


def _cost_data(seed=11, n=60):
    """Invented: installed cost (k$) against rated capacity (kW), curved, with noise."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(20, 400, n)
    y = 35 + 0.9 * x - 0.0011 * x**2 + rng.normal(0, 6, n)
    return x, y


def _raw_design(x, degree):
    return np.column_stack([x**j for j in range(degree + 1)])


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_against_statsmodels_ols(degree):
    """Estimates, SEs, t, p, CIs, F, AIC/BIC, R^2 and covariance (source: statsmodels OLS)."""
    x, y = _cost_data()
    r = fit(y, x, degree, level=0.9)
    ref = sm.OLS(y, _raw_design(x, degree)).fit()
    np.testing.assert_allclose(r.estimates, ref.params, rtol=1e-9)
    np.testing.assert_allclose(r.std_errors, ref.bse, rtol=1e-9)
    np.testing.assert_allclose([c.t_ratio for c in r.coefficients], ref.tvalues, rtol=1e-9)
    np.testing.assert_allclose([c.p_value for c in r.coefficients], ref.pvalues, rtol=1e-7,
                               atol=1e-300)
    ci = ref.conf_int(alpha=0.1)
    np.testing.assert_allclose([c.ci_lower for c in r.coefficients], ci[:, 0], rtol=1e-9)
    np.testing.assert_allclose([c.ci_upper for c in r.coefficients], ci[:, 1], rtol=1e-9)
    np.testing.assert_allclose(r.cov, ref.cov_params(), rtol=1e-8)
    s = r.stats
    np.testing.assert_allclose(
        [s.r2, s.adj_r2, s.f_stat, s.aic, s.bic, s.sse, s.rmse],
        [ref.rsquared, ref.rsquared_adj, ref.fvalue, ref.aic, ref.bic, ref.ssr,
         np.sqrt(ref.scale)], rtol=1e-9)
    np.testing.assert_allclose(s.f_p_value, ref.f_pvalue, rtol=1e-6, atol=1e-300)
    assert s.df_resid == ref.df_resid and s.n_params == degree + 1
    np.testing.assert_allclose(s.rmse_percent, 100 * np.sqrt(ref.scale) / y.mean(), rtol=1e-12)
    # source: statsmodels condition_number (sqrt of the eigenvalue ratio of X'X)
    np.testing.assert_allclose(s.cond_number_raw, ref.condition_number, rtol=1e-6)


def test_no_intercept_matches_statsmodels_uncentered():
    """Without an intercept R^2 and F use the uncentered total (source: statsmodels OLS with
    no constant, which does the same)."""
    x, y = _cost_data(3)
    r = fit(y, x, 2, intercept=False)
    ref = sm.OLS(y, np.column_stack([x, x**2])).fit()
    np.testing.assert_allclose(r.estimates, ref.params, rtol=1e-9)
    np.testing.assert_allclose([r.stats.r2, r.stats.f_stat, r.stats.aic],
                               [ref.rsquared, ref.fvalue, ref.aic], rtol=1e-9)


def test_surface_against_statsmodels_and_vif():
    """Second-order surface in two predictors: estimates vs statsmodels OLS; raw VIFs vs
    statsmodels variance_inflation_factor on the raw design; centered VIFs vs the same
    function on the design built from centered predictors."""
    rng = np.random.default_rng(5)
    age = rng.uniform(1, 15, 80)
    hours = rng.uniform(0.5, 12, 80)  # thousands of operating hours
    price = 90 - 6 * age - 2 * hours + 0.2 * age**2 + 0.1 * age * hours + rng.normal(0, 2, 80)
    r = fit(price, np.column_stack([age, hours]), "surface", names=("age", "hours"))
    assert r.terms == ("intercept", "age", "hours", "age^2", "hours^2", "age*hours")

    def design(a, h):
        return np.column_stack([np.ones_like(a), a, h, a**2, h**2, a * h])

    raw = design(age, hours)
    ref = sm.OLS(price, raw).fit()
    np.testing.assert_allclose(r.estimates, ref.params, rtol=1e-8)
    np.testing.assert_allclose(r.std_errors, ref.bse, rtol=1e-8)
    vif_ref = [variance_inflation_factor(raw, j) for j in range(1, 6)]
    np.testing.assert_allclose([c.vif for c in r.coefficients[1:]], vif_ref, rtol=1e-6)
    cen = design(age - age.mean(), hours - hours.mean())
    vifc_ref = [variance_inflation_factor(cen, j) for j in range(1, 6)]
    np.testing.assert_allclose([c.vif_centered for c in r.coefficients[1:]], vifc_ref,
                               rtol=1e-6)
    assert np.isnan(r.coefficients[0].vif)
    assert r.stats.max_vif == pytest.approx(max(vif_ref), rel=1e-6)


def test_centered_vif_is_one_for_symmetric_x():
    """For x symmetric about its mean, x - mean and (x - mean)^2 are uncorrelated, so the
    centered VIFs of a quadratic are exactly 1 (textbook identity), while raw VIFs are large."""
    x = np.linspace(100, 200, 41)
    y = 3 + 0.5 * x + 0.01 * x**2 + np.sin(x)
    r = fit(y, x, 2)
    np.testing.assert_allclose([c.vif_centered for c in r.coefficients[1:]], 1.0, atol=1e-10)
    assert min(c.vif for c in r.coefficients[1:]) > 100


def test_press_by_leave_one_out():
    """PRESS equals the sum of squared leave-one-out prediction errors (brute force loop)."""
    x, y = _cost_data(7, 30)
    r = fit(y, x, 2)
    errs = []
    for i in range(len(y)):
        keep = np.arange(len(y)) != i
        b = np.linalg.lstsq(_raw_design(x[keep], 2), y[keep], rcond=None)[0]
        errs.append(y[i] - _raw_design(x[i : i + 1], 2) @ b)
    press = float(np.sum(np.square(errs)))
    assert r.stats.press == pytest.approx(press, rel=1e-9)
    sst = np.sum((y - y.mean()) ** 2)
    assert r.stats.pred_r2 == pytest.approx(1 - press / sst, rel=1e-9)


def test_top_term_p_value_is_nested_f_test():
    """Curvature test: partial F of the highest-order terms equals the F test comparing the
    full and reduced fits (source: statsmodels compare_f_test)."""
    rng = np.random.default_rng(2)
    a, b = rng.uniform(0, 10, 50), rng.uniform(0, 5, 50)
    y = 1 + a + b + 0.05 * a * b + rng.normal(0, 1, 50)
    r = fit(y, np.column_stack([a, b]), "surface")
    full = sm.OLS(y, np.column_stack([np.ones(50), a, b, a**2, b**2, a * b])).fit()
    reduced = sm.OLS(y, np.column_stack([np.ones(50), a, b])).fit()
    _, p, _ = full.compare_f_test(reduced)
    assert r.stats.top_term_p_value == pytest.approx(p, rel=1e-7)
    q = fit(y, a, 3)
    ref = sm.OLS(y, _raw_design(a, 3)).fit()
    assert q.stats.top_term_p_value == pytest.approx(ref.pvalues[3], rel=1e-7)


def test_weights_match_statsmodels_wls():
    """Weighted fit (source: statsmodels WLS, including its llf with weights in AIC)."""
    x, y = _cost_data(9)
    w = 1.0 / (1 + x / 100) ** 2
    r = fit(y, x, 2, weights=w)
    ref = sm.WLS(y, _raw_design(x, 2), weights=w).fit()
    np.testing.assert_allclose(r.estimates, ref.params, rtol=1e-9)
    np.testing.assert_allclose(r.std_errors, ref.bse, rtol=1e-9)
    np.testing.assert_allclose([r.stats.r2, r.stats.aic, r.stats.bic],
                               [ref.rsquared, ref.aic, ref.bic], rtol=1e-9)


def test_predict_matches_statsmodels_intervals():
    """Mean CI and prediction interval at new points (source: statsmodels get_prediction)."""
    x, y = _cost_data(4)
    r = fit(y, x, 2, level=0.95)
    new = np.array([x.min() + 0.5, 150.0, x.max() - 0.5, 600.0])
    pr = r.predict(new)
    ref = sm.OLS(y, _raw_design(x, 2)).fit().get_prediction(_raw_design(new, 2))
    frame = ref.summary_frame(alpha=0.05)
    np.testing.assert_allclose(pr.fitted, frame["mean"], rtol=1e-10)
    np.testing.assert_allclose(pr.ci_lower, frame["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(pr.ci_upper, frame["mean_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(pr.pi_lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(pr.pi_upper, frame["obs_ci_upper"], rtol=1e-9)
    assert pr.extrapolated.tolist() == [False, False, False, True]
    # data leverages: hat-matrix diagonal (source: statsmodels OLSInfluence)
    from statsmodels.stats.outliers_influence import OLSInfluence

    h = OLSInfluence(sm.OLS(y, _raw_design(x, 2)).fit()).hat_matrix_diag
    np.testing.assert_allclose(r.leverage, h, rtol=1e-9)


def test_leverage_flag_inside_ranges_for_two_predictors():
    """With 2 predictors a point inside both ranges can still extrapolate: the corner of an
    L-shaped design (leverage above the largest data leverage)."""
    a = np.r_[np.linspace(0, 10, 20), np.zeros(20)]
    b = np.r_[np.zeros(20), np.linspace(0, 10, 20)]
    rng = np.random.default_rng(0)
    y = a + b + rng.normal(0, 0.1, 40)
    r = fit(y, np.column_stack([a, b]), "linear")
    pr = r.predict(np.array([[10.0, 10.0], [1.0, 0.0]]))
    assert pr.extrapolated.tolist() == [True, False]


def test_equation_reproduces_fitted_values():
    """The equation text, evaluated with Python floats, gives the fitted values."""
    x, y = _cost_data(8)
    r = fit(y, x, 3)
    rhs = r.equation().split("=", 1)[1].replace("^", "**")
    vals = [eval(rhs, {"x": v}) for v in x[:5]]  # noqa: S307 - our own generated text
    np.testing.assert_allclose(vals, r.fitted[:5], rtol=1e-12)
    assert r.equation().startswith("y = ")


def test_to_dict_keys():
    x, y = _cost_data()
    d = fit(y, x, 2).to_dict()
    assert set(d) == {"model", "coefficients", "stats", "unit_stats", "relevant_range",
                      "notes"}
    assert set(d["model"]) == {"spec", "terms", "intercept", "n_used", "n_dropped"}
    assert set(d["coefficients"][0]) == {"term", "estimate", "std_error", "t_ratio", "p_value",
                                         "ci_lower", "ci_upper", "vif", "vif_centered"}
    assert set(d["stats"]) == {
        "n_used", "n_params", "df_resid", "sse", "sst", "r2", "adj_r2", "rmse", "rmse_percent",
        "f_stat", "f_p_value", "aic", "bic", "press", "pred_r2", "cond_number", "cond_number_raw",
        "max_vif", "top_term_p_value", "fit_space"}
    assert set(d["unit_stats"]) == {"fit_space", "n", "n_params", "df", "see", "cv", "r2_unit",
                                    "bias_percent", "spe"}
    import json

    json.dumps(d, allow_nan=False)


def test_nan_rows_dropped_and_counted():
    x, y = _cost_data()
    y2 = y.copy()
    y2[[3, 10]] = np.nan
    x2 = x.copy()
    x2[20] = np.nan
    r = fit(y2, x2, 2)
    keep = ~(np.isnan(y2) | np.isnan(x2))
    ref = fit(y[keep], x[keep], 2)
    assert r.n_dropped == 3 and r.stats.n_used == len(y) - 3
    np.testing.assert_array_equal(r.estimates, ref.estimates)


@pytest.mark.parametrize(
    "y, x, model, message",
    [
        ([1, 2, 3, 4, 5, 6], [1, 1, 2, 2, 3, 3], 4,
         "degree 4 needs at least 5 distinct x values; found 3"),
        ([1, 2, 3], [1, 2, 3], 2, "needs at least 4 rows"),
        ([1, 2, 3], [1, 2], 1, "y has 3 rows but x has 2"),
        ([1, 2, 3, 4], [1, 2, 3, 4], 11, "degree must be 1 to 10"),
        ([1, 2, 3, 4], [1, 2, 3, 4], "cubic spline", "unknown predictor"),
    ],
)
def test_bad_input_messages(y, x, model, message):
    with pytest.raises(ModelError, match=message):
        fit(y, x, model)


def test_aliased_term_is_named():
    """An exactly collinear term is reported by name, not dropped."""
    rng = np.random.default_rng(1)
    a = rng.uniform(0, 1, 30)
    b = 2 * a + 1
    with pytest.raises(ModelError, match="term b is aliased"):
        fit(a + rng.normal(size=30), np.column_stack([a, b]), "a, b", names=("a", "b"))
