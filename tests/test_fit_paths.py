"""Which path a fit takes (FitResult.method), and the accuracy of the cheaper paths.

Typical fits must not need the exact integer refit; hard, badly conditioned polynomials must
still reach >= 12 significant digits. The reference for the hard cases is computed here, in
exact rational arithmetic (Python's fractions module) on the normal equations of the raw
design, independently of the engine's code paths (no shifting, scaling or Bareiss
elimination).
"""

from __future__ import annotations

import decimal
from decimal import Decimal
from fractions import Fraction

import numpy as np
import pytest

import xlbridge.engine.refine as refine_module
import xlbridge.engine.solve as solve_module
from xlbridge import fit

from .conftest import lre
from .typical_data import typical_cases

MIN_DIGITS = 12.0


@pytest.mark.parametrize("case", list(typical_cases(max_rows=2_000)),
                         ids=lambda c: c[0])
def test_typical_fits_do_not_take_the_exact_path(case):
    """Invented cost-like curves (degree 1-4) and second-order surfaces (2-6 predictors) at
    50 to 2,000 rows are certified by the double-precision or refined path."""
    _, y, x, model = case
    assert fit(y, x, model).method in ("qr", "cholesky", "refined")


@pytest.mark.parametrize("n", [30, 200, 3_000])
def test_weak_relationships_do_not_take_the_exact_path(n):
    """Invented noise around a nearly flat line (R^2 of 1e-5 to 0.05) at degrees 1-3 is
    certified without the exact refit; R^2 still agrees with statsmodels' OLS to 1e-12
    relative where its absolute value permits (reference: statsmodels)."""
    import statsmodels.api as sm

    rng = np.random.default_rng(n)
    x = rng.uniform(0, 10, n)
    y = 5 + 0.01 * x + rng.normal(0, 1, n)
    for d in (1, 2, 3):
        res = fit(y, x, d)
        assert res.method != "exact"
        ref = sm.OLS(y - y.mean(), np.column_stack([(x - x.mean()) ** j
                                                    for j in range(d + 1)])).fit()
        assert res.stats.r2 == pytest.approx(ref.rsquared, rel=1e-10, abs=1e-13)


def _exact_reference(y, x, degree, w=None):
    """Estimates, standard errors, residual SD and R^2 of a polynomial fit with intercept,
    exactly: normal equations of the raw powers x^0..x^d in Fractions, Gauss-Jordan."""
    n, p = len(y), degree + 1
    xf = [Fraction(float(v)) for v in x]
    yf = [Fraction(float(v)) for v in y]
    wf = [Fraction(1)] * n if w is None else [Fraction(float(v)) for v in w]
    cols = [[xi**k for xi in xf] for k in range(p)]
    gram = [[sum(wi * a * b for wi, a, b in zip(wf, cols[i], cols[j])) for j in range(p)]
            for i in range(p)]
    rhs = [sum(wi * a * yi for wi, a, yi in zip(wf, cols[i], yf)) for i in range(p)]
    aug = [gram[i] + [rhs[i]] + [Fraction(int(i == j)) for j in range(p)] for i in range(p)]
    for k in range(p):
        piv = next(i for i in range(k, p) if aug[i][k] != 0)
        aug[k], aug[piv] = aug[piv], aug[k]
        pk = aug[k][k]
        aug[k] = [v / pk for v in aug[k]]
        for i in range(p):
            if i != k and aug[i][k] != 0:
                f = aug[i][k]
                aug[i] = [a - f * b for a, b in zip(aug[i], aug[k])]
    beta = [aug[i][p] for i in range(p)]
    inv_diag = [aug[i][p + 1 + i] for i in range(p)]
    resid = [yi - sum(b * c[i] for b, c in zip(beta, cols)) for i, yi in enumerate(yf)]
    sse = sum(wi * r * r for wi, r in zip(wf, resid))
    ybar = sum(wi * yi for wi, yi in zip(wf, yf)) / sum(wf)
    sst = sum(wi * (yi - ybar) ** 2 for wi, yi in zip(wf, yf))
    s2 = sse / (n - p)
    return beta, [s2 * v for v in inv_diag], s2, 1 - sse / sst


def _dec(f: Fraction) -> Decimal:
    return Decimal(f.numerator) / Decimal(f.denominator)


def _digits(res, ref) -> dict[str, float]:
    beta, var, s2, r2 = ref
    with decimal.localcontext() as ctx:
        ctx.prec = 50
        out = {}
        for i, c in enumerate(res.coefficients):
            out[f"{c.term} estimate"] = lre(c.estimate, _dec(beta[i]))
            out[f"{c.term} std_error"] = lre(c.std_error, _dec(var[i]).sqrt())
        out["residual SD"] = lre(res.stats.rmse, _dec(s2).sqrt())
        out["R^2"] = lre(res.stats.r2, _dec(r2))
    return out


def _hard_cases():
    """Ill-conditioned polynomials (invented data, fixed seeds). Plain double precision
    on the same scaled basis gets 4 to 13 digits on these."""
    rng = np.random.default_rng(101)
    x = np.arange(1.0, 22.0)
    # degree 10 on 1..21: raw powers span 1 to 1.7e13
    yield "degree 10 on 1..21", 1 + 0.1 * x + rng.normal(0, 0.05, 21) * x, x, 10, None
    # y almost exactly a quadratic: tiny residuals, R^2 within 1e-20 of 1
    yield ("degree 10 on 1..21, nearly exact", 1 + x + x**2 / 7 + rng.normal(0, 1e-9, 21), x,
           10, None)
    yield ("degree 10 on 1..21, weighted", 1 + 0.1 * x + rng.normal(0, 0.05, 21) * x, x, 10,
           rng.uniform(0.1, 10.0, 21))
    # a long way from zero on a narrow range: 82 points in [-8.8, -3.1], degree 10
    xf = np.sort(rng.uniform(-8.8, -3.1, 82))
    for noise in (1e-3, 1e-6):
        yield (f"degree 10 on [-8.8, -3.1], noise {noise:g}",
               0.8 + 0.01 * np.sin(xf) + rng.normal(0, noise, 82), xf, 10, None)
    # large offset and small spread: degree 5 on 1e6 + 0..20
    xo = 1e6 + np.arange(21.0)
    yield ("degree 5 on 1e6 + 0..20", 3 + 0.2 * np.arange(21.0) ** 2 + rng.normal(0, 0.5, 21),
           xo, 5, None)


@pytest.mark.parametrize("case", list(_hard_cases()), ids=lambda c: c[0])
def test_hard_polynomials_reach_12_digits(case):
    """Every estimate, standard error, residual SD and R^2 to >= 12 significant digits
    against the exact rational solution of the same double data (reference: fractions)."""
    _, y, x, degree, w = case
    res = fit(y, x, degree, weights=w)
    scores = _digits(res, _exact_reference(y, x, degree, w))
    worst = min(scores, key=scores.get)
    assert scores[worst] >= MIN_DIGITS, f"{worst}: {scores[worst]:.1f} digits ({res.method})"


@pytest.mark.parametrize("case", list(_hard_cases()), ids=lambda c: c[0])
def test_refinement_alone_reaches_12_digits_on_hard_polynomials(case, monkeypatch):
    """With the exact refit switched off, the refined answer itself has >= 12 digits
    (reference: fractions), whether or not its estimate certified it."""
    monkeypatch.setattr(solve_module, "EXACT_BUDGET", 0)
    _, y, x, degree, w = case
    res = fit(y, x, degree, weights=w)
    assert res.method == "refined"
    scores = _digits(res, _exact_reference(y, x, degree, w))
    worst = min(scores, key=scores.get)
    assert scores[worst] >= MIN_DIGITS, f"{worst}: {scores[worst]:.1f} digits"


def test_refined_path_matches_exact_arithmetic():
    """A typical quadratic (invented, 3% noise, 400 rows) takes the refined path and agrees
    with the exact rational solution to >= 14 digits (reference: fractions)."""
    rng = np.random.default_rng(7)
    x = rng.uniform(50, 5000, 400)
    y = (120 + 0.05 * x - 2e-5 * x**2) * (1 + rng.normal(0, 0.03, 400))
    res = fit(y, x, 2)
    assert res.method == "refined"
    scores = _digits(res, _exact_reference(y, x, 2))
    assert min(scores.values()) >= 14.0, scores


def test_degree_scan_folds_with_weights_and_log_match_a_brute_force_loop():
    """Cross-validated RMSE of a weighted log-y scan equals an independent k-fold loop:
    numpy.linalg.lstsq on sqrt(w)-scaled powers of x (centered for conditioning), ln y,
    predictions exp(fit) times Duan's smearing mean(exp(residuals)) of the training fold."""
    from xlbridge import scan_degrees

    rng = np.random.default_rng(31)
    n, folds = 60, 6
    x = rng.uniform(10, 90, n)
    y = np.exp(1 + 0.03 * x - 1e-4 * x**2 + rng.normal(0, 0.05, n))
    w = rng.uniform(0.5, 2.0, n)
    scan = scan_degrees(y, x, 3, folds=folds, weights=w, log=True)
    fold_of = np.arange(n) % folds
    for row in scan.rows:
        d = row.degree
        mse, size = [], []
        for k in range(folds):
            tr, te = fold_of != k, fold_of == k
            xc = x - x[tr].mean()
            a = np.column_stack([xc**j for j in range(d + 1)])
            sw = np.sqrt(w[tr])
            b = np.linalg.lstsq(a[tr] * sw[:, None], np.log(y[tr]) * sw, rcond=None)[0]
            smear = np.mean(np.exp(np.log(y[tr]) - a[tr] @ b))
            err = y[te] - np.exp(a[te] @ b) * smear
            mse.append(np.sum(w[te] * err**2) / np.sum(w[te]))
            size.append(np.sum(w[te]))
        cv = np.sqrt(np.sum(np.array(mse) * size) / np.sum(size))
        assert row.cv_rmse == pytest.approx(cv, rel=1e-9)


def test_small_products_run_on_one_blas_thread():
    """Inside the engine's thread control a small product sees one BLAS thread and a large
    one the library's own count (as reported by threadpoolctl for numpy's BLAS, the one
    the engine multiplies with; scipy may load a second copy that the engine never uses)."""
    threadpoolctl = pytest.importorskip("threadpoolctl")
    from xlbridge.engine import threads

    def blas_threads_now() -> int:
        info = [i for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"]
        info = [i for i in info if "numpy" in i["filepath"]] or info
        return max(i["num_threads"] for i in info) if info else 1

    before = blas_threads_now()
    with threads.blas_threads(1_000):
        assert blas_threads_now() == 1
        with threads.blas_threads(threads.LARGE_PRODUCT):
            assert blas_threads_now() == before
        assert blas_threads_now() == 1
    assert blas_threads_now() == before


@pytest.mark.parametrize("weighted", [False, True])
def test_refined_path_in_small_row_blocks_matches_exact_arithmetic(weighted, monkeypatch):
    """The refinement's long sums go by row blocks; with blocks of 64 rows (7 blocks, the
    last one short) a typical quadratic, weighted or not, still agrees with the exact
    rational solution to >= 14 digits (reference: fractions)."""
    monkeypatch.setattr(refine_module, "BLOCK", 64)
    rng = np.random.default_rng(8)
    x = rng.uniform(50, 5000, 420)
    y = (120 + 0.05 * x - 2e-5 * x**2) * (1 + rng.normal(0, 0.03, 420))
    w = rng.uniform(0.2, 5.0, 420) if weighted else None
    res = fit(y, x, 2, weights=w)
    assert res.method == "refined"
    scores = _digits(res, _exact_reference(y, x, 2, w))
    assert min(scores.values()) >= 14.0, scores
