"""Cost-estimating relationships: power/factor/exponential forms by log, MUPE, ZMPE and OLS.

Each check names its outside source: closed forms derived here from each method's definition,
numpy least squares, statsmodels WLS, scipy's SLSQP on the constrained problem as stated,
and the textbook definitions of SEE, CV, SPE and bias (common practice). The data are
invented here with fixed seeds.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize

import xlbridge
from xlbridge.engine import ModelError, ModelErrorKind, fit_cer


def _power_data(n=25, seed=11, k=1, cv=0.12):
    rng = np.random.default_rng(seed)
    x = rng.uniform(5.0, 120.0, (n, k))
    y = 3.5 * np.prod(x ** np.array([0.7, 0.25, 0.1][:k]), axis=1)
    return x, y * (1 + cv * rng.standard_normal(n))


# --- factor form y = a*x: closed forms from the definitions ----------------------------------

def test_factor_closed_forms_of_each_method():
    x, y = _power_data(seed=3)
    x = x[:, 0]
    # OLS in units: d/da sum (y - a x)^2 = 0  =>  a = sum(xy) / sum(x^2)
    a_ols = fit_cer(y, x, "factor", "ols").coefficients[0].estimate
    assert a_ols == pytest.approx(np.sum(x * y) / np.sum(x * x), rel=1e-12)
    # MUPE: fixed point of weighted LS with weights 1/(a x)^2  =>  a = mean(y/x);
    # ZMPE: sum((y - a x)/(a x)) = 0 alone fixes a = mean(y/x)
    for method in ("mupe", "zmpe"):
        a = fit_cer(y, x, "factor", method).coefficients[0].estimate
        assert a == pytest.approx(np.mean(y / x), rel=1e-12), method
    # log least squares: ln a = mean(ln y - ln x)  =>  a = geometric mean of y/x
    a_log = fit_cer(y, x, "factor", "log").coefficients[0].estimate
    assert a_log == pytest.approx(math.exp(np.mean(np.log(y / x))), rel=1e-12)


# --- power form by log: numpy least squares on the logs -----------------------------------

def test_power_log_equals_numpy_lstsq_on_logs():
    x, y = _power_data(k=2, seed=5)
    res = xlbridge.fit(y, x, "power", method="log")
    z = np.column_stack([np.ones(len(y)), np.log(x)])
    ref, *_ = np.linalg.lstsq(z, np.log(y), rcond=None)  # numpy, independently
    est = res.estimates
    assert est[0] == pytest.approx(math.exp(ref[0]), rel=1e-12)
    np.testing.assert_allclose(est[1:], ref[1:], rtol=1e-12)
    # statsmodels OLS on the logs gives the log-space standard errors and intervals
    ols = sm.OLS(np.log(y), z).fit()
    np.testing.assert_allclose([c.std_error for c in res.coefficients[1:]], ols.bse[1:],
                               rtol=1e-10)
    lo, hi = ols.conf_int(0.05)[0]
    assert res.coefficients[0].ci_lower == pytest.approx(math.exp(lo), rel=1e-10)
    assert res.coefficients[0].ci_upper == pytest.approx(math.exp(hi), rel=1e-10)


def test_log_back_transform_reports_both_corrections():
    x, y = _power_data(seed=8)
    res = fit_cer(y, x, "power", "log")
    z = np.column_stack([np.ones(len(y)), np.log(x[:, 0])])
    ref, *_ = np.linalg.lstsq(z, np.log(y), rcond=None)
    e = np.log(y) - z @ ref
    s2 = np.sum(e * e) / (len(y) - 2)
    bt = res.details["back_transform"]
    assert bt["smearing"] == pytest.approx(np.mean(np.exp(e)), rel=1e-12)  # Duan's factor
    assert bt["normal"] == pytest.approx(math.exp(s2 / 2), rel=1e-12)  # lognormal mean
    assert bt["used"] == "smearing"
    np.testing.assert_allclose(res.fitted, np.exp(z @ ref) * bt["smearing"], rtol=1e-12)
    normal = fit_cer(y, x, "power", "log", correction="normal")
    np.testing.assert_allclose(normal.fitted, np.exp(z @ ref) * bt["normal"], rtol=1e-12)
    assert normal.details["back_transform"]["used"] == "normal"
    assert res.details["log_stats"]["fit_space"] == "log"


# --- MUPE: the last iteration is a weighted least-squares fit with weights 1/fitted^2 ---------

@pytest.mark.parametrize("form", ["power", "exponential"])
def test_mupe_last_step_equals_statsmodels_wls(form):
    x, y = _power_data(k=2, seed=21)
    if form == "exponential":
        x = x / 100.0
    res = fit_cer(y, x, form, "mupe")
    a, b = res.estimates[0], res.estimates[1:]
    g = np.log(x) if form == "power" else x
    f = a * np.exp(g @ b)
    jac = np.column_stack([f / a, f[:, None] * g])  # d fitted / d (a, b)
    # Gauss-Newton's working response: its WLS fit returns (a, b) when (a, b) is the fixed point
    work = y - f + jac @ res.estimates
    wls = sm.WLS(work, jac, weights=1.0 / f**2).fit()
    np.testing.assert_allclose(wls.params, res.estimates, rtol=1e-9)
    np.testing.assert_allclose(wls.bse, [c.std_error for c in res.coefficients], rtol=1e-8)
    assert res.details["iterations"] >= 2
    assert "1e-12" in res.details["stop_rule"]
    # at the fixed point the percentage errors (y - f)/f sum to zero (the constant column)
    assert abs(np.sum((y - f) / f)) < 1e-9


def test_a_form_name_needs_its_method_and_a_predictor_may_keep_the_name():
    x, y = _power_data(seed=4)
    with pytest.raises(ModelError, match="give the method"):
        xlbridge.fit(y, x, "power")
    # without method= the name is a term list, as before: y = b0 + b1*power
    res = xlbridge.fit(y, x, "power", names=["power"])
    ref = np.polyfit(x[:, 0], y, 1)  # numpy, independently
    np.testing.assert_allclose(res.estimates, ref[::-1], rtol=1e-10)


def test_mupe_on_a_polynomial_is_the_percent_error_fit():
    x, y = _power_data(seed=4)
    a = xlbridge.fit(y, x, 1, method="mupe")
    b = xlbridge.fit(y, x, 1, error="percent")
    np.testing.assert_allclose(a.estimates, b.estimates, rtol=1e-14)
    with pytest.raises(ModelError) as err:
        xlbridge.fit(y, x, 1, method="zmpe")
    assert err.value.kind == ModelErrorKind.SPEC


# --- ZMPE ---------------------------------------------------------------------------------

def test_zmpe_constraint_holds_and_matches_slsqp():
    x, y = _power_data(k=2, seed=9, cv=0.2)
    res = fit_cer(y, x, "power", "zmpe")
    a, b = res.estimates[0], res.estimates[1:]
    f = a * np.prod(x**b, axis=1)
    assert abs(math.fsum((y - f) / f)) < 1e-12
    assert abs(res.details["sum_percent_errors"]) < 1e-12

    # scipy SLSQP on the problem as stated, from the log fit: same minimiser
    def pct(t):
        ff = t[0] * np.prod(x ** t[1:], axis=1)
        return (y - ff) / ff

    start = fit_cer(y, x, "power", "log").estimates
    ref = minimize(lambda t: np.sum(pct(t) ** 2), start, method="SLSQP",
                   constraints=[{"type": "eq", "fun": lambda t: np.sum(pct(t))}],
                   options={"ftol": 1e-15, "maxiter": 500})
    np.testing.assert_allclose(res.estimates, ref.x, rtol=1e-5)  # SLSQP stops near 1e-6
    assert np.sum(pct(res.estimates) ** 2) <= np.sum(pct(ref.x) ** 2) * (1 + 1e-10)


def test_ols_power_matches_scipy_curve_fit():
    from scipy.optimize import curve_fit

    x, y = _power_data(seed=13)
    res = fit_cer(y, x, "power", "ols")
    p, cov = curve_fit(lambda t, a, b: a * t**b, x[:, 0], y, p0=(3.0, 0.7))
    np.testing.assert_allclose(res.estimates, p, rtol=1e-7)
    np.testing.assert_allclose([c.std_error for c in res.coefficients], np.sqrt(np.diag(cov)),
                               rtol=1e-5)


# --- the result's contract ----------------------------------------------------------------

@pytest.mark.parametrize("method", ["log", "mupe", "zmpe", "ols"])
def test_to_dict_contract(method):
    x, y = _power_data(k=2, seed=2)
    d = xlbridge.fit(y, x, "power", method=method, names=["weight", "power"]).to_dict()
    json.dumps(d, allow_nan=False)
    u = d["unit_stats"]
    assert {"see", "cv", "r2_unit", "bias_percent", "spe"} <= set(u)
    assert u["fit_space"] == "unit"
    assert (u["spe"] is None) == (method == "ols")
    assert [c["name"] for c in d["coefficients"]] == ["a", "b_weight", "b_power"]
    assert d["relevant_range"] == {"weight": [x[:, 0].min(), x[:, 0].max()],
                                   "power": [x[:, 1].min(), x[:, 1].max()]}
    assert d["fit_space"] == ("log" if method == "log" else "unit")
    assert d["intervals_from"]


def test_equation_reproduces_the_fitted_values():
    x, y = _power_data(k=2, seed=6)
    for form in ("power", "exponential"):
        res = fit_cer(y, x / 50, form, "mupe", names=["s", "t"])
        rhs = res.equation().split("=", 1)[1].replace("^", "**")
        vals = [eval(rhs, {"s": a, "t": b, "exp": math.exp}) for a, b in x[:4] / 50]  # noqa: S307
        np.testing.assert_allclose(vals, res.fitted[:4], rtol=1e-12)


# --- unit-space statistics from their definitions -----------------------------------------

def test_see_cv_spe_bias_on_a_hand_table():
    from xlbridge.engine import unit_stats

    # common practice definitions, computed here term by term
    y = [10.0, 20.0, 30.0, 40.0, 50.0]
    f = [12.0, 18.0, 33.0, 37.0, 52.0]
    n, p = 5, 2
    sse = 4 + 4 + 9 + 9 + 4  # 30
    see = math.sqrt(sse / (n - p))  # sqrt(10)
    cv = see / 30.0
    spe = math.sqrt(((-2 / 12) ** 2 + (2 / 18) ** 2 + (-3 / 33) ** 2 + (3 / 37) ** 2
                     + (-2 / 52) ** 2) / (n - p))
    bias = 100 * (2 / 10 - 2 / 20 + 3 / 30 - 3 / 40 + 2 / 50) / n
    r2 = 1 - sse / 1000.0  # sum of squares about the mean 30 is 1000
    s = unit_stats(y, f, p, multiplicative=True)
    assert s.see == pytest.approx(see, rel=1e-15)
    assert s.cv == pytest.approx(cv, rel=1e-15)
    assert s.spe == pytest.approx(spe, rel=1e-14)
    assert s.bias_percent == pytest.approx(bias, rel=1e-14)
    assert s.r2_unit == pytest.approx(r2, rel=1e-15)
    assert unit_stats(y, f, p).to_dict()["spe"] is None


def test_polynomial_fits_carry_unit_stats():
    x, y = _power_data(seed=7)
    plain = xlbridge.fit(y, x, 2).to_dict()
    assert plain["stats"]["fit_space"] == "unit"
    assert plain["unit_stats"]["see"] == pytest.approx(plain["stats"]["rmse"], rel=1e-12)
    logged = xlbridge.fit(y, x, 1, log=True)
    d = logged.to_dict()
    assert d["stats"]["fit_space"] == "log"
    units = np.exp(logged.fitted) * logged.remedy.smearing
    see = math.sqrt(np.sum((y - units) ** 2) / (len(y) - 2))
    assert d["unit_stats"]["see"] == pytest.approx(see, rel=1e-12)
    assert d["unit_stats"]["spe"] is not None


# --- prediction intervals and percentiles follow the error model ---------------------------

def _coverage(method, draws_per_fit=5, fits=500, seed=2024):
    rng = np.random.default_rng(seed)
    hits = total = 0
    for _ in range(fits):
        x = rng.uniform(10, 200, 20)
        mean = 5.0 * x**0.6
        eps = rng.standard_normal(20)
        # log fits: lognormal error; MUPE: normal multiplicative error, 10 % spread
        y = mean * (np.exp(0.15 * eps) if method == "log" else 1 + 0.1 * eps)
        res = fit_cer(y, x, "power", method)
        x0 = rng.uniform(10, 200, draws_per_fit)
        e0 = rng.standard_normal(draws_per_fit)
        y0 = 5.0 * x0**0.6 * (np.exp(0.15 * e0) if method == "log" else 1 + 0.1 * e0)
        pred = res.predict(x0, 0.95)
        hits += int(np.sum((y0 >= pred.pi_lower) & (y0 <= pred.pi_upper)))
        total += draws_per_fit
    return hits / total, total


@pytest.mark.parametrize("method", ["log", "mupe"])
def test_interval_coverage_simulation(method):
    # 2,500 new observations (5 at each of 500 fitted data sets) from the model the method
    # assumes; the 95 % interval should cover about 95 % of them
    rate, total = _coverage(method)
    assert total >= 2000
    assert 0.93 <= rate <= 0.97, rate


def test_percentiles_follow_the_error_model():
    from scipy import stats

    x, y = _power_data(seed=17)
    mupe = fit_cer(y, x, "power", "mupe")
    pc = xlbridge.percentiles(mupe, [[20.0], [100.0]])
    p = pc.params[1]
    assert p["distribution"] == "normal"
    t = stats.t(p["df"], loc=p["mean"], scale=p["sd"])  # scipy's t, independently
    np.testing.assert_allclose(pc.values[1], t.ppf(np.array(pc.levels) / 100), rtol=1e-12)
    # multiplicative: the spread is proportional to the estimate (up to the leverage term)
    ratio = (pc.values[1, 4] - pc.values[1, 0]) / (pc.values[0, 4] - pc.values[0, 0])
    assert ratio == pytest.approx(pc.params[1]["mean"] / pc.params[0]["mean"], rel=0.05)
    log = xlbridge.percentiles(fit_cer(y, x, "power", "log"), [50.0], levels=(50, 80))
    q = log.params[0]
    assert q["distribution"] == "lognormal"
    assert log.values[0, 0] == pytest.approx(math.exp(q["mu"]), rel=1e-12)
    assert log.values[0, 1] == pytest.approx(
        math.exp(q["mu"] + stats.t.ppf(0.8, q["df"]) * q["sigma"]), rel=1e-12)
    with pytest.raises(ModelError):
        xlbridge.percentiles(mupe, [50.0], levels=(0, 50))


def test_percent_error_polynomial_intervals_grow_with_size():
    # the remedy the constant-variance check suggests must widen the bands with size
    x, y = _power_data(n=40, seed=19, cv=0.15)
    res = xlbridge.fit(y, x, 1, error="percent")
    pr = res.predict([[20.0], [110.0]])
    width = pr.pi_upper - pr.pi_lower
    assert width[1] / width[0] == pytest.approx(pr.fitted[1] / pr.fitted[0], rel=0.1)
    pc = xlbridge.percentiles(res, [[20.0], [110.0]], levels=(2.5, 97.5))
    np.testing.assert_allclose(pc.values[:, 0], pr.pi_lower, rtol=1e-12)
    np.testing.assert_allclose(pc.values[:, 1], pr.pi_upper, rtol=1e-12)


# --- bad input -----------------------------------------------------------------------------

def test_bad_input_names_the_row():
    x, y = _power_data(n=8, seed=1)
    y = y.copy()
    y[2] = np.nan  # dropped, still counted in row numbers
    y[4] = 0.0
    with pytest.raises(ModelError, match="row 5") as err:
        xlbridge.fit(y, x, "power", method="mupe")
    assert err.value.kind == ModelErrorKind.DATA
    y[4] = 3.0
    x = x.copy()
    x[6, 0] = -1.0
    with pytest.raises(ModelError, match="row 7") as err:
        xlbridge.fit(y, x, "power", method="log")
    assert err.value.kind == ModelErrorKind.DATA
    res = xlbridge.fit(y, x, "exponential", method="log")  # exponential takes any x
    assert res.to_dict()["n_dropped"] == 1
    with pytest.raises(ModelError) as err:
        xlbridge.fit(y, np.column_stack([x, x]), "factor", method="log")
    assert err.value.kind == ModelErrorKind.SPEC
    with pytest.raises(ModelError) as err:
        xlbridge.fit(y[:2], x[:2], "power", method="log")
    assert err.value.kind == ModelErrorKind.SHORTAGE
    with pytest.raises(ModelError) as err:
        xlbridge.fit(y, np.column_stack([abs(x), 2 * abs(x)]), "power", method="mupe")
    assert err.value.kind == ModelErrorKind.ALIASED


# --- property: every method's result agrees with the definitions ---------------------------

@settings(max_examples=30)
@given(seed=st.integers(0, 10_000), n=st.integers(6, 40), k=st.integers(1, 2),
       method=st.sampled_from(["log", "mupe", "zmpe", "ols"]))
def test_property_results_follow_the_definitions(seed, n, k, method):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 100.0, (n, k))
    y = 2.0 * np.prod(x**0.5, axis=1) * np.exp(0.3 * rng.standard_normal(n))
    res = fit_cer(y, x, "power", method)
    d = res.to_dict()
    json.dumps(d, allow_nan=False)
    f = res.fitted
    p = k + 1
    # SEE and SPE recomputed from their definitions (common practice)
    assert d["unit_stats"]["see"] == pytest.approx(
        math.sqrt(np.sum((y - f) ** 2) / (n - p)), rel=1e-12)
    if method != "ols":
        assert d["unit_stats"]["spe"] == pytest.approx(
            math.sqrt(np.sum(((y - f) / f) ** 2) / (n - p)), rel=1e-12)
    if method == "zmpe":
        assert abs(math.fsum((y - f) / f)) < 1e-12
    pc = xlbridge.percentiles(res, x[:3])
    assert np.all(np.diff(pc.values, axis=1) > 0)


def test_exponential_on_drivers_far_from_zero():
    # years as the driver: the solvers work on centered drivers, so nothing is lost
    from scipy.optimize import curve_fit

    rng = np.random.default_rng(31)
    year = np.arange(2000.0, 2020.0)
    y = 50 * np.exp(0.03 * (year - 2000)) * np.exp(0.05 * rng.standard_normal(20))
    ols_log = sm.OLS(np.log(y), sm.add_constant(year)).fit()  # statsmodels on the logs
    res = fit_cer(y, year, "exponential", "log")
    np.testing.assert_allclose(res.theta, ols_log.params, rtol=1e-10)
    unit = fit_cer(y, year, "exponential", "ols")
    p, _ = curve_fit(lambda t, c, b: np.exp(c + b * (t - 2010)), year, y, p0=(4.0, 0.03))
    np.testing.assert_allclose(unit.theta, [p[0] - 2010 * p[1], p[1]], rtol=1e-7)
