"""Tails and quantiles of Student's t and the F distribution (scipy.special, imported on
first use)."""

from __future__ import annotations

import math

import numpy as np


def _special():
    # scipy.special costs ~0.3 s to import; only fits that report p-values pay it
    import scipy.special as sp

    return sp


def t_quantile(df: float, level: float) -> float:
    """Two-sided critical value of Student's t for a ``level`` interval."""
    return float(_special().stdtrit(df, 0.5 + level / 2)) if df > 0 else math.nan


def t_pvalue(t: np.ndarray, df: float) -> np.ndarray:
    """Two-sided p-value of t ratios."""
    t = np.asarray(t, dtype=float)
    if df <= 0:
        return np.full(t.shape, np.nan)
    return 2.0 * _special().stdtr(df, -np.abs(t))


def f_pvalue(f: float, df1: float, df2: float) -> float:
    """Upper tail of the F distribution."""
    if not df1 > 0 or not df2 > 0 or math.isnan(f):
        return math.nan
    if math.isinf(f):
        return 0.0
    return float(_special().fdtrc(df1, df2, f))
