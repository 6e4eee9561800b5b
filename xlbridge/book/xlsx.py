""".xlsx/.xlsm workbooks: values through python-calamine, the rest from the archive.

Values come from python-calamine (measured about 14x faster than openpyxl read-only on a
100,000-row sheet, start-up included); the few facts calamine does not report (which cells
hold error values, which formulas have no saved value, defined names, table layouts) come
from small targeted reads of the archive's XML parts, parsed with defusedxml.  openpyxl is
not used here: it is needed only for writing.
"""

from __future__ import annotations

import io
import re
import zipfile
from pathlib import Path, PurePosixPath
from typing import Any

from xlbridge.book.refs import Area, RefError, col_number, parse_ref
from xlbridge.book.safety import BookError, check_archive
from xlbridge.book.workbook import Book, SheetData, Structure, TableInfo

__all__ = ["XlsxBook", "part_relations", "read_structure", "workbook_part"]


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
    return int(m.group(2)), col_number(m.group(1).decode("ascii"))


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
    return Structure(sheets, sheet_parts, names, spelling, tables)


class XlsxBook(Book):
    def __init__(self, path: Path) -> None:
        check_archive(path)
        try:
            with zipfile.ZipFile(path) as zf:
                structure = read_structure(zf, path.name)
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
        super().__init__(path, "xlsx", sheets, structure)

    def load_sheet(self, name: str) -> SheetData:
        try:
            grid = self._cal.get_sheet_by_name(name).to_python(skip_empty_area=False)
        except Exception as exc:
            raise BookError(f"{self.path.name}: sheet {name!r} cannot be read: {exc}") from None
        sh = SheetData(name, grid)
        part = self.sheet_part(name)
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


