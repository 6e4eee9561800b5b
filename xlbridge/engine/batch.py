"""Many groups, one model: ``fit_groups`` fits the same model to every group of rows at once.

Every group gets the single fit's basis: each predictor centered at the group's (weighted)
mean where the model allows it and divided by a power of two (``solve.power_of_two_scale``).
Then up to three stages, each answering the groups its own error estimate vouches for and
passing on the rest (groups of blocks are computed with array operations, no loop per
group):

1. Double precision ("batched"): the Gram matrix and X'Wy from the scaled design, a first
   solution from the Cholesky factor of the unit-column Gram matrix (accepted under the
   single fit's rule for that factor: every diagonal entry above
   ``solve.CHOLESKY_MIN_DIAG``), the residuals computed row by row from it, and one
   correction step from them (corrected semi-normal equations). The residual sum of squares
   is summed from the residuals, so it does not cancel. A first-order bound of the rounding
   error of every reported estimate, standard error, residual SD and R^2 (``_first_bound``)
   must be at most ``BATCH_ACCEPT``.
2. Double-double ("refined"): the scaled design in double-double arithmetic (a pair of
   doubles per entry, so it equals the monomials of the stored data to about 32 significant
   digits), the normal-equation sums (the Gram matrix, X'Wy and y'Wy) exact but for a final
   rounding far below double precision: the batched counterpart of the single fit's exact
   path. The same first solution, then one refinement step with its residual h - G b in
   double-double; residual and total sums of squares and the variance factors from forms
   that are stationary in the solution, so the remaining error enters squared; raw-unit
   coefficients converted in double-double (the map of ``Basis.raw_map``). Its error
   estimate must be below ``solve.ACCEPT_ERROR``, the threshold at which the single fit
   accepts its own double-precision answer.
3. The single-group ``fit`` ("single") for every other group (ill conditioned, aliased, or
   with at least ``solve.CHOLESKY_MIN_ROWS`` rows), which decides aliasing with
   ``solve.ALIAS_TOL`` and takes its exact path where needed.

Group keys: numbers (1 and 1.0 are one group), dates and times, text (exact: case and spaces
count), true/false, and blank (None, NaN, NaT or empty text are one blank group). Groups come
out in this order: numbers ascending, then dates and times ascending, then text sorted without
regard to case (ties by exact text), then false, true, then the blank group last.
"""

from __future__ import annotations

import datetime as dt
import decimal
import functools
import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from math import comb

import numpy as np
from scipy import sparse

from . import inference
from .api import _names_of, arrays, fit
from .result import _plain
from .solve import (
    ACCEPT_ERROR,
    CHOLESKY_MIN_DIAG,
    CHOLESKY_MIN_ROWS,
    EPS,
    power_of_two_scale,
)
from .terms import ModelError, ModelSpec, parse_model

__all__ = ["EXTRAPOLATION_SPAN", "GroupsResult", "finite_range", "fit_groups", "group_codes",
           "group_sort_key", "normalize_key"]

#: A fitted group is flagged extrapolation-prone when, for some predictor, its rows span
#: less than this fraction of that predictor's range over all groups: using its curve across
#: the range the other groups cover means predicting outside its own data. (Our choice.)
EXTRAPOLATION_SPAN = 0.5
#: A group is answered by the double-precision first stage when the estimated relative
#: error of every estimate, standard error, residual SD and R^2 it reports is at most this.
#: Looser than solve.ACCEPT_ERROR (1e-14), the single fit's own target near the digits NIST
#: StRD certifies, because the promise here is agreement with ``fit`` to 12 significant
#: digits: fit's answer is within 1e-14 of the exact one, so a group accepted here agrees with
#: it to about 1.1e-13, with a margin of nine to 1e-12. Groups above it go on to the
#: double-double stage, held to ACCEPT_ERROR as before.
BATCH_ACCEPT = 1e-13
#: Rows per block of groups solved together (a block's arrays stay in the CPU caches).
_BLOCK_ROWS = 16000  # (arrays just under 128 KiB: allocated without fresh pages each time)
#: The first stage: rows per chunk of groups whose group-level algebra is done at once
#: (fewer, longer array operations), and per block of its passes over their rows.
_FIRST_CHUNK_ROWS = 1 << 20
_FIRST_BLOCK_ROWS = 1 << 15
#: Groups up to this many rows are summed in one pass; longer ones as sums of partial sums.
_FLAT_SUM_ROWS = 8

# --- group keys ----------------------------------------------------------------------------

_NUMBER, _DATE, _TEXT, _BOOL, _BLANK = range(5)
_EPOCH = dt.datetime(1970, 1, 1)


def _is_missing(v) -> bool:
    if v is None:
        return True
    if isinstance(v, str):
        return not v.strip()
    try:
        return bool(v != v)  # NaN, NaT
    except (TypeError, ValueError):
        return True  # pandas.NA and similar missing markers refuse comparison


def _normal(v) -> tuple[int, object]:
    """(kind, key) of one raw group value."""
    if _is_missing(v):
        return _BLANK, None
    if isinstance(v, (bool, np.bool_)):
        return _BOOL, bool(v)
    if isinstance(v, str):
        return _TEXT, str(v)
    if isinstance(v, (int, np.integer)):
        return _NUMBER, int(v)
    if isinstance(v, (numbers.Real, decimal.Decimal)):
        return _NUMBER, float(v)
    if isinstance(v, np.datetime64):
        return _DATE, v.astype("datetime64[us]").item()
    if isinstance(v, (dt.date, dt.time)):
        return _DATE, v
    raise ModelError("group keys must be numbers, text, dates, true/false or blank; got "
                     f"{type(v).__name__} {v!r}")


def normalize_key(v) -> object:
    """The group a raw value belongs to: a Python int/float/str/bool/date, or None (blank)."""
    return _normal(v)[1]


def _date_seconds(v) -> tuple[int, float]:
    if isinstance(v, dt.datetime):
        if v.tzinfo is not None and v.utcoffset() is not None:
            return 0, v.timestamp()
        return 0, (v - _EPOCH).total_seconds()
    if isinstance(v, dt.date):
        return 0, float((v - _EPOCH.date()).days * 86400)
    return 1, v.hour * 3600.0 + v.minute * 60 + v.second + v.microsecond / 1e6


def _sort_key(kind: int, key) -> tuple:
    if kind == _NUMBER:
        return (0, key)
    if kind == _DATE:
        sub, sec = _date_seconds(key)
        return (1, sub, sec, type(key).__name__, str(key))
    if kind == _TEXT:
        return (2, key.casefold(), key)
    if kind == _BOOL:
        return (3, key)
    return (4,)


def group_sort_key(v) -> tuple:
    """Sort key giving the documented group order for a raw or normalized key."""
    return _sort_key(*_normal(v))


def _merge_uniques(values: list) -> tuple[np.ndarray, list]:
    """Map each of a few distinct raw values to its group index in key order."""
    normal = [_normal(v) for v in values]
    distinct = sorted(set(normal), key=lambda kv: _sort_key(*kv))
    rank = {kv: i for i, kv in enumerate(distinct)}
    return (np.array([rank[kv] for kv in normal], dtype=np.intp),
            [kv[1] for kv in distinct])


def _int_codes(arr: np.ndarray, copy: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Codes and sorted unique values of an integer array (a presence table when the range
    is small: much faster than sorting). ``copy=False``: the codes may be ``arr`` itself
    (when it holds every value of 0..G-1 already)."""
    lo, hi = int(arr.min()), int(arr.max())
    if hi - lo <= max(4 * arr.size, 1 << 16):
        off = (arr - lo).astype(np.intp) if lo else arr.astype(np.intp, copy=copy)
        present = np.zeros(hi - lo + 1, dtype=bool)
        present[off] = True
        if present.all():  # the values are consecutive: their offsets are the codes
            return off, np.arange(lo, hi + 1)
        rank = np.cumsum(present) - 1
        return rank[off], np.flatnonzero(present) + lo
    uniq, inv = np.unique(arr, return_inverse=True)
    return inv.ravel(), uniq


def group_codes(group, copy: bool = True) -> tuple[np.ndarray, list]:
    """Integer code per row (0..G-1 in key order) and the G normalized keys (``copy=False``:
    the codes may be ``group`` itself when it holds them already)."""
    arr = None
    if isinstance(group, np.ndarray) or (hasattr(group, "dtype") and hasattr(group, "__array__")):
        arr = np.asarray(group)
        if arr.ndim == 2 and 1 in arr.shape:
            arr = arr.ravel()
        if arr.ndim != 1:
            raise ModelError(f"group must be one column of keys; got shape {arr.shape}")
    if arr is None:
        values = list(group)
        kinds = set(map(type, values))
        if values and kinds == {int}:
            try:
                arr = np.array(values, dtype=np.int64)
            except OverflowError:
                arr = None
        elif values and kinds <= {float, type(None)}:
            arr = np.array(values, dtype=float)
        if arr is None:
            return _generic_codes(values, kinds)
    n = arr.size
    if n == 0:
        return np.zeros(0, dtype=np.intp), []
    kind = arr.dtype.kind
    if kind in "iu":
        codes, uniq = _int_codes(arr, copy)
        return codes, uniq.tolist()
    if kind == "f":
        nan = np.isnan(arr)
        vals = arr[~nan] if nan.any() else arr
        codes = np.empty(n, dtype=np.intp)
        if vals.size == 0:
            codes.fill(0)
            return codes, [None]
        whole = (np.all(np.isfinite(vals)) and np.all(np.abs(vals) < 2.0**53)
                 and np.all(vals == np.round(vals)))
        if whole:
            c, uniq = _int_codes(vals.astype(np.int64))
            keys = [float(v) for v in uniq]
        else:
            uniq, c = np.unique(vals, return_inverse=True)
            c = c.ravel()
            keys = [float(v) for v in uniq]
        if nan.any():
            codes[~nan] = c
            codes[nan] = len(keys)
            keys.append(None)
        else:
            codes[:] = c
        return codes, keys
    if kind == "b":
        codes, uniq = _int_codes(arr.astype(np.int8))
        return codes, [bool(v) for v in uniq]
    if kind in "USM":
        uniq, inv = np.unique(arr, return_inverse=True)
        if kind == "M":  # as datetimes (nanosecond values would come back as ints)
            uniq = uniq.astype("datetime64[us]")
        remap, keys = _merge_uniques(uniq.tolist())
        return remap[inv.ravel()], keys
    values = arr.tolist()
    return _generic_codes(values, set(map(type, values)))


def _generic_codes(values: list, kinds: set) -> tuple[np.ndarray, list]:
    if not values:
        return np.zeros(0, dtype=np.intp), []
    if bool in kinds or np.bool_ in kinds:
        # True == 1 for a dict: keep true/false apart from the numbers
        values = [("\0bool", bool(v)) if isinstance(v, (bool, np.bool_)) else v for v in values]
    index: dict = {}
    try:
        raw = np.fromiter((index.setdefault(v, len(index)) for v in values), dtype=np.intp,
                          count=len(values))
    except TypeError:
        bad = next(v for v in values if not _hashable(v))
        raise ModelError("group keys must be numbers, text, dates, true/false or blank; got "
                         f"{type(bad).__name__}") from None
    uniques = [v[1] if isinstance(v, tuple) and len(v) == 2 and v[0] == "\0bool" else v
               for v in index]
    remap, keys = _merge_uniques(uniques)
    return remap[raw], keys


def _hashable(v) -> bool:
    try:
        hash(v)
    except TypeError:
        return False
    return True


def _group_order(codes: np.ndarray, n_groups: int) -> tuple[np.ndarray | None, np.ndarray]:
    """Stable argsort of group codes 0..n_groups-1 (None when they are sorted already) and
    the count of each code.

    A counting sort: the conversion of a sparse matrix with one entry per row, (code, row
    number), from coordinate to compressed-row form, which lists each row's column numbers
    in order; several times faster than numpy's radix argsort."""
    if codes.size < 2 or np.all(codes[1:] >= codes[:-1]):
        return None, np.bincount(codes, minlength=n_groups)
    n = codes.size
    small = max(n, n_groups) < 2**31  # 32-bit indices: no conversions inside
    itype = np.int32 if small else np.intp
    mat = sparse.coo_array((np.ones(n, dtype=np.int8),
                            (codes.astype(itype, copy=False), np.arange(n, dtype=itype))),
                           shape=(n_groups, n)).tocsr()
    if not mat.has_sorted_indices:
        mat.sort_indices()
    return mat.indices.astype(np.intp, copy=False), np.diff(mat.indptr).astype(np.intp)


# --- double-double arithmetic (error-free transformations) --------------------------------
# A double-double number is an unevaluated sum hi + lo of two doubles; these are the
# classical error-free transformations (Knuth's two-sum, Veltkamp's split, Dekker's product).

_SPLITTER = 134217729.0  # 2**27 + 1


def _two_sum(a, b):
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def _split(a):
    c = _SPLITTER * a
    h = c - (c - a)
    return h, a - h


def _prod_err(a, b, asp, bsp):
    """Exact error of the product a*b (given the Veltkamp splits of a and b)."""
    return ((asp[0] * bsp[0] - a * b) + asp[0] * bsp[1] + asp[1] * bsp[0]) + asp[1] * bsp[1]


def _renorm(s, e):
    t = s + e
    return t, e - (t - s)


def _dd_mul(ah, al, bh, bl, asp=None, bsp=None):
    asp = _split(ah) if asp is None else asp
    bsp = _split(bh) if bsp is None else bsp
    p = ah * bh
    e = _prod_err(ah, bh, asp, bsp)
    if bl is not None:
        e = e + ah * bl
    if al is not None:
        e = e + al * bh
    return _renorm(p, e)


def _dd_prod(ah, al, bh, bl, asp, bsp):
    """(a*b) as an unnormalised pair (hi, lo): enough for the exact row sums."""
    p = ah * bh
    e = _prod_err(ah, bh, asp, bsp)
    if bl is not None:
        e = e + ah * bl
    if al is not None:
        e = e + al * bh
    return p, e


def _dd_add(ah, al, bh, bl):
    s, e = _two_sum(ah, bh)
    return _renorm(s, e + (al + bl))


def _dd_div(ah, al, bh, bl):
    q1 = ah / bh
    ph, pl = _dd_mul(bh, bl, q1, None)
    rh, rl = _dd_add(ah, al, -ph, -pl)
    return _renorm(q1, rh / bh)


# --- the batched solve ---------------------------------------------------------------------

@dataclass(frozen=True)
class _Plan:
    """Everything about the model that the blocks and group chunks share."""

    spec: ModelSpec
    powers: tuple[tuple[int, ...], ...]
    centrable: tuple[bool, ...]
    icpt: bool  # column 0 is the intercept
    degree: int  # highest total degree
    moments: tuple[tuple[int, ...], ...]  # distinct exponent sums of two columns
    gram_index: np.ndarray  # (p, p): Gram entry -> moment
    raw_pairs: tuple  # (row, col, ((predictor, exponent of -c, binomial), ...), col exponents)


def _plan(spec: ModelSpec) -> _Plan:
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
    return _Plan(spec, powers, spec.centrable(), spec.intercept, spec.top_order(),
                 tuple(sums), gram, tuple(pairs))


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
    return _two_sum(np.einsum("sbm->sb", cut), np.einsum("sbm->sb", rest))


def _block_moments(plan: _Plan, xcols: list[np.ndarray], y: np.ndarray, w, weighted: bool,
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
        th, tl = _two_sum(xj, -c[:, None])
        inv = (1.0 / s)[:, None]  # exact: s is a power of two
        th *= inv
        tl *= inv
        ts.append((th, tl, _split(th)))
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
                h, lo_ = _dd_prod(ph, pl, ts[j][0], ts[j][1], psp, ts[j][2])
                cols[q] = (h, lo_, _split(h))
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
    wsp = _split(w) if weighted else None

    def weigh(h, lo, hsp):  # w * (h + lo) in double-double (exact for 0/1 weights)
        if w is None:
            return h, lo
        if not weighted:
            return w * h, (None if lo is None else w * lo)
        return _dd_prod(h, lo, w, None, hsp, wsp)

    terms = []
    for q in plan.moments:
        if not any(q):
            terms.append((np.ones_like(y), None) if w is None else (w, None))
        else:
            terms.append(weigh(*column(q)))
    ysp = _split(y)
    wyh, wyl = weigh(y, None, ysp)
    wysp = _split(wyh) if w is not None else ysp
    for q in plan.powers:
        if not any(q):
            terms.append((wyh, wyl))
        else:
            ch, cl, csp = column(q)
            terms.append(_dd_prod(wyh, wyl, ch, cl, wysp, csp))
    terms.append(_dd_prod(wyh, wyl, y, None, wysp, ysp))
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


# Group-level algebra: matrices are (p, p, N) and vectors (p, N) arrays, the group axis
# last, so every matrix entry is one contiguous vector over the groups.

def _mm(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Matrix products a @ b of stacks (p, q, N) and (q, r, N)."""
    out = a[:, 0, None, :] * b[None, 0, :, :]
    for k in range(1, a.shape[1]):
        out += a[:, k, None, :] * b[None, k, :, :]
    return out


def _mv(a: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Matrix-vector products of stacks (p, q, N) and (q, N)."""
    out = a[:, 0, :] * v[0]
    for k in range(1, a.shape[1]):
        out += a[:, k, :] * v[k]
    return out


def _dd_sum_products(terms):
    """Double-double sum of double-double products given as (ah, al, bh, bl) tuples."""
    sh = sl = None
    for ah, al, bh, bl in terms:
        ph, pl = _dd_prod(ah, al, bh, bl, _split(ah), _split(bh))
        if sh is None:
            sh, sl = ph, pl
        else:
            sh, e = _two_sum(sh, ph)
            sl = sl + (e + pl)
    return _renorm(sh, sl)


def _dd_mv(ah, al, bh, bl=None):
    """(A b) in double-double for stacks A (p, q, N) and b (q, N)."""
    return _dd_sum_products((ah[:, k], al[:, k], bh[k], None if bl is None else bl[k])
                            for k in range(ah.shape[1]))


def _upper_inverse(r: np.ndarray) -> np.ndarray:
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


def _cholesky_upper(a: np.ndarray) -> np.ndarray:
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


def _raw_map(plan: _Plan, centers: np.ndarray, scales: np.ndarray):
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
                        _dd_mul(*power(j, e - 1), -centers[j], None))
        return pw[j, e]

    log2s = np.frexp(scales)[1] - 1
    for i, col, fac, ep in plan.raw_pairs:
        hi = lo = None
        for j, e, binom in fac:
            ph, pl = power(j, e)
            hi, lo = (ph, pl) if hi is None else _dd_mul(hi, lo, ph, pl)
            if binom & (binom - 1):  # not a power of two: one more product
                hi, lo = _dd_mul(hi, lo, np.full(n_g, float(binom)), None)
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


def _solve_groups(plan: _Plan, s: dict, n: np.ndarray) -> dict:
    """Coefficients, standard errors, R^2 and the error estimate of groups whose exact
    normal-equation sums are in ``s`` (one row per group); results one row per group."""
    p = len(plan.powers)
    mom_h, mom_l = _two_sum(s["mom_h"].T, s["mom_l"].T)
    gh, gl = mom_h[plan.gram_index], mom_l[plan.gram_index]  # (p, p, N)
    hh, hl = _two_sum(s["ymom_h"].T, s["ymom_l"].T)
    yyh, yyl = _two_sum(s["yy_h"], s["yy_l"])
    norms = np.sqrt(np.einsum("iin->in", gh))
    r_fac = _cholesky_upper(gh / norms[:, None, :] / norms[None, :, :])
    ok = np.all(norms > 0, axis=0) & np.all(np.einsum("iin->in", r_fac) > CHOLESKY_MIN_DIAG,
                                            axis=0)
    if not ok.all():
        r_fac[:, :, ~ok] = np.eye(p)[:, :, None]
        norms[:, ~ok] = 1.0
    r_inv = _upper_inverse(r_fac)
    c_mat = _mm(r_inv, r_inv.transpose(1, 0, 2)) / norms[:, None, :] / norms[None, :, :]

    # one refinement step on the double-double normal equations: b = b0 + C (h - G b0)
    b0 = _mv(c_mat, hh)
    gbh, gbl = _dd_mv(gh, gl, b0)
    sh, sl = _dd_add(hh, hl, -gbh, -gbl)
    d0 = _mv(c_mat, sh)
    bh, bl = _two_sum(b0, d0)
    # sse = yy - 2 b'h + b'Gb = yy - b'h - b's at b0, s = h - G b0 (stationary in b)
    th, tl = _dd_sum_products((hh[e], hl[e], b0[e], None) for e in range(p))
    sse_h, sse_l = _dd_add(yyh, yyl, -th, -tl)
    sse_l = sse_l - np.einsum("in,in->n", b0, sh)
    sse = sse_h + sse_l
    if plan.icpt:
        m2h, m2l = _dd_div(*_dd_mul(hh[0], hl[0], hh[0], hl[0]), gh[0, 0], gl[0, 0])
        sst_h, sst_l = _dd_add(yyh, yyl, -m2h, -m2l)
        sst = sst_h + sst_l
        ssr = sum(_dd_add(sst_h, sst_l, -sse_h, -sse_l))
    else:
        sst = yyh + yyl
        ssr = sst - sse
    mh, ml = _raw_map(plan, s["centers"].T, s["scales"].T)
    beta = _raw_beta(plan, mh, ml, bh, bl)
    # variance factors q_k = v_k' G^-1 v_k (v_k = row k of M): from R in double; where
    # that is not accurate enough (far extrapolated raw coefficients), by the form
    # 2 v'u - u'Gu at u = C v, stationary in u, with G and v in double-double
    u = _mm(mh, c_mat)  # row k: (C v_k)'
    ur = _mm(mh / norms[None, :, :], r_inv)
    q = np.einsum("kjn,kjn->kn", ur, ur)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_q = _q_error(p, norms, r_fac, r_inv, u, q)
    # rel_se is about rel_q / 2: accept q from R up to ACCEPT_ERROR
    redo = np.flatnonzero(ok & np.any(rel_q > ACCEPT_ERROR, axis=0))
    if len(redo):
        g2h, g2l, u2 = gh[..., redo], gl[..., redo], u[..., redo]
        m2h_, m2l_ = mh[..., redo], ml[..., redo]
        for kk in range(p):
            vuh, vul = _dd_sum_products((m2h_[kk, j], m2l_[kk, j], u2[kk, j], None)
                                        for j in range(p))
            guh, gul = _dd_mv(g2h, g2l, u2[kk])
            uguh, ugul = _dd_sum_products((guh[j], gul[j], u2[kk, j], None)
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


def _raw_beta(plan: _Plan, mh, ml, bh, bl, shift=None) -> np.ndarray:
    """beta = M b in double-double over the nonzero entries of M, rounded once; ``shift``
    (per group) is added to the intercept (column 0) first."""
    p = len(plan.powers)
    rows: list[list] = [[] for _ in range(p)]
    for i, col, _fac, _ep in plan.raw_pairs:
        rows[i].append((mh[i, col], ml[i, col], bh[col], bl[col]))
    if shift is not None:
        rows[0].append((shift, None, np.ones_like(shift), None))
    return np.array([sum(_dd_sum_products(r)) for r in rows])


def _q_error(p: int, norms, r_fac, r_inv, u, q, gram_err: float = EPS) -> np.ndarray:
    """Relative error estimate of q_k computed in double from the unit-column Cholesky
    factor R of the rounded Gram matrix: R'R = G_n + E with |E| <= gram_err |G_n| (the
    Gram matrix's own rounding: eps for the double-double one; |G_n| <= 1) + (p + 1) eps
    |R'||R| (the factor's backward error), so |dq| <= |u_n|'|E||u_n|; plus rounding in the
    triangular solve (p eps, amplified by the factor's condition number, ||R||_F ||R^-1||_F)
    and in v (eps)."""
    un = np.abs(u * norms[None, :, :])
    ru = _mm(un, np.abs(r_fac).transpose(1, 0, 2))
    cond = np.sqrt(p * np.einsum("ijn,ijn->n", r_inv, r_inv))
    return ((gram_err * np.sum(un, axis=1) ** 2 + (p + 1) * EPS * np.sum(ru * ru, axis=1))
            / q + 2 * p * EPS * cond + 2 * EPS)


def _bound(plan: _Plan, v: dict) -> np.ndarray:
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
          + g_dd * (np.abs(v["hh"]) + _mv(np.abs(v["gh"]), abs_b)))
    err_b = rho / (1 - rho) * d0n / norms + _mv(np.abs(c_mat), dh)
    err_n = np.sqrt(np.einsum("in,in->n", err_b * norms, err_b * norms))
    abs_m = np.abs(v["mh"])
    rel_beta = _mv(abs_m, err_b + 2 * g_dd * abs_b) / np.abs(beta)
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


# --- blocks of groups ----------------------------------------------------------------------

def _row_blocks(sizes: np.ndarray, block_rows: int):
    """(padded length m, positions) of the blocks the groups with ``sizes`` rows are solved
    in: groups of one exact size share blocks when there are enough of them, the rest are
    padded to a few bucket sizes."""
    counts = np.bincount(sizes)
    shared = counts[sizes] >= 256
    sizes = np.where(shared, sizes, _bucket_size(sizes))
    for m in np.unique(sizes).tolist():
        members = np.flatnonzero(sizes == m)
        step = max(1, block_rows // m)
        for a in range(0, len(members), step):
            yield m, members[a:a + step]


def _block_rows(m: int, gi: np.ndarray, n_used: np.ndarray, start: np.ndarray,
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


# --- the double-precision first stage -------------------------------------------------------

def _first_stage(plan: _Plan, batch: np.ndarray, n_used: np.ndarray, start: np.ndarray,
                 xcols: list[np.ndarray], ys: np.ndarray, ws: np.ndarray | None,
                 tops: dict) -> dict:
    """Double-precision fits of the groups ``batch`` with their error estimates (one row
    per group of ``batch``); ``accept`` where the estimate is at most BATCH_ACCEPT. Writes
    the groups' predictor ranges into ``tops["lo"]`` and ``tops["hi"]`` (groups, k)."""
    n_b, p = len(batch), len(plan.powers)
    out = {"beta": np.empty((n_b, p)), "se": np.empty((n_b, p))}
    for key in ("r2", "adj", "rmse", "bound"):
        out[key] = np.empty(n_b)
    for m, pos in _row_blocks(n_used[batch], _FIRST_CHUNK_ROWS):
        res = _first_chunk(plan, m, batch[pos], n_used, start, xcols, ys, ws, tops)
        for key, v in res.items():
            out[key][pos] = v
    out["accept"] = out["bound"] <= BATCH_ACCEPT
    return out


def _scaled_columns(plan: _Plan, xcols: list[np.ndarray], centers: np.ndarray,
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


def _first_chunk(plan: _Plan, m: int, gi: np.ndarray, n_used: np.ndarray,
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
        xb, yb, wb = _block_rows(m, gi[sl], n_used, start, xcols, ys, ws, True)
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
    r_fac = _cholesky_upper(g / norms[:, None, :] / norms[None, :, :])
    ok = np.all(norms > 0, axis=0) & np.all(np.einsum("iin->in", r_fac) > CHOLESKY_MIN_DIAG,
                                            axis=0)
    if not ok.all():
        r_fac[:, :, ~ok] = np.eye(p)[:, :, None]
        norms[:, ~ok] = 1.0
    r_inv = _upper_inverse(r_fac)
    cn = _mm(r_inv, r_inv.transpose(1, 0, 2))  # (G_n)^-1, unit-column basis
    b0 = _mv(cn, h / norms) / norms

    # residuals row by row, then one correction step b0 + C T'W r (corrected semi-normal
    # equations): the step sees the design itself, not the rounded Gram matrix
    sse0 = np.empty(n_g)
    s_n = np.empty((p, n_g))
    for sl in blocks:
        xb, yb, wb = _block_rows(m, gi[sl], n_used, start, xcols, ys, ws, True)
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
    d_n = _mv(cn, s_n)
    sse = sse0 - np.einsum("in,in->n", d_n, s_n)  # at b0 + d, to second order

    mh, ml = _raw_map(plan, centers, scales)
    beta = _raw_beta(plan, mh, ml, b0, d_n / norms, cy if plan.icpt else None)
    u = _mm(mh, cn / norms[:, None, :] / norms[None, :, :])  # row k: (C v_k)'
    ur = _mm(mh / norms[None, :, :], r_inv)
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


def _first_bound(plan: _Plan, m: int, n_sum: int, v: dict) -> np.ndarray:
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
                + 16 * p * EPS * EPS * _mv(abs_m, np.abs(v["b0"])))
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
    rel_q = (_q_error(p, norms, v["r_fac"], r_inv, u, q, g_sum)
             + 2 * EPS * np.einsum("kjn,kjn->kn", abs_m, abs_u) / q)
    rel_se = (rel_q + rel_sse) / 2 + 2 * EPS
    worst = np.maximum(np.max(rel_beta, axis=0), np.max(rel_se, axis=0))
    worst = np.maximum(worst, np.maximum(rel_sse / 2 + 2 * EPS, rel_r2))
    worst = np.where((rho < 0.01) & (sse > 0) & (sst > 0), worst, np.inf)
    return np.where(np.isfinite(worst), worst, np.inf)


# --- the API -------------------------------------------------------------------------------

def _bucket_size(n: np.ndarray) -> np.ndarray:
    """Padded block length for groups of n rows: n rounded up to a multiple of 4 up to 64,
    then to within 1/8 (at most 12.5 % padding)."""
    n = np.asarray(n, dtype=np.int64)
    small = ((n + 3) // 4) * 4
    step = np.left_shift(1, np.maximum(np.floor(np.log2(np.maximum(n, 1))).astype(np.int64)
                                       - 3, 0))
    large = ((n + step - 1) // step) * step
    return np.where(n <= 64, small, large)


def _columns(spec: ModelSpec) -> tuple[str, ...]:
    cols = ["group", "n_used"]
    for t in spec.terms:
        cols += [t, f"{t}_se"]
    cols += ["r2", "adj_r2", "rmse", "flag"]
    dup = sorted({c for c in cols if cols.count(c) > 1})
    if dup:
        raise ModelError(f"a predictor name makes the column name {dup[0]!r} appear twice in "
                         "the groups table; rename that predictor")
    return tuple(cols)


def fit_groups(
    group,
    y,
    x,
    model: int | str = 2,
    *,
    intercept: bool = True,
    level: float = 0.95,
    names=None,
    weights=None,
    x_range: tuple | None = None,
) -> GroupsResult:
    """Fit ``model`` separately to the rows of each group, all groups at once.

    ``group`` holds one key per row (numbers, text, dates, true/false, blanks; see the module
    docstring for the order of the groups). ``y``, ``x``, ``model``, ``names``, ``weights``,
    ``intercept`` and ``level`` are as for ``fit``. Each group's numbers equal ``fit`` on its
    rows; a group that cannot be fitted gets a ``flag`` and blanks, never stopping the others.
    ``x_range`` (lowest, highest value per predictor) is the range the extrapolation flag
    compares each group with; by default ``finite_range(y, x, weights)`` of these rows (pass
    the whole dataset's when fitting it in parts). Raises ModelError only for problems of
    the whole input (shapes, model, level).
    """
    if not isinstance(level, (int, float)) or isinstance(level, bool) or not 0 < level < 1:
        raise ModelError(f"level must be between 0 and 1 (e.g. 0.95); got {level!r}")
    if names is None:
        names = _names_of(x)
    yv, xv, wv = arrays(y, x, weights)
    n_rows = len(yv)
    spec = parse_model(model, xv.shape[1], tuple(names) if names is not None else None,
                       intercept=bool(intercept))
    _columns(spec)
    codes, keys = group_codes(group, copy=False)
    if len(codes) != n_rows:
        raise ModelError(f"group has {len(codes)} rows but y has {n_rows}")
    return _fit_coded(spec, codes, keys, yv, xv, wv, float(level), x_range)


def finite_range(y, x, weights=None) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest value of each predictor over the rows whose y, x and weights are
    all finite: the range the extrapolation flag compares each group's range with."""
    xv = np.asarray(x, dtype=float)
    if xv.ndim == 1:
        xv = xv[:, None]
    ok = np.isfinite(np.asarray(y, dtype=float)) & np.isfinite(xv).all(axis=1)
    if weights is not None:
        ok &= np.isfinite(np.asarray(weights, dtype=float))
    if not ok.any():
        return np.full(xv.shape[1], np.nan), np.full(xv.shape[1], np.nan)
    if not ok.all():
        xv = xv[ok]
    return xv.min(axis=0), xv.max(axis=0)


def _fit_coded(spec: ModelSpec, codes: np.ndarray, keys: list, yv: np.ndarray,
               xv: np.ndarray, wv: np.ndarray | None, level: float,
               x_range: tuple | None) -> GroupsResult:
    n_groups = len(keys)
    p = spec.n_params
    k = spec.k
    # the common case first: every number finite (and every weight positive)
    every_row = bool(np.isfinite(yv).all() and np.isfinite(xv).all()
                     and (wv is None or (np.isfinite(wv).all() and (wv > 0).all())))
    order = None
    if every_row:
        order, n_used = _group_order(codes, n_groups)
        used = None
        n_dropped = np.zeros(n_groups, dtype=n_used.dtype)
    else:
        used = ~(np.isnan(yv) | np.isnan(xv).any(axis=1))
        if wv is not None:
            used &= ~np.isnan(wv)
        n_used = np.bincount(codes[used], minlength=n_groups)
        n_dropped = np.bincount(codes, minlength=n_groups) - n_used
    flags: dict[int, list[str]] = {}
    bad = np.zeros(n_groups, dtype=bool)

    def flag_groups(rows: np.ndarray, text: str) -> None:
        for g in np.unique(codes[rows]).tolist():
            if not bad[g]:
                flags.setdefault(g, []).append(text)
                bad[g] = True

    for what, arr in (("y", yv), ("x", xv), ("weights", wv)):
        if arr is not None and not every_row:
            inf = np.isinf(arr)
            inf = (inf.any(axis=1) if inf.ndim == 2 else inf) & used
            if inf.any():
                flag_groups(inf, f"not fitted: {what} has an infinite value")
    if wv is not None and not every_row:
        nonpos = used & ~(wv > 0)
        if nonpos.any():
            flag_groups(nonpos, "not fitted: weights must be positive numbers")
    for g in np.flatnonzero((n_used <= p) & ~bad).tolist():
        flags.setdefault(g, []).append(
            f"too few rows: {n_used[g]} with numbers; the model has {p} coefficients, so it "
            f"needs at least {p + 1}")
        bad[g] = True

    # the rows of every group still in play, sorted by group (one column at a time)
    if every_row and not bad.any():
        rows = order
    elif every_row:  # filtering keeps the order sorted
        keep = ~bad[codes]
        rows = np.flatnonzero(keep) if order is None else order[keep[order]]
    else:
        rows = np.flatnonzero(used & ~bad[codes])
        order = _group_order(codes[rows], n_groups)[0]
        rows = rows if order is None else rows[order]
    xcols = [np.ascontiguousarray(xv[:, j]) if rows is None else np.take(xv[:, j], rows)
             for j in range(k)]
    ys = yv if rows is None else np.take(yv, rows)
    ws = wv if rows is None or wv is None else np.take(wv, rows)
    count = np.where(bad, 0, n_used)
    start = np.cumsum(count) - count

    est = np.full((n_groups, p), np.nan)
    se = np.full((n_groups, p), np.nan)
    r2 = np.full(n_groups, np.nan)
    adj = np.full(n_groups, np.nan)
    rmse = np.full(n_groups, np.nan)
    method = np.zeros(n_groups, dtype=np.int8)  # index into _METHODS (0: not fitted)

    plan = _plan(spec)
    live = np.flatnonzero(~bad)
    large = live[n_used[live] >= CHOLESKY_MIN_ROWS]
    rest = live[n_used[live] < CHOLESKY_MIN_ROWS]
    # predictor ranges per group (NaN where not fitted), for the scales and the flags
    tops = {"lo": np.full((n_groups, k), np.nan), "hi": np.full((n_groups, k), np.nan)}
    _group_ranges(tops, large, n_used, start, xcols)

    def take(out: dict, groups: np.ndarray, stage: int) -> np.ndarray:
        acc = out["accept"]
        ga = groups[acc]
        est[ga] = out["beta"][acc]
        se[ga] = out["se"][acc]
        r2[ga] = out["r2"][acc]
        adj[ga] = out["adj"][acc]
        rmse[ga] = out["rmse"][acc]
        method[ga] = stage
        return groups[~acc]

    # groups that fail a stage are passed on to the next, not warned about
    if len(rest):
        with np.errstate(all="ignore"):
            rest = take(_first_stage(plan, rest, n_used, start, xcols, ys, ws, tops), rest, 1)
    if len(rest):
        with np.errstate(all="ignore"):
            rest = take(_batched(plan, rest, n_used, start, xcols, ys, ws, tops), rest, 2)

    # the rest, one group at a time with the single fit (exact path where needed)
    for g in np.concatenate([large, rest]).tolist():
        sl = slice(start[g], start[g] + n_used[g])
        xg = np.column_stack([xc[sl] for xc in xcols])
        text = _polynomial_shortage(spec, xg)
        if text is None:
            try:
                with np.errstate(all="ignore"):  # its accuracy checks speak through notes
                    res = fit(ys[sl], xg[:, 0] if k == 1 else xg, spec.degree or spec.spec,
                              intercept=spec.intercept, level=level, names=spec.predictors,
                              weights=None if ws is None else ws[sl])
            except ModelError as exc:
                msg = str(exc)
                alias = any(w in msg for w in ("aliased", "distinct", "zero in every row"))
                text = f"{'rank deficient' if alias else 'not fitted'}: {msg}"
            else:
                est[g] = res.estimates
                se[g] = res.std_errors
                r2[g], adj[g], rmse[g] = res.stats.r2, res.stats.adj_r2, res.stats.rmse
                method[g] = 3
                for note in res.notes:
                    if note.startswith("the design is badly conditioned"):
                        flags.setdefault(g, []).append("low accuracy: " + note)
        if text is not None:
            flags.setdefault(g, []).append(text)

    if x_range is None and every_row and n_groups and not bad.any():
        x_range = (tops["lo"].min(axis=0), tops["hi"].max(axis=0))  # every row is finite
    elif x_range is None:
        x_range = finite_range(yv, xv, wv)
    _range_flags(spec, flags, method, tops, x_range)
    return _assemble(spec, keys, n_used, n_dropped, est, se, r2, adj, rmse, flags, method,
                     level)


def _batched(plan: _Plan, batch: np.ndarray, n_used: np.ndarray, start: np.ndarray,
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
    for m, pos in _row_blocks(n_used[batch], _BLOCK_ROWS):
        xb, yb, wb = _block_rows(m, batch[pos], n_used, start, xcols, ys, ws)
        blk_tops = {"lo": tops["lo"][pos], "hi": tops["hi"][pos],
                    "y": np.max(np.abs(yb), axis=1),
                    "w": None if ws is None else np.max(wb, axis=1)}
        _block_moments(plan, xb, yb, wb, ws is not None, blk_tops, sums, pos, work)
    chunk = max(256, (1 << 20) // p**2)
    parts = [_solve_groups(plan, {key: v[a:a + chunk] for key, v in sums.items()},
                           n_used[batch[a:a + chunk]]) for a in range(0, n_b, chunk)]
    return {key: np.concatenate([part[key] for part in parts])
            for key in ("accept", "beta", "se", "r2", "adj", "rmse", "bound")}


def _polynomial_shortage(spec: ModelSpec, xg: np.ndarray) -> str | None:
    """The single fit's distinct-values message, naming the first term it leaves undefined."""
    if spec.kind != "polynomial":
        return None
    distinct = len(np.unique(xg[:, 0]))
    if distinct >= spec.degree + 1:
        return None
    term = spec.terms[min(distinct, spec.n_params - 1)]
    return (f"rank deficient (term {term}): degree {spec.degree} needs at least "
            f"{spec.degree + 1} distinct x values; found {distinct}")


def _group_ranges(tops: dict, groups: np.ndarray, n_used, start, xcols) -> None:
    """Lowest and highest value of each predictor of ``groups`` (each of at least
    CHOLESKY_MIN_ROWS rows, so few) into ``tops["lo"]`` and ``tops["hi"]``."""
    for g in groups.tolist():
        sl = slice(start[g], start[g] + n_used[g])
        for j, xc in enumerate(xcols):
            tops["lo"][g, j] = xc[sl].min()
            tops["hi"][g, j] = xc[sl].max()


def _range_flags(spec, flags, method, tops, x_range) -> None:
    fitted = np.flatnonzero(method > 0)
    if not len(fitted):
        return
    lo_all, hi_all = (np.asarray(v, dtype=float).ravel() for v in x_range)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = (tops["hi"][fitted] - tops["lo"][fitted]) / (hi_all - lo_all)
    narrow = (frac < EXTRAPOLATION_SPAN) & (hi_all > lo_all)
    for i in np.flatnonzero(narrow.any(axis=1)).tolist():
        parts = [f"{spec.predictors[j]} covers {100 * frac[i, j]:.0f}% of the range of all "
                 "groups" for j in np.flatnonzero(narrow[i]).tolist()]
        flags.setdefault(int(fitted[i]), []).append("extrapolation-prone: " + "; ".join(parts))


#: The stage that answered each group (``GroupsResult.methods``).
_METHODS = ("", "batched", "refined", "single")


def _assemble(spec, keys, n_used, n_dropped, est, se, r2, adj, rmse, flags, method,
              level) -> GroupsResult:
    texts = [""] * len(keys)
    for g, parts in flags.items():
        texts[g] = "; ".join(parts)
    return GroupsResult(
        spec=spec, groups=tuple(keys), n_used=n_used, n_dropped=n_dropped, estimates=est,
        std_errors=se, r2=r2, adj_r2=adj, rmse=rmse, flags=tuple(texts),
        methods=tuple(np.array(_METHODS, dtype=object)[method].tolist()), level=level)


# --- the result ----------------------------------------------------------------------------

def _key_json(key):
    if isinstance(key, (dt.date, dt.time)):
        return key.isoformat()
    if isinstance(key, float) and not math.isfinite(key):
        return repr(key)
    return key


@dataclass(frozen=True, eq=False)
class GroupsResult:
    """One fit per group, in group order. Arrays have one row per group; coefficient arrays
    one column per term (``terms``); NaN where a group was not fitted (``flags`` says why).
    ``methods``: the stage that answered: "batched" (double precision), "refined" (double-
    double), "single" (the single-group fit) or "" (not fitted)."""

    spec: ModelSpec
    groups: tuple
    n_used: np.ndarray
    n_dropped: np.ndarray
    estimates: np.ndarray
    std_errors: np.ndarray
    r2: np.ndarray
    adj_r2: np.ndarray
    rmse: np.ndarray
    flags: tuple[str, ...]
    methods: tuple[str, ...]
    level: float

    def __len__(self) -> int:
        return len(self.groups)

    @property
    def terms(self) -> tuple[str, ...]:
        return self.spec.terms

    @functools.cached_property
    def _inference(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        est, se = self.estimates, self.std_errors
        df = self.n_used - est.shape[1]
        with np.errstate(divide="ignore", invalid="ignore"):
            t = est / se
        t = np.where((se == 0) & (est == 0), np.nan, t)
        pv, lo, hi = (np.full_like(est, np.nan) for _ in range(3))
        fitted = np.array([m != "" for m in self.methods], dtype=bool)
        for d in np.unique(df[fitted]).tolist():
            sel = fitted & (df == d)
            pv[sel] = inference.t_pvalue(t[sel], d)
            qt = inference.t_quantile(d, self.level)
            lo[sel] = est[sel] - qt * se[sel]
            hi[sel] = est[sel] + qt * se[sel]
        return np.where(fitted[:, None], t, np.nan), pv, lo, hi

    @property
    def t_ratios(self) -> np.ndarray:
        return self._inference[0]

    @property
    def p_values(self) -> np.ndarray:
        """Two-sided p-values of the t ratios (df = n_used - n_params)."""
        return self._inference[1]

    @property
    def ci_lower(self) -> np.ndarray:
        """Lower end of the ``level`` confidence interval of each estimate."""
        return self._inference[2]

    @property
    def ci_upper(self) -> np.ndarray:
        return self._inference[3]

    @property
    def columns(self) -> tuple[str, ...]:
        """Header of ``table()``: group, n_used, each term and ``<term>_se``, r2, adj_r2,
        rmse, flag."""
        return _columns(self.spec)

    def index(self, key) -> int:
        """Row of the group holding raw key ``key``; raises KeyError if there is none."""
        want = _normal(key)
        for i, g in enumerate(self.groups):
            if _normal(g) == want:
                return i
        raise KeyError(key)

    def table(self, header: bool = True) -> list[list]:
        """Rows of ``columns`` (header first unless ``header=False``): the group key (None
        for the blank group), n_used, estimate and standard error per term, r2, adj_r2, rmse
        (float, NaN where not fitted) and the flag text ("" when none)."""
        rows: list[list] = [list(self.columns)] if header else []
        est, se = self.estimates.tolist(), self.std_errors.tolist()
        r2, adj, rmse = self.r2.tolist(), self.adj_r2.tolist(), self.rmse.tolist()
        n_used = self.n_used.tolist()
        for i, key in enumerate(self.groups):
            row = [key, n_used[i]]
            for e, s in zip(est[i], se[i]):
                row += [e, s]
            rows.append(row + [r2[i], adj[i], rmse[i], self.flags[i]])
        return rows

    def to_dict(self) -> dict:
        """JSON-ready dict: ``model``, ``columns`` and one entry per group (non-finite
        numbers become None; date keys ISO text)."""
        out = []
        for i, key in enumerate(self.groups):
            coefs = [{"term": t, "estimate": _plain(self.estimates[i, j]),
                      "std_error": _plain(self.std_errors[i, j]),
                      "p_value": _plain(self.p_values[i, j]),
                      "ci_lower": _plain(self.ci_lower[i, j]),
                      "ci_upper": _plain(self.ci_upper[i, j])}
                     for j, t in enumerate(self.terms)]
            out.append({"group": _key_json(key), "n_used": int(self.n_used[i]),
                        "n_dropped": int(self.n_dropped[i]), "coefficients": coefs,
                        "r2": _plain(self.r2[i]), "adj_r2": _plain(self.adj_r2[i]),
                        "rmse": _plain(self.rmse[i]), "flag": self.flags[i],
                        "method": self.methods[i]})
        return {"model": {"spec": self.spec.spec, "terms": list(self.terms),
                          "intercept": self.spec.intercept, "level": self.level},
                "columns": list(self.columns), "groups": out}

    @classmethod
    def combine(cls, parts: Sequence[GroupsResult]) -> GroupsResult:
        """One result from results on disjoint sets of groups (e.g. one per partition),
        in group order. Raises ModelError if a group appears in two parts."""
        if not parts:
            raise ModelError("no results to combine")
        spec = parts[0].spec
        keys = [g for part in parts for g in part.groups]
        order = sorted(range(len(keys)), key=lambda i: group_sort_key(keys[i]))
        normal = [_normal(keys[i]) for i in order]
        for a, b in zip(normal, normal[1:]):
            if a == b:
                raise ModelError(f"group {a[1]!r} appears in two parts; each group must be "
                                 "fitted whole")
        idx = np.array(order, dtype=np.intp)

        def cat(name):
            return np.concatenate([getattr(part, name) for part in parts])[idx]

        def cat_t(name):
            flat = [v for part in parts for v in getattr(part, name)]
            return tuple(flat[i] for i in order)

        return cls(spec=spec, groups=tuple(kv[1] for kv in normal), n_used=cat("n_used"),
                   n_dropped=cat("n_dropped"), estimates=cat("estimates"),
                   std_errors=cat("std_errors"), r2=cat("r2"),
                   adj_r2=cat("adj_r2"), rmse=cat("rmse"), flags=cat_t("flags"),
                   methods=cat_t("methods"), level=parts[0].level)
