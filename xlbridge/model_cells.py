"""Cell adaptation for choosing and trusting a model: degree scan, assumption checks, row
diagnostics, optimum and slopes. Same cell rules, options and output rules as
``xlbridge.cells`` (plain 2-D tables of float / str, header row unless ``header=no``)."""

from __future__ import annotations

from typing import Any

import numpy as np

from .cache import SCAN_CACHE, content_key
from .cells import (
    CellError,
    Table,
    _aligned,
    _finish,
    _wrap,
    drop_reason,
    fit_cells,
    fit_prepared,
    new_points,
    prepare_fit,
)
from .engine import FitResult, ModelError, checks, optimum, row_diagnostics, scan_degrees, slopes
from .engine.scan import DegreeScan
from .options import Options

__all__ = ["DEGREE_COLUMNS", "CHECK_COLUMNS", "ROW_COLUMNS", "OPTIMUM_COLUMNS",
           "degrees_table", "degrees_cells", "checks_table", "checks_cells", "rows_table",
           "rows_cells", "optimum_table", "optimum_cells", "slope_table", "slope_cells",
           "scan_cells"]

DEGREE_COLUMNS = ("degree", "r2", "adj_r2", "rmse", "aic", "aicc", "bic", "press", "pred_r2",
                  "cv_rmse", "cv_se", "top_term_p_value", "nested_f_p_value", "choice", "note")
CHECK_COLUMNS = ("check", "statistic", "p_value", "verdict", "note")
ROW_COLUMNS = ("fitted", "residual", "std_residual", "studentized", "leverage", "cooks_d",
               "flag")
OPTIMUM_COLUMNS = ("item", "value", "std_error", "ci_lower", "ci_upper", "note")


def _notes(rows: list[list[Any]], notes) -> None:
    for n in notes:
        rows.extend([line] for line in _wrap("note: " + n, 255))


def _max_degree(value: Any) -> int:
    from .cells import _single

    v = _single(value, "max_degree")
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not float(v).is_integer():
        raise CellError(f"max_degree must be a whole number 1 to 10; got {v!r}")
    return int(v)


def scan_cells(y: Any, x: Any, max_degree: Any, options: Any = None, *,
               ints_are_errors: bool = True, weights: Any = None) -> tuple[DegreeScan, Options]:
    """Degree scan of raw cells (cached by content)."""
    inp = prepare_fit(y, x, 1, options, ints_are_errors=ints_are_errors, weights=weights)
    if inp.x.shape[1] != 1:
        raise CellError(f"the degree scan needs one x column; x has {inp.x.shape[1]}")
    top = _max_degree(max_degree)
    opts = inp.options
    key = content_key("scan", inp.key(), top, opts.folds)

    def compute() -> DegreeScan:
        try:
            return scan_degrees(inp.y, inp.x[:, 0], top, folds=opts.folds, weights=inp.weights,
                                **opts.fit_kwargs())
        except ModelError as exc:
            raise CellError(str(exc)) from None

    return SCAN_CACHE.get_or_compute(key, compute), opts


def degrees_table(scan: DegreeScan, options: Options | None = None) -> Table:
    """One row per degree; ``choice`` marks the recommended one; the rule in a note row."""
    opts = options or Options()
    rows: list[list[Any]] = [list(DEGREE_COLUMNS)] if opts.header else []
    for r in scan.rows:
        rows.append([getattr(r, c) for c in DEGREE_COLUMNS])
    _notes(rows, [f"recommended: {scan.rule}", *scan.notes])
    return _finish(rows)


def degrees_cells(y: Any, x: Any, max_degree: Any, options: Any = None, *,
                  ints_are_errors: bool = True) -> Table:
    scan, opts = scan_cells(y, x, max_degree, options, ints_are_errors=ints_are_errors)
    return degrees_table(scan, opts)


def checks_table(result: FitResult, options: Options | None = None) -> Table:
    """One row per assumption check with a plain-word verdict."""
    opts = options or Options()
    rows: list[list[Any]] = [list(CHECK_COLUMNS)] if opts.header else []
    for c in checks(result):
        rows.append([c.check, c.statistic, c.p_value, c.verdict, c.note])
    return _finish(rows)


def checks_cells(y: Any, x: Any, model: Any, options: Any = None, *,
                 ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return checks_table(res, opts)


def rows_table(result: FitResult, options: Options | None = None) -> Table:
    """One row per input data row (aligned with y and x, header row skipped)."""
    opts = options or Options()
    d = row_diagnostics(result)
    rows: list[list[Any]] = [list(ROW_COLUMNS)] if opts.header else []
    for i in range(len(d.flag)):
        rows.append([d.fitted[i], d.residual[i], d.std_residual[i], d.studentized[i],
                     d.leverage[i], d.cooks_d[i], d.flag[i]])
    return _finish(rows)


def rows_cells(y: Any, x: Any, model: Any, options: Any = None, *,
               ints_are_errors: bool = True) -> Table:
    inp = prepare_fit(y, x, model, options, ints_are_errors=ints_are_errors)
    res = fit_prepared(inp)
    table = rows_table(res, inp.options)
    # say why a row was left out, as the cell rules saw it
    start = 1 if inp.options.header else 0
    for i, code in enumerate(inp.row_codes):
        if code:
            table[start + i][-1] = f"dropped: {drop_reason(code)}"
    return table


def optimum_table(result: FitResult, options: Options | None = None) -> Table:
    """Stationary point(s) with delta-method intervals; for surfaces the eigenvalues and
    eigenvectors of the quadratic part (canonical analysis)."""
    opts = options or Options()
    opt = optimum(result)
    rows: list[list[Any]] = [list(OPTIMUM_COLUMNS)] if opts.header else []
    many = len(opt.points) > 1
    for n, pt in enumerate(opt.points, 1):
        tag = f"point {n} " if many else ""
        where = "inside the data" if pt.inside else "outside the data: extrapolation"
        rows.append([f"{tag}kind", pt.kind, "", "", "", where])
        for name, v, se, lo, hi in zip(opt.predictors, pt.x, pt.se, pt.ci_lower, pt.ci_upper):
            rows.append([f"{tag}{name}", v, se, lo, hi, "stationary value (delta method)"])
        rows.append([f"{tag}fitted", pt.fitted, "", pt.fitted_ci_lower, pt.fitted_ci_upper,
                     f"fitted {result.response} there (confidence interval of the mean)"])
    for i, (lam, vec) in enumerate(zip(opt.eigenvalues, opt.eigenvectors), 1):
        rows.append([f"eigenvalue {i}", lam, "", "", "", "of the quadratic part, raw units"])
        for name, comp in zip(opt.predictors, vec):
            rows.append([f"eigenvector {i} {name}", comp, "", "", "", ""])
    _notes(rows, [opt.note] if opt.note else [])
    return _finish(rows)


def optimum_cells(y: Any, x: Any, model: Any, options: Any = None, *,
                  ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    try:
        return optimum_table(res, opts)
    except ModelError as exc:
        raise CellError(str(exc)) from None


def _slope_columns(predictors: tuple[str, ...]) -> list[str]:
    if len(predictors) == 1:
        return ["slope", "std_error", "ci_lower", "ci_upper", "range_flag"]
    cols = []
    for p in predictors:
        cols += [f"slope_{p}", f"std_error_{p}", f"ci_lower_{p}", f"ci_upper_{p}"]
    return cols + ["range_flag"]


def slope_table(result: FitResult, at_x: Any, options: Options | None = None, *,
                ints_are_errors: bool = True) -> Table:
    """dy/dx_j at each row of ``at_x`` with delta-method SE and interval, aligned rows."""
    opts = options or Options()
    pts, good, codes = new_points(result, at_x, opts, ints_are_errors=ints_are_errors,
                                  what="at_x")
    cols = _slope_columns(result.spec.predictors)
    rows: list[list[Any]] = [cols] if opts.header else []
    sl = slopes(result, pts, opts.level) if good.any() else None

    def row_of(j: int) -> list[Any]:
        assert sl is not None
        out: list[Any] = []
        for p in range(result.spec.k):
            out += [sl.slope[j, p], sl.se[j, p], sl.ci_lower[j, p], sl.ci_upper[j, p]]
        return out + ["extrapolated" if bool(sl.extrapolated[j]) else "inside"]

    rows += _aligned(good, codes, len(cols), "at_x", row_of)
    return _finish(rows)


def slope_cells(y: Any, x: Any, model: Any, at_x: Any, options: Any = None, *,
                ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return slope_table(res, at_x, opts, ints_are_errors=ints_are_errors)


def plot_cells(y: Any, x: Any, model: Any, kind: Any, options: Any = None,
               caller: Any = None) -> Table:
    """Build one figure of the fit; with ``caller`` (the calling range, as xlwings passes it
    on the desktop) place it beside that cell through xlwings' pictures API, updating the
    picture of the same name. Returns the figure's title, one cell."""
    from .cells import _single
    from .engine.scan import scan_degrees as _scan
    from .plots import KINDS, curve, degree_scan, influence, normal_quantiles, residuals

    k = _single(kind, "kind")
    k = k.strip().lower() if isinstance(k, str) else k
    if k not in KINDS:
        raise CellError(f"kind must be one of {', '.join(KINDS)}; got {kind!r}")
    inp = prepare_fit(y, x, 1 if k == "degrees" else model, options)
    res = None if k == "degrees" else fit_prepared(inp)
    try:
        if k == "degrees":
            top = _max_degree(model)
            fig = degree_scan(_scan(inp.y, inp.x[:, 0], top, folds=inp.options.folds,
                                    **inp.options.fit_kwargs()))
        elif k == "contour":
            from .plots import contour

            try:
                opt = optimum(res)
            except ModelError:
                opt = None
            fig = contour(res, opt)
        else:
            fig = {"curve": curve, "residuals": residuals, "quantiles": normal_quantiles,
                   "influence": influence}[k](res)
    except ModelError as exc:
        raise CellError(str(exc)) from None
    title = fig.axes[0].get_title()
    if caller is None:
        return [[f"{title} (figure placed on the desktop only; headless: xlbridge plot)"]]
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    sheet = caller.sheet
    beside = caller.offset(column_offset=1)
    sheet.pictures.add(fig, name=f"xlbridge {k} {caller.address}", update=True,
                       left=beside.left, top=beside.top)
    return [[title]]


def _group_key(v: Any, ints_are_errors: bool) -> tuple[Any, bool]:
    """(key, usable) of one group cell: text, number, boolean or None (blank); dates as
    their serial numbers; error cells are not usable."""
    import datetime as dt

    from .cells import _serial, is_error_text

    if v is None:
        return None, True
    if isinstance(v, str):
        s = v.strip()
        if is_error_text(s):
            return None, False
        return (s if s else None), True
    if isinstance(v, (bool, np.bool_)):
        return bool(v), True
    if isinstance(v, int):
        return (None, False) if ints_are_errors else (float(v), True)
    if isinstance(v, (dt.date, dt.time)):
        return _serial(v), True
    if isinstance(v, float):
        return (v, True) if np.isfinite(v) else (None, not np.isinf(v))
    return str(v), True


def groups_fit(group: Any, y: Any, x: Any, model: Any, options: Any = None, *,
               ints_are_errors: bool = True, weights: Any = None):
    """One model per group from raw cells: ``(GroupsResult, Options, notes)``. The group
    cells line up with y's rows (a header row of y and x is one of the group cells too)."""
    from .cells import _grid
    from .engine import fit_groups

    inp = prepare_fit(y, x, model, options, ints_are_errors=ints_are_errors, weights=weights)
    unsupported = [k for k in ("log", "se", "error")
                   if getattr(inp.options, k) != getattr(Options(), k)]
    if unsupported:
        raise CellError(f"option {unsupported[0]} is not available for grouped fits; fit a "
                        "group on its own for remedies")
    g = _grid(group, "group").transposed_line()
    if g.cols != 1:
        raise CellError(f"group must be one column; got {g.cols} columns")
    keys = list(g.flat)
    if inp.response is not None or inp.names is not None:
        keys = keys[1:]  # the header row of y and x
    n = len(inp.y)
    if len(keys) < n or any(k is not None for k in keys[n:]):
        raise CellError(f"group has {len(keys)} rows but y has {n}; select ranges of the same "
                        "height")
    cleaned = [_group_key(k, ints_are_errors) for k in keys[:n]]
    usable = np.array([ok for _, ok in cleaned], dtype=bool)
    notes = []
    if not usable.all():
        notes.append(f"{int((~usable).sum())} rows left out: their group cell holds an error")
    x = inp.x[usable]
    w = None if inp.weights is None else inp.weights[usable]
    try:
        res = fit_groups([k for (k, ok) in cleaned if ok], inp.y[usable],
                         x[:, 0] if x.shape[1] == 1 else x, inp.model, names=inp.names,
                         weights=w, **{k: v for k, v in inp.options.fit_kwargs().items()
                                       if k in ("intercept", "level")})
    except ModelError as exc:
        raise CellError(str(exc)) from None
    return res, inp.options, notes


def groups_table(res, options: Options | None = None, notes=()) -> Table:
    """One row per group: key, n_used, estimate and std error per term, r2, adj_r2, rmse,
    flag; the blank group shows as "(blank)"."""
    opts = options or Options()
    rows = res.table(header=opts.header)
    start = 1 if opts.header else 0
    for r in rows[start:]:
        if r[0] is None:
            r[0] = "(blank)"
    _notes(rows, notes)
    return _finish(rows)


def groups_cells(group: Any, y: Any, x: Any, model: Any, options: Any = None, *,
                 ints_are_errors: bool = True) -> Table:
    res, opts, notes = groups_fit(group, y, x, model, options, ints_are_errors=ints_are_errors)
    return groups_table(res, opts, notes)
