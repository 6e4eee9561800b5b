"""Iterative refinement of a least-squares fit in double-double arithmetic.

The double-precision solve gives coefficients ``b`` and an approximate inverse ``X`` of the
Gram matrix G = T'WT on the scaled basis T. Refinement keeps the same basis but evaluates
everything whose rounding limits the answer in about twice the working precision:

- the design itself: t = (x - c) / s is held as a pair of doubles (x - c by an error-free
  sum; dividing by the power of two s is exact), and each monomial column as a pair;
- the residual r = y - T b and the normal-equation right-hand side g = T'W r;
- the Gram matrix G and the residual I - G X of its inverse;
- the sums of squares SSE and SST (to a few units in the last place).

The long sums are matrix products of *slices*: each operand is cut into pieces of ``bits``
significant bits on a common grid (an error-free split, one addition and one subtraction of
a large constant), so that a product of two pieces summed over m terms stays below 2^53 and
the BLAS product is exact whatever its order of summation. The few small leftover terms are
formed in plain double, where their rounding is below 2^-(2 bits + 53) of the whole.

With an accurate g, the step b <- b + X g converges to the least-squares solution of the
data as stored (not merely to a solution as accurate as the double-precision one), at the
rate ||I - X G|| per step, which is itself measured here.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import comb

import numpy as np

from .ddarith import dd_add, split, two_prod, two_sum

EPS = 2.0**-53
#: Refinement steps at most; each normally gains about 14 digits on the scaled basis.
MAX_STEPS = 4


def dd_mul(ah, al, bh, bl):
    """(ah + al) * (bh + bl) as a normalised pair, relative error about 2^-104 (the cross
    terms summed before they meet the product's error, as the refinement's bound assumes;
    ddarith.dd_mul adds them one at a time)."""
    p, e = two_prod(ah, bh)
    e = e + (ah * bl + al * bh)
    s = p + e
    return s, e - (s - p)


def slice_bits(m: int) -> int:
    """Bits per slice so that m products of two slices sum exactly: 2 bits + log2 m <= 52."""
    return max(1, (52 - int(m).bit_length()) // 2)


def top_of(a: np.ndarray) -> float:
    """max|a| (0 for an empty array), without an |a| temporary."""
    return float(max(np.max(a), -np.min(a))) if np.size(a) else 0.0


def slices(hi: np.ndarray, lo: np.ndarray | float, bits: int,
           top: float | None = None) -> list[np.ndarray]:
    """[S1, S2, R, S1 + S2] with hi + lo == S1 + S2 + R up to the rounding of R (below
    2^-(2 bits) of max|hi|, so R's own rounding is under 2^-(2 bits + 53) of it). S1 and S2
    are integer multiples of 2^(mu - bits) and 2^(mu - 2 bits) with |S_k| <= 2^mu, mu from
    max|hi|; their sum (kept for reuse) is exact. ``top`` (max|hi| of a whole array of
    which hi is a block of rows) puts every block on the grid of the whole: the slices of a
    block are then exactly the rows of the whole array's slices."""
    if top is None:
        top = top_of(hi)
    if top == 0.0:
        zero = np.zeros_like(hi)
        return [zero, zero, zero + lo, zero]
    mu = int(np.frexp(top)[1])  # top < 2^mu
    parts = []
    rest = hi
    # written in place where the operand is our own temporary: for an n x p design each new
    # array is fresh memory, whose page faults cost more than the arithmetic
    for k in (1, 2):
        # sigma in [2^(tau-1), 2^tau) with ulp(sigma) = 2^(mu - k bits): rest + sigma rounds
        # rest to that grid (|rest| <= 2^(tau - 2)) and subtracting sigma again is exact
        sigma = np.ldexp(0.75, mu - k * bits + 53)
        q = rest + sigma
        q -= sigma
        if k == 1:
            rest = rest - q  # exact: q is rest rounded to a coarser grid
        else:
            rest -= q
        parts.append(q)
    rest += lo
    parts.append(rest)
    parts.append(parts[0] + parts[1])
    return parts


def _accumulate(exact: list[np.ndarray], rest: np.ndarray):
    """Sum of exactly computed arrays plus a small inexact one, as a normalised pair."""
    s = exact[0]
    e = np.zeros_like(s)
    for term in exact[1:]:
        s, err = two_sum(s, term)
        e = e + err
    e = e + rest
    h = s + e
    return h, e - (h - s)


def product_terms(a: list[np.ndarray], b: list[np.ndarray]):
    """The terms of ``sliced_product``: ([S1 @ S1, S1 @ S2, S2 @ S1], rest), the first three
    exact, the rest (S2 @ S2 and the remainder terms) plain double."""
    a1, a2, ar, a12 = a
    b1, b2, br, b12 = b
    rest = a2 @ b2 + a12 @ br + ar @ b12 + ar @ br
    return [a1 @ b1, a1 @ b2, a2 @ b1], rest


def sliced_product(a: list[np.ndarray], b: list[np.ndarray]):
    """a @ b for sliced operands (see ``slices``) as a pair (hi, lo): S1 @ S1, S1 @ S2 and
    S2 @ S1 are exact and summed without error; S2 @ S2 (below 2^-(bits_a + bits_b) of the
    whole) and the remainder terms are plain double, their rounding below 2^-(bits_a +
    bits_b + 53) of the whole."""
    return _accumulate(*product_terms(a, b))


def gram_terms(a: list[np.ndarray]):
    """The terms of ``sliced_gram``, as ``product_terms`` gives them."""
    a1, a2, ar, a12 = a
    cross = a1.T @ a2
    mixed = a12.T @ ar
    rest = a2.T @ a2 + mixed + mixed.T + ar.T @ ar
    return [a1.T @ a1, cross, cross.T], rest


def sliced_gram(a: list[np.ndarray]):
    """a' a for a sliced operand (see ``slices``) as a pair (hi, lo), as ``sliced_product``
    of a' and a but with five products instead of seven: S2'S1 is the transpose of S1'S2
    (both exact, so equal to the last bit) and R'S12 that of S12'R."""
    return _accumulate(*gram_terms(a))


#: Rows per block of the long sums over the design and the residuals: the slices of a block
#: (4 x BLOCK x p doubles) and its temporaries replace arrays the size of the design, and
#: at 8,192 rows the per-block cost of the BLAS calls is negligible beside the arithmetic.
#: Blocks change no exact term: the slice width comes from the whole length m (2 bits +
#: log2 m <= 52, ``slice_bits``), so any partial sum of the m products of two slices, a
#: block's or a sum of blocks', is an integer multiple of the grid below 2^53 of it, and
#: adding the blocks' exact results in plain double is exact in any order. The plain-double
#: rest is rounded once per block and once per block addition: at most (BLOCK + m / BLOCK)
#: eps of its terms, within the m eps its bound allows a single long sum.
BLOCK = 8_192


def spans(n: int) -> list[tuple[int, int]]:
    """(start, stop) of the row blocks of n rows."""
    return [(s, min(s + BLOCK, n)) for s in range(0, n, BLOCK)]


class BlockSums:
    """Block results of ``product_terms`` / ``gram_terms`` added up: the exact terms stay
    exact (see BLOCK), the rest in plain double; ``pair()`` as ``sliced_product`` gives it."""

    def __init__(self) -> None:
        self.exact: list[np.ndarray] | None = None
        self.rest: np.ndarray | None = None

    def add(self, terms) -> None:
        exact, rest = terms
        if self.exact is None:  # the first block as it is: one block is the whole product
            self.exact, self.rest = exact, rest
            return
        self.exact = [a + b for a, b in zip(self.exact, exact)]
        self.rest = self.rest + rest

    def pair(self):
        return _accumulate(self.exact, self.rest)


def block_top(n: int, block) -> float:
    """max|block(s, e)| over the row blocks of n rows (NaN if any is NaN)."""
    return float(np.max([top_of(block(s, e)) for s, e in spans(n)])) if n else 0.0


def design_pair(x: np.ndarray, centers: np.ndarray, scales: np.ndarray,
                powers: tuple[tuple[int, ...], ...]) -> tuple[np.ndarray, np.ndarray]:
    """The scaled monomial design as a pair (hi, lo) of n x p arrays, each column correct
    to about 2^-104 relative (x - c by an error-free sum, exact power-of-two scaling, one
    double-double product per column), built by row blocks (row by row arithmetic: the
    blocks only bound the temporaries)."""
    n = x.shape[0]
    hi = np.empty((n, len(powers)), order="F")
    lo = np.empty((n, len(powers)), order="F")
    for s, e in spans(n):
        hi[s:e], lo[s:e] = _design_rows(x[s:e], centers, scales, powers)
    return hi, lo


def _design_rows(x, centers, scales, powers):
    n, k = x.shape
    th, tl = [], []
    for j in range(k):
        h, lo = two_sum(x[:, j], -float(centers[j]))
        th.append(h / scales[j])
        tl.append(lo / scales[j])
    p = len(powers)
    hi = np.empty((n, p), order="F")
    lo = np.empty((n, p), order="F")
    done: dict[tuple[int, ...], int] = {}
    for i, q in enumerate(powers):
        if not any(q):
            hi[:, i], lo[:, i] = 1.0, 0.0
        else:
            j = next(j for j, e in enumerate(q) if e)
            parent = q[:j] + (q[j] - 1,) + q[j + 1:]
            if not any(parent):
                hi[:, i], lo[:, i] = th[j], tl[j]
            else:
                if parent not in done:  # a parent outside the model: build it on the side
                    ph, pl = _design_rows(x, centers, scales, (parent,))
                    ph, pl = ph[:, 0], pl[:, 0]
                else:
                    ph, pl = hi[:, done[parent]], lo[:, done[parent]]
                hi[:, i], lo[:, i] = dd_mul(ph, pl, th[j], tl[j])
        done[q] = i
    return hi, lo


@dataclass(frozen=True)
class Refined:
    """A refined fit on the scaled basis. Pairs (hi, lo) carry about 2x double precision."""

    b_hi: np.ndarray
    b_lo: np.ndarray
    inv_hi: np.ndarray  # (T'WT)^-1
    inv_lo: np.ndarray
    resid_hi: np.ndarray  # y - T b (unweighted)
    resid_lo: np.ndarray
    sse: float  # weighted sum of squared residuals, to a few units in the last place
    err_resid: float  # estimated error of each residual (absolute, at most)
    err_b: np.ndarray  # estimated absolute error of each coefficient (b_hi + b_lo)
    err_inv: np.ndarray  # estimated absolute error of each entry of the inverse
    steps: int


def refine(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, centers: np.ndarray,
           scales: np.ndarray, powers: tuple[tuple[int, ...], ...], b0: np.ndarray,
           inv0: np.ndarray) -> Refined | None:
    """Refine ``b0`` and ``inv0`` (coefficients and Gram inverse on the scaled basis).
    Returns None when the numbers are out of the range where the splits are exact, or when
    ``inv0`` is too poor a preconditioner to converge (||I - G X0|| >= 1/2)."""
    with np.errstate(over="ignore", invalid="ignore"):
        out = _refine(x, y, w, centers, scales, powers, b0, inv0)
    return out


def _mirror(a: np.ndarray) -> np.ndarray:
    """The upper triangle copied onto the lower (averaging would round each pair's hi part
    without carrying the rounding into its lo part)."""
    return np.triu(a) + np.triu(a, 1).T


def _finite(*arrays) -> bool:
    return all(np.all(np.isfinite(a)) for a in arrays)


def _refine(x, y, w, centers, scales, powers, b0, inv0):
    n = len(y)
    p = len(powers)
    th, tl = design_pair(x, centers, scales, powers)
    # balance columns by powers of two (exact) so that norms below are on a unit scale
    cmax = np.maximum(np.max(th, axis=0), -np.min(th, axis=0))
    # x, y and w are finite (checked by fit); a design too large for double shows here
    if not np.all(np.isfinite(cmax)) or np.any(cmax == 0):
        return None
    d = np.ldexp(1.0, -np.frexp(cmax)[1])  # column j of T times d_j has max in [1/2, 1)
    th *= d  # exact (powers of two), in place: no second n x p pair
    tl *= d
    bits = slice_bits(max(n, p))
    # the design's slices are made block by block on the grid of the whole design (see
    # BLOCK): never more than a block of them at once
    t_top = top_of(th)

    def t_slices(s, e):
        return slices(th[s:e], tl[s:e], bits, t_top)

    # one pass for G = D T'WT D and the residual r = y - T b0 (b0 on the balanced columns)
    bits_b = max(1, 52 - int(p).bit_length() - bits)
    b_hi, b_lo = b0 / d, np.zeros(p)
    b_s = slices(b_hi, b_lo, bits_b)
    r_hi, r_lo = np.empty(n), np.empty(n)
    gram = BlockSums()
    wt_top = None if w is None else block_top(n, lambda s, e: w[s:e, None] * th[s:e])
    for s, e in spans(n):
        t_s = t_slices(s, e)
        r_hi[s:e], r_lo[s:e] = _residual(y[s:e], t_s, b_s)
        if w is None:
            gram.add(gram_terms(t_s))
        else:
            wb = w[s:e, None]
            wh, wl = two_prod(wb, th[s:e])
            wl += wb * tl[s:e]
            gram.add(product_terms([part.T for part in t_s], slices(wh, wl, bits, wt_top)))
    g_hi, g_lo = gram.pair()
    g_hi, g_lo = _mirror(g_hi), _mirror(g_lo)  # exactly symmetric, upper triangle kept
    x0 = inv0 / np.outer(d, d)  # (D T'WT D)^-1
    x0 = (x0 + x0.T) / 2
    # residual of the inverse, E = I - G X0, in double-double; X1 = X0 + X0 E
    gx_hi, gx_lo = sliced_product(slices(g_hi, g_lo, slice_bits(p)), slices(x0, 0.0,
                                                                          slice_bits(p)))
    e_hi, e_lo = two_sum(np.eye(p), -gx_hi)
    e_mat = e_hi + (e_lo - gx_lo)
    corr = x0 @ e_mat
    inv_hi, inv_lo = two_sum(x0, corr)
    inv_hi, inv_lo = _mirror(inv_hi), _mirror(inv_lo)
    rho = float(np.max(np.sum(np.abs(e_mat), axis=1)))  # ||I - G X0|| (infinity norm)
    if not _finite(g_hi, g_lo, inv_hi, inv_lo) or not rho < 0.5:
        return None
    norm_x = float(np.max(np.sum(np.abs(x0), axis=1)))
    # error of X1: the neglected ||X0|| ||E||^2 / (1 - ||E||), the rounding of the correction
    # X0 E, and G's own error (slices exact; leftover terms below 2^-(2 bits) * eps * m)
    g_err = 4.0 * EPS * 2.0 ** (-2 * bits) * n * float(np.max(np.abs(g_hi)))
    err_inv = (norm_x * rho * rho / (1 - rho) + 4 * EPS * float(np.max(np.abs(corr)))
               + 2 * norm_x * norm_x * g_err)  # any entry, balanced columns

    bits_u = max(1, 52 - int(n).bit_length() - bits)
    steps, tail = 0, np.inf
    updated = 0.0  # error added to each residual by the cheap updates below
    while True:
        # the error left after a step is at most rho / (1 - rho) times that step (the step
        # is, to first order, the error it removed): stop when that is far below the last
        # bit of the coefficients, when the step stalls, or after MAX_STEPS
        if steps >= MAX_STEPS or tail <= 2.0**-20 * EPS * float(np.max(np.abs(b_hi))):
            break
        u_top = top_of(r_hi) if w is None else block_top(n, lambda s, e: w[s:e] * r_hi[s:e])
        step = BlockSums()
        for s, e in spans(n):
            if w is None:
                u_hi, u_lo = r_hi[s:e], r_lo[s:e]
            else:
                wb = w[s:e]
                u_hi, u_lo = two_prod(wb, r_hi[s:e])
                u_lo += wb * r_lo[s:e]
            step.add(product_terms([part.T for part in t_slices(s, e)],
                                   slices(u_hi, u_lo, bits_u, u_top)))
        gh, gl = step.pair()
        delta = x0 @ (gh + gl)
        size = float(np.max(np.abs(delta)))
        if not np.isfinite(size):
            return None
        b_hi, b_lo = dd_add(b_hi, b_lo, delta, 0.0)
        steps += 1
        # r - T delta in plain double: the step is tiny beside b, so its rounding (at most
        # (p + 2) eps sum|delta| per row, |T| <= 1 on balanced columns) is far below r's
        for s, e in spans(n):
            r_hi[s:e], r_lo[s:e] = dd_add(r_hi[s:e], r_lo[s:e],
                                          -(th[s:e] @ delta + tl[s:e] @ delta), 0.0)
        updated += (p + 2) * EPS * float(np.sum(np.abs(delta)))
        new_tail = rho / (1 - rho) * size
        stalled = new_tail >= tail
        tail = new_tail
        if stalled:
            break
    th = tl = None  # the design pair is not needed below: free it
    # the fixed point's own error: the residual is right to about 8 eps 2^-(2 bits) of the
    # terms of y - T b, and g = T'W r to the same relative to its terms; X0 carries that
    # into b (balanced columns: |T| <= 1, so ||T_j|| <= sqrt(n))
    row = top_of(y) + float(np.sum(np.abs(b_hi)))
    err_r = 8 * EPS * 2.0 ** (-2 * min(bits, bits_b)) * row + updated  # per row
    wmax = 1.0 if w is None else float(np.max(w))
    fixed = norm_x * n * wmax * (err_r + 8 * EPS * 2.0 ** (-2 * min(bits, bits_u)) * top_of(
        r_hi))
    err_b = np.full(p, tail + fixed) * d  # back on the scaled (unbalanced) columns
    sse = weighted_sum_squares(r_hi, r_lo, w)
    dd2 = np.outer(d, d)
    return Refined(b_hi * d, b_lo * d, inv_hi * dd2, inv_lo * dd2, r_hi, r_lo, sse, err_r,
                   err_b, err_inv * dd2, steps)


def _residual(y, t_s, b_s):
    """y - T b as a pair, with T b from exact slice products (b sliced in ``b_s``)."""
    ph, pl = sliced_product(t_s, b_s)
    s, e = two_sum(y, -ph)
    e = e - pl
    h = s + e
    return h, e - (h - s)


def raw_map_pair(centers: np.ndarray, scales: np.ndarray,
                 powers: tuple[tuple[int, ...], ...]) -> tuple[np.ndarray, np.ndarray]:
    """The map from scaled-basis to raw-unit coefficients (``Basis.raw_map``) as a pair of
    p x p arrays: entry [m, e] = prod_j binom(e_j, m_j) (-c_j)^(e_j - m_j) / s_j^e_j, each
    to about 2^-100 relative (powers of c and the binomial products in double-double, the
    powers of two exact)."""
    pw = np.array(powers, dtype=int).reshape(len(powers), -1)
    p, k = pw.shape
    hi, lo = np.ones((p, p)), np.zeros((p, p))
    for j in range(k):
        e = pw[:, j]
        diff = e[None, :] - e[:, None]  # row m, column e: e_j - m_j
        top = int(diff.max()) if p else 0
        ch, cl = [1.0], [0.0]
        for _ in range(max(top, 0)):
            h, lo_ = dd_mul(ch[-1], cl[-1], -float(centers[j]), 0.0)
            ch.append(float(h))
            cl.append(float(lo_))
        ok = diff >= 0
        idx = np.where(ok, diff, 0)
        binom = binomials(int(e.max()))[e[None, :], np.where(ok, e[:, None], 0)]
        fh, fl = two_prod(np.array(ch)[idx], binom)  # binomials <= 252: exact pair
        fl = fl + np.array(cl)[idx] * binom
        fh, fl = np.where(ok, fh, 0.0), np.where(ok, fl, 0.0)
        hi, lo = dd_mul(hi, lo, fh, fl)
    div = np.prod(np.asarray(scales, dtype=float)[None, :] ** pw, axis=1)  # powers of 2
    return hi / div[None, :], lo / div[None, :]


def binomials(top: int) -> np.ndarray:
    """Table [n, k] of binom(n, k) for 0 <= k <= n <= top (0 above the diagonal)."""
    out = np.zeros((top + 1, top + 1))
    for n in range(top + 1):
        out[n, : n + 1] = [comb(n, k) for k in range(n + 1)]
    return out


def map_pair(m_hi: np.ndarray, m_lo: np.ndarray, v_hi: np.ndarray, v_lo) -> tuple[
        np.ndarray, np.ndarray]:
    """(m_hi + m_lo) @ (v_hi + v_lo) for a small matrix and a vector or matrix, as a pair.
    Rows of m are balanced by powers of two first, so each row keeps its own precision."""
    top = np.max(np.abs(m_hi), axis=1)
    rs = np.ldexp(1.0, -np.frexp(np.where(top > 0, top, 1.0))[1])
    rs_b = rs[:, None]
    m_inner = m_hi.shape[1]
    bits = slice_bits(m_inner)
    bits_v = max(1, 52 - int(m_inner).bit_length() - bits)
    ph, pl = sliced_product(slices(m_hi * rs_b, m_lo * rs_b, bits), slices(v_hi, v_lo, bits_v))
    scale = rs if ph.ndim == 1 else rs[:, None]
    return ph / scale, pl / scale


def accurate_sum(hi: np.ndarray, lo: np.ndarray | float = 0.0) -> float:
    """sum(hi + lo) of a vector hi to a few units in the last place: hi is cut into two
    slices whose sums are exact (n terms of at most 52 - log2 n bits on a common grid); the
    leftover, below 2^-2(52 - log2 n) of max|hi|, and lo are summed in plain double."""
    return _sum_blocks(int(np.size(hi)), lambda s, e: (
        hi[s:e], lo[s:e] if np.ndim(lo) else lo))


def _sum_blocks(n: int, pair, top: float | None = None) -> float:
    """``accurate_sum`` of a vector given by row blocks, pair(s, e) = (hi, lo) of rows s:e,
    on the grid of the whole (``top`` = max|hi|, found by a first pass if not given): each
    block's slice sums are exact and so is their total (see BLOCK)."""
    if n == 0:
        return 0.0
    bits = max(1, 52 - n.bit_length())
    parts = spans(n)
    if top is None and len(parts) > 1:
        top = block_top(n, lambda s, e: pair(s, e)[0])
    sums = None
    for s, e in parts:
        s1, s2, rest, _ = slices(*pair(s, e), bits, top)
        block = [float(np.sum(s1)), float(np.sum(s2)), float(np.sum(rest))]
        sums = block if sums is None else [a + b for a, b in zip(sums, block)]
    h, e = two_sum(sums[0], sums[1])
    return float(h + (e + sums[2]))


def _squares(h, lo, w):
    """(w (h + lo)^2) as an unnormalised pair (squares as exact products)."""
    if w is None:
        hh, hl = split(h)
        sq = h * h
        err = ((hh * hh - sq) + 2 * hh * hl) + hl * hl  # two_prod(h, h), one split
        err += 2 * h * lo
    else:
        wh, wl = two_prod(w, h)
        wl += w * lo
        sq, err = two_prod(wh, h)
        err += wh * lo + wl * h
    return sq, err


def weighted_sum_squares(h: np.ndarray, lo: np.ndarray | float,
                         w: np.ndarray | None) -> float:
    """sum(w (h + lo)^2) to a few units in the last place (squares as exact products),
    by row blocks."""
    def pair(s, e):
        return _squares(h[s:e], lo[s:e] if np.ndim(lo) else lo, None if w is None else w[s:e])

    # without weights the largest square is the square of the largest |h| (rounding is
    # monotone), which spares the first pass
    top = top_of(h) ** 2 if w is None and len(h) > BLOCK else None
    return _sum_blocks(len(h), pair, top)


def total_sum_squares(y: np.ndarray, w: np.ndarray | None, centered: bool) -> float:
    """sum(w (y - ybar)^2) (or sum(w y^2)) to a few units in the last place. The mean m is
    a rounded double; y - m is exact as a pair, and sum(w (y - m)^2) exceeds the wanted sum
    by W (ybar - m)^2, W = sum(w), which is subtracted (ybar - m from an accurate sum)."""
    if not centered:
        return weighted_sum_squares(y, 0.0, w)
    m = float(np.average(y, weights=w))

    def pair(s, e):
        dh, dl = two_sum(y[s:e], -m)
        return dh, dl, _squares(dh, dl, None if w is None else w[s:e])

    # first pass: the grid of the squares, and ybar - m = dev / W, which is tiny (m is the
    # rounded mean), so plain sums give the correction to a relative error of about
    # eps log2 n, far below SST's last place
    dev, tops = 0.0, []
    for s, e in spans(len(y)):
        dh, dl, (sq, _) = pair(s, e)
        if w is None:
            dev += float(np.sum(dh) + np.sum(dl))
        else:
            dev += float(np.sum(w[s:e] * dh) + np.sum(w[s:e] * dl))
        tops.append(top_of(sq))
    total = _sum_blocks(len(y), lambda s, e: pair(s, e)[2], float(np.max(tops)))
    big_w = float(len(y)) if w is None else float(np.sum(w))
    return total - dev * dev / big_w
