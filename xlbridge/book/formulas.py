"""The formula cells of a workbook, as text: plain formulas and array formulas.

Read from each sheet's XML by one scan for ``<f>`` elements (sheets without any are
skipped by a byte test). A sheet whose formulas the scan does not read itself (shared
formulas, which must be translated cell by cell; cells without their ``r`` attribute; a
part that is not UTF-8) is read with openpyxl, as is an open openpyxl workbook if given.
"""

from __future__ import annotations

import re
import warnings
import zipfile
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from xlbridge.book.reader import Book
from xlbridge.book.refs import MAX_COL, MAX_ROW, Area, RefError, parse_ref, quote_sheet
from xlbridge.book.safety import MAX_BLOCK_CELLS, BookError, reader_guard, safe_openpyxl
from xlbridge.book.values import MAX_NAME_CHARS

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


_P = rb"(?:[A-Za-z_][\w.-]*:)?"
_ATTRS = rb"(?:\s+[A-Za-z_][\w.:-]*\s*=\s*(?:\"[^\"]*\"|'[^']*'))*\s*"
#: A cell whose first child is a formula: <c ...><f ...>text</f> or <f .../>.
_FORMULA_CELL = re.compile(rb"<" + _P + rb"c(" + _ATTRS + rb")>\s*<" + _P + rb"f(" + _ATTRS
                           + rb")(?:/>|>([^<]*)</" + _P + rb"f>)")
_ATTR = re.compile(rb"([A-Za-z_][\w.:-]*)\s*=\s*(?:\"([^\"]*)\"|'([^']*)')")
_ENTITY = re.compile(r"&(?:(amp|lt|gt|quot|apos)|#([0-9]{1,7})|#x([0-9A-Fa-f]{1,6}));")
_NAMED = {"amp": "&", "lt": "<", "gt": ">", "quot": '"', "apos": "'"}


class _NeedsOpenpyxl(Exception):
    """The scan cannot read this sheet's formulas itself."""


def _unescape(text: str) -> str:
    def one(m: re.Match[str]) -> str:
        if m.group(1):
            return _NAMED[m.group(1)]
        return chr(int(m.group(2)) if m.group(2) else int(m.group(3), 16))
    return _ENTITY.sub(one, text) if "&" in text else text


def _scan_formulas(data: bytes, sheet: str) -> dict[tuple[int, int], FormulaCell]:
    """The formula cells of a worksheet part, read from its XML."""
    head = data[:200]
    if head[:2] in (b"\xff\xfe", b"\xfe\xff") or b"\x00" in head[:4]:
        raise _NeedsOpenpyxl
    out: dict[tuple[int, int], FormulaCell] = {}
    found = 0
    for m in _FORMULA_CELL.finditer(data):
        found += 1
        c_attrs = {k: a if a is not None else b for k, a, b in _ATTR.findall(m.group(1))}
        f_attrs = {k: a if a is not None else b for k, a, b in _ATTR.findall(m.group(2))}
        kind = f_attrs.get(b"t", b"normal")
        ref = c_attrs.get(b"r")
        if ref is None or kind == b"shared":
            raise _NeedsOpenpyxl
        if kind not in (b"normal", b"array") or m.group(3) is None:
            continue  # data tables and empty formulas are no formulas to evaluate
        try:
            at = parse_ref(ref.decode("ascii"))
            text = _unescape(m.group(3).decode("utf-8"))
        except (RefError, UnicodeDecodeError):
            raise _NeedsOpenpyxl from None
        if not isinstance(at, Area):
            raise _NeedsOpenpyxl
        area = None
        if kind == b"array":
            try:
                arr = parse_ref(f_attrs.get(b"ref", ref).decode("ascii"))
            except (RefError, UnicodeDecodeError):
                arr = None
            area = arr.with_sheet(sheet) if isinstance(arr, Area) else None
        out[(at.r1, at.c1)] = FormulaCell(sheet, at.r1, at.c1, "=" + text, area)
    if found != len(re.findall(rb"<" + _P + rb"f[\s>/]", data)):
        raise _NeedsOpenpyxl  # a formula not where the scan expects it
    return out


def _formula_boxes(book: Book) -> dict[str, tuple[int, int, int, int]]:
    """The block holding formulas of each sheet that has any (from the book's one scan of
    each sheet); refuses a block larger than MAX_BLOCK_CELLS."""
    boxes = {}
    for name in book.sheet_names:
        box = book.formula_box(name)
        if box is None:
            continue
        r1, c1, r2, c2 = box
        if (r2 - r1 + 1) * (c2 - c1 + 1) > MAX_BLOCK_CELLS:
            block = Area(name, r1, c1, r2, c2)
            raise BookError(
                f"{book.path.name}: the formulas of {quote_sheet(name[:MAX_NAME_CHARS])} "
                f"spread over {block.cells_text()} ({block.n_rows * block.n_cols:,} cells; "
                f"the limit is {MAX_BLOCK_CELLS:,}); delete the formulas far from the "
                "others and try again"
            )
        boxes[name] = box
    return boxes


def _scan_book(book: Book, index: FormulaIndex,
               boxes: dict[str, tuple[int, int, int, int]]) -> list[str]:
    """Fill ``index`` from the XML of the sheets that hold formulas (the book's scan tells
    which); returns the sheets left for openpyxl."""
    rest = []
    with reader_guard(book.path.name), zipfile.ZipFile(book.path) as zf:
        for name in boxes:
            part = book.sheet_part(name)
            if part is None:
                rest.append(name)
                continue
            data = zf.read(part)
            try:
                index[name].update(_scan_formulas(data, name))
            except _NeedsOpenpyxl:
                rest.append(name)
    return rest


def _stored_cells(ws: Any, box: tuple[int, int, int, int]) -> Iterable[Any]:
    """The cells a worksheet holds. A workbook open for a copy keeps them in a dict that
    openpyxl offers no public view of; iter_rows() would create an empty cell for every
    position of the used range (millions for a sheet with one far-away cell). Read-only
    worksheets have no such dict and stream their rows, filling every gap with empty cells,
    so only the block ``box`` that holds the formulas is read."""
    cells = getattr(ws, "_cells", None)
    if cells is not None:
        return cells.values()
    r1, c1, r2, c2 = box
    return (c for row in ws.iter_rows(min_row=r1, min_col=c1, max_row=r2, max_col=c2)
            for c in row)


def _index_sheet(dest: dict[tuple[int, int], FormulaCell], ws: Any, name: str,
                 box: tuple[int, int, int, int] = (1, 1, MAX_ROW, MAX_COL)) -> None:
    for cell in _stored_cells(ws, box):
        f = _cell_formula(cell, name)
        if f is not None:
            dest[(f.row, f.col)] = f


def formula_index(book: Book, workbook: Any = None) -> FormulaIndex:
    """Every formula cell by sheet, from an open openpyxl workbook or (read-only) the file."""
    index: FormulaIndex = {s: {} for s in book.sheet_names}
    if book.kind == "csv":
        return index
    if workbook is None:
        boxes = _formula_boxes(book)
        wanted = _scan_book(book, index, boxes)
        if not wanted:
            return index
        openpyxl = safe_openpyxl()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with reader_guard(book.path.name):
                wb = openpyxl.load_workbook(book.path, read_only=True, data_only=False,
                                            keep_links=False)
            try:
                for name in wanted:
                    if name not in wb.sheetnames:
                        continue
                    with reader_guard(book.path.name, name):
                        _index_sheet(index[name], wb[name], name, boxes[name])
            finally:
                wb.close()
        return index
    for ws in workbook.worksheets:
        if ws.title in index:
            _index_sheet(index[ws.title], ws, ws.title)
    return index
