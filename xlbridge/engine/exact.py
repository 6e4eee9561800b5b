"""Exact least squares on double data, in integer arithmetic.

Every double is an integer times a power of two, so a design built from shifted powers and
products of the data is an integer matrix times known powers of two. The normal equations
of that integer matrix are solved exactly by fraction-free Gauss-Jordan elimination
(Bareiss), which gives the exact least-squares solution of the data as stored, whatever the
conditioning. Forming normal equations loses nothing here because nothing is rounded; the
results are rounded once, to double, at the end.
"""

from __future__ import annotations

from fractions import Fraction
from math import comb

import numpy as np


class ExactSingular(ArithmeticError):
    """The design is exactly rank deficient; ``column`` is the first dependent column."""

    def __init__(self, column: int):
        super().__init__(column)
        self.column = column


def dyadic(v: np.ndarray) -> tuple[list[int], int]:
    """Integers ``m`` and one exponent ``e`` with ``v[i] == m[i] * 2**e`` exactly."""
    frac, exp = np.frexp(np.asarray(v, dtype=float))
    mant = (frac * 2.0**53).astype(np.int64)  # exact: frac has at most 53 significant bits
    exp = exp.astype(np.int64) - 53
    nz = mant != 0
    if not nz.any():
        return [0] * len(mant), 0
    # strip trailing zero bits so the common exponent is as coarse as the data allow
    tz = np.zeros_like(mant)
    m = np.where(nz, mant, 1)
    while True:
        even = (m % 2 == 0) & nz
        if not even.any():
            break
        m = np.where(even, m // 2, m)
        tz += even
    mant = np.where(nz, m, 0)
    exp = exp + tz
    e0 = int(exp[nz].min())
    shifts = (exp - e0).tolist()
    return [int(a) << s if a else 0 for a, s in zip(mant.tolist(), shifts)], e0


def bareiss_solve(a: list[list[int]], rhs: list[list[int]]) -> tuple[int, list[list[int]]]:
    """Solve ``a @ X = rhs`` for integer square ``a``: returns ``(d, N)`` with ``X = N / d``.

    Fraction-free Gauss-Jordan elimination: every division is exact, every entry stays an
    integer. Raises ExactSingular with the first column that depends on those before it.
    """
    p = len(a)
    rows = [list(ra) + list(rb) for ra, rb in zip(a, rhs)]
    prev = 1
    for k in range(p):
        piv = next((i for i in range(k, p) if rows[i][k] != 0), None)
        if piv is None:
            raise ExactSingular(k)
        if piv != k:
            rows[k], rows[piv] = rows[piv], rows[k]
        rk = rows[k]
        akk = rk[k]
        for i in range(p):
            if i == k:
                continue
            ri = rows[i]
            aik = ri[k]
            if aik == 0:
                rows[i] = [(akk * v) // prev for v in ri]
            else:
                rows[i] = [(akk * v - aik * w) // prev for v, w in zip(ri, rk)]
        prev = akk
    return prev, [r[p:] for r in rows]


def shift_matrix(powers: tuple[tuple[int, ...], ...], shifts: list[Fraction]) -> list[list]:
    """Integer-coefficient map from coefficients on prod (z_j - c_j)^e_j to those on z^m.

    Entry [m][e] is prod_j binom(e_j, m_j) (-c_j)^(e_j - m_j); zero unless m <= e.
    """
    out = []
    for m in powers:
        row = []
        for e in powers:
            if all(mj <= ej for mj, ej in zip(m, e)):
                v = Fraction(1)
                for mj, ej, c in zip(m, e, shifts):
                    v *= comb(ej, mj) * (-c) ** (ej - mj)
                row.append(v)
            else:
                row.append(Fraction(0))
        out.append(row)
    return out


def _obj(ints: list[int]) -> np.ndarray:
    arr = np.empty(len(ints), dtype=object)
    arr[:] = ints
    return arr


class ExactFit:
    """Exact weighted least squares of ``y`` on monomials of shifted predictors.

    Columns are prod_j (x_j - c_j)^e_j for the exponent tuples ``powers`` (the all-zero tuple
    is the intercept), with the shifts ``c_j`` doubles. Quantities are exact Fractions.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, w: np.ndarray | None,
                 powers: tuple[tuple[int, ...], ...], centers: np.ndarray):
        n, k = x.shape
        self.powers = powers
        p = len(powers)
        # each predictor column and its shift on one integer grid: x_j = (u_j + C_j) 2^E_j
        u_cols, self.grid = [], []
        for j in range(k):
            ints, e = dyadic(np.append(x[:, j], centers[j]))
            c = ints[-1]
            u_cols.append(_obj([v - c for v in ints[:-1]]))
            self.grid.append(e)
        maxe = [max((q[j] for q in powers), default=0) for j in range(k)]
        upow = []
        for j in range(k):
            col = [np.ones(n, dtype=object)]
            for _ in range(maxe[j]):
                col.append(col[-1] * u_cols[j])
            upow.append(col)
        cols = []
        for q in powers:
            c = np.ones(n, dtype=object)
            for j, e in enumerate(q):
                if e:
                    c = c * upow[j][e]
            cols.append(c)
        u = np.stack(cols, axis=1) if p else np.empty((n, 0), dtype=object)
        yi, self.ey = dyadic(y)
        yv = _obj(yi)
        if w is None:
            wv, self.ew = np.ones(n, dtype=object), 0
        else:
            wi, self.ew = dyadic(w)
            wv = _obj(wi)
        wu = u * wv[:, None]
        gram = (u.T @ wu).tolist()
        h = (wu.T @ yv).tolist()
        det, sol = bareiss_solve(gram, [[hi] + [int(i == j) for j in range(p)]
                                        for i, hi in enumerate(h)])
        self.det = det
        self.a_num = [r[0] for r in sol]  # solution on the integer columns, times det / 2^ey
        self.inv_num = [r[1:] for r in sol]  # det * gram^-1
        wy = wv * yv
        yy = int(np.sum(wy * yv)) if n else 0
        # weighted residual sum of squares on the integer scale: yy - h' G^-1 h
        rss = Fraction(yy) - Fraction(sum(hi * ai for hi, ai in zip(h, self.a_num)), det)
        scale = Fraction(2) ** (self.ew + 2 * self.ey)
        self.sse = rss * scale
        sw, swy = int(np.sum(wv)), int(np.sum(wy))
        self.sst_centered = (Fraction(yy) - Fraction(swy * swy, sw)) * scale
        self.sst_uncentered = Fraction(yy) * scale
        fit_num = u @ _obj(self.a_num)  # det * fitted on the integer scale
        self.resid = [Fraction((yi_ * det - f) << max(self.ey, 0), det << max(-self.ey, 0))
                      for yi_, f in zip(yi, fit_num.tolist())]
        self.u_scale = [sum(q[j] * self.grid[j] for j in range(k)) for q in powers]

    def coef_shifted(self) -> list[Fraction]:
        """Coefficients on prod (x_j - c_j)^e_j."""
        s = Fraction(2) ** self.ey
        return [s * Fraction(a, self.det) / Fraction(2) ** d
                for a, d in zip(self.a_num, self.u_scale)]

    def inv_gram_shifted(self) -> list[list[Fraction]]:
        """(X'WX)^-1 for the shifted columns X."""
        p = len(self.powers)
        s = Fraction(1, self.det) / Fraction(2) ** self.ew
        return [[s * self.inv_num[i][j] / Fraction(2) ** (self.u_scale[i] + self.u_scale[j])
                 for j in range(p)] for i in range(p)]
