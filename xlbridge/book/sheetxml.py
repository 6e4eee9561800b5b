"""Change given cells of a worksheet part and copy every other byte of it.

One streaming pass over the rows of ``<sheetData>``: rows before, between and after the
target rows are copied as they are (the pass stops reading at the last target row); in a
target row each ``<c>`` element is read, a target cell is rewritten (its ``<f>`` kept,
its ``ref`` updated or the element dropped; its value and type set; every other attribute
and child kept) and missing cells and rows are inserted in column and row order. The
``<dimension>`` grows to cover new cells. The result is checked to be well-formed XML with
expat (no DTD, no entities), so a part this pass cannot read is refused, never guessed at.
"""

from __future__ import annotations

import datetime as dt
import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any
from xml.parsers import expat

from xlbridge.book.refs import col_letters, col_number
from xlbridge.book.safety import BookError
from xlbridge.book.values import ERROR_TEXTS, serial_of

__all__ = ["CellEdit", "MAIN_NS", "STRICT_NS", "UnsupportedPart", "check_xml",
           "patch_sheet_xml", "root_namespace", "rows_xml", "sheet_xml", "xml_text"]

MAIN_NS = b"http://schemas.openxmlformats.org/spreadsheetml/2006/main"
STRICT_NS = b"http://purl.oclc.org/ooxml/spreadsheetml/main"


class UnsupportedPart(BookError):
    """A part of the package cannot be changed safely (unreadable, strict OOXML, not
    UTF-8); nothing is written."""


@dataclass(frozen=True)
class CellEdit:
    """What to do with one cell.

    ``value``: ``None`` (no value), bool, number, date, text, or an error value text
    (``#N/A``). ``formula``: ``"keep"`` (the cell's ``<f>`` stays and the value is its
    saved result), ``"drop"`` (the ``<f>`` is removed: a frozen value) or ``"none"`` (a
    cell without a formula; one holding a formula is refused). ``array_ref``: the new range
    of a kept array formula (``A1:C5``)."""

    value: Any = None
    formula: str = "none"
    array_ref: str | None = None


_NAME = rb"[A-Za-z_][\w.-]*"
_PFX = rb"(?:" + _NAME + rb":)?"
_ATTRS = rb"(?:\s+[A-Za-z_][\w.:-]*\s*=\s*(?:\"[^\"]*\"|'[^']*'))*\s*"
_ATTR = re.compile(rb"([A-Za-z_][\w.:-]*)\s*=\s*(\"[^\"]*\"|'[^']*')")
_ROOT = re.compile(rb"<(?![?!])(" + _PFX + rb")(" + _NAME + rb")(" + _ATTRS + rb")/?>")
_SHEETDATA = re.compile(rb"<(" + _PFX + rb")sheetData(" + _ATTRS + rb")(/?)>")
_ROW = re.compile(rb"\s*<(" + _PFX + rb")row(" + _ATTRS + rb")(/?)>")
_CHILD = re.compile(rb"\s*<(" + _PFX + rb")(" + _NAME + rb")(" + _ATTRS + rb")(/?)>")
_DIMENSION = re.compile(rb"<" + _PFX + rb"dimension(" + _ATTRS + rb")/>")
_CELL_REF = re.compile(rb"\$?([A-Za-z]{1,3})\$?([0-9]{1,7})")
_SPACE = re.compile(rb"\s*")
# Characters XML 1.0 cannot hold are written as _xHHHH_, and a literal "_xHHHH_" gets its
# underscore escaped, as the spreadsheet file format does.
_UNWRITABLE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]|_(?=x[0-9A-Fa-f]{4}_)")


def _attrs(text: bytes) -> list[tuple[bytes, bytes]]:
    return [(m.group(1), m.group(2)) for m in _ATTR.finditer(text)]


def _attr(attrs: list[tuple[bytes, bytes]], name: bytes) -> bytes | None:
    for k, v in attrs:
        if k == name:
            return v[1:-1]
    return None


def _set_attr(attrs: list[tuple[bytes, bytes]], name: bytes, value: bytes | None
              ) -> list[tuple[bytes, bytes]]:
    out = [(k, v) for k, v in attrs if k != name]
    if value is not None:
        # r first, as written by every program; the rest keep their order
        out.append((name, b'"' + value + b'"'))
        out.sort(key=lambda kv: kv[0] != b"r")
    return out


def _attrs_text(attrs: list[tuple[bytes, bytes]]) -> bytes:
    return b"".join(b" " + k + b"=" + v for k, v in attrs)


def xml_text(text: str) -> bytes:
    """Text as element content: escaped, characters XML cannot hold as _xHHHH_."""
    text = _UNWRITABLE.sub(lambda m: "_x005F_" if m.group() == "_"
                           else f"_x{ord(m.group()):04X}_", text)
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return text.encode("utf-8", "replace")


def _value_xml(value: Any, pfx: bytes, in_formula: bool) -> tuple[bytes | None, bytes]:
    """(the cell's t attribute, its value children) for a value."""
    if value is None or value == "":
        return (b"str", b"<" + pfx + b"v></" + pfx + b"v>") if in_formula else (None, b"")
    if isinstance(value, bool):
        return b"b", b"<" + pfx + b"v>" + (b"1" if value else b"0") + b"</" + pfx + b"v>"
    if isinstance(value, (dt.date, dt.time, dt.timedelta)):
        value = serial_of(value)
    if isinstance(value, numbers.Real):  # numpy's numbers too
        number = float(value)
        if not math.isfinite(number):
            return _value_xml("#NUM!", pfx, in_formula)
        text = str(int(value)) if isinstance(value, numbers.Integral) else repr(number)
        return None, b"<" + pfx + b"v>" + text.encode("ascii") + b"</" + pfx + b"v>"
    text = str(value)
    if text in ERROR_TEXTS:
        return b"e", b"<" + pfx + b"v>" + xml_text(text) + b"</" + pfx + b"v>"
    if in_formula:
        return b"str", b"<" + pfx + b"v>" + xml_text(text) + b"</" + pfx + b"v>"
    space = b' xml:space="preserve"' if text != text.strip() or "\n" in text else b""
    return b"inlineStr", (b"<" + pfx + b"is><" + pfx + b"t" + space + b">" + xml_text(text)
                          + b"</" + pfx + b"t></" + pfx + b"is>")


def root_namespace(data: bytes) -> tuple[bytes, bytes, bytes]:
    """(prefix with colon, local name, namespace) of the root element of an XML part."""
    m = _ROOT.search(data, 0, 1 << 16)
    if m is None:
        raise UnsupportedPart("no root element")
    pfx = m.group(1)
    decl = b"xmlns:" + pfx[:-1] if pfx else b"xmlns"
    return pfx, m.group(2), _attr(_attrs(m.group(3)), decl) or b""


def check_xml(data: bytes, part: str) -> None:
    """Refuse a part that is not well-formed XML, or declares a DTD or entities."""
    parser = expat.ParserCreate()

    def refuse(*_: Any) -> None:
        raise UnsupportedPart(f"part {part} declares a DTD or entities; refused")

    parser.StartDoctypeDeclHandler = refuse
    parser.EntityDeclHandler = refuse
    try:
        parser.Parse(data, True)
    except expat.ExpatError as exc:
        raise UnsupportedPart(f"part {part} is not well-formed XML ({exc})") from None


def _utf8(data: bytes, part: str) -> None:
    head = data[:200]
    if head[:2] in (b"\xff\xfe", b"\xfe\xff") or b"\x00" in head[:4]:
        raise UnsupportedPart(f"part {part} is UTF-16 or UTF-32 text; the copy writer changes "
                              "UTF-8 parts only. Open the workbook and save it again")
    m = re.match(rb"(?:\xef\xbb\xbf)?\s*<\?xml[^>]*?encoding\s*=\s*[\"']([\w.-]+)", head)
    if m and m.group(1).lower().replace(b"_", b"-") not in (b"utf-8", b"utf8", b"us-ascii",
                                                             b"ascii"):
        raise UnsupportedPart(f"part {part} is in the encoding {m.group(1).decode()}; the "
                              "copy writer changes UTF-8 parts only. Open the workbook and "
                              "save it again")


def _position(attrs: list[tuple[bytes, bytes]], prev_row: int, prev_col: int,
              part: str) -> tuple[int, int]:
    ref = _attr(attrs, b"r")
    if ref is None:
        return prev_row, prev_col + 1
    m = _CELL_REF.fullmatch(ref)
    if m is None:
        raise UnsupportedPart(f"part {part}: a cell has the reference {ref.decode()!r}")
    return int(m.group(2)), col_number(m.group(1).decode("ascii").upper())


def _children(data: bytes, start: int, end: int, part: str
              ) -> list[tuple[bytes, bytes, bytes, bytes]]:
    """The child elements between ``start`` and ``end``: (local name, attributes, content,
    whole element)."""
    out = []
    pos = start
    while True:
        pos = _SPACE.match(data, pos, end).end()
        if pos >= end:
            return out
        m = _CHILD.match(data, pos, end)
        if m is None:
            raise UnsupportedPart(f"part {part}: unexpected content in a cell or row near "
                                  f"byte {pos}")
        pfx, name = m.group(1), m.group(2)
        if m.group(4):
            out.append((name, m.group(3), b"", data[pos : m.end()]))
            pos = m.end()
            continue
        close = data.find(b"</" + pfx + name + b">", m.end(), end)
        if close < 0:
            raise UnsupportedPart(f"part {part}: element {name.decode()} is not closed")
        stop = close + len(pfx) + len(name) + 3
        out.append((name, m.group(3), data[m.end() : close], data[pos:stop]))
        pos = stop


def _edited_cell(pfx: bytes, row: int, col: int, attrs: list[tuple[bytes, bytes]],
                 children: list[tuple[bytes, bytes, bytes, bytes]], edit: CellEdit,
                 part: str) -> bytes:
    where = f"{col_letters(col)}{row}"
    formula = [c for c in children if c[0] == b"f"]
    rest = [c[3] for c in children if c[0] not in (b"f", b"v", b"is")]  # extLst
    if formula and edit.formula == "none":
        raise UnsupportedPart(f"part {part}: cell {where} holds a formula that a result "
                              "would overwrite")
    if edit.formula == "keep" and not formula:
        raise UnsupportedPart(f"part {part}: cell {where} holds no formula")
    f_xml = b""
    if edit.formula == "keep":
        _, f_attrs, f_body, f_whole = formula[0]
        f_xml = f_whole
        if edit.array_ref is not None:
            fa = _attrs(f_attrs)
            if _attr(fa, b"t") != b"array":
                raise UnsupportedPart(f"part {part}: cell {where} holds no array formula")
            fa = _set_attr(fa, b"ref", edit.array_ref.encode("ascii"))
            fa.sort(key=lambda kv: kv[0] not in (b"t", b"ref"))
            f_xml = (b"<" + pfx + b"f" + _attrs_text(fa) + b">" + f_body
                     + b"</" + pfx + b"f>")
    t, value_xml = _value_xml(edit.value, pfx, edit.formula == "keep")
    attrs = _set_attr(attrs, b"t", t)
    attrs = _set_attr(attrs, b"vm", None)  # value metadata belongs to the old value
    if edit.formula == "drop":
        attrs = _set_attr(attrs, b"cm", None)  # cell metadata marks a dynamic-array formula
    body = f_xml + value_xml + b"".join(rest)
    if not body:
        return b"<" + pfx + b"c" + _attrs_text(attrs) + b"/>"
    return b"<" + pfx + b"c" + _attrs_text(attrs) + b">" + body + b"</" + pfx + b"c>"


def _new_cell(pfx: bytes, row: int, col: int, edit: CellEdit) -> bytes:
    if edit.formula == "keep":
        raise UnsupportedPart(f"cell {col_letters(col)}{row} holds no formula")
    t, value_xml = _value_xml(edit.value, pfx, False)
    if not value_xml:
        return b""
    ref = f"{col_letters(col)}{row}".encode("ascii")
    attrs = b' r="' + ref + b'"' + (b' t="' + t + b'"' if t else b"")
    return b"<" + pfx + b"c" + attrs + b">" + value_xml + b"</" + pfx + b"c>"


def rows_xml(rows: list[list[Any]], pfx: bytes = b"") -> bytes:
    """``<row>`` elements holding ``rows`` of values from A1 (blanks left out)."""
    out = []
    for i, values in enumerate(rows, start=1):
        out.append(_new_row(pfx, i, {j: CellEdit(v) for j, v in enumerate(values, start=1)}))
    return b"".join(out)


def _new_row(pfx: bytes, row: int, edits: Mapping[int, CellEdit]) -> bytes:
    cells = b"".join(_new_cell(pfx, row, c, edits[c]) for c in sorted(edits))
    if not cells:
        return b""
    return b"<" + pfx + b'row r="' + str(row).encode() + b'">' + cells + b"</" + pfx + b"row>"


def _edited_row(data: bytes, m: re.Match[bytes], content: tuple[int, int], row: int,
                edits: Mapping[int, CellEdit], part: str) -> bytes:
    pfx = m.group(1)
    pieces: list[bytes] = []
    tail: list[bytes] = []
    todo = dict(edits)
    col = 0
    for name, a, inner, whole in _children(data, content[0], content[1], part):
        if name != b"c":
            tail.append(whole)  # extLst: stays after the cells
            continue
        attrs = _attrs(a)
        r, col = _position(attrs, row, col, part)
        if r != row:
            raise UnsupportedPart(f"part {part}: cell {col_letters(col)}{r} is in row {row}")
        for c in sorted(k for k in todo if k < col):
            pieces.append(_new_cell(pfx, row, c, todo.pop(c)))
        if col in todo:
            kids = _children(inner, 0, len(inner), part)
            if _attr(attrs, b"r") is None:
                attrs = _set_attr(attrs, b"r", f"{col_letters(col)}{row}".encode())
            pieces.append(_edited_cell(pfx, row, col, attrs, kids, todo.pop(col), part))
        else:
            pieces.append(whole)
    for c in sorted(todo):
        pieces.append(_new_cell(pfx, row, c, todo.pop(c)))
    row_attrs = _attrs(m.group(2))
    spans = _attr(row_attrs, b"spans")
    if spans is not None:  # an optimisation hint; keep it true
        nums = [int(n) for n in re.findall(rb"[0-9]+", spans)] + list(edits)
        row_attrs = _set_attr(row_attrs, b"spans", f"{min(nums)}:{max(nums)}".encode())
        row_attrs.sort(key=lambda kv: kv[0] != b"r")
    return (b"<" + pfx + b"row" + _attrs_text(row_attrs) + b">" + b"".join(pieces)
            + b"".join(tail) + b"</" + pfx + b"row>")


def _grown_dimension(head: bytes, edits: Mapping[tuple[int, int], CellEdit]
                     ) -> tuple[int, int, bytes] | None:
    """(start, end, new element) of the <dimension> when new cells lie outside it."""
    m = _DIMENSION.search(head)
    if m is None:
        return None
    attrs = _attrs(m.group(1))
    ref = _attr(attrs, b"ref") or b""
    ends = [_CELL_REF.fullmatch(p) for p in ref.split(b":")]
    if not ends or not all(ends):
        return None
    rows = [int(e.group(2)) for e in ends if e]
    cols = [col_number(e.group(1).decode().upper()) for e in ends if e]
    used = [rc for rc, e in edits.items() if e.value is not None and e.value != ""]
    r1, c1 = min(rows + [r for r, _ in used]), min(cols + [c for _, c in used])
    r2, c2 = max(rows + [r for r, _ in used]), max(cols + [c for _, c in used])
    if (r1, c1, r2, c2) == (min(rows), min(cols), max(rows), max(cols)):
        return None
    new_ref = f"{col_letters(c1)}{r1}:{col_letters(c2)}{r2}".encode()
    text = m.group(0).replace(b'"' + ref + b'"', b'"' + new_ref + b'"').replace(
        b"'" + ref + b"'", b"'" + new_ref + b"'")
    return m.start(), m.end(), text


def sheet_xml(data: bytes, part: str) -> bytes:
    """The root prefix of a worksheet part, after checking it is one we can change."""
    _utf8(data, part)
    pfx, local, ns = root_namespace(data)
    if ns == STRICT_NS:
        raise UnsupportedPart(f"part {part} is strict Open XML; save the workbook as an "
                              "ordinary .xlsx workbook and try again")
    if local != b"worksheet" or ns != MAIN_NS:
        raise UnsupportedPart(f"part {part} is not a worksheet this copy writer can change "
                              f"(root {local.decode(errors='replace')} in "
                              f"{ns.decode(errors='replace') or 'no namespace'})")
    return pfx


def patch_sheet_xml(data: bytes, edits: Mapping[tuple[int, int], CellEdit], part: str
                    ) -> bytes:
    """The worksheet part ``data`` with the cells ``edits`` {(row, col): CellEdit} changed."""
    pfx = sheet_xml(data, part)
    by_row: dict[int, dict[int, CellEdit]] = {}
    for (r, c), e in edits.items():
        by_row.setdefault(r, {})[c] = e
    sd = _SHEETDATA.search(data)
    if sd is None:
        raise UnsupportedPart(f"part {part} has no sheetData element")
    rows = sorted(by_row)
    pieces: list[bytes] = []
    if sd.group(3):  # <sheetData/>: every row is new
        new = b"".join(_new_row(pfx, r, by_row[r]) for r in rows)
        pieces += [data[: sd.start()], b"<" + sd.group(1) + b"sheetData" + sd.group(2) + b">",
                   new, b"</" + sd.group(1) + b"sheetData>"]
        last = sd.end()
    else:
        last, pos, k, row_no = sd.start(), sd.end(), 0, 0
        pieces.append(data[:last])
        end_tag = b"</" + sd.group(1) + b"sheetData>"
        while k < len(rows):
            m = _ROW.match(data, pos)
            if m is None:
                stop = _SPACE.match(data, pos).end()
                if not data.startswith(end_tag, stop):
                    raise UnsupportedPart(f"part {part}: unexpected content among the rows "
                                          f"near byte {stop}")
                pieces += [data[last:stop], b"".join(_new_row(pfx, r, by_row[r])
                                                     for r in rows[k:])]
                last = stop
                break
            attrs = _attrs(m.group(2))
            r_text = _attr(attrs, b"r")
            row = int(r_text) if r_text and r_text.isdigit() else row_no + 1
            if row <= row_no:
                raise UnsupportedPart(f"part {part}: row {row} comes after row {row_no}")
            row_no = row
            if m.group(3):
                content, end = (m.end(), m.end()), m.end()
            else:
                close = data.find(b"</" + m.group(1) + b"row>", m.end())
                if close < 0:
                    raise UnsupportedPart(f"part {part}: row {row} is not closed")
                content, end = (m.end(), close), close + len(m.group(1)) + 6
            start = m.end() - len(m.group(0).lstrip())
            while k < len(rows) and rows[k] < row:
                pieces += [data[last:start], _new_row(pfx, rows[k], by_row[rows[k]])]
                last = start
                k += 1
            if k < len(rows) and rows[k] == row:
                pieces += [data[last:start], _edited_row(data, m, content, row,
                                                         by_row[row], part)]
                last = end
                k += 1
            pos = end
    pieces.append(data[last:])
    out = b"".join(pieces)
    grown = _grown_dimension(out[: 1 << 16], edits)
    if grown is not None:
        a, b, text = grown
        out = out[:a] + text + out[b:]
    try:
        check_xml(out, part)
    except UnsupportedPart:
        check_xml(data, part)  # the input's own fault: say so
        raise UnsupportedPart(f"part {part} could not be changed safely; nothing written"
                              ) from None
    return out
