"""The pure-error lack-of-fit check.

Outside sources: the textbook formula computed here with numpy group sums,
F = (SS_lof / (m - p)) / (SS_pe / (n - m)) on F(m - p, n - m); and statsmodels
``anova_lm(fitted model, full model)`` where the full model has one parameter per distinct
x (``C(x)``), the standard pure-error construction of the lack-of-fit test.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from hypothesis import given, settings
from hypothesis import strategies as st_h
from scipy import stats as st
from statsmodels.stats.anova import anova_lm

from xlbridge.engine import checks, fit
from xlbridge.engine.diagnostics import distinct_rows, lack_of_fit

NAME = "lack of fit (pure error)"


def _replicated(seed: int, curve: float = 0.05):
    """Invented: 6 sizes, 4 jobs each, a curved cost."""
    rng = np.random.default_rng(seed)
    x = np.repeat([10.0, 20.0, 30.0, 40.0, 50.0, 60.0], 4)
    y = 30 + 2 * x + curve * x**2 + rng.normal(0, 8, len(x))
    return x, y


def _textbook(y, keys, w=None):
    """Pure-error sum of squares (y about each distinct x row's weighted mean, from group
    sums) and the number m of distinct x rows, computed independently of xlbridge."""
    w = np.ones(len(y)) if w is None else np.asarray(w)
    groups: dict = {}
    for i, k in enumerate(map(tuple, keys)):
        groups.setdefault(k, []).append(i)
    ss_pe = 0.0
    for rows in groups.values():
        yy, ww = y[rows], w[rows]
        ss_pe += float(np.sum(ww * (yy - np.sum(ww * yy) / np.sum(ww)) ** 2))
    return ss_pe, len(groups)


def _check(res):
    return next(c for c in checks(res) if c.check == NAME)


def test_straight_line_through_a_curve_against_statsmodels_and_the_formula():
    x, y = _replicated(1)
    res = fit(y, x, 1)
    c = _check(res)
    df = pd.DataFrame({"x": x, "y": y})
    reduced = smf.ols("y ~ x", df).fit()
    full = smf.ols("y ~ C(x)", df).fit()
    table = anova_lm(reduced, full)
    assert c.statistic == pytest.approx(table["F"][1], rel=1e-9)
    assert c.p_value == pytest.approx(table["Pr(>F)"][1], rel=1e-7)
    ss_pe, m = _textbook(y, x[:, None])
    n, p = len(y), 2
    sse = float(np.sum(reduced.resid**2))
    f = ((sse - ss_pe) / (m - p)) / (ss_pe / (n - m))
    assert c.statistic == pytest.approx(f, rel=1e-9)
    assert c.p_value == pytest.approx(st.f.sf(f, m - p, n - m), rel=1e-7)
    assert c.verdict == "problem" and c.p_value < 0.01
    assert "F(4, 18)" in c.note


def test_adequate_curve_is_ok_and_matches_statsmodels():
    x, y = _replicated(2)
    res = fit(y, x, 2)
    c = _check(res)
    df = pd.DataFrame({"x": x, "y": y})
    table = anova_lm(smf.ols("y ~ x + I(x**2)", df).fit(), smf.ols("y ~ C(x)", df).fit())
    assert c.statistic == pytest.approx(table["F"][1], rel=1e-9)
    assert c.p_value == pytest.approx(table["Pr(>F)"][1], rel=1e-7)
    expected = "ok" if c.p_value >= 0.05 else ("watch" if c.p_value >= 0.01 else "problem")
    assert c.verdict == expected


def test_weighted_fit_uses_weighted_pure_error():
    """statsmodels WLS anova_lm of the same two models with the same weights."""
    x, y = _replicated(3)
    w = 100 / x
    res = fit(y, x, 1, weights=w)
    c = _check(res)
    df = pd.DataFrame({"x": x, "y": y})
    table = anova_lm(smf.wls("y ~ x", df, weights=w).fit(),
                     smf.wls("y ~ C(x)", df, weights=w).fit())
    assert c.statistic == pytest.approx(table["F"][1], rel=1e-9)
    assert c.p_value == pytest.approx(table["Pr(>F)"][1], rel=1e-7)
    ss_pe, _ = _textbook(y, x[:, None], w)
    assert lack_of_fit(res).ss_pure == pytest.approx(ss_pe, rel=1e-9)


def test_log_fit_is_tested_on_the_log_scale():
    x, y = _replicated(4)
    res = fit(y, x, 1, log=True)
    ly = np.log(y)
    ss_pe, m = _textbook(ly, x[:, None])
    sse = float(np.sum((ly - np.polyval(np.polyfit(x, ly, 1), x)) ** 2))
    f = ((sse - ss_pe) / (m - 2)) / (ss_pe / (len(y) - m))
    c = _check(res)
    assert c.statistic == pytest.approx(f, rel=1e-9)
    assert "log scale" in c.note


def test_surface_with_repeated_x_rows():
    """A 3 x 3 design with every point run twice and the center five times: m = 9 distinct
    x rows, second-order model p = 6."""
    rng = np.random.default_rng(6)
    grid = np.array([(a, b) for a in (100.0, 150.0, 200.0) for b in (2.0, 4.0, 6.0)])
    reps = np.r_[np.repeat(np.arange(9), 2), [4, 4, 4]]
    xx = grid[reps]
    y = 50 + 0.4 * xx[:, 0] + 3 * xx[:, 1] + 0.5 * xx[:, 1] ** 3 + rng.normal(0, 2, len(reps))
    res = fit(y, xx, "surface")
    lof = lack_of_fit(res)
    ss_pe, m = _textbook(y, xx)
    assert (m, lof.df_lack, lof.df_pure) == (9, 3, len(y) - 9)
    assert lof.ss_pure == pytest.approx(ss_pe, rel=1e-9)
    df = pd.DataFrame({"a": xx[:, 0], "b": xx[:, 1], "y": y})
    table = anova_lm(smf.ols("y ~ a + b + I(a**2) + a:b + I(b**2)", df).fit(),
                     smf.ols("y ~ C(a):C(b)", df).fit())
    assert lof.f_stat == pytest.approx(table["F"][1], rel=1e-8)


def test_not_available_without_repeats_or_spare_distinct_rows():
    rng = np.random.default_rng(7)
    x = np.linspace(1, 20, 20)
    c = _check(fit(2 + x + rng.normal(0, 1, 20), x, 2))
    assert (c.verdict, c.note) == ("n/a", "not available: no repeated x values")
    assert math.isnan(c.statistic) and math.isnan(c.p_value)
    x3 = np.repeat([1.0, 2.0, 3.0], 3)
    c3 = _check(fit(1 + x3**2 + rng.normal(0, 0.1, 9), x3, 2))
    assert c3.verdict == "n/a" and "3 distinct x values for 3 coefficients" in c3.note
    assert lack_of_fit(fit(1 + x3**2 + rng.normal(0, 0.1, 9), x3, 2)) is None


@settings(max_examples=150, derandomize=True)
@given(st_h.integers(1, 4).flatmap(lambda k: st_h.lists(
    st_h.lists(st_h.sampled_from([-2.0, -0.0, 0.0, 1.5, 3.0, 1e300]), min_size=k, max_size=k),
    min_size=1, max_size=40)))
def test_distinct_rows_partition_equals_numpy_unique(rows: list[list[float]]) -> None:
    """Property: rows grouped by ``distinct_rows`` form the same partition as numpy's
    ``np.unique(x, axis=0, return_inverse=True)`` (the reference), with -0.0 and 0.0 as one
    value, as the fit's comparison of x values takes them."""
    x = np.array(rows, dtype=float)
    x[x == 0] = 0.0  # numpy's row view tells -0.0 from 0.0 apart; the values are equal
    groups, m = distinct_rows(x)
    _, inverse = np.unique(x, axis=0, return_inverse=True)
    inverse = np.asarray(inverse).ravel()
    assert m == int(inverse.max()) + 1
    assert len(set(zip(groups.tolist(), inverse.tolist()))) == m  # a one-to-one relabelling
