"""Cell adaptation: raw spreadsheet cell values in, fits and plain 2-D tables out.

Shared by the worksheet functions (``xlbridge.worksheet``) and the command line; no xlwings
and no files here. The parts, in the order a worksheet call goes through them:

- ``options``: the options grammar (``level=0.9; header=no``);
- ``values``: raw cells of every shape turned into arrays, single-cell arguments;
- ``prepare``: the cleaned arguments of a fit (``FitInput``) and fitting through ``cache``;
- ``tables``: fit results as tables, and the basic worksheet functions' table calls;
- ``models``: degree scan, checks, row diagnostics, optimum, slopes, figures;
- ``groups``: one model per group;
- ``cer``: percentiles, candidate CERs, learning curves, base-year costs, the CER card
  (``cerrows``: the CER rows of the basic tables);
- ``errors``: ``CellError`` with its ``kind``, and one ``xlbridge: ...`` cell per exception.
"""

from typing import TYPE_CHECKING

from .errors import (
    Cell,
    CellError,
    CellErrorKind,
    Table,
    error_message,
    guarded,
    run_guarded,
)
from .options import Options, OptionsError, option_keys, options_help, parse_options
from .prepare import FitInput, fit_cells, fit_prepared, prepare_fit
from .statrows import STAT_ROWS, interval_captions, stat_caption
from .tables import (
    COEF_COLUMNS,
    PREDICT_COLUMNS,
    STATS_NOTE,
    coef_captions,
    coef_table,
    coefs_cells,
    equation_cells,
    equation_text,
    info_cells,
    info_table,
    new_points,
    predict_captions,
    predict_cells,
    predict_table,
    stats_cells,
    stats_table,
)
from .values import (
    BLANK,
    BOOL,
    ERROR,
    NONFINITE,
    OK,
    TEXT,
    CleanCells,
    clean_cells,
    drop_reason,
    is_error_text,
    model_value,
    options_value,
)

if TYPE_CHECKING:  # for type checkers and editors; at run time see __getattr__
    from .cer import (
        CANDIDATE_COLUMNS,
        baseyear_cells,
        candidates_cells,
        candidates_table,
        card_cells,
        learning_cells,
        learning_table,
        plevels_cells,
        plevels_table,
    )
    from .groups import groups_cells, groups_fit, groups_table
    from .models import (
        CHECK_COLUMNS,
        DEGREE_COLUMNS,
        OPTIMUM_COLUMNS,
        ROW_COLUMNS,
        FitFigure,
        PlotInput,
        checks_cells,
        checks_table,
        degrees_cells,
        degrees_table,
        optimum_cells,
        optimum_table,
        plot_figure,
        plot_input,
        rows_cells,
        rows_table,
        scan_cells,
        slope_cells,
        slope_table,
    )

__all__ = [
    "BLANK", "BOOL", "CHECK_COLUMNS", "COEF_COLUMNS", "DEGREE_COLUMNS", "ERROR", "NONFINITE",
    "OK", "OPTIMUM_COLUMNS", "PREDICT_COLUMNS", "ROW_COLUMNS", "TEXT",
    "Cell", "CellError", "CellErrorKind", "CleanCells", "FitFigure", "FitInput", "Options",
    "OptionsError", "PlotInput", "Table",
    "checks_cells", "checks_table", "clean_cells", "coef_table", "coefs_cells",
    "degrees_cells", "degrees_table", "drop_reason", "equation_cells", "equation_text",
    "error_message", "fit_cells", "fit_prepared", "groups_cells", "groups_fit",
    "groups_table", "guarded", "info_cells", "info_table", "is_error_text", "model_value",
    "new_points", "optimum_cells", "optimum_table", "option_keys", "options_help",
    "options_value", "parse_options", "plot_figure", "plot_input", "predict_cells", "predict_table",
    "prepare_fit", "rows_cells", "rows_table", "run_guarded", "scan_cells", "slope_cells",
    "slope_table", "stats_cells", "stats_table",
]
__all__ += ["STATS_NOTE", "STAT_ROWS", "coef_captions", "interval_captions", "predict_captions",
            "stat_caption"]
__all__ += ["CANDIDATE_COLUMNS", "baseyear_cells", "candidates_cells", "candidates_table",
            "card_cells", "learning_cells", "learning_table", "plevels_cells", "plevels_table"]

# the tables of the other functions, CER tables and grouped fits load on first use: one fit from the
# command line does not need them (nor the engine parts they import)
_LAZY = {**dict.fromkeys(("groups_cells", "groups_fit", "groups_table"), "groups"),
         **dict.fromkeys(("CANDIDATE_COLUMNS", "baseyear_cells", "candidates_cells",
                          "candidates_table", "card_cells", "learning_cells", "learning_table",
                          "plevels_cells", "plevels_table"), "cer"),
         **dict.fromkeys(("CHECK_COLUMNS", "DEGREE_COLUMNS", "OPTIMUM_COLUMNS", "ROW_COLUMNS",
                          "FitFigure", "PlotInput", "checks_cells", "checks_table",
                          "degrees_cells", "degrees_table", "optimum_cells", "optimum_table",
                          "plot_figure", "plot_input", "rows_cells", "rows_table",
                          "scan_cells", "slope_cells", "slope_table"), "models")}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'xlbridge.cells' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
