"""Prediction intervals and new-point leverage under each error model.

Outside sources: statsmodels WLS ``get_prediction(exog, weights=w0)`` (a new observation's
variance is scale / w0 plus the mean's variance), the weighted hat matrix computed with
numpy for the data's leverages, and simulation from the true model (the 95 % interval must
cover 93-97 % of new observations).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats as st

from xlbridge.engine import ModelError, fit


def _design(x):
    x = np.asarray(x, dtype=float)
    return np.column_stack([np.ones_like(x), x])


def _issue_data():
    """Invented: 40 jobs, cost 20 + 2 size with 12 % error; the scatter is rescaled so the
    percent-error fit has s = 0.12 exactly (scaling the relative residuals about a converged
    fit keeps it the fixed point of the reweighting)."""
    rng = np.random.default_rng(17)
    x = np.linspace(1, 40, 40)
    y = (20 + 2 * x) * (1 + rng.normal(0, 0.12, 40))
    first = fit(y, x, 1, error="percent")
    rel = (y - first.fitted) / first.fitted
    return x, first.fitted * (1 + rel * 0.12 / first.stats.rmse)


def test_percent_error_interval_of_the_issue_example():
    """At fitted 75.5 on 12 % error the 95 % interval is about [56.8, 94.2], not the width
    of the mean's interval (about [72, 79])."""
    x, y = _issue_data()
    res = fit(y, x, 1, error="percent")
    assert res.stats.rmse == pytest.approx(0.12, rel=1e-9)
    b0, b1 = res.estimates
    pr = res.predict([(75.5 - b0) / b1])
    assert pr.fitted[0] == pytest.approx(75.5, rel=1e-12)
    assert [pr.ci_lower[0], pr.ci_upper[0]] == pytest.approx([72.0, 79.0], abs=0.1)
    assert [pr.pi_lower[0], pr.pi_upper[0]] == pytest.approx([56.8, 94.2], abs=0.05)
    # textbook formula computed here: fitted +- t sqrt((s fitted)^2 + se_mean^2)
    t = st.t.ppf(0.975, res.stats.df_resid)
    se_mean = (pr.ci_upper[0] - pr.fitted[0]) / t
    half = t * np.sqrt((0.12 * 75.5) ** 2 + se_mean**2)
    assert pr.pi_upper[0] - pr.fitted[0] == pytest.approx(half, rel=1e-12)


def test_percent_error_interval_matches_statsmodels_wls_with_new_weight():
    """statsmodels WLS at the converged weights 1/fitted^2, new observation of weight
    1/fitted0^2: the same prediction interval and new-point leverage."""
    x, y = _issue_data()
    res = fit(y, x, 1, error="percent")
    ref = sm.WLS(y, _design(x), weights=1 / res.fitted**2).fit()
    new = np.array([3.0, 17.5, 39.0, 55.0])
    pr = res.predict(new)
    w0 = 1 / pr.fitted**2
    frame = ref.get_prediction(_design(new), weights=w0).summary_frame(alpha=0.05)
    np.testing.assert_allclose(pr.pi_lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(pr.pi_upper, frame["obs_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(pr.ci_lower, frame["mean_ci_lower"], rtol=1e-9)
    # leverage of a new point = Var(mean) / Var(new observation) = w0 x0'(X'WX)^-1 x0
    np.testing.assert_allclose(pr.leverage, frame["mean_se"] ** 2 / (ref.scale / w0),
                               rtol=1e-9)


def test_weighted_interval_uses_the_new_points_weight():
    """Known weights: statsmodels WLS get_prediction with the same new weights; default
    weight 1 equals weights=1 given."""
    rng = np.random.default_rng(5)
    x = rng.uniform(5, 95, 50)
    w = 50 / x
    y = 10 + 2 * x + rng.normal(0, 4, 50) / np.sqrt(w)
    res = fit(y, x, 1, weights=w)
    ref = sm.WLS(y, _design(x), weights=w).fit()
    new = np.array([10.0, 50.0, 90.0])
    w0 = 50 / new
    pr = res.predict(new, weights=w0)
    frame = ref.get_prediction(_design(new), weights=w0).summary_frame(alpha=0.05)
    np.testing.assert_allclose(pr.pi_lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(pr.pi_upper, frame["obs_ci_upper"], rtol=1e-9)
    one = res.predict(new)
    np.testing.assert_allclose(one.pi_upper, res.predict(new, weights=1.0).pi_upper)
    frame1 = ref.get_prediction(_design(new)).summary_frame(alpha=0.05)  # its default is 1
    np.testing.assert_allclose(one.pi_upper, frame1["obs_ci_upper"], rtol=1e-9)
    with pytest.raises(ModelError, match="positive"):
        res.predict(new, weights=[1.0, 0.0, 1.0])
    with pytest.raises(ModelError, match="one per point"):
        res.predict(new, weights=[1.0, 2.0])


@pytest.mark.parametrize("kind", ["weighted", "percent", "percent and weighted"])
def test_new_point_leverage_is_on_the_datas_footing(kind):
    """Predicting at the data's own x rows (with their weights) returns the data's leverage
    (the weighted hat matrix's diagonal, computed here), not 170-700."""
    rng = np.random.default_rng(11)
    x = rng.uniform(20, 80, 30)
    y = (5 + 0.3 * x) * (1 + rng.normal(0, 0.1, 30))
    base = rng.uniform(0.5, 2, 30) if "weighted" in kind else None
    res = fit(y, x, 2, weights=base, error="percent" if "percent" in kind else "additive")
    given = base
    pr = res.predict(x, weights=given)
    # textbook: h_i = w_i x_i'(X'WX)^-1 x_i, the diagonal of the weighted hat matrix
    X = np.column_stack([np.ones(30), x, x**2])
    a = X * np.sqrt(res.weights)[:, None]
    h = np.einsum("ij,jk,ik->i", a, np.linalg.inv(a.T @ a), a)
    np.testing.assert_allclose(res.leverage, h, rtol=1e-8)
    np.testing.assert_allclose(pr.leverage, h, rtol=1e-8)
    inside = res.predict(np.linspace(x.min(), x.max(), 40), weights=np.median(given) if
                         given is not None else None)
    assert np.all(inside.leverage < 1)
    assert not inside.extrapolated.any()


#: Fitted data sets per error model, and new observations drawn at each of 3 points per set:
#: 600 x 3 x 4 = 7,200 draws (the fits are the slow part; the draws are one array).
N_SETS, N_NEW = 600, 4


def _coverage(model: str, seed: int, n_sets: int = N_SETS, n_new: int = N_NEW) -> float:
    """Share of new observations from the true model inside the 95 % prediction interval:
    ``n_sets`` data sets (fixed design, invented true curves), each fitted by xlbridge and
    predicted at three points (near each end and in the middle), with ``n_new`` new
    observations per point. All random numbers are drawn up front, the counting is one
    array operation."""
    rng = np.random.default_rng(seed)
    n = 24
    x = np.linspace(10, 100, n)
    x0 = np.array([12.5, 50.0, 100.0])
    z = rng.standard_normal((n_sets, n))
    z0 = rng.standard_normal((n_sets, n_new, 3))
    w = w0 = None
    if model == "additive":
        def draw(xs, e, wt):
            return 40 + 1.2 * xs - 0.004 * xs**2 + 6 * e
    elif model == "weighted":  # variance proportional to x; known weights 50 / x
        w, w0 = 50 / x, 50 / x0

        def draw(xs, e, wt):
            return 40 + 1.2 * xs + 6 * e / np.sqrt(wt)
    elif model == "percent":
        def draw(xs, e, wt):
            return (40 + 1.2 * xs) * (1 + 0.12 * e)
    else:  # log: multiplicative lognormal error
        def draw(xs, e, wt):
            return np.exp(2 + 0.02 * xs + 0.15 * e)
    y = draw(x, z, w if w is not None else 1.0)
    new = draw(x0, z0, w0 if w0 is not None else 1.0)  # (n_sets, n_new, 3)
    lo, hi = np.empty((n_sets, 3)), np.empty((n_sets, 3))
    for i in range(n_sets):
        res = fit(y[i], x, 2 if model == "additive" else 1, weights=w,
                  error="percent" if model == "percent" else "additive", log=model == "log")
        pr = res.predict(x0, weights=w0)
        lo[i], hi[i] = pr.pi_lower, pr.pi_upper
    inside = (new >= lo[:, None, :]) & (new <= hi[:, None, :])
    return float(inside.mean())


@pytest.mark.parametrize(("model", "seed"), [("additive", 1), ("weighted", 2), ("percent", 3),
                                             ("log", 4)])
def test_prediction_interval_coverage_by_simulation(model, seed):
    """The 95 % interval covers 93-97 % of new observations (simulation from the true model:
    600 fitted data sets x 3 points x 4 new observations = 7,200 draws)."""
    assert 0.93 <= _coverage(model, seed) <= 0.97
