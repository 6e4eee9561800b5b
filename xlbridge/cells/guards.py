"""Guard rails on the cells of a fit: rows that are totals, numbers stored as text, a fit
that leaves out many rows, and a y that looks like a driver.

Each rule is here once; ``prepare.prepare_fit`` applies them, so the worksheet functions,
the command line and recalc say the same thing. Rows are named by sheet row when the
caller knows where the selection starts (``first_row``), by data row otherwise.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..engine.numtext import text_numbers_note as numbers_note
from .values import grid_of

__all__ = ["TOTAL_WORDS", "RowNamer", "sheet_row", "sheet_rows_text", "DROP_SHARE",
           "find_totals", "total_label_rows", "totals_note", "text_numbers_note",
           "drop_share_note", "swapped_note"]

# label words that mark a row as a total or summary (whole words, any case)
TOTAL_WORDS = ("total", "subtotal", "sum", "grand total", "average", "mean")
_TOTAL_RE = re.compile(r"\b(grand\s+total|sub-?\s*total|total|sum|average|mean)\b",
                       re.IGNORECASE)
# relative tolerance of "equal within rounding" for a total row
_RTOL = 1e-9
# a total sums (or averages) at least this many rows: fewer match by chance (x = 1, 2, 3)
_MIN_ROWS = 3
# a fit leaving out more than this share of its rows warns loudly
DROP_SHARE = 0.20


def sheet_row(row: int, first_row: int) -> int:
    """The sheet row of 1-based data ``row`` when data row 1 sits on sheet row ``first_row``
    (the first cell of y plus its header rows): the one rule for every row address."""
    return row + first_row - 1


def sheet_rows_text(rows: Any, first_row: int, limit: int = 12) -> str:
    """``"sheet row 6"`` / ``"sheet rows 6, 9 and 14"`` for 1-based data ``rows`` (the first
    ``limit`` named, then how many more)."""
    return _rows_text("sheet", [sheet_row(int(r), first_row) for r in rows], limit)


def _rows_text(word: str, nums: Sequence[int], limit: int = 12) -> str:
    at = [str(r) for r in nums]
    if len(at) > limit:
        at = at[:limit] + [f"{len(at) - limit} more"]
    if len(at) == 1:
        return f"{word} row {at[0]}"
    return f"{word} rows {', '.join(at[:-1])} and {at[-1]}"


@dataclass(frozen=True)
class RowNamer:
    """Names data rows (1-based) as a person finds them: by sheet row when ``first_row``
    (the sheet row of the first cell of y, above its ``header_rows``) is known, by data
    row otherwise."""

    first_row: int | None = None
    header_rows: int = 0

    def names(self, rows: Sequence[int]) -> str:
        """``"sheet rows 7 and 12"`` / ``"data row 3"`` for 1-based data rows."""
        if self.first_row is None:
            return _rows_text("data", [int(r) for r in rows])
        return sheet_rows_text(rows, self.first_row + self.header_rows)


def _near(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.abs(a - b) <= _RTOL * np.maximum(np.abs(a), np.abs(b))


def _above(col: np.ndarray, keep: np.ndarray, above_n: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray]:
    """Sum and mean of the kept values above each row of one column."""
    sums = np.cumsum(col if keep.all() else np.where(keep, col, 0.0))
    above_sum = np.concatenate([[0.0], sums[:-1]])
    return above_sum, above_sum / np.maximum(above_n, 1)


def find_totals(y: np.ndarray, x: np.ndarray, usable: np.ndarray) -> list[tuple[int, str]]:
    """(row index, "sum" or "mean") of each usable row whose y and every x equal the sum
    or the mean of the usable data rows above it: since the last total found (a subtotal)
    or since the first row (a grand total), over at least three rows whose y vary."""
    idx = np.flatnonzero(usable)
    ys, xs = y[idx], x[idx]
    data = np.ones(len(idx), dtype=bool)  # rows of data, not totals
    found: list[tuple[int, str]] = []
    start = 0
    while start < len(idx):
        best: tuple[int, str] | None = None
        for lo in sorted({0, start}):
            yb, keep = ys[lo:], data[lo:]
            counts = np.cumsum(keep)
            above_n = np.concatenate([[0], counts[:-1]])
            # y first, column by column: the other columns are compared only in the rows
            # where y matches (few), which keeps a long column's temporaries small
            y_sum, y_mean = _above(yb, keep, above_n)
            y_is_sum = _near(yb, y_sum)
            match = (above_n >= _MIN_ROWS) & (y_is_sum | _near(yb, y_mean))
            match[: start - lo] = False
            if match.any():
                # the y above a row vary once a kept y differs from the first kept one
                kept = np.flatnonzero(keep)
                differs = np.flatnonzero(yb[kept] != yb[kept[0]])
                match[: kept[differs[0]] + 1 if len(differs) else len(match)] = False
            for c in range(xs.shape[1]):
                if not match.any():
                    break
                rows = np.flatnonzero(match)
                c_sum, c_mean = _above(xs[lo:, c], keep, above_n)
                v = xs[lo + rows, c]
                match[rows] = _near(v, c_sum[rows]) | _near(v, c_mean[rows])
            if match.any():
                j = int(np.argmax(match))
                if best is None or lo + j < best[0]:
                    best = (lo + j, "sum" if y_is_sum[j] else "mean")
        if best is None:
            break
        found.append((int(idx[best[0]]), best[1]))
        data[best[0]] = False
        start = best[0] + 1
    return found


def total_label_rows(labels: Any, n: int, skip: int = 0) -> np.ndarray:
    """Rows (of the ``n`` data rows) whose label cells (a block, one row per data row,
    after ``skip`` header rows) read like a total (``TOTAL_WORDS``)."""
    out = np.zeros(n, dtype=bool)
    if labels is None:
        return out
    grid = grid_of(labels, "label").transposed_line()
    w = max(grid.cols, 1)
    for i in range(min(n, grid.rows - skip)):
        cells = grid.flat[(i + skip) * w:(i + skip + 1) * w]
        out[i] = any(isinstance(v, str) and bool(_TOTAL_RE.search(v)) for v in cells)
    return out


def totals_note(rows: Sequence[int], why: str, namer: RowNamer) -> str:
    """The note for total rows left out (``rows`` 1-based data rows)."""
    return (f"{namer.names(rows)} looked like a total ({why}) and "
            f"{'was' if len(rows) == 1 else 'were'} left out; use totals=keep to fit "
            f"{'it' if len(rows) == 1 else 'them'} as data")


def text_numbers_note(rows: Sequence[int], count: int, namer: RowNamer) -> str:
    """``"2 numbers stored as text were read: sheet rows 7 and 12"``."""
    return numbers_note(count, namer.names(rows))


def drop_share_note(dropped: int, total: int) -> str:
    """The loud note of a fit leaving out more than ``DROP_SHARE`` of its rows ("" else)."""
    if total <= 0 or dropped <= DROP_SHARE * total:
        return ""
    return (f"{dropped} of {total} rows ({100.0 * dropped / total:.0f} %) were left out; "
            "check the ranges, the CSV separator and decimal mark, and cells holding text")


def swapped_note(y: np.ndarray, x: np.ndarray) -> str:
    """A question when y looks like a driver: y holds a few distinct whole numbers (at
    most 10) while some x column varies continuously (many distinct values, not all
    whole). Never a refusal; "" when y looks like a response."""
    ok = np.isfinite(y) & np.isfinite(x).all(axis=1)
    yv, xv = y[ok], x[ok]
    if len(yv) < 12:
        return ""
    if not np.all(yv == np.round(yv)):  # before the sort of np.unique
        return ""
    distinct = np.unique(yv)
    if len(distinct) > 10:
        return ""
    for j in range(xv.shape[1]):
        col = xv[:, j]
        many = len(np.unique(col)) >= max(2 * len(distinct), len(col) // 2)
        if many and not np.all(col == np.round(col)):
            return (f"y holds only {len(distinct)} distinct whole numbers while x varies "
                    "continuously: are y and x the right way round?")
    return ""

