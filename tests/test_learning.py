"""Learning curves (unit and cumulative-average theory).

Sources: the reference values given for an 85 % (and 80/90/95 %) unit curve with T1 = 100;
direct sums computed here term by term with math.fsum; numpy and statsmodels least squares
on the logs; the curve definitions (unit n costs T1 n^b, the average of units 1..n is
T1 n^b, b = log2 slope). Data are invented here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm

import xlbridge
from xlbridge.engine import LearningCurve, ModelError, ModelErrorKind, learning_curve
from xlbridge.engine.learning import DIRECT_SUM_MAX, power_sum


def test_unit_curve_reference_values():
    c = xlbridge.LearningCurve(t1=100, slope=0.85, theory="unit")
    assert c.unit_cost(125) == pytest.approx(32.23647, abs=5e-6)
    assert c.cumulative_cost(125) == pytest.approx(5201.085, abs=5e-4)
    direct = math.fsum(100 * n ** math.log2(0.85) for n in range(1, 126))
    assert c.lot_cost(1, 125) == pytest.approx(direct, rel=1e-15)
    for slope, value in ((0.80, 21.13225), (0.90, 48.00243), (0.95, 69.95640)):
        assert LearningCurve(t1=100, slope=slope).unit_cost(125) == pytest.approx(value,
                                                                                  abs=5e-6)


def test_long_sums_use_a_closed_form_as_accurate_as_the_direct_sum():
    b = math.log2(0.85)
    n = 3 * DIRECT_SUM_MAX + 17
    direct = math.fsum(np.arange(5, n + 1, dtype=float) ** b)  # numpy powers, exact sum
    assert power_sum(5, n, b) == pytest.approx(direct, rel=1e-13)
    assert power_sum(1, n, -1.0) == pytest.approx(
        math.fsum(1.0 / np.arange(1, n + 1, dtype=float)), rel=1e-13)


def test_cumulative_average_theory_from_its_definition():
    c = LearningCurve(t1=80.0, slope=0.9, theory="cumulative")
    b = math.log2(0.9)
    # the average of units 1..n is T1 n^b, so units 1..n cost T1 n^(b+1)
    assert c.cumulative_cost(40) == pytest.approx(80 * 40 ** (b + 1), rel=1e-14)
    assert c.unit_cost(1) == pytest.approx(80.0, rel=1e-15)
    assert c.unit_cost(7) == pytest.approx(80 * (7 ** (b + 1) - 6 ** (b + 1)), rel=1e-13)
    assert c.lot_cost(11, 30) == pytest.approx(80 * (30 ** (b + 1) - 10 ** (b + 1)), rel=1e-13)
    total = math.fsum(c.unit_cost(n) for n in range(1, 41))
    assert total == pytest.approx(c.cumulative_cost(40), rel=1e-13)


def test_fit_from_unit_data_is_least_squares_on_the_logs():
    rng = np.random.default_rng(5)
    units = np.arange(1, 31)
    costs = 250 * units ** math.log2(0.88) * np.exp(0.04 * rng.standard_normal(30))
    lc = learning_curve(units, costs)
    ols = sm.OLS(np.log(costs), sm.add_constant(np.log(units))).fit()  # statsmodels
    c0, b = ols.params
    assert lc.slope == pytest.approx(2**b, rel=1e-12)
    assert lc.t1 == pytest.approx(math.exp(c0), rel=1e-12)
    assert lc.t1_se == pytest.approx(math.exp(c0) * ols.bse[0], rel=1e-10)  # delta method
    lo, hi = ols.conf_int(0.05)[0]
    np.testing.assert_allclose(lc.t1_ci, (math.exp(lo), math.exp(hi)), rtol=1e-10)
    lo, hi = ols.conf_int(0.05)[1]
    np.testing.assert_allclose(lc.slope_ci, (2**lo, 2**hi), rtol=1e-10)
    assert lc.to_dict()["log_stats"]["fit_space"] == "log"


def test_cumulative_fit_from_unit_data_uses_cumulative_averages():
    rng = np.random.default_rng(6)
    units = np.arange(1, 21)
    costs = 90 * units ** math.log2(0.85) * np.exp(0.05 * rng.standard_normal(20))
    lc = learning_curve(units[::-1], costs[::-1], theory="cumulative")  # order does not matter
    avg = np.cumsum(costs) / units
    b, c0 = np.polyfit(np.log(units), np.log(avg), 1)  # numpy, independently
    assert lc.slope == pytest.approx(2**b, rel=1e-12)
    assert lc.t1 == pytest.approx(math.exp(c0), rel=1e-12)
    with pytest.raises(ModelError) as err:
        learning_curve([1, 2, 4, 5], [10, 9, 8, 7.5], theory="cumulative")
    assert err.value.kind == ModelErrorKind.DATA


def test_lot_fit_recovers_an_exact_curve_and_its_midpoints():
    true = LearningCurve(t1=1200.0, slope=0.83)
    lots = [(1, 5), (6, 20), (21, 60), (61, 150), (151, 400)]
    first, last = zip(*lots)
    costs = [true.lot_cost(f, g) for f, g in lots]
    lc = learning_curve(None, costs, first=first, last=last)
    assert lc.slope == pytest.approx(0.83, rel=1e-10)
    assert lc.t1 == pytest.approx(1200.0, rel=1e-9)
    # the midpoint's cost on the curve equals the lot's average unit cost (its definition)
    for (f, g), q, cost in zip(lots, lc.midpoints, costs):
        assert f <= q <= g
        assert true.unit_cost(q) == pytest.approx(cost / (g - f + 1), rel=1e-9)


def test_lot_fit_cumulative_theory():
    true = LearningCurve(t1=500.0, slope=0.9, theory="cumulative")
    lots = [(21, 50), (1, 20), (51, 100), (101, 200)]  # any order, no gaps
    first, last = zip(*lots)
    costs = [true.lot_cost(f, g) for f, g in lots]
    lc = learning_curve(None, costs, theory="cumulative", first=first, last=last)
    assert lc.slope == pytest.approx(0.9, rel=1e-12)
    assert lc.t1 == pytest.approx(500.0, rel=1e-12)
    with pytest.raises(ModelError, match="row 2"):
        learning_curve(None, costs, theory="cumulative", first=(1, 30, 51, 101),
                       last=(20, 50, 100, 200))


def test_bad_lots_and_costs_name_the_row():
    with pytest.raises(ModelError, match="row 3") as err:
        learning_curve(None, [100, 300, 500, 700], first=[1, 11, 40, 61], last=[10, 39, 31, 90])
    assert err.value.kind == ModelErrorKind.DATA
    with pytest.raises(ModelError, match="row 2") as err:
        learning_curve([1, 2, 3, 4], [10, -1, 8, 7])
    assert err.value.kind == ModelErrorKind.DATA
    with pytest.raises(ModelError) as err:
        learning_curve([1, 2], [10, 9])
    assert err.value.kind == ModelErrorKind.SHORTAGE
    with pytest.raises(ModelError):
        LearningCurve(t1=100, slope=0.85).lot_cost(10, 5)
    with pytest.raises(ModelError):
        LearningCurve(t1=-1, slope=0.85)
