"""Double-double arithmetic: error-free transformations on arrays of doubles.

A double-double number is an unevaluated sum hi + lo of two doubles; these are the classical
error-free transformations (Knuth's two-sum, Veltkamp's split, Dekker's product) and the
sums and products built on them.
"""

from __future__ import annotations

_SPLITTER = 134217729.0  # 2**27 + 1


def two_sum(a, b):
    """(s, e) with s = fl(a + b) and a + b = s + e exactly (Knuth's two-sum)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def split(a):
    """(h, l) with h + l = a exactly, each with at most 26 significant bits (Veltkamp)."""
    c = _SPLITTER * a
    h = c - (c - a)
    return h, a - h


def _prod_err(a, b, asp, bsp):
    """Exact error of the product a*b (given the Veltkamp splits of a and b)."""
    return ((asp[0] * bsp[0] - a * b) + asp[0] * bsp[1] + asp[1] * bsp[0]) + asp[1] * bsp[1]


def two_prod(a, b):
    """(p, e) with p = fl(a * b) and a * b = p + e exactly (Dekker; no overflow in the split)."""
    return a * b, _prod_err(a, b, split(a), split(b))


def renorm(s, e):
    """s + e as a normalised pair (fl(s + e), the rest), for |e| no larger than |s|."""
    t = s + e
    return t, e - (t - s)


def dd_mul(ah, al, bh, bl, asp=None, bsp=None):
    """a * b in double-double, normalised (lo parts may be None; splits may be given)."""
    asp = split(ah) if asp is None else asp
    bsp = split(bh) if bsp is None else bsp
    p = ah * bh
    e = _prod_err(ah, bh, asp, bsp)
    if bl is not None:
        e = e + ah * bl
    if al is not None:
        e = e + al * bh
    return renorm(p, e)


def dd_prod(ah, al, bh, bl, asp, bsp):
    """(a*b) as an unnormalised pair (hi, lo): enough for the exact row sums."""
    p = ah * bh
    e = _prod_err(ah, bh, asp, bsp)
    if bl is not None:
        e = e + ah * bl
    if al is not None:
        e = e + al * bh
    return p, e


def dd_add(ah, al, bh, bl):
    """a + b in double-double, normalised."""
    s, e = two_sum(ah, bh)
    return renorm(s, e + (al + bl))


def dd_div(ah, al, bh, bl):
    """a / b in double-double: the double quotient and one correction from its remainder."""
    q1 = ah / bh
    ph, pl = dd_mul(bh, bl, q1, None)
    rh, rl = dd_add(ah, al, -ph, -pl)
    return renorm(q1, rh / bh)


def dd_sum_products(terms):
    """Double-double sum of double-double products given as (ah, al, bh, bl) tuples."""
    sh = sl = None
    for ah, al, bh, bl in terms:
        ph, pl = dd_prod(ah, al, bh, bl, split(ah), split(bh))
        if sh is None:
            sh, sl = ph, pl
        else:
            sh, e = two_sum(sh, ph)
            sl = sl + (e + pl)
    return renorm(sh, sl)


def dd_mv(ah, al, bh, bl=None):
    """(A b) in double-double for stacks A (p, q, N) and b (q, N)."""
    return dd_sum_products((ah[:, k], al[:, k], bh[k], None if bl is None else bl[k])
                           for k in range(ah.shape[1]))



def dd_total(a):
    """Sum of a 1-D float array in double-double arithmetic, rounded once: a pairwise tree
    of two-sums, whose exact rounding errors are summed by a plain pairwise sum. The error
    is at most (1 + ~log2 n) u |sum| + n u^2 sum|a| (u = 2^-53): within one unit in the
    last place unless the terms cancel by more than 1e15 / n. Finite terms only."""
    import numpy as np

    s = np.asarray(a, dtype=float).ravel()
    if len(s) == 0:
        return 0.0
    rest = 0.0
    while len(s) > 1:
        if len(s) % 2:
            s = np.append(s, 0.0)
        s, e = two_sum(s[0::2], s[1::2])
        rest += float(e.sum())  # each level's errors: at most u times its partial sums
    return float(s[0] + rest)
