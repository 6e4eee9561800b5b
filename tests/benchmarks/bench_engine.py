"""Benchmark: xlbridge.fit on 1,048,576 rows, degree 3 (full FitResult with VIFs and PRESS)
against statsmodels OLS(...).fit() plus its VIF loop, and against bare numpy.linalg.lstsq on
the raw design, all in this one run. Prints times, ratios and peak extra memory.

Run by hand:  python tests/benchmarks/bench_engine.py [rows]
Targets: >= 10x faster than statsmodels; <= 3x the bare lstsq time; peak extra memory
<= 3x the design matrix (rows x 4 doubles).
"""

from __future__ import annotations

import sys
import time
import tracemalloc

import numpy as np


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def peak_bytes(fn):
    tracemalloc.start()
    tracemalloc.reset_peak()
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_048_576
    rng = np.random.default_rng(20261201)
    # invented: unit cost against lot size, cubic with noise
    x = rng.uniform(50, 5000, n)
    y = 120 + 0.05 * x - 2e-5 * x**2 + 1.5e-9 * x**3 + rng.normal(0, 4, n)

    import statsmodels.api as sm
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    from xlbridge import fit

    fit(y[:1000], x[:1000], 3)  # warm imports

    def ours():
        r = fit(y, x, 3)
        assert np.isfinite(r.stats.press) and np.isfinite(r.stats.max_vif)
        return r

    def lstsq():
        design = np.column_stack([np.ones(n), x, x**2, x**3])
        return np.linalg.lstsq(design, y, rcond=None)[0]

    def statsmodels_fit():
        design = np.column_stack([np.ones(n), x, x**2, x**3])
        res = sm.OLS(y, design).fit()
        vifs = [variance_inflation_factor(design, j) for j in range(1, 4)]
        return res.params, vifs

    t_ours = best_of(ours)
    t_lstsq = best_of(lstsq)
    t_sm = best_of(statsmodels_fit, repeat=1)
    design_bytes = n * 4 * 8
    peak = peak_bytes(ours)
    r = ours()
    ref = np.polynomial.polynomial.polyfit(x, y, 3)  # scaled-domain reference solve
    agree = np.max(np.abs(r.estimates - ref) / np.abs(ref))
    raw_err = np.max(np.abs(lstsq() - ref) / np.abs(ref))
    print(f"rows {n:,}, degree 3, solve path: {r.method}")
    print(f"xlbridge.fit (full result)   {t_ours * 1e3:8.1f} ms")
    print(f"numpy lstsq (raw design)     {t_lstsq * 1e3:8.1f} ms")
    print(f"statsmodels OLS + VIF loop   {t_sm * 1e3:8.1f} ms")
    print(f"speed-up vs statsmodels      {t_sm / t_ours:8.1f}x   (target >= 10x, aim 25x)")
    print(f"time vs bare lstsq           {t_ours / t_lstsq:8.2f}x   (target <= 3x, aim < 1x)")
    print(f"peak extra memory            {peak / design_bytes:8.2f}x the design matrix "
          f"({peak / 2**20:.0f} MiB; target <= 3x)")
    print(f"max relative difference from numpy polyfit: xlbridge {agree:.1e}, "
          f"raw-design lstsq {raw_err:.1e}")


if __name__ == "__main__":
    main()
