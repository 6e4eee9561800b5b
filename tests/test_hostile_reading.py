"""Hostile sheets for the readers: far-away cells, reader-library failures, huge texts.

Every workbook is built here from an ordinary one (nothing binary is shipped). The commands
run as separate processes where the failure was the process itself (a native abort, a panic,
minutes of work): the reference for the numbers is the same fit on the same workbook
without the hostile part, and openpyxl (an independent reader) for cell values.
"""

from __future__ import annotations

import io
import json
import random
import subprocess
import sys
import zipfile
from pathlib import Path

import openpyxl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from xlbridge.book import BookError, safety, sheetscan
from xlbridge.book import xlsx as xlsx_reader
from xlbridge.book.reader import open_book
from xlbridge.book.refs import Area
from xlbridge.book.sheetscan import scan_sheet, scan_sheet_bytes
from xlbridge.book.values import MAX_NAME_CHARS, bounded_name

from .bookfactory import cost_book, replace_part, sha256

D = "'Site data'"
SHEET = "xl/worksheets/sheet1.xml"
FIT = ["--y", f"{D}!B:B", "--x", f"{D}!A:A", "--model", "2", "--format", "json"]


def _xlbridge(argv: list, timeout: float = 60) -> subprocess.CompletedProcess:
    """The xlbridge command as its own process (a native abort ends only that process)."""
    return subprocess.run([sys.executable, "-m", "xlbridge.cli", *map(str, argv)],
                          capture_output=True, text=True, timeout=timeout)


def _with_cell(src: Path, dst: Path, sheet: str, cell: str, value: float = 1.0) -> Path:
    wb = openpyxl.load_workbook(src)
    wb[sheet][cell] = value
    wb.save(dst)
    return dst


def _cell_openpyxl(path: Path, sheet: str, cell: str) -> object:
    """One cell as openpyxl reads it (iterating a sheet with a far cell would take hours)."""
    wb = openpyxl.load_workbook(path, data_only=True)
    try:
        return wb[sheet][cell].value
    finally:
        wb.close()


def _numbers(stdout: str) -> dict:
    doc = json.loads(stdout)
    return {"coefficients": doc["coefficients"], "stats": doc["stats"]}


def _clean(proc: subprocess.CompletedProcess) -> None:
    assert "Traceback" not in proc.stderr and "panicked" not in proc.stderr, proc.stderr
    assert proc.returncode in (0, 1, 2), (proc.returncode, proc.stderr)


@pytest.fixture(scope="module")
def plain(tmp_path_factory) -> tuple[Path, dict]:
    folder = tmp_path_factory.mktemp("plain")
    book = cost_book(folder / "plain.xlsx", n=20)
    proc = _xlbridge(["fit", book, *FIT])
    assert proc.returncode == 0, proc.stderr
    return book, _numbers(proc.stdout)


def test_cell_at_the_last_address_does_not_abort(tmp_path: Path, plain) -> None:
    """One cell at XFD1048576 (a 5 KB file) made the value reader allocate 512 GiB and
    abort (exit 134). Now the fit reads only the columns it refers to and gives the numbers
    of the same workbook without that cell; a reference that reaches it is refused."""
    src, expected = plain
    book = _with_cell(src, tmp_path / "far.xlsx", "Site data", "XFD1048576")
    assert book.stat().st_size < 10_000
    before = sha256(book)
    proc = _xlbridge(["fit", book, *FIT])
    _clean(proc)
    assert proc.returncode == 0, proc.stderr
    assert _numbers(proc.stdout) == expected
    proc = _xlbridge(["fit", book, "--y", f"{D}!B1:B21", "--x", f"{D}!A1:XFD21",
                      "--model", "1"])
    _clean(proc)
    assert proc.returncode == 2
    assert proc.stderr.startswith("xlbridge:")
    assert f"{D}!XFD1048576" in proc.stderr and "20,000,000" in proc.stderr
    assert sha256(book) == before


@pytest.mark.parametrize("cell", ["XFD1048576", "ALL100000"])
def test_far_cell_on_the_formula_sheet(tmp_path: Path, cell: str) -> None:
    """A far cell on the sheet of the XB_ formulas: recalc ended with a PanicException
    traceback (XFD1048576) or took 20 s and 4 GB (ALL100000); pin hung in the formula
    reader. Now both answer, with the values of the workbook without the far cell."""
    formulas = {"Model": {"A1": f"=XB_EQUATION({D}!B:B,{D}!A:A,1)"}}
    ref = cost_book(tmp_path / "ref.xlsx", n=20, formulas=formulas)
    book = _with_cell(ref, tmp_path / "far.xlsx", "Model", cell)
    for name in ("ref", "far"):
        proc = _xlbridge(["recalc", tmp_path / f"{name}.xlsx", "--out",
                          tmp_path / f"out-{name}.xlsx"], timeout=30)
        _clean(proc)
        assert proc.returncode == 0, proc.stderr
        proc = _xlbridge(["pin", tmp_path / f"{name}.xlsx", "--out",
                          tmp_path / f"pins-{name}.json"], timeout=30)
        _clean(proc)
        assert proc.returncode == 0, proc.stderr
    got = _cell_openpyxl(tmp_path / "out-far.xlsx", "Model", "A1")
    assert got == _cell_openpyxl(tmp_path / "out-ref.xlsx", "Model", "A1")
    assert isinstance(got, str) and got.startswith("cost =")
    pins = [json.loads((tmp_path / f"pins-{n}.json").read_text())["cells"]
            for n in ("ref", "far")]
    assert pins[0] == pins[1]
    assert book.exists()


def test_far_column_does_not_slow_a_small_fit(tmp_path: Path, plain) -> None:
    """A cell at ALL100000 made a 20-row fit take 25 s and 4 GB (a 10^8-cell block); the
    generous time limit below is far under that and far over a normal run."""
    src, expected = plain
    book = _with_cell(src, tmp_path / "wide.xlsx", "Site data", "ALL100000")
    proc = _xlbridge(["fit", book, *FIT], timeout=20)
    _clean(proc)
    assert proc.returncode == 0, proc.stderr
    assert _numbers(proc.stdout) == expected


def test_windowed_read_equals_whole_read(tmp_path: Path) -> None:
    """Columns read from a sheet too large to read whole hold the values written there,
    error cells and unsaved formulas included."""
    rows = [["a", "b", "c"]] + [[float(i), f"t{i}", i * 0.5] for i in range(1, 30)]
    src = tmp_path / "src.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Site data"
    for row in rows:
        ws.append(row)
    ws["B7"] = "=1/0"
    wb.save(src)
    with zipfile.ZipFile(src) as zf:
        xml = zf.read(SHEET)
    # the error value a spreadsheet program saves for B7, and a far cell
    xml = xml.replace(b'<c r="B7"><f>1/0</f><v /></c>',
                      b'<c r="B7" t="e"><f>1/0</f><v>#DIV/0!</v></c><c r="C7"><f>A1</f></c>')
    xml = xml.replace(b"</sheetData>",
                      b'<row r="90000"><c r="ZZ90000"><v>1</v></c></row></sheetData>')
    book_path = replace_part(src, tmp_path / "far.xlsx", SHEET, xml)
    expected = [list(r[:2]) for r in rows]
    expected[6][1] = "#DIV/0!"
    book = open_book(book_path)
    assert book.used_extent("Site data") == (90000, 702)
    assert book.read_area(Area("Site data", 1, 1, 30, 2)) == expected
    assert book.formulas_without_value(Area("Site data", 1, 1, 30, 3)) == [(7, 3)]
    with pytest.raises(BookError, match=r"ZZ90000"):
        book.read_area(Area("Site data", 1, 1, 30, 702))


def test_irregular_cells_are_scanned_like_regular_ones() -> None:
    """Cells without ``r`` or with ``r`` not first are placed as the reader places them
    (the streaming parser), and give the same scan as the usual syntax."""
    def sheet(cells: bytes) -> bytes:
        return (b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/'
                b'main"><sheetData>' + cells + b"</sheetData></worksheet>")

    regular = sheet(b'<row r="1"><c r="A1"><v>1</v></c><c r="B1" t="e"><v>#N/A</v></c></row>'
                    b'<row r="5"><c r="C5"><f>A1</f></c></row>')
    irregular = sheet(b'<row r="1"><c><v>1</v></c><c t="e"><v>#N/A</v></c></row>'
                      b'<row r="5"><c t="n" r="C5"><f>A1</f></c></row>')
    a, b = scan_sheet_bytes(regular), scan_sheet_bytes(irregular)
    assert a.regular and not b.regular
    for scan in (a, b):
        assert (scan.last_row, scan.last_col) == (5, 3)
        assert scan.errors == {(1, 2): "#N/A"}
        assert scan.no_value == {(5, 3)}
        assert scan.formula_box == (5, 3, 5, 3)
    far = scan_sheet_bytes(sheet(b'<row r="2"><c r="A2"/><c\nr="XFD1048576"><v>1</v></c></row>'))
    assert (far.last_row, far.last_col) == (1048576, 16384)


_CELLS = st.lists(st.tuples(st.integers(1, 1_048_576), st.integers(1, 16_384),
                            st.sampled_from(["", "0", "00"]), st.booleans()),
                  min_size=1, max_size=60)


@settings(max_examples=150, deadline=None)
@given(cells=_CELLS, order=st.sampled_from(["rows", "reversed", "shuffled"]),
       chunk=st.sampled_from([64, 300, 1 << 22]), odd=st.integers(-1, 70))
def test_extent_is_the_largest_row_and_column(cells, order, chunk, odd) -> None:
    """The scan's extent is the largest row and the largest column of any cell, in whatever
    order the cells are written (rows in order, reversed, shuffled), with leading zeros in
    the row and pieces of any size; one cell not written the usual way (``odd``) makes the
    sheet irregular with the same extent. Reference: max over the generated cells."""
    from openpyxl.utils import get_column_letter

    if order == "rows":
        cells = sorted(cells)
    elif order == "reversed":
        cells = sorted(cells, reverse=True)
    body = []
    for i, (r, c, zeros, value) in enumerate(cells):
        ref = f"{get_column_letter(c)}{zeros if len(zeros + str(r)) <= 7 else ''}{r}"
        start = f'<c r="{ref}" s="1"' if i != odd else f'<c s="1" r="{ref}"'
        body.append(f'<row r="{r}" spans="1:2">{start}' + ("><v>1.5</v></c>" if value else "/>")
                    + "</row>")
    xml = ('<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
           f'<sheetData>{"".join(body)}</sheetData></worksheet>').encode()
    want = (max(r for r, _, _, _ in cells), max(c for _, c, _, _ in cells))
    whole = scan_sheet_bytes(xml)
    assert (whole.last_row, whole.last_col) == want
    assert whole.regular == (not 0 <= odd < len(cells))
    whole_chunk = sheetscan._CHUNK  # pieces of the chunk size end at a row end
    try:
        sheetscan._CHUNK = chunk
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w") as zf:
            zf.writestr("s.xml", xml)
        with zipfile.ZipFile(buf) as zf:
            pieces = scan_sheet(zf, "s.xml")
    finally:
        sheetscan._CHUNK = whole_chunk
    assert (pieces.last_row, pieces.last_col) == want
    assert pieces.regular == whole.regular


def test_each_sheet_is_scanned_once(tmp_path: Path, monkeypatch) -> None:
    """A recalculation reads formulas, unsaved values and cells: one scan of each sheet."""
    from xlbridge.runner.recalc import evaluate_book

    formulas = {"Model": {"A1": f"=XB_EQUATION({D}!B:B,{D}!A:A,1)",
                          "A3": f"=XB_COEFS({D}!B2:B21,{D}!A2:A21,2)"}}
    path = cost_book(tmp_path / "m.xlsx", n=20, formulas=formulas)
    calls: list[str] = []
    real = xlsx_reader.scan_sheet

    def counted(zf, part):
        calls.append(part)
        return real(zf, part)

    monkeypatch.setattr(xlsx_reader, "scan_sheet", counted)
    book = open_book(path)
    evaluation = evaluate_book(book)
    assert len(evaluation.cells) == 2 and not evaluation.failed
    assert sorted(calls) == sorted(set(calls)) and len(calls) == len(book.sheet_names)


def test_reader_failures_become_messages(tmp_path: Path) -> None:
    """A native panic (pyo3's PanicException derives from BaseException, not Exception) and
    errors of the other reader libraries become one BookError naming file and sheet."""
    import python_calamine as pc

    ref = cost_book(tmp_path / "ref.xlsx", n=5,
                    formulas={"Model": {"A1": f"=XB_EQUATION({D}!B:B,{D}!A:A,1)"}})
    book = _with_cell(ref, tmp_path / "far.xlsx", "Model", "XFD1048576")
    # calamine itself panics on this sheet (a real native panic, caught by the guard)
    with pytest.raises(BookError, match=r"far\.xlsx, sheet 'Model', cannot be read"):
        with safety.reader_guard(book.name, "Model"):
            pc.CalamineWorkbook.from_path(str(book)).get_sheet_by_name("Model").to_python(
                skip_empty_area=False)
    for exc in (ValueError("bad"), zipfile.BadZipFile("Bad CRC-32"), KeyError("x"),
                MemoryError()):
        with pytest.raises(BookError, match=r"^b\.xlsx"):
            with safety.reader_guard("b.xlsx"):
                raise exc
    with pytest.raises(KeyboardInterrupt):
        with safety.reader_guard("b.xlsx"):
            raise KeyboardInterrupt
    # a damaged sheet part (its bytes changed after compression): a message, not a traceback
    raw = bytearray(ref.read_bytes())
    with zipfile.ZipFile(ref) as zf:
        info = zf.getinfo(SHEET)
    start = info.header_offset + 30 + len(info.filename) + len(info.extra)
    raw[start + info.compress_size // 2] ^= 0xFF
    damaged = tmp_path / "damaged.xlsx"
    damaged.write_bytes(bytes(raw))
    with pytest.raises(BookError, match=r"damaged\.xlsx"):
        b = open_book(damaged)
        b.read(f"{D}!A1:B6")


def test_names_are_cut_with_a_note() -> None:
    short = "size (m2)"
    assert bounded_name(short) == short
    a, b = "x" * 1000 + "a", "x" * 1000 + "b"
    ca, cb = bounded_name(a), bounded_name(b)
    assert len(ca) == MAX_NAME_CHARS and ca != cb
    assert "cut from 1,001 characters" in ca and ca.startswith("x" * 100)


def test_long_sheet_name_is_refused(tmp_path: Path) -> None:
    src = cost_book(tmp_path / "src.xlsx", n=5)
    with zipfile.ZipFile(src) as zf:
        wb_xml = zf.read("xl/workbook.xml")
    long = "S" * 100_000
    book = replace_part(src, tmp_path / "long.xlsx", "xl/workbook.xml",
                        wb_xml.replace(b'name="Site data"', f'name="{long}"'.encode()))
    with pytest.raises(BookError, match="sheet of 100,000 characters") as info:
        open_book(book)
    assert len(str(info.value)) < 400


def test_huge_header_text(tmp_path: Path, plain) -> None:
    """A 50 MB header text: fit said "internal error (the equation has 104,857,668
    characters)" and report took 73 s and 5 GB for a 367 MB page. Now the name is cut and
    both answer with the numbers of the plain workbook, the page stays small."""
    src, expected = plain
    with zipfile.ZipFile(src) as zf:
        xml = zf.read(SHEET)
    rng = random.Random(20240611)  # some varied text keeps the archive under the bomb ratio
    text = b"size " + bytes(rng.choice(b"abcdefghij") for _ in range(100_000)) \
        + b"x" * (50 * 1024 * 1024)
    assert xml.count(b"<t>size</t>") == 1
    book = replace_part(src, tmp_path / "head.xlsx", SHEET,
                        xml.replace(b"<t>size</t>", b"<t>" + text + b"</t>"))
    proc = _xlbridge(["fit", book, *FIT], timeout=60)
    _clean(proc)
    assert proc.returncode == 0, proc.stderr
    got = _numbers(proc.stdout)
    assert [c["estimate"] for c in got["coefficients"]] == \
        [c["estimate"] for c in expected["coefficients"]]
    assert len(proc.stdout) < 20_000
    assert "cut from 52,528,805 characters" in proc.stdout
    page = tmp_path / "r.html"
    proc = _xlbridge(["report", book, *FIT[:6], "--out", page], timeout=120)
    _clean(proc)
    assert proc.returncode == 0, proc.stderr
    assert page.stat().st_size < 5 * 1024**2
