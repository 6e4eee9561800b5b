"""Accurate least squares: a centered, power-of-two-scaled basis, a backward-stable
factorisation, an a-posteriori error bound, and exact arithmetic where the bound says the
double-precision answer may not be right to the digits we show.

The solve returns a ``Core``: coefficients and (X'WX)^-1 in the scaled basis (for
predictions, which are well conditioned there), the same in raw units, the residuals, the
sums of squares, leverages and the condition number. Everything else is computed from it.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from math import comb

import numpy as np

from .errors import ModelError, ModelErrorKind, distinct_shortage
from .exact import ExactFit, ExactSingular, shift_matrix
from .terms import ModelSpec

EPS = 2.0**-53
#: A term is aliased when its column, after scaling to unit length, lies within this
#: relative distance of the span of the columns before it (sine of the angle between the
#: column and that span, from the R factor of the QR decomposition).
ALIAS_TOL = 1e-11
#: The double-precision answer is accepted when its estimated relative error on every
#: reported estimate, standard error, residual SD and R^2 is below this (about 14 digits).
ACCEPT_ERROR = 1e-14
#: Exact arithmetic is used while rows x columns^2 stays below this many integer products
#: (about 0.3 s here); larger, badly conditioned fits keep the refined double answer and a note.
EXACT_BUDGET = 400_000
#: Below this many rows the QR factorisation is used; above it, Cholesky on the scaled
#: basis with one corrected semi-normal step (as accurate when the basis is well conditioned).
CHOLESKY_MIN_ROWS = 20_000
#: The Cholesky factor is used only while every diagonal entry of the unit-column factor
#: (the sine of the angle between a column and the span of those before it) exceeds this.
CHOLESKY_MIN_DIAG = 1e-4
_CHUNK = 65_536


@dataclass(frozen=True)
class Basis:
    """Scaled predictors t_j = (x_j - center_j) / scale_j, scale a power of two."""

    centers: np.ndarray
    scales: np.ndarray
    powers: tuple[tuple[int, ...], ...]  # every column, intercept (zeros) first if present

    def design(self, x: np.ndarray) -> np.ndarray:
        t = (x - self.centers) / self.scales
        return monomials(t, self.powers)

    def raw_map(self) -> list[list[Fraction]]:
        """Exact map: raw-unit coefficients = M @ scaled-basis coefficients."""
        m = shift_matrix(self.powers, [Fraction(float(c)) for c in self.centers])
        sc = [Fraction(float(s)) for s in self.scales]
        div = []
        for e in self.powers:
            d = Fraction(1)
            for ej, s in zip(e, sc):
                d *= s**ej
            div.append(d)
        return [[v / d for v, d in zip(row, div)] for row in m]

    def raw_in_scaled(self) -> np.ndarray:
        """Column m holds raw monomial x^m written on the scaled columns t^e: from
        x_j = s_j t_j + c_j, entry [e, m] = prod_j binom(m_j, e_j) s_j^e_j c_j^(m_j - e_j)."""
        p = len(self.powers)
        out = np.zeros((p, p))
        for i, e in enumerate(self.powers):
            for k, m in enumerate(self.powers):
                if all(ej <= mj for ej, mj in zip(e, m)):
                    v = 1.0
                    for ej, mj, s, c in zip(e, m, self.scales, self.centers):
                        v *= comb(mj, ej) * float(s) ** ej * float(c) ** (mj - ej)
                    out[i, k] = v
        return out


def monomials(t: np.ndarray, powers: tuple[tuple[int, ...], ...]) -> np.ndarray:
    """Columns prod_j t_j^e_j (Fortran order). Each column is one multiplication of a column
    already built (a parent with one exponent lower), written in place."""
    n, k = t.shape
    out = np.empty((n, len(powers)), order="F")
    tcols = [np.ascontiguousarray(t[:, j]) for j in range(k)]
    done: dict[tuple[int, ...], int] = {}
    for i, q in enumerate(powers):
        col = out[:, i]
        if not any(q):
            col.fill(1.0)
        else:
            j = next(j for j, e in enumerate(q) if e)
            parent = q[:j] + (q[j] - 1,) + q[j + 1 :]
            if not any(parent):
                col[:] = tcols[j]
            elif parent in done:
                np.multiply(out[:, done[parent]], tcols[j], out=col)
            else:
                np.multiply(monomials(t, (parent,))[:, 0], tcols[j], out=col)
        done[q] = i
    return out


def power_of_two_scale(spread: np.ndarray) -> np.ndarray:
    """The smallest power of two above each spread (1 where the spread is 0 or not finite):
    dividing by it is exact, and puts the centered predictor in [-1, 1]."""
    spread = np.asarray(spread, dtype=float)
    ok = (spread > 0) & np.isfinite(spread)
    return np.where(ok, np.ldexp(1.0, np.frexp(np.where(ok, spread, 1.0))[1]), 1.0)


def choose_basis(x: np.ndarray, w: np.ndarray | None, spec: ModelSpec) -> Basis:
    """Center each predictor at its (weighted) mean where the model allows it."""
    centrable = spec.centrable()
    centers = np.zeros(x.shape[1])
    scales = np.ones(x.shape[1])
    for j in range(x.shape[1]):
        col = x[:, j]
        if centrable[j]:
            centers[j] = np.average(col, weights=w)
        spread = float(np.max(np.abs(col - centers[j]))) if len(col) else 0.0
        scales[j] = power_of_two_scale(spread)
    return Basis(centers, scales, spec.all_powers)


@dataclass(frozen=True)
class Core:
    """The numbers every statistic is computed from (weights w, unit variance scale)."""

    b: np.ndarray  # coefficients, scaled basis
    inv_scaled: np.ndarray  # (T'WT)^-1, scaled basis
    beta: np.ndarray  # coefficients, raw units
    inv_raw: np.ndarray  # (X'WX)^-1, raw units
    residuals: np.ndarray
    leverage: np.ndarray  # w_i t_i' (T'WT)^-1 t_i
    sse: float
    sst: float  # about the weighted mean with an intercept, about zero without
    cond: float  # 2-norm condition number of the unit-column scaled design
    method: str  # "qr", "cholesky" or "exact"
    error_bound: float  # estimated relative error of the double-precision solve
    basis: Basis
    gram: np.ndarray  # T'WT, scaled basis


def _alias_error(spec: ModelSpec, col: int, x: np.ndarray) -> ModelError:
    terms = spec.terms
    if spec.kind == "polynomial":
        distinct = len(np.unique(x[:, 0]))
        if distinct < spec.degree + 1:
            return ModelError(distinct_shortage(spec.degree, distinct), ModelErrorKind.SHORTAGE)
    if col == 0:
        return ModelError(f"term {terms[col]} is zero in every row used", ModelErrorKind.ALIASED)
    before = ", ".join(terms[:col])
    return ModelError(f"term {terms[col]} is aliased: its column is a combination of "
                      f"{before} (within a relative {ALIAS_TOL:g}); drop it, or add rows where "
                      "it varies independently", ModelErrorKind.ALIASED)


def _leverage(q_source: np.ndarray, rinv: np.ndarray) -> np.ndarray:
    """Row sums of squares of q_source @ rinv, in chunks to bound memory."""
    n = q_source.shape[0]
    h = np.empty(n)
    for s in range(0, n, _CHUNK):
        blk = q_source[s : s + _CHUNK] @ rinv
        h[s : s + _CHUNK] = np.einsum("ij,ij->i", blk, blk)
    return h


def solve(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, spec: ModelSpec) -> Core:
    """Weighted least squares of y on the model's columns; raises ModelError if singular."""
    n = len(y)
    basis = choose_basis(x, w, spec)
    an = basis.design(x)  # becomes the weighted, unit-column design in place
    p = an.shape[1]
    sw = None if w is None else np.sqrt(w)
    if sw is not None:
        an *= sw[:, None]
    z = y if sw is None else y * sw
    norms = np.sqrt(np.einsum("ij,ij->j", an, an))
    for j in range(p):
        if not norms[j] > 0:
            raise _alias_error(spec, j, x)
    an /= norms
    method = "qr"
    r_fac = None
    if n >= CHOLESKY_MIN_ROWS:
        try:
            r_fac = np.linalg.cholesky(an.T @ an).T
        except np.linalg.LinAlgError:
            r_fac = None
        if r_fac is not None and np.min(np.abs(np.diag(r_fac))) > CHOLESKY_MIN_DIAG:
            method = "cholesky"
        else:
            r_fac = None
    if r_fac is None:
        q, r_fac = np.linalg.qr(an)
    diag = np.abs(np.diag(r_fac))
    for j in range(p):
        if not diag[j] > ALIAS_TOL:
            raise _alias_error(spec, j, x)
    rinv = np.linalg.inv(np.triu(r_fac))
    inv_n = rinv @ rinv.T  # (An'An)^-1
    if method == "qr":
        bn = rinv @ (q.T @ z)
        h = np.einsum("ij,ij->i", q, q)
        del q
    else:
        bn = inv_n @ (an.T @ z)
        bn = bn + inv_n @ (an.T @ (z - an @ bn))  # corrected semi-normal equations
        h = _leverage(an, rinv)
    resid_w = z - an @ bn
    del an
    b = bn / norms
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(resid_w))):
        raise ModelError(_too_large(y, x), ModelErrorKind.SCALE)
    outer = np.outer(norms, norms)
    inv_scaled = inv_n / outer
    gram = (r_fac.T @ r_fac) * outer
    sv = np.linalg.svd(r_fac, compute_uv=False)
    cond = float(sv[0] / sv[-1])

    raw = basis.raw_map()
    try:
        beta = np.array([float(sum(m * Fraction(float(v)) for m, v in zip(row, b)))
                         for row in raw])
    except OverflowError:
        raise ModelError(_too_large(y, x), ModelErrorKind.SCALE) from None
    mf = np.array([[float(v) for v in row] for row in raw])
    inv_raw = mf @ inv_scaled @ mf.T
    resid = resid_w if sw is None else resid_w / sw
    sse = float(resid_w @ resid_w)
    sst = weighted_sst(y, w) if spec.intercept else float(z @ z)
    if not (np.isfinite(sse) and np.isfinite(sst)):
        raise ModelError(_too_large(y, x), ModelErrorKind.SCALE)

    fitn = float(np.linalg.norm(z - resid_w))
    bound = _error_bound(cond, p, bn, norms, mf, beta, inv_n, inv_raw, z, fitn, sse, sst)
    core = Core(b, inv_scaled, beta, inv_raw, resid, h, sse, sst, cond, method, bound, basis,
                gram)
    if bound > ACCEPT_ERROR and n * p * p <= EXACT_BUDGET:
        core = _exact(x, y, w, spec, basis, core)
    return core


def weighted_sst(y: np.ndarray, w: np.ndarray | None) -> float:
    """Total sum of squares about the (weighted) mean, two-pass."""
    d = y - np.average(y, weights=w)
    return float(d @ d) if w is None else float(np.sum(w * d * d))


def _error_bound(cond, p, bn, norms, mf, beta, inv_n, inv_raw, z, fitn, sse, sst) -> float:
    """First-order estimate of the worst relative error among the reported quantities.

    Least-squares perturbation theory for a backward-stable solve (normwise, on the unit-
    column basis), carried to each raw-unit coefficient and variance through the basis
    change, whose cancellation can cost digits the basis itself does not lose.
    """
    rnorm = np.sqrt(sse)
    tan = rnorm / fitn if fitn > 0 else np.inf
    e_b = EPS * (p * cond + cond * cond * tan) * np.sqrt(p)
    db = e_b * np.linalg.norm(bn) / norms  # absolute error per scaled coefficient
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_beta = (np.abs(mf) @ db) / np.abs(beta)
        e_c = EPS * p * cond * cond * np.sqrt(p)
        cabs = np.abs(mf) / norms
        d_inv = e_c * np.max(np.abs(inv_n)) * np.sum(cabs, axis=1) ** 2
        rel_se = d_inv / np.abs(np.diag(inv_raw)) / 2
        # residual sum of squares: rounding in y - fitted, relative to the residual itself
        scale = np.sqrt(max(float(z @ z), 0.0))
        rel_sse = 2 * EPS * p * scale / rnorm if rnorm > 0 else np.inf
        rel_r2 = rel_sse * sse / sst / max(1 - sse / sst, 1e-300) if sst > 0 else 0.0
    worst = np.nanmax(np.concatenate([rel_beta, rel_se, [rel_sse / 2, rel_r2]]))
    return float(worst) if np.isfinite(worst) else np.inf


def _too_large(y: np.ndarray, x: np.ndarray) -> str:
    vals = np.abs(np.concatenate([np.ravel(y), np.ravel(x)]))
    vals = vals[np.isfinite(vals) & (vals > 0)]
    lo, hi = (float(vals.min()), float(vals.max())) if vals.size else (0.0, 0.0)
    return (f"the numbers (magnitudes {lo:.3g} to {hi:.3g}) overflow double precision when "
            "squared or raised to the model's powers; rescale the data, e.g. work in "
            "thousands, millions or other units")


def _exact(x, y, w, spec: ModelSpec, basis: Basis, core: Core) -> Core:
    try:
        return _exact_core(x, y, w, spec, basis, core)
    except OverflowError:
        raise ModelError(_too_large(y, x), ModelErrorKind.SCALE) from None


def _exact_core(x, y, w, spec: ModelSpec, basis: Basis, core: Core) -> Core:
    try:
        ex = ExactFit(x, y, w, basis.powers, basis.centers)
    except ExactSingular as err:
        raise _alias_error(spec, err.column, x) from None
    gamma = ex.coef_shifted()  # on prod (x_j - c_j)^e_j
    inv_g = ex.inv_gram_shifted()
    shift = shift_matrix(basis.powers, [Fraction(float(c)) for c in basis.centers])
    p = len(gamma)
    beta = [sum(shift[i][j] * gamma[j] for j in range(p) if shift[i][j]) for i in range(p)]
    s_inv = [[sum(shift[i][m] * inv_g[m][j] for m in range(p) if shift[i][m])
              for j in range(p)] for i in range(p)]
    inv_raw = [[sum(s_inv[i][m] * shift[j][m] for m in range(p) if shift[j][m])
                for j in range(p)] for i in range(p)]
    sc = [np.prod([float(s) ** e for s, e in zip(basis.scales, q)]) for q in basis.powers]
    b = np.array([float(g) * s for g, s in zip(gamma, sc)])  # exact: scales are powers of 2
    inv_scaled = np.array([[float(inv_g[i][j]) * (sc[i] * sc[j]) for j in range(p)]
                           for i in range(p)])
    sst = ex.sst_centered if spec.intercept else ex.sst_uncentered
    return Core(
        b=b,
        inv_scaled=inv_scaled,
        beta=np.array([float(v) for v in beta]),
        inv_raw=np.array([[float(v) for v in row] for row in inv_raw]),
        residuals=np.array([float(r) for r in ex.resid]),
        leverage=core.leverage,
        sse=float(ex.sse),
        sst=float(sst),
        cond=core.cond,
        method="exact",
        error_bound=core.error_bound,
        basis=basis,
        gram=core.gram,
    )
