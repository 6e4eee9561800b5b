"""XML parts in every encoding a parser may accept: a DTD is refused whatever the encoding,
with or without a byte-order mark. The hostile workbooks are built here, from an ordinary one.

The encoded bytes come from Python's codecs; where the standard library's expat parser reads
the encoding, the test first shows that expat does expand the entity in that very part, so the
refusal is of something a parser really would act on.
"""

from __future__ import annotations

import xml.parsers.expat
import zipfile
from pathlib import Path

import pytest

from xlbridge.book import BookError
from xlbridge.book.safety import check_archive

from .bookfactory import cost_book, replace_part, run, sha256

D = "'Site data'"
BODY = '<!DOCTYPE x [<!ENTITY e "expanded">]>\n<x>&e;</x>'
PLAIN = '<x a="1">plain</x>'


def _declared(encoding: str, body: str = BODY) -> str:
    return f'<?xml version="1.0" encoding="{encoding}"?>\n{body}'


def _utf7_by_hand(text: str) -> bytes:
    # Python's encoder writes < and ! directly; a hostile writer may use their base64 forms.
    return text.replace("<", "+ADw-").replace("!", "+ACE-").encode("ascii")


#: (label, part bytes, whether expat reads this encoding)
HOSTILE = [
    ("utf-16-le, no mark", _declared("UTF-16").encode("utf-16-le"), True),
    ("utf-16-be, no mark", _declared("UTF-16").encode("utf-16-be"), True),
    ("utf-16-le, no mark, no declaration", BODY.encode("utf-16-le"), True),
    ("utf-16-be, no mark, space first", (" \n" + BODY).encode("utf-16-be"), True),
    ("utf-16-le, mark", b"\xff\xfe" + _declared("UTF-16").encode("utf-16-le"), True),
    ("utf-16-be, mark", b"\xfe\xff" + _declared("UTF-16").encode("utf-16-be"), True),
    ("utf-8, mark", b"\xef\xbb\xbf" + _declared("UTF-8").encode("utf-8"), True),
    ("utf-32-le, no mark", _declared("UTF-32").encode("utf-32-le"), False),
    ("utf-32-be, no mark", _declared("UTF-32").encode("utf-32-be"), False),
    ("utf-32-le, mark", b"\xff\xfe\x00\x00" + _declared("UTF-32").encode("utf-32-le"), False),
    ("utf-32-be, mark", b"\x00\x00\xfe\xff" + _declared("UTF-32").encode("utf-32-be"), False),
    ("declared utf-7", b'<?xml version="1.0" encoding="UTF-7"?>\n' + _utf7_by_hand(BODY), False),
    ("ebcdic", _declared("IBM037").encode("cp037"), False),
]


def _expat_expands(data: bytes) -> bool:
    parser = xml.parsers.expat.ParserCreate()
    text: list[str] = []
    parser.CharacterDataHandler = text.append
    parser.Parse(data, True)
    return "expanded" in "".join(text)


def _refused_by_commands(book: Path, tmp_path: Path, capsys, message: str) -> None:
    before = sha256(book)
    for argv in (["fit", book, "--y", f"{D}!B:B", "--x", f"{D}!A:A", "--model", "2"],
                 ["recalc", book, "--out", tmp_path / "out.xlsx"]):
        code, _, err = run(argv, capsys)
        assert code == 2 and err.startswith("xlbridge:") and message in err, (argv[0], err)
        assert "Traceback" not in err
    assert sha256(book) == before
    assert not (tmp_path / "out.xlsx").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".xlbridge-")]


@pytest.mark.parametrize(("label", "data", "expat_reads"), HOSTILE, ids=[h[0] for h in HOSTILE])
def test_dtd_refused_in_any_encoding(tmp_path: Path, capsys, label: str, data: bytes,
                                     expat_reads: bool) -> None:
    if expat_reads:
        assert _expat_expands(data), label  # the part is a working entity declaration
    src = cost_book(tmp_path / "ok.xlsx")
    book = replace_part(src, tmp_path / "enc.xlsx", "xl/styles.xml", data)
    _refused_by_commands(book, tmp_path, capsys, "DTD or entities")


def test_utf7_case_is_hidden_from_a_utf8_reading() -> None:
    """The UTF-7 case above tests the declared-encoding reading, not the plain one."""
    data = dict((h[0], h[1]) for h in HOSTILE)["declared utf-7"]
    assert b"<!" not in data
    assert "<!DOCTYPE" in data.decode("utf-7")


@pytest.mark.parametrize("encoding", ["x-no-such-encoding", "rot13", "idna"])
def test_declared_encoding_that_cannot_be_checked_is_refused(tmp_path: Path, capsys,
                                                             encoding: str) -> None:
    src = cost_book(tmp_path / "ok.xlsx")
    data = _declared(encoding, PLAIN).encode("ascii")
    book = replace_part(src, tmp_path / "enc.xlsx", "xl/styles.xml", data)
    _refused_by_commands(book, tmp_path, capsys, "character encoding")


@pytest.mark.parametrize("data", [
    _declared("UTF-16", PLAIN).encode("utf-16-le"),
    b"\xfe\xff" + _declared("UTF-16", PLAIN).encode("utf-16-be"),
    _declared("UTF-32", PLAIN).encode("utf-32-be"),
    b"\xef\xbb\xbf" + _declared("UTF-8", PLAIN).encode("utf-8"),
    _declared("windows-1252", PLAIN + "<!-- caf\xe9 -->").encode("cp1252"),
    _declared("IBM037", PLAIN).encode("cp037"),
    "Microsoft Print to PDF".encode("utf-16-le") + b"\0" * 64,  # printer settings part
    b"\x00\x01\x00\x00" + bytes(range(256)),  # binary data (a font) with zero bytes
], ids=["utf-16-le", "utf-16-be-mark", "utf-32-be", "utf-8-mark", "cp1252", "ebcdic",
        "printer-bin", "font-bin"])
def test_parts_without_dtd_pass_in_any_encoding(tmp_path: Path, data: bytes) -> None:
    src = cost_book(tmp_path / "ok.xlsx")
    with zipfile.ZipFile(src, "a") as zf:
        zf.writestr("customXml/item9.xml", data)
    check_archive(src)  # raises BookError if any part were taken for a DTD


def test_unterminated_prolog_in_utf16_is_refused(tmp_path: Path) -> None:
    """A prolog that never reaches its root element within the inspected head is unclear."""
    src = cost_book(tmp_path / "ok.xlsx")
    data = ("<?xml version='1.0'?><!--" + " " * 70_000 + "-->" + PLAIN).encode("utf-16-le")
    with zipfile.ZipFile(src, "a") as zf:
        zf.writestr("customXml/item9.xml", data)
    with pytest.raises(BookError, match="DTD or entities"):
        check_archive(src)
