"""Fit statistics in the data's own units (dollars, hours), for every kind of fit.

Definitions (n rows used, p estimated coefficients, y observed, f fitted, both in units):

- ``see``  standard error of the estimate: sqrt(sum((y - f)^2) / (n - p));
- ``cv``   coefficient of variation: see / mean(y) (a fraction, 0.12 for 12 %);
- ``r2_unit``  1 - sum((y - f)^2) / sum((y - mean y)^2): the share of the variation of y
  about its mean that the fitted values explain, in units (can be negative for a fit that
  was not made in units, e.g. a log fit back-transformed);
- ``bias_percent``  mean((f - y) / y) * 100: positive when the fit over-estimates on average;
- ``spe``  standard percent error, for multiplicative-error fits only (None otherwise):
  sqrt(sum(((y - f) / f)^2) / (n - p)), the spread of the errors as a fraction of the
  fitted value.

``fit_space`` is always "unit" here; statistics computed on a log scale live elsewhere and
name their space beside them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .ddarith import dd_total

# math.fsum costs ~50 ns a term; above this many terms the double-double sum (~17 ns a term,
# within one unit in the last place unless the terms cancel by more than 1e15 / n) takes over
_FSUM_TERMS = 1 << 16


def _sum(a) -> float:
    """Correctly rounded sum (math.fsum; beyond 65,536 terms the double-double sum, within
    one unit in the last place) of finite terms; inf or nan, never an exception, otherwise."""
    a = np.asarray(a, dtype=float)
    if np.all(np.isfinite(a)):
        if a.size > _FSUM_TERMS and np.all(np.abs(a) < 1e300):  # two-sums cannot overflow
            return dd_total(a)
        try:
            return math.fsum(a)
        except OverflowError:  # a partial sum beyond the double range: inf, as np.sum gives
            pass
    with np.errstate(over="ignore", invalid="ignore"):
        return float(np.sum(a))


def _plain(v: float) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass(frozen=True)
class UnitStats:
    """Unit-space statistics of one fit; definitions in the module docstring."""

    n: int
    n_params: int
    see: float
    cv: float
    r2_unit: float
    bias_percent: float
    spe: float  # nan unless the fit has a multiplicative error model
    multiplicative: bool

    def to_dict(self) -> dict:
        return {"fit_space": "unit", "n": self.n, "n_params": self.n_params,
                "df": self.n - self.n_params, "see": _plain(self.see), "cv": _plain(self.cv),
                "r2_unit": _plain(self.r2_unit), "bias_percent": _plain(self.bias_percent),
                "spe": _plain(self.spe) if self.multiplicative else None}


def unit_stats(y, fitted, n_params: int, multiplicative: bool = False) -> UnitStats:
    """SEE, CV, R² in units, percent bias and (multiplicative fits) SPE of ``fitted``
    against ``y``, both in units; ``n_params`` coefficients were estimated.

    Examples
    --------
    >>> from xlbridge.engine import unit_stats
    >>> s = unit_stats([10.0, 20.0, 30.0, 40.0, 50.0], [12.0, 18.0, 33.0, 37.0, 52.0], 2,
    ...                multiplicative=True)
    >>> print(f"SEE {s.see:.4f}  CV {s.cv:.4f}  SPE {s.spe:.4f}  bias {s.bias_percent:.2f} %")
    SEE 3.1623  CV 0.1054  SPE 0.1372  bias 3.30 %
    """
    y = np.asarray(y, dtype=float).ravel()
    f = np.asarray(fitted, dtype=float).ravel()
    n = len(y)
    df = n - int(n_params)
    with np.errstate(all="ignore"):  # extreme data give inf/nan statistics, not errors
        e = y - f
        sse = _sum(e * e)
        see = math.sqrt(sse / df) if df > 0 else math.nan
        ybar = _sum(y) / n if n else math.nan
        cv = see / ybar if ybar != 0 else math.nan
        sst = _sum((y - ybar) ** 2)
        r2 = 1.0 - sse / sst if sst > 0 else math.nan
        bias = 100.0 * _sum((f - y) / y) / n if n and np.all(y != 0) else math.nan
        spe = math.nan
        if multiplicative and df > 0 and np.all(f != 0):
            spe = math.sqrt(_sum((e / f) ** 2) / df)
    return UnitStats(n, int(n_params), see, cv, r2, bias, spe, bool(multiplicative))


def relevant_range(x, names) -> dict[str, list[float]]:
    """{driver name: [min, max]} over the rows used: the range a CER is supported by."""
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x.reshape(-1, 1)
    return {str(nm): [float(np.min(x[:, j])), float(np.max(x[:, j]))]
            for j, nm in enumerate(names)}


def fit_unit_stats(res) -> UnitStats:
    """Unit-space statistics of a polynomial/surface ``FitResult``: a log fit is compared in
    units through its back-transformed (smeared) fitted values; log and percent-error fits
    count as multiplicative."""
    remedy = res.remedy
    y, f = res.y, res.fitted
    if remedy.log:
        y, f = np.exp(y), np.exp(f) * remedy.smearing
    mult = bool(remedy.log or remedy.error == "percent")
    return unit_stats(y, f, res.stats.n_params, multiplicative=mult)
