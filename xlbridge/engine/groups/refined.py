"""The second stage of the grouped solver ("refined"): the scaled design in double-double
arithmetic, the normal-equation sums exact but for a final rounding far below double
precision, one refinement step, and an error estimate held to ``solve.ACCEPT_ERROR``.
"""

from __future__ import annotations

import math

import numpy as np

from ..ddarith import dd_add, dd_div, dd_mul, dd_mv, dd_prod, dd_sum_products, split, two_sum
from ..solve import ACCEPT_ERROR, CHOLESKY_MIN_DIAG, EPS, power_of_two_scale
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

#: Rows per block of groups solved together (a block's arrays stay in the CPU caches).
_BLOCK_ROWS = 16000  # (arrays just under 128 KiB: allocated without fresh pages each time)


def _rsum(a: np.ndarray) -> np.ndarray:
    return np.einsum("bm->b", a)


def _exact_sums(terms: list, m: int, work: np.ndarray | None = None):
    """Row sums of each (hi, lo) in ``terms`` (all |hi| < 1) as (exact sum of the high
    parts, rounded sum of the rest), stacked: the hi are cut on the grid eps*sigma with
    sigma = 2^k >= m + 2, so every partial sum of the cut parts is a representable double
    (exact in any order); the rest, each at most eps*sigma + |lo|, is summed in double."""
    sigma = float(2 ** math.ceil(math.log2(m + 2)))
    shape = (len(terms),) + terms[0][0].shape
    size = math.prod(shape)
    if work is None or work.size < 2 * size:
        work = np.empty(2 * size)
    # views of one buffer reused across blocks (fresh large arrays cost page faults)
    cut = work[:size].reshape(shape)
    rest = work[size:2 * size].reshape(shape)
    for i, (ah, al) in enumerate(terms):
        np.add(ah, sigma, out=cut[i])
        np.subtract(cut[i], sigma, out=cut[i])  # exact (Sterbenz)
        np.subtract(ah, cut[i], out=rest[i])  # exact
        if al is not None:
            rest[i] += al
    return two_sum(np.einsum("sbm->sb", cut), np.einsum("sbm->sb", rest))


def _block_moments(plan: Plan, xcols: list[np.ndarray], y: np.ndarray, w, weighted: bool,
                   tops: dict, out: dict, rows: np.ndarray, work: np.ndarray) -> None:
    """Basis and normal-equation sums of every group of one block, into ``out[...][rows]``.

    xcols[j] and y are (B, m); w is None (no weights, no padding), 0/1 (padding rows 0) or
    the weights (padding rows 0); ``tops`` holds per group the predictors' ranges (lo,
    hi), max w (None without weights) and max|y|. The design is the double-double scaled
    basis (|t| < 1); every sum of its products with the weights and y is exact but for the
    rest sums of ``_exact_sum``."""
    b_n, m = y.shape
    sw = np.full(b_n, float(m)) if w is None else _rsum(w)
    ts = []
    for j, xj in enumerate(xcols):
        if plan.centrable[j]:
            c = (_rsum(xj) if w is None else np.einsum("bm,bm->b", w, xj)) / sw
        else:
            c = np.zeros(b_n)
        s = power_of_two_scale(np.maximum(tops["hi"][:, j] - c, c - tops["lo"][:, j]))
        th, tl = two_sum(xj, -c[:, None])
        inv = (1.0 / s)[:, None]  # exact: s is a power of two
        th *= inv
        tl *= inv
        ts.append((th, tl, split(th)))
        out["centers"][rows, j] = c
        out["scales"][rows, j] = s

    cols: dict[tuple[int, ...], tuple] = {}

    def column(q):  # (hi, lo, split of hi) of the monomial q of the scaled predictors
        if q not in cols:
            j = next(i for i, e in enumerate(q) if e)
            parent = q[:j] + (q[j] - 1,) + q[j + 1:]
            if not any(parent):
                cols[q] = ts[j]
            else:
                ph, pl, psp = column(parent)
                h, lo_ = dd_prod(ph, pl, ts[j][0], ts[j][1], psp, ts[j][2])
                cols[q] = (h, lo_, split(h))
        return cols[q]

    # y and the weights scaled by powers of two (exactly) to below 1 in magnitude, so every
    # summed term is below 1 and one grid serves all sums
    ey = np.frexp(tops["y"])[1]
    y = np.ldexp(y, -ey[:, None])
    if weighted:
        ew = np.frexp(tops["w"])[1]
        w = np.ldexp(w, -ew[:, None])
    else:
        ew = np.zeros(b_n, dtype=ey.dtype)
    wsp = split(w) if weighted else None

    def weigh(h, lo, hsp):  # w * (h + lo) in double-double (exact for 0/1 weights)
        if w is None:
            return h, lo
        if not weighted:
            return w * h, (None if lo is None else w * lo)
        return dd_prod(h, lo, w, None, hsp, wsp)

    terms = []
    for q in plan.moments:
        if not any(q):
            terms.append((np.ones_like(y), None) if w is None else (w, None))
        else:
            terms.append(weigh(*column(q)))
    ysp = split(y)
    wyh, wyl = weigh(y, None, ysp)
    wysp = split(wyh) if w is not None else ysp
    for q in plan.powers:
        if not any(q):
            terms.append((wyh, wyl))
        else:
            ch, cl, csp = column(q)
            terms.append(dd_prod(wyh, wyl, ch, cl, wysp, csp))
    terms.append(dd_prod(wyh, wyl, y, None, wysp, ysp))
    sh, sl = _exact_sums(terms, m, work)
    n_m, p = len(plan.moments), len(plan.powers)
    out["mom_h"][rows] = np.ldexp(sh[:n_m], ew).T
    out["mom_l"][rows] = np.ldexp(sl[:n_m], ew).T
    out["ymom_h"][rows] = np.ldexp(sh[n_m:n_m + p], ew + ey).T
    out["ymom_l"][rows] = np.ldexp(sl[n_m:n_m + p], ew + ey).T
    out["yy_h"][rows] = np.ldexp(sh[-1], ew + 2 * ey)
    out["yy_l"][rows] = np.ldexp(sl[-1], ew + 2 * ey)
    out["m"][rows] = m
    out["aw"][rows] = np.ldexp(1.0, ew)
    out["ay"][rows] = np.ldexp(1.0, ey)


def _solve_groups(plan: Plan, s: dict, n: np.ndarray) -> dict:
    """Coefficients, standard errors, R^2 and the error estimate of groups whose exact
    normal-equation sums are in ``s`` (one row per group); results one row per group."""
    p = len(plan.powers)
    mom_h, mom_l = two_sum(s["mom_h"].T, s["mom_l"].T)
    gh, gl = mom_h[plan.gram_index], mom_l[plan.gram_index]  # (p, p, N)
    hh, hl = two_sum(s["ymom_h"].T, s["ymom_l"].T)
    yyh, yyl = two_sum(s["yy_h"], s["yy_l"])
    norms = np.sqrt(np.einsum("iin->in", gh))
    r_fac = cholesky_upper(gh / norms[:, None, :] / norms[None, :, :])
    ok = np.all(norms > 0, axis=0) & np.all(np.einsum("iin->in", r_fac) > CHOLESKY_MIN_DIAG,
                                            axis=0)
    if not ok.all():
        r_fac[:, :, ~ok] = np.eye(p)[:, :, None]
        norms[:, ~ok] = 1.0
    r_inv = upper_inverse(r_fac)
    c_mat = mm(r_inv, r_inv.transpose(1, 0, 2)) / norms[:, None, :] / norms[None, :, :]

    # one refinement step on the double-double normal equations: b = b0 + C (h - G b0)
    b0 = mv(c_mat, hh)
    gbh, gbl = dd_mv(gh, gl, b0)
    sh, sl = dd_add(hh, hl, -gbh, -gbl)
    d0 = mv(c_mat, sh)
    bh, bl = two_sum(b0, d0)
    # sse = yy - 2 b'h + b'Gb = yy - b'h - b's at b0, s = h - G b0 (stationary in b)
    th, tl = dd_sum_products((hh[e], hl[e], b0[e], None) for e in range(p))
    sse_h, sse_l = dd_add(yyh, yyl, -th, -tl)
    sse_l = sse_l - np.einsum("in,in->n", b0, sh)
    sse = sse_h + sse_l
    if plan.icpt:
        m2h, m2l = dd_div(*dd_mul(hh[0], hl[0], hh[0], hl[0]), gh[0, 0], gl[0, 0])
        sst_h, sst_l = dd_add(yyh, yyl, -m2h, -m2l)
        sst = sst_h + sst_l
        ssr = sum(dd_add(sst_h, sst_l, -sse_h, -sse_l))
    else:
        sst = yyh + yyl
        ssr = sst - sse
    mh, ml = raw_map(plan, s["centers"].T, s["scales"].T)
    beta = raw_beta(plan, mh, ml, bh, bl)
    # variance factors q_k = v_k' G^-1 v_k (v_k = row k of M): from R in double; where
    # that is not accurate enough (far extrapolated raw coefficients), by the form
    # 2 v'u - u'Gu at u = C v, stationary in u, with G and v in double-double
    u = mm(mh, c_mat)  # row k: (C v_k)'
    ur = mm(mh / norms[None, :, :], r_inv)
    q = np.einsum("kjn,kjn->kn", ur, ur)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_q = q_error(p, norms, r_fac, r_inv, u, q)
    # rel_se is about rel_q / 2: accept q from R up to ACCEPT_ERROR
    redo = np.flatnonzero(ok & np.any(rel_q > ACCEPT_ERROR, axis=0))
    if len(redo):
        g2h, g2l, u2 = gh[..., redo], gl[..., redo], u[..., redo]
        m2h_, m2l_ = mh[..., redo], ml[..., redo]
        for kk in range(p):
            vuh, vul = dd_sum_products((m2h_[kk, j], m2l_[kk, j], u2[kk, j], None)
                                       for j in range(p))
            guh, gul = dd_mv(g2h, g2l, u2[kk])
            uguh, ugul = dd_sum_products((guh[j], gul[j], u2[kk, j], None)
                                         for j in range(p))
            q[kk, redo] = (2 * vuh - uguh) + (2 * vul - ugul)
        rel_q[:, redo] = np.nan  # estimated with the stationary form's terms in _bound

    df = n - p
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = sse / df
        se = np.sqrt(q * s2)
        r2 = ssr / sst if plan.icpt else 1.0 - sse / sst
        adj = 1.0 - (sse / sst) * (n - int(plan.icpt)) / df
        bound = _bound(plan, dict(
            m=s["m"], tops=s, norms=norms, c_mat=c_mat, r_inv=r_inv, gh=gh, hh=hh, yy=yyh,
            b=b0, d0=d0, beta=beta, mh=mh, u=u, q=q, sse=sse, sst=sst, ssr=ssr, r2=r2,
            rel_q=rel_q))
    accept = ok & (bound <= ACCEPT_ERROR)
    return {"accept": accept, "beta": beta.T, "se": se.T, "r2": r2, "adj": adj,
            "rmse": np.sqrt(s2), "bound": bound}


def _bound(plan: Plan, v: dict) -> np.ndarray:
    """First-order estimate of the worst relative error among the reported estimates,
    standard errors, residual SD and R^2 of each group (inf where undefined).

    Terms: the sums' rounding (an absolute part from the grid of ``_exact_sums`` and a part
    relative to the sums of absolute terms, bounded by Cauchy-Schwarz with the column
    norms), double-double rounding in the group-level algebra, the refinement's remaining
    error (contraction rho of the approximate inverse C, from the Cholesky factor of the
    rounded Gram matrix), and the second-order errors of the stationary forms; each carried
    to raw units through the basis change with absolute values."""
    p = len(plan.powers)
    m, norms, c_mat, b, beta, u = v["m"], v["norms"], v["c_mat"], v["b"], v["beta"], v["u"]
    sse, sst, ssr, q, tops = v["sse"], v["sst"], v["ssr"], v["q"], v["tops"]
    e2 = EPS * EPS
    # a sum of m terms (scaled to below 1 by the powers of two aw, aw*ay, aw*ay^2): at most
    # m eps (m eps sigma + sum |lo|) with sigma <= 2 (m + 2); the double-double products
    # add a few eps^2 relative to the sum of absolute terms
    grid = 2 * m * m * (m + 2) * e2
    rel = (m + 8 * (plan.degree + 2)) * e2
    a_g, a_h = grid * tops["aw"], grid * tops["aw"] * tops["ay"]
    a_yy = a_h * tops["ay"]
    g_dd = 4 * (p + 4) * e2
    rho = (p + 3) * EPS * p * np.einsum("ijn,ijn->n", v["r_inv"], v["r_inv"])
    root_yy = np.sqrt(np.abs(v["yy"]))
    abs_b = np.abs(b)
    b1 = np.sum(abs_b, axis=0)
    nb = np.einsum("in,in->n", norms, abs_b)
    d0n = np.sqrt(np.einsum("in,in->n", v["d0"] * norms, v["d0"] * norms))
    # |h - G b| errors: data (absolute and relative parts) and double-double rounding
    dh = (a_h + a_g * b1 + norms * (rel * (root_yy + nb))
          + g_dd * (np.abs(v["hh"]) + mv(np.abs(v["gh"]), abs_b)))
    err_b = rho / (1 - rho) * d0n / norms + mv(np.abs(c_mat), dh)
    err_n = np.sqrt(np.einsum("in,in->n", err_b * norms, err_b * norms))
    abs_m = np.abs(v["mh"])
    rel_beta = mv(abs_m, err_b + 2 * g_dd * abs_b) / np.abs(beta)
    sse_err = (a_yy + 2 * a_h * b1 + a_g * b1**2 + (rel + g_dd) * (root_yy + nb) ** 2
               + p * (d0n + err_n) ** 2)
    rel_sse = sse_err / sse + EPS
    if plan.icpt:
        sst_err = 3 * (a_yy + (rel + g_dd) * root_yy**2)
        rel_r2 = (sst_err + sse_err) / ssr + sst_err / sst + 2 * EPS
    else:
        sst_err = a_yy + rel * root_yy**2
        rel_r2 = ((sse_err + sst_err * sse / sst) / sst + EPS) / np.abs(v["r2"])
    abs_u = np.abs(u)
    nu = np.einsum("jn,kjn->kn", norms, abs_u)
    su = np.sum(abs_u, axis=1)
    rel_q = ((a_g * su**2 + (rel + g_dd) * nu**2
              + 2 * g_dd * np.einsum("kjn,kjn->kn", abs_m, abs_u)) / q
             + rho**2 / (1 - rho) ** 2)
    rel_q = np.where(np.isnan(v["rel_q"]), rel_q, v["rel_q"])
    rel_se = (rel_q + rel_sse) / 2 + 2 * EPS
    worst = np.maximum(np.max(rel_beta, axis=0), np.max(rel_se, axis=0))
    worst = np.maximum(worst, np.maximum(rel_sse / 2 + 2 * EPS, rel_r2))
    worst = np.where(rho < 0.01, worst, np.inf)
    return np.where(np.isfinite(worst), worst, np.inf)


def refined_stage(plan: Plan, batch: np.ndarray, n_used: np.ndarray, start: np.ndarray,
                  xcols: list[np.ndarray], ys: np.ndarray, ws: np.ndarray | None,
                  tops: dict) -> dict:
    """The double-double stage for the groups ``batch`` (rows sorted by group in the
    predictor columns xcols, ys, ws)."""
    n_b, k, p = len(batch), plan.spec.k, len(plan.powers)
    sums = {name: np.empty(shape) for name, shape in (
        ("centers", (n_b, k)), ("scales", (n_b, k)),
        ("mom_h", (n_b, len(plan.moments))), ("mom_l", (n_b, len(plan.moments))),
        ("ymom_h", (n_b, p)), ("ymom_l", (n_b, p)), ("yy_h", n_b), ("yy_l", n_b),
        ("m", n_b), ("aw", n_b), ("ay", n_b))}
    tops = {key: v[batch] for key, v in tops.items()}
    work = np.empty(2 * (len(plan.moments) + p + 1) * _BLOCK_ROWS)
    for m, pos in row_blocks(n_used[batch], _BLOCK_ROWS):
        xb, yb, wb = block_arrays(m, batch[pos], n_used, start, xcols, ys, ws)
        blk_tops = {"lo": tops["lo"][pos], "hi": tops["hi"][pos],
                    "y": np.max(np.abs(yb), axis=1),
                    "w": None if ws is None else np.max(wb, axis=1)}
        _block_moments(plan, xb, yb, wb, ws is not None, blk_tops, sums, pos, work)
    chunk = max(256, (1 << 20) // p**2)
    parts = [_solve_groups(plan, {key: v[a:a + chunk] for key, v in sums.items()},
                           n_used[batch[a:a + chunk]]) for a in range(0, n_b, chunk)]
    return {key: np.concatenate([part[key] for part in parts])
            for key in ("accept", "beta", "se", "r2", "adj", "rmse", "bound")}


