"""Conventions written down in docs/statistics.md, checked against outside sources.

Sources: the lognormal distribution's coefficient of variation (textbook formula, and a
scipy.stats.lognorm evaluation), statsmodels WLS ``condition_number`` and numpy's SVD for
the raw design's condition number, statsmodels WLS ``llf`` for the weighted likelihood.
"""

from __future__ import annotations

import math
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats as st

from xlbridge.engine import checks, fit
from xlbridge.engine.result import FitStats

ROOT = Path(__file__).resolve().parents[1]


def _data(seed=3, n=40):
    rng = np.random.default_rng(seed)
    x = rng.uniform(10, 100, n)
    y = (30 + 2 * x + 0.01 * x**2) * np.exp(rng.normal(0, 0.15, n))
    return x, y


def test_rmse_percent_is_in_units_of_y_for_each_error_model():
    x, y = _data()
    plain = fit(y, x, 2)
    assert plain.stats.rmse_percent == pytest.approx(100 * plain.stats.rmse / y.mean(),
                                                     rel=1e-12)
    pct = fit(y, x, 2, error="percent")
    assert pct.stats.rmse_percent == pytest.approx(100 * pct.stats.rmse, rel=1e-12)
    lg = fit(y, x, 2, log=True)
    s = lg.stats.rmse
    # SD / mean of a lognormal with log-scale SD s (scipy.stats.lognorm)
    dist = st.lognorm(s)
    assert lg.stats.rmse_percent == pytest.approx(100 * dist.std() / dist.mean(), rel=1e-9)
    assert 0.8 * 15 < lg.stats.rmse_percent < 1.2 * 15  # near the invented 15 % spread
    assert math.isnan(fit(y, x, 2, log=True, error="percent").stats.rmse_percent)


def test_raw_condition_number_of_a_weighted_design():
    x, y = _data()
    w = 50 / x
    res = fit(y, x, 2, weights=w)
    X = np.column_stack([np.ones_like(x), x, x**2])
    ref = sm.WLS(y, X, weights=w).fit()
    assert res.stats.cond_number_raw == pytest.approx(ref.condition_number, rel=1e-6)
    assert res.stats.cond_number_raw == pytest.approx(
        np.linalg.cond(X * np.sqrt(w)[:, None]), rel=1e-9)
    assert res.stats.cond_number < 10 < res.stats.cond_number_raw


def test_raw_condition_number_of_years_as_x():
    """Degree 3 in calendar years: the raw design is badly conditioned (numpy SVD)."""
    years = np.arange(1990.0, 2020.0)
    y = np.sin(years / 3) + 0.05 * years
    res = fit(y, years, 3)
    X = np.vander(years, 4, increasing=True)
    assert res.stats.cond_number_raw == pytest.approx(np.linalg.cond(X), rel=1e-4)
    assert res.stats.cond_number_raw > 1e12


def test_weighted_aic_adds_half_the_sum_of_log_weights():
    """statsmodels WLS llf: Gaussian likelihood with constants plus 1/2 sum ln w."""
    x, y = _data()
    w = 50 / x
    res = fit(y, x, 1, weights=w)
    ref = sm.WLS(y, np.column_stack([np.ones_like(x), x]), weights=w).fit()
    assert res.stats.aic == pytest.approx(ref.aic, rel=1e-10)
    n, sse = len(y), res.stats.sse
    llf = -0.5 * n * (math.log(2 * math.pi) + math.log(sse / n) + 1) + 0.5 * np.log(w).sum()
    assert res.stats.aic == pytest.approx(-2 * llf + 2 * 2, rel=1e-10)


def test_the_statistics_page_names_every_figure_and_is_linked():
    page = (ROOT / "docs" / "statistics.md").read_text(encoding="utf-8")
    for f in fields(FitStats):
        assert f"`{f.name}`" in page, f.name
    x, y = _data()
    for c in checks(fit(y, x, 2)):
        assert c.check.split(" (")[0] in page.lower(), c.check
    assert "docs/statistics.md" in (ROOT / "README.md").read_text(encoding="utf-8")
    for kw in ({"weights": 50 / x}, {"error": "percent"}, {"log": True}, {"se": "hc3"}):
        notes = fit(y, x, 2, **kw).notes
        assert any("docs/statistics.md" in n for n in notes), kw
