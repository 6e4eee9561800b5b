"""Row diagnostics (residuals, leverage, influence) and checks of the regression assumptions.

Thresholds (documented, and named in each check's note):
- tests with a p-value: ``ok`` at p >= 0.05, ``watch`` for 0.01 <= p < 0.05, ``problem`` below;
- Durbin-Watson: ``watch`` when |DW - 2| > 0.5, ``problem`` when > 1 (rule of thumb);
- outliers: Bonferroni-adjusted p of the largest externally studentized residual < 0.05 is a
  ``problem``, |t| > 3 without that is ``watch``;
- Cook's distance: any D > 1 is a ``problem``, any D > 0.5 is ``watch``; the count above
  4/n is reported (all three cut-offs are common practice);
- collinearity: centered VIF > 10 is a ``problem``; raw VIF > 10 with centered VIFs <= 10 is
  ``watch`` (interpret the centered form) (VIF 10: common practice);
- extrapolation risk: largest leverage > 0.5 is ``watch``, > 0.9 ``problem``;
- rows per coefficient: >= 10 ``ok``, 5 to 10 ``watch``, < 5 ``problem`` (common practice);
- lack of fit (pure error, when x rows repeat): the p-value thresholds above.
Rows flagged in XB_ROWDIAG: outlier (Bonferroni p < 0.05), high leverage (h > 2p/n, common
practice), influential (Cook's D > 4/n).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .dist import chi2_sf, f_pvalue, t_pvalue, t_quantile
from .refine import spans
from .result import FitResult
from .solve import monomials
from .threads import blas_threads

P_WATCH, P_PROBLEM = 0.05, 0.01


def cooks_cutoff(n_used: int) -> float:
    """Cook's distance above which a row is flagged influential: 4/n (common practice)."""
    return 4 / n_used

SHAPIRO_MAX_ROWS = 5000


@dataclass(frozen=True)
class RowDiagnostics:
    """Per input row (rows not used hold NaN and the flag 'dropped')."""

    fitted: np.ndarray
    residual: np.ndarray
    std_residual: np.ndarray  # internally studentized
    studentized: np.ndarray  # externally studentized (deleted residual)
    leverage: np.ndarray
    cooks_d: np.ndarray
    bonferroni_p: np.ndarray
    flag: tuple[str, ...]

    def to_dict(self) -> dict:
        out = {}
        for k in ("fitted", "residual", "std_residual", "studentized", "leverage", "cooks_d",
                  "bonferroni_p"):
            out[k] = [None if not math.isfinite(v) else float(v) for v in getattr(self, k)]
        out["flag"] = list(self.flag)
        return out


@dataclass(frozen=True)
class Check:
    """One assumption check: statistic and p-value (nan where none), plain-word verdict."""

    check: str
    statistic: float
    p_value: float
    verdict: str
    note: str
    row: int | None = None  # the 1-based data row the note names (front ends add its address)
    span: tuple[int, int] | None = None  # the first and last data row the note names

    def to_dict(self) -> dict:
        def plain(v):
            return float(v) if math.isfinite(v) else None

        return {"check": self.check, "statistic": plain(self.statistic),
                "p_value": plain(self.p_value), "verdict": self.verdict, "note": self.note,
                "row": self.row, "span": None if self.span is None else list(self.span)}


def _whitened(res: FitResult) -> np.ndarray:
    return res.residuals if res.weights is None else res.residuals * np.sqrt(res.weights)


def _influence(res: FitResult):
    """Internally and externally studentized residuals, Cook's D, Bonferroni p (rows used)."""
    n, p = res.stats.n_used, res.stats.n_params
    e = _whitened(res) / res.y_scale  # in units where its squares cannot leave the range
    h = res.leverage
    sse = float(e @ e)
    s2 = sse / (n - p)
    # each formula's operations in their usual order, written in place: a handful of
    # n-vectors instead of a temporary for every operation
    with np.errstate(divide="ignore", invalid="ignore"):
        one_h = 1.0 - h
        internal = np.multiply(s2, one_h)
        np.sqrt(internal, out=internal)
        np.divide(e, internal, out=internal)
        dof = n - p - 1
        if dof > 0:  # s2_del = (sse - e e / (1 - h)) / dof, then e / sqrt(s2_del (1 - h))
            external = np.multiply(e, e)
            external /= one_h
            np.subtract(sse, external, out=external)
            external /= dof
        else:
            external = np.full(n, np.nan)
        external *= one_h
        np.sqrt(external, out=external)
        np.divide(e, external, out=external)
        cooks = np.square(internal)  # internal^2 h / (p (1 - h))
        cooks *= h
        one_h *= p
        cooks /= one_h
        del one_h
        bonf = np.full(n, np.nan)
        if dof > 0:
            # below the two-sided 1/n point of t, n * p >= 1 and the adjusted p is 1: only
            # rows beyond it (less a margin far above the tail's error) need their tail
            bonf[~np.isnan(external)] = 1.0
            far = np.abs(external) > t_quantile(dof, 1.0 - 1.0 / n) * (1.0 - 1e-9)
            bonf[far] = np.minimum(1.0, n * t_pvalue(external[far], dof))
    return internal, external, cooks, bonf


def row_diagnostics(res: FitResult) -> RowDiagnostics:
    """Fitted values, residuals and influence measures aligned with the input rows.

    Parameters
    ----------
    res : FitResult
        A fit from ``fit``.

    Returns
    -------
    RowDiagnostics
        One entry per input row (rows not used hold NaN and the flag 'dropped'): fitted
        value, residual, studentized residuals, leverage, Cook's distance, Bonferroni p and
        a flag (outlier, high leverage, influential; cut-offs in the module docstring).

    Examples
    --------
    Invented cost figures for eight sizes; the last row has the most leverage:

    >>> from xlbridge.engine import fit, row_diagnostics
    >>> res = fit([3.1, 4.9, 7.2, 9.8, 13.1, 16.9, 21.2, 25.8], [1, 2, 3, 4, 5, 6, 7, 8], 2)
    >>> rows = row_diagnostics(res)
    >>> print(" ".join(f"{h:.3f}" for h in rows.leverage))
    0.708 0.280 0.232 0.280 0.280 0.232 0.280 0.708
    >>> rows.flag[-1]
    'influential'
    """
    n, p = res.stats.n_used, res.stats.n_params
    internal, external, cooks, bonf = _influence(res)
    m = len(res.used)

    def spread(v, own=False):
        if own and m == n:  # every row used: an array made here needs no copy
            return v
        out = np.full(m, np.nan)
        out[res.used] = v
        return out

    flags = []
    lev_cut, cook_cut = 2 * p / n, cooks_cutoff(n)
    j = 0
    for used in res.used:
        if not used:
            flags.append("dropped")
            continue
        f = []
        if bonf[j] < 0.05:
            f.append("outlier")
        if res.leverage[j] > lev_cut:
            f.append("high leverage")
        if cooks[j] > cook_cut:
            f.append("influential")
        flags.append(", ".join(f))
        j += 1
    return RowDiagnostics(spread(res.fitted), spread(res.residuals), spread(internal, True),
                          spread(external, True), spread(res.leverage), spread(cooks, True),
                          spread(bonf, True), tuple(flags))


def _p_verdict(p: float) -> str:
    if not math.isfinite(p):
        return "n/a"
    return "ok" if p >= P_WATCH else ("watch" if p >= P_PROBLEM else "problem")


def _aux_r2(r_aug: np.ndarray, n: int, sst: float) -> tuple[float, int]:
    """(centered R^2, rank) of a centered target regressed on a design holding a constant
    column, from the R factor of [design | target] (``_r_factor``) over n rows, sst the
    target's sum of squares. Zero columns are left out, the rest scaled to unit length; a
    column within a relative 1e-10 of the span of those before it adds nothing to the fit.
    R^2 is the explained sum of squares over sst (the centered target's projections on the
    orthonormal directions of the design), accurate in relative terms however small. The
    rank is numpy.linalg.matrix_rank's (singular values above max(rows, columns) eps times
    the largest) of the scaled design."""
    q = r_aug.shape[1] - 1
    if r_aug.shape[0] <= q:  # fewer rows than columns: zero rows change no projection
        r_aug = np.concatenate([r_aug, np.zeros((q + 1 - r_aug.shape[0], q + 1))])
    norms = np.linalg.norm(r_aug[:, :q], axis=0)  # the design's column norms (Q orthogonal)
    keep = np.flatnonzero(norms > 0)
    k = len(keep)
    # the same rows times an orthogonal matrix: the R factor of [scaled kept columns | target]
    r = np.linalg.qr(np.column_stack([r_aug[:, keep] / norms[keep], r_aug[:, q]]), mode="r")
    diag = np.abs(np.diag(r)[:k])
    coef = r[:k, k]  # the target on the orthonormal directions of the design
    explained = float(np.sum(coef[diag > 1e-10] ** 2))
    sv = np.linalg.svd(r[:k, :k], compute_uv=False)
    rank = int(np.sum(sv > sv.max() * max(n, k) * np.finfo(float).eps)) if k else 0
    return (explained / sst if sst > 0 else math.nan), rank


def _r_factor(r_prev: np.ndarray | None, block: np.ndarray) -> np.ndarray:
    """R of the rows of r_prev stacked on ``block`` (the R factor of a tall matrix by row
    blocks, whose Q is never formed: the same R as one factorisation, up to row signs)."""
    if r_prev is not None:
        block = np.concatenate([r_prev, block])
    return np.linalg.qr(block, mode="r")


def heteroscedasticity_tests(res: FitResult) -> tuple[tuple[float, float, int], ...]:
    """(LM, p, df) of Breusch-Pagan (Koenker's studentized form, regressors = the model's
    columns) and White (regressors = the columns, their squares and cross products).

    The auxiliary designs are built by row blocks and reduced to their R factors at once,
    so neither (n x p^2 for White) is ever held whole."""
    e2 = _whitened(res) ** 2
    e2 -= e2.mean()  # centered: R^2 as explained over total, without cancellation
    sst = float(e2 @ e2)
    n = len(e2)
    zero = (0,) * res.spec.k
    base = tuple(dict.fromkeys((zero,) + res.spec.all_powers))
    white_powers = tuple(dict.fromkeys(
        tuple(a + b for a, b in zip(p1, p2)) for i, p1 in enumerate(base) for p2 in base[i:]))
    # the constant times each model column: the Breusch-Pagan columns are White columns
    cols = ([white_powers.index(q) for q in base] + [len(white_powers)],
            list(range(len(white_powers) + 1)))
    centers, scales = res.basis.centers, res.basis.scales
    r_facs: list[np.ndarray | None] = [None, None]
    with blas_threads(0):  # a block's factorisation is a small product (see threads.py)
        for s, e in spans(n):
            t = (res.x[s:e] - centers) / scales
            block = np.empty((e - s, len(white_powers) + 1), order="F")
            block[:, :-1] = monomials(t, white_powers)
            block[:, -1] = e2[s:e]
            for i, c in enumerate(cols):
                r_facs[i] = _r_factor(r_facs[i], block[:, c])
    out = []
    for r_aug in r_facs:
        r2, rank = _aux_r2(r_aug, n, sst)
        lm = n * r2
        df = rank - 1
        out.append((lm, chi2_sf(lm, df), df))
    return tuple(out)


@dataclass(frozen=True)
class LackOfFit:
    """Pure-error lack-of-fit F test: the residual sum of squares split into pure error
    (scatter of y within each distinct x row) and lack of fit (the rest)."""

    f_stat: float
    p_value: float
    df_lack: int  # distinct x rows - parameters
    df_pure: int  # rows - distinct x rows
    ss_lack: float
    ss_pure: float


def distinct_rows(x: np.ndarray) -> tuple[np.ndarray, int]:
    """(group of each row, number of groups) where rows equal in every column share a
    group. One column sorts once; more columns sort by lexsort and compare neighbours
    (``np.unique(axis=0)`` sorts a byte view of the rows, several times slower)."""
    x = np.asarray(x, dtype=float).reshape(len(x), -1)
    if len(x) == 0:
        return np.zeros(0, dtype=np.intp), 0
    if x.shape[1] == 1:
        _, groups = np.unique(x[:, 0], return_inverse=True)
        groups = np.asarray(groups).ravel()
        return groups, int(groups.max()) + 1
    order = np.lexsort(x.T[::-1])
    xs = x[order]
    new = np.ones(len(x), dtype=bool)
    new[1:] = np.any(xs[1:] != xs[:-1], axis=1)
    ids = np.cumsum(new) - 1
    groups = np.empty(len(x), dtype=np.intp)
    groups[order] = ids
    return groups, int(ids[-1]) + 1


def lack_of_fit(res: FitResult, rows: tuple[np.ndarray, int] | None = None
                ) -> LackOfFit | None:
    """F = (SS_lof / (m - p)) / (SS_pe / (n - m)) on F(m - p, n - m), with m distinct x rows
    among the n rows used and p coefficients; SS_pe is the (weighted) scatter of y about
    each distinct x row's (weighted) mean, on the fit's scale (ln y for log fits), and
    SS_lof = SSE - SS_pe. None when no x row repeats or m <= p (nothing to test). ``rows``:
    ``distinct_rows(res.x)`` where the caller has it already."""
    n, p = res.stats.n_used, res.stats.n_params
    groups, m = distinct_rows(res.x) if rows is None else rows
    if m == n or m <= p:
        return None
    w = res.weights
    # y minus its group mean equals e minus the group's mean residual (one fitted value per
    # x row); residuals avoid the cancellation of subtracting large y values
    e = res.residuals
    if w is None:  # weights of 1 change no product: the same numbers without them
        e_bar = np.bincount(groups, e, m) / np.bincount(groups, minlength=m)
    else:
        e_bar = np.bincount(groups, w * e, m) / np.bincount(groups, w, m)
    d = e - e_bar[groups]
    ss_pure = float(np.sum(d * d)) if w is None else float(np.sum(w * d * d))
    ss_lack = max(res.stats.sse - ss_pure, 0.0)
    df_lack, df_pure = m - p, n - m
    if ss_pure > 0:
        f = (ss_lack / df_lack) / (ss_pure / df_pure)
    else:
        f = math.inf if ss_lack > 0 else math.nan
    return LackOfFit(f, f_pvalue(f, df_lack, df_pure), df_lack, df_pure, ss_lack, ss_pure)


def durbin_watson(e: np.ndarray) -> float:
    if not np.any(e):
        return math.nan
    return float(np.sum(np.diff(e) ** 2) / np.sum(e * e))


def checks(res: FitResult) -> tuple[Check, ...]:
    """Assumption checks with plain-word verdicts; thresholds in the module docstring.

    Parameters
    ----------
    res : FitResult
        A fit from ``fit``.

    Returns
    -------
    tuple of Check
        Normality, constant variance (Breusch-Pagan, White), independence, outliers,
        influence, collinearity, extrapolation risk, lack of fit (pure error) and rows per
        coefficient, each with its
        statistic, p-value (NaN where none), verdict ('ok', 'watch', 'problem' or 'n/a')
        and a note.

    Examples
    --------
    Invented cost figures for eight sizes:

    >>> from xlbridge.engine import checks, fit
    >>> res = fit([3.1, 4.9, 7.2, 9.8, 13.1, 16.9, 21.2, 25.8], [1, 2, 3, 4, 5, 6, 7, 8], 2)
    >>> for c in checks(res):
    ...     print(f"{c.check}: {c.verdict}")
    normality: ok
    constant variance (Breusch-Pagan): ok
    constant variance (White): ok
    independence (Durbin-Watson): ok
    outliers: ok
    influence (Cook's distance): problem
    collinearity (VIF): watch
    extrapolation risk: watch
    lack of fit (pure error): n/a
    rows per coefficient: problem
    """
    n, p = res.stats.n_used, res.stats.n_params
    e = _whitened(res)
    out: list[Check] = []
    scale = " (on the log scale)" if res.remedy.log else ""

    if n < 3 or not np.any(e):
        out.append(Check("normality", math.nan, math.nan, "n/a",
                         "too few rows or residuals all zero"))
    elif n <= SHAPIRO_MAX_ROWS:
        from .swilk import shapiro_wilk

        w, pv = shapiro_wilk(e)
        out.append(Check("normality", float(w), float(pv), _p_verdict(pv),
                         f"Shapiro-Wilk W of the residuals{scale}; ok at p >= 0.05"))
    else:
        d = e - e.mean()
        m2 = np.mean(d**2)
        skew = np.mean(d**3) / m2**1.5
        kurt = np.mean(d**4) / m2**2
        jb = n / 6.0 * (skew**2 + (kurt - 3.0) ** 2 / 4.0)
        pv = chi2_sf(jb, 2)
        out.append(Check("normality", float(jb), pv, _p_verdict(pv),
                         f"Jarque-Bera (more than {SHAPIRO_MAX_ROWS} rows); skewness "
                         f"{skew:.3g}, kurtosis {kurt:.3g}; ok at p >= 0.05"))

    if np.any(e):
        (bp, bp_p, bp_df), (wh, wh_p, wh_df) = heteroscedasticity_tests(res)
        advice = "" if _p_verdict(min(bp_p, wh_p)) == "ok" else (
            "; remedies: se=hc3, log=yes or error=percent")
        out.append(Check("constant variance (Breusch-Pagan)", bp, bp_p, _p_verdict(bp_p),
                         f"studentized LM test on the model's terms, {bp_df} df{advice}"))
        out.append(Check("constant variance (White)", wh, wh_p, _p_verdict(wh_p),
                         f"LM test on the terms, squares and cross products, {wh_df} df{advice}"))
        dw = durbin_watson(e)
        dev = abs(dw - 2.0)
        verdict = "ok" if dev <= 0.5 else ("watch" if dev <= 1.0 else "problem")
        rows = np.flatnonzero(res.used) + 1
        out.append(Check("independence (Durbin-Watson)", dw, math.nan, verdict,
                         f"residuals in input row order (rows {rows[0]}..{rows[-1]}, "
                         f"{res.n_dropped} dropped); near 2 is ok, rule of thumb |DW-2| <= 0.5",
                         span=(int(rows[0]), int(rows[-1]))))

    internal, external, cooks, bonf = _influence(res)
    rows = np.flatnonzero(res.used) + 1
    if np.all(np.isnan(external)):
        out.append(Check("outliers", math.nan, math.nan, "n/a", "too few rows"))
    else:
        i = int(np.nanargmax(np.abs(external)))
        tmax, pb = float(external[i]), float(bonf[i])
        verdict = "problem" if pb < 0.05 else ("watch" if abs(tmax) > 3 else "ok")
        out.append(Check("outliers", tmax, pb, verdict,
                         f"largest externally studentized residual at row {rows[i]}; "
                         "p is Bonferroni-adjusted", int(rows[i])))
    if np.all(np.isnan(cooks)):
        out.append(Check("influence (Cook's distance)", math.nan, math.nan, "n/a", ""))
    else:
        i = int(np.nanargmax(cooks))
        above4, above1 = int(np.sum(cooks > cooks_cutoff(n))), int(np.sum(cooks > 1))
        verdict = "problem" if above1 else ("watch" if cooks[i] > 0.5 else "ok")
        out.append(Check("influence (Cook's distance)", float(cooks[i]), math.nan, verdict,
                         f"largest at row {rows[i]}; {above4} rows above 4/n = "
                         f"{cooks_cutoff(n):.3g}, "
                         f"{above1} above 1 (watch above 0.5)", int(rows[i])))
    del internal, external, cooks, bonf  # n-vectors no check below needs

    vifs = [c.vif for c in res.coefficients if c.term != "intercept"]
    vifc = [c.vif_centered for c in res.coefficients if c.term != "intercept"]
    if len(vifs) >= 2:
        vmax, cmax = float(np.nanmax(vifs)), float(np.nanmax(vifc))
        if cmax > 10:
            verdict, advice = "problem", "terms are collinear even after centering"
        elif vmax > 10:
            verdict, advice = "watch", ("raw-unit terms move together (x and x^2): center the "
                                        "predictors and read the centered form")
        else:
            verdict, advice = "ok", "terms are not collinear"
        out.append(Check("collinearity (VIF)", vmax, math.nan, verdict,
                         f"max VIF raw {vmax:.4g}, centered {cmax:.4g}; {advice}"))
    else:
        out.append(Check("collinearity (VIF)", math.nan, math.nan, "n/a", "one term only"))

    hmax = float(np.max(res.leverage))
    i = int(np.argmax(res.leverage))
    verdict = "problem" if hmax > 0.9 else ("watch" if hmax > 0.5 else "ok")
    ranges = "; ".join(f"{nm} {lo:.6g} to {hi:.6g}" for nm, lo, hi in
                       zip(res.spec.predictors, res.x_min, res.x_max))
    out.append(Check("extrapolation risk", hmax, math.nan, verdict,
                     f"largest leverage at row {rows[i]}; data span {ranges}: predictions "
                     "outside it (or, with 2+ predictors, beyond the largest leverage) are "
                     "extrapolation and are flagged", int(rows[i])))

    out.append(_lack_of_fit_check(res, scale))

    ratio = n / p
    verdict = "ok" if ratio >= 10 else ("watch" if ratio >= 5 else "problem")
    out.append(Check("rows per coefficient", ratio, math.nan, verdict,
                     f"{n} rows, {p} coefficients; 10 or more per coefficient is a common rule "
                     "of thumb"))
    return tuple(out)


def _lack_of_fit_check(res: FitResult, scale: str) -> Check:
    name = "lack of fit (pure error)"
    rows = distinct_rows(res.x)
    lof = lack_of_fit(res, rows)
    if lof is None:
        m = rows[1]
        why = ("no repeated x values" if m == res.stats.n_used else
               f"{m} distinct x values for {res.stats.n_params} coefficients")
        return Check(name, math.nan, math.nan, "n/a", f"not available: {why}")
    weighted = "weighted " if res.weights is not None else ""
    return Check(name, lof.f_stat, lof.p_value, _p_verdict(lof.p_value),
                 f"F of lack of fit against {weighted}pure error (scatter within repeated x "
                 f"values){scale}, F({lof.df_lack}, {lof.df_pure}); ok at p >= 0.05, "
                 "otherwise the model's form misses the shape of the data")
