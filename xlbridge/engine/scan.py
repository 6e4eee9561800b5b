"""Degree scan: fit degrees 1..max with the same options and recommend one.

Rule: among degrees that fit, the recommended degree is the lowest whose k-fold
cross-validated RMSE is within one standard error of the best (the "one standard error"
rule); polynomials always keep every lower power (hierarchy). Folds are deterministic:
row i of the rows used (input order) goes to fold i mod k, which also spreads sorted data
evenly over the folds; default 10 folds, leave-one-out when there are 20 rows or fewer.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .api import PERCENT_MAX_STEPS, fit
from .inference import f_pvalue
from .solve import ALIAS_TOL, choose_basis
from .terms import MAX_DEGREE, ModelError, ModelErrorKind, parse_model
from .threads import blas_threads

LOO_MAX_ROWS = 20
DEFAULT_FOLDS = 10
ROWS_PER_TERM = 10  # common rule of thumb


@dataclass(frozen=True)
class DegreeRow:
    degree: int
    r2: float
    adj_r2: float
    rmse: float
    aic: float
    aicc: float
    bic: float
    press: float
    pred_r2: float
    cv_rmse: float
    cv_se: float
    top_term_p_value: float
    nested_f_p_value: float
    choice: str
    note: str

    def to_dict(self) -> dict:
        return {k: (v if not isinstance(v, float) or math.isfinite(v) else None)
                for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class DegreeScan:
    rows: tuple[DegreeRow, ...]
    chosen: int | None
    folds: int
    rule: str
    notes: tuple[str, ...]

    def to_dict(self) -> dict:
        return {"rows": [r.to_dict() for r in self.rows], "chosen": self.chosen,
                "folds": self.folds, "rule": self.rule, "notes": list(self.notes)}


def _fold_predict(y, x, w, degree, intercept, log, x_test,
                  percent: bool = False) -> np.ndarray | None:
    """Predictions at ``x_test`` of a degree-``degree`` least-squares fit to one training
    fold, by a plain QR solve on the fit's own centered, scaled basis: no inference, no
    refinement (fold predictions need nowhere near the digits reported for the fit itself;
    the QR answer on this well-conditioned basis agrees with the full fit to about 1e-13).
    ``percent``: reweighted by 1 / fitted^2 until the coefficients settle, as fit does.
    None when the fold is short of rows or distinct x values, a column is aliased or the
    reweighting fails: the full fit then runs, to raise its own message."""
    spec = parse_model(degree, 1, None, intercept=intercept)
    p = spec.n_params
    if len(y) <= p or len(np.unique(x)) < degree + 1:
        return None
    yy = np.log(y) if log else y
    xt = x.reshape(-1, 1)
    basis = choose_basis(xt, w, spec)
    design = basis.design(xt)
    b = _qr_coef(design, yy, w)
    if percent and b is not None:
        base = np.ones(len(yy)) if w is None else w
        for _ in range(PERCENT_MAX_STEPS):
            fitted = design @ b
            if not np.all(fitted > 0):
                return None
            new = _qr_coef(design, yy, base / fitted**2)
            if new is None:
                return None
            settled = np.max(np.abs(new - b)) <= FOLD_PERCENT_TOL * np.max(np.abs(new))
            b = new
            if settled:
                break
        else:
            return None
    if b is None:
        return None
    eta = basis.design(x_test.reshape(-1, 1)) @ b
    if not np.all(np.isfinite(eta)):
        return None
    if log:  # Duan's smearing from the fold's own log-scale residuals, as fit does
        return np.exp(eta) * float(np.mean(np.exp(yy - design @ b)))
    return eta


#: Fold fits by percent error stop reweighting when no scaled-basis coefficient moves by
#: more than this, relative to the largest (predictions, not reported coefficients).
FOLD_PERCENT_TOL = 1e-10


def _qr_coef(design, z, w) -> np.ndarray | None:
    """Weighted least-squares coefficients on the scaled basis by QR; None when aliased."""
    a = design
    if w is not None:
        sw = np.sqrt(w)
        a, z = design * sw[:, None], z * sw
    norms = np.sqrt(np.einsum("ij,ij->j", a, a))
    if not np.all(norms > 0) or not np.all(np.isfinite(norms)):
        return None
    q, r = np.linalg.qr(a / norms)
    if not np.all(np.abs(np.diag(r)) > ALIAS_TOL):
        return None
    return np.linalg.solve(r, q.T @ z) / norms


def _cv(y, x, w, degree, folds, opts) -> tuple[float, float]:
    """Pooled k-fold RMSE on the original y scale and its standard error (one-SE rule)."""
    n = len(y)
    fold_of = np.arange(n) % folds
    mse, sizes = [], []
    percent = opts["error"] == "percent"
    with blas_threads(0):  # many small products
        for k in range(folds):
            test = fold_of == k
            train = ~test
            wk = None if w is None else w[train]
            pred = _fold_predict(y[train], x[train], wk, degree, opts["intercept"],
                                 opts["log"], x[test], percent)
            if pred is None:  # a fold fit must explain why
                res = fit(y[train], x[train], degree, weights=wk, certify=False, **opts)
                pred = res.predict(x[test]).fitted
            err = y[test] - pred
            wt = np.ones(err.size) if w is None else w[test]
            mse.append(float(np.sum(wt * err * err) / np.sum(wt)))
            sizes.append(float(np.sum(wt)))
    mse, sizes = np.array(mse), np.array(sizes)
    cv_mse = float(np.sum(mse * sizes) / np.sum(sizes))
    cv_rmse = math.sqrt(cv_mse)
    se_mse = float(np.std(mse, ddof=1) / math.sqrt(folds)) if folds > 1 else math.nan
    return cv_rmse, (se_mse / (2 * cv_rmse) if cv_rmse > 0 else 0.0)


def scan_degrees(
    y,
    x,
    max_degree: int,
    *,
    folds: int | None = None,
    intercept: bool = True,
    level: float = 0.95,
    weights=None,
    se: str = "ols",
    log: bool = False,
    error: str = "additive",
) -> DegreeScan:
    """Fit degrees 1..max_degree; statistics, cross-validation and a recommended degree.

    ``folds``: None for the default (10, or leave-one-out up to 20 rows), 0 for
    leave-one-out, or a number of folds from 2 to the number of rows."""
    if isinstance(max_degree, bool) or not float(max_degree).is_integer():
        raise ModelError(f"max_degree must be a whole number 1 to {MAX_DEGREE}; got {max_degree!r}",
                         ModelErrorKind.SPEC)
    max_degree = int(max_degree)
    if not 1 <= max_degree <= MAX_DEGREE:
        raise ModelError(f"max_degree must be 1 to {MAX_DEGREE}; got {max_degree}",
                         ModelErrorKind.SPEC)
    opts = dict(intercept=intercept, level=level, se=se, log=log, error=error)
    base = fit(y, x, 1, weights=weights, **opts)  # validates and finds the rows used
    if base.spec.k != 1:
        raise ModelError("the degree scan needs one predictor column", ModelErrorKind.SPEC)
    yv = np.asarray(y, dtype=float).ravel()[base.used]
    xv = np.asarray(x, dtype=float).reshape(len(base.used), -1)[base.used][:, 0]
    wv = None if weights is None else np.asarray(weights, dtype=float).ravel()[base.used]
    n = len(yv)
    if folds is None:
        folds = n if n <= LOO_MAX_ROWS else DEFAULT_FOLDS
    elif folds == 0:
        folds = n  # leave-one-out
    if isinstance(folds, bool) or not float(folds).is_integer() or not 2 <= int(folds) <= n:
        raise ModelError(f"folds must be a whole number from 2 to the number of rows ({n})",
                         ModelErrorKind.SPEC)
    folds = int(folds)
    distinct = len(np.unique(xv))
    rows, notes = [], []
    prev_sse = base.stats.sst
    for d in range(1, max_degree + 1):
        note = []
        try:
            res = base if d == 1 else fit(yv, xv, d, weights=wv, **opts)
        except ModelError as err:
            rows.append(DegreeRow(d, *([math.nan] * 12), "", str(err)))
            prev_sse = math.nan
            continue
        s = res.stats
        p = s.n_params
        aicc = s.aic + 2 * p * (p + 1) / (n - p - 1) if n - p - 1 > 0 else math.nan
        try:
            cv_rmse, cv_se = _cv(yv, xv, wv, d, folds, opts)
        except ModelError as err:
            cv_rmse = cv_se = math.nan
            note.append(f"cross-validation failed: {err}")
        if s.sse > 0 and s.df_resid > 0 and math.isfinite(prev_sse):
            fstat = (prev_sse - s.sse) / (s.sse / s.df_resid)
            nested = f_pvalue(fstat, 1, s.df_resid)
        else:
            nested = math.nan
        prev_sse = s.sse
        if n < ROWS_PER_TERM * p:
            note.append(f"{n / p:.1f} rows per coefficient (fewer than {ROWS_PER_TERM}, a "
                        "common rule of thumb)")
        rows.append(DegreeRow(d, s.r2, s.adj_r2, s.rmse, s.aic, aicc, s.bic, s.press,
                              s.pred_r2, cv_rmse, cv_se, s.top_term_p_value, nested, "",
                              "; ".join(note)))
    ok = [r for r in rows if math.isfinite(r.cv_rmse)]
    chosen = None
    if ok:
        best = min(ok, key=lambda r: r.cv_rmse)
        limit = best.cv_rmse + (best.cv_se if math.isfinite(best.cv_se) else 0.0)
        chosen = min(r.degree for r in ok if r.cv_rmse <= limit)
        rows = [DegreeRow(**{**r.__dict__, "choice": "recommended"}) if r.degree == chosen
                else r for r in rows]
    if distinct < max_degree + 1:
        notes.append(f"only {distinct} distinct x values: degrees above {distinct - 1} cannot "
                     "be fitted")
    scheme = "leave-one-out" if folds == n else f"{folds}-fold (row i to fold i mod {folds})"
    rule = ("lowest degree whose cross-validated RMSE is within one standard error of the "
            f"best; {scheme} cross-validation")
    return DegreeScan(tuple(rows), chosen, folds, rule, tuple(notes))
