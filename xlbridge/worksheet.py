"""Worksheet functions (xlwings "UDF Modules": ``xlbridge.worksheet``).

Each function returns a plain 2-D list (it spills into cells) or a one-cell ``xlbridge: ...``
message; it never raises. The work is done in ``xlbridge.cells``; fits are cached there.
Placing a figure on the sheet (``XB_PLOT``) is done here: this is the only module that
touches xlwings.

Decorators: the functions carry the open-source xlwings decorators (``func`` outermost,
then ``arg`` / ``ret``). Importing xlwings costs over a second and the command line calls
these same functions headlessly, so the decorators come from xlwings only when
- xlwings is already imported (the desktop UDF server imports it before this module), or
- the environment variable ``XLBRIDGE_XLWINGS=real`` asks for it;
otherwise (``XLBRIDGE_XLWINGS`` unset/``auto`` without xlwings loaded, or ``shim``) a
small shim with the same call signatures records the same metadata in ``__xlbridge_udf__``
and leaves the functions unchanged. ``FUNCTIONS`` maps each name to its function.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from types import SimpleNamespace
from typing import Any, TypeVar

from . import cells
from .cells import Table, run_guarded

__all__ = ["XB_COEFS", "XB_STATS", "XB_PREDICT", "XB_EQUATION", "XB_DEGREESCAN", "XB_CHECKS",
           "XB_ROWDIAG", "XB_OPTIMUM", "XB_MARGINAL", "XB_PLOT", "XB_GROUPS", "XB_VERSIONS",
           "FUNCTIONS", "CATEGORY", "DECORATORS"]

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


def _decorators() -> tuple[Any, str]:
    choice = os.environ.get("XLBRIDGE_XLWINGS", "auto").strip().lower()
    if choice == "real" or (choice == "auto" and "xlwings" in sys.modules):
        import xlwings

        return xlwings, "xlwings"
    return SimpleNamespace(func=_shim_func, arg=_shim_arg, ret=_shim_ret), "shim"


xw, DECORATORS = _decorators()

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
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_COEFS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Coefficients of a least-squares polynomial or second-order model: term, estimate, std_error, t_ratio, p_value, ci_lower, ci_upper, vif, vif_centered."""  # noqa: E501
    return run_guarded(cells.coefs_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_STATS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Fit statistics of the model as two columns, statistic and value: rows used and dropped, R2, adjusted R2, RMSE, F test, AIC, BIC, PRESS, condition number, notes."""  # noqa: E501
    return run_guarded(cells.stats_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("new_x", doc=_NEW_X, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_PREDICT(y: Any, x: Any, model: Any, new_x: Any, options: Any = None) -> Table:
    """Predictions at new_x, one row per new_x row: fitted, ci_lower, ci_upper (mean), pi_lower, pi_upper (new observation), leverage, range_flag."""  # noqa: E501
    return run_guarded(cells.predict_cells, y, x, model, new_x, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_EQUATION(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """The fitted equation in raw units as text, with full-precision coefficients, for reports."""  # noqa: E501
    return run_guarded(cells.equation_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("max_degree", doc="Highest polynomial degree to try, 1-10.", err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_DEGREESCAN(y: Any, x: Any, max_degree: Any, options: Any = None) -> Table:
    """Degree scan 1..max_degree: r2, adj_r2, rmse, aic, aicc, bic, press, pred_r2, cross-validated rmse, tests, and the recommended degree (one-standard-error rule)."""  # noqa: E501
    return run_guarded(cells.degrees_cells, y, x, max_degree, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_CHECKS(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Checks of the regression assumptions (normality, constant variance, independence, outliers, influence, collinearity, extrapolation, rows per term) with verdicts ok / watch / problem."""  # noqa: E501
    return run_guarded(cells.checks_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_ROWDIAG(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Per input row: fitted, residual, standardized and studentized residuals, leverage, Cook's distance and a flag; rows line up with y and x."""  # noqa: E501
    return run_guarded(cells.rows_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_OPTIMUM(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    """Where the fitted curve or surface turns: stationary point with delta-method interval, fitted value there, minimum / maximum / saddle / ridge, inside the data or not."""  # noqa: E501
    return run_guarded(cells.optimum_cells, y, x, model, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("at_x", doc="Points to take the slope at: one row per point, one column per "
        "predictor. Result rows line up with these rows.", err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
def XB_MARGINAL(y: Any, x: Any, model: Any, at_x: Any, options: Any = None) -> Table:
    """Marginal effect dy/dx of each predictor at the given points, e.g. the added price of one more unit of size, with delta-method standard error and interval."""  # noqa: E501
    return run_guarded(cells.slope_cells, y, x, model, at_x, options)


@xw.func(category=CATEGORY)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("kind", doc="Figure: curve, residuals, quantiles, influence, degrees or contour.",
        err_to_str=True)
@xw.arg("options", doc=_OPTIONS, err_to_str=True)
@xw.arg("caller", doc="Filled in by xlwings: the calling cell (the figure goes beside it).")
def XB_PLOT(y: Any, x: Any, model: Any, kind: Any, options: Any = None,
            caller: Any = None) -> Table:
    """Places a figure of the fit beside the calling cell (xlwings pictures, updated in place) and returns its title: curve with bands, residuals, quantiles, influence, degrees, contour."""  # noqa: E501
    return run_guarded(_plot_cells, y, x, model, kind, options, caller)


def _plot_cells(y: Any, x: Any, model: Any, kind: Any, options: Any = None,
                caller: Any = None) -> Table:
    """Build the figure (``cells.plot_figure``); with ``caller`` (the calling range, as
    xlwings passes it on the desktop) place it beside that cell through xlwings' pictures
    API, updating the picture of the same name. Returns the figure's title, one cell."""
    fig = cells.plot_figure(y, x, model, kind, options)
    if caller is None:
        return [[f"{fig.title} (figure placed on the desktop only; headless: xlbridge plot)"]]
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig.figure)
    sheet = caller.sheet
    beside = caller.offset(column_offset=1)
    sheet.pictures.add(fig.figure, name=f"xlbridge {fig.kind} {caller.address}", update=True,
                       left=beside.left, top=beside.top)
    return [[fig.title]]


@xw.func(category=CATEGORY)
@xw.arg("group", doc="The group of each row (product family, region, supplier...): text, "
        "numbers or blanks, same height as y.", err_to_str=True)
@xw.arg("y", doc=_Y, err_to_str=True)
@xw.arg("x", doc=_X, err_to_str=True)
@xw.arg("model", doc=_MODEL, err_to_str=True)
@xw.arg("options", doc="Optional text: level=0.95; intercept=yes; header=yes; names=auto.",
        err_to_str=True)
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
