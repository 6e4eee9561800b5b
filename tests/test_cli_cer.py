"""CLI commands for cost-estimating relationships: fit with a CER form, card, plevels,
candidates, learning, and costs brought to a base year. The numbers equal the Python API
(itself checked against closed forms, numpy and statsmodels in test_cer.py and
test_cer_cells.py) or outside references named at each check; the input is left as it was.
All data are invented (fixed seed).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

import xlbridge

from .bookfactory import build_book, run, sha256

RNG = np.random.default_rng(4411)
WEIGHT = np.round(np.sort(RNG.uniform(5, 90, 15)), 1)
LENGTH = np.round(np.sqrt(WEIGHT) * 3 + RNG.normal(0, 1, WEIGHT.size), 2)
YEAR = np.array([2019 + i % 5 for i in range(WEIGHT.size)])
COST = np.round(7.5 * WEIGHT**0.72 * np.exp(RNG.normal(0, 0.08, WEIGHT.size)), 2)
INDEX = {2019: 100.0, 2020: 102.5, 2021: 106.0, 2022: 112.0, 2023: 116.5, 2024: 119.0}
LOTS = [(1, 5), (6, 20), (21, 50), (51, 100)]
LOT_COST = [round(sum(100 * i ** math.log2(0.85) for i in range(f, g + 1)), 4) for f, g in LOTS]


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    data = [["weight", "length", "year", "cost"]] + [
        [float(w), float(v), int(y), float(c)] for w, v, y, c in zip(WEIGHT, LENGTH, YEAR, COST)]
    index = [["year", "index"]] + [[y, v] for y, v in INDEX.items()]
    lots = [["first", "last", "cost", "", "m", "n"]] + [
        [f, g, c] + ([None, 101, 120] if i == 0 else []) for i, ((f, g), c) in
        enumerate(zip(LOTS, LOT_COST))]
    quote = [["weight"], [30.0], [500.0]]
    return build_book(tmp_path / "steel.xlsx", {"Data": data, "Index": index, "Lots": lots,
                                                "Quote": quote})


def test_fit_with_a_power_form_equals_the_api(book, capsys):
    before = sha256(book)
    code, out, err = run(["fit", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=mupe", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    api = xlbridge.fit(COST, WEIGHT, "power", method="mupe", names=("weight",))
    assert [c["estimate"] for c in doc["coefficients"]] == api.estimates.tolist()
    assert doc["unit_stats"]["spe"] == api.unit.spe and "relevant_range" in doc
    assert sha256(book) == before


def test_fit_table_names_the_cer_and_prints_the_equation(book, capsys):
    code, out, err = run(["fit", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "exponential", "--options", "method=zmpe"], capsys)
    assert code == 0, err
    assert "exponential CER by zmpe" in out and "equation: cost = " in out
    assert "sum of percent errors" in out  # the ZMPE row of the statistics block


def test_base_year_option_converts_the_costs_before_fitting(book, capsys):
    code, out, err = run(["fit", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=log; base_year=2024", "--years",
                          "Data!C:C", "--index", "Index!A:B", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    # the price-index ratio: cost * index(base) / index(year)
    converted = COST * INDEX[2024] / np.array([INDEX[y] for y in YEAR])
    b, ln_a = np.polyfit(np.log(WEIGHT), np.log(converted), 1)  # numpy least squares on logs
    assert doc["coefficients"][1]["estimate"] == pytest.approx(b, rel=1e-10)
    assert doc["response"] == "cost_2024"
    code, out, err = run(["card", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=log; base_year=2024", "--years",
                          "Data!C:C", "--index", "Index!A:B"], capsys)
    assert code == 0, err
    assert "(costs in 2024 prices)" in out


def test_missing_index_year_names_the_row(book, capsys):
    code, out, err = run(["fit", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=log; base_year=2024", "--years",
                          "Data!C:C", "--index", "Index!A1:B5"], capsys)  # 2023, 2024 left out
    assert code == 2 and out == ""
    assert err.startswith("xlbridge:") and "not in the index" in err


def test_card_json_has_the_spread_at_the_centre(book, capsys):
    code, out, err = run(["card", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=mupe", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    api = xlbridge.fit(COST, WEIGHT, "power", method="mupe", names=("weight",))
    pc = xlbridge.percentiles(api, [WEIGHT.mean()], (20, 50, 80))
    assert doc["p20_at_centre"] == pytest.approx(pc.values[0][0], rel=1e-12)
    assert doc["p80_at_centre"] == pytest.approx(pc.values[0][2], rel=1e-12)
    assert doc["cautions"] and doc["fit"]["form"] == "power"


def test_plevels_json_equals_the_api_and_warns_of_extrapolation(book, capsys):
    code, out, err = run(["plevels", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=log; levels=10,80", "--new-x",
                          "Quote!A:A", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    api = xlbridge.fit(COST, WEIGHT, "power", method="log", names=("weight",))
    want = xlbridge.percentiles(api, [30.0, 500.0], (10, 80))
    assert doc["values"] == want.values.tolist() and doc["params"][0]["distribution"] == \
        "lognormal"
    assert "xlbridge: warning: --new-x row 2 lies outside" in err


def test_candidates_rank_and_report_progress_free_output(book, capsys):
    code, out, err = run(["candidates", book, "--y", "Data!D:D", "--drivers", "Data!A:B",
                          "--options", "forms=power,linear; methods=log,mupe; max_drivers=2",
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    api = xlbridge.compare_candidates(COST, np.column_stack([WEIGHT, LENGTH]),
                                      ("weight", "length"), forms=("power", "linear"),
                                      methods=("log", "mupe"), max_drivers=2)
    assert doc == json.loads(json.dumps(api.to_dict()))
    code, out, err = run(["candidates", book, "--y", "Data!D:D", "--drivers", "Data!A:B"],
                         capsys)
    assert code == 0 and "best" in out and "note: ranked by" in out


def test_learning_from_lots_recovers_the_curve_and_costs_a_lot(book, capsys):
    code, out, err = run(["learning", book, "--units", "Lots!A:B", "--costs", "Lots!C:C",
                          "--at", "Lots!E2:F2", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    # lots are exact sums of an 85 % unit curve with T1 = 100 (rounded to 4 decimals)
    assert doc["slope"] == pytest.approx(0.85, rel=1e-6)
    assert doc["t1"] == pytest.approx(100.0, rel=1e-5)
    want = sum(100 * i ** math.log2(0.85) for i in range(101, 121))  # direct sum
    assert doc["costs"] == [{"first_unit": 101.0, "last_unit": 120.0,
                             "cost": pytest.approx(want, rel=1e-5)}]


def test_bad_input_gives_a_message_naming_the_row_never_a_number(book, tmp_path, capsys):
    bad = build_book(tmp_path / "bad.xlsx", {"Data": [["w", "cost"], [10.0, 50.0],
                                                      [20.0, -4.0], [30.0, 90.0],
                                                      [40.0, 99.0]],
                                             "Lots": [["first", "last", "cost"], [1, 5, 400],
                                                      [9, 6, 300], [10, 20, 700]]})
    code, out, err = run(["fit", bad, "--y", "Data!B:B", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=log"], capsys)
    assert code == 1 and out == ""  # readable data the power model cannot take: a failed fit
    assert err.startswith("xlbridge:") and "data row 2 is sheet row 3" in err
    code, out, err = run(["learning", bad, "--units", "Lots!A:B", "--costs", "Lots!C:C"],
                         capsys)
    assert code == 2 and out == "" and "last unit 6 is before first unit 9" in err
    assert "data row 2 is sheet row 3" in err
    code, out, err = run(["fit", bad, "--y", "Data!B:B", "--x", "Data!A:A", "--model",
                          "power"], capsys)
    assert code == 2 and "method=mupe" in err


def test_report_of_a_cer_puts_its_card_on_top(book, tmp_path, capsys):
    out = tmp_path / "cer.html"
    code, _, err = run(["report", book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                        "power", "--options", "method=zmpe", "--out", out], capsys)
    assert code == 0, err
    page = out.read_text(encoding="utf-8")
    assert page.index("id='card'") < page.index("id='data'") < page.index("id='plots'")
    api = xlbridge.fit(COST, WEIGHT, "power", method="zmpe", names=("weight",))
    assert api.equation().replace("y = ", "cost = ") in page
    assert page.count("data:image/png;base64,") == 2


@pytest.mark.parametrize("command", ["checks", "rows", "optimum"])
def test_polynomial_commands_refuse_a_cer_as_a_usage_error(book, capsys, command):
    code, out, err = run([command, book, "--y", "Data!D:D", "--x", "Data!A:A", "--model",
                          "power", "--options", "method=mupe"], capsys)
    assert code == 2 and out == "" and err.startswith("xlbridge:")
    assert "internal error" not in err and "card" in err
