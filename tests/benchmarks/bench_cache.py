"""Benchmark: a cache hit of a worksheet function on 10,000 rows against a cold call.

Target: the hit takes under 5 % of the cold call. Both are timed in this run, on the raw
values xlwings hands a function (flat lists of floats, a header and a few blanks).
Data are invented (fixed seed). Run: python tests/benchmarks/bench_cache.py
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from xlbridge import worksheet as ws
from xlbridge.cells.cache import FIT_CACHE

N = 10_000
REPEATS = 15
TARGET = 0.05


def data():
    rng = np.random.default_rng(2024)
    size = rng.uniform(10, 500, N)
    price = 200 + 4.2 * size - 0.003 * size**2 + rng.normal(0, 25, N)
    y = ["price"] + price.tolist()
    x = ["size"] + size.tolist()
    for i in range(1, N, 997):
        y[i] = None  # a few blank cells, as in real sheets
    return y, x


def timed(fn, *args):
    t0 = time.perf_counter()
    out = fn(*args)
    return time.perf_counter() - t0, out


def main() -> None:
    y, x = data()
    ws.XB_COEFS(y, x, 2.0)  # warm imports (scipy.special) outside the timings
    results = {}
    for name, fn in (("XB_COEFS", ws.XB_COEFS), ("XB_STATS", ws.XB_STATS)):
        cold, hit = [], []
        for _ in range(REPEATS):
            FIT_CACHE.clear()
            t, first = timed(fn, y, x, 2.0)
            cold.append(t)
            t, again = timed(fn, y, x, 2.0)
            hit.append(t)
            assert again == first and len(first) > 1, first
        results[name] = (statistics.median(cold), statistics.median(hit))
    print(f"cache benchmark, {N:,} rows, degree 2, median of {REPEATS}")
    worst = 0.0
    for name, (cold, hit) in results.items():
        ratio = hit / cold
        worst = max(worst, ratio)
        print(f"  {name:<9} cold {cold * 1e3:8.2f} ms   hit {hit * 1e3:7.2f} ms   "
              f"ratio {ratio:6.1%}")
    print(f"worst ratio {worst:.1%} (target < {TARGET:.0%}): "
          f"{'met' if worst < TARGET else 'NOT met'}")


if __name__ == "__main__":
    main()
