"""The grouped fit itself: check the rows of every group, run the three stages (``first``,
``refined``, then the single-group ``fit`` for the rest), flag groups that cannot be fitted or
that cover little of the predictors' range, and assemble the ``GroupsResult``.
"""

from __future__ import annotations

import numpy as np

from ..api import arrays, fit, names_of
from ..errors import ModelError, ModelErrorKind, check_level, distinct_shortage
from ..result import NoteKind
from ..solve import CHOLESKY_MIN_ROWS
from ..terms import ModelSpec, parse_model
from .first import first_stage
from .keys import group_codes, group_order
from .refined import refined_stage
from .stacks import make_plan
from .table import METHODS, GroupsResult, table_columns

#: A fitted group is flagged extrapolation-prone when, for some predictor, its rows span
#: less than this fraction of that predictor's range over all groups: using its curve across
#: the range the other groups cover means predicting outside its own data. (Our choice.)
EXTRAPOLATION_SPAN = 0.5


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

    Each group's numbers equal ``fit`` on its rows (to at least 12 significant digits); a
    group that cannot be fitted gets a ``flag`` and blanks, never stopping the others.

    Parameters
    ----------
    group : array_like, shape (n,)
        One key per row: numbers, text, dates, true/false or blank (order of the groups:
        ``keys.py``).
    y, x, model, intercept, level, names, weights
        As for ``fit``.
    x_range : (array_like, array_like), optional
        Lowest and highest value of each predictor: the range the extrapolation flag
        compares each group's range with. Default ``finite_range(y, x, weights)`` of these
        rows; pass the whole dataset's when fitting it in parts.

    Returns
    -------
    GroupsResult
        One row per group: estimates, standard errors, R^2, flags; ``table()`` for a grid.

    Raises
    ------
    ModelError
        Only for problems of the whole input (shapes, model, level).

    Examples
    --------
    Invented figures for two product families:

    >>> from xlbridge.engine import fit_groups
    >>> family = ["A"] * 5 + ["B"] * 5
    >>> size = [1, 2, 3, 4, 5] * 2
    >>> cost = [2.1, 3.9, 6.2, 7.8, 10.1, 1.0, 1.6, 1.9, 2.6, 3.0]
    >>> res = fit_groups(family, cost, size, 1)
    >>> res.groups
    ('A', 'B')
    >>> for key, (b0, b1) in zip(res.groups, res.estimates):
    ...     print(key, f"{b0:.3f}", f"{b1:.3f}")
    A 0.050 1.990
    B 0.520 0.500
    >>> res.columns
    ('group', 'n_used', 'intercept', 'intercept_se', 'x', 'x_se', 'r2', 'adj_r2', 'rmse', 'flag')
    """
    level = check_level(level)
    if names is None:
        names = names_of(x)
    yv, xv, wv = arrays(y, x, weights)
    n_rows = len(yv)
    spec = parse_model(model, xv.shape[1], tuple(names) if names is not None else None,
                       intercept=bool(intercept))
    table_columns(spec)
    codes, keys = group_codes(group, copy=False)
    if len(codes) != n_rows:
        raise ModelError(f"group has {len(codes)} rows but y has {n_rows}", ModelErrorKind.DATA)
    return _fit_coded(spec, codes, keys, yv, xv, wv, level, x_range)


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
        order, n_used = group_order(codes, n_groups)
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
        order = group_order(codes[rows], n_groups)[0]
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
    method = np.zeros(n_groups, dtype=np.int8)  # index into METHODS (0: not fitted)

    plan = make_plan(spec)
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
            rest = take(first_stage(plan, rest, n_used, start, xcols, ys, ws, tops), rest, 1)
    if len(rest):
        with np.errstate(all="ignore"):
            rest = take(refined_stage(plan, rest, n_used, start, xcols, ys, ws, tops), rest, 2)

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
                # too few rows were flagged above, so a shortage here is of distinct x values
                alias = exc.kind in (ModelErrorKind.ALIASED, ModelErrorKind.SHORTAGE)
                text = f"{'rank deficient' if alias else 'not fitted'}: {exc}"
            else:
                est[g] = res.estimates
                se[g] = res.std_errors
                r2[g], adj[g], rmse[g] = res.stats.r2, res.stats.adj_r2, res.stats.rmse
                method[g] = 3
                for note in res.notes:
                    if getattr(note, "kind", None) is NoteKind.ACCURACY:
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


def _polynomial_shortage(spec: ModelSpec, xg: np.ndarray) -> str | None:
    """The single fit's distinct-values message, naming the first term it leaves undefined."""
    if spec.kind != "polynomial":
        return None
    distinct = len(np.unique(xg[:, 0]))
    if distinct >= spec.degree + 1:
        return None
    term = spec.terms[min(distinct, spec.n_params - 1)]
    return f"rank deficient (term {term}): {distinct_shortage(spec.degree, distinct)}"


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


def _assemble(spec, keys, n_used, n_dropped, est, se, r2, adj, rmse, flags, method,
              level) -> GroupsResult:
    texts = [""] * len(keys)
    for g, parts in flags.items():
        texts[g] = "; ".join(parts)
    return GroupsResult(
        spec=spec, groups=tuple(keys), n_used=n_used, n_dropped=n_dropped, estimates=est,
        std_errors=se, r2=r2, adj_r2=adj, rmse=rmse, flags=tuple(texts),
        methods=tuple(np.array(METHODS, dtype=object)[method].tolist()), level=level)


