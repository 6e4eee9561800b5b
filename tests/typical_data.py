"""Invented data for the 'typical fit' cases shared by the fit-path tests and benchmark.

Everything here is made up with fixed seeds: cost-like responses over lot sizes and
second-order surfaces over a few predictors with different units and ranges, with noise.
"""

from __future__ import annotations

import numpy as np

#: predictor ranges of the invented surfaces (sizes, rates, weights, ... in mixed units)
SURFACE_RANGES = ((50.0, 5000.0), (0.5, 3.0), (1000.0, 9000.0), (10.0, 200.0),
                  (0.01, 0.2), (2.0, 40.0))


def curve(n: int, seed: int = 20261202) -> tuple[np.ndarray, np.ndarray]:
    """Unit cost against lot size: a cubic trend with 3% noise (invented)."""
    rng = np.random.default_rng(seed + n)
    x = rng.uniform(50.0, 5000.0, n)
    trend = 120.0 + 0.05 * x - 2e-5 * x**2 + 1.5e-9 * x**3
    return trend * (1.0 + rng.normal(0.0, 0.03, n)), x


def surface(n: int, k: int, seed: int = 20261203) -> tuple[np.ndarray, np.ndarray]:
    """A second-order response over ``k`` predictors with 5% noise (invented)."""
    rng = np.random.default_rng(seed + 7 * n + k)
    lo = np.array([r[0] for r in SURFACE_RANGES[:k]])
    hi = np.array([r[1] for r in SURFACE_RANGES[:k]])
    x = rng.uniform(lo, hi, (n, k))
    u = (x - lo) / (hi - lo)  # the trend is written on 0..1 so every term matters
    trend = 100.0 + u @ rng.uniform(5, 20, k) - (u * u) @ rng.uniform(2, 8, k)
    if k > 1:
        trend += 3.0 * u[:, 0] * u[:, 1]
    return trend * (1.0 + rng.normal(0.0, 0.05, n)), x


def typical_cases(max_rows: int = 1_000_000):
    """(label, y, x, model) for the typical fits: degree 1-4 at 50, 1,000, 25,000 and 10^6
    rows, surfaces with 2-6 predictors at 50, 400, 2,000 and 10,000 rows (up to max_rows)."""
    for n in (50, 1_000, 25_000, 1_000_000):
        if n > max_rows:
            continue
        y, x = curve(n)
        for d in (1, 2, 3, 4):
            yield f"degree {d}, {n:,} rows", y, x, d
    for n in (50, 400, 2_000, 10_000):
        if n > max_rows:
            continue
        for k in (2, 3, 4, 5, 6):
            y, x = surface(n, k)
            yield f"surface {k} predictors, {n:,} rows", y, x, "surface"
