"""The engine's own distribution functions (engine/dist.py, engine/swilk.py) against outside
oracles: scipy.special and scipy.stats over wide grids, exact finite sums evaluated in
Decimal arithmetic (handbook identities for integer parameters), CPython's
statistics.NormalDist (an independent transcription of AS 241), and a subprocess check that
an ordinary fit imports neither scipy.special nor scipy.stats.

Where scipy itself is the limit the bound says so: its fdtrc and chdtrc lose up to ~1e-11
relative at large degrees of freedom (shown against the exact sums below), its stdtr loses
digits for p near 1 (|t| < 1e-3 at df = 1), and its Shapiro-Wilk p-value uses the AS 66
normal tail (about 1e-10 relative), where ours uses math.erfc.
"""

from __future__ import annotations

import math
import statistics
import subprocess
import sys
import warnings
from decimal import Decimal, localcontext

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as stats
from hypothesis import given, settings
from hypothesis import strategies as st

from xlbridge.engine import dist
from xlbridge.engine.swilk import shapiro_wilk

DFS = np.unique(np.concatenate([
    [0.5, 0.75, 1, 1.5, 2, 3, 4, 5, 7, 10, 13.5, 30, 100, 1e3, 1e4, 1e5, 1e6, 1e7],
    np.exp(np.random.default_rng(11).uniform(np.log(0.5), np.log(1e7), 60))]))


def _rel(mine, ref) -> np.ndarray:
    mine, ref = np.asarray(mine, dtype=float), np.asarray(ref, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(ref == mine, 0.0, np.abs(mine - ref) / np.abs(ref))


# ---- normal -----------------------------------------------------------------------------

def test_normal_quantile_matches_scipy_and_cpython():
    """AS 241 against scipy.special.ndtri and statistics.NormalDist().inv_cdf (CPython's
    own transcription of the same algorithm), p from 1e-300 to 1 - 1e-16."""
    p = np.concatenate([10.0 ** -np.arange(1, 301), np.linspace(1e-6, 1 - 1e-6, 4001),
                        1 - 10.0 ** -np.arange(1.0, 16.5, 0.5)])
    mine = np.array([dist.normal_quantile(v) for v in p])
    assert _rel(mine, sc.ndtri(p))[p != 0.5].max() <= 2e-15
    nd = statistics.NormalDist()
    assert max(abs(m - nd.inv_cdf(v)) / abs(m) for m, v in zip(mine, p) if v != 0.5) <= 2e-15
    assert dist.normal_quantile(0.5) == 0.0
    assert dist.normal_quantile(0.0) == -math.inf and dist.normal_quantile(1.0) == math.inf


def test_normal_tail_matches_scipy():
    """Upper tail against scipy.special.ndtr(-z), z from -10 to 37 (tails to 1e-300)."""
    z = np.linspace(-10, 37.5, 2001)
    ref = sc.ndtr(-z)
    ok = ref >= 1e-300
    assert _rel(dist.normal_sf(z), ref)[ok].max() <= 1e-13
    assert dist.normal_sf(1.5) == pytest.approx(float(sc.ndtr(-1.5)), rel=1e-15)


# ---- Student's t ----------------------------------------------------------------------

def test_t_pvalue_matches_scipy_over_a_wide_grid():
    """Two-sided p against 2 * scipy.special.stdtr(df, -|t|): df 0.5 to 1e7 (non-integer
    too), |t| 1e-3 to 1e3, every p >= 1e-300; relative error <= 1e-12."""
    t = np.concatenate([np.geomspace(1e-3, 1e3, 121), [0.999, 1.0, 1.001, 1.5, 2.0]])
    worst = 0.0
    for df in DFS:
        ref = 2 * sc.stdtr(df, -t)
        ok = ref >= 1e-300
        worst = max(worst, _rel(dist.t_pvalue(t, df), ref)[ok].max())
        small = dist.t_pvalue(t[:10], df)  # the element-by-element path for small arrays
        np.testing.assert_allclose(small, dist.t_pvalue(t, df)[:10], rtol=1e-15, atol=0)
    assert worst <= 1e-12


def _t_even_exact(t: float, df: int, digits: int = 360) -> float:
    """P(|T| > t) for even df by the finite sum (handbook identity for integer df/2):
    1 - sqrt(y) sum_{k < df/2} C(2k, k) / 4^k x^k, x = df / (df + t^2), y = 1 - x."""
    with localcontext() as ctx:
        ctx.prec = digits
        tt = Decimal(t) ** 2
        x, y = Decimal(df) / (df + tt), tt / (df + tt)
        term, total = Decimal(1), Decimal(1)
        for k in range(1, df // 2):
            term = term * (2 * k - 1) / (2 * k) * x
            total += term
        return float(1 - y.sqrt() * total)


@pytest.mark.parametrize("df", [2, 4, 10, 40, 200])
def test_t_pvalue_matches_exact_sums_for_even_df(df):
    """Even df: the exact finite sum in 360-digit Decimal arithmetic, including |t| below
    1e-3 where p is near 1 and tails to 1e-300; relative error <= 1e-13."""
    t = np.concatenate([[0.0, 1e-12, 1e-8, 1e-4], np.geomspace(1e-3, 1e3, 40)])
    ref = np.array([_t_even_exact(v, df) for v in t])
    ok = ref >= 1e-300
    assert _rel(dist.t_pvalue(t, df), ref)[ok].max() <= 1e-13


def test_t_pvalue_cauchy_closed_form():
    """df = 1 (Cauchy): p = (2/pi) atan(1/|t|), where scipy's stdtr loses digits near 1.
    A tail p is e^L with |L| = |ln p|, so its relative error is about |ln p| * 2e-16:
    <= 2e-13 down to p = 1e-150."""
    t = np.concatenate([[1e-12, 1e-8, 1e-4], np.geomspace(1e-3, 1e150, 200)])
    ref = 2 / np.pi * np.arctan(1 / t)
    err = _rel(dist.t_pvalue(t, 1.0), ref)
    assert err.max() <= 2e-13 and err[t < 1e6].max() <= 1e-14


def test_t_pvalue_edges():
    assert dist.t_pvalue(np.array([0.0]), 5.0)[0] == 1.0
    assert dist.t_pvalue(np.array([np.inf, -np.inf]), 5.0).tolist() == [0.0, 0.0]
    assert np.isnan(dist.t_pvalue(np.array([np.nan]), 5.0)[0])
    assert np.isnan(dist.t_pvalue(np.array([1.0]), 0.0)[0])
    big = np.array([1e200, 1e300])  # t^2 would overflow; Cauchy p = (2/pi) / t to 1e-400
    assert _rel(dist.t_pvalue(big, 1.0), 2 / np.pi / big).max() <= 2e-13


def test_t_quantile_matches_scipy():
    """Two-sided critical values against -scipy.special.stdtrit(df, (1 - level)/2) (the same
    tail probability, exact in binary), df 0.5 to 1e7, levels 0.5 to 0.9999: relative
    error <= 1e-13."""
    levels = [0.5, 0.6, 0.8, 0.9, 0.95, 0.975, 0.99, 0.995, 0.999, 0.9999]
    worst = max(_rel(dist.t_quantile(df, lev), -sc.stdtrit(df, (1 - lev) / 2))
                for df in DFS for lev in levels)
    assert worst <= 1e-13
    p = np.concatenate([np.linspace(0.001, 0.999, 37), [1e-10, 1e-5, 1 - 1e-5]])
    worst = max(_rel(dist.t_ppf(v, df), sc.stdtrit(df, v)) for df in DFS[::4] for v in p)
    assert worst <= 1e-13
    assert dist.t_quantile(5.0, 0.0) == 0.0 and dist.t_quantile(5.0, 1.0) == math.inf
    assert math.isnan(dist.t_quantile(0.0, 0.95)) and math.isnan(dist.t_ppf(1.5, 3.0))
    assert dist.t_quantile(math.inf, 0.95) == pytest.approx(1.959963984540054, rel=1e-15)


@given(df=st.floats(0.5, 1e7), p=st.floats(1e-12, 1 - 1e-12))
@settings(max_examples=200)
def test_t_quantile_inverts_the_tail(df, p):
    """Properties: the quantile's tail probability returns p, and t_ppf is odd."""
    t = dist.t_ppf(p, df)
    back = float(dist.t_pvalue(np.array([t]), df)[0])
    tail = 2 * min(p, 1 - p)
    assert back == pytest.approx(tail, rel=1e-12)
    if 1 - (1 - p) == p:  # the complement is exact: the quantiles are opposite
        assert dist.t_ppf(1 - p, df) == pytest.approx(-t, rel=1e-12)


@given(df=st.floats(0.5, 1e7), t=st.lists(st.floats(0, 1e3), min_size=2, max_size=40))
@settings(max_examples=100)
def test_t_pvalue_is_monotone_and_symmetric(df, t):
    """Properties: p falls as |t| grows, p(t) = p(-t), 0 <= p <= 1, and the F(1, df) tail
    of t^2 is the same probability (handbook identity)."""
    t = np.sort(np.asarray(t))
    p = dist.t_pvalue(t, df)
    assert np.all(np.diff(p) <= 1e-15 * p[:-1]) and np.all((0 <= p) & (p <= 1))
    np.testing.assert_array_equal(p, dist.t_pvalue(-t, df))
    for v, pv in zip(t[:3], p[:3]):
        if pv > 1e-290 and v < 1e150:
            assert dist.f_pvalue(v * v, 1.0, df) == pytest.approx(pv, rel=1e-11, abs=1e-300)


# ---- F and chi-square -------------------------------------------------------------------

def _f_exact_even_df1(f: float, d1: int, d2: float) -> float:
    """P(F > f) for even d1 (handbook identity for integer a = d1/2):
    y^b sum_{j < a} (b)_j / j! x^j, b = d2/2, x = d1 f / (d1 f + d2), y = 1 - x."""
    with localcontext() as ctx:
        ctx.prec = 50
        b, fd = Decimal(d2) / 2, Decimal(d1) * Decimal(f)
        x, y = fd / (fd + Decimal(d2)), Decimal(d2) / (fd + Decimal(d2))
        term, total = Decimal(1), Decimal(1)
        for j in range(1, d1 // 2):
            term = term * (b + j - 1) / j * x
            total += term
        return float((b * y.ln()).exp() * total)


def test_f_upper_tail_matches_exact_sums():
    """Even d1 up to 2000 and any d2 up to 1e6: the exact sum in 50-digit Decimal;
    relative error <= 1e-12 for every p >= 1e-300."""
    rng = np.random.default_rng(3)
    worst = 0.0
    for _ in range(300):
        d1 = 2 * int(rng.integers(1, 1001))
        d2 = float(np.exp(rng.uniform(0, np.log(1e6))))
        if rng.random() < 0.5:
            d2 = float(round(d2))
        spread = 3 * math.sqrt(2 / d1 + 2 / d2)
        f = float(np.exp(rng.uniform(np.log(1e-3), np.log(1e3)))) if rng.random() < 0.5 \
            else abs(1 + spread * rng.normal())
        ref = _f_exact_even_df1(f, d1, d2)
        if ref >= 1e-300:
            worst = max(worst, abs(dist.f_pvalue(f, d1, d2) - ref) / ref)
    assert worst <= 1e-12


def test_f_upper_tail_matches_scipy():
    """df1, df2 from 1 to 1e6 (non-integer too) against scipy.special.fdtrc: relative
    error <= 1e-10, the bound set by fdtrc's own error at large df (the exact sums above
    hold ours to 1e-12 where fdtrc is off by ~1e-11)."""
    rng = np.random.default_rng(4)
    worst = 0.0
    for _ in range(1500):
        d1, d2 = (float(np.exp(rng.uniform(0, np.log(1e6)))) for _ in range(2))
        f = float(np.exp(rng.uniform(np.log(1e-3), np.log(1e3))))
        ref = float(sc.fdtrc(d1, d2, f))
        if ref >= 1e-300:
            worst = max(worst, abs(dist.f_pvalue(f, d1, d2) - ref) / ref)
    assert worst <= 1e-10
    assert dist.f_pvalue(0.0, 2, 3) == 1.0 and dist.f_pvalue(math.inf, 2, 3) == 0.0
    assert math.isnan(dist.f_pvalue(math.nan, 2, 3)) and math.isnan(dist.f_pvalue(1.0, 0, 3))


def _chi2_exact_even(x: float, k: int) -> float:
    """P(chi2_k > x) for even k: e^(-x/2) sum_{j < k/2} (x/2)^j / j! (Poisson sum)."""
    with localcontext() as ctx:
        ctx.prec = 40
        h = Decimal(x) / 2
        term, total = Decimal(1), Decimal(1)
        for j in range(1, k // 2):
            term = term * h / j
            total += term
        return float((-h).exp() * total)


def test_chi2_tail_matches_exact_sums_and_scipy():
    """Even df 2 to 10,000: the Poisson sum in 40-digit Decimal, relative error <= 1e-12
    (p >= 1e-300); all df 1 to 10,000 against scipy.special.chdtrc, <= 1e-10 (chdtrc's own
    error at large df, ~1e-11, sets that bound)."""
    rng = np.random.default_rng(5)
    worst_exact = worst_scipy = 0.0
    for _ in range(300):
        k = int(rng.integers(1, 10_001))
        x = float(np.exp(rng.uniform(np.log(1e-3), np.log(3e4)))) if rng.random() < 0.4 \
            else abs(k + 4 * math.sqrt(2 * k) * rng.normal())
        ref = float(sc.chdtrc(k, x))
        mine = dist.chi2_sf(x, k)
        if ref >= 1e-300:
            worst_scipy = max(worst_scipy, abs(mine - ref) / ref)
        if k % 2 == 0:
            exact = _chi2_exact_even(x, k)
            if exact >= 1e-300:
                worst_exact = max(worst_exact, abs(mine - exact) / exact)
    assert worst_exact <= 1e-12 and worst_scipy <= 1e-10
    assert dist.chi2_sf(3.0, 2) == pytest.approx(math.exp(-1.5), rel=1e-15)
    assert dist.chi2_sf(0.0, 3) == 1.0 and dist.chi2_sf(math.inf, 3) == 0.0
    assert math.isnan(dist.chi2_sf(1.0, 0)) and math.isnan(dist.chi2_sf(math.nan, 2))


def _beta_exact_integer_b(a: float, m: int, x: float) -> tuple[float, float]:
    """(I_x(a, m), 1 - I_x(a, m)) for integer m by the finite sum (handbook identity)
    I_x(a, m) = x^a sum_{j < m} (a)_j / j! (1 - x)^j, in 400-digit Decimal (so the
    complement keeps its digits down to 1e-300)."""
    with localcontext() as ctx:
        ctx.prec = 400
        aa, xx = Decimal(a), Decimal(x)
        term, total = Decimal(1), Decimal(1)
        for j in range(1, m):
            term = term * (aa + j - 1) / j * (1 - xx)
            total += term
        lower = (aa * xx.ln()).exp() * total if xx > 0 else Decimal(0)
        return float(lower), float(1 - lower)


def test_incomplete_beta_matches_exact_sums():
    """beta_tails against the exact finite sum for integer b: a from 0.5 to 1e5, b 1 to
    200, x anywhere and near the mean, both tails; relative error <= 1e-12 for values
    >= 1e-300, and I + (1 - I) = 1. (scipy.special.betainc is no oracle this far out:
    at a = 7243.7, b = 21, x = 0.903 it is off by 3e-6 relative at 3.4e-283.)"""
    rng = np.random.default_rng(6)
    worst = 0.0
    for _ in range(60):
        a = float(np.exp(rng.uniform(np.log(0.5), np.log(1e5))))
        m = int(rng.integers(1, 201))
        mean = a / (a + m)
        x = np.clip(np.concatenate([rng.uniform(0, 1, 4),
                                    mean + math.sqrt(mean * (1 - mean) / (a + m))
                                    * rng.normal(0, 4, 4)]), 1e-300, 1.0)
        lower, upper = dist.beta_tails(a, m, x, 1 - x)
        np.testing.assert_allclose(lower + upper, 1.0, rtol=0, atol=2e-16)
        for xi, lo, up in zip(x, lower, upper):
            for mine, ref in zip((lo, up), _beta_exact_integer_b(a, m, float(xi))):
                if ref >= 1e-300:
                    worst = max(worst, abs(mine - ref) / ref)
    assert worst <= 1e-12


# ---- Shapiro-Wilk -----------------------------------------------------------------------

def _samples():
    rng = np.random.default_rng(8)
    for n in [*range(3, 40), 50, 99, 100, 250, 1000, 2500, 4999, 5000]:
        yield n, rng.normal(size=n)
        yield n, rng.exponential(size=n) ** 2
        yield n, np.round(rng.normal(size=n), 1)  # ties
        yield n, 1e9 + 1e3 * rng.standard_t(3, size=n)  # offset and heavy tails


def test_shapiro_wilk_matches_scipy():
    """W and p against scipy.stats.shapiro (the same published algorithm, AS R94) on seeded
    samples n = 3..5000 with ties and offsets: W to 1e-12 absolute, p to 1e-9 relative (the
    p-values differ by scipy's AS 66 normal tail, ~1e-10; ours uses math.erfc)."""
    worst_w = worst_p = 0.0
    for _, x in _samples():
        w, p = shapiro_wilk(x)
        ref = stats.shapiro(x)
        worst_w = max(worst_w, abs(w - ref.statistic))
        worst_p = max(worst_p, abs(p - ref.pvalue) / ref.pvalue if ref.pvalue > 0 else p)
    assert worst_w <= 1e-12 and worst_p <= 1e-9


def test_shapiro_wilk_edges():
    with pytest.raises(ValueError):
        shapiro_wilk(np.array([1.0, 2.0]))
    assert shapiro_wilk(np.full(10, 3.5)) == (1.0, 1.0)  # zero range, as scipy answers
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert stats.shapiro(np.full(10, 3.5)) == pytest.approx((1.0, 1.0))
    w, p = shapiro_wilk(np.array([1.0, 2.0, 4.0]))  # n = 3: p = 1 - (6/pi) acos(sqrt(W))
    assert p == pytest.approx(1 - 6 / math.pi * math.acos(math.sqrt(w)), rel=1e-14)
    assert (w, p) == pytest.approx(tuple(stats.shapiro([1.0, 2.0, 4.0])), rel=1e-12)
    w, p = shapiro_wilk(np.array([0.0, 0.0, 0.0, 0.0, 1.0]))  # four ties and one outlier
    ref = stats.shapiro([0, 0, 0, 0, 1.0])
    assert w == pytest.approx(ref.statistic, abs=1e-12) and p == pytest.approx(ref.pvalue,
                                                                                rel=1e-9)


# ---- a fit imports no scipy.special / scipy.stats ---------------------------------------

_NO_SCIPY = """
import sys
import numpy as np
import xlbridge.engine as e
rng = np.random.default_rng(1)
x = rng.uniform(1, 9, 60)
y = 3 + 2 * x + 0.4 * x**2 + rng.normal(0, 1, 60)
res = e.fit(y, x, 2)
e.checks(res), e.row_diagnostics(res), e.optimum(res), e.percentiles(res, [[4.0]], [5, 50, 95])
res.predict([[4.0]])
cer = e.fit_cer(y, x, "power")
cer.predict([5.0]), e.percentiles(cer, [5.0], [10, 90])
e.learning_curve([1, 2, 3, 4, 5], [100, 90, 84, 80, 77.5])
loaded = sorted(m for m in ("scipy.special", "scipy.stats") if m in sys.modules)
print(",".join(loaded) or "none")
"""


def test_a_fit_with_its_checks_imports_no_scipy_special_or_stats():
    """Subprocess: a fit, its checks, row diagnostics, optimum, percentiles, predictions, a
    log-space CER and a learning curve leave scipy.special and scipy.stats unimported."""
    out = subprocess.run([sys.executable, "-c", _NO_SCIPY], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "none", out.stdout + out.stderr
