"""Tails and quantiles of Student's t, F, chi-square and the normal distribution, in numpy
and the math module (a fit imports no scipy: scipy.special alone costs ~0.2 s to import).

Methods (published; the accuracy is checked against scipy.special in tests/test_dist.py):
- regularized incomplete beta I_x(a, b): the continued fraction of DiDonato and Morris
  (ACM TOMS 18, 1992, 360-373, their BFRAC form), written in lambda = a - (a + b) x so that
  no coefficient cancels when a or b is large, evaluated by the modified Lentz method, with
  the symmetry I_x(a, b) = 1 - I_{1-x}(b, a) so that the fraction always computes the tail
  on x's side of the mean a/(a+b) (the smaller one, up to skew) and the other follows by
  one subtraction;
- its prefactor x^a y^b / B(a, b) from Stirling's formula with its remainder mu(z) (series
  for z >= 10, math.lgamma below) and the deficits e - ln(1 + e) of x and y from their
  means, as a short series where cancellation would cost digits; so the prefactor keeps
  full relative accuracy at any a, b (lgamma differences would lose ~1e-8 at df = 1e7);
- regularized incomplete gamma: series below x = a + 1, Legendre's continued fraction above
  (modified Lentz), with the same Stirling prefactor;
- normal tail: math.erfc; normal quantile: Wichura's AS 241 (PPND16);
- Student's t quantile: Newton's method in ln t on the log of the two-sided tail (or of the
  central probability near 0), whose derivative is the beta prefactor itself, started from
  Cornish-Fisher or the tail's power law; it stops once a step moves t by < 1e-11
  relative, leaving ~1e-22 by the quadratic convergence.
Where a result is e^L with |L| large (deep tails), its relative error is about |L| * 2e-16:
~1.5e-13 at 1e-300.
"""

from __future__ import annotations

import math

import numpy as np

_LN_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
_TINY = 1e-300  # modified Lentz: stands in for a zero denominator
_TOL = 4.5e-16  # convergence of a continued fraction's factors (about 2 ulp of 1)
_MAX_TERMS = 100_000  # a fraction needs O(sqrt(max(a, b))) terms; far more is a failure
_SCALAR_LOOP = 16  # arrays up to this size loop the pure-Python fraction (numpy per-call cost)

# Stirling series of mu(z) = ln Gamma(z) - ((z - 1/2) ln z - z + ln sqrt(2 pi)):
# B_2k / (2k (2k - 1) z^(2k-1)); eight terms reach 2e-18 at z = 10
_STIRLING = (1 / 12, -1 / 360, 1 / 1260, -1 / 1680, 1 / 1188, -691 / 360360, 1 / 156,
             -3617 / 122400)


def _stirling_rest(z: float) -> float:
    """mu(z), the remainder of Stirling's formula for ln Gamma(z), to ~1e-15 absolute."""
    if z < 10.0:
        return math.lgamma(z) - ((z - 0.5) * math.log(z) - z + _LN_SQRT_2PI)
    r = 1.0 / (z * z)
    s = 0.0
    for c in reversed(_STIRLING):
        s = s * r + c
    return s / z


_ATANH_SERIES = tuple(1.0 / (2 * k + 1) for k in range(18, 0, -1))  # 1/37, ..., 1/3


def _deficit(e: float, ratio_log: float) -> float:
    """e - ln(1 + e) >= 0; ``ratio_log`` = ln(1 + e) is used only for e < -1/2 (where 1 + e
    may carry digits e cannot). For -1/2 <= e <= 1 a series in r = e / (2 + e), |r| <= 1/3:
    e - ln(1 + e) = 2r^2 / (1 - r) - 2r^3 (1/3 + r^2/5 + r^4/7 + ...), 18 terms to 1e-18."""
    if -0.5 <= e <= 1.0:
        r = e / (2.0 + e)
        r2 = r * r
        s = 0.0
        for c in _ATANH_SERIES:
            s = s * r2 + c
        return 2.0 * r2 / (1.0 - r) - 2.0 * r * r2 * s
    return e - ratio_log if e < -0.5 else e - math.log1p(e)


def _deficit_array(e: np.ndarray, ratio_log: np.ndarray) -> np.ndarray:
    """``_deficit`` elementwise."""
    with np.errstate(divide="ignore", invalid="ignore"):
        r = e / (2.0 + e)
        r2 = r * r
        s = np.zeros_like(r2)
        for c in _ATANH_SERIES:
            s = s * r2 + c
        series = 2.0 * r2 / (1.0 - r) - 2.0 * r * r2 * s
        direct = np.where(e < -0.5, e - ratio_log, e - np.log1p(np.maximum(e, -0.5)))
    return np.where((e >= -0.5) & (e <= 1.0), series, direct)


def _beta_constant(a: float, b: float) -> float:
    """ln(x0^a y0^b / B(a, b)) at the mean x0 = a/(a+b), y0 = b/(a+b): by Stirling's formula
    ln sqrt(ab / (2 pi (a+b))) + mu(a+b) - mu(a) - mu(b)."""
    s = a + b
    return (0.5 * math.log(a * b / s) - _LN_SQRT_2PI + _stirling_rest(s) - _stirling_rest(a)
            - _stirling_rest(b))


def _log_or_inf(v: float) -> float:
    return math.log(v) if v > 0 else -math.inf


def _beta_scalar(a: float, b: float, x: float, y: float, lam: float
                 ) -> tuple[float, float, float]:
    """(I_x(a, b), 1 - I_x(a, b), ln(x^a y^b / B(a, b))) for y = 1 - x and
    lam = a - (a + b) x = a y - b x, given by the caller as accurately as it can (see
    ``beta_tails``). With x0 = a/(a+b): x/x0 = 1 - lam/a,
    y/y0 = 1 + lam/b, so the prefactor is e^(const - a D(-lam/a) - b D(lam/b)), D = _deficit.
    The fraction computes the tail on x's side of the mean; the other is 1 minus it."""
    if math.isnan(lam):
        return math.nan, math.nan, math.nan
    s = a + b
    log_factor = (_beta_constant(a, b) - a * _deficit(-lam / a, _log_or_inf(x) - math.log(a / s))
                  - b * _deficit(lam / b, _log_or_inf(y) - math.log(b / s)))
    if lam >= 0:
        small = _fraction(a, b, x, y, lam)
    else:  # 1 - I_x(a, b) = I_y(b, a), whose lam is b x - a y = -lam
        small = _fraction(b, a, y, x, -lam)
    small *= math.exp(log_factor) if log_factor > -745.0 else 0.0
    return (small, 1.0 - small, log_factor) if lam >= 0 else (1.0 - small, small, log_factor)


def _fraction(a: float, b: float, x: float, y: float, lam: float) -> float:
    """The continued fraction of DiDonato and Morris, I_x(a, b) = prefactor / f, for lam >= 0
    (x at or below the mean), by the modified Lentz method."""
    c = 1.0 + lam
    c0, c1 = b / a, 1.0 + 1.0 / a
    f = c / c1
    cc, d = f, 0.0
    p, s = 1.0, a + 1.0
    for n in range(1, _MAX_TERMS):
        t = n / a
        w = n * (b - n) * x
        e = a / s
        alpha = (p * (p + c0) * e * e) * (w * x)
        beta = n + w / s + (1.0 + t) / (c1 + t + t) * (c + n * (1.0 + y))
        p, s = 1.0 + t, s + 2.0
        d = beta + alpha * d
        d = 1.0 / (d if d != 0.0 else _TINY)
        cc = beta + alpha / cc
        if cc == 0.0:
            cc = _TINY
        delta = cc * d
        f *= delta
        if abs(delta - 1.0) <= _TOL:
            return 1.0 / f
        if delta != delta:
            break
    return math.nan


def _fraction_array(a: float, b: float, x: np.ndarray, y: np.ndarray,
                    lam: np.ndarray) -> np.ndarray:
    """``_fraction`` elementwise (1-D arrays). Converged entries are set aside in batches
    (meanwhile they keep iterating, their factors within 2 ulp of 1)."""
    out = np.full(x.size, np.nan)
    idx = np.arange(x.size)
    c = 1.0 + lam
    c0, c1 = b / a, 1.0 + 1.0 / a
    f = c / c1
    cc, d = f.copy(), np.zeros_like(f)
    p, s = 1.0, a + 1.0
    done = np.zeros(x.size, dtype=bool)
    for n in range(1, _MAX_TERMS):
        t = n / a
        w = (n * (b - n)) * x
        e = a / s
        alpha = (p * (p + c0) * e * e) * (w * x)
        beta = n + w / s + (1.0 + t) / (c1 + t + t) * (c + n * (1.0 + y))
        p, s = 1.0 + t, s + 2.0
        d = beta + alpha * d
        d = 1.0 / np.where(d == 0.0, _TINY, d)
        cc = beta + alpha / cc
        cc = np.where(cc == 0.0, _TINY, cc)
        delta = cc * d
        f *= delta
        done |= (np.abs(delta - 1.0) <= _TOL) | np.isnan(delta)
        n_done = int(np.count_nonzero(done))
        if n_done == idx.size or n_done * 4 > idx.size:
            out[idx[done]] = 1.0 / f[done]
            if n_done == idx.size:
                break
            keep = ~done
            idx, x, y, c, f, cc, d = (v[keep] for v in (idx, x, y, c, f, cc, d))
            done = done[keep]
    return out


def _beta_array(a: float, b: float, x: np.ndarray, y: np.ndarray, lam: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``_beta_scalar`` over 1-D arrays."""
    s = a + b
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        log_factor = (_beta_constant(a, b)
                      - a * _deficit_array(-lam / a, np.log(x) - math.log(a / s))
                      - b * _deficit_array(lam / b, np.log(y) - math.log(b / s)))
        lower = lam >= 0
        small = np.full(x.shape, np.nan)
        if lower.any():
            small[lower] = _fraction_array(a, b, x[lower], y[lower], lam[lower])
        upper = lam < 0
        if upper.any():
            small[upper] = _fraction_array(b, a, y[upper], x[upper], -lam[upper])
        small *= np.exp(log_factor)
    return np.where(lower, small, 1.0 - small), np.where(lower, 1.0 - small, small), log_factor


def _beta_parts(a: float, b: float, x: np.ndarray, y: np.ndarray, lam: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``_beta_scalar`` over arrays of any shape (small ones element by element: numpy's
    per-call cost would exceed the arithmetic)."""
    x, y, lam = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (x, y, lam)))
    if x.size <= _SCALAR_LOOP:
        parts = [_beta_scalar(a, b, *v) for v in
                 zip(x.ravel().tolist(), y.ravel().tolist(), lam.ravel().tolist())]
        return tuple(np.array([q[k] for q in parts]).reshape(x.shape) for k in range(3))
    return tuple(v.reshape(x.shape) for v in _beta_array(a, b, x.ravel(), y.ravel(), lam.ravel()))


def beta_tails(a: float, b: float, x: np.ndarray, y: np.ndarray,
               lam: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(I_x(a, b), 1 - I_x(a, b)), the regularized incomplete beta function and its
    complement, for scalars a, b > 0 and x in [0, 1] with y = 1 - x (both given, so either
    may carry digits the other cannot). ``lam`` = a y - b x, when the caller can form it
    more accurately than from rounded x and y (at large a and b that rounding costs digits:
    the prefactor's logarithm moves by about lam^2 (a + b) / (a b) times lam's relative
    error)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    lam = a * y - b * x if lam is None else lam
    i_x, i_c, _ = _beta_parts(a, b, x, y, lam)
    return i_x, i_c


def _gamma_log_factor(a: float, x: float) -> float:
    """ln(x^a e^-x / Gamma(a)) = ln sqrt(a / (2 pi)) - a (e - ln(1 + e)) - mu(a), e = x/a - 1."""
    e = (x - a) / a
    dev = _deficit(e, math.log(x) - math.log(a))
    return 0.5 * math.log(a) - _LN_SQRT_2PI - a * dev - _stirling_rest(a)


def gamma_upper(a: float, x: float) -> float:
    """Q(a, x) = Gamma(a, x) / Gamma(a), the regularized upper incomplete gamma function."""
    if math.isnan(a) or math.isnan(x) or a <= 0:
        return math.nan
    if x <= 0:
        return 1.0
    if math.isinf(x):
        return 0.0
    factor = math.exp(_gamma_log_factor(a, x))
    if x < a + 1.0:  # series: P(a, x) = factor / a * sum x^n / ((a+1)...(a+n))
        term = total = 1.0 / a
        ap = a
        for _ in range(_MAX_TERMS):
            ap += 1.0
            term *= x / ap
            total += term
            if term <= total * 1e-17:
                return 1.0 - factor * total
        return math.nan
    # Legendre's fraction Q = factor / (x+1-a - 1(1-a) / (x+3-a - 2(2-a) / ...))
    bn = (x - a) + 1.0
    cc, d = 1.0 / _TINY, 1.0 / bn
    h = d
    for i in range(1, _MAX_TERMS):
        an = -i * (i - a)
        bn += 2.0
        d = an * d + bn
        d = 1.0 / (d if d != 0.0 else _TINY)
        cc = bn + an / cc
        if cc == 0.0:
            cc = _TINY
        delta = d * cc
        h *= delta
        if abs(delta - 1.0) <= _TOL:
            return factor * h
    return math.nan


def chi2_sf(x: float, df: float) -> float:
    """Upper tail of the chi-square distribution with ``df`` degrees of freedom."""
    if not df > 0 or math.isnan(x):
        return math.nan
    return gamma_upper(0.5 * df, 0.5 * x)


def normal_sf(z: np.ndarray | float) -> np.ndarray | float:
    """Upper tail of the standard normal distribution."""
    if isinstance(z, float | int):
        return 0.5 * math.erfc(z * 0.7071067811865476)
    z = np.asarray(z, dtype=float)
    return np.vectorize(lambda v: 0.5 * math.erfc(v * 0.7071067811865476), otypes=[float])(z)


def normal_quantile(p: float) -> float:
    """Standard normal quantile: Wichura's AS 241 (PPND16), relative error ~1e-16."""
    if not 0.0 < p < 1.0:
        return -math.inf if p == 0.0 else (math.inf if p == 1.0 else math.nan)
    q = p - 0.5
    if abs(q) <= 0.425:
        r = 0.180625 - q * q
        num = (((((((2.5090809287301226727e3 * r + 3.3430575583588128105e4) * r
                    + 6.7265770927008700853e4) * r + 4.5921953931549871457e4) * r
                  + 1.3731693765509461125e4) * r + 1.9715909503065514427e3) * r
                + 1.3314166789178437745e2) * r + 3.3871328727963666080e0)
        den = (((((((5.2264952788528545610e3 * r + 2.8729085735721942674e4) * r
                    + 3.9307895800092710610e4) * r + 2.1213794301586595867e4) * r
                  + 5.3941960214247511077e3) * r + 6.8718700749205790830e2) * r
                + 4.2313330701600911252e1) * r + 1.0)
        return q * num / den
    r = math.sqrt(-math.log(p if q < 0 else 1.0 - p))
    if r <= 5.0:
        r -= 1.6
        num = (((((((7.74545014278341407640e-4 * r + 2.27238449892691845833e-2) * r
                    + 2.41780725177450611770e-1) * r + 1.27045825245236838258e0) * r
                  + 3.64784832476320460504e0) * r + 5.76949722146069140550e0) * r
                + 4.63033784615654529590e0) * r + 1.42343711074968357734e0)
        den = (((((((1.05075007164441684324e-9 * r + 5.47593808499534494600e-4) * r
                    + 1.51986665636164571966e-2) * r + 1.48103976427480074590e-1) * r
                  + 6.89767334985100004550e-1) * r + 1.67638483018380384940e0) * r
                + 2.05319162663775882187e0) * r + 1.0)
    else:
        r -= 5.0
        num = (((((((2.01033439929228813265e-7 * r + 2.71155556874348757815e-5) * r
                    + 1.24266094738807843860e-3) * r + 2.65321895265761230930e-2) * r
                  + 2.96560571828504891230e-1) * r + 1.78482653991729133580e0) * r
                + 5.46378491116411436990e0) * r + 6.65790464350110377720e0)
        den = (((((((2.04426310338993978564e-15 * r + 1.42151175831644588870e-7) * r
                    + 1.84631831751005468180e-5) * r + 7.86869131145613259100e-4) * r
                  + 1.48753612908506148525e-2) * r + 1.36929880922735805310e-1) * r
                + 5.99832206555887937690e-1) * r + 1.0)
    return num / den if q > 0 else -num / den


def _t_arguments(at: float, df: float) -> tuple[float, float, float]:
    """(x, y, lam) of P(|T| > at) = I_x(df/2, 1/2), x = df / (df + at^2), for at >= 0:
    lam = df (at^2 - 1) / (2 (df + at^2)) is formed from at itself (so it keeps its digits
    at huge df), and at^2 is not formed above at = 1 (no overflow)."""
    if at >= 1.0:
        inv = 1.0 / at
        r = df * inv * inv  # df / at^2
        return r / (1.0 + r), 1.0 / (1.0 + r), 0.5 * df * (1.0 - inv * inv) / (1.0 + r)
    t2 = at * at
    den = df + t2
    return df / den, t2 / den, -0.5 * df * (1.0 - t2) / den


_T_FAR = 1e150  # beyond, df / t^2 underflows: the tail's leading term is exact to ~df/t^2


def _t_far_tail(at: float, df: float) -> float:
    """P(|T| > at) = x^a / (a B(a, 1/2)) (1 + O(x)), a = df/2, x = df / t^2 < 1e-300 df."""
    if math.isinf(at):
        return 0.0
    a = 0.5 * df
    log_b = math.lgamma(a) + math.lgamma(0.5) - math.lgamma(a + 0.5)
    return math.exp(a * (math.log(df) - 2.0 * math.log(at)) - math.log(a) - log_b)


def t_pvalue(t: np.ndarray, df: float) -> np.ndarray:
    """Two-sided p-value of t ratios, P(|T| > |t|) with ``df`` > 0 degrees of freedom."""
    t = np.asarray(t, dtype=float)
    if not df > 0:
        return np.full(t.shape, np.nan)
    if math.isinf(df):
        return 2.0 * normal_sf(np.abs(t))
    if t.size <= _SCALAR_LOOP:
        return np.array([_t_far_tail(abs(v), df) if abs(v) > _T_FAR else
                         _beta_scalar(0.5 * df, 0.5, *_t_arguments(abs(v), df))[0]
                         for v in t.ravel().tolist()]).reshape(t.shape)
    at = np.abs(t.ravel())
    far = at > _T_FAR
    if far.any():
        out = np.empty(at.shape)
        out[far] = [_t_far_tail(v, df) for v in at[far].tolist()]
        out[~far] = t_pvalue(at[~far], df) if (~far).any() else []
        return out.reshape(t.shape)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        big = at >= 1.0
        inv = np.where(big, 1.0 / at, 0.0)
        r = df * inv * inv
        t2 = np.where(big, 1.0, at * at)
        den = df + t2
        x = np.where(big, r / (1.0 + r), df / den)
        y = np.where(big, 1.0 / (1.0 + r), t2 / den)
        lam = np.where(big, 0.5 * df * (1.0 - inv * inv) / (1.0 + r), -0.5 * df * (1.0 - t2) / den)
    return _beta_array(0.5 * df, 0.5, x, y, lam)[0].reshape(t.shape)


def t_ppf(p: float, df: float) -> float:
    """Quantile of Student's t: the t with P(T <= t) = p."""
    if not df > 0 or not 0.0 <= p <= 1.0:
        return math.nan
    if p == 0.5:
        return 0.0
    # the two-sided tail and the central probability, each exact in binary floating point
    # (Sterbenz) where it is used
    alpha, central = (2.0 * (1.0 - p), 2.0 * p - 1.0) if p > 0.5 else (2.0 * p, 1.0 - 2.0 * p)
    t = _t_two_sided(alpha, central, df)
    return t if p > 0.5 else -t


def t_quantile(df: float, level: float) -> float:
    """Two-sided critical value of Student's t for a ``level`` interval: P(|T| > q) = 1 - level."""
    if not df > 0 or not 0.0 <= level <= 1.0:
        return math.nan
    return _t_two_sided(1.0 - level, level, df)


def _t_two_sided(alpha: float, central: float, df: float) -> float:
    """The t > 0 with P(|T| > t) = alpha = 1 - central (whichever is below 1/2 is used)."""
    if alpha == 0.0:
        return math.inf
    if central == 0.0:
        return 0.0
    tail = alpha <= 0.5
    z = -normal_quantile(0.5 * alpha) if tail else normal_quantile(0.5 + 0.5 * central)
    if math.isinf(df):
        return z
    z2 = z * z  # Cornish-Fisher: t = z + (z^3 + z) / (4 df) + (5z^5 + 16z^3 + 3z) / (96 df^2)
    t = z * (1.0 + (z2 + 1.0) / (4.0 * df) + ((5.0 * z2 + 16.0) * z2 + 3.0) / (96.0 * df * df))
    a = 0.5 * df
    log_b = math.lgamma(a) + math.lgamma(0.5) - math.lgamma(a + 0.5)  # ln B(a, 1/2), a guess
    if tail:  # the tail's leading term alpha = x^a / (a B(a, 1/2)), x = df / (df + t^2)
        x = math.exp((math.log(alpha * a) + log_b) / a)
        if 0.0 < x < 1.0:
            t = max(t, math.sqrt(df * (1.0 - x) / x))
    else:  # near 0: central = t * 2 / (sqrt(df) B(a, 1/2))
        t = min(t, 0.5 * central * math.sqrt(df) * math.exp(log_b))
    target = math.log(alpha if tail else central)
    if tail:  # beyond _T_FAR the leading term is the tail to ~1e-300: solve it directly
        u_far = (a * math.log(df) - math.log(a) - log_b - target) / (2.0 * a)
        if u_far > math.log(_T_FAR):
            return math.exp(u_far) if u_far < 709.0 else math.inf
    u = math.log(t)
    for _ in range(100):
        s2, c2, log_factor = _beta_scalar(a, 0.5, *_t_arguments(math.exp(u), df))
        prob = s2 if tail else c2
        # d ln(prob) / d ln t = -+ 2 * prefactor / prob: a Newton step in ln t
        step = (math.log(prob) - target) * prob / (2.0 * math.exp(log_factor))
        u += step if tail else -step
        if abs(step) <= 1e-11:
            return math.exp(u)
    return math.nan


def f_pvalue(f: float, df1: float, df2: float) -> float:
    """Upper tail of the F distribution with (df1, df2) degrees of freedom."""
    if not df1 > 0 or not df2 > 0 or math.isnan(f):
        return math.nan
    if math.isinf(f):
        return 0.0
    if f <= 0:
        return 1.0
    r = df1 * f / df2
    # F > f  <=>  X < y with X ~ Beta(df2/2, df1/2), y = 1 / (1 + r); lam formed from f
    lam = 0.5 * df1 * (f - 1.0) / (1.0 + r)
    return _beta_scalar(0.5 * df2, 0.5 * df1, 1.0 / (1.0 + r), r / (1.0 + r), lam)[0]
