"""Cell adaptation: raw cell shapes and values in, clean arrays and plain tables out.

Reference values come from numpy.linalg.lstsq on the rows a careful reader would keep,
openpyxl's date-serial conversion, and NIST StRD certified values; never from our own
code path.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from dataclasses import fields

import numpy as np
import pytest
from openpyxl.utils.datetime import to_excel

from xlbridge import cells
from xlbridge.cells import (
    STATS_NOTE,
    CellError,
    CellErrorKind,
    clean_cells,
    fit_cells,
    model_value,
    prepare,
    prepare_fit,
)
from xlbridge.cells.cache import FIT_CACHE
from xlbridge.cells.options import Options, OptionsError
from xlbridge.cells.statrows import QUESTIONS
from xlbridge.engine import FitStats
from xlbridge.engine.errors import ModelError as EngineModelError
from xlbridge.engine.errors import ModelErrorKind

from .conftest import nist_set
from .tablecheck import stats_by_field, stats_notes

NA = -2146826246  # #N/A as COM hands it without err_to_str
SPILL = -2146826243  # a newer error value: a plain negative int


def _nist(name: str) -> dict:
    """A NIST StRD set as plain floats (skips the test when the folder is absent)."""
    return json.loads(json.dumps(nist_set(name), default=float))


def lstsq_poly(x, y, degree, intercept=True):
    """Independent reference: numpy least squares on the raw-power design."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    cols = ([np.ones_like(x)] if intercept else []) + [x**e for e in range(1, degree + 1)]
    return np.linalg.lstsq(np.column_stack(cols), y, rcond=None)[0]


def invented(n=25, seed=3):
    """Invented demo data (fixed seed): a gently curved cost curve with noise."""
    rng = np.random.default_rng(seed)
    x = np.round(np.linspace(1.0, 12.0, n), 3)
    y = 4.0 + 1.5 * x - 0.08 * x**2 + rng.normal(0, 0.3, n)
    return x.tolist(), y.tolist()


@pytest.fixture(autouse=True)
def _fresh_cache():
    FIT_CACHE.clear()
    yield
    FIT_CACHE.clear()


def assert_plain_table(table):
    assert isinstance(table, list) and table and all(isinstance(r, list) for r in table)
    width = len(table[0])
    for row in table:
        assert len(row) == width
        for v in row:
            assert type(v) in (float, str), v
            if isinstance(v, float):
                assert math.isfinite(v)
            elif width > 1 or len(table) > 1:
                assert len(v) <= 255


# --- single cells and shapes ---------------------------------------------------------------

def test_scalar_flat_and_block_shapes():
    assert clean_cells(2.5).values.tolist() == [[2.5]]
    assert clean_cells([1.0, 2.0, 3.0]).values.tolist() == [[1.0], [2.0], [3.0]]
    assert clean_cells([1.0, 2.0], flat_as_row=True).values.tolist() == [[1.0, 2.0]]
    assert clean_cells([[1.0, 2.0], [3.0, 4.0]]).values.tolist() == [[1.0, 2.0], [3.0, 4.0]]
    assert clean_cells(((1.0,), (2.0,))).values.tolist() == [[1.0], [2.0]]
    assert clean_cells(np.array([[1.0], [2.0]])).values.tolist() == [[1.0], [2.0]]


def test_ragged_and_mixed_blocks_are_refused():
    with pytest.raises(CellError, match="different lengths"):
        clean_cells([[1.0, 2.0], [3.0]])
    with pytest.raises(CellError, match="mixes rows"):
        clean_cells([[1.0], 2.0])


@pytest.mark.parametrize("value, code", [
    (None, cells.BLANK), ("", cells.BLANK), ("  ", cells.BLANK), (float("nan"), cells.BLANK),
    (True, cells.BOOL), (False, cells.BOOL), ("abc", cells.TEXT), ("12 m", cells.TEXT),
    ("nan", cells.TEXT),
    ("#N/A", cells.ERROR), ("#DIV/0!", cells.ERROR), ("#SPILL!", cells.ERROR),
    ("#calc!", cells.ERROR), ("xlbridge: y has 3 rows", cells.ERROR), (NA, cells.ERROR),
    (SPILL, cells.ERROR), (float("inf"), cells.NONFINITE),
    (-float("inf"), cells.NONFINITE),
])
def test_unusable_cells_give_nan_and_a_reason(value, code):
    c = clean_cells([[1.0], [value]], names="no")
    assert c.values[0, 0] == 1.0 and math.isnan(c.values[1, 0])
    assert c.codes[1, 0] == code


def test_ints_are_numbers_except_the_error_codes_of_the_classic_add_in():
    c = clean_cells([3, 4.5, True, -7, NA, np.int64(12)])
    assert c.values[[0, 1, 3, 5], 0].tolist() == [3.0, 4.5, -7.0, 12.0]
    assert c.codes[2, 0] == cells.BOOL  # a boolean is never a number
    assert c.codes[4, 0] == cells.ERROR  # #N/A's automation code: 0x800A0000 + 2042
    assert np.isnan(clean_cells([10**400]).values[0, 0])


def test_dates_are_their_serial_day_numbers():
    days = [dt.datetime(2024, 1, 2), dt.datetime(1999, 12, 31, 18, 0), dt.date(2021, 3, 1)]
    got = clean_cells(days).values[:, 0]
    # openpyxl's conversion is an independent implementation of the same serial numbers
    assert got.tolist() == pytest.approx([to_excel(d) for d in days], abs=1e-9)


def test_text_first_row_is_names_with_names_auto():
    c = clean_cells([["size", "depth"], [1.0, 2.0], [3.0, 4.0]])
    assert c.names == ("size", "depth") and c.n_rows == 2
    partial = clean_cells([["size", 1.0], [1.0, 2.0]])  # not a header: stays a data row
    assert partial.names is None and partial.n_rows == 2
    err = clean_cells([["#N/A"], [1.0]])
    assert err.names is None and err.codes[0, 0] == cells.ERROR


def test_names_no_and_names_yes():
    c = clean_cells([["size"], [1.0]], names="no")
    assert c.names is None and c.codes[0, 0] == cells.TEXT
    y = clean_cells([[2020.0, 2021.0], [1.0, 2.0]], names="yes")
    assert y.names == ("2020", "2021") and y.n_rows == 1
    with pytest.raises(CellError, match="names=yes"):
        clean_cells([[None], [1.0]], names="yes")


@pytest.mark.parametrize("raw, expected", [(2.0, 2), (3, 3), ("2", "2"), (" surface ", "surface"),
                                           ([[2.0]], 2)])
def test_model_values(raw, expected):
    assert model_value(raw) == expected


@pytest.mark.parametrize("raw, match", [
    (None, "missing"), ("", "missing"), (True, "TRUE/FALSE|True"), (2.5, "whole-number"),
    ("#N/A", "error"), (NA, "error value"), (float("inf"), "degree"), ([1.0, 2.0], "one cell"),
    (dt.datetime(2024, 1, 1), "degree"),
])
def test_bad_model_values(raw, match):
    # the cell rules (blank, error value, one cell) are checked by model_value, the model
    # rules (a whole degree, a model text) by the engine: both reach the caller as CellError
    x, y = invented(10)
    with pytest.raises(CellError, match=match):
        fit_cells(y, x, raw)


def test_options_cell_errors():
    with pytest.raises(CellError, match="error"):
        cells.options_value("#N/A")
    with pytest.raises(CellError, match="error value"):
        cells.options_value(NA)
    with pytest.raises(OptionsError, match="must be text"):
        cells.options_value(0.9)
    assert cells.options_value([["level=0.9"]]).level == 0.9


# --- fitting ---------------------------------------------------------------------------------

def test_listwise_drop_is_counted_and_matches_a_fit_on_the_kept_rows():
    x, y = invented()
    ry, rx = list(y), list(x)
    ry[2], rx[5], rx[7], ry[9], rx[11], ry[13] = None, "#N/A", SPILL, True, "n/a", ""
    keep = [i for i in range(len(x)) if i not in (2, 5, 7, 9, 11, 13)]
    res, opts = fit_cells(["cost"] + ry, ["size"] + rx, 2.0)
    assert res.n_dropped == 6 and res.stats.n_used == len(keep)
    ref = lstsq_poly([x[i] for i in keep], [y[i] for i in keep], 2)
    assert [c.estimate for c in res.coefficients] == pytest.approx(ref, rel=1e-10)
    assert res.spec.predictors == ("size",)
    assert res.equation().startswith("cost = ")
    assert any("6 rows dropped" in n for n in res.notes)
    assert res.used.tolist() == [i in keep for i in range(len(x))]


def test_mismatched_lengths_message_names_both_sizes():
    x, y = invented(10)
    with pytest.raises(CellError, match="y has 10 rows but x has 9 rows"):
        prepare_fit(y, x[:9], 1.0)
    with pytest.raises(CellError, match="taken as names"):
        prepare_fit(["cost"] + y[:9], x, 1.0)


def test_too_few_rows_says_how_many_were_dropped():
    with pytest.raises(CellError) as info:
        fit_cells([1.0, 2.0, None, "a", 5.0], [1.0, 2.0, 3.0, 4.0, None], 2.0)
    assert "found 2" in str(info.value) and "3 rows dropped" in str(info.value)
    assert info.value.kind is CellErrorKind.MODEL
    assert info.value.model_kind is ModelErrorKind.SHORTAGE


def test_dropped_rows_are_added_by_error_kind_not_by_words():
    inp = prepare_fit([1.0, 2.0, None, "a", 5.0], [1.0, 2.0, 3.0, 4.0, None], 2.0)
    short = prepare.model_failure(
        EngineModelError("needs at least 4 rows", ModelErrorKind.SHORTAGE), inp)
    assert str(short) == ("needs at least 4 rows (3 rows dropped (blank 2, text 1) for "
                          "blank, text or error cells)")
    assert short.kind is CellErrorKind.MODEL and short.model_kind is ModelErrorKind.SHORTAGE
    # the same words under another kind are passed on unchanged
    other = prepare.model_failure(
        EngineModelError("found 2 of them", ModelErrorKind.DATA), inp)
    assert str(other) == "found 2 of them" and other.model_kind is ModelErrorKind.DATA
    # nothing dropped: nothing to add
    clean = prepare_fit([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], 2.0)
    assert str(prepare.model_failure(
        EngineModelError("found 3", ModelErrorKind.SHORTAGE), clean)) == "found 3"


def test_empty_and_all_text_columns():
    with pytest.raises(CellError, match="y is empty"):
        prepare_fit([], [], 1.0)
    with pytest.raises(CellError, match="y has no numbers"):
        prepare_fit(["a", "b", "c"], [1.0, 2.0, 3.0], 1.0, "names=no")
    with pytest.raises(CellError, match=r"x column 2 \(depth\) has no numbers"):
        prepare_fit(["y", 1.0, 2.0], [["size", "depth"], [1.0, None], [2.0, None]], "linear")
    with pytest.raises(CellError, match="one column"):
        prepare_fit([[1.0, 2.0], [3.0, 4.0]], [1.0, 2.0], 1.0)


def test_a_row_of_y_and_a_row_of_x():
    x, y = invented(8)
    res, _ = fit_cells([y], [x], 1.0)
    assert [c.estimate for c in res.coefficients] == pytest.approx(lstsq_poly(x, y, 1),
                                                                   rel=1e-10)


def test_options_reach_the_engine():
    data = _nist("NoInt1")
    y, x = [float(v) for v in data["y"]], [float(v) for v in data["x"]]
    res, opts = fit_cells(y, x, 1.0, "intercept=no; level=0.9")
    cert = data["certified"]
    # NIST StRD, Linear Least Squares Regression, NoInt1
    assert res.coefficients[0].estimate == pytest.approx(cert["estimates"][0], rel=1e-12)
    assert res.coefficients[0].std_error == pytest.approx(cert["std_errors"][0], rel=1e-10)
    assert res.level == 0.9 and not opts.intercept


def test_nist_pontius_through_cells_with_a_header():
    data = _nist("Pontius")
    y = [["y"]] + [[v] for v in data["y"]]
    x = [["load"]] + [[float(v)] for v in data["x"]]
    table = cells.coefs_cells(y, x, 2.0)
    cert = data["certified"]
    # NIST StRD, Linear Least Squares Regression, Pontius
    assert [r[0] for r in table[1:]] == ["intercept", "load", "load^2"]
    assert [r[1] for r in table[1:]] == pytest.approx(cert["estimates"], rel=1e-9)
    assert [r[4] for r in table[1:]] == pytest.approx(cert["std_errors"], rel=1e-8)


# --- the cache -------------------------------------------------------------------------------

def test_same_data_fits_once_across_functions(monkeypatch):
    calls = []
    real_fit = prepare.fit

    def counting_fit(*a, **k):
        calls.append(1)
        return real_fit(*a, **k)

    monkeypatch.setattr(prepare, "fit", counting_fit)
    x, y = invented()
    cells.coefs_cells(y, x, 2.0)
    cells.stats_cells(y, x, 2.0, "header=no")
    cells.predict_cells(y, x, 2.0, [3.0, 4.0])
    cells.equation_cells(list(y), tuple(x), 2)  # same content in other containers
    assert len(calls) == 1
    cells.coefs_cells(y, x, 2.0, "level=0.9")
    cells.coefs_cells(y, x, 3.0)
    y2 = list(y)
    y2[0] += 1e-12
    cells.coefs_cells(y2, x, 2.0)
    assert len(calls) == 4


def test_shared_arguments_clean_the_same_objects_once():
    """Inside shared_arguments the same argument objects give the same cleaned input
    (what prepare_fit gives outside it); equal content in other objects, another model or
    the end of the block cleans again; the shared arrays cannot be changed."""
    x, y = invented()
    y, x = ["cost", *y], ["size", *x]
    alone = prepare.prepare_fit(y, x, 2.0)
    with prepare.shared_arguments():
        a = prepare.prepare_fit(y, x, 2.0)
        assert prepare.prepare_fit(y, x, 2.0) is a
        assert prepare.prepare_fit(list(y), x, 2.0) is not a
        assert prepare.prepare_fit(y, x, 2) is not a  # the int model is another argument
        assert prepare.prepare_fit(y, x, 3.0).model == 3
        with pytest.raises(ValueError):
            a.y[0] = 0.0
    assert prepare.prepare_fit(y, x, 2.0) is not a
    np.testing.assert_array_equal(a.y, alone.y)
    np.testing.assert_array_equal(a.x, alone.x)
    assert (a.names, a.response, a.drops, a.notes) == (alone.names, alone.response,
                                                       alone.drops, alone.notes)
    assert a.key() == alone.key()


def test_cache_is_bounded_and_errors_are_not_cached():
    from xlbridge.cells.cache import LRUCache

    c = LRUCache(maxsize=2)
    assert c.get_or_compute("a", lambda: 1) == 1
    assert c.get_or_compute("b", lambda: 2) == 2
    assert c.get_or_compute("a", lambda: 99) == 1  # hit refreshes "a"
    assert c.get_or_compute("c", lambda: 3) == 3  # evicts "b", the least recently used
    assert "b" not in c and "a" in c and len(c) == 2

    def boom():
        raise ValueError("no")

    with pytest.raises(ValueError):
        c.get_or_compute("d", boom)
    assert "d" not in c


# --- tables ----------------------------------------------------------------------------------

def test_coef_table_layout_and_header_option():
    x, y = invented()
    t = cells.coefs_cells(y, x, 2.0)
    assert_plain_table(t)
    assert t[0] == ["term", "estimate", "low (95%)", "high (95%)", "standard error", "t", "p",
                    "VIF", "VIF, centered"]
    assert [r[1] for r in t[1:]] == pytest.approx(lstsq_poly(x, y, 2), rel=1e-10)
    assert all(r[2] < r[1] < r[3] for r in t[1:])  # the interval brackets the estimate
    assert t[1][7:] == ["", ""]  # VIFs do not apply to the intercept
    assert cells.coefs_cells(y, x, 2.0, "header=no") == t[1:]
    assert cells.coefs_cells(y, x, 2.0, "level=0.9")[0][2:4] == ["low (90%)", "high (90%)"]


def test_exact_fit_blanks_infinite_values_and_says_why():
    data = _nist("Wampler1")
    # NIST StRD, Linear Least Squares Regression, Wampler1: y is exactly a quintic
    y, x = [float(v) for v in data["y"]], [float(v) for v in data["x"]]
    coefs = cells.coefs_cells(y, x, 5.0)
    stats = cells.stats_cells(y, x, 5.0)
    for t in (coefs, stats):
        assert_plain_table(t)
    assert [r[1] for r in coefs[1:7]] == pytest.approx(data["certified"]["estimates"],
                                                        rel=1e-8)
    flat = [v for r in coefs + stats for v in r]
    assert "" in flat
    assert any(isinstance(v, str) and "blank cells" in v for v in flat)
    assert stats_by_field(stats)["f_stat"] == ""


def test_stats_table_rows():
    x, y = invented()
    y2 = list(y)
    y2[4] = None
    t = cells.stats_cells(y2, x, 2.0)
    assert_plain_table(t)
    d = stats_by_field(t)
    assert t[0] == ["question", "measure", "value"]
    order = [QUESTIONS.index(r[0]) for r in t[1:] if r[0] != STATS_NOTE]
    assert order == sorted(order) and "other" not in [r[0] for r in t]  # grouped, all named
    assert set(d) >= {f.name for f in fields(FitStats)} | {"model", "n_dropped", "level"}
    assert d["model"] == "degree 2" and d["n_dropped"] == 1.0
    assert d["n_used"] == float(len(x) - 1) and d["level"] == 0.95
    keep = [i for i in range(len(x)) if i != 4]
    xs, ys = np.array(x)[keep], np.array(y)[keep]
    resid = ys - np.polyval(np.polyfit(xs, ys, 2), xs)
    assert d["sse"] == pytest.approx(float(resid @ resid), rel=1e-9)
    notes = stats_notes(t)
    assert any("1 row dropped (blank 1)" in n for n in notes)


def test_long_names_and_notes_stay_within_255_characters():
    x, y = invented()
    long_name = "s" * 300
    t = cells.coefs_cells(y, [long_name] + x, 1.0)
    assert_plain_table(t)
    assert len(t[2][0]) == 255 and t[2][0].startswith("sss")


def test_predict_rows_line_up_with_new_x():
    x, y = invented()
    new_x = [2.0, None, "text", 30.0, "#N/A"]
    t = cells.predict_cells(y, x, 2.0, new_x)
    assert_plain_table(t)
    assert len(t) == 1 + len(new_x)
    b = np.polyfit(x, y, 2)
    assert t[1][0] == pytest.approx(np.polyval(b, 2.0), rel=1e-10)
    assert t[4][0] == pytest.approx(np.polyval(b, 30.0), rel=1e-10)
    assert t[1][6] == "inside" and t[4][6] == "extrapolated"
    assert t[2][:6] == [""] * 6 and t[2][6] == "dropped: blank in new_x"
    assert t[3][6] == "dropped: text in new_x" and t[5][6] == "dropped: error value in new_x"
    assert cells.predict_cells(y, x, 2.0, 2.0, "header=no")[0][0] == t[1][0]


def test_predict_with_two_predictors_flat_row_and_named_columns():
    rng = np.random.default_rng(11)  # invented data, fixed seed
    a, b = rng.uniform(0, 5, 30), rng.uniform(0, 5, 30)
    y = 1 + a - 2 * b + 0.5 * a * b + rng.normal(0, 0.1, 30)
    X = np.column_stack([np.ones(30), a, b, a * b])
    beta = np.linalg.lstsq(X, y, rcond=None)[0]
    x_cells = [["a", "b"]] + np.column_stack([a, b]).tolist()
    one_row = cells.predict_cells(y.tolist(), x_cells, "interact", [1.0, 2.0], "header=no")
    assert one_row[0][0] == pytest.approx(beta @ [1, 1.0, 2.0, 2.0], rel=1e-10)
    swapped = cells.predict_cells(y.tolist(), x_cells, "interact", [["b", "a"], [2.0, 1.0]])
    assert swapped[1][0] == pytest.approx(one_row[0][0], rel=1e-12)
    with pytest.raises(CellError, match="3 values"):
        cells.predict_cells(y.tolist(), x_cells, "interact", [1.0, 2.0, 3.0])
    with pytest.raises(CellError, match="3 columns but the model has 2 predictors"):
        cells.predict_cells(y.tolist(), x_cells, "interact", [[1.0, 2.0, 3.0]])


def test_equation_text_evaluates_to_the_least_squares_curve():
    x, y = invented()
    (text,), = cells.equation_cells(["cost"] + y, ["size"] + x, 3.0)
    assert text.startswith("cost = ")
    rhs = text.split("=", 1)[1].replace("^", "**")
    b = lstsq_poly(x, y, 3)
    for size in (1.0, 6.5, 12.0):
        expected = b[0] + b[1] * size + b[2] * size**2 + b[3] * size**3
        assert eval(rhs, {"size": size}) == pytest.approx(expected, rel=1e-12)


def test_info_table_reports_installed_versions():
    import importlib.metadata

    t = cells.info_cells()
    assert_plain_table(t)
    d = dict(t[1:])
    assert d["numpy"] == importlib.metadata.version("numpy")
    assert d["scipy"] == importlib.metadata.version("scipy")
    assert d["python"].count(".") == 2


# --- errors ----------------------------------------------------------------------------------

def test_guarded_turns_every_exception_into_one_message_cell():
    def user_error():
        raise CellError("y has 40 numbers but x has 39 rows")

    def bug():
        raise KeyError("oops")

    assert cells.run_guarded(user_error) == [["xlbridge: y has 40 numbers but x has 39 rows"]]
    (msg,), = cells.run_guarded(bug)
    assert msg.startswith("xlbridge: internal error (KeyError") and "\n" not in msg
    assert cells.guarded(lambda: [[1.0]])() == [[1.0]]


@pytest.mark.parametrize("args", [
    ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0], 1.0),  # mismatched heights
    ([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], 2.0),  # too few rows
    ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0, 4.0], "cubic"),  # non-numeric model
    ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0, 4.0], 1.0, "colour=red"),  # bad options
    ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0, 4.0], None),  # missing model
])
def test_bad_inputs_give_a_message_cell(args):
    (msg,), = cells.run_guarded(cells.coefs_cells, *args)
    assert msg.startswith("xlbridge: ") and "Traceback" not in msg and "internal" not in msg


def test_options_object_is_accepted_directly():
    x, y = invented()
    t = cells.coefs_cells(y, x, 1.0, Options(header=False))
    assert t[0][0] == "intercept"


def test_names_yes_refuses_an_error_cell_as_a_name():
    with pytest.raises(CellError, match="no name in column 1"):
        clean_cells([[NA], [1.0]], names="yes")
    assert clean_cells([[7], [1.0]], names="yes").names == ("7",)


def test_whole_numbers_as_ints_fit_like_floats():
    x, y = invented(12)
    ints = [int(round(v)) for v in x]
    t = cells.coefs_cells(list(y), ints, 1)
    # numpy least squares on the same numbers, independently of the cell layer
    assert [r[1] for r in t[1:]] == pytest.approx(lstsq_poly(ints, y, 1), rel=1e-10)


def test_cache_weight_bound_evicts_old_entries_but_keeps_the_newest():
    from xlbridge.cells.cache import LRUCache

    c = LRUCache(maxsize=10, max_weight=5, weigh=len)
    c.get_or_compute("a", lambda: "xx")
    c.get_or_compute("b", lambda: "yyy")
    assert "a" in c and "b" in c
    c.get_or_compute("c", lambda: "z")  # total 6 > 5: "a" goes
    assert "a" not in c and "b" in c and "c" in c
    c.get_or_compute("d", lambda: "w" * 9)  # heavier than the bound on its own: kept alone
    assert len(c) == 1 and "d" in c


def test_numeric_numpy_arrays_are_numbers_even_when_integer():
    c = clean_cells(np.arange(4))
    assert c.values[:, 0].tolist() == [0.0, 1.0, 2.0, 3.0] and (c.codes == 0).all()


def test_cell_errors_carry_their_kind():
    x, y = invented(10)
    cases = [
        (lambda: prepare_fit(y, x[:9], 1.0), CellErrorKind.SHAPE),  # heights differ
        (lambda: prepare_fit([[1.0, 2.0], [3.0, 4.0]], [1.0, 2.0], 1.0), CellErrorKind.SHAPE),
        (lambda: prepare_fit(y, x, "#N/A"), CellErrorKind.INPUT),  # error value in a cell
        (lambda: prepare_fit(y, x, [1.0, 2.0]), CellErrorKind.SHAPE),  # not one cell
        (lambda: fit_cells(y, x, "cubic"), CellErrorKind.MODEL),  # the engine refuses it
        (lambda: cells.groups_fit(["a"] * 10, y, x, 1.0, "log=yes"), CellErrorKind.OPTIONS),
    ]
    for call, kind in cases:
        with pytest.raises(CellError) as info:
            call()
        assert info.value.kind is kind, str(info.value)
