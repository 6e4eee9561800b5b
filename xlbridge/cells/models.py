"""Choosing and trusting a model from cells: degree scan, assumption checks, row
diagnostics, optimum, slopes and the figures of a fit. Same cell rules, options and output
rules as the basic tables (plain 2-D tables of float / str, header row unless
``header=no``)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..engine import (
    FitResult,
    ModelError,
    checks,
    optimum,
    row_diagnostics,
    scan_degrees,
    slopes,
)
from ..engine.scan import DegreeScan
from ..engine.terms import MAX_DEGREE
from .cache import SCAN_CACHE, content_key
from .errors import CellError, CellErrorKind, Table
from .options import Options
from .prepare import FitInput, prepare_fit, sheet_row

# the tables here are of polynomial and surface fits: a CER form gets a message saying so
from .prepare import polynomial_cells as fit_cells
from .prepare import polynomial_prepared as fit_prepared
from .statrows import interval_captions
from .tables import aligned_rows, finish_table, new_points, note_rows, point_words
from .values import drop_reason, single_value

__all__ = ["DEGREE_COLUMNS", "DEGREE_CAPTIONS", "CHECK_COLUMNS", "CHECK_CAPTIONS", "ROW_COLUMNS",
           "ROW_CAPTIONS", "OPTIMUM_COLUMNS", "optimum_captions", "slope_captions", "FitFigure",
           "degrees_table", "degrees_cells", "checks_table", "checks_cells", "rows_table",
           "rows_cells", "optimum_table", "optimum_cells", "slope_table", "slope_cells",
           "scan_cells", "PlotInput", "plot_input", "plot_figure"]

# Fields behind each column, in table order, and the captions shown (docs/output-style.md):
# the degree and its choice, then in-sample fit, out-of-sample error, information criteria,
# whether the top term earns its place; checks lead with the verdict.
DEGREE_COLUMNS = ("degree", "choice", "r2", "adj_r2", "rmse", "cv_rmse", "cv_se", "press",
                  "pred_r2", "aic", "aicc", "bic", "top_term_p_value", "nested_f_p_value",
                  "note")
DEGREE_CAPTIONS = ("degree", "choice", "R²", "adjusted R²", "SEE", "cross-validated RMSE",
                   "standard error of the CV RMSE", "PRESS", "predicted R²", "AIC", "AICc",
                   "BIC", "p of the highest-order term", "p of F against one degree lower",
                   "note")
CHECK_COLUMNS = ("check", "verdict", "statistic", "p_value", "note")
CHECK_CAPTIONS = ("check", "verdict", "value", "p", "how to read it")
ROW_COLUMNS = ("fitted", "residual", "std_residual", "studentized", "leverage", "cooks_d",
               "flag")
ROW_CAPTIONS = ("fitted", "residual", "standardized residual", "studentized residual",
                "leverage", "Cook's distance", "flag")
OPTIMUM_COLUMNS = ("item", "value", "ci_lower", "ci_upper", "std_error", "note")


def _max_degree(value: Any) -> Any:
    """The max_degree cell's number; whether it is a whole number in range is the engine's
    rule (``scan_degrees``)."""
    v = single_value(value, "max_degree")
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise CellError(f"max_degree must be a whole number 1 to {MAX_DEGREE}; got {v!r}")
    return v


def scan_cells(y: Any, x: Any, max_degree: Any, options: Any = None, *,
               weights: Any = None) -> tuple[DegreeScan, Options]:
    """Degree scan of raw cells (cached by content)."""
    inp = prepare_fit(y, x, 1, options, weights=weights)
    if inp.x.shape[1] != 1:
        raise CellError(f"the degree scan needs one x column; x has {inp.x.shape[1]}",
                        CellErrorKind.SHAPE)
    top = _max_degree(max_degree)
    opts = inp.options
    key = content_key("scan", inp.key(), top, opts.folds)

    def compute() -> DegreeScan:
        try:
            return scan_degrees(inp.y, inp.x[:, 0], top, folds=opts.folds, weights=inp.weights,
                                **opts.polynomial_kwargs())
        except ModelError as exc:
            raise CellError.from_model(exc) from None

    return SCAN_CACHE.get_or_compute(key, compute), opts


def degrees_table(scan: DegreeScan, options: Options | None = None) -> Table:
    """One row per degree; ``choice`` marks the recommended one; the rule in a note row."""
    opts = options or Options()
    rows: list[list[Any]] = [list(DEGREE_CAPTIONS)] if opts.header else []
    for r in scan.rows:
        rows.append([getattr(r, c) for c in DEGREE_COLUMNS])
    note_rows(rows, [f"recommended: {scan.rule}", *scan.notes])
    return finish_table(rows)


def degrees_cells(y: Any, x: Any, max_degree: Any, options: Any = None) -> Table:
    scan, opts = scan_cells(y, x, max_degree, options)
    return degrees_table(scan, opts)


def checks_table(result: FitResult, options: Options | None = None,
                 first_row: int | None = None) -> Table:
    """One row per assumption check with a plain-word verdict; a check that names a data
    row also names its sheet row when ``first_row`` (the sheet row of data row 1) is known."""
    opts = options or Options()
    rows: list[list[Any]] = [list(CHECK_CAPTIONS)] if opts.header else []
    for c in checks(result):
        row = [getattr(c, f) for f in CHECK_COLUMNS]
        if first_row is not None and c.row is not None:
            row[-1] += f"; row {c.row} is sheet row {sheet_row(c.row, first_row)}"
        if first_row is not None and c.span is not None:
            lo, hi = (sheet_row(r, first_row) for r in c.span)
            row[-1] += f"; rows {c.span[0]}..{c.span[1]} are sheet rows {lo}..{hi}"
        rows.append(row)
    return finish_table(rows)


def checks_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    inp = prepare_fit(y, x, model, options)
    return checks_table(fit_prepared(inp), inp.options, inp.first_row)


def rows_table(result: FitResult, options: Options | None = None, *,
               first_row: int | None = None, labels: list[str] | None = None,
               row_codes: Any = None) -> Table:
    """One row per input data row (aligned with y and x, header row skipped).

    Where the rows sit is known (``first_row``: the sheet row of data row 1), a leading
    "sheet row" column gives each row's address, and ``labels`` (one per data row) a
    "label" column after it; ``row_codes`` (the cell rules' code per row) say why a
    dropped row was left out."""
    opts = options or Options()
    d = row_diagnostics(result)
    lead = (["sheet row"] if first_row is not None else []) + (
        ["label"] if labels is not None else [])
    rows: list[list[Any]] = [lead + list(ROW_CAPTIONS)] if opts.header else []
    cols = [getattr(d, f) for f in ROW_COLUMNS]
    for i in range(len(d.flag)):
        head: list[Any] = [float(sheet_row(i + 1, first_row))] if first_row is not None else []
        if labels is not None:
            head.append(labels[i] if i < len(labels) else "")
        row = head + [c[i] for c in cols]
        if row_codes is not None and row_codes[i]:
            row[-1] = f"dropped: {drop_reason(row_codes[i])}"
        rows.append(row)
    return finish_table(rows)


def rows_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    inp = prepare_fit(y, x, model, options)
    res = fit_prepared(inp)
    # say why a row was left out, as the cell rules saw it
    return rows_table(res, inp.options, first_row=inp.first_row, row_codes=inp.row_codes)


def optimum_captions(level: float) -> list[str]:
    """Header of the optimum table: value, interval, standard error (as the coefficients)."""
    return ["item", "value", *interval_captions(level), "standard error", "how to read it"]


def optimum_table(result: FitResult, options: Options | None = None) -> Table:
    """Stationary point(s) with delta-method intervals; for surfaces the eigenvalues and
    eigenvectors of the quadratic part (canonical analysis)."""
    opts = options or Options()
    opt = optimum(result)
    rows: list[list[Any]] = [optimum_captions(result.level)] if opts.header else []
    many = len(opt.points) > 1
    for n, pt in enumerate(opt.points, 1):
        tag = f"point {n} " if many else ""
        where = "inside the data" if pt.inside else (
            "extrapolation: the fitted form turns only beyond the data, so within the data "
            "the highest and lowest fitted values lie on its edge")
        rows.append([f"{tag}kind of point", point_words(pt, opt.predictors), "", "", "",
                     where])
        for name, v, se, lo, hi in zip(opt.predictors, pt.x, pt.se, pt.ci_lower, pt.ci_upper):
            rows.append([f"{tag}{name}", v, lo, hi, se, "stationary value (delta method)"])
        rows.append([f"{tag}fitted {result.response}", pt.fitted, pt.fitted_ci_lower,
                     pt.fitted_ci_upper, "", "there (confidence interval of the mean)"])
    for i, (lam, vec) in enumerate(zip(opt.eigenvalues, opt.eigenvectors), 1):
        rows.append([f"eigenvalue {i}", lam, "", "", "", "of the quadratic part, raw units"])
        for name, comp in zip(opt.predictors, vec):
            rows.append([f"eigenvector {i} {name}", comp, "", "", "", ""])
    note_rows(rows, [opt.note] if opt.note else [])
    return finish_table(rows)


def optimum_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    try:
        return optimum_table(res, opts)
    except ModelError as exc:
        raise CellError.from_model(exc) from None


def slope_captions(predictors: tuple[str, ...], level: float) -> list[str]:
    """Header of the slopes table: per predictor the change of the fit per unit of it, its
    interval and standard error; then the range."""
    cols = []
    for p in predictors:
        lo, hi = interval_captions(level)
        cols += [f"{p}: change per unit", f"{p}: {lo}", f"{p}: {hi}", f"{p}: standard error"]
    return cols + ["range"]


def slope_table(result: FitResult, at_x: Any, options: Options | None = None) -> Table:
    """dy/dx_j at each row of ``at_x`` with delta-method SE and interval, aligned rows."""
    opts = options or Options()
    pts, good, codes = new_points(result, at_x, opts, what="at_x")
    cols = slope_captions(result.spec.predictors, opts.level)
    rows: list[list[Any]] = [cols] if opts.header else []
    sl = slopes(result, pts, opts.level) if good.any() else None

    def row_of(j: int) -> list[Any]:
        assert sl is not None
        out: list[Any] = []
        for p in range(result.spec.k):
            out += [sl.slope[j, p], sl.ci_lower[j, p], sl.ci_upper[j, p], sl.se[j, p]]
        return out + ["extrapolated" if bool(sl.extrapolated[j]) else "inside"]

    rows += aligned_rows(good, codes, len(cols), "at_x", row_of)
    return finish_table(rows)


def slope_cells(y: Any, x: Any, model: Any, at_x: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    return slope_table(res, at_x, opts)


@dataclass(frozen=True)
class FitFigure:
    """A figure of a fit, ready to be shown: ``kind`` as asked (lower case), ``title`` its
    first axes' title, ``figure`` the matplotlib figure (not yet attached to a canvas)."""

    kind: str
    title: str
    figure: Any


@dataclass(frozen=True)
class PlotInput:
    """Checked inputs of a figure: ``kind`` (lower case), the prepared cells, and the fit
    (None for ``degrees``, whose ``top`` degree is the model cell)."""

    kind: str
    inp: FitInput
    result: FitResult | None
    top: Any = None


def plot_input(y: Any, x: Any, model: Any, kind: Any, options: Any = None) -> PlotInput:
    """Check a figure's cells and fit the model, without loading a plotting library."""
    from ..plots import KINDS

    k = single_value(kind, "kind")
    k = k.strip().lower() if isinstance(k, str) else k
    if k not in KINDS:
        raise CellError(f"kind must be one of {', '.join(KINDS)}; got {kind!r}")
    inp = prepare_fit(y, x, 1 if k == "degrees" else model, options)
    if k == "degrees":
        return PlotInput(k, inp, None, _max_degree(model))
    return PlotInput(k, inp, fit_prepared(inp))


def plot_figure(y: Any, x: Any, model: Any, kind: Any, options: Any = None) -> FitFigure:
    """Build one figure of the fit (for ``degrees``, ``model`` is the highest degree)."""
    from ..plots import PlotsUnavailable, contour, curve, degree_scan, influence, normal_quantiles
    from ..plots import residuals as residual_plot

    p = plot_input(y, x, model, kind, options)
    k, inp, res = p.kind, p.inp, p.result
    try:
        if k == "degrees":
            fig = degree_scan(scan_degrees(inp.y, inp.x[:, 0], p.top, folds=inp.options.folds,
                                           **inp.options.polynomial_kwargs()))
        elif k == "contour":
            try:
                opt = optimum(res)
            except ModelError:
                opt = None
            fig = contour(res, opt)
        else:
            fig = {"curve": curve, "residuals": residual_plot, "quantiles": normal_quantiles,
                   "influence": influence}[k](res)
    except ModelError as exc:
        raise CellError.from_model(exc) from None
    except PlotsUnavailable as exc:  # the plots extra is missing: say how to add it
        raise CellError(str(exc), CellErrorKind.RESULT) from None
    return FitFigure(k, fig.axes[0].get_title(), fig)
