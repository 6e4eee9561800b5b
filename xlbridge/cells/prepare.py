"""Cell arguments of a fit made ready for the engine, and fitting them through the cache.

One validation path: :func:`prepare_fit` checks only what is about the cells (the shape and
height of the selected ranges, header rows, rows without numbers, error values in the model
and options cells) and cleans them; whether the model, the options' values and the data can
be fitted is the engine's rule (``engine.fit``), whose message reaches the cell unchanged
(plus how many rows the cell rules dropped, when the engine finds too few).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any

import numpy as np

from ..engine import CerResult, FitResult, ModelError, fit
from ..engine.cer import METHODS, is_form
from ..engine.errors import ModelErrorKind
from .cache import FIT_CACHE, content_key
from .errors import CellError, CellErrorKind
from .guards import (
    RowNamer,
    drop_share_note,
    find_totals,
    sheet_row,
    sheet_rows_text,
    swapped_note,
    text_numbers_note,
    total_label_rows,
    totals_note,
)
from .options import Options
from .values import (
    BLANK,
    OK,
    TOTAL,
    clean_cells,
    drop_summary,
    drops_text,
    grid_of,
    model_value,
    options_value,
    row_codes,
)

__all__ = ["FitInput", "prepare_fit", "fit_prepared", "fit_cells", "model_failure",
           "polynomial_cells", "polynomial_prepared", "shared_arguments", "sheet_row",
           "sheet_row_text", "sheet_rows_text"]

SHAPE = CellErrorKind.SHAPE


@dataclass(frozen=True)
class FitInput:
    """Cleaned arguments of a fit: y (n,) and x (n, k) with NaN in unusable rows."""

    y: np.ndarray
    x: np.ndarray
    names: tuple[str, ...] | None
    response: str | None
    model: Any  # the model cell's text or number, as the engine takes it
    options: Options
    drops: tuple[tuple[str, int], ...]
    row_codes: np.ndarray  # per data row: 0 usable, else why it was dropped (drop_reason)
    weights: np.ndarray | None = None
    notes: tuple[str, ...] = ()  # what the guard rails found (totals, text numbers, ...)
    top_row: int | None = None  # sheet row of the selection's first row, when known

    @property
    def header_rows(self) -> int:
        """Rows above the data in the selected ranges (1 when a header row gave names)."""
        return int(self.names is not None or self.response is not None)

    @property
    def n_dropped(self) -> int:
        return sum(n for _, n in self.drops)

    @property
    def first_row(self) -> int | None:
        """Sheet row of data row 1 (below the header rows), when known."""
        return None if self.top_row is None else self.top_row + self.header_rows

    def key(self) -> str:
        """Content hash of everything that changes the fit."""
        return self._key

    @cached_property
    def _key(self) -> str:
        # a FitInput shared by several functions (shared_arguments) is hashed once
        return content_key("fit", self.y, self.x, self.names, self.response, self.model,
                           sorted(self.options.fit_kwargs().items()), self.weights,
                           self.notes, self.top_row)


#: FitInputs prepared inside ``shared_arguments()``, by the identity of the arguments
_SHARED: ContextVar[dict[tuple, tuple[FitInput, tuple]] | None] = ContextVar(
    "xlbridge_shared_arguments", default=None)
_SCALARS = (str, int, float, bool, type(None))


@contextmanager
def shared_arguments() -> Iterator[None]:
    """Within the block, :func:`prepare_fit` cleans the same argument objects once: for a
    caller that hands one unchanged value of a range to every function reading it (the
    runner), so that six formulas over the same columns clean them once, not six times.
    The caller promises not to change those objects inside the block."""
    token = _SHARED.set({})
    try:
        yield
    finally:
        _SHARED.reset(token)


def prepare_fit(y: Any, x: Any, model: Any, options: Any = None, *,
                weights: Any = None, labels: Any = None,
                first_row: int | None = None) -> FitInput:
    """Check and clean the cells of y, x, model, options (and optional weight cells, one
    per row); raises CellError / OptionsError. Trailing rows blank in y and every x column
    (a whole-column selection) are not data and are not counted as dropped.

    The guard rails (``cells.guards``) add notes: rows that look like totals are left out
    (unless totals=keep; ``labels`` are the cells of a label column, one per row, whose
    words can mark a total), numbers stored as text are counted, a fit leaving out more
    than a fifth of its rows and a y that looks like a driver are named. ``first_row`` is
    the sheet row of the first cell of y (else the options' top_row), so that notes and
    messages name sheet rows.
    Inside :func:`shared_arguments`, the same argument objects are cleaned once."""
    memo = _SHARED.get()
    if memo is None:
        return _prepare(y, x, model, options, weights, labels, first_row)
    args = (y, x, model, options, weights, labels, first_row)
    # scalars by value; anything else by identity, held below so that no other object
    # can take its id while the block runs
    key = tuple((type(a), a) if isinstance(a, _SCALARS) else (None, id(a)) for a in args)
    hit = memo.get(key)
    if hit is not None:
        return hit[0]
    inp = _prepare(*args)
    for a in (inp.y, inp.x, inp.row_codes, inp.weights):
        if a is not None:
            a.flags.writeable = False  # shared by every function given these arguments
    memo[key] = (inp, args)
    return inp


def _prepare(y: Any, x: Any, model: Any, options: Any, weights: Any, labels: Any,
             first_row: int | None) -> FitInput:
    """:func:`prepare_fit` without the sharing."""
    opts = options_value(options)
    if first_row is None:
        first_row = opts.top_row
    mod = model_value(model)
    y_grid = grid_of(y, "y").transposed_line()  # a row of y values reads as a column
    if y_grid.cols > 1:
        raise CellError(f"y must be one column (or one row); got {y_grid.rows} rows x "
                        f"{y_grid.cols} columns", SHAPE)
    # a flat x is one predictor column, except beside a single y value: then it was one row
    # (one observation of several predictors), the only way a runtime flattens such an x
    x_grid = grid_of(x, "x", flat_as_row=y_grid.rows == 1)
    if x_grid.rows == 1 and x_grid.cols == y_grid.rows > 1:
        x_grid = x_grid.transposed_line()  # a row of x values beside a row of y values
    yc = clean_cells(y_grid, "y", names=opts.names)
    xc = clean_cells(x_grid, "x", names=opts.names)
    if yc.n_rows == 0 or yc.n_cols == 0:
        raise CellError("y is empty; select the column of numbers to model", SHAPE)
    if xc.n_rows == 0 or xc.n_cols == 0:
        raise CellError("x is empty; select the predictor column(s)", SHAPE)
    if yc.n_rows != xc.n_rows:
        # the heights of the selected ranges, before blank trailing rows are trimmed
        took = [w for w, c in (("y", yc), ("x", xc)) if c.names is not None]
        why = (f" (the first row of {' and '.join(took)} was taken as names; "
               "use names=no if it holds data)") if took else ""
        raise CellError(f"y has {yc.n_rows} rows but x has {xc.n_rows} rows{why}; "
                        "select ranges of the same height", SHAPE)
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
        wc = clean_cells(grid_of(weights, "weights").transposed_line(), "weights",
                         names=opts.names)
        if wc.n_cols != 1:
            raise CellError(f"weights must be one column; got {wc.n_cols} columns", SHAPE)
        if wc.n_rows < n or np.any(wc.codes[n:] != BLANK):
            raise CellError(f"weights has {wc.n_rows} rows but y has {n}; select ranges of "
                            "the same height", SHAPE)
        wv = wc.values[:n, 0]
        blocks.append(wc.codes[:n])
    codes = row_codes(*blocks)
    namer = RowNamer(first_row, int(yc.names is not None or xc.names is not None))
    notes = []
    texts = [c.text_numbers[:n] for c in (yc, xc) if c.text_numbers is not None]
    if texts:
        per_row = np.hstack(texts).sum(axis=1) * (codes == OK)
        rows = np.flatnonzero(per_row) + 1
        if len(rows):
            notes.append(text_numbers_note(rows, int(per_row.sum()), namer))
    if opts.totals == "drop":
        codes = codes.copy()
        labelled = total_label_rows(labels, n, namer.header_rows) & (codes == OK)
        sums = find_totals(yv, xv, (codes == OK) & ~labelled)
        for rows, why in ((np.flatnonzero(labelled), "its label reads like a total"),
                          ([i for i, _ in sums], "y and x equal the "
                           + " or ".join(sorted({k for _, k in sums})) + " of the rows above")):
            if len(rows):
                codes[np.asarray(rows)] = TOTAL
                notes.append(totals_note(np.asarray(rows) + 1, why, namer))
        yv = np.where(codes == TOTAL, np.nan, yv)
        xv = np.where((codes == TOTAL)[:, None], np.nan, xv)
    loud = drop_share_note(int(np.count_nonzero(codes != OK)), n)
    notes += [t for t in (loud, swapped_note(yv, xv)) if t]
    if wv is not None:
        wv = np.where(codes == OK, wv, np.nan)
    response = yc.names[0] if yc.names else None
    return FitInput(yv, xv, xc.names, response, mod, opts, drop_summary(codes), codes, wv,
                    tuple(notes), first_row)


def dropped_rows_note(inp: FitInput) -> str:
    """``"2 rows dropped (text 1, total 1)"``, naming the sheet rows when they are known."""
    text = drops_text(inp.drops)
    if inp.first_row is None:
        return text
    rows = np.flatnonzero(inp.row_codes != OK) + 1
    return f"{text}: {sheet_rows_text(rows, inp.first_row)}"


def model_failure(exc: ModelError, inp: FitInput) -> CellError:
    """The engine's refusal of a fit as a cell error; when it found too few rows or
    distinct x values, say how many rows the cell rules removed."""
    text = str(exc).rstrip(".")
    if inp.drops and getattr(exc, "kind", None) is ModelErrorKind.SHORTAGE:
        text += f" ({drops_text(inp.drops)} for blank, text or error cells)"
    if is_form(inp.model) and inp.options.method is None:
        text += f" (in the options: method={'|'.join(METHODS)}, e.g. method=mupe)"
    text += sheet_row_text(getattr(exc, "row", None), inp.header_rows, inp.first_row)
    return CellError.from_model(exc, text)


def sheet_row_text(row: int | None, header_rows: int, first_row: int | None = None) -> str:
    """Where the engine's data ``row`` sits: its sheet row when ``first_row`` (the sheet row
    of data row 1) is known, else its row in the selected range when a header row above the
    data shifts it ("" when the data row is the range's row, or no row is named)."""
    if row is None:
        return ""
    if first_row is not None:
        return f" (data row {row} is sheet row {sheet_row(row, first_row)})"
    if not header_rows:
        return ""
    return (f" (data row {row} is row {row + header_rows} of the selected range, counting "
            "its header row)")


def _fit_now(inp: FitInput) -> FitResult:
    x = inp.x[:, 0] if inp.x.shape[1] == 1 else inp.x
    try:
        res = fit(inp.y, x, inp.model, names=inp.names, weights=inp.weights,
                  **inp.options.fit_kwargs())
    except ModelError as exc:
        raise model_failure(exc, inp) from None
    changes: dict[str, Any] = {}
    if inp.response and inp.response != res.response:
        changes["response"] = inp.response
    if inp.drops or inp.notes:
        changes["notes"] = tuple(res.notes) + inp.notes + (
            (dropped_rows_note(inp),) if inp.drops else ())
    if res.n_dropped != inp.n_dropped:
        # the engine drops exactly the NaN rows we hand it; keep the cell-level count
        changes["n_dropped"] = inp.n_dropped
    return replace(res, **changes) if changes else res


def fit_prepared(inp: FitInput) -> FitResult:
    """Fit cleaned input, once per content (bounded LRU cache shared by all functions)."""
    return FIT_CACHE.get_or_compute(inp.key(), lambda: _fit_now(inp))


def polynomial_prepared(inp: FitInput) -> FitResult:
    """``fit_prepared`` for the tables of polynomial and surface fits only (checks, row
    diagnostics, optimum, slopes, figures): a CER form is refused, naming what to use."""
    res = fit_prepared(inp)
    if isinstance(res, CerResult):
        raise CellError(f"this table is made for polynomial and surface models; for a "
                        f"{res.form} CER use the coefficients, statistics, predictions, "
                        "percentiles (XB_PLEVELS) or its card (XB_CERCARD)",
                        CellErrorKind.OPTIONS)
    return res


def polynomial_cells(y: Any, x: Any, model: Any, options: Any = None
                     ) -> tuple[FitResult, Options]:
    """``fit_cells`` for the tables of polynomial and surface fits only."""
    inp = prepare_fit(y, x, model, options)
    return polynomial_prepared(inp), inp.options


def fit_cells(y: Any, x: Any, model: Any, options: Any = None) -> tuple[FitResult, Options]:
    """Fit raw cell values; returns the (cached) FitResult and the parsed options."""
    inp = prepare_fit(y, x, model, options)
    return fit_prepared(inp), inp.options
