"""Worksheet functions (xlwings "UDF Modules": ``xlbridge.worksheet``).

Each function returns a plain 2-D list (it spills into cells) or a one-cell ``xlbridge: ...``
message; it never raises. The work is done in ``xlbridge.cells``; fits are cached there.
Placing a figure on the sheet (``XB_PLOT``) is done here: this is the only module that
touches xlwings, and it uses only xlwings' open-source core (never ``xlwings.pro`` or
``xlwings.server``).

Runtimes (docs/runtimes.md): the classic Windows add-in imports this module as a UDF
module; the runtimes in the spreadsheet program's JavaScript host register the functions
from a ``main.py`` of one line, ``from xlbridge.worksheet import *``, which exports exactly
the ``XB_`` functions. Both read the same decorators: ``func`` (outermost), ``arg`` with
``doc``, ``err_to_str`` and ``ndim=2`` for ranges; the cell layer accepts every shape
anyway, so nothing depends on a runtime honouring them.

Decorators come from xlwings only when it is the runtime: xlwings is already imported (the
desktop UDF server imports it before this module), the code runs in the browser Python or
on an xlwings server, or ``XLBRIDGE_XLWINGS=real`` asks for it. Otherwise (the command
line, the runner, tests; ``XLBRIDGE_XLWINGS`` unset/``auto`` or ``shim``) a small shim with
the same call signatures records the same metadata in ``__xlbridge_udf__`` and leaves the
functions unchanged, because importing xlwings costs over a second. ``FUNCTIONS`` maps
each name to its function.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from types import SimpleNamespace
from typing import Any, TypeVar

from . import cells
from .cells import CellError, CellErrorKind, Table, run_guarded

# exactly the worksheet functions: a runtime registers everything `import *` brings along
# that carries xlwings' metadata, so nothing else may be exported
__all__ = ["XB_COEFS", "XB_STATS", "XB_PREDICT", "XB_EQUATION", "XB_DEGREESCAN", "XB_CHECKS",
           "XB_ROWDIAG", "XB_OPTIMUM", "XB_MARGINAL", "XB_PLOT", "XB_GROUPS", "XB_VERSIONS"]

CATEGORY = "xlbridge"

F = TypeVar("F", bound=Callable[..., Any])


def _meta(f: Callable[..., Any]) -> dict[str, Any]:
    if "__xlbridge_udf__" not in f.__dict__:
        f.__xlbridge_udf__ = {"category": None, "args": {}, "ret": {}}  # type: ignore[attr-defined]
    return f.__xlbridge_udf__  # type: ignore[attr-defined]


def _shim_func(f: F | None = None, **kwargs: Any) -> Any:
    def inner(f: F) -> F:
        _meta(f)["category"] = kwargs.get("category")
        _meta(f).update({k: v for k, v in kwargs.items() if k != "category"})
        return f

    return inner if f is None else inner(f)


def _shim_arg(name: str, convert: Any = None, **kwargs: Any) -> Callable[[F], F]:
    def inner(f: F) -> F:
        opts = dict(kwargs, convert=convert) if convert is not None else dict(kwargs)
        _meta(f)["args"][name] = opts
        return f

    return inner


def _shim_ret(convert: Any = None, **kwargs: Any) -> Callable[[F], F]:
    def inner(f: F) -> F:
        _meta(f)["ret"] = dict(kwargs, convert=convert) if convert is not None else dict(kwargs)
        return f

    return inner


def _in_runtime() -> bool:
    """True where xlwings runs the functions: already imported (the classic add-in's UDF
    server), the browser Python of the JavaScript host, or an xlwings server."""
    return ("xlwings" in sys.modules or sys.platform == "emscripten"
            or os.environ.get("XLWINGS_ON_SERVER", "").lower() == "true")


def _decorators() -> tuple[Any, str]:
    choice = os.environ.get("XLBRIDGE_XLWINGS", "auto").strip().lower()
    if choice == "real" or (choice == "auto" and _in_runtime()):
        import xlwings

        return xlwings, "xlwings"
    return SimpleNamespace(func=_shim_func, arg=_shim_arg, ret=_shim_ret), "shim"


xw, DECORATORS = _decorators()

#: True in the classic Windows add-in, whose decorators fill a parameter named ``caller``
#: with the calling range and leave it out of the cell's arguments. The runtimes of the
#: JavaScript host would show such a parameter as an ordinary argument, so XB_PLOT has it
#: only here.
FILLS_CALLER = getattr(xw.func, "__module__", "") == "xlwings.udfs"

#: Range arguments arrive as a list of rows even for one row, column or cell where the
#: runtime honours ``ndim``; the cell layer reads flat lists and scalars the same way.
RANGE = {"ndim": 2, "err_to_str": True}
CELL = {"err_to_str": True}

_Y = "The values to model: one column (or row) of numbers. A text first row is its name."
_X = ("The predictor column(s), same height as y; one column for a degree, 2-6 columns for "
      "'surface'. A text first row gives the names.")
_MODEL = ("Degree 1-10 (one x column), or 'surface', 'linear', 'interact', or terms such "
          "as 'size, size^2, depth, size*depth'.")
_OPTIONS = ("Optional text of key=value pairs separated by ; e.g. level=0.9; log=yes; "
            "se=hc3; error=percent; intercept=no; header=no; names=no; folds=10.")
_NEW_X = ("Points to predict at: one row per point, one column per predictor. Result rows "
          "line up with these rows.")


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_COEFS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Coefficients of a least-squares polynomial or second-order model: term, estimate, std_error, t_ratio, p_value, ci_lower, ci_upper, vif, vif_centered."""  # noqa: E501
    return run_guarded(cells.coefs_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_STATS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Fit statistics of the model as two columns, statistic and value: rows used and dropped, R2, adjusted R2, RMSE, F test, AIC, BIC, PRESS, condition number, notes."""  # noqa: E501
    return run_guarded(cells.stats_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("new_x", doc=_NEW_X, **RANGE)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_PREDICT(y: Any, x: Any, model: Any, new_x: Any, options: Any = None) -> Table:
    """Predictions at new_x, one row per new_x row: fitted, ci_lower, ci_upper (mean), pi_lower, pi_upper (new observation), leverage, range_flag."""  # noqa: E501
    return run_guarded(cells.predict_cells, y, x, model, new_x, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_EQUATION(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """The fitted equation in raw units as text, with full-precision coefficients, for reports."""  # noqa: E501
    return run_guarded(cells.equation_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("max_degree", doc="Highest polynomial degree to try, 1-10.", **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_DEGREESCAN(y: Any, x: Any, max_degree: Any, options: Any = None) -> Table:
    """Degree scan 1..max_degree: r2, adj_r2, rmse, aic, aicc, bic, press, pred_r2, cross-validated rmse, tests, and the recommended degree (one-standard-error rule)."""  # noqa: E501
    return run_guarded(cells.degrees_cells, y, x, max_degree, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_CHECKS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Checks of the regression assumptions (normality, constant variance, independence, outliers, influence, collinearity, extrapolation, rows per term) with verdicts ok / watch / problem."""  # noqa: E501
    return run_guarded(cells.checks_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_ROWDIAG(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Per input row: fitted, residual, standardized and studentized residuals, leverage, Cook's distance and a flag; rows line up with y and x."""  # noqa: E501
    return run_guarded(cells.rows_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_OPTIMUM(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Where the fitted curve or surface turns: stationary point with delta-method interval, fitted value there, minimum / maximum / saddle / ridge, inside the data or not."""  # noqa: E501
    return run_guarded(cells.optimum_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("at_x", doc="Points to take the slope at: one row per point, one column per "
        "predictor. Result rows line up with these rows.", **RANGE)
@xw.arg("options", doc=_OPTIONS, **CELL)
def XB_MARGINAL(y: Any, x: Any, model: Any, at_x: Any, options: Any = None) -> Table:
    """Marginal effect dy/dx of each predictor at the given points, e.g. the added price of one more unit of size, with delta-method standard error and interval."""  # noqa: E501
    return run_guarded(cells.slope_cells, y, x, model, at_x, options)


_PLOT_DOC = "Classic Windows add-in: places a figure of the fit beside the calling cell (updated in place) and returns its title. Elsewhere: checks the inputs and says how to get the figure. Kinds: curve, residuals, quantiles, influence, degrees, contour."  # noqa: E501
_KIND = "Figure: curve, residuals, quantiles, influence, degrees or contour."


def _declare_plot(f: F) -> F:
    f.__doc__ = _PLOT_DOC
    for name, doc, opts in (("options", _OPTIONS, CELL), ("kind", _KIND, CELL),
                            ("model", _MODEL, CELL), ("x", _X, RANGE), ("y", _Y, RANGE)):
        f = xw.arg(name, doc=doc, **opts)(f)
    return xw.func(category=CATEGORY)(f)


# Two signatures, one behaviour: only the classic add-in fills ``caller`` without showing
# it as an argument (FILLS_CALLER); everywhere else XB_PLOT takes what the user types.
if FILLS_CALLER:
    def XB_PLOT(y: Any, x: Any, model: Any, kind: Any, options: Any = None,
                caller: Any = None) -> Table:
        return plot_cells(y, x, model, kind, options, caller)
else:
    def XB_PLOT(y: Any, x: Any, model: Any, kind: Any, options: Any = None) -> Table:
        return plot_cells(y, x, model, kind, options)

XB_PLOT = _declare_plot(XB_PLOT)


def plot_cells(y: Any, x: Any, model: Any, kind: Any, options: Any = None,
               caller: Any = None) -> Table:
    """XB_PLOT's work, never raising. With ``caller`` (the calling range the classic add-in
    passes) build the figure and place it beside that cell through xlwings' pictures API,
    updating the picture of the same name, and return its title; without one, check the
    inputs and return a message saying how to get the figure from the command line."""
    return run_guarded(_plot_or_explain, y, x, model, kind, options, caller)


def _plot_or_explain(y: Any, x: Any, model: Any, kind: Any, options: Any,
                     caller: Any) -> Table:
    if caller is None:
        p = cells.plot_input(y, x, model, kind, options)  # bad input says so first
        k = p.kind
        fit = (f"--model 1 --kind degrees --max-degree {p.top:g}" if k == "degrees"
               else f"--model M --kind {k}")
        raise CellError(
            f"the {k} figure cannot be placed from this cell: only the classic Windows "
            "add-in places pictures. Get it on the command line: xlbridge plot BOOK --y REF "
            f"--x REF {fit} --out FOLDER (or xlbridge report BOOK --y REF --x REF --model M "
            "--out report.html)", CellErrorKind.RESULT)
    fig = cells.plot_figure(y, x, model, kind, options)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig.figure)
    sheet = caller.sheet
    beside = caller.offset(column_offset=1)
    sheet.pictures.add(fig.figure, name=f"xlbridge {fig.kind} {caller.address}", update=True,
                       left=beside.left, top=beside.top)
    return [[fig.title]]


@xw.func(category=CATEGORY)
@xw.arg("group", doc="The group of each row (product family, region, supplier...): text, "
        "numbers or blanks, same height as y.", **RANGE)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc=_MODEL, **CELL)
@xw.arg("options", doc="Optional text: level=0.95; intercept=yes; header=yes; names=auto.",
        **CELL)
def XB_GROUPS(group: Any, y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """One model per group, all groups at once: one row per group with n_used, each coefficient and its standard error, r2, adj_r2, rmse and a flag (too few rows, rank deficient...)."""  # noqa: E501
    return run_guarded(cells.groups_cells, group, y, x, model, options)


@xw.func(category=CATEGORY)
def XB_VERSIONS() -> Table:
    """Versions of xlbridge, Python and its numerical libraries, for audit trails."""
    return run_guarded(cells.info_cells)


FUNCTIONS: dict[str, Callable[..., Table]] = {
    f.__name__: f for f in (XB_COEFS, XB_STATS, XB_PREDICT, XB_EQUATION, XB_DEGREESCAN,
                            XB_CHECKS, XB_ROWDIAG, XB_OPTIMUM, XB_MARGINAL, XB_PLOT, XB_GROUPS,
                            XB_VERSIONS)
}


# --- cost-estimating relationships, percentiles, candidates, learning curves, base year ---
# (power, factor and exponential models go through XB_COEFS, XB_STATS, XB_PREDICT and
# XB_EQUATION with method= in the options; the functions below are the CER front ends)

_CER_OPTIONS = ("Optional text of key=value pairs separated by ; e.g. method=mupe; "
                "correction=smearing; levels=10,20,50,80,90; base_year=2024; level=0.9.")


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc="A degree, 'linear', ... or a CER form: 'power', 'factor', "
        "'exponential' (with method= in the options).", **CELL)
@xw.arg("new_x", doc=_NEW_X, **RANGE)
@xw.arg("options", doc=_CER_OPTIONS, **CELL)
def XB_PLEVELS(y: Any, x: Any, model: Any, new_x: Any, options: Any = None) -> Table:
    """Percentiles of a new estimate at each new_x row (levels=10,20,50,80,90 by default), following the fit's error model, with the distribution and its location, scale and df for a risk tool."""  # noqa: E501
    return run_guarded(cells.plevels_cells, y, x, model, new_x, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("drivers", doc="The candidate driver columns, same height as y; a text first row "
        "gives their names.", **RANGE)
@xw.arg("options", doc="Optional text: forms=power,exponential,factor,linear; "
        "methods=log,mupe,zmpe,ols; max_drivers=1-3; level=0.95; vif_limit=10.", **CELL)
def XB_CANDIDATES(y: Any, drivers: Any, options: Any = None) -> Table:
    """Candidate CERs side by side, ranked: rank, form, method, drivers, n, see, cv, spe, r2_unit, bias_percent, worst_p, max_vif, verdict; the ranking rule below the table."""  # noqa: E501
    return run_guarded(cells.candidates_cells, y, drivers, options)


@xw.func(category=CATEGORY)
@xw.arg("units", doc="Unit numbers (one column), or the first and last unit of each lot "
        "(two columns).", **RANGE)
@xw.arg("costs", doc="Cost of each unit, or each lot's total cost; same height as units.",
        **RANGE)
@xw.arg("at", doc="Optional: unit numbers n (one column: cost of unit n and of units 1..n) "
        "or pairs m, n (two columns: cost of units m..n).", **RANGE)
@xw.arg("options", doc="Optional text: theory=unit|cumulative; level=0.95; header=no.", **CELL)
def XB_LEARNING(units: Any, costs: Any, at: Any = None, options: Any = None) -> Table:
    """Learning curve from unit or lot data: slope percent with SE and interval, T1 with SE and interval, and the costs of the units asked for in at."""  # noqa: E501
    return run_guarded(cells.learning_cells, units, costs, at, options)


@xw.func(category=CATEGORY)
@xw.arg("costs", doc="Costs of different years: one column.", **RANGE)
@xw.arg("years", doc="The year of each cost, same height as costs.", **RANGE)
@xw.arg("index", doc="The price index: two columns, year and index value.", **RANGE)
@xw.arg("options", doc="Text with the year to convert to: base_year=2024.", **CELL)
def XB_BASEYEAR(costs: Any, years: Any, index: Any, options: Any = None) -> Table:
    """Costs in one base year's prices: cost * index(base year) / index(year of the cost), one row per cost row, ready to use as y."""  # noqa: E501
    return run_guarded(cells.baseyear_cells, costs, years, index, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, **RANGE)
@xw.arg("x", doc=_X, **RANGE)
@xw.arg("model", doc="'power', 'factor' or 'exponential'.", **CELL)
@xw.arg("options", doc=_CER_OPTIONS, **CELL)
def XB_CERCARD(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """One-screen review card of a CER: equation in units, form, method, rows, relevant range, SEE, CV, SPE, R2 in units, bias, spread at the centre of the data (P20/P80), base year, date, input hash, cautions."""  # noqa: E501
    return run_guarded(cells.card_cells, y, x, model, options)


FUNCTIONS.update({f.__name__: f for f in (XB_PLEVELS, XB_CANDIDATES, XB_LEARNING, XB_BASEYEAR,
                                          XB_CERCARD)})
__all__ += ["XB_PLEVELS", "XB_CANDIDATES", "XB_LEARNING", "XB_BASEYEAR", "XB_CERCARD"]
