"""Candidate CER comparison and base-year normalisation.

Sources: each candidate's statistics are recomputed here from an independent fit
(statsmodels OLS on the logs) and from the definitions of SEE/SPE; VIF as 1/(1 - R^2) of a
driver on the others (statsmodels' variance_inflation_factor); the ranking rule as stated in
the module; base-year conversion as cost * index(base) / index(year) (the usual definition).
Data are invented here with fixed seeds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.outliers_influence import variance_inflation_factor

import xlbridge
from xlbridge.engine import ModelError, ModelErrorKind, compare_candidates, to_base_year


def _block(n=30, seed=12):
    rng = np.random.default_rng(seed)
    weight = rng.uniform(10, 100, n)
    power = rng.uniform(5, 50, n)
    noise = rng.uniform(1, 10, n)  # unrelated to cost
    twin = weight * np.exp(0.01 * rng.standard_normal(n))  # nearly weight itself
    cost = 2.0 * weight**0.8 * power**0.3 * (1 + 0.08 * rng.standard_normal(n))
    return cost, np.column_stack([weight, power, noise, twin]), ["weight", "power", "noise",
                                                                   "twin"]


def test_ranking_rule_and_verdicts():
    cost, block, names = _block()
    seen = []
    table = compare_candidates(cost, block, names, forms=("power", "exponential"),
                               methods=("log", "mupe"), max_drivers=2,
                               progress=lambda i, n: seen.append((i, n)))
    rows = table.rows
    total = 2 * 2 * (4 + 6)  # forms x methods x (single drivers + pairs)
    assert len(rows) == total
    assert seen == [(i, total) for i in range(1, total + 1)]
    assert [r.rank for r in rows] == list(range(1, total + 1))
    passing = [r for r in rows if r.verdict in ("best", "ok")]
    assert rows[0].verdict == "best" and table.best is rows[0]
    assert list(rows[: len(passing)]) == passing  # passing candidates first
    spreads = [r.spread for r in passing]
    assert spreads == sorted(spreads)
    # the true model (power form in weight and power; twin is weight with 1 % noise) wins
    assert rows[0].form == "power" and "power" in rows[0].drivers
    assert set(rows[0].drivers) & {"weight", "twin"}
    for r in passing:
        assert r.worst_p < 0.05 and not r.max_vif >= 10
    for r in rows[len(passing):]:
        assert r.verdict in ("insignificant", "collinear")
        assert r.worst_p >= 0.05 or r.max_vif >= 10
    pair = next(r for r in rows if set(r.drivers) == {"weight", "twin"})
    assert pair.verdict in ("collinear", "insignificant")
    # VIF of the log drivers, independently
    z = sm.add_constant(np.log(block[:, [0, 3]]))
    assert pair.max_vif == pytest.approx(variance_inflation_factor(z, 1), rel=1e-9)


def test_rows_match_independent_fits():
    cost, block, names = _block(seed=3)
    table = compare_candidates(cost, block[:, :2], names[:2], methods=("log",))
    row = next(r for r in table.rows if r.drivers == ("weight",))
    ols = sm.OLS(np.log(cost), sm.add_constant(np.log(block[:, 0]))).fit()
    assert row.worst_p == pytest.approx(ols.pvalues[1], rel=1e-9)
    fitted = np.exp(ols.fittedvalues) * np.mean(np.exp(ols.resid))  # Duan smearing
    n = len(cost)
    assert row.see == pytest.approx(math.sqrt(np.sum((cost - fitted) ** 2) / (n - 2)),
                                    rel=1e-10)
    assert row.spe == pytest.approx(
        math.sqrt(np.sum(((cost - fitted) / fitted) ** 2) / (n - 2)), rel=1e-10)
    assert row.spread == row.spe


def test_limits_are_enforced_with_a_message():
    cost, block, names = _block()
    wide = np.tile(block, 3)
    with pytest.raises(ModelError, match="limit is 200"):
        compare_candidates(cost, wide, [f"d{i}" for i in range(12)], max_drivers=3,
                           methods=("log", "mupe", "zmpe", "ols"))
    with pytest.raises(ModelError):
        compare_candidates(cost, block, names, max_drivers=4)
    with pytest.raises(ModelError):
        compare_candidates(cost, block, names, limit=500)
    with pytest.raises(ModelError) as err:
        compare_candidates(cost[:-1], block, names)
    assert err.value.kind == ModelErrorKind.DATA


def test_failed_fits_are_listed_last():
    cost, block, names = _block()
    block = block.copy()
    block[4, 2] = -3.0  # a power CER cannot take a negative driver
    table = compare_candidates(cost, block, names, forms=("power",), methods=("log",))
    last = table.rows[-1]
    assert last.verdict == "failed" and last.drivers == ("noise",) and "row 5" in last.note


def test_base_year_conversion():
    costs = [100.0, 250.0, np.nan, 80.0]
    years = [2019, 2021, 2020, 2023]
    idx_years, idx = [2019, 2020, 2021, 2022, 2023], [95.0, 100.0, 104.0, 110.0, 118.0]
    out = to_base_year(costs, years, idx_years, idx, 2022)
    np.testing.assert_allclose(out[[0, 1, 3]], [100 * 110 / 95, 250 * 110 / 104,
                                                80 * 110 / 118], rtol=1e-15)
    assert np.isnan(out[2])
    with pytest.raises(ModelError, match="row 3: year 2018") as err:
        to_base_year([1.0, 2.0, 3.0], [2019, 2020, 2018], idx_years, idx, 2022)
    assert err.value.kind == ModelErrorKind.DATA
    with pytest.raises(ModelError, match="base year 2030"):
        xlbridge.to_base_year(costs, years, idx_years, idx, 2030)
