"""Standard errors, tests, intervals, VIFs and fit statistics from a solved ``Core``."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .dist import f_pvalue, t_pvalue, t_quantile
from .result import CenteredForm, Coefficient, FitResult, FitStats, Note, NoteKind, Remedy
from .solve import Core, choose_basis, monomials, power_of_two_scale
from .terms import ModelSpec, term_label


def vifs(inv_diag: np.ndarray, ss: np.ndarray) -> np.ndarray:
    """VIF_j = [(X'WX)^-1]_jj * SS_j, which equals 1 / (1 - R^2_j) of column j on the others
    (SS_j and R^2_j about the mean when the model has an intercept, about zero otherwise)."""
    return np.asarray(inv_diag) * np.asarray(ss)


def _spread_gram(gram: np.ndarray, intercept: bool) -> np.ndarray:
    """Cross-products of the columns about their weighted means (intercept column first)."""
    if not intercept:
        return gram
    return gram - np.outer(gram[0], gram[0]) / gram[0, 0]


def _centered_model_vifs(x: np.ndarray, w, spec: ModelSpec) -> np.ndarray:
    """VIFs of the same terms built from predictors centered at their means, for models whose
    own basis could not be centered (missing lower-order terms)."""
    centers = np.average(x, axis=0, weights=w)
    scales = choose_basis(x, w, spec).scales
    t = monomials((x - centers) / scales, spec.all_powers)
    a = t if w is None else t * np.sqrt(w)[:, None]
    norms = np.linalg.norm(a, axis=0)
    _, r = np.linalg.qr(a / norms)
    rinv = np.linalg.inv(r)
    inv_diag = np.diag(rinv @ rinv.T) / norms**2
    gram = (r.T @ r) * np.outer(norms, norms)
    return vifs(inv_diag, np.diag(_spread_gram(gram, spec.intercept)))


def build(
    spec: ModelSpec,
    core: Core,
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray | None,
    level: float,
    used: np.ndarray,
    n_dropped: int,
    response: str,
    remedy: Remedy | None = None,
) -> FitResult:
    """The ``FitResult`` of a solved fit: inference, statistics, centered form and notes."""
    remedy = remedy or Remedy()
    basis = core.basis
    n = len(y)
    p = spec.n_params
    df = n - p
    sse = core.sse
    s2 = sse / df if df > 0 else math.nan
    rmse = math.sqrt(s2) if df > 0 else math.nan
    if remedy.se == "ols":
        cov_scaled = core.inv_scaled * s2
        cov_raw = core.inv_raw * s2
    else:
        cov_scaled = robust_cov(core, x, w, remedy.se)
        # the map rounded once from double-double (solve's raw_map_pair), the same doubles
        # as rounding the exact rational map (Basis.raw_map) but without p^2 Fractions
        cov_raw = core.raw_map @ cov_scaled @ core.raw_map.T
    se = np.sqrt(np.clip(np.diag(cov_raw), 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        tr = core.beta / se
    tr = np.where((se == 0) & (core.beta == 0), np.nan, tr)
    pv = t_pvalue(tr, df)
    q = t_quantile(df, level)
    lo, hi = core.beta - q * se, core.beta + q * se

    spread = _spread_gram(core.gram, spec.intercept)
    v = basis.raw_in_scaled()
    vif_raw = vifs(np.diag(core.inv_raw), np.einsum("em,ef,fm->m", v, spread, v))
    if all(spec.centrable()):  # the basis is centered at the means already
        vif_c = vifs(np.diag(core.inv_scaled), np.diag(spread))
    else:
        vif_c = _centered_model_vifs(x, w, spec)
    if spec.intercept:
        vif_raw[0] = vif_c[0] = math.nan

    coefs = tuple(
        Coefficient(spec.terms[i], float(core.beta[i]), float(se[i]), float(tr[i]),
                    float(pv[i]), float(lo[i]), float(hi[i]), float(vif_raw[i]),
                    float(vif_c[i]))
        for i in range(p)
    )

    sst = core.sst
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = 1.0 - sse / sst if sst > 0 else math.nan
        k0 = 1 if spec.intercept else 0
        adj = 1.0 - (1.0 - r2) * (n - k0) / df if df > 0 else math.nan
        df_model = p - k0
        if df_model > 0 and df > 0 and remedy.se != "ols":
            f = wald_f(core.b, cov_scaled, list(range(k0, p)))
        elif df_model > 0 and df > 0:
            f = ((sst - sse) / df_model) / s2 if s2 > 0 else math.inf
        else:
            f = math.nan
        fp = f_pvalue(f, df_model, df)
        spread_pct = rmse_percent(rmse, float(np.mean(y)), remedy)
        llf = -0.5 * n * (math.log(2 * math.pi) + math.log(sse / n) + 1) if sse > 0 else math.inf
        if w is not None and math.isfinite(llf):
            llf += 0.5 * float(np.sum(np.log(w)))
        aic = -2 * llf + 2 * p
        bic = -2 * llf + math.log(n) * p
        h = core.leverage
        ew = core.residuals if w is None else core.residuals * np.sqrt(w)
        # (e / (1 - h))^2 is worked in the array that then receives the fitted values (one
        # new n-vector, not two); max(h) < 1 for all(h < 1) (NaN fails both)
        fitted = np.subtract(1.0, h)
        if np.max(h) < 1:
            np.divide(ew, fitted, out=fitted)
            press = float(np.sum(np.square(fitted, out=fitted)))
        else:
            press = math.inf
        np.subtract(y, core.residuals, out=fitted)
        pred_r2 = 1.0 - press / sst if sst > 0 else math.nan
    top = _top_term_p(spec, core.b, cov_scaled, df)
    nonint = [c.vif for c in coefs if c.term != "intercept"]
    stats = FitStats(
        n_used=n, n_params=p, df_resid=df, sse=sse, sst=sst, r2=r2, adj_r2=adj, rmse=rmse,
        rmse_percent=spread_pct, f_stat=f, f_p_value=fp, aic=aic, bic=bic, press=press,
        pred_r2=pred_r2, cond_number=core.cond, cond_number_raw=raw_condition(core, x, w, v),
        max_vif=float(np.max(nonint)) if nonint else math.nan, top_term_p_value=top,
    )

    scale_e = np.array([np.prod(basis.scales ** np.array(qq)) for qq in basis.powers])
    centered = CenteredForm(
        centers=tuple(float(c) for c in basis.centers),
        terms=tuple(_centered_label(qq, spec.predictors, basis.centers) for qq in basis.powers),
        estimates=tuple(float(v) for v in core.b / scale_e),
        std_errors=tuple(float(v) for v in np.sqrt(np.diag(cov_scaled)) / scale_e),
    )

    notes = ([Note(s, NoteKind.MODEL) for s in spec.notes]
             + [Note(s, NoteKind.REMEDY) for s in remedy.notes])
    if core.method != "exact" and core.error_bound > 1e-10:
        digits = max(0.0, -math.log10(core.error_bound))
        notes.append(Note(
            f"the design is badly conditioned (condition number {core.cond:.3g}) and too "
            f"large for exact arithmetic: about {digits:.0f} significant digits are "
            "reliable; centering or fewer terms would help", NoteKind.ACCURACY))
    if df > 0 and n < 10 * p:
        notes.append(Note(f"{n} rows for {p} coefficients: fewer than 10 rows per coefficient "
                          "(a common rule of thumb), so estimates may not hold up on new data",
                          NoteKind.ROWS))
    hform = core.leverage if w is None else core.leverage / w
    return FitResult(
        spec=spec, coefficients=coefs, stats=stats, centered=centered, level=level,
        n_dropped=n_dropped, notes=tuple(notes), fitted=fitted,
        residuals=core.residuals, leverage=core.leverage, used=used,
        x_min=x.min(axis=0), x_max=x.max(axis=0), cov=cov_raw,
        method=core.method, response=response, basis=basis, scaled_coef=core.b,
        scaled_inv=core.inv_scaled, scaled_cov=cov_scaled, weights=w,
        max_data_leverage_form=float(hform.max()), remedy=remedy, x=x, y=y,
    )


def rmse_percent(rmse: float, ybar: float, remedy: Remedy) -> float:
    """The error's spread as a percent of y, in y's units: 100 rmse / mean(y) for additive
    error, 100 rmse for percent error (rmse is already a fraction of the fitted value) and
    100 sqrt(exp(rmse^2) - 1) for a fit of ln y (the lognormal's SD / mean); NaN for log and
    percent error together, where no single figure describes the spread."""
    if remedy.log and remedy.error == "percent":
        return math.nan
    if remedy.log:
        if not math.isfinite(rmse) or rmse * rmse > 700:  # the spread overflows: no figure
            return math.nan
        return 100.0 * math.sqrt(math.expm1(rmse * rmse))
    if remedy.error == "percent":
        return 100.0 * rmse
    return 100.0 * rmse / ybar if ybar != 0 else math.nan


def raw_condition(core: Core, x: np.ndarray, w: np.ndarray | None,
                  v: np.ndarray | None = None) -> float:
    """2-norm condition number of the raw design sqrt(W) X (columns x^m, not centered or
    scaled), from the scaled basis: sqrt(W) X = (sqrt(W) T) V with V = raw_in_scaled, so its
    singular values are those of R V where R'R = T'WT (p x p work, not n x p)."""
    if v is None:  # ``build`` passes the one it formed for the VIFs
        v = core.basis.raw_in_scaled()
    try:
        r = np.linalg.cholesky(core.gram).T
        sv = np.linalg.svd(r @ v, compute_uv=False)
    except np.linalg.LinAlgError:  # T'WT too close to singular for Cholesky: use the rows
        a = monomials(x, core.basis.powers)
        if w is not None:
            a *= np.sqrt(w)[:, None]
        sv = np.linalg.svd(a, compute_uv=False)
    return float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf


def robust_cov(core: Core, x: np.ndarray, w: np.ndarray | None, kind: str) -> np.ndarray:
    """Heteroscedasticity-consistent covariance (MacKinnon-White HC0-HC3) of the scaled-basis
    coefficients: (A'A)^-1 A' diag(omega) A (A'A)^-1 with A the weighted design."""
    a = core.basis.design(x)
    e = core.residuals
    if w is not None:
        a *= np.sqrt(w)[:, None]
        e = e * np.sqrt(w)
    n, p = a.shape
    h = core.leverage
    omega = e * e
    if kind == "hc1":
        omega = omega * n / (n - p)
    elif kind == "hc2":
        omega = omega / (1.0 - h)
    elif kind == "hc3":
        omega = omega / (1.0 - h) ** 2
    meat = a.T @ (a * omega[:, None])
    return core.inv_scaled @ meat @ core.inv_scaled


def wald_f(b: np.ndarray, cov: np.ndarray, idx: list[int]) -> float:
    """F statistic of the Wald test that the coefficients ``idx`` are all zero."""
    bb = b[idx]
    c = cov[np.ix_(idx, idx)]
    if not np.any(c):
        return math.inf if np.any(bb != 0) else math.nan
    try:
        return float(bb @ np.linalg.solve(c, bb)) / len(idx)
    except np.linalg.LinAlgError:  # a combination with zero variance (e.g. an exact fit)
        if not (np.all(np.isfinite(c)) and np.all(np.isfinite(bb))):
            return math.nan
        sol = np.linalg.lstsq(c, bb, rcond=None)[0]
        if not np.allclose(c @ sol, bb, rtol=1e-10, atol=0):
            return math.inf  # part of b lies where its variance is zero
        return float(bb @ sol) / len(idx)


def _centered_label(q, names, centers) -> str:
    if not any(q):
        return "intercept"
    shifted = tuple(f"({n} - {c!r})" if c != 0 else n for n, c in zip(names, centers))
    return term_label(q, shifted)


def _top_term_p(spec: ModelSpec, b: np.ndarray, cov: np.ndarray, df: int) -> float:
    """Partial F test that every highest-order term is zero (the curvature test), as a Wald
    test in the scaled basis: identical to the F test of the nested fits for least squares."""
    top = spec.top_order()
    idx = [i for i, qq in enumerate(spec.all_powers) if sum(qq) == top]
    if df <= 0 or not idx:
        return math.nan
    f = wald_f(b, cov, idx)
    if math.isinf(f):
        return 0.0
    return f_pvalue(f, len(idx), df)


def response_scale(y: np.ndarray) -> float:
    """The power of two at or above max |y| (1 for all-zero y): dividing by it is exact and
    keeps sums of squares of the response inside the double range whatever its units."""
    top = float(max(np.max(y), -np.min(y))) if len(y) else 0.0  # max|y|, no |y| array
    return float(power_of_two_scale(np.array([top]))[0])


def weight_scale(w: np.ndarray | None) -> float:
    """A power of four near max w (1 without weights): exact to divide by, and its square
    root (a power of two) rescales the residual SD exactly."""
    if w is None or not len(w):
        return 1.0
    e = int(np.frexp(float(np.max(w)))[1])
    return math.ldexp(1.0, e + (e % 2))


def rescale(res: FitResult, y_scale: float, weights: np.ndarray | None,
            w_ratio: float) -> FitResult:
    """The result of a fit solved on y / y_scale with weights w / w_ratio, in the data's
    units: estimates, errors and intervals times y_scale (exact, a power of two); t, p, R^2,
    F and VIFs unchanged. ``cov`` and ``scaled_cov`` are in the data's units unless that
    would underflow or overflow; then they stay in units of y_scale^2 (``FitResult.y_scale``,
    1 otherwise). ``fitted``, ``residuals`` and ``y`` of ``res`` are scaled in place: they
    must be arrays made for ``res`` alone (as ``build`` and ``solve`` make them), and ``res``
    is not to be used afterwards (at 10^6 rows three fresh n-vectors cost more in page
    faults than the multiplications)."""
    sy, g = y_scale, w_ratio
    # built directly (dataclasses.replace costs more than the arithmetic at p = 28)
    coefs = tuple(Coefficient(c.term, c.estimate * sy, c.std_error * sy, c.t_ratio, c.p_value,
                              c.ci_lower * sy, c.ci_upper * sy, c.vif, c.vif_centered)
                  for c in res.coefficients)
    st = res.stats
    ss = g * sy * sy
    n = st.n_used
    rmse = st.rmse * math.sqrt(g) * sy
    if res.remedy.log or res.remedy.error == "percent":
        pct = rmse_percent(rmse, float(np.mean(res.y)) * sy, res.remedy)
    else:
        pct = st.rmse_percent * math.sqrt(g)
    shift = 2 * n * math.log(sy)
    with np.errstate(over="ignore", under="ignore"):
        stats = replace(st, sse=st.sse * ss, sst=st.sst * ss, press=st.press * ss, rmse=rmse,
                        rmse_percent=pct, aic=st.aic + shift, bic=st.bic + shift)
    cen = res.centered
    centered = replace(cen, estimates=tuple(v * sy for v in cen.estimates),
                       std_errors=tuple(v * sy for v in cen.std_errors))
    cov, scaled_cov, keep = res.cov, res.scaled_cov, sy
    with np.errstate(over="ignore", under="ignore"):
        if _in_range(cov, sy) and _in_range(scaled_cov, sy):  # the usual case: data's units
            cov, scaled_cov, keep = cov * sy * sy, scaled_cov * sy * sy, 1.0
        scaled_inv = res.scaled_inv / g
    for arr in (res.fitted, res.residuals, res.y):
        arr *= sy
    return replace(res, coefficients=coefs, stats=stats, centered=centered,
                   fitted=res.fitted, residuals=res.residuals,
                   scaled_coef=res.scaled_coef * sy, scaled_inv=scaled_inv, cov=cov,
                   scaled_cov=scaled_cov, weights=weights,
                   max_data_leverage_form=res.max_data_leverage_form / g,
                   y=res.y, y_scale=keep)


#: Covariances are written in the data's units while every variance stays between these
#: (so standard errors and their products keep full precision), else in units of y_scale^2.
_COV_RANGE = (1e-280, 1e280)


def _in_range(cov: np.ndarray, sy: float) -> bool:
    d = np.abs(np.diag(cov))
    d = d[d != 0] * sy * sy
    return bool(np.all(np.isfinite(cov * sy * sy)) and np.all(d > _COV_RANGE[0])
                and np.all(d < _COV_RANGE[1]))
