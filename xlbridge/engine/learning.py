"""Learning curves: unit theory and cumulative-average theory.

With b = log2(slope) (slope 0.85 for an 85 % curve):
- unit theory: the cost of unit n is T1 * n^b; a lot's cost is the sum over its units;
- cumulative-average theory: the average cost of units 1..n is T1 * n^b, so the total of
  units 1..n is T1 * n^(b+1) and unit n costs the difference of two totals.

Fits are least squares of ln(cost) on ln(unit number):
- unit data, unit theory: ln(unit cost) on ln(unit);
- unit data, cumulative theory (units 1..N, each once): ln(average of units 1..n) on ln n;
- lot data, unit theory: ln(lot cost / lot size) on ln(lot midpoint), where the midpoint of
  the lot of units F..L is the unit number Q whose cost on the curve equals the lot's
  average unit cost on the curve: Q = (sum_{i=F..L} i^b / (L - F + 1))^(1/b) (the geometric
  mean of F..L when b = 0). It depends on b, so the fit and the midpoints are iterated until
  no midpoint moves by more than 1e-12 of itself, starting from the b-free approximation
  (F + L + 2 sqrt(F L))/4;
- lot data, cumulative theory (lots covering units 1..N in order): ln(total of lots so far /
  last unit) on ln(last unit).
T1's standard error is the delta method on ln T1 (T1 * se(ln T1)); its interval is exp of
ln T1's t interval; the slope's interval is 2^(b's interval).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np

from .dist import t_quantile
from .errors import ModelError, ModelErrorKind, check_level, overflow_is_scale
from .result import plain

THEORIES = ("unit", "cumulative")
DIRECT_SUM_MAX = 100_000  # longer sums use the Euler-Maclaurin formula
_EM_HEAD = 1000
MIDPOINT_TOL, MIDPOINT_MAX_STEPS = 1e-12, 200
DATA = ModelErrorKind.DATA


@overflow_is_scale
def power_sum(m: int, n: int, b: float) -> float:
    """sum_{i=m..n} i^b for whole numbers 1 <= m <= n: directly (math.fsum) up to
    DIRECT_SUM_MAX terms; beyond, the first terms directly and the tail by Euler-Maclaurin
    with three correction terms (error far below double precision for a tail from 1000)."""
    m, n = int(m), int(n)
    if n - m + 1 <= DIRECT_SUM_MAX:
        return math.fsum(np.arange(m, n + 1, dtype=float) ** b)
    head_end = m + _EM_HEAD - 1
    head = math.fsum(np.arange(m, head_end + 1, dtype=float) ** b)
    lo, hi = float(head_end + 1), float(n)
    integral = (math.log(hi / lo) if b == -1 else (hi ** (b + 1) - lo ** (b + 1)) / (b + 1))
    tail = integral + (lo**b + hi**b) / 2
    d1 = b * (hi ** (b - 1) - lo ** (b - 1))
    d3 = b * (b - 1) * (b - 2) * (hi ** (b - 3) - lo ** (b - 3))
    d5 = b * (b - 1) * (b - 2) * (b - 3) * (b - 4) * (hi ** (b - 5) - lo ** (b - 5))
    return head + tail + d1 / 12 - d3 / 720 + d5 / 30240


def _whole(v, what: str) -> int:
    if not float(v).is_integer() or v < 1:
        raise ModelError(f"{what} must be a whole number of at least 1; got {v!r}", DATA)
    return int(v)


@dataclass(frozen=True)
class LearningCurve:
    """A learning curve: first-unit cost ``t1``, ``slope`` as a fraction (0.85 for 85 %) and
    ``theory`` 'unit' or 'cumulative'. Fitted curves also carry their inference (nan/empty
    when built from known values).

    Examples
    --------
    >>> from xlbridge.engine import LearningCurve
    >>> c = LearningCurve(t1=100, slope=0.85, theory="unit")
    >>> print(f"{c.unit_cost(125):.5f} {c.cumulative_cost(125):.3f} {c.lot_cost(11, 20):.3f}")
    32.23647 5201.085 528.621
    """

    t1: float
    slope: float
    theory: str = "unit"
    t1_se: float = math.nan
    t1_ci: tuple[float, float] = (math.nan, math.nan)
    slope_se: float = math.nan
    slope_ci: tuple[float, float] = (math.nan, math.nan)
    level: float = math.nan
    n: int = 0
    data: str = ""  # "unit" or "lot" for fitted curves
    see_log: float = math.nan
    midpoints: tuple[float, ...] = field(default=())

    def __post_init__(self) -> None:
        if self.theory not in THEORIES:
            raise ModelError(f"theory must be 'unit' or 'cumulative'; got {self.theory!r}")
        for name in ("t1", "slope"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not v > 0 \
                    or not math.isfinite(v):
                raise ModelError(f"{name} must be a number above 0; got {v!r}")

    @property
    def b(self) -> float:
        """The exponent log2(slope)."""
        return math.log2(self.slope)

    def _total(self, n: int) -> float:
        """Cost of units 1..n (0 for n = 0)."""
        if n == 0:
            return 0.0
        if self.theory == "cumulative":
            return self.t1 * n ** (self.b + 1)
        return self.t1 * power_sum(1, n, self.b)

    @overflow_is_scale
    def unit_cost(self, n: float) -> float:
        """Cost of unit ``n`` (any number >= 1 under unit theory; whole under cumulative)."""
        if self.theory == "unit":
            if not n >= 1:
                raise ModelError(f"unit number must be at least 1; got {n!r}", DATA)
            return self.t1 * float(n) ** self.b
        k = _whole(n, "unit number")
        return self._total(k) - self._total(k - 1)

    @overflow_is_scale
    def lot_cost(self, m: int, n: int) -> float:
        """Cost of units ``m``..``n`` together (whole numbers, 1 <= m <= n)."""
        m, n = _whole(m, "first unit"), _whole(n, "last unit")
        if n < m:
            raise ModelError(f"last unit {n} is before first unit {m}", DATA)
        if self.theory == "unit":
            return self.t1 * power_sum(m, n, self.b)
        return self._total(n) - self._total(m - 1)

    def cumulative_cost(self, n: int) -> float:
        """Cost of units 1..``n``."""
        return self.lot_cost(1, n)

    def to_dict(self) -> dict:
        return {"theory": self.theory, "t1": self.t1, "slope": self.slope,
                "slope_percent": 100 * self.slope, "b": self.b, "t1_se": plain(self.t1_se),
                "t1_interval": [plain(v) for v in self.t1_ci], "slope_se": plain(self.slope_se),
                "slope_interval": [plain(v) for v in self.slope_ci],
                "level": plain(self.level), "n": self.n, "data": self.data,
                "log_stats": {"fit_space": "log", "see": plain(self.see_log)},
                "midpoints": list(self.midpoints)}


def _column(v, what: str) -> np.ndarray:
    try:
        a = np.asarray(v, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ModelError(f"{what} must hold numbers only", DATA) from None
    return a


def _positive(a: np.ndarray, what: str, rows: np.ndarray) -> None:
    """``rows``: the 1-based input row of each entry of ``a`` (blank rows already left out)."""
    bad = ~np.isfinite(a) | (a <= 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise ModelError(f"{what} must be numbers above 0; row {rows[i]} has {a[i]:g}", DATA,
                         row=int(rows[i]))


def _loglog(u: np.ndarray, c: np.ndarray):
    """ln c = c0 + b ln u by least squares: (c0, b), their covariance, residual SD."""
    z = np.column_stack([np.ones(len(u)), np.log(u)])
    coef, *_ = np.linalg.lstsq(z, np.log(c), rcond=None)
    e = np.log(c) - z @ coef
    s2 = math.fsum(e * e) / (len(u) - 2)
    return coef, s2 * np.linalg.inv(z.T @ z), math.sqrt(s2)


def _lot_midpoints(first, last, b: float) -> np.ndarray:
    if b == 0:
        return np.array([math.exp(math.fsum(np.log(np.arange(f, g + 1.0))) / (g - f + 1))
                         for f, g in zip(first, last)])
    return np.array([(power_sum(f, g, b) / (g - f + 1)) ** (1 / b)
                     for f, g in zip(first, last)])


@overflow_is_scale
def learning_curve(units, costs, theory: str = "unit", first=None, last=None,
                   level: float = 0.95) -> LearningCurve:
    """Fit a learning curve from unit data (``units``, ``costs``) or from lots (``first``,
    ``last`` unit of each lot and its total ``costs``; pass ``units=None``). Rows with a blank
    (NaN) are dropped. The fits and the lot-midpoint rule are in the module docstring.

    Examples
    --------
    Invented unit costs of units 1, 2, 4, 8 and 16:

    >>> from xlbridge.engine import learning_curve
    >>> lc = learning_curve([1, 2, 4, 8, 16], [100.0, 84.0, 73.0, 61.0, 52.0])
    >>> print(f"slope {lc.slope:.4f}, T1 {lc.t1:.2f}")
    slope 0.8498, T1 99.81
    """
    theory = str(theory).strip().lower()
    if theory not in THEORIES:
        raise ModelError(f"theory must be 'unit' or 'cumulative'; got {theory!r}")
    level = check_level(level)
    lots = first is not None or last is not None
    if lots and (first is None or last is None or units is not None):
        raise ModelError("give either units (unit data) or both first= and last= (lot data)")
    c = _column(costs, "costs")
    cols = [_column(first, "first units"), _column(last, "last units")] if lots \
        else [_column(units, "units")]
    if any(len(col) != len(c) for col in cols):
        raise ModelError("costs and unit numbers must have the same number of rows", DATA)
    keep = ~np.isnan(c)
    for col in cols:
        keep &= ~np.isnan(col)
    rows = np.flatnonzero(keep) + 1
    c = c[keep]
    cols = [col[keep] for col in cols]
    _positive(c, "costs", rows)
    for col, what in zip(cols, ("first unit", "last unit") if lots else ("unit",)):
        for r, v in zip(rows, col):
            if not (v >= 1 and float(v).is_integer()):
                raise ModelError(f"{what} must be a whole number of at least 1; row {r} has "
                                 f"{v:g}", DATA, row=int(r))
    if len(c) < 3:
        raise ModelError(f"a learning curve needs at least 3 rows with numbers; found {len(c)}",
                         ModelErrorKind.SHORTAGE)
    mids: tuple[float, ...] = ()
    if not lots:
        u = cols[0]
        if theory == "unit":
            coef, cov, s = _loglog(u, c)
        else:
            order = np.argsort(u, kind="stable")
            if not np.array_equal(u[order], np.arange(1, len(u) + 1)):
                raise ModelError("cumulative-average theory from unit data needs every unit "
                                 "from 1 up, each once; use lot data otherwise", DATA)
            cum = np.cumsum(c[order]) / u[order]
            coef, cov, s = _loglog(u[order], cum)
    else:
        f, g = cols[0].astype(np.int64), cols[1].astype(np.int64)
        back = g < f
        if back.any():
            i = int(np.argmax(back))
            raise ModelError(f"row {rows[i]}: last unit {g[i]} is before first unit {f[i]}", DATA,
                             row=int(rows[i]))
        if theory == "unit":
            avg = c / (g - f + 1)
            q = (f + g + 2 * np.sqrt(f * g)) / 4.0
            for _ in range(MIDPOINT_MAX_STEPS):
                coef, cov, s = _loglog(q, avg)
                q_new = _lot_midpoints(f, g, float(coef[1]))
                done = np.max(np.abs(q_new - q) / q) <= MIDPOINT_TOL
                q = q_new
                if done:
                    break
            else:
                raise ModelError("lot midpoints did not settle; check the lots' unit numbers",
                                 DATA)
            coef, cov, s = _loglog(q, avg)
            mids = tuple(float(v) for v in q)
        else:
            order = np.argsort(f, kind="stable")
            f, g, c = f[order], g[order], c[order]
            gaps = np.flatnonzero(f != np.concatenate([[1], g[:-1] + 1]))
            if gaps.size:
                r = rows[order][gaps[0]]
                raise ModelError(f"cumulative-average theory from lots needs lots covering "
                                 f"units 1, 2, ... in order with no gap or overlap; row {r} "
                                 f"starts at unit {f[gaps[0]]}", DATA, row=int(r))
            coef, cov, s = _loglog(g.astype(float), np.cumsum(c) / g)
    df = len(c) - 2
    tq = t_quantile(df, level)
    se0, se1 = math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    t1, b = math.exp(coef[0]), float(coef[1])
    return LearningCurve(
        t1=t1, slope=2.0**b, theory=theory, t1_se=t1 * se0,
        t1_ci=(math.exp(coef[0] - tq * se0), math.exp(coef[0] + tq * se0)),
        slope_se=2.0**b * math.log(2) * se1,
        slope_ci=(2.0 ** (b - tq * se1), 2.0 ** (b + tq * se1)),
        level=float(level), n=len(c), data="lot" if lots else "unit", see_log=s, midpoints=mids)
