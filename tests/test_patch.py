"""Copies patched into the original package keep every part they do not have to change.

The workbook is made here with openpyxl (invented data, fixed seed) and given the parts an
estimator's workbook has: a chart, an image, a comment, a defined name, a table, data
validation, conditional formatting and a sheet of the spreadsheet's own formulas. The
references: zipfile reads both archives and compares each part's bytes; xml.etree parses
the changed sheet of both and compares it cell by cell; the worksheet functions, called
with the cell values, give the values the copy must hold; openpyxl and python-calamine
(independent readers) and LibreOffice (when installed) open the copy.
"""

from __future__ import annotations

import io
import os
import shutil
import struct
import zipfile
import zlib
from pathlib import Path
from xml.etree import ElementTree

import openpyxl
import pytest
import python_calamine
from openpyxl.chart import BarChart, Reference
from openpyxl.comments import Comment
from openpyxl.drawing.image import Image
from openpyxl.formatting.rule import CellIsRule
from openpyxl.styles import PatternFill
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.datavalidation import DataValidation
from openpyxl.worksheet.formula import ArrayFormula
from openpyxl.worksheet.table import Table

from xlbridge import worksheet
from xlbridge.book.patch import CellEdit, NewSheet, UnsupportedPart, patch_copy
from xlbridge.book.safety import TEMP_PREFIX
from xlbridge.book.sheetxml import patch_sheet_xml

from .bookfactory import invented_cost_data, run, sha256

NS = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
Y, X = "Data!$B$1:$B$41", "Data!$A$1:$A$41"


def tiny_png() -> bytes:
    """A 1x1 red PNG, written by hand (PNG specification: signature, IHDR, IDAT, IEND)."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data)))
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 1, 1, 8, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(b"\x00\xff\x00\x00")) + chunk(b"IEND", b""))


def rich_book(path: Path) -> Path:
    size, cost = invented_cost_data(40)
    wb = openpyxl.Workbook()
    data = wb.active
    data.title = "Data"
    data.append(["size", "cost"])
    for s, c in zip(size, cost):
        data.append([float(s), float(c)])
    data.add_table(Table(displayName="Costs", ref="A1:B41"))
    chart = BarChart()
    chart.add_data(Reference(data, min_col=2, min_row=1, max_row=41), titles_from_data=True)
    data.add_chart(chart, "E2")
    data.add_image(Image(io.BytesIO(tiny_png())), "E20")
    data["A1"].comment = Comment("invented data", "xlbridge test")
    dv = DataValidation(type="decimal", operator="greaterThan", formula1="0")
    data.add_data_validation(dv)
    dv.add("A2:A41")
    data.conditional_formatting.add("B2:B41", CellIsRule(operator="greaterThan",
                                                         formula=["300"],
                                                         fill=PatternFill("solid",
                                                                          fgColor="FFC7CE")))
    wb.defined_names["sizes"] = DefinedName("sizes", attr_text="Data!$A$2:$A$41")
    model = wb.create_sheet("Model")
    model["A1"] = "Coefficients"
    # one row more than the table needs: the range shrinks to the result
    model["A3"] = ArrayFormula("A3:I7", f"=XB_COEFS({Y},{X},2)")
    model["A10"] = f"=XB_EQUATION({Y},{X},2)"  # plain formula: one value
    model["A12"] = ArrayFormula("A12", f"=XB_STATS({Y},{X},2)")  # grows into new rows
    model["D12"] = "note beside the statistics"
    model["D20"] = "a row the statistics reach into"  # cells go in before D20
    calc = wb.create_sheet("Calc")
    calc["A1"] = "=SUM(Data!B2:B41)"
    calc["A2"] = "=AVERAGE(sizes)"
    calc["A3"] = "=Model!B4*2"
    wb.save(path)
    return path


def parts(path: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as zf:
        return {n: zf.read(n) for n in zf.namelist()}


def sheet_cells(xml: bytes) -> dict[str, bytes]:
    """Every <c> of a worksheet part by reference, serialised (attributes and children)."""
    root = ElementTree.fromstring(xml)
    return {c.get("r"): ElementTree.tostring(c) for c in root.iter(f"{NS}c")}


def outside_sheet_data(xml: bytes) -> bytes:
    start, end = xml.index(b"<sheetData>"), xml.index(b"</sheetData>")
    head = xml[:start]
    i = head.index(b"<dimension")
    head = head[:i] + head[head.index(b">", i) + 1:]
    return head + xml[end:]


def grid(path: Path, sheet: str) -> list[list]:
    return python_calamine.CalamineWorkbook.from_path(str(path)).get_sheet_by_name(
        sheet).to_python(skip_empty_area=False)


def region(g: list[list], r1: int, c1: int, rows: int, cols: int) -> list[list]:
    return [[(g[r][c] if r < len(g) and c < len(g[r]) else "") for c in range(c1 - 1,
             c1 - 1 + cols)] for r in range(r1 - 1, r1 - 1 + rows)]


def expected() -> dict[str, list[list]]:
    size, cost = invented_cost_data(40)
    y, x = ["cost", *map(float, cost)], ["size", *map(float, size)]
    return {"coefs": worksheet.XB_COEFS(y, x, 2.0), "eq": worksheet.XB_EQUATION(y, x, 2.0),
            "stats": worksheet.XB_STATS(y, x, 2.0)}


def table(t: list[list]) -> list[list]:
    return [["" if v is None else v for v in row] for row in t]


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    return rich_book(tmp_path / "rich.xlsx")


def test_recalc_copy_keeps_every_other_part(book: Path, tmp_path: Path, capsys) -> None:
    before = sha256(book)
    out = tmp_path / "live.xlsx"
    code, text, err = run(["recalc", book, "--out", out], capsys)
    assert code == 0, text + err
    assert sha256(book) == before
    old, new = parts(book), parts(out)
    assert list(new) == list(old)  # same parts, same order
    same = [n for n in old if old[n] == new[n]]
    assert [n for n in old if n not in same] == ["xl/worksheets/sheet2.xml"]
    assert len(same) == len(old) - 1 and len(same) >= 15
    assert any(n.startswith("xl/charts/") for n in same)
    assert any(n.startswith("xl/media/") for n in same)
    # the changed sheet: the same outside its cells, and only the XB_ cells differ
    a, b = old["xl/worksheets/sheet2.xml"], new["xl/worksheets/sheet2.xml"]
    assert outside_sheet_data(a) == outside_sheet_data(b)
    ca, cb = sheet_cells(a), sheet_cells(b)
    exp = expected()
    n_stats, w_stats = len(exp["stats"]), len(exp["stats"][0])
    owned = ({f"{col}{r}" for r in range(3, 8) for col in "ABCDEFGHI"} | {"A10"}
             | {f"{col}{r}" for r in range(12, 12 + n_stats) for col in "ABC"[:w_stats]})
    changed = {r for r in set(ca) | set(cb) if ca.get(r) != cb.get(r)}
    assert changed <= owned and "A3" in changed and "A12" in changed
    assert ca["D20"] == cb["D20"] and "A20" in cb and "A20" not in ca
    # the values are what the functions give, and the formulas stay
    g = grid(out, "Model")
    coefs = exp["coefs"]
    assert region(g, 3, 1, len(coefs), len(coefs[0])) == table(coefs)
    assert region(g, 12, 1, n_stats, w_stats) == table(exp["stats"])
    assert g[9][0] == exp["eq"][0][0]
    wb = openpyxl.load_workbook(out)
    assert wb["Model"]["A3"].value.ref == f"A3:I{2 + len(coefs)}"
    assert wb["Model"]["A12"].value.ref == f"A12:{'ABC'[w_stats - 1]}{11 + n_stats}"
    assert wb["Model"]["A10"].value == f"=XB_EQUATION({Y},{X},2)"
    assert wb["Model"]["D12"].value == "note beside the statistics"
    assert wb["Data"]["A1"].comment.text == "invented data"
    assert "sizes" in wb.defined_names and "Costs" in wb["Data"].tables


def test_values_copy_keeps_every_other_part(book: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "values.xlsx"
    code, text, err = run(["recalc", book, "--out", out, "--values"], capsys)
    assert code == 0, text + err
    old, new = parts(book), parts(out)
    assert [n for n in old if old[n] != new.get(n)] == ["xl/worksheets/sheet2.xml"]
    assert list(new) == list(old)
    exp = expected()
    wb = openpyxl.load_workbook(out)
    model = wb["Model"]
    assert all(c.data_type != "f" for row in model.iter_rows() for c in row)
    assert wb["Calc"]["A1"].value == "=SUM(Data!B2:B41)"  # other formulas stay
    g = grid(out, "Model")
    assert region(g, 3, 1, len(exp["coefs"]), 9) == table(exp["coefs"])
    assert region(g, 12, 1, len(exp["stats"]), len(exp["stats"][0])) == table(exp["stats"])
    assert region(g, 8, 1, 1, 9) == [[""] * 9]  # the spare row of the old range is empty


def test_fit_xlsx_copy_adds_one_sheet(book: Path, tmp_path: Path, capsys) -> None:
    out = tmp_path / "fit.xlsx"
    code, text, err = run(["fit", book, "--y", "Data!B1:B41", "--x", "Data!A1:A41",
                           "--model", "2", "--format", "xlsx", "--out", out], capsys)
    assert code == 0, text + err
    old, new = parts(book), parts(out)
    changed = [n for n in old if old[n] != new.get(n)]
    assert sorted(changed) == ["[Content_Types].xml", "xl/_rels/workbook.xml.rels",
                               "xl/workbook.xml"]
    added = [n for n in new if n not in old]
    assert len(added) == 1 and added[0].startswith("xl/worksheets/sheet")
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames == ["Data", "Model", "Calc", "xlbridge fit"]
    rows = [list(r) for r in wb["xlbridge fit"].iter_rows(values_only=True)]
    coefs = expected()["coefs"]
    start = next(i for i, r in enumerate(rows) if r[: len(coefs[0])] == coefs[0])
    got = [r[: len(coefs[0])] for r in rows[start : start + len(coefs)]]
    assert got == [[None if v == "" else v for v in row] for row in coefs]
    # the same result sheet title again gets a new name
    again = tmp_path / "fit2.xlsx"
    code, _, err = run(["fit", out, "--y", "Data!B1:B41", "--x", "Data!A1:A41", "--model",
                        "2", "--format", "xlsx", "--out", again], capsys)
    assert code == 0, err
    assert openpyxl.load_workbook(again).sheetnames[-1] == "xlbridge fit (2)"


def test_copy_keeps_file_mode_and_writes_atomically(book: Path, tmp_path: Path, capsys
                                                    ) -> None:
    os.chmod(book, 0o640)
    out = tmp_path / "mode.xlsx"
    assert run(["recalc", book, "--out", out], capsys)[0] == 0
    assert out.stat().st_mode & 0o777 == 0o640
    code, _, err = run(["recalc", book, "--out", out], capsys)
    assert code == 2 and "already exists" in err


def _with_part(src: Path, dst: Path, part: str, change) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            zout.writestr(item, change(data) if item.filename == part else data)
    return dst


def _refused(src: Path, tmp_path: Path, capsys, *words: str) -> str:
    out = tmp_path / "refused-copy.xlsx"
    code, text, err = run(["recalc", src, "--out", out], capsys)
    assert code == 2, text + err
    assert err.startswith("xlbridge:") and all(w in err for w in words), err
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(TEMP_PREFIX)]
    return err


def test_sheet_xml_the_writer_cannot_read_is_refused(book: Path, tmp_path: Path,
                                                     capsys) -> None:
    # a comment between rows: well-formed, but not a row the streaming pass may step over
    commented = _with_part(book, tmp_path / "commented.xlsx", "xl/worksheets/sheet2.xml",
                           lambda d: d.replace(b'<row r="10"', b'<!-- x --><row r="10"'))
    _refused(commented, tmp_path, capsys, "cannot be copied safely", "sheet2.xml")
    # a cell that is not closed: not XML at all
    broken = _with_part(book, tmp_path / "broken.xlsx", "xl/worksheets/sheet2.xml",
                        lambda d: d.replace(b"</sheetData>",
                                            b'<row r="99"><c r="A99"><v>1</v></row>'
                                            b"</sheetData>"))
    _refused(broken, tmp_path, capsys)


def test_strict_and_encrypted_packages_are_refused(book: Path, tmp_path: Path,
                                                   capsys) -> None:
    strict_ns = b"http://purl.oclc.org/ooxml/spreadsheetml/main"
    main_ns = b"http://schemas.openxmlformats.org/spreadsheetml/2006/main"
    strict = _with_part(book, tmp_path / "strict.xlsx", "xl/workbook.xml",
                        lambda d: d.replace(main_ns, strict_ns))
    with pytest.raises(UnsupportedPart, match="strict Open XML"):
        patch_copy(strict, tmp_path / "s-copy.xlsx", {}, force=False,
                   new_sheet=NewSheet("x", [[1.0]]))
    assert not (tmp_path / "s-copy.xlsx").exists()
    _refused(strict, tmp_path, capsys)
    ole = tmp_path / "locked.xlsx"
    ole.write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(1024))
    _refused(ole, tmp_path, capsys, "password")


def test_cells_are_inserted_in_order_and_text_is_escaped() -> None:
    """Direct use of the sheet pass: new cells go in column order into existing rows and
    new rows in row order; text that XML cannot hold is escaped as the file format does."""
    xml = (b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
           b'<dimension ref="A1:C3"/><sheetData><row r="1" spans="1:3"><c r="A1"><v>1</v></c>'
           b'<c r="C1" s="2"><v>3</v></c></row><row r="3"><c r="B3"><f>XB_X()</f><v>0</v></c>'
           b"</row></sheetData></worksheet>")
    edits = {(1, 2): CellEdit("a<b & _x0041_\x01"), (2, 5): CellEdit(True),
             (3, 2): CellEdit("#N/A", "keep"), (1, 3): CellEdit(None), (4, 1): CellEdit(2.5)}
    out = patch_sheet_xml(xml, edits, "sheet.xml")
    root = ElementTree.fromstring(out)
    refs = [c.get("r") for c in root.iter(f"{NS}c")]
    assert refs == ["A1", "B1", "C1", "E2", "B3", "A4"]
    cells = {c.get("r"): c for c in root.iter(f"{NS}c")}
    assert cells["B1"].find(f"{NS}is/{NS}t").text == "a<b & _x005F_x0041__x0001_"
    assert cells["C1"].get("s") == "2" and cells["C1"].find(f"{NS}v") is None
    assert (cells["E2"].get("t"), cells["E2"].find(f"{NS}v").text) == ("b", "1")
    assert cells["B3"].get("t") == "e" and cells["B3"].find(f"{NS}f").text == "XB_X()"
    assert root.find(f"{NS}dimension").get("ref") == "A1:E4"
    assert root.find(f"{NS}sheetData/{NS}row").get("spans") == "1:3"
    with pytest.raises(UnsupportedPart, match="holds a formula"):
        patch_sheet_xml(xml, {(3, 2): CellEdit(1.0)}, "sheet.xml")


@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice is not installed")
def test_libreoffice_opens_the_copies(book: Path, tmp_path: Path, capsys,
                                      record_property) -> None:
    """What a program without the add-in shows: the data, the saved value of a plain XB_
    formula; array formulas it recalculates (recorded, not asserted); the --values copy
    shows every number."""
    from .test_libreoffice import convert_to_csv

    live, values = tmp_path / "live.xlsx", tmp_path / "values.xlsx"
    assert run(["recalc", book, "--out", live], capsys)[0] == 0
    assert run(["recalc", book, "--out", values, "--values"], capsys)[0] == 0
    exp = expected()
    for copy in (live, values):
        grids = convert_to_csv(copy, tmp_path / f"csv-{copy.stem}", tmp_path / "profile")
        data = grid(copy, "Data")
        assert [float(t) for t in grids["Data"][1][:2]] == data[1][:2]
        assert grids["Model"][9][0] == exp["eq"][0][0]  # the plain formula's saved value
        if copy is values:
            numbers = [float(t) for t in grids["Model"][3][1:7]]
            assert grids["Model"][2][:9] == exp["coefs"][0]
            assert numbers == pytest.approx(exp["coefs"][1][1:7], rel=1e-12)
        else:
            record_property("live_array_cell_shows", grids["Model"][3][1])


def test_macro_workbook_keeps_its_project_and_custom_xml(book: Path, tmp_path: Path,
                                                         capsys) -> None:
    """An .xlsm with a VBA project part and a custom XML part (both made here: the bytes
    only need to come back unchanged) keeps them byte for byte, in both kinds of copy."""
    project = bytes(range(256)) * 40
    custom = b'<?xml version="1.0" encoding="UTF-8"?><data xmlns="urn:example">x</data>'
    src = tmp_path / "macro.xlsm"
    with zipfile.ZipFile(book) as zin, zipfile.ZipFile(src, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            zout.writestr(item, zin.read(item.filename))
        zout.writestr("xl/vbaProject.bin", project)
        zout.writestr(zipfile.ZipInfo("customXml/item1.xml", (2020, 1, 2, 3, 4, 6)), custom)
    for extra in ([], ["--values"]):
        out = tmp_path / f"macro-copy{len(extra)}.xlsm"
        code, text, err = run(["recalc", src, "--out", out, *extra], capsys)
        assert code == 0, text + err
        old, new = parts(src), parts(out)
        assert [n for n in old if old[n] != new.get(n)] == ["xl/worksheets/sheet2.xml"]
        with zipfile.ZipFile(src) as a, zipfile.ZipFile(out) as b:
            for name in ("xl/vbaProject.bin", "customXml/item1.xml"):
                ia, ib = a.getinfo(name), b.getinfo(name)
                assert (ia.date_time, ia.compress_type, ia.CRC, ia.compress_size) == (
                    ib.date_time, ib.compress_type, ib.CRC, ib.compress_size)


def test_values_copy_leaves_out_the_calculation_chain(book: Path, tmp_path: Path,
                                                      capsys) -> None:
    """The calculation chain lists formula cells; the --values copy removes XB_ formulas,
    so it leaves the chain out (part, relationship, content type), the live copy keeps it."""
    chain = (b'<calcChain xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
             b'<c r="A3" i="2"/><c r="A10"/><c r="A1" i="3"/></calcChain>')
    rel = (b'<Relationship Id="rId99" Type="http://schemas.openxmlformats.org/'
           b'officeDocument/2006/relationships/calcChain" Target="calcChain.xml"/>')
    override = (b'<Override PartName="/xl/calcChain.xml" ContentType="application/'
                b'vnd.openxmlformats-officedocument.spreadsheetml.calcChain+xml"/>')
    src = tmp_path / "chained.xlsx"
    with zipfile.ZipFile(book) as zin, zipfile.ZipFile(src, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            if item.filename == "xl/_rels/workbook.xml.rels":
                data = data.replace(b"</Relationships>", rel + b"</Relationships>")
            elif item.filename == "[Content_Types].xml":
                data = data.replace(b"</Types>", override + b"</Types>")
            zout.writestr(item, data)
        zout.writestr("xl/calcChain.xml", chain)
    live, values = tmp_path / "chained-live.xlsx", tmp_path / "chained-values.xlsx"
    assert run(["recalc", src, "--out", live], capsys)[0] == 0
    assert parts(live)["xl/calcChain.xml"] == chain
    assert run(["recalc", src, "--out", values, "--values"], capsys)[0] == 0
    new = parts(values)
    assert "xl/calcChain.xml" not in new
    assert b"calcChain" not in new["xl/_rels/workbook.xml.rels"]
    assert b"calcChain" not in new["[Content_Types].xml"]
    assert new["xl/_rels/workbook.xml.rels"] == parts(book)["xl/_rels/workbook.xml.rels"]
    openpyxl.load_workbook(values)


def test_value_types_as_the_file_format_stores_them() -> None:
    """Numbers of any kind (numpy's too) as shortest round-trip decimals, non-finite ones
    as #NUM!, dates as serial numbers; a kept formula's text result is t="str"."""
    import datetime as dt

    import numpy as np

    xml = (b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
           b'<sheetData><row r="1"><c r="A1"><f>XB_X()</f></c></row></sheetData></worksheet>')
    edits = {(1, 1): CellEdit("text", "keep"), (1, 2): CellEdit(np.int64(7)),
             (1, 3): CellEdit(np.float64(0.1) + 0.2), (1, 4): CellEdit(float("inf")),
             (1, 5): CellEdit(dt.datetime(2024, 3, 1, 12)), (1, 6): CellEdit(5)}
    root = ElementTree.fromstring(patch_sheet_xml(xml, edits, "sheet.xml"))
    cells = {c.get("r"): (c.get("t"), c.findtext(f"{NS}v")) for c in root.iter(f"{NS}c")}
    assert cells == {"A1": ("str", "text"), "B1": (None, "7"),
                     "C1": (None, repr(0.1 + 0.2)), "D1": ("e", "#NUM!"),
                     "E1": (None, "45352.5"), "F1": (None, "5")}
    assert float(cells["C1"][1]) == 0.1 + 0.2
