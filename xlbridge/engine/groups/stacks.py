"""Shared pieces of the grouped solver: the model plan, algebra on stacks of small matrices
(one per group, the group axis last), the raw-unit map, and the blocks groups are solved in.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import comb

import numpy as np

from ..ddarith import dd_mul, dd_sum_products
from ..solve import EPS
from ..terms import ModelSpec


@dataclass(frozen=True)
class Plan:
    """Everything about the model that the blocks and group chunks share."""

    spec: ModelSpec
    powers: tuple[tuple[int, ...], ...]
    centrable: tuple[bool, ...]
    icpt: bool  # column 0 is the intercept
    degree: int  # highest total degree
    moments: tuple[tuple[int, ...], ...]  # distinct exponent sums of two columns
    gram_index: np.ndarray  # (p, p): Gram entry -> moment
    raw_pairs: tuple  # (row, col, ((predictor, exponent of -c, binomial), ...), col exponents)


def make_plan(spec: ModelSpec) -> Plan:
    powers = spec.all_powers
    sums = sorted({tuple(a + b for a, b in zip(e, f)) for e in powers for f in powers},
                  key=lambda q: (sum(q), q))
    where = {q: i for i, q in enumerate(sums)}
    gram = np.array([[where[tuple(a + b for a, b in zip(e, f))] for f in powers]
                     for e in powers], dtype=np.intp)
    pairs = []
    for i, mp in enumerate(powers):
        for col, ep in enumerate(powers):
            if all(a <= b for a, b in zip(mp, ep)):
                fac = tuple((j, ep[j] - mp[j], comb(ep[j], mp[j])) for j in range(spec.k)
                            if ep[j] > mp[j])
                pairs.append((i, col, fac, ep))
    return Plan(spec, powers, spec.centrable(), spec.intercept, spec.top_order(),
                tuple(sums), gram, tuple(pairs))


# Group-level algebra: matrices are (p, p, N) and vectors (p, N) arrays, the group axis
# last, so every matrix entry is one contiguous vector over the groups.


def mm(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Matrix products a @ b of stacks (p, q, N) and (q, r, N)."""
    out = a[:, 0, None, :] * b[None, 0, :, :]
    for k in range(1, a.shape[1]):
        out += a[:, k, None, :] * b[None, k, :, :]
    return out


def mv(a: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Matrix-vector products of stacks (p, q, N) and (q, N)."""
    out = a[:, 0, :] * v[0]
    for k in range(1, a.shape[1]):
        out += a[:, k, :] * v[k]
    return out


def upper_inverse(r: np.ndarray) -> np.ndarray:
    """Inverse of a stack (p, p, N) of upper-triangular matrices (back substitution)."""
    p = r.shape[0]
    if p > 8:
        return np.moveaxis(np.linalg.inv(np.moveaxis(r, -1, 0)), 0, -1)
    out = np.zeros_like(r)
    for j in range(p):
        out[j, j] = 1.0 / r[j, j]
        for i in range(j - 1, -1, -1):
            acc = np.einsum("kn,kn->n", r[i, i + 1:j + 1], out[i + 1:j + 1, j])
            out[i, j] = -acc / r[i, i]
    return out


def cholesky_upper(a: np.ndarray) -> np.ndarray:
    """Upper R with R'R = a for a stack (p, p, N) of symmetric matrices; NaN where a is not
    positive definite (so one bad group does not stop the others)."""
    p = a.shape[0]
    r = np.zeros_like(a)
    for j in range(p):
        d2 = a[j, j] - np.einsum("kn,kn->n", r[:j, j], r[:j, j])
        d = np.sqrt(np.where(d2 > 0, d2, np.nan))
        r[j, j] = d
        if j + 1 < p:
            off = a[j, j + 1:] - np.einsum("kn,kln->ln", r[:j, j], r[:j, j + 1:])
            r[j, j + 1:] = off / d
    return r


def raw_map(plan: Plan, centers: np.ndarray, scales: np.ndarray):
    """M (double-double, (p, p, N)) with raw coefficients = M @ scaled coefficients, the
    map of ``Basis.raw_map``: M[m, e] = prod_j binom(e_j, m_j) (-c_j)^(e_j - m_j) / s_j^e_j.
    ``centers`` and ``scales`` are (k, N)."""
    n_g = centers.shape[1]
    p = len(plan.powers)
    mh = np.zeros((p, p, n_g))
    ml = np.zeros((p, p, n_g))
    pw: dict[tuple[int, int], tuple] = {}

    def power(j, e):  # (-c_j)^e in double-double
        if (j, e) not in pw:
            pw[j, e] = ((-centers[j], np.zeros(n_g)) if e == 1 else
                        dd_mul(*power(j, e - 1), -centers[j], None))
        return pw[j, e]

    log2s = np.frexp(scales)[1] - 1
    for i, col, fac, ep in plan.raw_pairs:
        hi = lo = None
        for j, e, binom in fac:
            ph, pl = power(j, e)
            hi, lo = (ph, pl) if hi is None else dd_mul(hi, lo, ph, pl)
            if binom & (binom - 1):  # not a power of two: one more product
                hi, lo = dd_mul(hi, lo, np.full(n_g, float(binom)), None)
            elif binom != 1:
                hi, lo = hi * binom, lo * binom  # exact
        if not any(ep):
            mh[i, col] = 1.0 if hi is None else hi
            ml[i, col] = 0.0 if lo is None else lo
            continue
        shift = -(np.array(ep, dtype=np.int32) @ log2s)  # int32: ldexp's fast loop
        mh[i, col] = np.ldexp(1.0 if hi is None else hi, shift)  # exact: a power of two
        if lo is not None:
            ml[i, col] = np.ldexp(lo, shift)
    return mh, ml


def raw_beta(plan: Plan, mh, ml, bh, bl, shift=None) -> np.ndarray:
    """beta = M b in double-double over the nonzero entries of M, rounded once; ``shift``
    (per group) is added to the intercept (column 0) first."""
    p = len(plan.powers)
    rows: list[list] = [[] for _ in range(p)]
    for i, col, _fac, _ep in plan.raw_pairs:
        rows[i].append((mh[i, col], ml[i, col], bh[col], bl[col]))
    if shift is not None:
        rows[0].append((shift, None, np.ones_like(shift), None))
    return np.array([sum(dd_sum_products(r)) for r in rows])


def q_error(p: int, norms, r_fac, r_inv, u, q, gram_err: float = EPS) -> np.ndarray:
    """Relative error estimate of q_k computed in double from the unit-column Cholesky
    factor R of the rounded Gram matrix: R'R = G_n + E with |E| <= gram_err |G_n| (the
    Gram matrix's own rounding: eps for the double-double one; |G_n| <= 1) + (p + 1) eps
    |R'||R| (the factor's backward error), so |dq| <= |u_n|'|E||u_n|; plus rounding in the
    triangular solve (p eps, amplified by the factor's condition number, ||R||_F ||R^-1||_F)
    and in v (eps)."""
    un = np.abs(u * norms[None, :, :])
    ru = mm(un, np.abs(r_fac).transpose(1, 0, 2))
    cond = np.sqrt(p * np.einsum("ijn,ijn->n", r_inv, r_inv))
    return ((gram_err * np.sum(un, axis=1) ** 2 + (p + 1) * EPS * np.sum(ru * ru, axis=1))
            / q + 2 * p * EPS * cond + 2 * EPS)


# --- blocks of groups ----------------------------------------------------------------------


def row_blocks(sizes: np.ndarray, block_rows: int):
    """(padded length m, positions) of the blocks the groups with ``sizes`` rows are solved
    in: groups of one exact size share blocks when there are enough of them, the rest are
    padded to a few bucket sizes."""
    counts = np.bincount(sizes)
    shared = counts[sizes] >= 256
    sizes = np.where(shared, sizes, bucket_size(sizes))
    for m in np.unique(sizes).tolist():
        members = np.flatnonzero(sizes == m)
        step = max(1, block_rows // m)
        for a in range(0, len(members), step):
            yield m, members[a:a + step]


def block_arrays(m: int, gi: np.ndarray, n_used: np.ndarray, start: np.ndarray,
                 xcols: list[np.ndarray], ys: np.ndarray, ws: np.ndarray | None,
                 by_row: bool = False):
    """(B, m) arrays (group, row within the group) of the rows of groups ``gi`` (rows sorted
    by group), or (m, B) ones if ``by_row``: predictors, y and the weights (None: no weights
    and no padding; padding rows repeat the group's last row, so its range is unchanged,
    with weight 0). Whole consecutive groups come as views (transposed if ``by_row``: the
    first arithmetic on them writes C order), but the weights in C order."""
    nb = n_used[gi]
    s0 = start[gi]
    b_n = len(gi)
    if nb.min() == m == nb.max() and (b_n == 1 or np.all(np.diff(s0) == m)):
        sl = slice(int(s0[0]), int(s0[0]) + b_n * m)

        def view(a):
            v = a[sl].reshape(b_n, m)
            return v.T if by_row else v
        return ([view(xc) for xc in xcols], view(ys),
                None if ws is None else np.ascontiguousarray(view(ws)))
    ar = np.arange(m)
    if by_row:
        idx = s0 + np.minimum(ar[:, None], nb - 1)
        pad = ar[:, None] >= nb
    else:
        idx = s0[:, None] + np.minimum(ar, nb[:, None] - 1)
        pad = ar >= nb[:, None]
    if ws is not None:
        wb = np.where(pad, 0.0, ws[idx])
    else:
        wb = (~pad).astype(float) if pad.any() else None
    return [xc[idx] for xc in xcols], ys[idx], wb


def bucket_size(n: np.ndarray) -> np.ndarray:
    """Padded block length for groups of n rows: n rounded up to a multiple of 4 up to 64,
    then to within 1/8 (at most 12.5 % padding)."""
    n = np.asarray(n, dtype=np.int64)
    small = ((n + 3) // 4) * 4
    step = np.left_shift(1, np.maximum(np.floor(np.log2(np.maximum(n, 1))).astype(np.int64)
                                       - 3, 0))
    large = ((n + step - 1) // step) * step
    return np.where(n <= 64, small, large)

