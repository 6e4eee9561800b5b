"""Benchmark: 10,000 groups x 30 rows, quadratic, in one run: the batched ``fit_groups``
against a loop of statsmodels ``OLS(...).fit()`` per group and a loop of ``xlbridge.fit``
per group. Prints times, ratios and the largest difference between the answers.

Run by hand:  python tests/benchmarks/bench_groups.py [groups] [rows]
Target: fit_groups >= 50x faster than the statsmodels loop.

The data are invented (fixed seed): unit price against order size per product family,
rows shuffled so the families are interleaved.
"""

from __future__ import annotations

import sys
import time

import numpy as np


def best_of(fn, repeat):
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main() -> None:
    n_groups = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    rows = int(sys.argv[2]) if len(sys.argv) > 2 else 30
    rng = np.random.default_rng(20261202)
    fam = np.repeat(np.arange(n_groups), rows)
    size = rng.uniform(20, 400, fam.size)
    price = (35 + rng.normal(0.9, 0.1, n_groups)[fam] * size - 0.0011 * size**2
             + rng.normal(0, 6, fam.size))
    perm = rng.permutation(fam.size)
    fam, size, price = fam[perm], size[perm], price[perm]

    import statsmodels.api as sm

    import xlbridge
    from xlbridge import fit, fit_groups

    fit_groups(fam[:3000], price[:3000], size[:3000], 2)  # warm imports
    fit(price[:30], size[:30], 2)

    def runs(fam, size, price):
        def batched():
            return fit_groups(fam, price, size, 2)

        def split():
            order = np.argsort(fam, kind="stable")
            return np.split(order, np.flatnonzero(np.diff(fam[order])) + 1)

        def statsmodels_loop():
            out = []
            for idx in split():
                x = size[idx]
                r = sm.OLS(price[idx], np.column_stack([np.ones(len(x)), x, x * x])).fit()
                out.append((r.params, r.bse, r.rsquared, r.rsquared_adj,
                            np.sqrt(r.mse_resid)))
            return out

        def xlbridge_loop():
            out = []
            for idx in split():
                r = fit(price[idx], size[idx], 2)
                out.append((r.estimates, r.std_errors, r.stats.r2, r.stats.adj_r2,
                            r.stats.rmse))
            return out

        return batched, statsmodels_loop, xlbridge_loop

    batched, statsmodels_loop, xlbridge_loop = runs(fam, size, price)
    t_batch, res = best_of(batched, 7)
    t_sm, ref_sm = best_of(statsmodels_loop, 3)
    t_fit, ref_fit = best_of(xlbridge_loop, 1)
    order = np.argsort(fam, kind="stable")
    b_sorted, sm_sorted, _ = runs(fam[order], size[order], price[order])
    t_batch_sorted, _ = best_of(b_sorted, 7)
    t_sm_sorted, _ = best_of(sm_sorted, 3)

    est_sm = np.array([r[0] for r in ref_sm])
    est_fit = np.array([r[0] for r in ref_fit])
    se_fit = np.array([r[1] for r in ref_fit])
    stats_fit = np.array([r[2:] for r in ref_fit])
    mine = np.column_stack([res.r2, res.adj_r2, res.rmse])
    rel = np.max(np.abs(res.estimates - est_fit) / np.abs(est_fit))
    rel_se = np.max(np.abs(res.std_errors - se_fit) / np.abs(se_fit))
    rel_stats = np.max(np.abs(mine - stats_fit) / np.abs(stats_fit))
    rel_sm = np.max(np.abs(res.estimates - est_sm) / np.abs(est_sm))
    print(f"xlbridge {xlbridge.__version__}: {n_groups} groups x {rows} rows, quadratic, "
          f"rows interleaved")
    print(f"  fit_groups (batched, best of 7):   {t_batch * 1e3:9.1f} ms   groups answered: "
          f"{res.methods.count('batched')} by the double-precision stage, "
          f"{res.methods.count('refined')} by the double-double stage, "
          f"{res.methods.count('single')} by the single fit")
    print(f"  statsmodels OLS loop (best of 3):  {t_sm * 1e3:9.1f} ms   "
          f"ratio {t_sm / t_batch:6.1f}x  (target >= 50x)")
    print(f"  xlbridge.fit loop (1 run):         {t_fit * 1e3:9.1f} ms   "
          f"ratio {t_fit / t_batch:6.1f}x")
    print(f"  rows sorted by group: fit_groups {t_batch_sorted * 1e3:.1f} ms, statsmodels "
          f"loop {t_sm_sorted * 1e3:.1f} ms, ratio {t_sm_sorted / t_batch_sorted:.1f}x")
    print(f"  largest relative difference to the fit loop: estimates {rel:.1e}, "
          f"standard errors {rel_se:.1e}, r2/adj_r2/rmse {rel_stats:.1e}")
    print(f"  largest relative difference of estimates to statsmodels: {rel_sm:.1e}")


if __name__ == "__main__":
    main()
