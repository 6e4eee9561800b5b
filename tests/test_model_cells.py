"""XB_DEGREESCAN, XB_CHECKS, XB_ROWDIAG, XB_OPTIMUM, XB_MARGINAL: the worksheet functions give the
same numbers as the Python API (itself checked against statsmodels/scipy in
test_diagnostics.py), line up with input rows, and answer bad input with a message."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from xlbridge import checks, fit, optimum, row_diagnostics, scan_degrees, slopes
from xlbridge import worksheet as ws


def _data(seed=1, n=40):
    rng = np.random.default_rng(seed)
    x = rng.uniform(10, 200, n)
    y = 500 - 6 * x + 0.025 * x**2 + rng.normal(0, 8, n)
    return x, y


def _cells(x, y, names=("size", "cost")):
    return ([[names[1]]] + [[float(v)] for v in y], [[names[0]]] + [[float(v)] for v in x])


def _table(t):
    head, *body = t
    return [dict(zip(head, row)) for row in body if not str(row[0]).startswith("note:")]


def test_degrees_match_api():
    x, y = _data()
    Y, X = _cells(x, y)
    rows = _table(ws.XB_DEGREESCAN(Y, X, 4.0, "folds=5"))
    scan = scan_degrees(y, x, 4, folds=5)
    assert [r["degree"] for r in rows] == [1.0, 2.0, 3.0, 4.0]
    for r, s in zip(rows, scan.rows):
        assert r["cross-validated RMSE"] == s.cv_rmse and r["AICc"] == s.aicc
        assert r["R²"] == s.r2 and r["SEE"] == s.rmse and r["PRESS"] == s.press
        assert r["standard error of the CV RMSE"] == s.cv_se and r["BIC"] == s.bic
        assert r["p of F against one degree lower"] == s.nested_f_p_value
        assert r["choice"] == s.choice
    assert sum(r["choice"] == "recommended" for r in rows) == 1


def test_checks_and_rows_match_api_and_align_with_input():
    x, y = _data(2)
    Y, X = _cells(x, y)
    Y[4] = ["#N/A"]
    X[9] = ["text"]
    checks_t = _table(ws.XB_CHECKS(Y, X, 2.0))
    keep = np.ones(len(y), bool)
    keep[[3, 8]] = False
    res = fit(y[keep], x[keep], 2)
    api = {c.check: c for c in checks(res)}
    for r in checks_t:
        c = api[r["check"]]
        assert r["verdict"] == c.verdict
        if math.isfinite(c.statistic):
            assert r["value"] == pytest.approx(c.statistic, rel=1e-12)
    rows = ws.XB_ROWDIAG(Y, X, 2.0)
    assert len(rows) == len(Y)  # header + one row per data row
    assert rows[4][-1] == "dropped: error value" and rows[9][-1] == "dropped: text"
    d = row_diagnostics(res)
    body = [r for r in rows[1:] if r[0] != ""]
    np.testing.assert_allclose([r[4] for r in body], d.leverage, rtol=1e-12)
    # Cook's distance, independent: statsmodels OLSInfluence on the rows kept
    ref = sm.OLS(y[keep], np.column_stack([np.ones(keep.sum()), x[keep], x[keep] ** 2])).fit()
    np.testing.assert_allclose([r[5] for r in body], ref.get_influence().cooks_distance[0],
                               rtol=1e-8)


def test_optimum_and_slope_match_api():
    x, y = _data(3)
    Y, X = _cells(x, y)
    t = ws.XB_OPTIMUM(Y, X, 2.0)
    items = {r[0]: r for r in t[1:]}
    pt = optimum(fit(y, x, 2)).points[0]
    assert t[0] == ["item", "value", "low (95%)", "high (95%)", "standard error",
                    "how to read it"]
    assert items["kind of point"][1] == pt.kind and items["size"][1] == pt.x[0]
    assert items["size"][2:5] == [pt.ci_lower[0], pt.ci_upper[0], pt.se[0]]
    assert items["fitted cost"][1:4] == [pt.fitted, pt.fitted_ci_lower, pt.fitted_ci_upper]
    s = ws.XB_MARGINAL(Y, X, 2.0, [["size"], [50.0], ["n/a"], [150.0]])
    api = slopes(fit(y, x, 2), [50.0, 150.0])
    assert s[0] == ["size: change per unit", "size: low (95%)", "size: high (95%)",
                    "size: standard error", "range"]
    assert s[1][0] == api.slope[0, 0] and s[3][3] == api.se[1, 0]
    assert s[1][1:3] == [api.ci_lower[0, 0], api.ci_upper[0, 0]]
    assert s[2] == ["", "", "", "", "dropped: text in at_x"]


def test_surface_optimum_table_has_eigen_rows():
    rng = np.random.default_rng(3)
    a, h = rng.uniform(1, 15, 60), rng.uniform(0.5, 12, 60)
    p = 100 - 8 * a - 3 * h + 0.3 * a**2 + 0.2 * h**2 + 0.1 * a * h + rng.normal(0, 1, 60)
    X = [["age", "hours"]] + [[float(u), float(v)] for u, v in zip(a, h)]
    Y = [["price"]] + [[float(v)] for v in p]
    t = ws.XB_OPTIMUM(Y, X, "surface")
    labels = [r[0] for r in t]
    assert "eigenvalue 1" in labels and "eigenvector 2 hours" in labels
    assert dict((r[0], r[1]) for r in t)["kind of point"] == "minimum"


@pytest.mark.parametrize("call, message", [
    (lambda Y, X: ws.XB_DEGREESCAN(Y, X, 2.5), "max_degree must be a whole number"),
    (lambda Y, X: ws.XB_DEGREESCAN(Y, X, 3.0, "folds=1"), "folds"),
    (lambda Y, X: ws.XB_OPTIMUM(Y, X, 1.0), "straight line has no stationary point"),
    (lambda Y, X: ws.XB_CHECKS(Y, X, 2.0, "se=hc9"), "hc3"),
    (lambda Y, X: ws.XB_MARGINAL(Y, X, 2.0, [[1.0, 2.0], [3.0, 4.0]]), "at_x has 2 columns"),
])
def test_bad_input_gives_a_message(call, message):
    x, y = _data()
    Y, X = _cells(x, y)
    t = call(Y, X)
    assert len(t) == 1 and len(t[0]) == 1 and t[0][0].startswith("xlbridge: ")
    assert message in t[0][0]


_cell = st.one_of(st.none(), st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=5),
                  st.booleans(), st.integers(-2146826281, -2146826200))


@settings(max_examples=40, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(_cell, _cell), min_size=0, max_size=25),
       st.sampled_from(["XB_DEGREESCAN", "XB_CHECKS", "XB_ROWDIAG", "XB_OPTIMUM"]))
def test_any_cells_give_a_table_or_a_message(pairs, name):
    Y = [[p[0]] for p in pairs]
    X = [[p[1]] for p in pairs]
    arg = 3.0 if name == "XB_DEGREESCAN" else 2.0
    t = ws.FUNCTIONS[name](Y, X, arg)
    assert isinstance(t, list) and t and all(isinstance(r, list) for r in t)
    width = len(t[0])
    for row in t:
        assert len(row) == width
        for v in row:
            assert isinstance(v, (float, str))
            if isinstance(v, float):
                assert math.isfinite(v)
    if len(t) == 1 and width == 1:
        assert str(t[0][0]).startswith("xlbridge: ")
        assert "internal error" not in t[0][0]


class _FakeRange:
    """Stands in for the xlwings Range that xlwings passes as ``caller`` on the desktop."""

    def __init__(self):
        self.added = []
        self.address = "$H$2"
        self.left, self.top = 400.0, 20.0
        self.sheet = self

    @property
    def pictures(self):
        return self

    def offset(self, row_offset=0, column_offset=0):
        return self

    def add(self, fig, **kw):
        self.added.append((fig, kw))


def test_plot_places_a_figure_beside_the_caller():
    x, y = _data(4)
    Y, X = _cells(x, y)
    caller = _FakeRange()
    t = ws.plot_cells(Y, X, 2.0, "curve", None, caller)
    assert t == [["cost against size"]]
    (fig, kw), = caller.added
    assert kw["update"] is True and kw["name"] == "xlbridge curve $H$2"
    assert fig.axes[0].get_xlabel() == "size"


def test_plot_without_a_caller_says_how_to_get_the_figure():
    x, y = _data(4)
    Y, X = _cells(x, y)
    assert not ws.FILLS_CALLER  # the shim: no hidden argument to fill
    params = ws.XB_PLOT.__code__.co_varnames[: ws.XB_PLOT.__code__.co_argcount]
    assert params == ("y", "x", "model", "kind", "options")
    ((msg,),) = ws.XB_PLOT(Y, X, 2.0, "residuals")
    assert msg.startswith("xlbridge: ") and "xlbridge plot" in msg and "--kind residuals" in msg
    assert "xlbridge report" in msg
    ((scan,),) = ws.XB_PLOT(Y, X, 4, "degrees")
    assert "--kind degrees --max-degree 4 " in scan
    # bad input is reported first, the same way as in every other function
    bad = ws.XB_PLOT(Y, X, 2.0, "pie")
    assert bad[0][0].startswith("xlbridge: kind must be one of")
    ((short,),) = ws.XB_PLOT(Y[:3], X[:3], 2.0, "curve")
    assert short.startswith("xlbridge: ") and "xlbridge plot" not in short
