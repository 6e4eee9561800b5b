"""Contract with the real xlwings UDF code (open-source core), run on Linux.

A child process (tests/xlwings_contract_child.py) stubs pythoncom, pywintypes and
win32com.client, imports xlwings.udfs, binds xw.func/arg/ret to its real xlfunc/xlarg/xlret
before importing xlbridge.worksheet, writes the VBA wrapper with generate_vba_wrapper,
runs import_udfs against a fake workbook (capturing the descriptions it registers), and
pushes COM-style raw values through xlwings.conversion.read -> function ->
xlwings.conversion.write with an "excel" engine whose cleaning code is xlwings' own.
Expected numbers come from statsmodels OLS on the rows a careful reader keeps.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from openpyxl.utils.datetime import to_excel

from .tablecheck import stats_by_field

CHILD = Path(__file__).with_name("xlwings_contract_child.py")
ROOT = Path(__file__).resolve().parents[1]
MISSING = -2147352572  # COM's value for an omitted Optional argument
NA = -2146826246  # #N/A as COM hands it
SPILL = -2146826243  # #SPILL!: not in xlwings' error table, stays a negative int

EXPECTED_ARGS = {
    "XB_COEFS": ["y", "x", "model", "options"],
    "XB_STATS": ["y", "x", "model", "options"],
    "XB_PREDICT": ["y", "x", "model", "new_x", "options"],
    "XB_EQUATION": ["y", "x", "model", "options"],
    "XB_DEGREESCAN": ["y", "x", "max_degree", "options"],
    "XB_CHECKS": ["y", "x", "model", "options"],
    "XB_ROWDIAG": ["y", "x", "model", "options"],
    "XB_OPTIMUM": ["y", "x", "model", "options"],
    "XB_MARGINAL": ["y", "x", "model", "at_x", "options"],
    "XB_PLOT": ["y", "x", "model", "kind", "options"],  # caller is filled in by xlwings
    "XB_GROUPS": ["group", "y", "x", "model", "options"],
    "XB_VERSIONS": [],
    "XB_PLEVELS": ["y", "x", "model", "new_x", "options"],
    "XB_CANDIDATES": ["y", "drivers", "options"],
    "XB_LEARNING": ["units", "costs", "at", "options"],
    "XB_BASEYEAR": ["costs", "years", "index", "options"],
    "XB_CERCARD": ["y", "x", "model", "options"],
}
OPTIONAL_ARGS = {"options", "at"}
RANGE_ARGS = {"y", "x", "new_x", "at_x", "group", "drivers", "units", "costs", "at", "years",
              "index"}


def invented():
    """Invented demo data (fixed seed): unit cost against batch size."""
    rng = np.random.default_rng(17)
    size = np.round(np.linspace(5, 60, 24), 1)
    cost = 80 - 1.9 * size + 0.021 * size**2 + rng.normal(0, 1.5, size.size)
    return size, cost


SIZE, COST = invented()
BAD = {2: ("y", NA), 5: ("x", SPILL), 8: ("y", None), 11: ("x", True), 14: ("y", "n/a")}
KEEP = np.array([i not in BAD for i in range(SIZE.size)])


def com_column(name, values, which):
    col = [[name]] + [[float(v)] for v in values]
    for i, (where, bad) in BAD.items():
        if where == which:
            col[i + 1] = [bad]
    return col


Y = com_column("cost", COST, "y")
X = com_column("size", SIZE, "x")
DATES = [f"2024-{m:02d}-{d:02d}T00:00:00" for m in (1, 2, 3, 4) for d in (3, 17)]
DATE_Y = [float(v) for v in 10 + 0.05 * np.arange(len(DATES)) ** 1.5]

CASES = [
    {"id": "coefs", "function": "XB_COEFS", "args": [Y, X, 2.0, MISSING]},
    {"id": "stats", "function": "XB_STATS", "args": [Y, X, 2.0, "level=0.9; header=no"]},
    {"id": "predict", "function": "XB_PREDICT",
     "args": [Y, X, 2.0, [[20.0], [None], [NA], [90.0]], "Header = No"]},
    {"id": "equation", "function": "XB_EQUATION", "args": [Y, X, 2.0, MISSING]},
    {"id": "info", "function": "XB_VERSIONS", "args": []},
    {"id": "mismatch", "function": "XB_COEFS", "args": [Y, X[:-1], 2.0, MISSING]},
    {"id": "bad_options", "function": "XB_STATS", "args": [Y, X, 2.0, "confidence=0.9"]},
    {"id": "error_model", "function": "XB_COEFS", "args": [Y, X, NA, MISSING]},
    {"id": "dates", "function": "XB_COEFS",
     "args": [[[v] for v in DATE_Y], [[{"date": d}] for d in DATES], 1.0, "header=no"]},
    {"id": "row", "function": "XB_COEFS",
     "args": [[[float(v) for v in COST[:6]]], [[float(v) for v in SIZE[:6]]], 1.0, MISSING]},
    {"id": "read_block", "function": "XB_COEFS", "read_only": True,
     "args": [[[1.5, {"date": "2024-01-02T06:00:00"}], [NA, SPILL], [True, ""],
               [None, "text"]]]},
    {"id": "read_cell", "function": "XB_COEFS", "read_only": True, "args": [NA]},
    {"id": "read_row", "function": "XB_COEFS", "read_only": True, "args": [[[1.0, 2.0, 3.0]]]},
    {"id": "read_column", "function": "XB_COEFS", "read_only": True,
     "args": [[[1.0], [None], [3.0]]]},
]


@pytest.fixture(scope="module")
def child():
    proc = subprocess.run([sys.executable, str(CHILD)], input=json.dumps(CASES),
                          capture_output=True, text=True, cwd=ROOT, timeout=120,
                          env={"PATH": "", "PYTHONPATH": str(ROOT), "HOME": "/tmp"})
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(proc.stdout)


def ols():
    X = np.column_stack([SIZE[KEEP] ** e for e in range(3)])
    return sm.OLS(COST[KEEP], X).fit()


def vba_functions(vba):
    return {m.group(1): m.group(2) for m in re.finditer(r"^Function (\w+)\((.*)\)$", vba,
                                                         flags=re.M)}


def test_real_decorators_were_used(child):
    assert child["decorators"] == "xlwings"
    for name, meta in child["metadata"].items():
        assert meta["shim"] is None, name


def test_one_vba_function_per_worksheet_function(child):
    vba = child["vba"]
    funcs = vba_functions(vba)
    assert set(funcs) == set(EXPECTED_ARGS)
    assert vba.count("End Function") == len(EXPECTED_ARGS) and "Sub " not in vba
    for name, args in EXPECTED_ARGS.items():
        sig = [a.strip() for a in funcs[name].split(",")] if funcs[name] else []
        want = [f"Optional {a}" if a in OPTIONAL_ARGS else a for a in args]
        assert sig == want, name
        passed = args + (["Nothing"] if name == "XB_PLOT" else [])  # caller, set by xlwings
        assert f'XLPy.CallUDF("xlbridge.worksheet", "{name}", Array({", ".join(passed)})' in vba
    assert "Application.Volatile" not in vba


def test_import_functions_registers_descriptions_and_category(child):
    (imported,) = child["imported_vba"]
    assert imported.startswith('Attribute VB_Name = "xlwings_udfs"')
    assert vba_functions(imported) == vba_functions(child["vba"])
    options = {o["Macro"].split("!")[1]: o for o in child["macro_options"]}
    assert set(options) == set(EXPECTED_ARGS)
    for name, o in options.items():
        meta = child["metadata"][name]
        assert o["Category"] == "xlbridge"
        assert o["Description"] == meta["doc"] and 0 < len(o["Description"]) <= 255
        docs = o["ArgumentDescriptions"] or []
        assert len(docs) == len(EXPECTED_ARGS[name])
        assert all(0 < len(d) <= 255 and not d.startswith("Positional argument")
                   for d in docs)
        assert meta["volatile"] is False
        # xlwings fills "caller" itself (the calling range): not an argument in the cell
        assert all(a["err_to_str"] for a in meta["args"] if a["name"] != "caller")
        ranges = {a["name"] for a in meta["args"] if a["ndim"] == 2}
        assert ranges == RANGE_ARGS & set(EXPECTED_ARGS[name])


def test_only_the_classic_add_in_gets_the_hidden_caller(child):
    assert child["fills_caller"] is True
    names = [a["name"] for a in child["metadata"]["XB_PLOT"]["args"]]
    assert names == EXPECTED_ARGS["XB_PLOT"] + ["caller"]


def test_what_xlwings_hands_the_functions(child):
    reads = child["reads"]
    # err_to_str turns the classic errors into text; newer errors stay negative ints;
    # blanks and "" become None; dates datetime; booleans stay booleans
    assert reads["read_block"] == [[1.5, {"datetime": "2024-01-02T06:00:00"}],
                                   ["#N/A", SPILL], [True, None], [None, "text"]]
    # ndim=2 on range arguments: one cell, one row and one column keep their orientation
    assert reads["read_cell"] == [["#N/A"]]
    assert reads["read_row"] == [[1.0, 2.0, 3.0]]
    assert reads["read_column"] == [[1.0], [None], [3.0]]


def assert_cells(table):
    assert isinstance(table, list) and table
    width = len(table[0])
    for row in table:
        assert len(row) == width
        for v in row:
            assert type(v) in (float, str), v
            assert not isinstance(v, float) or math.isfinite(v)
            assert not isinstance(v, str) or width * len(table) == 1 or len(v) <= 255


def test_results_reach_the_cells_as_plain_values(child):
    for table in child["results"].values():
        assert_cells(table)


def test_coefs_through_xlwings_match_statsmodels(child):
    t = child["results"]["coefs"]
    m = ols()
    assert t[0][:5] == ["term", "estimate", "low (95%)", "high (95%)", "standard error"]
    assert [r[0] for r in t[1:]] == ["intercept", "size", "size^2"]
    assert [r[1] for r in t[1:]] == pytest.approx(list(m.params), rel=1e-9)
    assert [r[4] for r in t[1:]] == pytest.approx(list(m.bse), rel=1e-8)
    assert [r[6] for r in t[1:]] == pytest.approx(list(m.pvalues), rel=1e-7)


def test_stats_through_xlwings(child):
    t = child["results"]["stats"]
    assert t[0][0] != "question"  # header=no
    d = stats_by_field(t)
    m = ols()
    assert d["n_dropped"] == float(len(BAD)) and d["n_used"] == m.nobs
    assert d["r2"] == pytest.approx(m.rsquared, rel=1e-10)
    assert d["level"] == 0.9


def test_predict_through_xlwings_lines_up_with_new_x(child):
    t = child["results"]["predict"]
    assert len(t) == 4  # header=no: one row per new_x row
    m = ols()
    frame = m.get_prediction([[1, 20.0, 400.0], [1, 90.0, 8100.0]]).summary_frame(alpha=0.05)
    assert t[0][:5] == pytest.approx([frame["mean"][0], frame["mean_ci_lower"][0],
                                      frame["mean_ci_upper"][0], frame["obs_ci_lower"][0],
                                      frame["obs_ci_upper"][0]], rel=1e-8)
    assert t[3][0] == pytest.approx(frame["mean"][1], rel=1e-9)
    assert (t[0][6], t[3][6]) == ("inside", "extrapolated")
    assert t[1][:6] == [""] * 6 and "blank" in t[1][6]
    assert t[2][:6] == [""] * 6 and "error" in t[2][6]


def test_equation_and_info_are_plain_text(child):
    ((eq,),) = child["results"]["equation"]
    assert eq.startswith("cost = ")
    rhs = eq.split("=", 1)[1].replace("^", "**")
    assert eval(rhs, {"size": 33.0}) == pytest.approx(
        float(ols().predict([[1, 33.0, 1089.0]])[0]), rel=1e-12)
    info = dict(map(tuple, child["results"]["info"][1:]))
    assert info["xlwings"] != "not installed" and "numpy" in info


def test_bad_input_through_xlwings_is_one_message_cell(child):
    for case, needle in (("mismatch", "rows but x has"), ("bad_options", "unknown option"),
                         ("error_model", "error")):
        ((msg,),) = child["results"][case]
        assert msg.startswith("xlbridge: ") and needle in msg, msg


def test_dates_and_rows_through_xlwings(child):
    serial = np.array([to_excel(np.datetime64(d).astype(object)) for d in DATES])
    m = sm.OLS(np.array(DATE_Y), sm.add_constant(serial)).fit()
    got = child["results"]["dates"]
    assert [r[1] for r in got] == pytest.approx(list(m.params), rel=1e-8)
    row = child["results"]["row"]
    m6 = sm.OLS(COST[:6], sm.add_constant(SIZE[:6])).fit()
    assert [r[1] for r in row[1:]] == pytest.approx(list(m6.params), rel=1e-9)
