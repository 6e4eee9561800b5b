"""The first stage of the grouped solver ("batched"): double-precision fits of every group
from the Gram matrix of the scaled design, one corrected semi-normal step, and a first-order
bound of the rounding error; groups above ``BATCH_ACCEPT`` go on to the next stage.
"""

from __future__ import annotations

import math

import numpy as np

from ..solve import CHOLESKY_MIN_DIAG, EPS, power_of_two_scale
from .stacks import (
    Plan,
    block_arrays,
    cholesky_upper,
    mm,
    mv,
    q_error,
    raw_beta,
    raw_map,
    row_blocks,
    upper_inverse,
)

#: A group is answered by the double-precision first stage when the estimated relative
#: error of every estimate, standard error, residual SD and R^2 it reports is at most this.
#: Looser than solve.ACCEPT_ERROR (1e-14), the single fit's own target near the digits NIST
#: StRD certifies, because the promise here is agreement with ``fit`` to 12 significant
#: digits: fit's answer is within 1e-14 of the exact one, so a group accepted here agrees with
#: it to about 1.1e-13, with a margin of nine to 1e-12. Groups above it go on to the
#: double-double stage, held to ACCEPT_ERROR as before.
BATCH_ACCEPT = 1e-13
#: Rows per chunk of groups whose group-level algebra is done at once
#: (fewer, longer array operations), and per block of its passes over their rows.
_FIRST_CHUNK_ROWS = 1 << 20
_FIRST_BLOCK_ROWS = 1 << 15
#: Groups up to this many rows are summed in one pass; longer ones as sums of partial sums.
_FLAT_SUM_ROWS = 8


def first_stage(plan: Plan, batch: np.ndarray, n_used: np.ndarray, start: np.ndarray,
                xcols: list[np.ndarray], ys: np.ndarray, ws: np.ndarray | None,
                tops: dict) -> dict:
    """Double-precision fits of the groups ``batch`` with their error estimates (one row
    per group of ``batch``); ``accept`` where the estimate is at most BATCH_ACCEPT. Writes
    the groups' predictor ranges into ``tops["lo"]`` and ``tops["hi"]`` (groups, k)."""
    n_b, p = len(batch), len(plan.powers)
    out = {"beta": np.empty((n_b, p)), "se": np.empty((n_b, p))}
    for key in ("r2", "adj", "rmse", "bound"):
        out[key] = np.empty(n_b)
    for m, pos in row_blocks(n_used[batch], _FIRST_CHUNK_ROWS):
        res = _first_chunk(plan, m, batch[pos], n_used, start, xcols, ys, ws, tops)
        for key, v in res.items():
            out[key][pos] = v
    out["accept"] = out["bound"] <= BATCH_ACCEPT
    return out


def _scaled_columns(plan: Plan, xcols: list[np.ndarray], centers: np.ndarray,
                    scales: np.ndarray):
    """The monomial q of the scaled predictors of (m, B) blocks, C order, as a function of
    q (None for the constant; each built once, from a parent with one exponent lower)."""
    ts = []
    for j, xj in enumerate(xcols):
        if plan.centrable[j]:
            t = np.subtract(xj, centers[j], order="C")
        else:
            t = np.array(xj, order="C")
        t *= 1.0 / scales[j]  # exact: a power of two
        ts.append(t)
    cols: dict[tuple[int, ...], np.ndarray] = {}

    def column(q):
        if not any(q):
            return None
        if q not in cols:
            j = next(i for i, e in enumerate(q) if e)
            parent = q[:j] + (q[j] - 1,) + q[j + 1:]
            cols[q] = ts[j] if not any(parent) else column(parent) * ts[j]
        return cols[q]

    return column


def _row_summer(m: int):
    """(sum, error count) for the column sums of C-order (m, B) blocks: sum(a) is the sum
    of each column, with rounding error at most error count * eps times its sum of absolute
    terms, whatever the order of the additions. Up to _FLAT_SUM_ROWS rows one sum (m - 1);
    beyond, the sum of sums of c = ceil(sqrt(m)) rows each, c + m // c + (m mod c) - 2, so
    the count grows like 2 sqrt(m)."""
    if m <= _FLAT_SUM_ROWS:
        return (lambda a: np.einsum("mb->b", a)), m - 1
    c = math.isqrt(m - 1) + 1
    n_full, rest = divmod(m, c)

    def two_level(a):
        total = a[:n_full * c].reshape(n_full, c, -1).sum(axis=1).sum(axis=0)
        return total + a[n_full * c:].sum(axis=0) if rest else total
    return two_level, c + n_full + rest - 2


def _first_chunk(plan: Plan, m: int, gi: np.ndarray, n_used: np.ndarray,
                 start: np.ndarray, xcols: list[np.ndarray], ys: np.ndarray,
                 ws: np.ndarray | None, tops: dict) -> dict:
    """The first stage for groups ``gi``, padded to m rows: two passes over their rows in
    blocks of _FIRST_BLOCK_ROWS (sums; residuals) around the group-level algebra. Row
    blocks are (m, B), group-level arrays have the group axis last."""
    n_g, k, p = len(gi), len(xcols), len(plan.powers)
    n = n_used[gi].astype(float)
    lo, hi = np.empty((k, n_g)), np.empty((k, n_g))
    rsum, n_sum = _row_summer(m)  # for the sums whose rounding the bound counts

    def flat(a, b=None):
        return np.einsum("mb->b", a) if b is None else np.einsum("mb,mb->b", a, b)

    sw, cy, yy = np.empty(n_g), np.zeros(n_g), np.empty(n_g)
    centers, scales = np.zeros((k, n_g)), np.empty((k, n_g))
    mom = np.empty((len(plan.moments), n_g))
    h = np.empty((p, n_g))
    step = max(1, _FIRST_BLOCK_ROWS // m)
    blocks = [slice(a, a + step) for a in range(0, n_g, step)]

    for sl in blocks:
        xb, yb, wb = block_arrays(m, gi[sl], n_used, start, xcols, ys, ws, True)
        sw[sl] = float(m) if wb is None else flat(wb)
        for j, xj in enumerate(xb):
            np.min(xj, axis=0, out=lo[j, sl])  # padding rows repeat a row of the group
            np.max(xj, axis=0, out=hi[j, sl])
            if plan.centrable[j]:
                centers[j, sl] = (flat(xj) if wb is None else flat(wb, xj)) / sw[sl]
            scales[j, sl] = power_of_two_scale(np.maximum(hi[j, sl] - centers[j, sl],
                                                          centers[j, sl] - lo[j, sl]))
        column = _scaled_columns(plan, xb, centers[:, sl], scales[:, sl])
        for i, q in enumerate(plan.moments):
            col = column(q)
            mom[i, sl] = sw[sl] if col is None else rsum(col if wb is None else wb * col)
        # y about its group mean when the model has an intercept, which absorbs the shift
        # exactly: the residuals then cancel only as much as the fit itself explains
        if plan.icpt:
            cy[sl] = (flat(yb) if wb is None else flat(wb, yb)) / sw[sl]
            yb = np.subtract(yb, cy[sl], order="C")
        else:
            yb = np.array(yb, order="C")
        wy = yb if wb is None else wb * yb
        for e, q in enumerate(plan.powers):
            col = column(q)
            h[e, sl] = flat(wy) if col is None else flat(wy, col)
        yy[sl] = rsum(wy * yb)
    tops["lo"][gi] = lo.T
    tops["hi"][gi] = hi.T

    g = mom[plan.gram_index]
    norms = np.sqrt(np.einsum("iin->in", g))
    r_fac = cholesky_upper(g / norms[:, None, :] / norms[None, :, :])
    ok = np.all(norms > 0, axis=0) & np.all(np.einsum("iin->in", r_fac) > CHOLESKY_MIN_DIAG,
                                            axis=0)
    if not ok.all():
        r_fac[:, :, ~ok] = np.eye(p)[:, :, None]
        norms[:, ~ok] = 1.0
    r_inv = upper_inverse(r_fac)
    cn = mm(r_inv, r_inv.transpose(1, 0, 2))  # (G_n)^-1, unit-column basis
    b0 = mv(cn, h / norms) / norms

    # residuals row by row, then one correction step b0 + C T'W r (corrected semi-normal
    # equations): the step sees the design itself, not the rounded Gram matrix
    sse0 = np.empty(n_g)
    s_n = np.empty((p, n_g))
    for sl in blocks:
        xb, yb, wb = block_arrays(m, gi[sl], n_used, start, xcols, ys, ws, True)
        column = _scaled_columns(plan, xb, centers[:, sl], scales[:, sl])
        r = np.subtract(yb, cy[sl], order="C") if plan.icpt else np.array(yb, order="C")
        tmp = np.empty_like(r)
        for e, q in enumerate(plan.powers):
            col = column(q)
            if col is None:
                r -= b0[e, sl]
            else:
                np.multiply(col, b0[e, sl], out=tmp)
                r -= tmp
        wr = r if wb is None else np.multiply(wb, r, out=tmp)
        sse0[sl] = rsum(wr * r)
        for e, q in enumerate(plan.powers):
            col = column(q)
            s_n[e, sl] = rsum(wr) if col is None else rsum(wr * col)
    s_n /= norms
    d_n = mv(cn, s_n)
    sse = sse0 - np.einsum("in,in->n", d_n, s_n)  # at b0 + d, to second order

    mh, ml = raw_map(plan, centers, scales)
    beta = raw_beta(plan, mh, ml, b0, d_n / norms, cy if plan.icpt else None)
    u = mm(mh, cn / norms[:, None, :] / norms[None, :, :])  # row k: (C v_k)'
    ur = mm(mh / norms[None, :, :], r_inv)
    q_var = np.einsum("kjn,kjn->kn", ur, ur)
    df = n - p
    s2 = sse / df
    r2 = 1.0 - sse / yy  # yy: about the mean with an intercept (two-pass), else about 0
    adj = 1.0 - (1.0 - r2) * (n - int(plan.icpt)) / df
    bound = _first_bound(plan, m, n_sum, dict(
        norms=norms, r_fac=r_fac, r_inv=r_inv, b0=b0, d_n=d_n, s_n=s_n, sse0=sse0, sse=sse,
        sst=yy, r2=r2, sw=sw, cy=cy, beta=beta, mh=mh, u=u, q=q_var))
    return {"beta": beta.T, "se": np.sqrt(q_var * s2).T, "r2": r2, "adj": adj,
            "rmse": np.sqrt(s2), "bound": np.where(ok, bound, np.inf)}


def _first_bound(plan: Plan, m: int, n_sum: int, v: dict) -> np.ndarray:
    """First-order estimate of the worst relative error among the first stage's reported
    estimates, standard errors, residual SD and R^2 of each group (inf where undefined),
    with respect to the exact least-squares answer for the stored data.

    Rounding, for groups of m (padded) rows and highest degree d: a scaled monomial of
    degree j errs by (2j - 1) eps (its predictors' centering, then j - 1 products); a row
    sum by at most g_sum = (n_sum + 4d + 2) eps times its sum of absolute terms (n_sum from
    ``_row_summer``, the terms' own rounding on top), so |dG_n| <= g_sum (unit columns,
    Cauchy-Schwarz) and each entry of T_n'W r errs by g_sum ||r||; each residual (y
    centered, then p products and subtractions, on the rounded monomials) errs by
    g_row = (2p + 2d) eps times |y| + |T||b|, in norm dr <= g_row (||y|| + sum |b_n|).
    Cholesky: backward error (p + 1) eps |R'||R|. The correction step contracts the first
    solution's error by rho <= ||G_n^-1|| ||dG_n + E|| and leaves the error C (T'W dr +
    summation): in raw coefficient k at most sqrt(q_k) dr (q_k = v_k'C v_k; Cauchy-Schwarz
    on the functional) plus g_sum ||r|| sum_e |(C v_k)_e| norm_e. The residual sum of
    squares is summed from the rounded residuals; the variance factors q_k come from R of
    the rounded Gram matrix (``_q_error``).
    """
    p, deg = len(plan.powers), plan.degree
    norms, r_inv, d_n, s_n = v["norms"], v["r_inv"], v["d_n"], v["s_n"]
    u, q, sse, sst = v["u"], v["q"], v["sse"], v["sst"]
    g_sum = (n_sum + 4 * deg + 2) * EPS
    g_row = (2 * p + 2 * deg) * EPS
    rinv2 = np.einsum("ijn,ijn->n", r_inv, r_inv)  # ||R^-1||_F^2 >= ||G_n^-1||_2
    rho = p * (g_sum + (p + 3) * EPS) * rinv2
    rnorm = np.sqrt(np.maximum(v["sse0"], 0.0))
    dnorm = np.sqrt(np.einsum("in,in->n", d_n, d_n))
    snorm = np.sqrt(np.einsum("in,in->n", s_n, s_n))
    dr = g_row * (np.sqrt(sst) + np.sum(np.abs(v["b0"] * norms), axis=0))
    abs_m, abs_u = np.abs(v["mh"]), np.abs(u)
    left = rho / (1 - rho) * dnorm  # what the step leaves of the first solution's error
    err_beta = (np.einsum("kjn,jn->kn", abs_m, 1.0 / norms) * left
                + np.sqrt(q) * dr + g_sum * rnorm * np.einsum("kjn,jn->kn", abs_u, norms)
                + 16 * p * EPS * EPS * mv(abs_m, np.abs(v["b0"])))
    rel_beta = err_beta / np.abs(v["beta"]) + 2 * EPS
    # normwise error of the solution (unit-column basis), for the second-order terms
    err_n = left + np.sqrt(rinv2) * dr + rinv2 * np.sqrt(p) * g_sum * rnorm
    sse_err = (2 * rnorm * dr + dr * dr + g_sum * v["sse0"] + p * err_n**2
               + dnorm * (rho * snorm + 2 * np.sqrt(p) * (g_sum * rnorm + dr)))
    rel_sse = sse_err / sse + EPS
    if plan.icpt:
        # two-pass about the rounded mean cy: bias sw (error of cy)^2, that error at most
        # (m + 1) eps sum w|y| / sw + m eps |cy| (sum w rounded too), and
        # sum w|y| / sw <= sqrt(sst / sw) + |cy|
        d_cy = (m + 1) * EPS * (np.sqrt(sst / v["sw"]) + 2 * np.abs(v["cy"]))
        rel_sst = g_sum + 2 * EPS + v["sw"] * d_cy**2 / sst
    else:
        rel_sst = g_sum
    rel_r2 = (rel_sse + rel_sst) * (sse / sst) / np.abs(v["r2"]) + EPS
    rel_q = (q_error(p, norms, v["r_fac"], r_inv, u, q, g_sum)
             + 2 * EPS * np.einsum("kjn,kjn->kn", abs_m, abs_u) / q)
    rel_se = (rel_q + rel_sse) / 2 + 2 * EPS
    worst = np.maximum(np.max(rel_beta, axis=0), np.max(rel_se, axis=0))
    worst = np.maximum(worst, np.maximum(rel_sse / 2 + 2 * EPS, rel_r2))
    worst = np.where((rho < 0.01) & (sse > 0) & (sst > 0), worst, np.inf)
    return np.where(np.isfinite(worst), worst, np.inf)


