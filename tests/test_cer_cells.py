"""The CER worksheet functions from cells: coefficients and statistics of power, factor and
exponential fits, percentiles, candidates, learning curves, base-year costs and the card.

Outside references, named at each check: closed forms of the factor CER from the methods'
definitions (ordinary least squares; MUPE and ZMPE as defined in the minimum-unbiased-
percentage-error and zero-percentage-bias papers of the cost-estimating literature; log
least squares), numpy least squares on logs, scipy's Student t quantiles, the learning-curve
closed forms (unit cost T1*n^log2(slope), direct sums), and the price-index ratio.
All data are invented (fixed seeds).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats as sps

from xlbridge import worksheet as ws
from xlbridge.cells import cer as cer_cells

from .tablecheck import stats_by_field

RNG = np.random.default_rng(2031)
WEIGHT = np.round(np.sort(RNG.uniform(5, 90, 14)), 2)
COST = np.round(7.5 * WEIGHT**0.72 * np.exp(RNG.normal(0, 0.08, WEIGHT.size)), 2)
Y = ["cost"] + COST.tolist()
X = ["weight"] + WEIGHT.tolist()


def as_dict(table):
    if table[0] == ["question", "measure", "value"]:  # the statistics block
        return stats_by_field(table)
    return {r[0]: r[1] for r in table[1:] if r[0] not in ("note", "caution")}


def card_fields(table):
    """A card table read back to its fields (the captions are the house style's)."""
    field_of = {v: k for k, v in cer_cells.CARD_CAPTIONS.items()}
    return {field_of.get(r[0], r[0]): r[1] for r in table[1:] if r[0] != "caution"}


def coef(table, name):
    head = table[0]
    row = next(r for r in table[1:] if r[0] == name)
    return dict(zip(head, row))


# --- factor CER: closed forms from the definitions of each method ---------------------------

@pytest.mark.parametrize("method, expected", [
    ("ols", lambda y, x: float(np.sum(x * y) / np.sum(x * x))),  # least squares: Σxy/Σx²
    ("mupe", lambda y, x: float(np.mean(y / x))),  # MUPE: mean of the ratios
    ("zmpe", lambda y, x: float(np.mean(y / x))),  # ZMPE: mean of the ratios
    ("log", lambda y, x: float(np.exp(np.mean(np.log(y / x))))),  # geometric mean of ratios
])
def test_factor_cer_coefficient_matches_its_closed_form(method, expected):
    t = ws.XB_COEFS(Y, X, "factor", f"method={method}")
    a = coef(t, "a")
    assert t[0][:3] == ["term", "role", "estimate"] and a["role"] == "scale"
    assert a["estimate"] == pytest.approx(expected(COST, WEIGHT), rel=1e-10)


def test_power_cer_by_log_equals_numpy_least_squares_on_logs():
    t = ws.XB_COEFS(Y, X, "power", "method=log")
    b, ln_a = np.polyfit(np.log(WEIGHT), np.log(COST), 1)  # numpy, independent of the engine
    assert [r[0] for r in t[1:3]] == ["a", "b_weight"]  # a first, then the exponent
    assert coef(t, "a")["estimate"] == pytest.approx(math.exp(ln_a), rel=1e-10)
    assert coef(t, "b_weight")["estimate"] == pytest.approx(b, rel=1e-10)


def test_stats_of_a_cer_are_in_units_by_their_definitions():
    d = as_dict(ws.XB_STATS(Y, X, "power", "method=mupe; base_year=2024"))
    eq = ws.XB_EQUATION(Y, X, "power", "method=mupe")[0][0]
    a = coef(ws.XB_COEFS(Y, X, "power", "method=mupe"), "a")["estimate"]
    b = coef(ws.XB_COEFS(Y, X, "power", "method=mupe"), "b_weight")["estimate"]
    f = a * WEIGHT**b
    n, p = len(COST), 2
    # common practice definitions, computed here: SEE, CV, SPE, percent bias, R² in units
    see = math.sqrt(np.sum((COST - f) ** 2) / (n - p))
    assert d["see"] == pytest.approx(see, rel=1e-9)
    assert d["cv"] == pytest.approx(see / COST.mean(), rel=1e-9)
    assert d["spe"] == pytest.approx(math.sqrt(np.sum(((COST - f) / f) ** 2) / (n - p)), rel=1e-9)
    assert d["bias_percent"] == pytest.approx(100 * np.mean((f - COST) / COST), rel=1e-8, abs=1e-12)
    r2 = 1 - np.sum((COST - f) ** 2) / np.sum((COST - COST.mean()) ** 2)
    assert d["r2_unit"] == pytest.approx(r2, rel=1e-12)
    assert d["unit_space"] == "unit" and d["base_year"] == 2024
    assert (d["range_min weight"], d["range_max weight"]) == (WEIGHT.min(), WEIGHT.max())
    assert eq.startswith("cost = ") and "weight^" in eq


def test_polynomial_stats_gain_the_unit_block_and_name_their_space():
    d = as_dict(ws.XB_STATS(Y, X, 2.0, "log=yes"))
    assert d["fit_space"] == "log" and d["unit_space"] == "unit"
    assert {"see", "cv", "r2_unit", "bias_percent", "spe"} <= set(d)
    assert "spe" not in as_dict(ws.XB_STATS(Y, X, 2.0))  # additive fit: no SPE


def test_base_year_is_shown_with_every_equation():
    for model, opts in (("power", "method=zmpe; base_year=2019"), (2.0, "base_year=2019")):
        assert ws.XB_EQUATION(Y, X, model, opts)[0][0].endswith("(costs in 2019 prices)")
    card = card_fields(ws.XB_CERCARD(Y, X, "power", "method=log; base_year=2019"))
    assert card["equation"].endswith("(costs in 2019 prices)") and card["base_year"] == 2019


# --- percentiles -------------------------------------------------------------------------

def test_percentiles_of_a_log_cer_follow_the_t_in_log_space():
    t = ws.XB_PLEVELS(Y, X, "power", [[30.0], [55.0]], "method=log; levels=10,50,80")
    assert t[0][:4] == ["estimate", "P10", "P50", "P80"]
    z = np.column_stack([np.ones(len(WEIGHT)), np.log(WEIGHT)])
    coefs, *_ = np.linalg.lstsq(z, np.log(COST), rcond=None)
    e = np.log(COST) - z @ coefs
    df = len(COST) - 2
    s2 = e @ e / df
    inv = np.linalg.inv(z.T @ z)
    for row, x0 in zip(t[1:3], (30.0, 55.0)):
        z0 = np.array([1.0, math.log(x0)])
        mu, sd = z0 @ coefs, math.sqrt(s2 * (1 + z0 @ inv @ z0))
        for value, q in zip(row[1:4], (0.10, 0.50, 0.80)):  # scipy's t quantile
            assert value == pytest.approx(math.exp(mu + sps.t.ppf(q, df) * sd), rel=1e-10)
        assert row[4] == "lognormal" and row[5] == pytest.approx(mu, rel=1e-12)


def test_percentile_rows_line_up_with_new_x_and_bad_levels_list_the_rule():
    t = ws.XB_PLEVELS(Y, X, "power", [[30.0], [None], [500.0]], "method=mupe")
    assert t[2][-1].startswith("dropped") and t[3][-1] == "extrapolated"
    msg = ws.XB_PLEVELS(Y, X, "power", [[30.0]], "method=mupe; levels=0,50")[0][0]
    assert msg.startswith("xlbridge:") and "between 0 and 100" in msg


# --- candidates --------------------------------------------------------------------------

def test_candidates_rank_the_true_driver_first():
    noise = np.round(RNG.uniform(1, 9, WEIGHT.size), 3)
    drivers = [["weight", "noise"]] + [[w, v] for w, v in zip(WEIGHT.tolist(), noise.tolist())]
    t = ws.XB_CANDIDATES(Y, drivers, "forms=power,linear; methods=log,mupe,zmpe")
    assert tuple(t[0]) == cer_cells.CANDIDATE_CAPTIONS
    rows = [dict(zip(cer_cells.CANDIDATE_COLUMNS, r)) for r in t[1:]
            if r[0] != "" and not str(r[0]).startswith("note")]
    assert rows[0]["verdict"] == "best" and rows[0]["drivers"] == "weight"
    assert all(r["n"] == len(COST) for r in rows)
    # the best row's SPE is the unit-space SPE of that fit from XB_STATS
    best = as_dict(ws.XB_STATS(Y, X, rows[0]["form"], f"method={rows[0]['method']}"))
    assert rows[0]["spe"] == pytest.approx(best["spe"], rel=1e-12)


# --- learning curves ---------------------------------------------------------------------

def test_learning_curve_from_exact_unit_data_gives_the_published_closed_forms():
    units = [float(n) for n in range(1, 11)]
    costs = [100.0 * n ** math.log2(0.85) for n in units]
    d = as_dict(ws.XB_LEARNING(units, costs, [[125.0]], "names=no"))
    assert d["slope, %"] == pytest.approx(85.0, rel=1e-10)
    assert d["first-unit cost (T1)"] == pytest.approx(100.0, rel=1e-10)
    assert d["cost of unit 125"] == pytest.approx(32.23647, abs=5e-6)  # 100 * 125^log2(0.85)
    direct = sum(100.0 * n ** math.log2(0.85) for n in range(1, 126))  # the direct sum
    assert d["cost of units 1-125"] == pytest.approx(direct, rel=1e-12)
    assert direct == pytest.approx(5201.085, abs=5e-4)


def test_learning_curve_from_lots_recovers_an_exact_80_percent_curve():
    lots = [[1.0, 5.0], [6.0, 20.0], [21.0, 50.0], [51.0, 100.0]]
    b = math.log2(0.80)
    costs = [sum(100.0 * i**b for i in range(int(f), int(g) + 1)) for f, g in lots]
    d = as_dict(ws.XB_LEARNING([["first", "last"]] + lots, ["lot cost"] + costs,
                               [[101.0, 110.0]]))
    assert d["slope, %"] == pytest.approx(80.0, rel=1e-9)
    assert d["first-unit cost (T1)"] == pytest.approx(100.0, rel=1e-9)
    want = sum(100.0 * i**b for i in range(101, 111))  # direct sum of the lot's units
    assert d["cost of units 101-110"] == pytest.approx(want, rel=1e-9)


# --- base year -----------------------------------------------------------------------------

def test_base_year_costs_are_the_index_ratio():
    index = [["year", "index"], [2020.0, 100.0], [2021.0, 104.0], [2022.0, 110.0]]
    t = ws.XB_BASEYEAR(["cost", 100.0, None, 250.0], ["year", 2020.0, 2021.0, 2021.0], index,
                       "base_year=2022")
    assert t[0] == ["cost_2022"]
    assert t[1][0] == pytest.approx(100.0 * 110 / 100) and t[2] == [""]
    assert t[3][0] == pytest.approx(250.0 * 110 / 104)


# --- the card ------------------------------------------------------------------------------

def test_card_shows_the_spread_at_the_centre_and_a_stable_content_hash():
    t = ws.XB_CERCARD(Y, X, "power", "method=mupe")
    d = card_fields(t)
    assert d["form"] == "power" and d["method"].startswith("mupe")
    assert d["n_used"] == len(COST) and d["n_dropped"] == 0
    # multiplicative error: P20/P80 = estimate * (1 -/+ t(0.8, df) * SPE * sqrt(1 + h))
    assert d["p80_percent"] == pytest.approx(-d["p20_percent"], rel=1e-9)
    assert d["p80_percent"] > 100 * sps.t.ppf(0.8, len(COST) - 2) * d["spe"]
    assert d["input_hash"] == card_fields(ws.XB_CERCARD(Y, X, "power", "method=mupe"))[
        "input_hash"]
    other = Y[:-1] + [Y[-1] + 1.0]
    assert card_fields(ws.XB_CERCARD(other, X, "power", "method=mupe"))["input_hash"] \
        != d["input_hash"]
    assert any(r[0] == "caution" for r in t)


# --- value shapes --------------------------------------------------------------------------

@pytest.mark.parametrize("fn, args", [
    (ws.XB_COEFS, ("power", "method=zmpe")),
    (ws.XB_CERCARD, ("power", "method=log")),
    (ws.XB_PLEVELS, ("exponential", [[30.0]], "method=mupe")),
])
def test_flat_lists_2d_columns_and_arrays_give_the_same_table(fn, args):
    col_y, col_x = [[v] for v in Y], [[v] for v in X]
    flat = fn(Y, X, *args)
    assert fn(col_y, col_x, *args) == flat
    assert fn(COST, WEIGHT, *args)[1:] != []  # numpy arrays, no header
    nh = fn(COST.tolist(), WEIGHT.tolist(), *args)
    assert fn(np.array(COST), np.array(WEIGHT), *args) == nh


# --- bad input: a clear message naming the row, never a number -----------------------------

def test_non_positive_y_for_a_power_fit_names_the_sheet_row():
    bad = list(Y)
    bad[4] = -3.0
    for fn in (ws.XB_COEFS, ws.XB_STATS, ws.XB_CERCARD):
        out = fn(bad, X, "power", "method=log")
        assert len(out) == 1 and out[0][0].startswith("xlbridge:")
        assert "row 4" in out[0][0] and "row 5 of the selected range" in out[0][0]


def test_non_positive_x_without_header_names_the_row():
    out = ws.XB_COEFS(COST.tolist(), [0.0] + WEIGHT[1:].tolist(), "power", "method=mupe")
    assert out[0][0].startswith("xlbridge:") and "row 1" in out[0][0]


def test_lot_with_last_before_first_and_missing_index_year_name_the_row():
    out = ws.XB_LEARNING([["first", "last"], [1.0, 10.0], [30.0, 11.0], [31.0, 60.0]],
                         ["cost", 800.0, 1300.0, 1600.0])
    assert out[0][0].startswith("xlbridge:") and "row 3 of the selected range" in out[0][0]
    out = ws.XB_BASEYEAR(["cost", 1.0, 2.0], ["year", 2020.0, 2023.0],
                         [[2020.0, 100.0], [2022.0, 110.0]], "base_year=2022")
    assert out[0][0].startswith("xlbridge:") and "2023" in out[0][0] and "row 3" in out[0][0]


def test_a_cer_form_without_method_and_bad_options_list_what_to_give():
    assert "method=" in ws.XB_COEFS(Y, X, "power")[0][0]
    msg = ws.XB_COEFS(Y, X, "power", "method=fast")[0][0]
    assert msg.startswith("xlbridge:") and all(m in msg for m in ("log", "mupe", "zmpe", "ols"))
    assert "base_year=" in ws.XB_BASEYEAR([1.0], [2020.0], [[2020.0, 1.0]])[0][0]


@pytest.mark.parametrize("name, extra", [("XB_CHECKS", ()), ("XB_ROWDIAG", ()),
                                         ("XB_OPTIMUM", ()), ("XB_MARGINAL", ([[30.0]],))])
def test_polynomial_tables_refuse_a_cer_with_a_message(name, extra):
    out = ws.FUNCTIONS[name](Y, X, "power", *extra, "method=mupe")
    assert len(out) == 1 and out[0][0].startswith("xlbridge:")
    assert "internal error" not in out[0][0] and "XB_CERCARD" in out[0][0]


def test_degree_scan_reads_method_as_the_remedy_it_stands_for():
    # on polynomials, method=mupe means error=percent and method=log means log=yes (the
    # engine's rule for fit); zmpe has no polynomial meaning and is refused with a message
    assert ws.XB_DEGREESCAN(Y, X, 3.0, "method=mupe") == ws.XB_DEGREESCAN(Y, X, 3.0,
                                                                          "error=percent")
    assert ws.XB_DEGREESCAN(Y, X, 3.0, "method=log") == ws.XB_DEGREESCAN(Y, X, 3.0, "log=yes")
    msg = ws.XB_DEGREESCAN(Y, X, 3.0, "method=zmpe")[0][0]
    assert msg.startswith("xlbridge:") and "internal error" not in msg
