"""Raw spreadsheet cell values of every shape in, numbers out: the one front door.

Every xlwings runtime, a workbook reader and plain Python callers hand cells over in one of
these shapes, and the same cells give the same numbers whatever the shape:

- a block: a list (or tuple) of rows, or a 2-D numpy array; one row or one column declared
  ``ndim=2`` also arrives this way;
- a flat list (or tuple, or 1-D array): one row or one column whose orientation the runtime
  dropped. For y, x, weights and group it is one column (a row of y is the same values).
  For new_x / at_x it is a run of points when the model has one predictor (as is one row
  of a block) and one point (one row) when it has k > 1 predictors and the list holds
  exactly k values; any other length is refused (``tables.new_points``). A flat x is one
  predictor column, except beside a single y value, where it is that observation's row of
  predictors (``prepare.prepare_fit``; no model can be fitted to one row, but the message
  is then the same as for the block);
- a scalar: one cell.

Cell values (see ``clean_cells``): numbers are ``float`` or ``int`` (the runtimes in the
spreadsheet program's JavaScript host and the file readers pass whole numbers as ``int``),
numpy numbers, ``Decimal``; dates are ``datetime`` / ``date`` / ``time`` (their serial day
number, ``book.values.serial_of``) or already serial numbers; blanks ``None`` or ``""``;
booleans ``bool`` (never 1/0: text-like, the row is left out); error cells ``None`` (the
JavaScript host without ``err_to_str``), text such as ``"#N/A"``, or the automation code of
an error as an ``int`` (the classic Windows add-in, for the newer errors such as
``#SPILL!``; ``book.values.is_error_code``). Text that reads as a number once trimmed
(``" 7.5"``, ``"-1e3"``; not ``"nan"`` or ``"1_000"``) is that number, and the fit's notes
count it. A blank, other text, boolean or error cell makes its row unusable; such rows are
dropped listwise and counted in ``FitResult.n_dropped``.
"""

from __future__ import annotations

import datetime as dt
import math
import numbers
from dataclasses import dataclass
from itertools import chain
from typing import Any

import numpy as np

from ..book.values import bounded_name, is_error_code, is_error_text, serial_of
from ..engine.numtext import number_of_text
from .errors import CellError, CellErrorKind
from .options import Options, parse_options

__all__ = ["OK", "BLANK", "BOOL", "TEXT", "NONFINITE", "ERROR", "TOTAL", "MODEL_HELP", "CleanCells",
           "Grid", "clean_cells", "drop_reason", "drop_summary", "drops_text", "from_array",
           "grid_of", "group_key", "is_error_text", "model_value", "options_value",
           "row_codes", "single_value"]

SHAPE = CellErrorKind.SHAPE

# --- single cells ------------------------------------------------------------------------

OK, BLANK, BOOL, TEXT, NONFINITE, ERROR, TOTAL = range(7)
_REASON = {BLANK: "blank", BOOL: "true/false", TEXT: "text", NONFINITE: "not finite",
           ERROR: "error value", TOTAL: "total"}
# a number stored as text is read as that number (one rule for every reader and the API);
# the cell's code says so until clean_cells records it and makes it OK
TEXT_NUMBER = -1


def _number(v: float) -> tuple[float, int]:
    if math.isfinite(v):
        return v, OK
    return math.nan, BLANK if math.isnan(v) else NONFINITE


def _cell(v: Any) -> tuple[float, int]:
    """(value, code): the number a cell holds, or NaN and why it is not usable."""
    if v is None:
        return math.nan, BLANK
    if type(v) is float:
        return _number(v)
    if isinstance(v, (bool, np.bool_)):
        return math.nan, BOOL
    if isinstance(v, (int, np.integer)):
        if is_error_code(v):
            return math.nan, ERROR
        try:
            return _number(float(v))
        except OverflowError:
            return math.nan, NONFINITE
    if isinstance(v, str):
        s = v.strip()
        if not s:
            return math.nan, BLANK
        num = number_of_text(s)  # the one rule for numbers stored as text
        if num is not None:
            value, code = _number(num)
            return value, TEXT_NUMBER if code == OK else code
        return math.nan, ERROR if is_error_text(s) else TEXT
    if isinstance(v, (dt.date, dt.time)):
        return serial_of(v), OK
    if isinstance(v, numbers.Number) and not isinstance(v, complex):
        try:
            return _number(float(v))
        except (OverflowError, ValueError, TypeError):
            return math.nan, NONFINITE
    if isinstance(v, (list, tuple, dict, set, np.ndarray)):
        raise CellError("a cell holds a list of values; give one value per cell")
    return math.nan, TEXT


def _convert(values: list) -> tuple[np.ndarray, np.ndarray]:
    """Numbers and reason codes for a flat list of cell values."""
    kinds = set(map(type, values))
    if kinds <= {float, type(None)}:
        # fast path: what the classic add-in hands over for numeric ranges (None -> NaN)
        arr = np.array(values, dtype=float) if values else np.empty(0)
        codes = np.zeros(arr.shape, dtype=np.int8)
        bad = ~np.isfinite(arr)
        if bad.any():
            codes[np.isnan(arr)] = BLANK
            codes[np.isinf(arr)] = NONFINITE
            arr[bad] = np.nan
        return arr, codes
    pairs = [_cell(v) for v in values]
    arr = np.array([p[0] for p in pairs], dtype=float)
    codes = np.array([p[1] for p in pairs], dtype=np.int8)
    return arr, codes


# --- shapes --------------------------------------------------------------------------------

@dataclass(frozen=True)
class Grid:
    """A block of raw cells kept flat (row-major): copying 10,000 one-cell rows is what
    would make a cache hit slow."""

    flat: list
    rows: int
    cols: int

    def transposed_line(self) -> Grid:
        """A single row read as a single column (the same cells, in the same order)."""
        return Grid(self.flat, self.cols, 1) if self.rows == 1 else self


def from_array(value: Any) -> Any:
    """A numpy array as the nested lists a runtime would hand over (a 0-d array as its one
    value); anything else as is."""
    if isinstance(value, np.ndarray):
        if value.ndim > 2:
            raise CellError(f"an array of {value.ndim} dimensions is not a block of cells; "
                            "give rows of values", SHAPE)
        # a numeric array holds numbers only: its whole numbers are never error codes
        return (value.astype(float) if value.dtype.kind in "iu" else value).tolist()
    return value


def grid_of(value: Any, what: str, flat_as_row: bool = False) -> Grid:
    """Cells from a scalar, a flat list (a column unless ``flat_as_row``) or a list of
    lists."""
    if isinstance(value, Grid):
        return value
    value = from_array(value)
    if isinstance(value, (list, tuple)):
        n = len(value)
        if n == 0:
            return Grid([], 0, 0)
        kinds = set(map(type, value))
        nested = {k for k in kinds if issubclass(k, (list, tuple))}
        if nested:
            if nested != kinds:
                raise CellError(f"{what} mixes rows and single values; give one block of "
                                "cells", SHAPE)
            widths = set(map(len, value))
            if len(widths) > 1:
                raise CellError(f"the rows of {what} have different lengths; give a block",
                                SHAPE)
            width = widths.pop()
            if width == 0:
                return Grid([], 0, 0)
            return Grid(list(chain.from_iterable(value)), n, width)
        flat = value if isinstance(value, list) else list(value)  # never mutated
        return Grid(flat, 1, n) if flat_as_row else Grid(flat, n, 1)
    return Grid([value], 1, 1)


def _is_name(v: Any) -> bool:
    return isinstance(v, str) and bool(v.strip()) and not is_error_text(v)


def _header_name(text: str) -> str:
    """A header text as a name: spaces tidied, cut to MAX_NAME_CHARS with a note."""
    return bounded_name(" ".join(text.split()))


def _name_text(v: Any, what: str, col: int) -> str:
    if _is_name(v):
        return _header_name(v)
    if isinstance(v, float) and math.isfinite(v):
        return repr(int(v)) if v.is_integer() else repr(v)
    if isinstance(v, int) and not isinstance(v, bool) and not is_error_code(v):
        return str(v)
    raise CellError(
        f"names=yes, but the first row of {what} has no name in column {col + 1}; "
        "put a name there or use names=no"
    )


def _split_header(g: Grid, names: str, what: str) -> tuple[tuple[str, ...] | None, Grid]:
    if not g.rows or names == "no":
        return None, g
    first = g.flat[: g.cols]
    rest = Grid(g.flat[g.cols:], g.rows - 1, g.cols)
    if names == "yes":
        return tuple(_name_text(v, what, j) for j, v in enumerate(first)), rest
    if all(_is_name(v) for v in first):
        return tuple(_header_name(v) for v in first), rest
    return None, g


@dataclass(frozen=True)
class CleanCells:
    """One block of cells as numbers: ``values`` is n x k with NaN where a cell is not a
    usable number, ``codes`` says why per row (0 = usable), ``names`` came from a header
    row (None without one); ``text_numbers`` marks the cells read from numbers stored as
    text (None when there are none)."""

    values: np.ndarray
    codes: np.ndarray
    names: tuple[str, ...] | None
    text_numbers: np.ndarray | None = None

    @property
    def n_rows(self) -> int:
        return self.values.shape[0]

    @property
    def n_cols(self) -> int:
        return self.values.shape[1]


def clean_cells(value: Any, what: str = "x", *, names: str = "auto",
                flat_as_row: bool = False) -> CleanCells:
    """Turn raw cells of any shape into a float block; a text first row is names
    (``names=auto``)."""
    grid = grid_of(value, what, flat_as_row)
    header, grid = _split_header(grid, names, what)
    arr, codes = _convert(grid.flat)
    arr = arr.reshape(grid.rows, grid.cols)
    codes = codes.reshape(grid.rows, grid.cols)
    texts = codes == TEXT_NUMBER
    if texts.any():
        codes[texts] = OK
        return CleanCells(arr, codes, header, texts)
    return CleanCells(arr, codes, header)


# --- dropped rows --------------------------------------------------------------------------

def drop_reason(code: int) -> str:
    """Why a row with this cell code was left out ("" for a usable row)."""
    return _REASON.get(int(code), "")


def row_codes(*blocks: np.ndarray) -> np.ndarray:
    """One code per row over blocks of cell codes: the row's worst cell decides."""
    return np.max(np.hstack([b.reshape(b.shape[0], -1) for b in blocks]), axis=1)


def drop_summary(codes: np.ndarray) -> tuple[tuple[str, int], ...]:
    """(reason, rows) for each reason some rows were dropped, in a fixed order."""
    out = []
    for code in (BLANK, TEXT, ERROR, BOOL, NONFINITE, TOTAL):
        n = int(np.count_nonzero(codes == code))
        if n:
            out.append((_REASON[code], n))
    return tuple(out)


def drops_text(summary: tuple[tuple[str, int], ...]) -> str:
    """``"3 rows dropped (blank 2, text 1)"`` for a :func:`drop_summary`."""
    total = sum(n for _, n in summary)
    parts = ", ".join(f"{reason} {n}" for reason, n in summary)
    return f"{total} row{'s' if total != 1 else ''} dropped ({parts})"


# --- arguments that are single cells -------------------------------------------------------

MODEL_HELP = ("a degree 1-10 (one x column), 'surface', 'linear', 'interact' or a term "
              "list such as 'size, size^2'")


def single_value(value: Any, what: str) -> Any:
    """The one value of an argument that must be a single cell."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    while isinstance(value, (list, tuple)):
        if len(value) != 1:
            raise CellError(f"{what} must be one cell; got {len(value)} values", SHAPE)
        value = value[0]
    return value


def model_value(model: Any) -> Any:
    """The model cell as the engine takes it: the model text, or its number (an ``int``
    when whole). Only the cell is checked here (one cell, not blank, not an error value);
    whether the value names a model is the engine's rule (``engine.parse_model``)."""
    m = single_value(model, "model")
    if m is None or (isinstance(m, str) and not m.strip()):
        raise CellError(f"model is missing: give {MODEL_HELP}")
    if isinstance(m, str):
        if is_error_text(m):
            raise CellError(f"the model cell holds an error ({m.strip()}); fix that cell")
        return m.strip()
    if isinstance(m, (int, np.integer)) and not isinstance(m, (bool, np.bool_)):
        if is_error_code(m):
            raise CellError("the model cell holds an error value; fix that cell")
        return int(m)
    if isinstance(m, numbers.Real) and not isinstance(m, (bool, np.bool_)):
        v = float(m)
        return int(v) if v.is_integer() else v
    return m  # a boolean, date, ...: the engine says what a model must be


def options_value(options: Any) -> Options:
    """The options argument (text, blank or an ``Options``) parsed."""
    if isinstance(options, Options):
        return options
    o = single_value(options, "options")
    if isinstance(o, int) and not isinstance(o, bool) and is_error_code(o):
        raise CellError("the options cell holds an error value; fix that cell")
    if isinstance(o, str) and is_error_text(o):
        raise CellError(f"the options cell holds an error ({o.strip()}); fix that cell")
    return parse_options(o)


def group_key(v: Any) -> tuple[Any, bool]:
    """(key, usable) of one group cell: text, number, boolean or None (blank); dates as
    their serial numbers; error cells are not usable."""
    if v is None:
        return None, True
    if isinstance(v, str):
        s = v.strip()
        if is_error_text(s):
            return None, False
        return (bounded_name(s) if s else None), True
    if isinstance(v, (bool, np.bool_)):
        return bool(v), True
    if isinstance(v, (int, np.integer)):
        return (None, False) if is_error_code(v) else (float(v), True)
    if isinstance(v, (dt.date, dt.time)):
        return serial_of(v), True
    if isinstance(v, (float, np.floating)):
        return (float(v), True) if np.isfinite(v) else (None, not np.isinf(v))
    return str(v), True
