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


def _scan_book(book: Book, index: FormulaIndex) -> list[str]:
    """Fill ``index`` from the sheets' XML; returns the sheets left for openpyxl."""
    rest = []
    with zipfile.ZipFile(book.path) as zf:
        for name in book.sheet_names:
            part = book.sheet_part(name)
            if part is None:
                rest.append(name)
                continue
            data = zf.read(part)
            if b"<f" not in data and b"<sheetData" in data:
                continue  # no formula at all
            try:
                index[name].update(_scan_formulas(data, name))
            except _NeedsOpenpyxl:
                rest.append(name)
    return rest


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
        wanted = _scan_book(book, index)
        if not wanted:
            return index
        openpyxl = safe_openpyxl()
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
