"""Where the fitted curve turns (stationary points) and its slope, with delta-method errors.

Computed in the model's centered, power-of-two scaled basis (well conditioned), then mapped
to raw units. One predictor: every real stationary point of the fitted polynomial (for a
quadratic, x* = -b1 / (2 b2)). Several predictors, complete second-order model: canonical
analysis of y = b0 + x'g + x'Bx (stationary point -B^-1 g / 2, eigen-decomposition of B).
A surface is called a ``ridge`` when its smallest |eigenvalue| is below RIDGE_RATIO times
the largest (our documented cut-off): the stationary point is then poorly determined.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .dist import t_quantile
from .errors import ModelError, ModelErrorKind
from .result import FitResult, design_form, extrapolates, new_points

RIDGE_RATIO = 1e-3


@dataclass(frozen=True)
class StationaryPoint:
    """One stationary point: location with delta-method SE and interval, fitted value."""

    x: tuple[float, ...]
    se: tuple[float, ...]
    ci_lower: tuple[float, ...]
    ci_upper: tuple[float, ...]
    fitted: float
    fitted_ci_lower: float
    fitted_ci_upper: float
    kind: str  # minimum, maximum, saddle, ridge, inflection
    inside: bool  # inside the data region (ranges and, 2+ predictors, leverage)

    def to_dict(self) -> dict:
        def plain(v):
            return [float(a) if math.isfinite(a) else None for a in v]

        return {"x": plain(self.x), "se": plain(self.se), "ci_lower": plain(self.ci_lower),
                "ci_upper": plain(self.ci_upper), "fitted": self.fitted,
                "fitted_ci_lower": self.fitted_ci_lower, "fitted_ci_upper": self.fitted_ci_upper,
                "kind": self.kind, "inside": self.inside}


@dataclass(frozen=True)
class Optimum:
    predictors: tuple[str, ...]
    points: tuple[StationaryPoint, ...]
    eigenvalues: tuple[float, ...]  # of B in raw units (surfaces); () for one predictor
    eigenvectors: tuple[tuple[float, ...], ...]  # columns, one per eigenvalue
    level: float
    note: str

    def to_dict(self) -> dict:
        return {"predictors": list(self.predictors), "points": [p.to_dict() for p in self.points],
                "eigenvalues": list(self.eigenvalues),
                "eigenvectors": [list(v) for v in self.eigenvectors], "level": self.level,
                "note": self.note}


def _poly_coefs(res: FitResult) -> np.ndarray:
    """Scaled-basis coefficients indexed by power 0..d (zero where a power is absent)."""
    d = max(q[0] for q in res.spec.all_powers)
    c = np.zeros(d + 1)
    for q, b in zip(res.spec.all_powers, res.scaled_coef):
        c[q[0]] = b
    return c


def _index_of(res: FitResult):
    return {q: i for i, q in enumerate(res.spec.all_powers)}


def _fitted_interval(res: FitResult, x: np.ndarray, q: float):
    pr = res.predict(x.reshape(1, -1), res.level)
    return float(pr.fitted[0]), float(pr.ci_lower[0]), float(pr.ci_upper[0])


def optimum(res: FitResult) -> Optimum:
    """Stationary points of the fitted model (raw units), with delta-method intervals.

    Parameters
    ----------
    res : FitResult
        A polynomial fit of degree 2 or more, or a complete second-order model ('surface')
        with an intercept.

    Returns
    -------
    Optimum
        The stationary points (location, its standard error and interval, the fitted value
        and its interval, the kind: minimum, maximum, saddle, ridge or inflection, and
        whether it lies inside the data), with the eigen-decomposition for surfaces.

    Raises
    ------
    ModelError
        For a straight line, or a model that is not a polynomial or complete surface.

    Examples
    --------
    Invented output figures that rise and fall with temperature:

    >>> from xlbridge.engine import fit, optimum
    >>> temp = [10, 20, 30, 40, 50, 60, 70]
    >>> output = [52, 71, 83, 88, 86, 77, 60]
    >>> best = optimum(fit(output, temp, 2)).points[0]
    >>> print(best.kind, f"{best.x[0]:.2f}", f"{best.fitted:.2f}", best.inside)
    maximum 41.96 88.23 True
    """
    q = t_quantile(res.stats.df_resid, res.level)
    if res.spec.k == 1:
        return _poly_optimum(res, q)
    return _surface_optimum(res, q)


def _poly_optimum(res: FitResult, q: float) -> Optimum:
    if res.spec.kind not in ("polynomial",) and any(len(p) != 1 for p in res.spec.all_powers):
        raise ModelError("the optimum needs a polynomial or a complete second-order model",
                         ModelErrorKind.SPEC)
    c = _poly_coefs(res)
    d = len(c) - 1
    if d < 2:
        raise ModelError("a straight line has no stationary point; fit degree 2 or more",
                         ModelErrorKind.SPEC)
    idx = _index_of(res)
    dc = np.polynomial.polynomial.polyder(c)
    d2c = np.polynomial.polynomial.polyder(dc)
    roots = np.polynomial.polynomial.polyroots(dc)
    s, center = float(res.basis.scales[0]), float(res.basis.centers[0])
    points = []
    for r in roots:
        if abs(r.imag) > 1e-9 * max(1.0, abs(r.real)):
            continue
        t = float(r.real)
        curv = float(np.polynomial.polynomial.polyval(t, d2c))
        # implicit function theorem: f'(t*; b) = 0  =>  dt*/db_j = -(j t*^(j-1)) / f''(t*)
        grad = np.zeros(len(res.scaled_coef))
        for j in range(1, d + 1):
            if (j,) in idx:
                grad[idx[(j,)]] = -j * t ** (j - 1) / curv if curv != 0 else math.nan
        grad *= res.y_scale  # scaled_cov is in units of y_scale^2
        var_t = float(grad @ res.scaled_cov @ grad)
        xs = center + s * t
        se = s * math.sqrt(var_t) if var_t >= 0 else math.nan
        kind = "minimum" if curv > 0 else ("maximum" if curv < 0 else "inflection")
        fit_v, lo, hi = _fitted_interval(res, np.array([xs]), q)
        inside = bool(res.x_min[0] <= xs <= res.x_max[0])
        points.append(StationaryPoint((xs,), (se,), (xs - q * se,), (xs + q * se,), fit_v, lo,
                                      hi, kind, inside))
    points.sort(key=lambda p: p.x[0])
    note = "" if points else "the fitted curve has no real stationary point"
    if d == 2 and points:
        note = "quadratic: x* = -b1 / (2 b2); interval by the delta method"
    return Optimum(res.spec.predictors, tuple(points), (), (), res.level, note)


def _surface_parts(res: FitResult):
    """g and B of the quadratic part in scaled units, and their positions in the coefs."""
    k = res.spec.k
    idx = _index_of(res)
    zero = (0,) * k
    g_pos, b_pos = [], {}
    for j in range(k):
        e = tuple(1 if m == j else 0 for m in range(k))
        if e not in idx:
            raise ModelError("the optimum needs every linear term of the surface",
                             ModelErrorKind.SPEC)
        g_pos.append(idx[e])
    for i in range(k):
        for j in range(i, k):
            e = tuple((2 if m == i else 0) if i == j else (1 if m in (i, j) else 0)
                      for m in range(k))
            if e not in idx:
                raise ModelError("the optimum needs the complete second-order model "
                                 "(model 'surface')", ModelErrorKind.SPEC)
            b_pos[(i, j)] = idx[e]
    if any(sum(p) > 2 for p in res.spec.all_powers) or zero not in idx:
        raise ModelError("the optimum needs the complete second-order model (model 'surface') "
                         "with an intercept", ModelErrorKind.SPEC)
    return g_pos, b_pos


def _quad(b: np.ndarray, g_pos, b_pos, k: int):
    g = b[g_pos]
    B = np.zeros((k, k))
    for (i, j), pos in b_pos.items():
        if i == j:
            B[i, i] = b[pos]
        else:
            B[i, j] = B[j, i] = b[pos] / 2
    return g, B


def _surface_optimum(res: FitResult, q: float) -> Optimum:
    k = res.spec.k
    g_pos, b_pos = _surface_parts(res)
    b = res.scaled_coef
    g, B = _quad(b, g_pos, b_pos, k)
    try:
        ts = -0.5 * np.linalg.solve(B, g)
    except np.linalg.LinAlgError:
        raise ModelError("the quadratic part is singular: the surface has no single "
                         "stationary point", ModelErrorKind.DATA) from None
    # d ts / d theta = -B^-1 (dB ts + dg / 2): one column per coefficient
    jac = np.zeros((k, len(b)))
    binv = np.linalg.inv(B)
    for j, pos in enumerate(g_pos):
        dg = np.zeros(k)
        dg[j] = 1.0
        jac[:, pos] = -binv @ (dg / 2)
    for (i, j), pos in b_pos.items():
        dB = np.zeros((k, k))
        if i == j:
            dB[i, i] = 1.0
        else:
            dB[i, j] = dB[j, i] = 0.5
        jac[:, pos] = -binv @ (dB @ ts)
    jac = jac * res.y_scale  # scaled_cov is in units of y_scale^2
    cov_t = jac @ res.scaled_cov @ jac.T
    scales, centers = res.basis.scales, res.basis.centers
    xs = centers + scales * ts
    se = scales * np.sqrt(np.clip(np.diag(cov_t), 0, None))
    # raw-unit quadratic part: x = c + S t  =>  B_raw = S^-1 B S^-1
    braw = B / np.outer(scales, scales)
    lam, vec = np.linalg.eigh(braw)
    order = np.argsort(-np.abs(lam))
    lam, vec = lam[order], vec[:, order]
    if np.min(np.abs(lam)) < RIDGE_RATIO * np.max(np.abs(lam)):
        kind = "ridge"
    elif np.all(lam > 0):
        kind = "minimum"
    elif np.all(lam < 0):
        kind = "maximum"
    else:
        kind = "saddle"
    fit_v, lo, hi = _fitted_interval(res, xs, q)
    form = design_form(res, xs.reshape(1, -1))
    inside = not bool(extrapolates(res, xs.reshape(1, -1), form)[0])
    point = StationaryPoint(tuple(map(float, xs)), tuple(map(float, se)),
                            tuple(map(float, xs - q * se)), tuple(map(float, xs + q * se)),
                            fit_v, lo, hi, kind, inside)
    note = ("canonical analysis: stationary point -B^-1 g / 2; eigenvalues of B (raw units) "
            f"all positive: minimum, all negative: maximum, mixed: saddle; ridge when the "
            f"smallest |eigenvalue| < {RIDGE_RATIO:g} x the largest")
    return Optimum(res.spec.predictors, (point,), tuple(map(float, lam)),
                   tuple(tuple(map(float, vec[:, i])) for i in range(k)), res.level, note)


@dataclass(frozen=True)
class Slopes:
    """dy/dx_j at each point (rows) for each predictor j (columns), with SEs and intervals."""

    predictors: tuple[str, ...]
    at: np.ndarray
    slope: np.ndarray
    se: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    extrapolated: np.ndarray
    level: float

    def to_dict(self) -> dict:
        def plain(a):
            return [[float(v) if math.isfinite(v) else None for v in row] for row in a.tolist()]

        return {"predictors": list(self.predictors), "at": plain(self.at),
                "slope": plain(self.slope), "se": plain(self.se),
                "ci_lower": plain(self.ci_lower), "ci_upper": plain(self.ci_upper),
                "extrapolated": self.extrapolated.tolist(), "level": self.level}


def slopes(res: FitResult, at_x, level: float | None = None) -> Slopes:
    """Marginal effect dy/dx_j of the fitted mean at the given points (delta method). For a
    log fit the slope is that of the back-transformed mean exp(eta) * smearing.

    Parameters
    ----------
    res : FitResult
        A fit from ``fit``.
    at_x : array_like, shape (m,) or (m, k)
        The points: m values of one predictor, or m rows of k predictors.
    level : float, optional
        Confidence level of the intervals (default: the fit's level).

    Returns
    -------
    Slopes
        Arrays (m, k): the slope with respect to each predictor at each point, its
        standard error and interval, and whether each point extrapolates.

    Examples
    --------
    Invented output figures that rise and fall with temperature:

    >>> from xlbridge.engine import fit, slopes
    >>> res = fit([52, 71, 83, 88, 86, 77, 60], [10, 20, 30, 40, 50, 60, 70], 2)
    >>> s = slopes(res, [20, 60])
    >>> print(" ".join(f"{v:.3f}" for v in s.slope[:, 0]))
    1.563 -1.285
    """
    level = res.level if level is None else level
    x0 = new_points(res, at_x)
    n0, k = x0.shape
    t0 = (x0 - res.basis.centers) / res.basis.scales
    powers = res.spec.all_powers
    b, cov = res.scaled_coef, res.scaled_cov
    q = t_quantile(res.stats.df_resid, level)
    slope = np.zeros((n0, k))
    se = np.zeros((n0, k))
    design = res.basis.design(x0)
    eta = design @ b
    for j in range(k):
        # d/dt_j of each column t^e: e_j t^(e - u_j); then divide by s_j for raw units
        dcols = np.zeros((n0, len(powers)))
        for c, e in enumerate(powers):
            if e[j]:
                low = tuple(v - 1 if m == j else v for m, v in enumerate(e))
                dcols[:, c] = e[j] * np.prod(t0 ** np.array(low), axis=1)
        dcols /= res.basis.scales[j]
        grad = dcols  # gradient of d eta / dx_j with respect to b, per point
        val = dcols @ b
        if res.remedy.log:
            mean = np.exp(eta) * res.remedy.smearing
            grad = mean[:, None] * (design * val[:, None] + dcols)
            val = mean * val
        slope[:, j] = val
        se[:, j] = np.sqrt(np.einsum("ij,jk,ik->i", grad, cov, grad)) * res.y_scale
    form = design_form(res, x0)
    return Slopes(res.spec.predictors, x0, slope, se, slope - q * se, slope + q * se,
                  extrapolates(res, x0, form), level)
