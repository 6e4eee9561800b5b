"""Shapiro-Wilk W and its p-value by Royston's approximation (Statistics and Computing 2,
1992, 117-119; Applied Statistics 44, 1995, 547-551, algorithm AS R94), in numpy.

As in the published algorithm, the expected normal order statistics are approximated by
m_i = PPND((i - 3/8) / (n + 1/4)) with PPND the normal quantile of AS 111 (Beasley and
Springer, about 7 digits): the coefficients a_i, and so W, are those of the published method
to rounding, whichever program computes them with it. The p-value's normal tail is
math.erfc to full precision (the published code's AS 66 tail is good to about 1e-9).
"""

from __future__ import annotations

import math

import numpy as np

from .dist import normal_sf

# Royston's polynomial coefficients (constant term first), as published
_C1 = (0.0, 0.221157, -0.147981, -2.07119, 4.434685, -2.706056)  # a_n in 1/sqrt(n)
_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)  # a_(n-1) in 1/sqrt(n)
_C3 = (0.544, -0.39978, 0.025054, -6.714e-4)  # mean, n <= 11 (in n)
_C4 = (1.3822, -0.77857, 0.062767, -0.0020322)  # log sd, n <= 11
_C5 = (-1.5861, -0.31082, -0.083751, 0.0038915)  # mean, n >= 12 (in ln n)
_C6 = (-0.4803, -0.082676, 0.0030302)  # log sd, n >= 12
_G = (-2.273, 0.459)  # upper bound of ln(1 - W) for n <= 11
_SMALL = 1e-19  # the published algorithm's smallest p-value and smallest range

# AS 111 (PPND): normal quantile, |p - 1/2| <= 0.42 rational in q^2, beyond in sqrt(-ln p)
_PA = (2.50662823884, -18.61500062529, 41.39119773534, -25.44106049637)
_PB = (1.0, -8.47351093090, 23.08336743743, -21.06224101826, 3.13082909833)
_PC = (-2.78718931138, -2.29796479134, 4.85014127135, 2.32121276858)
_PD = (1.0, 3.54388924762, 1.63706781897)


def _poly(c: tuple[float, ...], x: float | np.ndarray) -> float | np.ndarray:
    """c[0] + c[1] x + c[2] x^2 + ..., by Horner's rule."""
    out = c[-1]
    for v in reversed(c[:-1]):
        out = out * x + v
    return out


def _ppnd_as111(p: np.ndarray) -> np.ndarray:
    """AS 111's normal quantile for 0 < p < 1/2 (the lower half is all W needs)."""
    q = p - 0.5
    r = q * q
    central = q * _poly(_PA, r) / _poly(_PB, r)
    s = np.sqrt(-np.log(p))
    tail = -_poly(_PC, s) / _poly(_PD, s)
    return np.where(np.abs(q) <= 0.42, central, tail)


def _coefficients(n: int) -> np.ndarray:
    """The published a_1..a_(n//2) (positive; the upper half of the sample takes +a, the
    lower half -a in reverse)."""
    if n == 3:
        return np.array([math.sqrt(0.5)])
    m = _ppnd_as111((np.arange(1, n // 2 + 1) - 0.375) / (n + 0.25))
    summ2 = 2.0 * float(m @ m)
    ssumm2 = math.sqrt(summ2)
    rsn = 1.0 / math.sqrt(n)
    a1 = _poly(_C1, rsn) - m[0] / ssumm2
    if n > 5:
        a2 = -m[1] / ssumm2 + _poly(_C2, rsn)
        fac = math.sqrt((summ2 - 2.0 * m[0] ** 2 - 2.0 * m[1] ** 2)
                        / (1.0 - 2.0 * a1 ** 2 - 2.0 * a2 ** 2))
        a = -m / fac
        a[:2] = a1, a2
    else:
        fac = math.sqrt((summ2 - 2.0 * m[0] ** 2) / (1.0 - 2.0 * a1 ** 2))
        a = -m / fac
        a[0] = a1
    return a


def shapiro_wilk(x: np.ndarray) -> tuple[float, float]:
    """(W, p) of the Shapiro-Wilk test of normality for a sample of n >= 3 values.

    The p-value approximation is the published one for 3 <= n <= 5000 (exact for n = 3);
    above 5,000 rows W is still exact but the p-value is not validated. A sample whose
    range is below 1e-19 gives (1, 1), as the published algorithm does.
    """
    y = np.sort(np.asarray(x, dtype=float).ravel())
    n = y.size
    if n < 3:
        raise ValueError("Shapiro-Wilk needs at least 3 values")
    y = y - y[n // 2]  # W ignores location; the middle value keeps the numbers small
    rng = y[-1] - y[0]
    if not rng >= _SMALL:
        return 1.0, 1.0
    half = _coefficients(n)
    coef = np.zeros(n)
    coef[: n // 2] = -half
    coef[n - n // 2:] = half[::-1]
    xs = y / rng
    asa = coef - coef.mean()
    xsx = xs - xs.mean()
    ssa, ssx, sax = float(asa @ asa), float(xsx @ xsx), float(asa @ xsx)
    root = math.sqrt(ssa * ssx)
    w1 = (root - sax) * (root + sax) / (ssa * ssx)  # 1 - W without cancellation near W = 1
    w = 1.0 - w1
    if n == 3:  # exact: p = 1 - (6/pi) acos(sqrt(W)), W >= 3/4
        if w < 0.75:
            return 0.75, 0.0
        return w, 1.0 - 6.0 / math.pi * math.acos(math.sqrt(w))
    ln_w1 = math.log(w1)
    if n <= 11:
        gamma = _poly(_G, float(n))
        if ln_w1 >= gamma:
            return w, _SMALL
        ln_w1 = -math.log(gamma - ln_w1)
        mean, sd = _poly(_C3, float(n)), math.exp(_poly(_C4, float(n)))
    else:
        ln_n = math.log(n)
        mean, sd = _poly(_C5, ln_n), math.exp(_poly(_C6, ln_n))
    return w, float(normal_sf((ln_w1 - mean) / sd))
