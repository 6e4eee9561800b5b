"""Conformance: every XB_ function gives the same table for the same cells, whatever shape
the xlwings runtime hands them over in.

A block of cells is written once as *logical* cells (numbers, blanks, error values, text,
booleans, dates) and turned into what each runtime delivers:

- classic Windows add-in (COM): numbers ``float``; blanks ``None``; the seven classic error
  values as text (``err_to_str``), newer ones (``#SPILL!``, ``#CALC!``) as their automation
  code, an ``int``; dates ``datetime``. This is what tests/test_xlwings_contract.py sees
  xlwings' own conversion code produce. With ``ndim=2`` every range is a list of rows;
  without it one cell is a scalar and one row or column a flat list.
- JavaScript host (the in-browser and server runtimes; xlwings' Lite documentation: single
  cells arrive as float, integer, boolean or string, one-dimensional ranges as a list,
  two-dimensional ones as a list of lists): whole numbers ``int``; error values as their
  text with ``err_to_str`` or ``None`` without it; dates as serial numbers (a date-only
  cell a whole number, so an ``int``); with and without ``ndim=2``.
- plain Python callers: tuples and numpy arrays.

The reference is the float 2-D form (the classic add-in with ``ndim=2``); every other shape
must give an equal table (``==``: the same numbers to the last bit, the same text).
Data are invented (fixed seed).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from openpyxl.utils.datetime import to_excel

import xlbridge.worksheet as ws

# --- logical cells and the runtimes' shapes -------------------------------------------------


@dataclass(frozen=True)
class Err:
    """An error value in a cell."""

    text: str


CLASSIC_TEXT_ERRORS = {"#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A"}
# automation codes: 0x800A0000 + the error number, as a signed 32-bit int
ERROR_NUMBER = {"#N/A": 2042, "#SPILL!": 2045, "#CALC!": 2050, "#DIV/0!": 2007}


def classic_cell(c: Any) -> Any:
    if isinstance(c, Err):
        return c.text if c.text in CLASSIC_TEXT_ERRORS else -2146828288 + ERROR_NUMBER[c.text]
    if c is None or isinstance(c, (bool, str, dt.datetime)):
        return c
    return float(c)


def js_cell(c: Any, err_to_str: bool = True) -> Any:
    if isinstance(c, Err):
        return c.text if err_to_str else None
    if isinstance(c, dt.datetime):
        c = to_excel(c)  # serial number, computed by openpyxl (independent of ours)
    if c is None or isinstance(c, (bool, str)):
        return c
    f = float(c)
    return int(f) if f.is_integer() else f


def rows_of(block: list[list[Any]], cell: Callable[[Any], Any]) -> list[list[Any]]:
    return [[cell(c) for c in row] for row in block]


def squeezed(rows: list[list[Any]]) -> Any:
    """What a runtime hands over without ``ndim``: one cell a scalar, one row or column a
    flat list (xlwings' default dimension rule)."""
    if len(rows) == 1 and len(rows[0]) == 1:
        return rows[0][0]
    if len(rows) == 1:
        return list(rows[0])
    if all(len(r) == 1 for r in rows):
        return [r[0] for r in rows]
    return rows


@dataclass(frozen=True)
class Runtime:
    name: str
    block: Callable[[list[list[Any]]], Any]
    cell: Callable[[Any], Any]


REFERENCE = Runtime("classic, ndim=2 (float 2-D)", lambda b: rows_of(b, classic_cell),
                    classic_cell)
RUNTIMES = [
    Runtime("classic, no ndim", lambda b: squeezed(rows_of(b, classic_cell)), classic_cell),
    Runtime("JavaScript host, ndim=2", lambda b: rows_of(b, js_cell), js_cell),
    Runtime("JavaScript host, no ndim", lambda b: squeezed(rows_of(b, js_cell)), js_cell),
    Runtime("tuples", lambda b: tuple(tuple(r) for r in rows_of(b, classic_cell)),
            classic_cell),
    Runtime("numpy", lambda b: np.array(rows_of(b, js_cell), dtype=object), js_cell),
]
IDS = [r.name for r in RUNTIMES]


@dataclass(frozen=True)
class R:
    """A range argument (a block of logical cells); anything else is one cell."""

    block: list[list[Any]]


def call(runtime: Runtime, name: str, *args: Any) -> list[list[Any]]:
    values = [runtime.block(a.block) if isinstance(a, R) else runtime.cell(a) for a in args]
    return ws.FUNCTIONS[name](*values)


# --- invented data (fixed seed) -------------------------------------------------------------

def column(name: str, values: Any) -> R:
    return R([[name]] + [[v] for v in values])


def one_predictor():
    rng = np.random.default_rng(12)
    size = np.arange(5, 75, 5)  # whole numbers: ints in the JavaScript host
    cost = np.round(80 - 1.9 * size + 0.021 * size**2 + rng.normal(0, 1.5, size.size) * 2) / 2
    y, x = list(cost), list(size)
    y[3], x[6], y[8], x[10], y[11] = Err("#N/A"), Err("#SPILL!"), None, True, "n/a"
    region = ["north", "south", 7, "north", "south", 7, "north", "south", 7, "north",
              "south", 7, None, "north"]
    return column("cost", y), column("size", x), column("region", region)


def two_predictors():
    rng = np.random.default_rng(5)
    size = np.tile([10, 20, 30, 40, 50], 5)
    depth = np.repeat([1, 2, 3, 4, 5], 5)
    price = (40 + 1.1 * size + 6 * depth - 0.012 * size**2 - 0.9 * depth**2
             + 0.05 * size * depth + rng.normal(0, 0.8, size.size))
    y = list(np.round(price, 2))
    x = [[int(a), int(b)] for a, b in zip(size, depth)]
    y[4], x[9][1] = Err("#CALC!"), None
    return column("price", y), R([["size", "depth"]] + x)


Y1, X1, G1 = one_predictor()
Y2, X2 = two_predictors()
ROW_Y = R([[3.5, 4.0, 6.25, 7.0, 9.5, 10.0, 12.75]])
ROW_X = R([[1, 2, 3, 4, 5, 6, 7]])
DAYS = [dt.datetime(2024, m, d) for m in (1, 3, 5, 7) for d in (4, 18)]
DATE_Y = column("units", [10 + 0.5 * i + (i % 3) for i in range(len(DAYS))])
DATE_X = column("day", DAYS)

CASES = {
    "coefs": ("XB_COEFS", Y1, X1, 2),
    "coefs text model": ("XB_COEFS", Y1, X1, "size, size^2"),
    "stats": ("XB_STATS", Y1, X1, 2, "level=0.9"),
    "predict column": ("XB_PREDICT", Y1, X1, 2, column("size", [20, None, Err("#N/A"), 90])),
    "predict one cell": ("XB_PREDICT", Y1, X1, 2, R([[35]])),
    "predict row": ("XB_PREDICT", Y1, X1, 2, R([[20, 35.5, 50]])),
    "equation": ("XB_EQUATION", Y1, X1, 2),
    "degree scan": ("XB_DEGREESCAN", Y1, X1, 3),
    "checks": ("XB_CHECKS", Y1, X1, 2),
    "row diagnostics": ("XB_ROWDIAG", Y1, X1, 2),
    "optimum": ("XB_OPTIMUM", Y1, X1, 2),
    "marginal column": ("XB_MARGINAL", Y1, X1, 2, column("size", [15, 45])),
    "marginal one cell": ("XB_MARGINAL", Y1, X1, 2, R([[30]])),
    "plot": ("XB_PLOT", Y1, X1, 2, "curve"),
    "plot degrees": ("XB_PLOT", Y1, X1, 3, "degrees"),
    "groups": ("XB_GROUPS", G1, Y1, X1, 1),
    "versions": ("XB_VERSIONS",),
    "surface coefs": ("XB_COEFS", Y2, X2, "surface"),
    "surface stats": ("XB_STATS", Y2, X2, "surface", "names=auto; level=0.9"),
    "surface predict one row": ("XB_PREDICT", Y2, X2, "surface", R([[25, 3]])),
    "surface predict block": ("XB_PREDICT", Y2, X2, "surface",
                              R([["depth", "size"], [2, 15], [None, 30], [4.5, 45]])),
    "surface marginal one row": ("XB_MARGINAL", Y2, X2, "surface", R([[25, 3]])),
    "surface optimum": ("XB_OPTIMUM", Y2, X2, "surface"),
    "surface checks": ("XB_CHECKS", Y2, X2, "surface"),
    "surface rows": ("XB_ROWDIAG", Y2, X2, "surface", "header=no"),
    "data in rows": ("XB_COEFS", ROW_Y, ROW_X, 1),
    "data in rows, predict": ("XB_PREDICT", ROW_Y, ROW_X, 2, R([[2.5, 8]])),
    "dates": ("XB_COEFS", DATE_Y, DATE_X, 1),
    # cost-estimating relationships, percentiles, candidates, learning curves, base year
    "cer coefs": ("XB_COEFS", Y1, X1, "power", "method=mupe"),
    "cer stats": ("XB_STATS", Y1, X1, "power", "method=log; base_year=2024"),
    "cer predict": ("XB_PREDICT", Y1, X1, "exponential", column("size", [20, None, 90]),
                    "method=zmpe"),
    "cer equation": ("XB_EQUATION", Y1, X1, "factor", "method=ols; base_year=2021"),
    "percentiles": ("XB_PLEVELS", Y1, X1, "power", column("size", [20, 35.5]),
                    "method=log; levels=10,50,90"),
    "candidates": ("XB_CANDIDATES", Y2, X2, "forms=power,linear; methods=log,mupe"),
    "learning units": ("XB_LEARNING", column("unit", [1, 2, 3, 4, 5, 6, 8, 10]),
                       column("cost", [100, 84.5, 78.25, 72, 68.5, 65.75, 61, 58.5]),
                       R([[25]])),
    "learning lots": ("XB_LEARNING", R([["first", "last"], [1, 5], [6, 20], [21, 50]]),
                      column("lot cost", [410.5, 950, 1510.25]), R([[51, 60]])),
    "base year": ("XB_BASEYEAR", column("cost", [100, 250.5, None]),
                  column("year", [2020, 2021, 2022]),
                  R([[2020, 100], [2021, 104.5], [2022, 110]]), "base_year=2022"),
    "cer card": ("XB_CERCARD", Y1, X1, "power", "method=mupe; base_year=2024"),
}
BAD = {
    "heights differ": ("XB_COEFS", Y1, R(X1.block[:-1]), 2),
    "model is an error": ("XB_STATS", Y1, X1, Err("#N/A")),
    "model is a newer error": ("XB_STATS", Y1, X1, Err("#SPILL!")),
    "options is an error": ("XB_CHECKS", Y1, X1, 2, Err("#DIV/0!")),
    "x has no numbers": ("XB_COEFS", Y1, column("size", ["a"] * 14), 1),
    "y has two columns": ("XB_ROWDIAG", R([r + r for r in Y1.block]), X1, 1),
    "new_x too wide": ("XB_PREDICT", Y2, X2, "surface", R([[1, 2, 3]])),
    "at_x too wide": ("XB_MARGINAL", Y1, X1, 2, R([[1, 2], [3, 4]])),
    "too few rows": ("XB_OPTIMUM", R(Y1.block[:3]), R(X1.block[:3]), 2),
    "plot kind": ("XB_PLOT", Y1, X1, 2, "pie"),
    "degree scan max": ("XB_DEGREESCAN", Y1, X1, "many"),
    "groups heights": ("XB_GROUPS", R(G1.block[:5]), Y1, X1, 1),
    "power with y below 0": ("XB_COEFS", column("cost", [5, -1, 7, 9]),
                             column("size", [1, 2, 3, 4]), "power", "method=log"),
    "lot backwards": ("XB_LEARNING", R([[1, 5], [9, 6], [10, 20]]), R([[5], [6], [7]])),
    "index year missing": ("XB_BASEYEAR", column("cost", [1, 2]), column("year", [2019, 2020]),
                           R([[2020, 100]]), "base_year=2020"),
}


def assert_plain(table: Any) -> None:
    assert isinstance(table, list) and table and all(isinstance(r, list) for r in table)
    assert all(len(r) == len(table[0]) for r in table)
    for row in table:
        for v in row:
            assert type(v) in (float, str)
            assert not isinstance(v, float) or math.isfinite(v)


def test_every_function_is_covered():
    used = {c[0] for c in (*CASES.values(), *BAD.values())}
    assert used == set(ws.FUNCTIONS)


@pytest.mark.parametrize("case", list(CASES))
def test_reference_results_are_tables(case):
    t = call(REFERENCE, *CASES[case])
    assert_plain(t)
    if CASES[case][0] != "XB_PLOT":  # XB_PLOT says how to get the figure outside the add-in
        assert len(t) > 1 or len(t[0]) > 1 or not t[0][0].startswith("xlbridge:"), t


@pytest.mark.parametrize("runtime", RUNTIMES, ids=IDS)
@pytest.mark.parametrize("case", list(CASES))
def test_same_cells_same_table_in_every_shape(case, runtime):
    assert call(runtime, *CASES[case]) == call(REFERENCE, *CASES[case])


@pytest.mark.parametrize("runtime", [REFERENCE, *RUNTIMES], ids=["reference", *IDS])
@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_is_one_message_cell_in_every_shape(case, runtime):
    t = call(runtime, *BAD[case])
    assert len(t) == 1 and len(t[0]) == 1, t
    msg = t[0][0]
    assert msg.startswith("xlbridge: ") and "internal error" not in msg and "Traceback" not in msg


def test_errors_as_none_drop_the_same_rows_as_blanks():
    """A JavaScript-host runtime that ignores err_to_str hands error cells over as None:
    the rows are dropped as blank instead of as error values, the numbers are the same."""
    def blank_errors(c):
        return None if isinstance(c, Err) else c

    as_none = Runtime("JavaScript host, errors as None",
                      lambda b: rows_of(b, lambda c: js_cell(c, err_to_str=False)),
                      lambda c: js_cell(c, err_to_str=False))
    for case in ("coefs", "surface predict block", "row diagnostics", "groups"):
        name, *args = CASES[case]
        blanked = [R([[blank_errors(c) for c in row] for row in a.block])
                   if isinstance(a, R) else a for a in args]
        assert call(as_none, name, *args) == call(REFERENCE, name, *blanked), case


def test_flat_list_of_k_values_is_one_point_for_k_predictors():
    """The documented rule for a flat new_x: with k > 1 predictors a flat list of k values
    came from one row (one point); a column of k cells is refused in block form."""
    flat = ws.XB_PREDICT(Y2.block, X2.block, "surface", [25.0, 3.0])
    assert flat == call(REFERENCE, *CASES["surface predict one row"])
    column_block = ws.XB_PREDICT(Y2.block, X2.block, "surface", [[25.0], [3.0]])
    assert column_block[0][0].startswith("xlbridge: new_x has 1 columns")
    wrong = ws.XB_PREDICT(Y2.block, X2.block, "surface", [25.0, 3.0, 1.0])
    assert "one row per point" in wrong[0][0]


# --- property: a random block gives the same table in every shape ---------------------------

cell = st.one_of(
    st.integers(min_value=-50, max_value=500),
    st.floats(min_value=-50, max_value=500, allow_nan=False).map(lambda v: round(v, 3)),
    st.sampled_from([None, True, False, "text", "", Err("#N/A"), Err("#SPILL!"),
                     Err("#DIV/0!"), dt.datetime(2023, 5, 17), dt.datetime(1999, 12, 31)]),
)
numbers = st.integers(min_value=0, max_value=200)


@st.composite
def blocks(draw):
    n = draw(st.integers(min_value=1, max_value=12))
    k = draw(st.integers(min_value=1, max_value=2))
    # mostly numbers, so that most draws can be fitted and compare whole tables
    mostly = st.one_of(numbers, numbers, numbers, cell)
    y = [[draw(mostly)] for _ in range(n)]
    x = [[draw(mostly) for _ in range(k)] for _ in range(n)]
    return R(y), R(x), (1 if k == 1 else "linear")


@settings(max_examples=60)
@given(blocks(), st.sampled_from(["XB_COEFS", "XB_ROWDIAG", "XB_STATS"]))
def test_random_blocks_give_the_same_table_in_every_shape(data, name):
    y, x, model = data
    want = call(REFERENCE, name, y, x, model)
    assert_plain(want)
    for runtime in RUNTIMES:
        assert call(runtime, name, y, x, model) == want, runtime.name
