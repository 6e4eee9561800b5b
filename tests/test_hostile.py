"""Hostile and broken inputs: every command gives exit 2 and an ``xlbridge:`` message, and
leaves the input file as it was. No parser sees a zip bomb or an XML entity bomb."""

from __future__ import annotations

import struct
import zipfile
from pathlib import Path

import pytest

from xlbridge.book import BookError, safety
from xlbridge.book.reader import open_book

from .bookfactory import cost_book, replace_part, run, sha256

D = "'Site data'"
BILLION_LAUGHS = (
    b'<?xml version="1.0"?>\n<!DOCTYPE lolz [<!ENTITY lol "lol">'
    + b"".join(b'<!ENTITY lol%d "%s">' % (i, (b"&lol%d;" % (i - 1) if i > 1 else b"&lol;") * 10)
               for i in range(1, 10))
    + b']>\n<sst xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main" count="1" '
      b'uniqueCount="1"><si><t>&lol9;</t></si></sst>'
)


def _commands(book: Path, tmp_path: Path) -> list[list]:
    return [
        ["fit", book, "--y", f"{D}!B:B", "--x", f"{D}!A:A", "--model", "2"],
        ["predict", book, "--y", f"{D}!B:B", "--x", f"{D}!A:A", "--model", "2",
         "--new-x", f"{D}!A2:A5"],
        ["recalc", book, "--out", tmp_path / f"out{book.suffix}"],
        ["pin", book, "--out", tmp_path / "pins.json"],
    ]


def _expect_refused(book: Path, tmp_path: Path, capsys, message: str) -> None:
    before = sha256(book)
    for argv in _commands(book, tmp_path):
        code, out, err = run(argv, capsys)
        assert code == 2, (argv[0], out, err)
        assert err.startswith("xlbridge:") and message in err, (argv[0], err)
        assert "Traceback" not in err
    assert sha256(book) == before
    assert not any(p.name.startswith(("out", "pins", ".xlbridge-")) for p in tmp_path.iterdir())


def test_zip_bomb_declared_size(tmp_path: Path, capsys) -> None:
    """An archive whose directory says a part unzips to 3 GiB (patched size field)."""
    src = cost_book(tmp_path / "ok.xlsx")
    bomb = tmp_path / "bomb.xlsx"
    data = bytearray(src.read_bytes())
    cd = data.find(b"PK\x01\x02")  # first central directory entry
    struct.pack_into("<I", data, cd + 24, 3 * 1024**3)  # its uncompressed size
    bomb.write_bytes(bytes(data))
    _expect_refused(bomb, tmp_path, capsys, "possible zip bomb")


def test_zip_bomb_ratio(tmp_path: Path, capsys, monkeypatch) -> None:
    """One part of 60 MiB of zeros (about 1000:1); the limit is lowered so the test stays
    small, the check is the same."""
    monkeypatch.setattr(safety, "MAX_ENTRY_RATIO", 200)
    src = cost_book(tmp_path / "ok.xlsx")
    bomb = tmp_path / "ratio.xlsx"
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(bomb, "w", zipfile.ZIP_DEFLATED) as z:
        for item in zin.infolist():
            z.writestr(item, zin.read(item.filename))
        z.writestr("xl/media/zeros.bin", b"\0" * (60 * 1024**2))
    _expect_refused(bomb, tmp_path, capsys, "possible zip bomb")


def test_zip_with_absurd_entry_count(tmp_path: Path, capsys) -> None:
    src = cost_book(tmp_path / "ok.xlsx")
    many = tmp_path / "many.xlsx"
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(many, "w") as z:
        for item in zin.infolist():
            z.writestr(item, zin.read(item.filename))
        for i in range(safety.MAX_ENTRIES + 1):
            z.writestr(f"customXml/p{i}.txt", b"")
    _expect_refused(many, tmp_path, capsys, "parts inside")


@pytest.mark.parametrize("part", ["xl/styles.xml", "xl/worksheets/sheet1.xml",
                                  "xl/workbook.xml"])
def test_xml_entity_bomb(tmp_path: Path, capsys, part: str) -> None:
    """(Unchecked, python-calamine reads such a sheet as empty, without an error.)"""
    src = cost_book(tmp_path / "ok.xlsx")
    bomb = replace_part(src, tmp_path / "laughs.xlsx", part, BILLION_LAUGHS)
    _expect_refused(bomb, tmp_path, capsys, "entity bomb")


def test_external_entity_is_refused(tmp_path: Path, capsys) -> None:
    src = cost_book(tmp_path / "ok.xlsx")
    xxe = (b'<?xml version="1.0"?><!-- a comment first -->\n'
           b'<!DOCTYPE x [<!ENTITY e SYSTEM "file:///etc/passwd">]><x>&e;</x>')
    bomb = replace_part(src, tmp_path / "xxe.xlsx", "xl/styles.xml", xxe)
    _expect_refused(bomb, tmp_path, capsys, "DTD or entities")


def test_not_a_zip_but_named_xlsx(tmp_path: Path, capsys) -> None:
    fake = tmp_path / "fake.xlsx"
    fake.write_text("size,cost\n1,2\n")
    _expect_refused(fake, tmp_path, capsys, "not a zip archive")
    ole = tmp_path / "old.xlsx"
    ole.write_bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 1000)
    _expect_refused(ole, tmp_path, capsys, "password-protected")
    other_zip = tmp_path / "docs.xlsx"
    with zipfile.ZipFile(other_zip, "w") as z:
        z.writestr("readme.txt", "hello")
    _expect_refused(other_zip, tmp_path, capsys, "not a workbook")


def test_truncated_workbook(tmp_path: Path, capsys) -> None:
    src = cost_book(tmp_path / "ok.xlsx")
    cut = tmp_path / "cut.xlsx"
    cut.write_bytes(src.read_bytes()[: src.stat().st_size // 2])
    _expect_refused(cut, tmp_path, capsys, "damaged or incomplete")


def test_missing_sheet_and_off_sheet_references(tmp_path: Path, capsys) -> None:
    book = cost_book(tmp_path / "ok.xlsx")
    before = sha256(book)
    cases = [
        (["--y", "Nope!B1:B41", "--x", f"{D}!A1:A41"], "sheet 'Nope' not found"),
        (["--y", f"{D}!B1:B2000000", "--x", f"{D}!A1:A41"], "off the sheet"),
        (["--y", f"{D}!XFE1:XFE9", "--x", f"{D}!A1:A41"], "off the sheet"),
        (["--y", "XFE1", "--x", f"{D}!A1:A41"], "off the sheet"),
        (["--y", f"{D}!B0:B9", "--x", f"{D}!A1:A41"], "off the sheet"),
        (["--y", "[2]Other!B1:B9", "--x", f"{D}!A1:A41"], "another workbook"),
    ]
    for refs, msg in cases:
        code, _, err = run(["fit", book, *refs, "--model", "2"], capsys)
        assert code == 2 and msg in err and err.startswith("xlbridge:"), (refs, err)
    assert sha256(book) == before


def test_files_that_are_not_there_or_not_workbooks(tmp_path: Path, capsys) -> None:
    for path, msg in [(tmp_path / "absent.xlsx", "not found"), (tmp_path, "is a folder"),
                      (tmp_path / "x.ods", ".ods files are not read")]:
        if path.suffix == ".ods":
            path.write_bytes(b"PK")
        code, _, err = run(["fit", path, "--y", "A:A", "--x", "B:B", "--model", "1"], capsys)
        assert code == 2 and msg in err
    zipped = tmp_path / "data.csv"
    zipped.write_bytes(cost_book(tmp_path / "ok.xlsx").read_bytes())
    with pytest.raises(BookError, match="not a CSV text file"):
        open_book(zipped)


def test_read_only_and_locked_outputs(tmp_path: Path, capsys) -> None:
    import os
    import stat

    book = cost_book(tmp_path / "ok.xlsx", formulas={
        "Model": {"A1": f"=XB_EQUATION({D}!B:B,{D}!A:A,1)"}})
    ro = tmp_path / "ro.xlsx"
    ro.write_bytes(b"old")
    os.chmod(ro, stat.S_IRUSR)
    code, _, err = run(["recalc", book, "--out", ro, "--force"], capsys)
    assert code == 2 and "read-only" in err and ro.read_bytes() == b"old"
    (tmp_path / "~$open.xlsx").write_bytes(b"")
    code, _, err = run(["recalc", book, "--out", tmp_path / "open.xlsx"], capsys)
    assert code == 2 and "open in another program" in err
