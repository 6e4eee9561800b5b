"""Diagnostics, remedies, degree scan, optimum and slopes, each against an independent
computation: statsmodels, scipy, brute-force loops, a numerical optimiser, finite
differences, and Duan (1983) for the smearing estimate."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.stats.diagnostic import het_breuschpagan, het_white
from statsmodels.stats.outliers_influence import OLSInfluence
from statsmodels.stats.stattools import durbin_watson, jarque_bera

import xlbridge.engine.refine as refine_module
from xlbridge import ModelError, checks, fit, optimum, row_diagnostics, scan_degrees, slopes
from xlbridge.engine.diagnostics import heteroscedasticity_tests
from xlbridge.engine.solve import monomials


def _design(x, d):
    return np.column_stack([x**j for j in range(d + 1)])


def _hetero(seed=3, n=80):
    """Invented: cost with spread growing with size."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    return x, 3 + 2 * x + 0.3 * x**2 + rng.normal(0, 0.2 * x, n)


def _verdicts(res):
    return {c.check: c for c in checks(res)}


def _hetero_checked(x, y):
    """Our checks of a degree-2 fit and statsmodels' OLS of the raw design, after asserting
    that Breusch-Pagan and White (statistic and p) equal its het_breuschpagan and
    het_white."""
    c = _verdicts(fit(y, x, 2))
    ref = sm.OLS(y, _design(x, 2)).fit()
    bp = het_breuschpagan(ref.resid, _design(x, 2))
    wh = het_white(ref.resid, _design(x, 2))
    assert c["constant variance (Breusch-Pagan)"].statistic == pytest.approx(bp[0], rel=1e-9)
    assert c["constant variance (Breusch-Pagan)"].p_value == pytest.approx(bp[1], rel=1e-8)
    assert c["constant variance (White)"].statistic == pytest.approx(wh[0], rel=1e-9)
    assert c["constant variance (White)"].p_value == pytest.approx(wh[1], rel=1e-8)
    return c, ref


def test_heteroscedasticity_and_independence_statistics():
    """Breusch-Pagan, White, Durbin-Watson (source: statsmodels het_breuschpagan, het_white,
    durbin_watson on the raw design)."""
    c, ref = _hetero_checked(*_hetero())
    assert c["independence (Durbin-Watson)"].statistic == pytest.approx(
        durbin_watson(ref.resid), rel=1e-12)


def test_normality_statistics():
    """Shapiro-Wilk up to 5,000 rows (source: scipy.stats.shapiro), Jarque-Bera beyond
    (source: statsmodels jarque_bera)."""
    x, y = _hetero(n=60)
    res = fit(y, x, 2)
    w, p = stats.shapiro(res.residuals)
    c = _verdicts(res)["normality"]
    # the same published algorithm: W to rounding; p to scipy's AS 66 normal tail (~1e-10)
    assert c.statistic == pytest.approx(w, rel=1e-12) and c.p_value == pytest.approx(p, rel=1e-9)
    rng = np.random.default_rng(0)
    xb = rng.uniform(0, 1, 6000)
    yb = 1 + xb + rng.standard_t(5, 6000)
    big = fit(yb, xb, 1)
    jb, jbp, _, _ = jarque_bera(big.residuals)
    c = _verdicts(big)["normality"]
    assert c.statistic == pytest.approx(jb, rel=1e-10) and c.p_value == pytest.approx(jbp,
                                                                                     rel=1e-8)
    assert "Jarque-Bera" in c.note


def test_row_diagnostics_match_statsmodels_influence():
    """Studentized residuals, leverage, Cook's D, Bonferroni p (source: statsmodels
    OLSInfluence and outlier_test)."""
    x, y = _hetero(5, 40)
    y = y.copy()
    y[7] = np.nan  # a dropped row keeps alignment
    res = fit(y, x, 2)
    keep = ~np.isnan(y)
    ref = sm.OLS(y[keep], _design(x[keep], 2)).fit()
    inf = OLSInfluence(ref)
    d = row_diagnostics(res)
    assert len(d.fitted) == 40 and d.flag[7] == "dropped" and np.isnan(d.residual[7])
    np.testing.assert_allclose(d.std_residual[keep], inf.resid_studentized_internal, rtol=1e-9)
    np.testing.assert_allclose(d.studentized[keep], inf.resid_studentized_external, rtol=1e-9)
    np.testing.assert_allclose(d.leverage[keep], inf.hat_matrix_diag, rtol=1e-9)
    np.testing.assert_allclose(d.cooks_d[keep], inf.cooks_distance[0], rtol=1e-8)
    np.testing.assert_allclose(d.bonferroni_p[keep], ref.outlier_test()[:, 2], rtol=1e-8)


@pytest.mark.parametrize("kind", ["hc0", "hc1", "hc2", "hc3"])
def test_robust_standard_errors(kind):
    """HC0-HC3 standard errors, t-based p-values and the robust F (source: statsmodels
    OLS fit(cov_type=..., use_t=True))."""
    x, y = _hetero()
    res = fit(y, x, 2, se=kind)
    ref = sm.OLS(y, _design(x, 2)).fit(cov_type=kind.upper(), use_t=True)
    np.testing.assert_allclose(res.std_errors, ref.bse, rtol=1e-9)
    np.testing.assert_allclose([c.p_value for c in res.coefficients], ref.pvalues, rtol=1e-7)
    assert res.stats.f_stat == pytest.approx(float(np.squeeze(ref.fvalue)), rel=1e-8)
    np.testing.assert_allclose(res.estimates, ref.params, rtol=1e-10)


def test_log_fit_uses_duan_smearing():
    """ln(y) fit; E[y|x] = exp(eta) * mean(exp(residuals)) (Duan 1983, smearing estimate)."""
    rng = np.random.default_rng(8)
    x = rng.uniform(1, 50, 70)
    y = np.exp(1 + 0.08 * x - 0.0007 * x**2 + rng.normal(0, 0.2, 70))
    res = fit(y, x, 2, log=True)
    ref = sm.OLS(np.log(y), _design(x, 2)).fit()
    np.testing.assert_allclose(res.estimates, ref.params, rtol=1e-10)
    smear = np.mean(np.exp(ref.resid))
    new = np.array([5.0, 25.0])
    pr = res.predict(new)
    eta = _design(new, 2) @ ref.params
    np.testing.assert_allclose(pr.fitted, np.exp(eta) * smear, rtol=1e-10)
    frame = ref.get_prediction(_design(new, 2)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(pr.pi_lower, np.exp(frame["obs_ci_lower"]), rtol=1e-9)
    np.testing.assert_allclose(pr.ci_upper, np.exp(frame["mean_ci_upper"]) * smear, rtol=1e-9)
    assert res.equation().startswith("ln(y) = ")
    with pytest.raises(ModelError, match="above 0"):
        fit(-y, x, 2, log=True)


def test_percent_error_fit_is_converged_irls():
    """Multiplicative-error fit: the fixed point of WLS with weights 1/fitted^2 (independent
    loop with statsmodels WLS)."""
    rng = np.random.default_rng(4)
    x = rng.uniform(10, 100, 60)
    y = (50 + 3 * x + 0.02 * x**2) * (1 + rng.normal(0, 0.1, 60))
    res = fit(y, x, 2, error="percent")
    X = _design(x, 2)
    b = sm.OLS(y, X).fit().params
    for _ in range(200):
        ref = sm.WLS(y, X, weights=1 / (X @ b) ** 2).fit()
        if np.max(np.abs(ref.params - b) / np.abs(ref.params)) < 1e-14:
            break
        b = ref.params
    np.testing.assert_allclose(res.estimates, ref.params, rtol=1e-9)
    np.testing.assert_allclose(res.std_errors, ref.bse, rtol=1e-7)
    assert res.remedy.iterations >= 2


def test_degree_scan_against_brute_force():
    """cv_rmse by an independent k-fold loop (numpy lstsq), LOO for small n equals
    sqrt(PRESS/n), AICc by its formula, nested F by statsmodels compare_f_test."""
    rng = np.random.default_rng(12)
    x = np.sort(rng.uniform(0, 10, 45))
    y = 5 + 2 * x - 0.3 * x**2 + rng.normal(0, 1, 45)
    scan = scan_degrees(y, x, 4, folds=5)
    for row in scan.rows:
        d = row.degree
        errs = []
        for k in range(5):
            test = np.arange(45) % 5 == k
            b = np.linalg.lstsq(_design(x[~test], d), y[~test], rcond=None)[0]
            errs.append(y[test] - _design(x[test], d) @ b)
        cv = np.sqrt(np.mean(np.concatenate(errs) ** 2))
        assert row.cv_rmse == pytest.approx(cv, rel=1e-9)
        full = sm.OLS(y, _design(x, d)).fit()
        k = d + 1
        assert row.aicc == pytest.approx(full.aic + 2 * k * (k + 1) / (45 - k - 1), rel=1e-10)
        reduced = sm.OLS(y, _design(x, d - 1)).fit()
        assert row.nested_f_p_value == pytest.approx(full.compare_f_test(reduced)[1], rel=1e-7)
    small = scan_degrees(y[:15], x[:15], 2)
    assert small.folds == 15
    for row in small.rows:
        assert row.cv_rmse == pytest.approx(np.sqrt(fit(y[:15], x[:15], row.degree).stats.press
                                                    / 15), rel=1e-9)


def test_straight_line_is_not_given_degree_3():
    """Straight lines plus noise: never degree 3 or more; degree 1 nearly always (a noise
    draw can carry a significant quadratic, seed 1 here has p = 0.002 for x^2)."""
    chosen = []
    for seed in range(20):
        rng = np.random.default_rng(seed)
        x = rng.uniform(0, 20, 60)
        y = 10 + 4 * x + rng.normal(0, 3, 60)
        chosen.append(scan_degrees(y, x, 4).chosen)
    assert max(chosen) <= 2 and chosen.count(1) >= 18


def test_planted_problems_get_expected_verdicts():
    """Invented data (fixed seed) with real curvature, spread growing with size and one
    planted outlier: the scan keeps the curvature, the checks see the spread and the
    outlier; clean data of the same shape pass."""
    rng = np.random.default_rng(2026)
    x = np.linspace(10, 500, 120)
    mean = 200 + 2.0 * x + 0.004 * x**2
    y = mean + rng.normal(0, 0.03 * mean)
    y[60] += 200  # about 7 local standard deviations
    assert scan_degrees(y, x, 4).chosen >= 2
    v = _verdicts(fit(y, x, 2))
    assert v["constant variance (Breusch-Pagan)"].verdict in ("watch", "problem")
    assert v["outliers"].verdict == "problem" and "row 61" in v["outliers"].note
    clean = mean + rng.normal(0, 20, 120)
    vc = _verdicts(fit(clean, x, 2))
    assert vc["outliers"].verdict != "problem"
    assert vc["constant variance (Breusch-Pagan)"].verdict == "ok"
    assert vc["collinearity (VIF)"].verdict == "watch"  # raw x, x^2 collinear; centered fine


def test_quadratic_optimum_matches_formula_and_optimiser():
    rng = np.random.default_rng(1)
    x = rng.uniform(10, 200, 60)
    y = 500 - 6 * x + 0.025 * x**2 + rng.normal(0, 8, 60)
    res = fit(y, x, 2)
    pt = optimum(res).points[0]
    b = res.estimates
    assert pt.x[0] == pytest.approx(-b[1] / (2 * b[2]), rel=1e-12)
    assert pt.kind == "minimum" and pt.inside
    # delta method by hand: gradient of -b1/(2 b2) with respect to (b0, b1, b2)
    g = np.array([0.0, -1 / (2 * b[2]), b[1] / (2 * b[2] ** 2)])
    assert pt.se[0] == pytest.approx(np.sqrt(g @ res.cov @ g), rel=1e-8)
    xo = optimize.minimize_scalar(lambda v: res.predict([v]).fitted[0], bounds=(10, 200),
                                  method="bounded", options={"xatol": 1e-10}).x
    assert pt.x[0] == pytest.approx(xo, rel=1e-7)


def test_surface_optimum_matches_optimiser():
    rng = np.random.default_rng(3)
    a, h = rng.uniform(1, 15, 120), rng.uniform(0.5, 12, 120)
    p = 100 - 8 * a - 3 * h + 0.3 * a**2 + 0.2 * h**2 + 0.1 * a * h + rng.normal(0, 1, 120)
    res = fit(p, np.column_stack([a, h]), "surface")
    opt = optimum(res)
    xo = optimize.minimize(lambda v: res.predict(np.array([v])).fitted[0], [7, 5], tol=1e-12).x
    np.testing.assert_allclose(opt.points[0].x, xo, rtol=1e-6)
    assert opt.points[0].kind == "minimum" and all(v > 0 for v in opt.eigenvalues)
    saddle = fit(100 - 8 * a + 0.3 * a**2 - 0.2 * h**2 + rng.normal(0, 1, 120),
                 np.column_stack([a, h]), "surface")
    assert optimum(saddle).points[0].kind == "saddle"


def test_slopes_match_finite_differences():
    rng = np.random.default_rng(6)
    a, h = rng.uniform(1, 15, 90), rng.uniform(0.5, 12, 90)
    y = 50 + 2 * a - h + 0.1 * a * h + 0.05 * a**2 + rng.normal(0, 1, 90)
    res = fit(y, np.column_stack([a, h]), "surface")
    pts = np.array([[5.0, 6.0], [12.0, 2.0]])
    s = slopes(res, pts)
    eps = 1e-5
    for j in range(2):
        up, dn = pts.copy(), pts.copy()
        up[:, j] += eps
        dn[:, j] -= eps
        fd = (res.predict(up).fitted - res.predict(dn).fitted) / (2 * eps)
        np.testing.assert_allclose(s.slope[:, j], fd, rtol=1e-6)
    # SE by the delta method on the raw coefficients: slope of a is b_a + 2 b_aa a + b_ah h
    g = np.array([[0, 1, 0, 2 * p[0], 0, p[1]] for p in pts])
    np.testing.assert_allclose(s.se[:, 0], np.sqrt(np.einsum("ij,jk,ik->i", g, res.cov, g)),
                               rtol=1e-7)


def test_log_slope_matches_finite_differences():
    rng = np.random.default_rng(9)
    x = rng.uniform(1, 50, 60)
    y = np.exp(1 + 0.05 * x + rng.normal(0, 0.1, 60))
    res = fit(y, x, 2, log=True)
    s = slopes(res, [10.0, 30.0])
    fd = (res.predict([10 + 1e-5, 30 + 1e-5]).fitted - res.predict([10 - 1e-5, 30 - 1e-5]).fitted
          ) / 2e-5
    np.testing.assert_allclose(s.slope[:, 0], fd, rtol=1e-6)


def _exact_lm(target, design) -> float:
    """n R^2 of target on design (with a constant column), exactly: normal equations in
    Fractions on the same doubles, Gauss-Jordan; R^2 = 1 - SSE / SST."""
    d = [[Fraction(float(v)) for v in row] for row in design]
    t = [Fraction(float(v)) for v in target]
    n, q = len(t), len(d[0])
    aug = [[sum(r[a] * r[b] for r in d) for b in range(q)] + [sum(r[a] * ti for r, ti in
                                                                zip(d, t))] for a in range(q)]
    for k in range(q):
        piv = next(i for i in range(k, q) if aug[i][k] != 0)
        aug[k], aug[piv] = aug[piv], aug[k]
        for i in range(q):
            if i != k and aug[i][k] != 0:
                f = aug[i][k] / aug[k][k]
                aug[i] = [a - f * b for a, b in zip(aug[i], aug[k])]
    explained = sum(aug[a][q] / aug[a][a] * sum(r[a] * ti for r, ti in zip(d, t))
                    for a in range(q))
    total = sum(ti * ti for ti in t)
    mean = sum(t) / n
    return float(n * (1 - (total - explained) / (total - n * mean * mean)))


@pytest.mark.parametrize("block", [None, 64])
def test_heteroscedasticity_statistics_match_exact_arithmetic(block, monkeypatch):
    """Breusch-Pagan and White LM statistics to 1e-13 relative against exact rational
    arithmetic on the same squared residuals and auxiliary columns (reference: fractions),
    with the auxiliary designs reduced in one block or in blocks of 64 rows (invented data,
    fixed seed: a log fit with a weak spread pattern, auxiliary R^2 about 0.003)."""
    if block:
        monkeypatch.setattr(refine_module, "BLOCK", block)
    rng = np.random.default_rng(12)
    x = rng.uniform(50, 5000, 700)
    y = (120 + 0.05 * x + 2e-6 * x**2) * np.exp(rng.normal(0, 0.03 + 1e-6 * x, 700))
    res = fit(y, x, 2, log=True)
    (bp, _, bp_df), (wh, _, wh_df) = heteroscedasticity_tests(res)
    e2 = res.residuals**2
    t = (res.x - res.basis.centers) / res.basis.scales
    assert (bp_df, wh_df) == (2, 4)
    assert bp == pytest.approx(_exact_lm(e2, monomials(t, ((0,), (1,), (2,)))), rel=1e-13)
    assert wh == pytest.approx(_exact_lm(e2, monomials(t, tuple((k,) for k in range(5)))),
                               rel=1e-13)


def test_heteroscedasticity_statistics_across_row_blocks():
    """Breusch-Pagan and White on 20,000 rows (three blocks of the auxiliary designs)
    against statsmodels het_breuschpagan and het_white on the raw design."""
    _hetero_checked(*_hetero(seed=5, n=20_000))
