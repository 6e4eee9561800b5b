""".xlsx/.xlsm workbooks: values through python-calamine or openpyxl, the rest from the archive.

Values come from python-calamine when it is installed (the ``cli`` extra; measured about 14x
faster than openpyxl read-only on a 100,000-row sheet, start-up included), else from
openpyxl's read-only reader, which gives the same values (``tests/test_fallback_reader.py``)
and installs everywhere, the browser Python included.  The few facts neither reports
(which cells hold error values, which formulas have no saved value, defined names, table
layouts) come from small targeted reads of the archive's XML parts, parsed with defusedxml.
"""

from __future__ import annotations

import io
import zipfile
from itertools import islice
from pathlib import Path, PurePosixPath
from typing import Any

from xlbridge.book.refs import Area, RefError, col_letters, parse_ref, quote_sheet
from xlbridge.book.safety import MAX_BLOCK_CELLS, BookError, check_archive, reader_guard
from xlbridge.book.sheetscan import (
    SheetScan,
    cells_up_to_column,
    far_cells,
    scan_sheet,
    scan_sheet_bytes,
)
from xlbridge.book.values import MAX_NAME_CHARS
from xlbridge.book.workbook import Book, SheetData, Structure, TableInfo, convert_column

__all__ = ["XlsxBook", "fast_reader", "part_relations", "read_structure", "workbook_part"]


def fast_reader() -> Any | None:
    """The python-calamine module when it is installed (the ``cli`` extra), else None."""
    try:
        import python_calamine
    except ImportError:
        return None
    return python_calamine


def _open_values(source: Path | io.BytesIO) -> Any:
    """A reader of saved cell values: calamine's workbook, or openpyxl's read-only one."""
    pc = fast_reader()
    if pc is not None:
        if isinstance(source, Path):
            return pc.CalamineWorkbook.from_path(str(source))
        return pc.CalamineWorkbook.from_filelike(source)
    import openpyxl

    return openpyxl.load_workbook(source, read_only=True, data_only=True, keep_links=False)


def _worksheet_names(values: Any) -> list[str]:
    if hasattr(values, "sheets_metadata"):
        return ([m.name for m in values.sheets_metadata if str(m.typ).endswith("WorkSheet")]
                or list(values.sheet_names))
    return [ws.title for ws in values.worksheets]


_ROWS_AT_ONCE = 4096  # rows turned into columns per step (the rest are never held as rows)


def _sheet_data(values: Any, name: str, scan: SheetScan | None,
                cols_read: int | None = None) -> SheetData:
    """A sheet's values from A1, column by column."""
    if hasattr(values, "sheets_metadata"):  # python-calamine
        sheet = values.get_sheet_by_name(name)
        columns = _calamine_columns(sheet)
        if columns is None:  # rows not laid out as expected: the reader's own block
            rows = sheet.to_python(skip_empty_area=False)
            return SheetData.from_rows(name, rows, cols_read=cols_read)
        n_rows = len(columns[0]) if columns else 0
        return SheetData(name, [convert_column(c) for c in columns], n_rows,
                         cols_read=cols_read)
    ws = values[name]
    ws.reset_dimensions()  # the stored dimension may be wrong; the scan counted the cells
    if scan is None:
        rows = [list(r) for r in ws.iter_rows(min_row=1, min_col=1, values_only=True)]
    elif scan.last_row == 0:
        rows = []
    else:
        rows = [list(r) for r in ws.iter_rows(min_row=1, min_col=1, max_row=scan.last_row,
                                               max_col=scan.last_col, values_only=True)]
    return SheetData.from_rows(name, rows, cols_read=cols_read)


def _calamine_columns(sheet: Any) -> list[list[Any]] | None:
    """The columns of a calamine sheet from A1 (its blanks ""), read a few thousand rows at
    a time; None when the rows do not cover the sheet's range as expected."""
    if sheet.start is None or sheet.end is None:
        return []
    (r0, c0), (r1, c1) = sheet.start, sheet.end
    height, width = r1 + 1, c1 + 1
    columns: list[list[Any]] | None = None
    seen = 0
    rows = iter(sheet.iter_rows())
    while True:
        chunk = list(islice(rows, _ROWS_AT_ONCE))
        if not chunk:
            break
        seen += len(chunk)
        lengths = set(map(len, chunk))
        if len(lengths) != 1 or seen > height:
            return None
        if columns is None:
            columns = [[] for _ in range(lengths.pop())]
        elif lengths.pop() != len(columns):
            return None
        for col, values in zip(columns, zip(*chunk)):
            col.extend(values)
    if columns is None:
        return None
    # rows and columns before the range's start may or may not be given (readers differ)
    lead_rows, lead_cols = height - seen, width - len(columns)
    if lead_rows not in (0, r0) or lead_cols not in (0, c0):
        return None
    if lead_rows:
        for col in columns:
            col[:0] = [""] * lead_rows
    return [[""] * height for _ in range(lead_cols)] + columns


# --- workbook structure from the archive --------------------------------------------------

_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_REL_STRICT = "http://purl.oclc.org/ooxml/officeDocument/relationships"


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _parse_xml(data: bytes) -> Any:
    from defusedxml import ElementTree as SafeET

    return SafeET.fromstring(data, forbid_dtd=True, forbid_entities=True,
                             forbid_external=True)


def part_relations(zf: zipfile.ZipFile, part: str) -> dict[str, tuple[str, str]]:
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


def workbook_part(zf: zipfile.ZipFile) -> str:
    """The name of the workbook part (``xl/workbook.xml`` as usually written)."""
    office = [t for typ, t in part_relations(zf, "").values() if typ == "officeDocument"]
    return office[0] if office else "xl/workbook.xml"


def read_structure(zf: zipfile.ZipFile, book_name: str) -> Structure:
    try:
        wb_part = workbook_part(zf)
        root = _parse_xml(zf.read(wb_part))
    except KeyError:
        raise BookError(f"{book_name} has no workbook part; it is not a workbook") from None
    except Exception as exc:  # defusedxml / ParseError: a damaged or hostile part
        raise BookError(f"{book_name}: the workbook part cannot be read ({exc})") from None
    wb_rels = part_relations(zf, wb_part)
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
        for typ, tpart in part_relations(zf, part).values():
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
    named = ([("sheet", n) for n in sheets] + [("defined name", n) for n in spelling.values()]
             + [("table", t.name) for t in tables.values()])
    for kind, name in named:
        if len(name) > MAX_NAME_CHARS:
            raise BookError(
                f"{book_name} has a {kind} of {len(name):,} characters ({name[:40]!r}...); "
                f"names of more than {MAX_NAME_CHARS} characters are refused. Rename it in "
                "a spreadsheet program and save again"
            )
    return Structure(sheets, sheet_parts, names, spelling, tables)


class XlsxBook(Book):
    def __init__(self, path: Path) -> None:
        check_archive(path)
        with reader_guard(path.name), zipfile.ZipFile(path) as zf:
            structure = read_structure(zf, path.name)
        with reader_guard(path.name):
            self._values = _open_values(path)
            sheets = _worksheet_names(self._values)
        if not sheets:
            raise BookError(f"{path.name} has no worksheets")
        self._scans: dict[str, SheetScan] = {}
        super().__init__(path, "xlsx", sheets, structure)

    def sheet_scan(self, name: str) -> SheetScan | None:
        """The one pass over a sheet's XML (kept for the run); None if its part is unknown."""
        part = self.sheet_part(name)
        if part is None:
            return None
        scan = self._scans.get(name)
        if scan is None:
            with reader_guard(self.path.name, name), zipfile.ZipFile(self.path) as zf:
                scan = self._scans[name] = scan_sheet(zf, part)
        return scan

    def formula_box(self, name: str) -> tuple[int, int, int, int] | None:
        scan = self.sheet_scan(name)
        return super().formula_box(name) if scan is None else scan.formula_box

    def used_extent(self, sheet: str) -> tuple[int, int]:
        scan = self.sheet_scan(self.sheet_name(sheet))
        return super().used_extent(sheet) if scan is None else (scan.last_row, scan.last_col)

    def load_sheet(self, name: str, last_col: int | None = None) -> SheetData:
        scan = self.sheet_scan(name)
        if scan is None or scan.block_cells <= MAX_BLOCK_CELLS:
            with reader_guard(self.path.name, name):
                sh = _sheet_data(self._values, name, scan)
        else:
            sh = self._load_columns(name, scan, last_col)
        if scan is not None:
            sh.errors, sh.no_value = scan.errors, scan.no_value
        return sh

    def _load_columns(self, name: str, scan: SheetScan, last_col: int | None) -> SheetData:
        """Columns 1 to ``last_col`` of a sheet too large to read whole: the reader is given
        a copy of the sheet without the cells right of them."""
        part = self.sheet_part(name)
        assert part is not None
        with reader_guard(self.path.name, name), zipfile.ZipFile(self.path) as zf:
            data = zf.read(part)
            need = scan.last_col if last_col is None else min(last_col, scan.last_col)
            if not scan.regular or need >= scan.last_col:
                raise self._too_large(name, data, scan)
            kept = cells_up_to_column(data, need)
            window = scan_sheet_bytes(kept)
            if window.block_cells > MAX_BLOCK_CELLS:
                raise self._too_large(name, kept, window)
            buf = io.BytesIO()
            with zipfile.ZipFile(buf, "w", zipfile.ZIP_STORED) as out:
                others = set(self._structure.sheet_parts.values()) - {part}
                for info in zf.infolist():
                    if info.filename not in others:
                        out.writestr(info.filename, kept if info.filename == part
                                     else zf.read(info))
            buf.seek(0)
            values = _open_values(buf)
            try:
                return _sheet_data(values, name, window, cols_read=need)
            finally:
                values.close()

    def _too_large(self, name: str, data: bytes, scan: SheetScan) -> BookError:
        by_row, by_col = far_cells(data, scan)
        corner = f"A1:{col_letters(scan.last_col)}{scan.last_row}"
        q = quote_sheet(name[:MAX_NAME_CHARS])
        far = f"{q}!{by_row}" if by_row == by_col else f"{q}!{by_row} and {q}!{by_col}"
        return BookError(
            f"{self.path.name}: reading {q}!{corner} would hold {scan.block_cells:,} cells "
            f"(the limit is {MAX_BLOCK_CELLS:,}) because of {far}, far from the other "
            "data; delete what lies far outside the data (or refer only to the columns "
            "that hold it) and try again"
        )

    def close(self) -> None:
        super().close()
        try:
            self._values.close()
        except Exception:
            pass
