"""Benchmark: which path typical fits take, and what each costs beside its floor.

Run by hand:  python tests/benchmarks/bench_fit_paths.py [--quick]

Prints, in one run, on invented data (tests/typical_data.py, fixed seeds):
- every typical fit (degree 1-4 at 50, 1,000, 25,000 and 10^6 rows; second-order surfaces
  with 2-6 predictors at 50, 400, 2,000 and 10,000 rows): the full ``fit`` time and path
  beside the normal-equations floor (raw design, X'X, X'y, numpy.linalg.solve) and, at
  10^6 rows, numpy.linalg.lstsq of the same design;
- the share of those fits that took the exact integer refit;
- ``scan_degrees`` at 10^4 rows, max degree 5, beside the same folds solved by normal
  equations;
- BLAS thread control: small fits with one BLAS thread (the default) against the library's
  own thread count.
Targets: exact path on <= 5% of the typical fits; degree 3 at 25,000 rows <= 3x the
normal-equations time; 6-predictor surface at 400 rows <= 20 ms; the scan <= 0.5 s; one fit
at 10^6 rows <= 1x lstsq.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from tests.typical_data import curve, typical_cases  # noqa: E402
from xlbridge import fit, scan_degrees  # noqa: E402
from xlbridge.engine import threads  # noqa: E402
from xlbridge.engine.solve import monomials  # noqa: E402
from xlbridge.engine.terms import parse_model  # noqa: E402


def best_of(fn, repeat: int, *args) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - t)
    return min(times)


def paired(fns, repeat: int, *args) -> list[float]:
    """Best time of each function, measured in alternation (a loaded machine drifts)."""
    best = [float("inf")] * len(fns)
    for _ in range(repeat):
        for i, fn in enumerate(fns):
            best[i] = min(best[i], best_of(fn, 1, *args))
    return best


def raw_design(x: np.ndarray, model) -> np.ndarray:
    x2 = x.reshape(len(x), -1)
    spec = parse_model(model, x2.shape[1], None, intercept=True)
    return monomials(x2, spec.all_powers)


def normal_equations(y, x, model):
    a = raw_design(x, model)
    return np.linalg.solve(a.T @ a, a.T @ y)


def lstsq(y, x, model):
    return np.linalg.lstsq(raw_design(x, model), y, rcond=None)[0]


def typical(quick: bool) -> None:
    print("Typical fits: full fit (path) against the normal-equations floor")
    print(f"{'case':34s} {'path':8s} {'fit ms':>9s} {'NE ms':>8s} {'ratio':>7s}  other floor")
    exact = total = 0
    for label, y, x, model in typical_cases(100_000 if quick else 1_000_000):
        n = len(y)
        repeat = 3 if n >= 1_000_000 else (5 if n >= 25_000 else 9)
        res = fit(y, x, model)
        total += 1
        exact += res.method == "exact"
        extra = ""
        if n >= 1_000_000:
            t_fit, t_ne, t_ls = paired((fit, normal_equations, lstsq), repeat, y, x, model)
            extra = f"lstsq {t_ls * 1e3:8.1f} ms, fit/lstsq {t_fit / t_ls:5.2f}x"
        else:
            t_fit, t_ne = paired((fit, normal_equations), repeat, y, x, model)
        print(f"{label:34s} {res.method:8s} {t_fit * 1e3:9.2f} {t_ne * 1e3:8.2f} "
              f"{t_fit / t_ne:6.1f}x  {extra}")
    print(f"exact path on {exact} of {total} typical fits ({100 * exact / total:.0f}%; "
          "target <= 5%)")


def scan(quick: bool) -> None:
    y, x = curve(10_000)
    folds, top = 10, 5

    def floor():
        fold_of = np.arange(len(y)) % folds
        for d in range(1, top + 1):
            normal_equations(y, x, d)
            for k in range(folds):
                tr = fold_of != k
                b = normal_equations(y[tr], x[tr], d)
                _ = raw_design(x[~tr], d) @ b

    def scan_once():
        return scan_degrees(y, x, top)

    scan_once()
    t_scan, t_floor = paired((scan_once, floor), 1 if quick else 3)
    chosen = scan_degrees(y, x, top).chosen
    print(f"\nscan_degrees, 10,000 rows, max degree 5 (chosen {chosen}): {t_scan:.3f} s "
          f"(target <= 0.5 s); same folds by normal equations {t_floor * 1e3:.1f} ms, "
          f"ratio {t_scan / t_floor:.1f}x")


def thread_control() -> None:
    print("\nBLAS threads: one thread below LARGE_PRODUCT multiply-adds (default) against "
          "the library's own count for every product")
    from tests.typical_data import surface

    saved = threads.LARGE_PRODUCT
    for n, k in ((400, 6), (2_000, 6), (10_000, 6), (25_000, 1)):
        y, x = surface(n, k) if k > 1 else curve(n)
        model = "surface" if k > 1 else 3
        fit(y, x, model)
        def one_thread(*args):
            threads.LARGE_PRODUCT = saved
            return fit(*args)

        def library_threads(*args):
            threads.LARGE_PRODUCT = 0  # every product on the library's threads
            return fit(*args)

        try:
            t_one, t_all = paired((one_thread, library_threads), 9, y, x, model)
        finally:
            threads.LARGE_PRODUCT = saved
        label = f"surface {k} predictors" if k > 1 else "degree 3"
        print(f"  {label}, {n:,} rows: one thread {t_one * 1e3:7.2f} ms, library threads "
              f"{t_all * 1e3:7.2f} ms, ratio {t_all / t_one:5.2f}x")


def main() -> None:
    quick = "--quick" in sys.argv
    y, x = curve(200)
    fit(y, x, 2)  # warm imports
    typical(quick)
    scan(quick)
    thread_control()


if __name__ == "__main__":
    main()
