"""Cell adaptation: raw spreadsheet cell values in, fits and plain 2-D tables out.

Shared by the worksheet functions (``xlbridge.worksheet``) and the command line. No xlwings
here: the values are what xlwings hands a function (a scalar for one cell, a flat list for
one row or column, a list of lists for a block; blanks ``None``; numbers ``float``; dates
``datetime``; booleans ``bool``; error cells ``None``, text such as ``"#N/A"``, or a
negative ``int`` for the newer errors) or what a workbook reader returns.

Cell rules (see ``clean_cells``): a blank, text, boolean or error cell makes its row unusable;
such rows are dropped listwise by the engine and counted in ``FitResult.n_dropped``. Dates
count as their serial day number (days since 1899-12-30), the number the cell holds.
With ``ints_are_errors=True`` (xlwings, whose numbers are always ``float``) a non-bool
``int`` is an error cell; readers of saved files pass ``False`` because they return whole
numbers as ``int``.

Every table is a rectangular list of rows of ``float`` / ``str``: no None, NaN or inf (a
value that does not exist is ``""`` and a note says why), text at most 255 characters.
"""

from __future__ import annotations

import datetime as dt
import functools
import importlib.metadata
import math
import numbers
import platform
import re
import sys
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from itertools import chain
from typing import Any, ParamSpec

import numpy as np

from .cache import FIT_CACHE, content_key
from .engine import FitResult, ModelError, fit
from .options import Options, OptionsError, parse_options

__all__ = [
    "COEF_COLUMNS",
    "PREDICT_COLUMNS",
    "CellError",
    "CleanCells",
    "FitInput",
    "Table",
    "clean_cells",
    "coef_table",
    "coefs_cells",
    "equation_cells",
    "equation_text",
    "error_message",
    "fit_cells",
    "fit_prepared",
    "guarded",
    "info_cells",
    "info_table",
    "is_error_text",
    "model_value",
    "options_value",
    "predict_cells",
    "predict_table",
    "prepare_fit",
    "run_guarded",
    "stats_cells",
    "stats_table",
    "xlwings_like",
]

Cell = float | str
Table = list[list[Cell]]

MAX_TEXT = 255  # longest string in a multi-cell result
MAX_CELL_TEXT = 32767  # longest text one spreadsheet cell holds
PREFIX = "xlbridge: "

COEF_COLUMNS = ("term", "estimate", "std_error", "t_ratio", "p_value", "ci_lower",
                "ci_upper", "vif", "vif_centered")
PREDICT_COLUMNS = ("fitted", "ci_lower", "ci_upper", "pi_lower", "pi_upper", "leverage",
                   "range_flag")


class CellError(ValueError):
    """The cell values cannot be used as given; the message says what to fix."""


# --- single cells ------------------------------------------------------------------------

OK, BLANK, BOOL, TEXT, NONFINITE, ERROR = range(6)
_REASON = {BLANK: "blank", BOOL: "true/false", TEXT: "text", NONFINITE: "not finite",
           ERROR: "error value"}

_ERROR_TEXTS = frozenset({
    "#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A", "#GETTING_DATA",
    "#SPILL!", "#CALC!", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
    "#PYTHON!", "#TIMEOUT!",
})
_ERROR_LIKE = re.compile(r"#[A-Z][A-Z0-9_/]*[!?]")
_EPOCH = dt.datetime(1899, 12, 30)


def is_error_text(text: str) -> bool:
    """True for an error cell shown as text (``#N/A``, ``#SPILL!``...) or a message of
    ours (``xlbridge: ...``) fed back in as data."""
    s = text.strip()
    return (s.upper() in _ERROR_TEXTS or bool(_ERROR_LIKE.fullmatch(s))
            or s.lower().startswith("xlbridge:"))


def _serial(v: dt.date | dt.time) -> float:
    if isinstance(v, dt.datetime):
        d = v.replace(tzinfo=None) - _EPOCH
        return d.days + (d.seconds + d.microseconds / 1e6) / 86400.0
    if isinstance(v, dt.date):
        return float((v - _EPOCH.date()).days)
    return (v.hour * 3600 + v.minute * 60 + v.second + v.microsecond / 1e6) / 86400.0


def _number(v: float) -> tuple[float, int]:
    if math.isfinite(v):
        return v, OK
    return math.nan, BLANK if math.isnan(v) else NONFINITE


def _cell(v: Any, ints_are_errors: bool) -> tuple[float, int]:
    """(value, code): the number a cell holds, or NaN and why it is not usable."""
    if v is None:
        return math.nan, BLANK
    if type(v) is float:
        return _number(v)
    if isinstance(v, (bool, np.bool_)):
        return math.nan, BOOL
    if isinstance(v, int):
        if ints_are_errors:
            return math.nan, ERROR
        try:
            return _number(float(v))
        except OverflowError:
            return math.nan, NONFINITE
    if isinstance(v, str):
        s = v.strip()
        if not s:
            return math.nan, BLANK
        return math.nan, ERROR if is_error_text(s) else TEXT
    if isinstance(v, (dt.date, dt.time)):
        return _serial(v), OK
    if isinstance(v, numbers.Number) and not isinstance(v, complex):
        try:
            return _number(float(v))
        except (OverflowError, ValueError, TypeError):
            return math.nan, NONFINITE
    if isinstance(v, (list, tuple, dict, set, np.ndarray)):
        raise CellError("a cell holds a list of values; give one value per cell")
    return math.nan, TEXT


def _convert(values: list, ints_are_errors: bool) -> tuple[np.ndarray, np.ndarray]:
    """Numbers and reason codes for a flat list of cell values."""
    kinds = set(map(type, values))
    if kinds <= {float, type(None)}:
        # fast path: what xlwings hands over for clean numeric ranges (None -> NaN)
        arr = np.array(values, dtype=float) if values else np.empty(0)
        codes = np.zeros(arr.shape, dtype=np.int8)
        bad = ~np.isfinite(arr)
        if bad.any():
            codes[np.isnan(arr)] = BLANK
            codes[np.isinf(arr)] = NONFINITE
            arr[bad] = np.nan
        return arr, codes
    pairs = [_cell(v, ints_are_errors) for v in values]
    arr = np.array([p[0] for p in pairs], dtype=float)
    codes = np.array([p[1] for p in pairs], dtype=np.int8)
    return arr, codes


# --- shapes --------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Grid:
    """A block of raw cells kept flat (row-major): copying 10,000 one-cell rows is what
    would make a cache hit slow."""

    flat: list
    rows: int
    cols: int

    def transposed_line(self) -> _Grid:
        """A single row read as a single column (the same cells, in the same order)."""
        return _Grid(self.flat, self.cols, 1) if self.rows == 1 else self


def _from_array(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        # a numeric array holds numbers only: its ints are not error cells
        return (value.astype(float) if value.dtype.kind in "iu" else value).tolist()
    return value


def _grid(value: Any, what: str, flat_as_row: bool = False) -> _Grid:
    """Cells from a scalar, a flat list (a column unless ``flat_as_row``) or a list of
    lists."""
    if isinstance(value, _Grid):
        return value
    value = _from_array(value)
    if isinstance(value, (list, tuple)):
        n = len(value)
        if n == 0:
            return _Grid([], 0, 0)
        kinds = set(map(type, value))
        nested = {k for k in kinds if issubclass(k, (list, tuple))}
        if nested:
            if nested != kinds:
                raise CellError(f"{what} mixes rows and single values; give one block of "
                                "cells")
            widths = set(map(len, value))
            if len(widths) > 1:
                raise CellError(f"the rows of {what} have different lengths; give a block")
            width = widths.pop()
            if width == 0:
                return _Grid([], 0, 0)
            return _Grid(list(chain.from_iterable(value)), n, width)
        flat = value if isinstance(value, list) else list(value)  # never mutated
        return _Grid(flat, 1, n) if flat_as_row else _Grid(flat, n, 1)
    return _Grid([value], 1, 1)


def _is_name(v: Any) -> bool:
    return isinstance(v, str) and bool(v.strip()) and not is_error_text(v)


def _name_text(v: Any, what: str, col: int, ints_are_errors: bool) -> str:
    if isinstance(v, str) and v.strip() and not is_error_text(v):
        return " ".join(v.split())
    if isinstance(v, float) and math.isfinite(v):
        return repr(int(v)) if v.is_integer() else repr(v)
    if isinstance(v, int) and not isinstance(v, bool) and not ints_are_errors:
        return str(v)
    raise CellError(
        f"names=yes, but the first row of {what} has no name in column {col + 1}; "
        "put a name there or use names=no"
    )


def _split_header(g: _Grid, names: str, what: str,
                  ints_are_errors: bool) -> tuple[tuple[str, ...] | None, _Grid]:
    if not g.rows or names == "no":
        return None, g
    first = g.flat[: g.cols]
    rest = _Grid(g.flat[g.cols:], g.rows - 1, g.cols)
    if names == "yes":
        return tuple(_name_text(v, what, j, ints_are_errors) for j, v in enumerate(first)), rest
    if all(_is_name(v) for v in first):
        return tuple(" ".join(v.split()) for v in first), rest
    return None, g


@dataclass(frozen=True)
class CleanCells:
    """One block of cells as numbers: ``values`` is n x k with NaN where a cell is not a
    usable number, ``codes`` says why per row (0 = usable), ``names`` came from a header
    row (None without one)."""

    values: np.ndarray
    codes: np.ndarray
    names: tuple[str, ...] | None

    @property
    def n_rows(self) -> int:
        return self.values.shape[0]

    @property
    def n_cols(self) -> int:
        return self.values.shape[1]


def clean_cells(value: Any, what: str = "x", *, names: str = "auto",
                ints_are_errors: bool = True, flat_as_row: bool = False) -> CleanCells:
    """Turn raw cells into a float block; a text first row is names (``names=auto``)."""
    grid = _grid(value, what, flat_as_row)
    header, grid = _split_header(grid, names, what, ints_are_errors)
    arr, codes = _convert(grid.flat, ints_are_errors)
    arr = arr.reshape(grid.rows, grid.cols)
    codes = codes.reshape(grid.rows, grid.cols)
    return CleanCells(arr, codes, header)


def drop_reason(code: int) -> str:
    """Why a row with this cell code was left out ("" for a usable row)."""
    return _REASON.get(int(code), "")


def _row_codes(*blocks: np.ndarray) -> np.ndarray:
    return np.max(np.hstack([b.reshape(b.shape[0], -1) for b in blocks]), axis=1)


def _drop_summary(row_codes: np.ndarray) -> tuple[tuple[str, int], ...]:
    out = []
    for code in (BLANK, TEXT, ERROR, BOOL, NONFINITE):
        n = int(np.count_nonzero(row_codes == code))
        if n:
            out.append((_REASON[code], n))
    return tuple(out)


def _drops_text(summary: tuple[tuple[str, int], ...]) -> str:
    total = sum(n for _, n in summary)
    parts = ", ".join(f"{reason} {n}" for reason, n in summary)
    return f"{total} row{'s' if total != 1 else ''} dropped ({parts})"


def xlwings_like(value: Any) -> Any:
    """A file reader's cell values as xlwings hands them: whole numbers (``int``) become
    ``float``, so the worksheet functions can be called with them directly."""
    if isinstance(value, (list, tuple)):
        return [xlwings_like(v) for v in value]
    if isinstance(value, int) and not isinstance(value, bool):
        try:
            return float(value)
        except OverflowError:
            return math.inf
    return value


# --- arguments that are single cells -------------------------------------------------------

_MODEL_HELP = ("a degree 1-10 (one x column), 'surface', 'linear', 'interact' or a term "
               "list such as 'size, size^2'")


def _single(value: Any, what: str) -> Any:
    if isinstance(value, np.ndarray):
        value = value.tolist()
    while isinstance(value, (list, tuple)):
        if len(value) != 1:
            raise CellError(f"{what} must be one cell; got {len(value)} values")
        value = value[0]
    return value


def model_value(model: Any, *, ints_are_errors: bool = True) -> int | str:
    """The model argument as the engine takes it: an int degree or the model text."""
    m = _single(model, "model")
    if m is None or (isinstance(m, str) and not m.strip()):
        raise CellError(f"model is missing: give {_MODEL_HELP}")
    if isinstance(m, (bool, np.bool_)):
        raise CellError(f"model must be {_MODEL_HELP}; got {m}")
    if isinstance(m, int):
        # error cells arrive as negative ints; a positive int is a degree typed in code
        if ints_are_errors and m < 0:
            raise CellError("the model cell holds an error value; fix that cell")
        return m
    if isinstance(m, str):
        if is_error_text(m):
            raise CellError(f"the model cell holds an error ({m.strip()}); fix that cell")
        return m.strip()
    if isinstance(m, numbers.Real) and not isinstance(m, (dt.date, dt.time)):
        v = float(m)
        if not math.isfinite(v):
            raise CellError(f"model must be {_MODEL_HELP}; got {v}")
        if not v.is_integer():
            raise CellError(f"model {v!r} is not a whole-number degree; give {_MODEL_HELP}")
        return int(v)
    raise CellError(f"model must be {_MODEL_HELP}; got {m!r}")


def options_value(options: Any, *, ints_are_errors: bool = True) -> Options:
    """The options argument (text, blank or an ``Options``) parsed."""
    if isinstance(options, Options):
        return options
    o = _single(options, "options")
    if isinstance(o, int) and not isinstance(o, bool) and ints_are_errors:
        raise CellError("the options cell holds an error value; fix that cell")
    if isinstance(o, str) and is_error_text(o):
        raise CellError(f"the options cell holds an error ({o.strip()}); fix that cell")
    return parse_options(o)


# --- fitting -------------------------------------------------------------------------------

@dataclass(frozen=True)
class FitInput:
    """Cleaned arguments of a fit: y (n,) and x (n, k) with NaN in unusable rows."""

    y: np.ndarray
    x: np.ndarray
    names: tuple[str, ...] | None
    response: str | None
    model: int | str
    options: Options
    drops: tuple[tuple[str, int], ...]
    row_codes: np.ndarray  # per data row: 0 usable, else why it was dropped (see _REASON)
    weights: np.ndarray | None = None

    @property
    def n_dropped(self) -> int:
        return sum(n for _, n in self.drops)

    def key(self) -> str:
        """Content hash of everything that changes the fit."""
        return content_key("fit", self.y, self.x, self.names, self.response, self.model,
                           sorted(self.options.fit_kwargs().items()), self.weights)


def prepare_fit(y: Any, x: Any, model: Any, options: Any = None, *,
                ints_are_errors: bool = True, weights: Any = None) -> FitInput:
    """Check and clean y, x, model, options (and optional weight cells, one per row);
    raises CellError / OptionsError. Trailing rows blank in y and every x column (a
    whole-column selection) are not data and are not counted as dropped."""
    opts = options_value(options, ints_are_errors=ints_are_errors)
    mod = model_value(model, ints_are_errors=ints_are_errors)
    y_grid = _grid(y, "y").transposed_line()  # a row of y values reads as a column
    if y_grid.cols > 1:
        raise CellError(f"y must be one column (or one row); got {y_grid.rows} rows x "
                        f"{y_grid.cols} columns")
    x_grid = _grid(x, "x")
    if x_grid.rows == 1 and x_grid.cols == y_grid.rows > 1:
        x_grid = x_grid.transposed_line()  # a row of x values beside a row of y values
    yc = clean_cells(y_grid, "y", names=opts.names, ints_are_errors=ints_are_errors)
    xc = clean_cells(x_grid, "x", names=opts.names, ints_are_errors=ints_are_errors)
    if yc.n_rows == 0 or yc.n_cols == 0:
        raise CellError("y is empty; select the column of numbers to model")
    if xc.n_rows == 0 or xc.n_cols == 0:
        raise CellError("x is empty; select the predictor column(s)")
    if yc.n_rows != xc.n_rows:
        took = [w for w, c in (("y", yc), ("x", xc)) if c.names is not None]
        why = (f" (the first row of {' and '.join(took)} was taken as names; "
               "use names=no if it holds data)") if took else ""
        raise CellError(f"y has {yc.n_rows} rows but x has {xc.n_rows} rows{why}; "
                        "select ranges of the same height")
    if not (yc.codes == OK).any():
        raise CellError("y has no numbers; select the column of numbers to model")
    for j in range(xc.n_cols):
        if not (xc.codes[:, j] == OK).any():
            label = f" ({xc.names[j]})" if xc.names else ""
            raise CellError(f"x column {j + 1}{label} has no numbers")
    blank = (yc.codes[:, 0] == BLANK) & (xc.codes == BLANK).all(axis=1)
    n = len(blank) - int(np.argmax(~blank[::-1])) if not blank.all() else 0
    yv, xv = yc.values[:n, 0], xc.values[:n]
    blocks = [yc.codes[:n], xc.codes[:n]]
    wv = None
    if weights is not None:
        wc = clean_cells(_grid(weights, "weights").transposed_line(), "weights",
                         names=opts.names, ints_are_errors=ints_are_errors)
        if wc.n_cols != 1:
            raise CellError(f"weights must be one column; got {wc.n_cols} columns")
        if wc.n_rows < n or np.any(wc.codes[n:] != BLANK):
            raise CellError(f"weights has {wc.n_rows} rows but y has {n}; select ranges of "
                            "the same height")
        wv = wc.values[:n, 0]
        blocks.append(wc.codes[:n])
    row_codes = _row_codes(*blocks)
    if wv is not None:
        wv = np.where(row_codes == OK, wv, np.nan)
    response = yc.names[0] if yc.names else None
    return FitInput(yv, xv, xc.names, response, mod, opts, _drop_summary(row_codes),
                    row_codes, wv)


def _fit_now(inp: FitInput) -> FitResult:
    x = inp.x[:, 0] if inp.x.shape[1] == 1 else inp.x
    try:
        res = fit(inp.y, x, inp.model, names=inp.names, weights=inp.weights,
                  **inp.options.fit_kwargs())
    except ModelError as exc:
        text = str(exc)
        if inp.drops and re.search(r"\bfound \d+", text):
            # a shortage of rows: say how many the cell rules removed
            text += f" ({_drops_text(inp.drops)} for blank, text or error cells)"
        raise CellError(text) from None
    changes: dict[str, Any] = {}
    if inp.response and inp.response != res.response:
        changes["response"] = inp.response
    if inp.drops:
        changes["notes"] = tuple(res.notes) + (_drops_text(inp.drops),)
    if res.n_dropped != inp.n_dropped:
        # the engine drops exactly the NaN rows we hand it; keep the cell-level count
        changes["n_dropped"] = inp.n_dropped
    return replace(res, **changes) if changes else res


def fit_prepared(inp: FitInput) -> FitResult:
    """Fit cleaned input, once per content (bounded LRU cache shared by all functions)."""
    return FIT_CACHE.get_or_compute(inp.key(), lambda: _fit_now(inp))


def fit_cells(y: Any, x: Any, model: Any, options: Any = None, *,
              ints_are_errors: bool = True) -> tuple[FitResult, Options]:
    """Fit raw cell values; returns the (cached) FitResult and the parsed options."""
    inp = prepare_fit(y, x, model, options, ints_are_errors=ints_are_errors)
    return fit_prepared(inp), inp.options


# --- output tables -------------------------------------------------------------------------

def _text(s: str, limit: int = MAX_TEXT) -> str:
    s = s.replace("\r", " ").replace("\n", " ")
    return s if len(s) <= limit else s[: limit - 1] + "\u2026"


def _out(v: Any) -> Cell:
    """One output cell: finite float or text; anything else becomes ""."""
    if isinstance(v, str):
        return _text(v)
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, numbers.Real):
        f = float(v)
        return f if math.isfinite(f) else ""
    return "" if v is None else _text(str(v))


def _finish(table: list[list[Any]]) -> Table:
    width = max((len(r) for r in table), default=0)
    return [[_out(v) for v in r] + [""] * (width - len(r)) for r in table]


def _missing_word(v: Any) -> str | None:
    """None for a finite number; otherwise how to describe the blank cell."""
    if isinstance(v, numbers.Real) and not isinstance(v, bool):
        f = float(v)
        if math.isfinite(f):
            return None
        return "not defined" if math.isnan(f) else "infinite"
    return "not defined"


def _wrap(text: str, width: int) -> list[str]:
    words, lines, line = text.split(), [], ""
    for w in words:
        while len(w) > width:
            if line:
                lines.append(line)
                line = ""
            lines.append(w[:width])
            w = w[width:]
        if not line:
            line = w
        elif len(line) + 1 + len(w) <= width:
            line += " " + w
        else:
            lines.append(line)
            line = w
    if line:
        lines.append(line)
    return lines or [""]


def _blank_note(blanks: dict[str, str]) -> str | None:
    if not blanks:
        return None
    return "blank cells: " + ", ".join(f"{k} {v}" for k, v in blanks.items())


def coef_table(result: FitResult, options: Options | None = None) -> Table:
    """One row per term: estimate, standard error, t ratio, p-value, interval, VIFs.

    VIF columns are blank for the intercept; any other blank gets a note row below."""
    opts = options or Options()
    rows: list[list[Any]] = [list(COEF_COLUMNS)] if opts.header else []
    blanks: dict[str, str] = {}
    for c in result.coefficients:
        row: list[Any] = [c.term]
        for col in COEF_COLUMNS[1:]:
            v = getattr(c, col)
            word = _missing_word(v)
            if word and not (c.term == "intercept" and col.startswith("vif")):
                blanks.setdefault(col, word)
            row.append(v)
        rows.append(row)
    note = _blank_note(blanks)
    if note:
        rows.extend([line] for line in _wrap("note: " + note, MAX_TEXT))
    return _finish(rows)


def stats_table(result: FitResult, options: Options | None = None) -> Table:
    """Rows ``statistic, value``: model, n_used, n_dropped, the FitStats fields, level,
    then ``note`` rows (engine notes, dropped rows, blank values)."""
    opts = options or Options()
    rows: list[list[Any]] = [["statistic", "value"]] if opts.header else []
    rows.append(["model", result.model_text])
    blanks: dict[str, str] = {}
    for f in fields(result.stats):
        v = getattr(result.stats, f.name)
        word = _missing_word(v)
        if word:
            blanks[f.name] = word
        rows.append([f.name, v])
        if f.name == "n_used":
            rows.append(["n_dropped", result.n_dropped])
    rows.append(["level", result.level])
    notes = list(result.notes)
    note = _blank_note(blanks)
    if note:
        notes.append(note)
    for n in notes:
        rows.extend(["note", line] for line in _wrap(n, MAX_TEXT))
    return _finish(rows)


def _order_by_names(block: CleanCells, predictors: tuple[str, ...]) -> CleanCells:
    """Reorder new_x columns when its header names the model's predictors."""
    if block.names is None or len(block.names) != len(predictors):
        return block
    want = [p.strip().lower() for p in predictors]
    have = [n.strip().lower() for n in block.names]
    if sorted(want) != sorted(have) or want == have or len(set(have)) != len(have):
        return block
    idx = [have.index(p) for p in want]
    return CleanCells(block.values[:, idx], block.codes[:, idx],
                      tuple(block.names[i] for i in idx))


def new_points(result: FitResult, new_x: Any, options: Options | None = None, *,
               ints_are_errors: bool = True, what: str = "new_x"
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Points to evaluate a fit at, from raw cells: ``(points, good, codes)`` with one entry
    per row of ``what`` (after its header); ``points`` holds only the usable rows."""
    opts = options or Options()
    predictors = tuple(result.spec.predictors)
    k = len(predictors)
    flat_as_row = False
    raw = _from_array(new_x)
    if isinstance(raw, (list, tuple)) and raw and not isinstance(raw[0], (list, tuple)):
        # a flat list is a column of points for one predictor, one point for k predictors
        if k > 1:
            if len(raw) != k:
                raise CellError(f"{what} has {len(raw)} values in one row or column but the "
                                f"model has {k} predictors ({', '.join(predictors)}); "
                                "give one row per point, one column per predictor")
            flat_as_row = True
    block = clean_cells(raw, what, names=opts.names, ints_are_errors=ints_are_errors,
                        flat_as_row=flat_as_row)
    if block.n_rows == 0:
        raise CellError(f"{what} has no rows; select the x values to evaluate at")
    if block.n_cols != k:
        raise CellError(f"{what} has {block.n_cols} columns but the model has {k} "
                        f"predictor{'s' if k != 1 else ''} ({', '.join(predictors)})")
    block = _order_by_names(block, predictors)
    codes = block.codes.max(axis=1)
    good = codes == OK
    pts = block.values[good]
    return (pts[:, 0] if k == 1 else pts), good, codes


def _aligned(good: np.ndarray, codes: np.ndarray, width: int, what: str,
             row_of: Callable[[int], list[Any]]) -> list[list[Any]]:
    """One output row per input row: ``row_of(j)`` for the j-th usable row, blanks and a
    ``dropped: ...`` flag for the others."""
    rows, j = [], 0
    for i in range(len(good)):
        if not good[i]:
            rows.append([""] * (width - 1) + [f"dropped: {_REASON[int(codes[i])]} in {what}"])
            continue
        rows.append(row_of(j))
        j += 1
    return rows


def predict_table(result: FitResult, new_x: Any, options: Options | None = None, *,
                  ints_are_errors: bool = True) -> Table:
    """One row per row of ``new_x`` (after its header row, if any): fitted value,
    confidence and prediction intervals, leverage and ``range_flag`` (``inside``,
    ``extrapolated`` or ``dropped: ...`` with blanks for a row that has no usable x)."""
    opts = options or Options()
    pts, good, codes = new_points(result, new_x, opts, ints_are_errors=ints_are_errors)
    rows: list[list[Any]] = [list(PREDICT_COLUMNS)] if opts.header else []
    pred = result.predict(pts, level=opts.level) if good.any() else None

    def row_of(j: int) -> list[Any]:
        assert pred is not None
        vals = [pred.fitted[j], pred.ci_lower[j], pred.ci_upper[j], pred.pi_lower[j],
                pred.pi_upper[j], pred.leverage[j]]
        flag = "extrapolated" if bool(pred.extrapolated[j]) else "inside"
        missing = [name for name, v in zip(PREDICT_COLUMNS, vals) if _missing_word(v)]
        if missing:
            flag += "; blank: " + ", ".join(missing) + " not finite"
        return vals + [flag]

    rows += _aligned(good, codes, len(PREDICT_COLUMNS), "new_x", row_of)
    return _finish(rows)


def equation_text(result: FitResult, options: Options | None = None) -> Table:
    """One cell: the fitted equation in raw units with round-trip coefficients."""
    text = result.equation()
    if len(text) > MAX_CELL_TEXT:
        raise CellError(f"the equation has {len(text)} characters, more than a cell holds; "
                        "use XB_COEFS for the coefficients")
    return [[text]]


def _version(dist: str) -> str:
    try:
        return importlib.metadata.version(dist)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def info_table(options: Options | None = None) -> Table:
    """Versions of xlbridge, Python and the numerical dependencies, for audit trails."""
    opts = options or Options()
    own = getattr(sys.modules.get("xlbridge"), "__version__", None) or _version("xlbridge")
    rows: list[list[Any]] = [["component", "version"]] if opts.header else []
    rows += [
        ["xlbridge", own],
        ["python", platform.python_version()],
        ["numpy", np.__version__],
        ["scipy", _version("scipy")],
        ["xlwings", _version("xlwings")],
        ["platform", platform.platform()],
    ]
    return _finish(rows)


# --- one call per worksheet function (raise on bad input; wrap with ``guarded``) ------------

def coefs_cells(y: Any, x: Any, model: Any, options: Any = None, *,
                ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return coef_table(res, opts)


def stats_cells(y: Any, x: Any, model: Any, options: Any = None, *,
                ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return stats_table(res, opts)


def predict_cells(y: Any, x: Any, model: Any, new_x: Any, options: Any = None, *,
                  ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return predict_table(res, new_x, opts, ints_are_errors=ints_are_errors)


def equation_cells(y: Any, x: Any, model: Any, options: Any = None, *,
                   ints_are_errors: bool = True) -> Table:
    res, opts = fit_cells(y, x, model, options, ints_are_errors=ints_are_errors)
    return equation_text(res, opts)


def info_cells() -> Table:
    return info_table()


# --- errors --------------------------------------------------------------------------------

_USER_ERRORS = (CellError, OptionsError, ModelError)


def error_message(exc: BaseException) -> str:
    """The one-line ``xlbridge: ...`` text shown for an exception (never a traceback)."""
    if isinstance(exc, _USER_ERRORS):
        text = str(exc)
    elif isinstance(exc, MemoryError):
        text = "not enough memory for this fit; use fewer rows or a smaller model"
    else:
        text = (f"internal error ({type(exc).__name__}: {exc}); please report it "
                "with the inputs that caused it")
    text = " ".join(text.split())
    if not text.lower().startswith("xlbridge:"):
        text = PREFIX + text
    return _text(text, 1000)


P = ParamSpec("P")


def guarded(fn: Callable[P, Table]) -> Callable[P, Table]:
    """Wrap a table function so any exception becomes ``[["xlbridge: ..."]]``."""

    @functools.wraps(fn)
    def wrapper(*args: P.args, **kwargs: P.kwargs) -> Table:
        try:
            return fn(*args, **kwargs)
        except Exception as exc:  # noqa: BLE001 - a cell must never show a traceback
            return [[error_message(exc)]]

    return wrapper


def run_guarded(fn: Callable[..., Table], *args: Any, **kwargs: Any) -> Table:
    """Call ``fn`` and turn any exception into a one-cell ``xlbridge:`` message."""
    return guarded(fn)(*args, **kwargs)
