"""The formula cells of a workbook, as text: plain formulas and array formulas.

Read with openpyxl (formulas, not values): from a workbook already open for a copy, or
read-only from the file, skipping sheets whose XML holds no formula at all.
"""

from __future__ import annotations

import warnings
import zipfile
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from xlbridge.book.reader import Book
from xlbridge.book.refs import Area, RefError, parse_ref
from xlbridge.book.safety import BookError, safe_openpyxl

__all__ = ["FormulaCell", "FormulaIndex", "formula_index"]


@dataclass(frozen=True)
class FormulaCell:
    sheet: str
    row: int
    col: int
    text: str  # with leading "="
    array_ref: Area | None = None  # set for array formulas


#: Formula cells by sheet name, then by (row, column).
FormulaIndex = dict[str, dict[tuple[int, int], FormulaCell]]


def _cell_formula(cell: Any, sheet: str) -> FormulaCell | None:
    if getattr(cell, "data_type", None) != "f":
        return None
    v = cell.value
    text = getattr(v, "text", None)
    if text is not None:  # openpyxl ArrayFormula
        try:
            ref = parse_ref(v.ref)
        except RefError:
            ref = None
        area = ref.with_sheet(sheet) if isinstance(ref, Area) else None
        t = str(text)
        return FormulaCell(sheet, cell.row, cell.column, t if t.startswith("=") else "=" + t,
                           area)
    if isinstance(v, str):
        return FormulaCell(sheet, cell.row, cell.column, v if v.startswith("=") else "=" + v)
    return None


def _sheets_with_formulas(book: Book) -> list[str]:
    """Sheets whose XML holds a formula at all (a byte test; data sheets are skipped)."""
    out = []
    with zipfile.ZipFile(book.path) as zf:
        for name in book.sheet_names:
            part = book.sheet_part(name)
            if part is None:
                out.append(name)
                continue
            data = zf.read(part)
            if b"<f" in data or b"<sheetData" not in data:
                out.append(name)
    return out


def _stored_cells(ws: Any) -> Iterable[Any]:
    """The cells a worksheet holds. A workbook open for a copy keeps them in a dict that
    openpyxl offers no public view of; iter_rows() would create an empty cell for every
    position of the used range (millions for a sheet with one far-away cell). Read-only
    worksheets have no such dict and stream their rows."""
    cells = getattr(ws, "_cells", None)
    return cells.values() if cells is not None else (c for row in ws.iter_rows() for c in row)


def _index_sheet(dest: dict[tuple[int, int], FormulaCell], ws: Any, name: str) -> None:
    for cell in _stored_cells(ws):
        f = _cell_formula(cell, name)
        if f is not None:
            dest[(f.row, f.col)] = f


def formula_index(book: Book, workbook: Any = None) -> FormulaIndex:
    """Every formula cell by sheet, from an open openpyxl workbook or (read-only) the file."""
    index: FormulaIndex = {s: {} for s in book.sheet_names}
    if book.kind == "csv":
        return index
    if workbook is None:
        openpyxl = safe_openpyxl()
        wanted = _sheets_with_formulas(book)
        if not wanted:
            return index
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                wb = openpyxl.load_workbook(book.path, read_only=True, data_only=False,
                                            keep_links=False)
            except Exception as exc:
                raise BookError(f"{book.path.name}: formulas cannot be read: {exc}") from None
            try:
                for name in wanted:
                    if name not in wb.sheetnames:
                        continue
                    _index_sheet(index[name], wb[name], name)
            finally:
                wb.close()
        return index
    for ws in workbook.worksheets:
        if ws.title in index:
            _index_sheet(index[ws.title], ws, ws.title)
    return index
