"""Copies of a workbook that change only what must change, written part by part.

The copy is the original package with (1) the given cells of some worksheets changed
(:mod:`xlbridge.book.sheetxml`), (2) optionally one sheet of values added, with the
workbook part, its relationships and the content types updated, and (3) optionally the
calculation chain left out (needed when formulas are removed: the chain lists formula
cells, and a chain naming a cell without one makes the desktop program repair the file;
it rebuilds the chain itself). Every other part is copied byte for byte
(:mod:`xlbridge.book.package`): charts, drawings, media, comments, tables, pivot caches,
the VBA project, custom XML, styles, shared strings, document properties.

Writing is atomic (temporary file, then publish without replacing unless ``force``), the
copy gets the input's file mode, and the input is only read. A package that cannot be
changed safely raises :class:`~xlbridge.book.sheetxml.UnsupportedPart` before anything is
written.
"""

from __future__ import annotations

import re
import zipfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from xlbridge.book.package import copy_package
from xlbridge.book.safety import BookError, check_archive, write_atomically
from xlbridge.book.sheetxml import (
    MAIN_NS,
    STRICT_NS,
    CellEdit,
    UnsupportedPart,
    check_xml,
    patch_sheet_xml,
    root_namespace,
    rows_xml,
)
from xlbridge.book.writer import unique_title
from xlbridge.book.xlsx import part_relations, read_structure, workbook_part

__all__ = ["CellEdit", "NewSheet", "PatchReport", "UnsupportedPart", "patch_copy"]

_REL_NS = b"http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_WORKSHEET_TYPE = _REL_NS + b"/worksheet"
_WORKSHEET_CONTENT = b"application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
_PFX = rb"(?:[A-Za-z_][\w.-]*:)?"
_ATTRS = rb"(?:\s+[A-Za-z_][\w.:-]*\s*=\s*(?:\"[^\"]*\"|'[^']*'))*\s*"


@dataclass(frozen=True)
class NewSheet:
    """A sheet to add: its wanted title (made unique) and rows of values from A1."""

    title: str
    rows: Sequence[Sequence[Any]]


@dataclass
class PatchReport:
    """What the copy changed; every part not named here is the original's, byte for byte."""

    changed: list[str] = field(default_factory=list)
    added: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    sheet_title: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"changed": self.changed, "added": self.added, "removed": self.removed,
                "sheet_title": self.sheet_title}


def _attr_text(value: str) -> bytes:
    return (value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
            .replace('"', "&quot;").encode("utf-8"))


def _insert_before_close(data: bytes, element: bytes, new: bytes, part: str) -> bytes:
    """``new`` inserted before the last closing tag ``</element>`` (any prefix)."""
    ms = list(re.finditer(rb"</(" + _PFX + rb")" + element + rb"\s*>", data))
    if not ms:
        raise UnsupportedPart(f"part {part} has no {element.decode()} element to add to")
    m = ms[-1]
    return data[: m.start()] + new.replace(b"{p}", m.group(1)) + data[m.start():]


def _remove_element(data: bytes, element: bytes, attr: bytes, value: str) -> bytes:
    """``data`` without the empty elements ``<element ... attr="value" .../>``."""
    want = re.escape(_attr_text(value))
    pattern = (rb"<" + _PFX + element + rb"(?=[^>]*\s" + attr + rb"\s*=\s*[\"']" + want
               + rb"[\"'])" + _ATTRS + rb"/>")
    return re.sub(pattern, b"", data)


def _check_main(data: bytes, part: str, expected: bytes = MAIN_NS) -> None:
    try:
        _, _, ns = root_namespace(data)
    except UnsupportedPart:
        raise UnsupportedPart(f"part {part} has no root element") from None
    if ns == STRICT_NS or ns.startswith(b"http://purl.oclc.org/ooxml/"):
        raise UnsupportedPart(f"part {part} is strict Open XML; save the workbook as an "
                              "ordinary .xlsx workbook and try again")
    if ns != expected:
        raise UnsupportedPart(f"part {part} is not in the namespace the copy writer knows "
                              f"({ns.decode(errors='replace') or 'none'})")


class _Package:
    """The input package's parts that a copy may have to change."""

    def __init__(self, zf: zipfile.ZipFile, name: str) -> None:
        self.zf = zf
        self.names = set(zf.namelist())
        self.wb_part = workbook_part(zf)
        if self.wb_part not in self.names:
            raise BookError(f"{name} has no workbook part; it is not a workbook")
        self.wb_xml = zf.read(self.wb_part)
        _check_main(self.wb_xml, self.wb_part)
        self.structure = read_structure(zf, name)
        p = PurePosixPath(self.wb_part)
        self.rels_part = str(p.parent / "_rels" / (p.name + ".rels"))
        self.relations = part_relations(zf, self.wb_part)

    def add_sheet(self, sheet: NewSheet, report: PatchReport,
                  replaced: dict[str, bytes]) -> tuple[str, bytes]:
        title = unique_title(self.structure.sheets, sheet.title)
        folder = PurePosixPath(self.wb_part).parent
        n = 1
        while f"{folder}/worksheets/sheet{n}.xml" in self.names:
            n += 1
        part = f"{folder}/worksheets/sheet{n}.xml"
        ids = set(self.relations) | set(re.findall(r'Id="([^"]*)"', self._rels().decode(
            "utf-8", "replace")))
        k = len(ids) + 1
        while f"rId{k}" in ids:
            k += 1
        rid = f"rId{k}"
        sheet_ids = [int(v) for v in re.findall(rb"<" + _PFX + rb"sheet\s[^>]*?\bsheetId\s*=\s*"
                                                rb"[\"']([0-9]+)", self.wb_xml)]
        sheet_id = max(sheet_ids, default=0) + 1
        head = self.wb_xml[: 1 << 16]
        m = re.search(rb"xmlns:(" + rb"[A-Za-z_][\w.-]*" + rb")\s*=\s*[\"']" + re.escape(_REL_NS)
                      + rb"[\"']", head)
        rel_attr = (m.group(1) + b':id="' + rid.encode() + b'"') if m else (
            b'r:id="' + rid.encode() + b'" xmlns:r="' + _REL_NS + b'"')
        wb_xml = _insert_before_close(
            replaced.get(self.wb_part, self.wb_xml), b"sheets",
            b'<{p}sheet name="' + _attr_text(title) + b'" sheetId="' + str(sheet_id).encode()
            + b'" ' + rel_attr + b"/>", self.wb_part)
        target = str(PurePosixPath(part).relative_to(folder))
        rels = _insert_before_close(
            replaced.get(self.rels_part, self._rels()), b"Relationships",
            b'<{p}Relationship Id="' + rid.encode() + b'" Type="' + _WORKSHEET_TYPE
            + b'" Target="' + _attr_text(target) + b'"/>', self.rels_part)
        types = _insert_before_close(
            replaced.get("[Content_Types].xml", self.zf.read("[Content_Types].xml")),
            b"Types", b'<{p}Override PartName="/' + _attr_text(part) + b'" ContentType="'
            + _WORKSHEET_CONTENT + b'"/>', "[Content_Types].xml")
        replaced.update({self.wb_part: wb_xml, self.rels_part: rels,
                         "[Content_Types].xml": types})
        report.sheet_title = title
        report.added.append(part)
        xml = (b'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n<worksheet xmlns="'
               + MAIN_NS + b'"><sheetData>' + rows_xml([list(r) for r in sheet.rows])
               + b"</sheetData></worksheet>")
        return part, xml

    def _rels(self) -> bytes:
        try:
            return self.zf.read(self.rels_part)
        except KeyError:
            raise UnsupportedPart(f"part {self.rels_part} is missing") from None

    def drop_calc_chain(self, report: PatchReport, replaced: dict[str, bytes]) -> None:
        chains = [(rid, part) for rid, (typ, part) in self.relations.items()
                  if typ == "calcChain" and part in self.names]
        for rid, part in chains:
            rels = replaced.get(self.rels_part, self._rels())
            replaced[self.rels_part] = _remove_element(rels, b"Relationship", b"Id", rid)
            types = replaced.get("[Content_Types].xml", self.zf.read("[Content_Types].xml"))
            replaced["[Content_Types].xml"] = _remove_element(types, b"Override", b"PartName",
                                                              "/" + part)
            report.removed.append(part)


def patch_copy(src: Path, out: Path, edits: Mapping[str, Mapping[tuple[int, int], CellEdit]],
               *, force: bool, new_sheet: NewSheet | None = None,
               drop_calc_chain: bool = False) -> PatchReport:
    """Write ``out``: a copy of the workbook ``src`` with the cells ``edits`` {sheet name:
    {(row, col): CellEdit}} changed, ``new_sheet`` added, and the calculation chain left out
    when ``drop_calc_chain`` (formulas removed). Returns what changed; raises BookError
    (UnsupportedPart for a package that cannot be changed safely) before writing anything.
    """
    check_archive(src)
    report = PatchReport()
    replaced: dict[str, bytes] = {}
    added: list[tuple[str, bytes]] = []
    try:
        with zipfile.ZipFile(src) as zf:
            pkg = _Package(zf, src.name)
            for sheet, cells in edits.items():
                if not cells:
                    continue
                part = pkg.structure.sheet_parts.get(sheet)
                if part is None or part not in pkg.names:
                    raise BookError(f"{src.name}: sheet {sheet!r} has no worksheet part")
                replaced[part] = patch_sheet_xml(zf.read(part), cells, part)
                report.changed.append(part)
            if new_sheet is not None:
                added.append(pkg.add_sheet(new_sheet, report, replaced))
            if drop_calc_chain:
                pkg.drop_calc_chain(report, replaced)
            for part in (pkg.wb_part, pkg.rels_part, "[Content_Types].xml"):
                if part in replaced:
                    check_xml(replaced[part], part)
                    if part not in report.changed:
                        report.changed.append(part)
    except UnsupportedPart as exc:
        raise UnsupportedPart(f"{src.name} cannot be copied safely: {exc}") from None
    except (zipfile.BadZipFile, KeyError) as exc:
        raise BookError(f"{src.name} is a damaged workbook archive: {exc}") from None

    def write(tmp: Path) -> None:
        copy_package(src, tmp, replaced, added, report.removed)

    write_atomically(out, write, force=force, inputs=[src], mode_from=src)
    return report
