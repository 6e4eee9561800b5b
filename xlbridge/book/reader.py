"""Read cell values from .xlsx/.xlsm/.csv files in the shapes xlwings hands a function.

Values come from python-calamine (measured about 14x faster than openpyxl read-only on a
100,000-row sheet, start-up included); the few facts calamine does not report (which cells
hold error values, which formulas have no saved value, defined names, table layouts) come
from small targeted reads of the archive's XML parts, parsed with defusedxml.  openpyxl is
not imported here: it is needed only for writing.

Raw values: ``None`` for a blank, ``float`` for a number, ``bool``, ``datetime`` for a date
or time cell, ``str`` for text, and the error text (``"#N/A"``, ``"#DIV/0!"``) for an error
cell -- the values xlwings gives a worksheet function with ``err_to_str``.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
import zipfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from xlbridge.book.refs import MAX_COL, MAX_ROW, Area, NameRef, RefError, TableRef, parse_ref
from xlbridge.book.safety import BookError, check_archive

__all__ = ["Book", "TableInfo", "open_book", "xlwings_shape"]

_EXCEL_EPOCH = dt.datetime(1899, 12, 30)
_WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")


def xlwings_shape(block: list[list[Any]]) -> Any:
    """The value xlwings passes for a range: scalar, flat list (one row/column), or 2-D."""
    if not block or not block[0]:
        return None
    if len(block) == 1 and len(block[0]) == 1:
        return block[0][0]
    if len(block) == 1:
        return list(block[0])
    if len(block[0]) == 1:
        return [row[0] for row in block]
    return [list(row) for row in block]


def _cell_value(v: Any) -> Any:
    """calamine value -> xlwings raw value."""
    if v is None or v == "":
        return None
    t = type(v)
    if t is float or t is str or t is bool:
        return v
    if t is int:
        return float(v)
    if isinstance(v, dt.datetime):
        return v
    if isinstance(v, dt.date):
        return dt.datetime(v.year, v.month, v.day)
    if isinstance(v, dt.time):
        return dt.datetime.combine(_EXCEL_EPOCH.date(), v)
    if isinstance(v, dt.timedelta):
        return _EXCEL_EPOCH + v
    return v


@dataclass(frozen=True)
class TableInfo:
    """A worksheet table (``ListObject``): name, sheet, full area, header/totals rows."""

    name: str
    sheet: str
    area: Area
    columns: tuple[str, ...]
    header_rows: int = 1
    totals_rows: int = 0


@dataclass
class _Sheet:
    name: str
    grid: list[list[Any]]  # raw calamine rows from A1, or converted CSV rows
    converted: bool = False
    errors: dict[tuple[int, int], str] = field(default_factory=dict)
    no_value: set[tuple[int, int]] = field(default_factory=set)

    @property
    def n_rows(self) -> int:
        return len(self.grid)

    @property
    def n_cols(self) -> int:
        return max((len(r) for r in self.grid), default=0)


# --- targeted XML scans of a sheet part --------------------------------------------------

_P = rb"(?:[A-Za-z_][\w.-]*:)?"  # optional namespace prefix
_ERR_CELL = re.compile(rb"<" + _P + rb"c\s[^>]*?\bt\s*=\s*[\"']e[\"'][^>]*>")
_FORMULA = re.compile(rb"<" + _P + rb"f[\s>/]")
_CELL_END = re.compile(rb"</" + _P + rb"c>")
_R_ATTR = re.compile(rb"\br\s*=\s*[\"']\$?([A-Za-z]{1,3})\$?([0-9]+)[\"']")
_T_ATTR = re.compile(rb"\bt\s*=\s*[\"']([A-Za-z]+)[\"']")
_V_TEXT = re.compile(rb"<" + _P + rb"v>([^<]*)</" + _P + rb"v>")
_HAS_VALUE = re.compile(rb"<" + _P + rb"(?:v>[^<]|is[\s>])")


def _rc(tag: bytes) -> tuple[int, int] | None:
    m = _R_ATTR.search(tag)
    if not m:
        return None
    col = 0
    for ch in m.group(1).upper():
        col = col * 26 + ch - 64
    return int(m.group(2)), col


def _scan_sheet_xml(data: bytes) -> tuple[dict[tuple[int, int], str], set[tuple[int, int]], bool]:
    """Error cells {(row, col): "#N/A"}, formula cells without a saved value, and whether
    some cell had no ``r`` attribute (then the scan is incomplete)."""
    errors: dict[tuple[int, int], str] = {}
    no_value: set[tuple[int, int]] = set()
    incomplete = False
    # Plain substring tests first: most data sheets hold neither errors nor formulas, and
    # a regex pass over every cell of a 100,000-row sheet costs more than reading it.
    prefixed = b"<sheetData" not in data
    has_errors = prefixed or b't="e"' in data or b"t='e'" in data
    has_formulas = prefixed or b"<f" in data
    for m in _ERR_CELL.finditer(data) if has_errors else ():
        rc = _rc(m.group(0))
        if rc is None:
            incomplete = True
            continue
        end = _CELL_END.search(data, m.end())
        body = data[m.end() : end.start() if end else m.end()]
        v = _V_TEXT.search(body)
        errors[rc] = v.group(1).decode("utf-8", "replace").strip() if v else "#N/A"
    for m in _FORMULA.finditer(data) if has_formulas else ():
        start = data.rfind(b"<", 0, m.start())
        tag_end = data.find(b">", start)
        tag = data[start : tag_end + 1]
        if not re.match(rb"<" + _P + rb"c[\s>]", tag):
            continue
        rc = _rc(tag)
        if rc is None:
            incomplete = True
            continue
        end = _CELL_END.search(data, m.end())
        body = data[m.end() : end.start() if end else len(data)]
        t = _T_ATTR.search(tag)
        if _HAS_VALUE.search(body) or (t is not None and t.group(1) == b"str"):
            continue
        no_value.add(rc)
    return errors, no_value, incomplete


# --- workbook structure from the archive --------------------------------------------------

_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_REL_STRICT = "http://purl.oclc.org/ooxml/officeDocument/relationships"


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _parse_xml(data: bytes) -> Any:
    from defusedxml import ElementTree as SafeET

    return SafeET.fromstring(data, forbid_dtd=True, forbid_entities=True,
                             forbid_external=True)


def _rels(zf: zipfile.ZipFile, part: str) -> dict[str, tuple[str, str]]:
    """Relationship id -> (type suffix, absolute part name) for ``part``."""
    p = PurePosixPath(part)
    rels_name = str(p.parent / "_rels" / (p.name + ".rels")) if part else "_rels/.rels"
    try:
        root = _parse_xml(zf.read(rels_name))
    except KeyError:
        return {}
    out = {}
    for el in root:
        if _local(el.tag) != "Relationship" or el.get("TargetMode") == "External":
            continue
        target = el.get("Target", "")
        if target.startswith("/"):
            name = target.lstrip("/")
        else:
            parts: list[str] = []
            for seg in (str(p.parent) + "/" + target).split("/") if part else target.split("/"):
                if seg in ("", "."):
                    continue
                if seg == "..":
                    if parts:
                        parts.pop()
                else:
                    parts.append(seg)
            name = "/".join(parts)
        out[el.get("Id", "")] = (el.get("Type", "").rsplit("/", 1)[-1], name)
    return out


@dataclass
class _Structure:
    sheets: list[str]
    sheet_parts: dict[str, str]
    names: dict[tuple[str | None, str], str]  # (sheet scope or None, name casefold) -> text
    name_spelling: dict[str, str]
    tables: dict[str, TableInfo]


def _read_structure(zf: zipfile.ZipFile, book_name: str) -> _Structure:
    try:
        office = [t for typ, t in _rels(zf, "").values() if typ == "officeDocument"]
        wb_part = office[0] if office else "xl/workbook.xml"
        root = _parse_xml(zf.read(wb_part))
    except KeyError:
        raise BookError(f"{book_name} has no workbook part; it is not a workbook") from None
    except Exception as exc:  # defusedxml / ParseError: a damaged or hostile part
        raise BookError(f"{book_name}: the workbook part cannot be read ({exc})") from None
    wb_rels = _rels(zf, wb_part)
    sheets: list[str] = []
    sheet_parts: dict[str, str] = {}
    names: dict[tuple[str | None, str], str] = {}
    spelling: dict[str, str] = {}
    defined: list[tuple[str, str | None, str]] = []
    for el in root.iter():
        tag = _local(el.tag)
        if tag == "sheet":
            name = el.get("name", "")
            rid = el.get(f"{{{_REL}}}id") or el.get(f"{{{_REL_STRICT}}}id")
            sheets.append(name)
            if rid in wb_rels and wb_rels[rid][0] == "worksheet":
                sheet_parts[name] = wb_rels[rid][1]
        elif tag == "definedName":
            defined.append((el.get("name", ""), el.get("localSheetId"), (el.text or "").strip()))
    for name, local_id, text in defined:
        if name.lower().startswith("_xlnm."):
            continue
        scope = None
        if local_id is not None and local_id.isdigit() and int(local_id) < len(sheets):
            scope = sheets[int(local_id)].casefold()
        names[(scope, name.casefold())] = text
        spelling[name.casefold()] = name
    tables: dict[str, TableInfo] = {}
    for sheet, part in sheet_parts.items():
        for typ, tpart in _rels(zf, part).values():
            if typ != "table":
                continue
            try:
                t = _parse_xml(zf.read(tpart))
            except Exception:
                continue
            ref = t.get("ref", "")
            try:
                area = parse_ref(ref)
            except RefError:
                continue
            if not isinstance(area, Area):
                continue
            cols = tuple(
                c.get("name", "") for c in t.iter() if _local(c.tag) == "tableColumn"
            )
            tname = t.get("displayName") or t.get("name") or ""
            tables[tname.casefold()] = TableInfo(
                tname, sheet, area.with_sheet(sheet), cols,
                int(t.get("headerRowCount", "1") or 1), int(t.get("totalsRowCount", "0") or 0),
            )
    return _Structure(sheets, sheet_parts, names, spelling, tables)


# --- the book ----------------------------------------------------------------------------


class Book:
    """An input workbook opened for reading; the file itself is never written."""

    def __init__(self, path: Path, kind: str, sheets: list[str]) -> None:
        self.path = path
        self.kind = kind
        self.sheet_names = sheets
        self._sheets: dict[str, _Sheet] = {}
        self._structure: _Structure | None = None

    # subclass hooks
    def _load_sheet(self, name: str) -> _Sheet:  # pragma: no cover - abstract
        raise NotImplementedError

    def _structure_or_empty(self) -> _Structure:
        return self._structure or _Structure(self.sheet_names, {}, {}, {}, {})

    def sheet_part(self, name: str) -> str | None:
        """The archive part holding a sheet's XML (None for CSV or when not known)."""
        return self._structure_or_empty().sheet_parts.get(name)

    @property
    def tables(self) -> dict[str, TableInfo]:
        return self._structure_or_empty().tables

    @property
    def defined_names(self) -> dict[tuple[str | None, str], str]:
        return self._structure_or_empty().names

    @property
    def default_sheet(self) -> str:
        return self.sheet_names[0]

    def sheet_name(self, name: str | None) -> str:
        """Canonical spelling of a sheet name (names match regardless of case)."""
        if name is None:
            return self.default_sheet
        if name in self.sheet_names:
            return name
        for s in self.sheet_names:
            if s.casefold() == name.casefold():
                return s
        raise BookError(
            f"sheet {name!r} not found in {self.path.name}; its sheets are: "
            + ", ".join(repr(s) for s in self.sheet_names)
        )

    def _sheet(self, name: str) -> _Sheet:
        sh = self._sheets.get(name)
        if sh is None:
            sh = self._sheets[name] = self._load_sheet(name)
        return sh

    def used_extent(self, sheet: str) -> tuple[int, int]:
        """(last row, last column) of the sheet's stored cells; (0, 0) when empty."""
        sh = self._sheet(self.sheet_name(sheet))
        return sh.n_rows, sh.n_cols

    # -- references
    def resolve(self, ref: str | Area | NameRef | TableRef, default_sheet: str | None = None,
                _depth: int = 0) -> Area:
        """Reference -> concrete Area on a named sheet (whole columns trimmed)."""
        parsed = parse_ref(ref) if isinstance(ref, str) else ref
        if isinstance(parsed, Area):
            area = parsed.with_sheet(self.sheet_name(parsed.sheet or default_sheet))
            return self._trim(area)
        if isinstance(parsed, TableRef):
            return self._table_area(parsed)
        return self._name_area(parsed, default_sheet, _depth)

    def resolve_together(self, refs: list[Any], default_sheet: str | None = None
                         ) -> list[Area]:
        """Resolve several references used together (y and x of one fit): whole columns are
        cut at the same row, the last row holding data in any of them, so that they keep
        equal heights as they have in the spreadsheet."""
        areas = [self.resolve(r, default_sheet) for r in refs]
        whole = [a for a in areas if a.whole_columns]
        if len(whole) < 2:
            return areas
        last = max(a.r2 for a in whole)
        return [Area(a.sheet, a.r1, a.c1, last, a.c2, whole_columns=True) if a.whole_columns
                else a for a in areas]

    def _trim(self, area: Area) -> Area:
        if not ((area.whole_columns and area.r2 == MAX_ROW)
                or (area.whole_rows and area.c2 == MAX_COL)):
            return area  # a cell range, or whole columns already cut at the data
        sh = self._sheet(area.sheet or self.default_sheet)
        if area.whole_columns and area.r2 == MAX_ROW:
            last = 0
            for i in range(min(sh.n_rows, MAX_ROW), 0, -1):
                row = sh.grid[i - 1]
                if any(
                    self._value(sh, i, c) is not None
                    for c in range(area.c1, min(area.c2, len(row)) + 1)
                ) or any((i, c) in sh.no_value for c in range(area.c1, area.c2 + 1)):
                    last = i
                    break
            return Area(area.sheet, 1, area.c1, max(last, 1), area.c2, whole_columns=True)
        last = 0
        for r in range(area.r1, min(area.r2, sh.n_rows) + 1):
            row = sh.grid[r - 1]
            for c in range(min(len(row), MAX_COL), 0, -1):
                if self._value(sh, r, c) is not None:
                    last = max(last, c)
                    break
        return Area(area.sheet, area.r1, 1, area.r2, max(last, 1), whole_rows=True)

    def _table_area(self, ref: TableRef) -> Area:
        info = self.tables.get(ref.table.casefold())
        if info is None:
            known = ", ".join(t.name for t in self.tables.values()) or "none"
            raise BookError(
                f"{ref.label()}: no table called {ref.table!r} in {self.path.name} "
                f"(tables: {known})"
            )
        a = info.area
        h, t = info.header_rows, info.totals_rows
        parts = set(ref.parts) or {"data"}
        if "all" in parts:
            r1, r2 = a.r1, a.r2
        else:
            spans = []
            if "headers" in parts:
                if h == 0:
                    raise BookError(f"{ref.label()}: table {info.name} has no header row")
                spans.append((a.r1, a.r1 + h - 1))
            if "data" in parts:
                spans.append((a.r1 + h, a.r2 - t))
            if "totals" in parts:
                if t == 0:
                    raise BookError(f"{ref.label()}: table {info.name} has no totals row")
                spans.append((a.r2 - t + 1, a.r2))
            if "headers" in parts and "totals" in parts and "data" not in parts:
                raise BookError(f"{ref.label()}: #Headers and #Totals are not adjacent")
            r1, r2 = min(s[0] for s in spans), max(s[1] for s in spans)
        c1, c2 = a.c1, a.c2
        if ref.first is not None:
            lookup = {c.casefold(): i for i, c in enumerate(info.columns)}
            idx = []
            for col in (ref.first, ref.last or ref.first):
                if col.casefold() not in lookup:
                    raise BookError(
                        f"{ref.label()}: table {info.name} has no column {col!r}; its "
                        "columns are: " + ", ".join(repr(c) for c in info.columns)
                    )
                idx.append(lookup[col.casefold()])
            c1, c2 = a.c1 + min(idx), a.c1 + max(idx)
        if r2 < r1:
            raise BookError(f"{ref.label()}: table {info.name} has no data rows")
        return Area(info.sheet, r1, c1, r2, c2)

    def _name_area(self, ref: NameRef, default_sheet: str | None, depth: int) -> Area:
        names = self.defined_names
        key = ref.name.casefold()
        text = None
        if ref.sheet is not None:
            text = names.get((self.sheet_name(ref.sheet).casefold(), key))
        else:
            if default_sheet is not None:
                text = names.get((default_sheet.casefold(), key))
            if text is None:
                text = names.get((None, key))
            if text is None:
                scoped = [s for (s, n) in names if n == key and s is not None]
                if len(scoped) == 1:
                    text = names[(scoped[0], key)]
        if text is None:
            if ref.sheet is None and key in self.tables:
                return self._table_area(TableRef(ref.name, text=ref.name))
            if ref.off_sheet:
                raise BookError(ref.off_sheet)
            known = sorted({self._structure_or_empty().name_spelling.get(n, n)
                            for (_, n) in names})
            raise BookError(
                f"{ref.label()!r} is not a cell reference and {self.path.name} has no defined "
                "name or table of that name"
                + (f" (defined names: {', '.join(known[:20])})" if known else "")
            )
        label = ref.label()
        if "#REF!" in text.upper():
            raise BookError(f"defined name {label} refers to a deleted range ({text})")
        if depth > 5:
            raise BookError(f"defined name {label} refers to names nested too deeply")
        try:
            target = parse_ref(text)
        except RefError:
            raise BookError(
                f"defined name {label} is {text!r}, not a plain range; the runner reads "
                "names that refer to one rectangular range"
            ) from None
        return self.resolve(target, default_sheet=default_sheet, _depth=depth + 1)

    # -- values
    def _value(self, sh: _Sheet, r: int, c: int) -> Any:
        if sh.errors and (r, c) in sh.errors:
            return sh.errors[(r, c)]
        if r > len(sh.grid):
            return None
        row = sh.grid[r - 1]
        if c > len(row):
            return None
        v = row[c - 1]
        return v if sh.converted else _cell_value(v)

    def read_columns(self, area: Area) -> list[list[Any]]:
        """Raw values of a resolved area, column by column (blanks beyond the data: None)."""
        sh = self._sheet(area.sheet or self.default_sheet)
        rows = sh.grid[area.r1 - 1 : area.r2]
        pad = area.n_rows - len(rows)
        conv = _cell_value
        cols: list[list[Any]] = []
        for c in range(area.c1 - 1, area.c2):
            # calamine rows are all as wide as the sheet; CSV rows may be ragged.
            col = [row[c] if c < len(row) else None for row in rows]
            if not sh.converted:
                col = [v if v.__class__ is float else conv(v) for v in col]
            if pad > 0:
                col.extend([None] * pad)
            cols.append(col)
        if sh.errors:
            for (r, c), err in sh.errors.items():
                if area.contains(r, c):
                    cols[c - area.c1][r - area.r1] = err
        return cols

    def read_area(self, area: Area) -> list[list[Any]]:
        """Raw values of a resolved area, row by row (blanks beyond the data are None)."""
        cols = self.read_columns(area)
        return [list(r) for r in zip(*cols)]

    def xlwings_value(self, area: Area) -> Any:
        """The value xlwings would pass a worksheet function for this area."""
        if area.n_cols == 1 and area.n_rows > 1:
            return self.read_columns(area)[0]
        return xlwings_shape(self.read_area(area))

    def formulas_without_value(self, area: Area) -> list[tuple[int, int]]:
        """Cells in ``area`` holding a formula whose value was never saved."""
        sh = self._sheet(area.sheet or self.default_sheet)
        return sorted(rc for rc in sh.no_value if area.contains(*rc))

    def read(self, ref: str | Area, default_sheet: str | None = None) -> tuple[Area, list]:
        """Resolve and read; refuses areas containing formulas without saved values."""
        area = self.resolve(ref, default_sheet) if not isinstance(ref, Area) else ref
        missing = self.formulas_without_value(area)
        if missing:
            raise BookError(missing_value_message(self.path.name, area.sheet or "", missing))
        return area, self.read_area(area)

    def close(self) -> None:
        self._sheets.clear()


def missing_value_message(book: str, sheet: str, cells: Iterable[tuple[int, int]]) -> str:
    from xlbridge.book.refs import quote_sheet

    cells = list(cells)
    shown = ", ".join(
        Area(sheet, r, c, r, c).cells_text() for r, c in cells[:5]
    ) + (f" and {len(cells) - 5} more" if len(cells) > 5 else "")
    one = len(cells) == 1
    return (
        f"{quote_sheet(sheet)}!{shown} in {book} "
        + ("holds a formula whose value was" if one else "hold formulas whose values were")
        + " never saved (the file was written by a program that does not calculate); open "
        "it in a spreadsheet program, recalculate and save, then run xlbridge again"
    )


class _XlsxBook(Book):
    def __init__(self, path: Path) -> None:
        check_archive(path)
        try:
            with zipfile.ZipFile(path) as zf:
                structure = _read_structure(zf, path.name)
        except zipfile.BadZipFile as exc:
            raise BookError(f"{path.name} is a damaged workbook archive: {exc}") from None
        import python_calamine as pc

        try:
            self._cal = pc.CalamineWorkbook.from_path(str(path))
        except Exception as exc:  # calamine raises its own error classes, or ValueError
            raise BookError(f"{path.name} cannot be read as a workbook: {exc}") from None
        sheets = [m.name for m in self._cal.sheets_metadata
                  if str(m.typ).endswith("WorkSheet")] or list(self._cal.sheet_names)
        if not sheets:
            raise BookError(f"{path.name} has no worksheets")
        super().__init__(path, "xlsx", sheets)
        self._structure = structure

    def _load_sheet(self, name: str) -> _Sheet:
        try:
            grid = self._cal.get_sheet_by_name(name).to_python(skip_empty_area=False)
        except Exception as exc:
            raise BookError(f"{self.path.name}: sheet {name!r} cannot be read: {exc}") from None
        sh = _Sheet(name, grid)
        part = self._structure_or_empty().sheet_parts.get(name)
        if part:
            with zipfile.ZipFile(self.path) as zf:
                data = zf.read(part)
            errors, no_value, incomplete = _scan_sheet_xml(data)
            if incomplete:
                errors, no_value = _scan_sheet_xml_slow(data)
            sh.errors, sh.no_value = errors, no_value
        return sh

    def close(self) -> None:
        super().close()
        try:
            self._cal.close()
        except Exception:
            pass


def _scan_sheet_xml_slow(data: bytes) -> tuple[dict[tuple[int, int], str], set[tuple[int, int]]]:
    """Full streaming parse for sheets whose cells omit their ``r`` attribute."""
    from defusedxml.ElementTree import iterparse

    errors: dict[tuple[int, int], str] = {}
    no_value: set[tuple[int, int]] = set()
    row, col = 0, 0
    for event, el in iterparse(io.BytesIO(data), events=("start", "end"), forbid_dtd=True):
        tag = _local(el.tag)
        if event == "start":
            if tag == "row":  # the row number must be known before its cells end
                r = el.get("r")
                row = int(r) if r and r.isdigit() else row + 1
                col = 0
            continue
        if tag == "c":
            ref = el.get("r")
            if ref:
                p = parse_ref(ref)
                assert isinstance(p, Area)
                row, col = p.r1, p.c1
            else:
                col += 1
            kids = {_local(k.tag): k for k in el}
            if el.get("t") == "e":
                v = kids.get("v")
                errors[(row, col)] = (v.text or "#N/A").strip() if v is not None else "#N/A"
            if "f" in kids and el.get("t") != "str":
                v = kids.get("v")
                if (v is None or not (v.text or "")) and "is" not in kids:
                    no_value.add((row, col))
            el.clear()
        elif tag == "row":
            el.clear()
    return errors, no_value


_NUM = re.compile(r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*$")


def _csv_value(text: str) -> Any:
    """CSV text -> the value a spreadsheet program would put in the cell."""
    s = text.strip()
    if s == "":
        return None
    if _NUM.match(s):
        return float(s)
    up = s.upper()
    if up == "TRUE":
        return True
    if up == "FALSE":
        return False
    return text


class _CsvBook(Book):
    def __init__(self, path: Path) -> None:
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise BookError(f"cannot read {path.name}: {exc.strerror or exc}") from None
        if raw.startswith(b"PK\x03\x04"):
            raise BookError(f"{path.name} is a zip archive (a workbook?), not a CSV text file; "
                            "name it .xlsx")
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = raw.decode("cp1252", errors="replace")
        if "\x00" in text:
            raise BookError(f"{path.name} is not a text file; a CSV file must be text")
        sample = text[:65536]
        try:
            dialect: Any = csv.Sniffer().sniff(sample, delimiters=",;\t")
        except csv.Error:
            dialect = csv.excel
        grid = [[_csv_value(v) for v in row] for row in csv.reader(io.StringIO(text), dialect)]
        while grid and all(v is None for v in grid[-1]):
            grid.pop()
        sheet = path.stem
        super().__init__(path, "csv", [sheet])
        self._grid = grid

    def _load_sheet(self, name: str) -> _Sheet:
        return _Sheet(name, self._grid, converted=True)


def open_book(path: str | Path) -> Book:
    """Open .xlsx/.xlsm/.csv for reading; raises BookError with a message for bad files."""
    p = Path(path)
    if not p.exists():
        raise BookError(f"file {p} not found")
    if p.is_dir():
        raise BookError(f"{p} is a folder, not a workbook")
    suffix = p.suffix.lower()
    if suffix == ".csv":
        return _CsvBook(p)
    if suffix in _WORKBOOK_SUFFIXES:
        return _XlsxBook(p)
    if suffix in (".xls", ".xlsb", ".ods", ".numbers"):
        raise BookError(f"{p.name}: {suffix} files are not read; save it as .xlsx and try again")
    raise BookError(f"{p.name}: give an .xlsx, .xlsm or .csv file")
