"""Accurate least squares: a centered, power-of-two-scaled basis, a backward-stable
factorisation, an a-posteriori error bound, then, only where the bound says the
double-precision answer may not be right to the digits we show, iterative refinement in
double-double arithmetic (refine.py) and, where even that cannot certify the answer, exact
arithmetic (exact.py).

The solve returns a ``Core``: coefficients and (X'WX)^-1 in the scaled basis (for
predictions, which are well conditioned there), the same in raw units, the residuals, the
sums of squares, leverages and the condition number. Everything else is computed from it.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .errors import ModelError, ModelErrorKind, distinct_shortage
from .exact import ExactFit, ExactSingular, shift_matrix
from .refine import binomials, map_pair, raw_map_pair, refine, slice_bits, total_sum_squares
from .terms import ModelSpec
from .threads import blas_threads

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
#: Refinement in double-double arithmetic is tried while the design has at most this many
#: elements (rows x columns; about 50 passes over the design, some 30 ms at the limit);
#: larger fits keep the double-precision answer and its estimate, as the exact refit does
#: above EXACT_BUDGET.
REFINE_BUDGET = 1_000_000
#: Below this many rows the QR factorisation is used; above it, Cholesky on the scaled
#: basis with one corrected semi-normal step (as accurate when the basis is well conditioned).
CHOLESKY_MIN_ROWS = 20_000
#: The Cholesky factor is used only while every diagonal entry of the unit-column factor
#: (the sine of the angle between a column and the span of those before it) exceeds this.
CHOLESKY_MIN_DIAG = 1e-4
_CHUNK = 65_536
#: Column counts whose Gram product is formed with one zero column added: the BLAS here
#: (OpenBLAS, Haswell kernels) takes about twice as long for 3 or 7 columns as for 4 or 8.
#: Each entry of the product is the same sum over the rows either way (the same doubles
#: on this build, checked on the typical fits); were a BLAS to round it differently, the
#: difference would be within the Gram's own rounding, which the Cholesky path's error
#: estimate (_plain_bound) already allows for.
PADDED_GRAM = (3, 7)


@dataclass(frozen=True)
class Basis:
    """Scaled predictors t_j = (x_j - center_j) / scale_j, scale a power of two."""

    centers: np.ndarray
    scales: np.ndarray
    powers: tuple[tuple[int, ...], ...]  # every column, intercept (zeros) first if present

    def design(self, x: np.ndarray, scratch: np.ndarray | None = None,
               out: np.ndarray | None = None) -> np.ndarray:
        """The scaled monomial columns (into ``out``, an n x p Fortran-order array, if
        given); ``scratch`` (an n-vector) holds the scaled predictor of a one-predictor
        model instead of a new array."""
        tbuf = scratch[:, None] if scratch is not None and x.shape[1] == 1 else None
        t = np.subtract(x, self.centers, out=tbuf)
        t /= self.scales  # in place: one n x k temporary at most, not two
        return monomials(t, self.powers, out)

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
        pw = np.array(self.powers, dtype=int).reshape(len(self.powers), -1)
        p = len(pw)
        out = np.ones((p, p))
        for j in range(pw.shape[1]):
            e = pw[:, j]
            diff = e[None, :] - e[:, None]  # row e, column m: m_j - e_j
            ok = diff >= 0
            d = np.where(ok, diff, 0)
            binom = binomials(int(e.max()) if p else 0)[e[None, :], np.where(ok, e[:, None], 0)]
            factor = binom * float(self.scales[j]) ** e[:, None] * float(self.centers[j]) ** d
            out *= np.where(ok, factor, 0.0)
        return out


def monomials(t: np.ndarray, powers: tuple[tuple[int, ...], ...],
              out: np.ndarray | None = None) -> np.ndarray:
    """Columns prod_j t_j^e_j (Fortran order; into ``out`` if given). Each column is one
    multiplication of a column already built (a parent with one exponent lower), written
    in place."""
    n, k = t.shape
    if out is None:
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


def choose_basis(x: np.ndarray, w: np.ndarray | None, spec: ModelSpec,
                 scratch: np.ndarray | None = None) -> Basis:
    """Center each predictor at its (weighted) mean where the model allows it; a column no
    term uses keeps center 0 and scale 1, so its values never matter. ``scratch``, an
    optional n-vector, receives col / pre (no new n-vector per column)."""
    centrable = spec.centrable()
    used = [any(q[j] for q in spec.all_powers) for j in range(x.shape[1])]
    centers = np.zeros(x.shape[1])
    scales = np.ones(x.shape[1])
    for j in range(x.shape[1]):
        col = x[:, j]
        if not used[j] or not len(col):
            continue
        # max|col| and max|col / pre - c / pre| from max(col) and min(col) alone: rounding
        # is monotone, so the largest |value| of a monotone function of col is that at its
        # max or its min; the same doubles as forming the n-vectors, without them
        top, bottom = float(np.max(col)), float(np.min(col))
        pre = float(power_of_two_scale(np.array([max(top, -bottom)]))[0])
        if centrable[j]:  # the mean of col / pre (exact) cannot overflow
            scaled = np.divide(col, pre, out=scratch) if scratch is not None else col / pre
            centers[j] = np.average(scaled, weights=w) * pre
        c = centers[j] / pre
        with np.errstate(over="ignore"):
            spread = max(abs(top / pre - c), abs(bottom / pre - c)) * pre
        if not np.isfinite(spread):
            raise ModelError(f"{spec.predictors[j]} spans more than the double range "
                             f"(values up to {max(top, -bottom):.3g}); rescale it, "
                             "e.g. divide it by 1e300", ModelErrorKind.SCALE)
        scales[j] = power_of_two_scale(spread)
    return Basis(centers, scales, spec.all_powers)


#: Every term of the model, in raw units, must stay within 10^+-TERM_RANGE over the rows
#: used, and each coefficient's natural size (largest |y| over largest |term|) within
#: 10^+-COEF_RANGE: beyond them products overflow or coefficients lose digits as subnormal
#: numbers (the smallest normal double is about 2.2e-308).
TERM_RANGE = 300
COEF_RANGE = 305


def check_terms(x: np.ndarray, y: np.ndarray, spec: ModelSpec) -> None:
    """ModelError(SCALE) naming the first term whose raw column, or whose coefficient, would
    leave the double range, and how to rescale; computed from logarithms, so nothing
    overflows on the way. Columns no term uses are not looked at."""
    if not len(x):
        return
    with np.errstate(divide="ignore"):
        # max|v| as max(max v, -min v): the same doubles, without an |v| temporary
        top = np.log10(np.maximum(np.max(x, axis=0), -np.min(x, axis=0)))
        ytop = float(np.log10(max(np.max(y), -np.min(y)))) if len(y) else -np.inf
    for q, label in zip(spec.powers, spec.terms[int(spec.intercept):]):
        idx = [j for j, e in enumerate(q) if e]
        if any(top[j] == -np.inf for j in idx):
            continue  # a zero column: the alias check names it
        mag = float(sum(q[j] * top[j] for j in idx))
        big = max(idx, key=lambda j: abs(top[j]))
        name = spec.predictors[big]
        hint = f"divide {name} by 1e{round(top[big])}" if top[big] > 0 else \
            f"multiply {name} by 1e{-round(top[big])}"
        if abs(mag) > TERM_RANGE:
            raise ModelError(f"term {label} reaches about 1e{mag:.0f} ({name} up to "
                             f"{10.0 ** top[big]:.3g}), outside the range double precision "
                             f"can compute with; rescale: {hint}", ModelErrorKind.SCALE)
        if np.isfinite(ytop) and abs(ytop - mag) > COEF_RANGE:
            raise ModelError(f"the coefficient of {label} would be about 1e{ytop - mag:.0f}, "
                             "outside the range double precision can hold; rescale y or "
                             f"{name} (e.g. {hint})", ModelErrorKind.SCALE)


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
    method: str  # "qr", "cholesky", "refined" or "exact"
    error_bound: float  # estimated relative error of the double-precision solve
    basis: Basis
    gram: np.ndarray  # T'WT, scaled basis
    #: raw-unit coefficients = raw_map @ scaled-basis coefficients (Basis.raw_map, each
    #: entry rounded once from double-double: raw_map_pair's hi part)
    raw_map: np.ndarray


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
    n, p = q_source.shape
    h = np.empty(n)
    if p > LANE_SUM_MAX:
        for s in range(0, n, _CHUNK):
            blk = q_source[s : s + _CHUNK] @ rinv
            h[s : s + _CHUNK] = np.einsum("ij,ij->i", blk, blk)
        return h
    # Few columns: the chunk's product is formed transposed (p x rows, each row of it one
    # contiguous vector) and its squares summed a column at a time, which is several times
    # faster than einsum's reduction over p entries per row. h is a sum of p nonnegative
    # squares, so any order of summation is within (p - 1) eps relative of the exact sum;
    # the order used (even-numbered and odd-numbered columns summed separately, then
    # added) is the one numpy's einsum used for these sizes, so the doubles are unchanged.
    work = np.empty((p, min(_CHUNK, n)))
    for s in range(0, n, _CHUNK):
        e = min(s + _CHUNK, n)
        blk = np.matmul(rinv.T, q_source[s:e].T, out=work[:, : e - s])
        hs = h[s:e]
        np.multiply(blk[0], blk[0], out=hs)
        for j in range(2, p, 2):
            np.multiply(blk[j], blk[j], out=blk[j])
            hs += blk[j]
        if p > 1:
            odd = blk[1]
            np.multiply(odd, odd, out=odd)
            for j in range(3, p, 2):
                np.multiply(blk[j], blk[j], out=blk[j])
                odd += blk[j]
            hs += odd
    return h


#: Up to this many columns the leverage sums its squares column by column (see _leverage).
LANE_SUM_MAX = 7


def _design_top(an: np.ndarray, x: np.ndarray, w: np.ndarray | None) -> float:
    """max|an| of the unit-column design. One predictor without weights: every column is
    fl(t^e) / norm with t = fl(x - c) / s, each step rounded monotonically, so |entry| never
    decreases with |t|, and |t| is largest at the row of max x or of min x; those two rows
    hold the same maximum as the whole design (the same double, two short reads instead
    of two passes over n x p)."""
    if not an.size:
        return 0.0
    if w is None and x.shape[1] == 1:
        col = x[:, 0]
        an = an[[int(np.argmax(col)), int(np.argmin(col))]]
    return float(max(np.max(an), -np.min(an)))


def solve(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, spec: ModelSpec,
          certify: bool = True) -> Core:
    """Weighted least squares of y on the model's columns; raises ModelError if singular.

    ``Core.method`` names the path that produced the answer: "qr" or "cholesky" (double
    precision, accepted by its error estimate), "refined" (iterative refinement in
    double-double arithmetic, accepted by its own estimate) or "exact" (the integer refit,
    the last resort when neither estimate is below ACCEPT_ERROR). ``certify=False`` stops
    after the double-precision solve (its ``error_bound`` says how good it is): for inner
    loops whose answers are not shown, such as reweighting steps and cross-validation."""
    with blas_threads(0):  # one thread, except around the factorisation below
        return _solve(x, y, w, spec, certify)


def _solve(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, spec: ModelSpec,
           certify: bool) -> Core:
    n, p = len(y), len(spec.all_powers)
    # one n-vector of scratch for the whole solve (at 10^6 rows every fresh n-vector costs
    # about as much in first-touch page faults as the arithmetic written into it); for a
    # padded Gram product (PADDED_GRAM) it is the column after the design's
    padded = p in PADDED_GRAM and n >= CHOLESKY_MIN_ROWS
    full = np.empty((n, p + 1), order="F") if padded else None
    scratch = full[:, p] if padded else np.empty(n)
    basis = choose_basis(x, w, spec, scratch)
    # becomes the weighted, unit-column design in place
    an = basis.design(x, scratch, out=full[:, :p] if padded else None)
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
            with blas_threads(n * p * p):
                if padded:
                    scratch.fill(0.0)
                    gram_n = (full.T @ full)[:p, :p]
                else:
                    gram_n = an.T @ an
            r_fac = np.linalg.cholesky(gram_n).T
        except np.linalg.LinAlgError:
            r_fac = None
        if r_fac is not None and np.min(np.abs(np.diag(r_fac))) > CHOLESKY_MIN_DIAG:
            method = "cholesky"
        else:
            r_fac = None
    if r_fac is None:
        with blas_threads(n * p * p):
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
        r0 = np.matmul(an, bn, out=scratch)
        np.subtract(z, r0, out=r0)
        bn = bn + inv_n @ (an.T @ r0)  # corrected semi-normal equations
        del r0  # a view of scratch
        h = _leverage(an, rinv)
    resid_w = an @ bn
    np.subtract(z, resid_w, out=resid_w)
    # largest |entry| of the unit-column design, for the residual's rounding estimate
    amax = _design_top(an, x, w)
    del an
    b = bn / norms
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(resid_w))):
        raise ModelError(too_large(y, x), ModelErrorKind.SCALE)
    outer = np.outer(norms, norms)
    inv_scaled = inv_n / outer
    gram = (r_fac.T @ r_fac) * outer
    sv = np.linalg.svd(r_fac, compute_uv=False)
    cond = float(sv[0] / sv[-1])

    m_hi, m_lo = raw_map_pair(basis.centers, basis.scales, basis.powers)
    beta = _raw_coef(m_hi, m_lo, b, np.zeros(p), y, x)
    inv_raw = m_hi @ inv_scaled @ m_hi.T
    resid = resid_w if sw is None else resid_w / sw
    sse = float(np.sum(np.multiply(resid_w, resid_w, out=scratch)))
    sst = weighted_sst(y, w, scratch) if spec.intercept else float(np.sum(
        np.multiply(z, z, out=scratch)))
    if not (np.isfinite(sse) and np.isfinite(sst) and np.all(np.isfinite(inv_raw))):
        raise ModelError(too_large(y, x), ModelErrorKind.SCALE)

    bound = _plain_bound(p, bn, norms, m_hi, beta, inv_n, inv_raw, z, resid_w, amax, sse,
                         sst, scratch)
    del scratch, full  # the design too (full holds it when padded): not kept for refinement
    core = Core(b, inv_scaled, beta, inv_raw, resid, h, sse, sst, cond, method, bound, basis,
                gram, m_hi)
    if bound <= ACCEPT_ERROR or not certify:
        return core
    refined = _refined(x, y, w, spec, core, m_hi, m_lo) if n * p <= REFINE_BUDGET else None
    if refined is not None and refined.error_bound <= ACCEPT_ERROR:
        return refined
    if n * p * p <= EXACT_BUDGET:
        return _exact(x, y, w, spec, basis, core)
    if refined is not None and refined.error_bound < core.error_bound:
        return refined
    return core


def _raw_coef(m_hi, m_lo, b_hi, b_lo, y, x) -> np.ndarray:
    """Raw-unit coefficients M (b_hi + b_lo), rounded once from double-double."""
    hi, lo = map_pair(m_hi, m_lo, b_hi, b_lo)
    beta = hi + lo
    if not np.all(np.isfinite(beta)):
        raise ModelError(too_large(y, x), ModelErrorKind.SCALE)
    return beta


def _refined(x, y, w, spec: ModelSpec, core: Core, m_hi, m_lo) -> Core | None:
    """The fit refined in double-double arithmetic, with its own error estimate (see
    refine.py), or None where refinement does not apply (numbers out of range)."""
    basis = core.basis
    ref = refine(x, y, w, basis.centers, basis.scales, basis.powers, core.b,
                 core.inv_scaled)
    if ref is None:
        return None
    n, p = len(y), len(basis.powers)
    bh, bl = map_pair(m_hi, m_lo, ref.b_hi, ref.b_lo)
    beta = bh + bl
    yh, yl = map_pair(m_hi, m_lo, ref.inv_hi, ref.inv_lo)  # M X
    ih, il = map_pair(m_hi, m_lo, yh.T, yl.T)  # M (M X)' = M X M' (X symmetric)
    inv_raw = ih + il
    resid = ref.resid_hi + ref.resid_lo
    sst = total_sum_squares(y, w, spec.intercept)
    if not (np.isfinite(sst) and np.all(np.isfinite(beta)) and np.all(np.isfinite(inv_raw))
            and np.isfinite(ref.sse)):
        return None
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        mabs = np.abs(m_hi)
        # the double-double products with M keep about 2 slice_bits(p) + 53 bits of each
        # row's largest term; their leftover is charged here on top of the refined errors
        tiny = 8 * EPS * 2.0 ** (-2 * slice_bits(p))
        rowmax = mabs.max(axis=1)
        rel_beta = (mabs @ ref.err_b + tiny * rowmax * float(np.sum(np.abs(ref.b_hi))))
        rel_beta = rel_beta / np.abs(beta)
        # |M| E |M|' with E the entrywise error of the refined inverse, plus the leftover of
        # the double-double products with M, charged on |M| |X| |M|'
        spread = np.einsum("ij,jk,ik->i", mabs, ref.err_inv + tiny * np.abs(ref.inv_hi), mabs)
        rel_inv = spread / np.abs(np.diag(inv_raw))
        wmax = 1.0 if w is None else float(np.max(w))
        d_sse = wmax * (2 * ref.err_resid * float(np.sum(np.abs(resid)))
                        + n * ref.err_resid**2)
        rel_sse = (d_sse / ref.sse if ref.sse > 0 else np.inf) + 4 * EPS  # accurate sum
        rel_r2 = _r2_error(rel_sse, 4 * EPS, ref.sse, sst)
    worst = np.nanmax(np.concatenate([rel_beta, (rel_inv + rel_sse) / 2, [rel_sse / 2, rel_r2]]))
    bound = float(worst) if np.isfinite(worst) else np.inf
    return Core(b=ref.b_hi, inv_scaled=ref.inv_hi, beta=beta, inv_raw=inv_raw,
                residuals=resid, leverage=core.leverage, sse=ref.sse, sst=sst,
                cond=core.cond, method="refined", error_bound=bound, basis=basis,
                gram=core.gram, raw_map=m_hi)


def weighted_sst(y: np.ndarray, w: np.ndarray | None, out: np.ndarray | None = None) -> float:
    """Total sum of squares about the (weighted) mean, two-pass, summed pairwise; ``out``
    (an optional n-vector) holds the working values."""
    d = np.subtract(y, np.average(y, weights=w), out=out)
    if w is not None:
        d2 = w * d
        d2 *= d  # w * d * d, multiplied in the same order
        return float(np.sum(d2))
    return float(np.sum(np.multiply(d, d, out=d)))


#: Rounding errors of the fitted values are independent of the residuals' signs once the
#: residuals are well above the rounding level, so their sum against the residuals grows
#: like a root-sum-square; this many of those (a tail probability far below 1e-12 under the
#: usual model of rounding as independent, mean-zero errors) bound it.
RSS_FACTOR = 8.0


def _plain_bound(p, bn, norms, m_hi, beta, inv_n, inv_raw, z, resid_w, amax, sse,
                 sst, scratch=None) -> float:
    """First-order estimate of the worst relative error among the reported quantities of a
    double-precision solve on the unit-column basis A (weighted response z).

    Coefficients: a backward-stable QR (or the corrected semi-normal equations on this well
    conditioned basis) solves a problem with columns perturbed by ||dA_j|| <= eta (columnwise
    backward error; eta = p sqrt(p) eps, with the design's own rounding). To first order
    db = (A'A)^-1 dA'r - A^+ (dA b) + A^+ dz, so |db_j| <= eta (||r|| (|C| 1)_j +
    sqrt(C_jj) (||b||_1 + ||z||)) with C = (A'A)^-1 (row j of A^+ has norm sqrt(C_jj)).
    That is carried to raw units through |M|, whose cancellation can cost digits.
    Inverse: dC = -C (dA'A + A'dA) C gives |dC_jk| <= eta (sqrt(C_jj) (|C| 1)_k + sqrt(C_kk)
    (|C| 1)_j), carried through |M| . |M|'. Residual sum of squares: each residual is off by
    at most u_i = (p + 1) eps (|z_i| + max|A| ||b||_1); against the residuals that sums as a
    root-sum-square (RSS_FACTOR), plus the always-positive sum of u_i^2, plus the pairwise
    summation's (log2 n + 20) eps.
    """
    n = len(z)
    eta = p * np.sqrt(p) * EPS
    rnorm = float(np.sqrt(sse))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        cabs = np.abs(inv_n)
        rowsum = cabs.sum(axis=1)
        sd = np.sqrt(np.diag(inv_n))
        bn1 = float(np.sum(np.abs(bn)))
        db = eta * (rnorm * rowsum + sd * (bn1 + float(np.sqrt(z @ z)))) / norms
        mabs = np.abs(m_hi)
        rel_beta = (mabs @ db) / np.abs(beta)
        ms = mabs / norms
        d_inv = 2 * eta * (ms @ sd) * (ms @ rowsum)
        rel_inv = d_inv / np.abs(np.diag(inv_raw))
        a = np.abs(z, out=scratch)
        a += amax * bn1  # u = (p + 1) eps a
        aa = float(a @ a)
        ra = np.multiply(resid_w, a, out=a)
        gam = (p + 1) * EPS
        cross = RSS_FACTOR * 2 * gam * float(np.sqrt(ra @ ra))
        rel_sse = ((cross + gam * gam * aa) / sse if sse > 0 else np.inf) + (
            np.log2(max(n, 2)) + 20) * EPS
        # SST and SSE (pairwise sums) are off by at most (log2 n + 20) eps relative
        rel_r2 = _r2_error(rel_sse, (np.log2(max(n, 2)) + 20) * EPS, sse, sst)
    worst = np.nanmax(np.concatenate([rel_beta, (rel_inv + rel_sse) / 2, [rel_sse / 2, rel_r2]]))
    return float(worst) if np.isfinite(worst) else np.inf


def _r2_error(rel_sse: float, rel_sst: float, sse: float, sst: float) -> float:
    """Relative error of R^2 = 1 - SSE/SST from the relative errors of SSE and SST. Below
    R^2 = 1/2 the subtraction itself limits the relative digits of R^2 whichever path
    computed SSE (every path reports 1 - SSE/SST from doubles), so R^2 is held to twice its
    absolute error there."""
    if not sst > 0:
        return 0.0
    return (rel_sse + rel_sst) * (sse / sst) / max(1 - sse / sst, 0.5)


def too_large(y: np.ndarray, x: np.ndarray) -> str:
    """The message for data whose numbers leave the double range in the fit."""
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
        raise ModelError(too_large(y, x), ModelErrorKind.SCALE) from None


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
        raw_map=core.raw_map,
    )
