"""The degree scan's cross-validation with percent error: its fast fold fits (reweighting on
the scaled basis) give the same cross-validated RMSE as folds fitted one by one through
``fit`` (whose percent-error fit is checked against statsmodels WLS elsewhere), and the
reweighting of a badly conditioned model certifies once, not at every step."""

from __future__ import annotations

import math

import numpy as np
import pytest

from xlbridge import fit
from xlbridge.engine import scan_degrees


def _data(n=20):
    rng = np.random.default_rng(0)
    x = np.linspace(1, 20, n)
    return x, np.exp(0.1 * x) * (1 + rng.normal(0, 0.05, n))


@pytest.mark.parametrize("log", [False, True])
def test_percent_cv_matches_fold_by_fold_fits(log):
    x, y = _data()
    scan = scan_degrees(y, x, 3, error="percent", log=log)
    for row in scan.rows:
        sq = []
        for k in range(len(y)):  # leave-one-out at 20 rows
            keep = np.arange(len(y)) != k
            res = fit(y[keep], x[keep], row.degree, error="percent", log=log)
            sq.append(float(y[k] - res.predict(x[k:k + 1]).fitted[0]) ** 2)
        assert row.cv_rmse == pytest.approx(math.sqrt(np.mean(sq)), rel=1e-7)


def test_percent_fit_of_a_badly_conditioned_model_is_certified():
    """Degree 10 on 20 rows: the answer is certified (refined or exact), and it equals the
    percent-error fit whose every step is certified (reweighting to the same fixed point)."""
    x, y = _data()
    res = fit(y, x, 10, error="percent")
    assert res.method in ("refined", "exact")
    w = 1 / res.fitted**2
    again = fit(y, x, 10, weights=w)  # one weighted fit at the converged weights
    np.testing.assert_allclose(res.estimates, again.estimates, rtol=1e-6)
