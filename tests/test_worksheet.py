"""Worksheet functions called with the raw shapes xlwings hands them.

Checked against statsmodels OLS (params, bse, tvalues, pvalues, conf_int, fit statistics,
get_prediction, OLSInfluence), statsmodels' variance_inflation_factor, and numpy, all
computed on the rows a careful reader keeps; and the engine's own ``xlbridge.fit`` on
those rows for the bookkeeping (n_dropped) that only xlbridge reports.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from openpyxl.utils.datetime import to_excel
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor

import xlbridge
from xlbridge import worksheet as ws
from xlbridge.cells.cache import FIT_CACHE

from .tablecheck import stats_by_field

NA_TEXT = "#N/A"  # an error cell read with err_to_str
SPILL = -2146826243  # #SPILL!: newer errors arrive as plain negative ints


@pytest.fixture(autouse=True)
def _fresh_cache():
    FIT_CACHE.clear()
    yield


def invented(n=30, seed=7):
    """Invented demo data (fixed seed): price against size with curvature and noise."""
    rng = np.random.default_rng(seed)
    size = np.round(rng.uniform(20, 200, n), 2)
    price = 50 + 3.1 * size - 0.006 * size**2 + rng.normal(0, 12, n)
    return size, price


def raw_columns(size, price):
    """The data as xlwings hands a two-column block with a header and damaged rows."""
    y = ["price"] + price.tolist()
    x = ["size"] + size.tolist()
    bad = {3: (None, None), 6: (NA_TEXT, None), 9: (None, SPILL), 12: (True, None),
           15: (None, "n/a")}
    for i, (ybad, xbad) in bad.items():
        if ybad is not None:
            y[i + 1] = ybad
        if xbad is not None:
            x[i + 1] = xbad
        if ybad is None and xbad is None:
            y[i + 1] = None
    keep = np.array([i not in bad for i in range(len(size))])
    return y, x, keep


def ols(size, price, degree=2):
    X = np.column_stack([size**e for e in range(degree + 1)])
    return sm.OLS(price, X).fit(), X




def test_coefs_match_statsmodels_on_the_kept_rows():
    size, price = invented()
    y, x, keep = raw_columns(size, price)
    t = ws.XB_COEFS(y, x, 2.0, "level=0.9")
    m, X = ols(size[keep], price[keep])
    assert [r[0] for r in t[1:]] == ["intercept", "size", "size^2"]
    cols = list(zip(*[r[1:7] for r in t[1:]]))
    ci = m.conf_int(alpha=0.10)
    for got, want in zip(cols, (m.params, ci[:, 0], ci[:, 1], m.bse, m.tvalues, m.pvalues)):
        assert list(got) == pytest.approx(list(want), rel=1e-8)
    # VIF = 1 / (1 - R2_j) of column j on the others (statsmodels)
    vif = [variance_inflation_factor(X, j) for j in (1, 2)]
    assert [t[2][7], t[3][7]] == pytest.approx(vif, rel=1e-8)
    xc = size[keep] - size[keep].mean()
    Xc = np.column_stack([np.ones_like(xc), xc, xc**2])
    assert [t[2][8], t[3][8]] == pytest.approx(
        [variance_inflation_factor(Xc, j) for j in (1, 2)], rel=1e-8)


def test_stats_match_statsmodels_and_count_the_dropped_rows():
    size, price = invented()
    y, x, keep = raw_columns(size, price)
    d = stats_by_field(ws.XB_STATS(y, x, 2.0))
    m, X = ols(size[keep], price[keep])
    infl = OLSInfluence(m)
    press = float(np.sum(infl.resid_press**2))
    want = {"n_used": m.nobs, "df_resid": m.df_resid, "sse": m.ssr, "sst": m.centered_tss,
            "r2": m.rsquared, "adj_r2": m.rsquared_adj, "rmse": math.sqrt(m.mse_resid),
            "f_stat": m.fvalue, "f_p_value": m.f_pvalue, "aic": m.aic, "bic": m.bic,
            "press": press, "pred_r2": 1 - press / m.centered_tss,
            # handbook: coefficient of variation of the residual standard deviation
            "rmse_percent": 100 * math.sqrt(m.mse_resid) / price[keep].mean(),
            "top_term_p_value": m.pvalues[-1], "n_params": 3.0}
    for key, value in want.items():
        assert d[key] == pytest.approx(float(value), rel=1e-8), key
    assert d["n_dropped"] == 5.0
    direct = xlbridge.fit(np.where(keep, price, np.nan), size, 2)
    assert d["n_dropped"] == direct.n_dropped


def test_predict_matches_statsmodels_get_prediction():
    size, price = invented()
    y, x, keep = raw_columns(size, price)
    low = float(size[keep].min()) + 0.5
    pts = np.array([low, 150.0, 400.0])
    new_x = [["size"], [low], [None], [150.0], [NA_TEXT], [400.0]]
    t = ws.XB_PREDICT(y, x, 2.0, new_x, "level=0.9")
    assert len(t) == len(new_x) and t[0][-1] == "range"
    m, X = ols(size[keep], price[keep])
    X0 = np.column_stack([pts**e for e in range(3)])
    frame = m.get_prediction(X0).summary_frame(alpha=0.10)
    lev = np.einsum("ij,jk,ik->i", X0, np.linalg.inv(X.T @ X), X0)
    rows = [t[1], t[3], t[5]]
    for k, row in enumerate(rows):
        want = [frame["mean"][k], frame["mean_ci_lower"][k], frame["mean_ci_upper"][k],
                frame["obs_ci_lower"][k], frame["obs_ci_upper"][k], lev[k]]
        assert row[:6] == pytest.approx(want, rel=1e-8)
    assert [r[6] for r in rows] == ["inside", "inside", "extrapolated"]
    assert t[2][:6] == [""] * 6 and t[2][6].startswith("dropped")
    assert t[4][:6] == [""] * 6 and "error" in t[4][6]


def test_equation_is_one_cell_with_round_trip_coefficients():
    size, price = invented()
    y, x, keep = raw_columns(size, price)
    t = ws.XB_EQUATION(y, x, 2.0)
    assert len(t) == 1 and len(t[0]) == 1
    m, _ = ols(size[keep], price[keep])
    rhs = t[0][0].split("=", 1)[1].replace("^", "**")
    assert eval(rhs, {"size": 80.0}) == pytest.approx(m.predict([[1, 80.0, 6400.0]])[0],
                                                      rel=1e-12)


def test_dates_as_x_use_their_serial_numbers():
    days = [dt.datetime(2023, 1, 1) + dt.timedelta(days=int(d)) for d in range(0, 300, 15)]
    rng = np.random.default_rng(5)  # invented data, fixed seed
    serial = np.array([to_excel(d) for d in days])  # openpyxl: independent serials
    price = 100 + 0.2 * (serial - serial[0]) + rng.normal(0, 1, len(days))
    t = ws.XB_COEFS(price.tolist(), days, 1.0, "header=no")
    m = sm.OLS(price, sm.add_constant(serial)).fit()
    assert [r[1] for r in t] == pytest.approx(list(m.params), rel=1e-8)


def test_surface_with_a_header_block():
    rng = np.random.default_rng(21)  # invented data, fixed seed
    a, b = rng.uniform(1, 9, 40), rng.uniform(10, 30, 40)
    y = 5 + 2 * a + 0.3 * b - 0.1 * a**2 + 0.01 * b**2 + 0.05 * a * b + rng.normal(0, 0.2, 40)
    block = [["width", "depth"]] + np.column_stack([a, b]).tolist()
    t = ws.XB_COEFS(["cost"] + y.tolist(), block, "surface")
    terms = [r[0] for r in t[1:]]
    assert terms[0] == "intercept" and set(terms[1:]) == {"width", "depth", "width^2",
                                                          "depth^2", "width*depth"}
    cols = {"intercept": np.ones(40), "width": a, "depth": b, "width^2": a**2,
            "depth^2": b**2, "width*depth": a * b}
    m = sm.OLS(y, np.column_stack([cols[name] for name in terms])).fit()
    assert [r[1] for r in t[1:]] == pytest.approx(list(m.params), rel=1e-8)


def test_scalar_and_single_cell_arguments_give_messages():
    for result in (ws.XB_COEFS(1.0, 2.0, 1.0), ws.XB_STATS(None, None, None),
                   ws.XB_PREDICT([1.0, 2.0, 3.5], [1.0, 2.0, 3.0], 1.0, [[1.0, 2.0], [3.0, 4.0]]),
                   ws.XB_EQUATION([1.0, 2.0], [1.0, 2.0, 3.0], 1.0)):
        assert len(result) == 1 and len(result[0]) == 1
        assert result[0][0].startswith("xlbridge: ")
        assert "internal error" not in result[0][0]


def test_a_blank_new_x_cell_gives_an_aligned_blank_row():
    t = ws.XB_PREDICT([1.0, 2.0, 3.5], [1.0, 2.0, 3.0], 1.0, None, "header=no")
    assert t == [["", "", "", "", "", "", "dropped: blank in new_x"]]


def test_info_needs_no_arguments_and_names_our_version():
    t = ws.XB_VERSIONS()
    assert t[0] == ["component", "version"]
    assert dict(t[1:])["xlbridge"] == xlbridge.__version__


def test_functions_carry_help_text_and_category():
    assert set(ws.FUNCTIONS) == {"XB_COEFS", "XB_STATS", "XB_PREDICT", "XB_EQUATION",
                                 "XB_DEGREESCAN", "XB_CHECKS", "XB_ROWDIAG", "XB_OPTIMUM",
                                 "XB_MARGINAL", "XB_PLOT", "XB_GROUPS", "XB_VERSIONS",
                                 "XB_PLEVELS", "XB_CANDIDATES", "XB_LEARNING", "XB_BASEYEAR",
                                 "XB_CERCARD"}
    for name, f in ws.FUNCTIONS.items():
        assert f.__doc__ and len(f.__doc__) <= 255 and "\n" not in f.__doc__, name
        if ws.DECORATORS == "shim":
            meta = f.__xlbridge_udf__
            assert meta["category"] == "xlbridge"
            params = list(f.__code__.co_varnames[: f.__code__.co_argcount])
            assert sorted(meta["args"]) == sorted(params)
            assert all(0 < len(a["doc"]) <= 255 for a in meta["args"].values())


def test_importing_the_module_does_not_import_xlwings():
    import subprocess
    import sys

    code = "import sys, xlbridge.worksheet as w; print(w.DECORATORS, 'xlwings' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env={"PATH": "", "XLBRIDGE_XLWINGS": "auto"})
    assert out.stdout.split() == ["shim", "False"]


# --- property: any block of cell values gives a table or a message --------------------------

odd_cells = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([1e308, -1e308, 5e-324, 1e-300, 1e300]),
    st.none(),
    st.booleans(),
    st.text(max_size=6),
    st.sampled_from(["#N/A", "#DIV/0!", "#VALUE!", "size", ""]),
    st.integers(min_value=-2146826290, max_value=-2146826200),
    st.datetimes(min_value=dt.datetime(1950, 1, 1), max_value=dt.datetime(2100, 1, 1)),
)
cell_values = st.one_of(st.floats(min_value=-1e6, max_value=1e6), odd_cells)
models = st.sampled_from([1.0, 2.0, 1.0, 2.0, 3.0, "linear", "surface", "interact",
                          "x1, x1^2", "size", 0.0, 11.0, 2.5, None, True, "#N/A"])
option_texts = st.sampled_from([None, None, "", "level=0.9", "header=no", "names=no",
                                "intercept=no; names=yes", "level=2", "bogus"])


def assert_table_or_message(result):
    assert isinstance(result, list) and result
    assert all(isinstance(r, list) and len(r) == len(result[0]) for r in result)
    multi = len(result) > 1 or len(result[0]) > 1
    for row in result:
        for v in row:
            assert type(v) in (float, str)
            if isinstance(v, float):
                assert math.isfinite(v)
            elif multi:
                assert len(v) <= 255
    if not multi and isinstance(result[0][0], str) and result[0][0].startswith("xlbridge:"):
        assert "internal error" not in result[0][0], result[0][0]


@settings(max_examples=120, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(min_value=0, max_value=25).flatmap(
    lambda n: st.lists(st.lists(cell_values, min_size=3, max_size=3), min_size=n,
                       max_size=n)), models, option_texts, st.integers(1, 2))
def test_any_block_gives_a_table_or_a_message(block, model, options, k):
    y = [r[0] for r in block]
    x = [r[1: 1 + k] for r in block]
    with np.errstate(all="ignore"):
        for result in (ws.XB_COEFS(y, x, model, options), ws.XB_STATS(y, x, model, options),
                       ws.XB_PREDICT(y, x, model, x, options),
                       ws.XB_EQUATION(y, x, model, options)):
            assert_table_or_message(result)


@settings(max_examples=60)
@given(st.lists(cell_values, min_size=0, max_size=12), st.lists(cell_values, max_size=12))
def test_any_flat_lists_give_a_table_or_a_message(y, x):
    with np.errstate(all="ignore"):
        assert_table_or_message(ws.XB_COEFS(y, x, 1.0))
        assert_table_or_message(ws.XB_PREDICT(y, x, 1.0, x))


@st.composite
def damaged_blocks(draw):
    """Distinct numbers (so fits happen) with a few cells replaced by odd values."""
    n = draw(st.integers(min_value=0, max_value=25))
    nums = draw(st.lists(st.floats(min_value=-1e3, max_value=1e3), min_size=3 * n,
                         max_size=3 * n, unique=True))
    block = [nums[3 * i: 3 * i + 3] for i in range(n)]
    for _ in range(draw(st.integers(min_value=0, max_value=4)) if n else 0):
        i, j = draw(st.integers(0, n - 1)), draw(st.integers(0, 2))
        block[i][j] = draw(odd_cells)
    return block


@settings(max_examples=100, suppress_health_check=[HealthCheck.too_slow])
@given(damaged_blocks(), models, option_texts, st.integers(1, 2))
def test_damaged_data_gives_a_table_or_a_message(block, model, options, k):
    y = [r[0] for r in block]
    x = [r[1: 1 + k] for r in block]
    with np.errstate(all="ignore"):
        for result in (ws.XB_COEFS(y, x, model, options), ws.XB_STATS(y, x, model, options),
                       ws.XB_PREDICT(y, x, model, x, options)):
            assert_table_or_message(result)
