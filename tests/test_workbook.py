"""Reading workbooks: every REF form, raw value shapes, CSV, safe output files.

Expected values come from the data the tests write (invented, fixed seeds) and from
openpyxl reading the same file, an independent reader of our calamine-based one.
"""

from __future__ import annotations

import datetime as dt
import os
import stat
from pathlib import Path

import openpyxl
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from xlbridge.book import BookError
from xlbridge.book.reader import open_book, xlwings_shape
from xlbridge.book.refs import (
    MAX_COL,
    MAX_ROW,
    Area,
    NameRef,
    RefError,
    TableRef,
    col_letters,
    col_number,
    parse_ref,
    quote_sheet,
)
from xlbridge.book.safety import check_output, formula_safe_text, write_atomically
from xlbridge.book.writer import set_value

from .bookfactory import build_book, invented_cost_data, with_cached_values


@pytest.fixture()
def book_path(tmp_path: Path) -> Path:
    size, cost = invented_cost_data(12)
    rows = [["size", "cost", "grade"]] + [[float(s), float(c), "A"] for s, c in zip(size, cost)]
    rows += [[None, None, None]] * 3  # trailing blanks
    return build_book(
        tmp_path / "refs.xlsx",
        {"Site data": rows, "It's": [[1.0], [2.0], [3.0]], "Other": [[None]]},
        tables=[("Site data", "Sales", "A1:C13")],
        names={"cost_y": "'Site data'!$B$2:$B$13", "broken": "#REF!",
               "konst": "0.95"},
        local_names=[("Other", "local_y", "'Site data'!$B$2:$B$5")],
    )


def _col(path: Path, sheet: str, col: int, r1: int, r2: int) -> list:
    ws = openpyxl.load_workbook(path)[sheet]
    return [ws.cell(r, col).value for r in range(r1, r2 + 1)]


# --- REF forms ---------------------------------------------------------------------------


@pytest.mark.parametrize(("ref", "label"), [
    ("'Site data'!B2:B13", "'Site data'!B2:B13"),
    ("'Site data'!$B$2:$B$13", "'Site data'!B2:B13"),
    ("'site DATA'!B2:B13", "'Site data'!B2:B13"),  # sheet names ignore case
    ("cost_y", "'Site data'!B2:B13"),
    ("Sales[cost]", "'Site data'!B2:B13"),
    ("sales[[COST]]", "'Site data'!B2:B13"),
    ("Sales[[#Data],[cost]]", "'Site data'!B2:B13"),
])
def test_ref_forms_select_the_same_cells(book_path: Path, ref: str, label: str) -> None:
    book = open_book(book_path)
    area = book.resolve(ref)
    assert area.label() == label
    assert book.xlwings_value(area) == _col(book_path, "Site data", 2, 2, 13)


def test_whole_column_ignores_trailing_blanks_and_keeps_the_header(book_path: Path) -> None:
    book = open_book(book_path)
    area = book.resolve("'Site data'!B:B")
    assert (area.r1, area.r2) == (1, 13)
    assert book.xlwings_value(area) == _col(book_path, "Site data", 2, 1, 13)


def test_whole_columns_used_together_share_their_last_row(tmp_path: Path) -> None:
    path = build_book(tmp_path / "ragged.xlsx",
                      {"S": [["y", "x"], [1.0, 1.0], [2.0, 2.0], [3.0, None], [4.0, None]]})
    book = open_book(path)
    y, x = book.resolve_together([parse_ref("S!A:A"), parse_ref("S!B:B")])
    assert (y.r2, x.r2) == (5, 5)
    assert book.xlwings_value(x) == ["x", 1.0, 2.0, None, None]


def test_table_parts_and_column_ranges(book_path: Path) -> None:
    book = open_book(book_path)
    assert book.resolve("Sales[#All]").label() == "'Site data'!A1:C13"
    assert book.resolve("Sales[#Headers]").label() == "'Site data'!A1:C1"
    assert book.resolve("Sales").label() == "'Site data'!A2:C13"
    assert book.resolve("Sales[[size]:[cost]]").label() == "'Site data'!A2:B13"
    assert book.resolve("Sales[[#Headers],[cost]]").label() == "'Site data'!B1"
    assert book.xlwings_value(book.resolve("Sales[[#Headers],[size]:[cost]]")) == [
        "size", "cost"]
    with pytest.raises(BookError, match="no column 'price'"):
        book.resolve("Sales[price]")
    with pytest.raises(BookError, match="no totals row"):
        book.resolve("Sales[#Totals]")
    with pytest.raises(BookError, match="no table called 'Nope'"):
        book.resolve("Nope[cost]")


def test_table_with_totals_row(tmp_path: Path) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "T"
    for row in [["a", "b"], [1, 2], [3, 4], [4, 6]]:
        ws.append(row)
    t = openpyxl.worksheet.table.Table(displayName="Tot", ref="A1:B4", totalsRowCount=1)
    ws.add_table(t)
    wb.save(tmp_path / "tot.xlsx")
    book = open_book(tmp_path / "tot.xlsx")
    assert book.resolve("Tot[b]").label() == "T!B2:B3"
    assert book.resolve("Tot[[#Totals],[b]]").label() == "T!B4"
    assert book.resolve("Tot[[#Data],[#Totals],[a]]").label() == "T!A2:A4"


def test_defined_names_scopes_and_bad_names(book_path: Path) -> None:
    book = open_book(book_path)
    assert book.resolve("Other!local_y").label() == "'Site data'!B2:B5"
    assert book.resolve("local_y", default_sheet="Other").label() == "'Site data'!B2:B5"
    with pytest.raises(BookError, match="deleted range"):
        book.resolve("broken")
    with pytest.raises(BookError, match="not a plain range"):
        book.resolve("konst")
    with pytest.raises(BookError, match="no defined name or table"):
        book.resolve("nothing_here")


def test_quoted_sheet_with_apostrophe_and_bounds(book_path: Path) -> None:
    book = open_book(book_path)
    assert book.xlwings_value(book.resolve("'It''s'!A1:A3")) == [1.0, 2.0, 3.0]
    with pytest.raises(BookError, match="sheet 'Nope' not found"):
        book.resolve("Nope!A1:A3")
    with pytest.raises(RefError, match="off the sheet"):
        book.resolve("A1:A2000000")
    with pytest.raises(BookError, match="off the sheet"):
        book.resolve("XFE1")  # reads as a cell beyond column XFD, and is no defined name


# --- raw values in the shapes xlwings delivers ---------------------------------------------


def test_raw_values_match_what_xlwings_hands_a_function(tmp_path: Path) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "V"
    ws["A1"] = 2
    ws["A2"] = 2.5
    ws["A3"] = True
    ws["A4"] = dt.datetime(2021, 3, 4, 5, 6)
    ws["A5"] = "#N/A"  # openpyxl stores this as an error cell
    ws["A7"] = dt.date(2020, 1, 1)
    ws["A8"] = "text"
    ws["B1"] = "#DIV/0!"
    wb.save(tmp_path / "v.xlsx")
    book = open_book(tmp_path / "v.xlsx")
    col = book.xlwings_value(book.resolve("A1:A8"))
    assert col == [2.0, 2.5, True, dt.datetime(2021, 3, 4, 5, 6), "#N/A", None,
                   dt.datetime(2020, 1, 1), "text"]
    assert type(col[0]) is float  # whole numbers arrive as float, as from xlwings
    assert book.xlwings_value(book.resolve("B1")) == "#DIV/0!"
    assert book.xlwings_value(book.resolve("A1:B1")) == [2.0, "#DIV/0!"]
    assert book.xlwings_value(book.resolve("A1:B2")) == [[2.0, "#DIV/0!"], [2.5, None]]
    assert book.xlwings_value(book.resolve("Z100")) is None


def test_xlwings_shape_rules() -> None:
    assert xlwings_shape([[1.0]]) == 1.0
    assert xlwings_shape([[1.0, 2.0]]) == [1.0, 2.0]
    assert xlwings_shape([[1.0], [2.0]]) == [1.0, 2.0]
    assert xlwings_shape([[1.0, 2.0], [3.0, 4.0]]) == [[1.0, 2.0], [3.0, 4.0]]


def test_formula_cells_with_and_without_saved_values(tmp_path: Path) -> None:
    src = build_book(tmp_path / "f.xlsx", {"S": [[1.0], [2.0], [3.0]]},
                     formulas={"S": {"B1": "=A1*2", "B2": "=A2*2", "B3": "=A3*2"}})
    book = open_book(src)
    assert book.formulas_without_value(book.resolve("B1:B3")) == [(1, 2), (2, 2), (3, 2)]
    with pytest.raises(BookError, match="never saved"):
        book.read("B1:B3")
    cached = with_cached_values(src, tmp_path / "g.xlsx", "xl/worksheets/sheet1.xml",
                                {"B1": "2", "B2": "4"})
    book = open_book(cached)
    assert book.formulas_without_value(book.resolve("B1:B3")) == [(3, 2)]
    assert book.xlwings_value(book.resolve("B1:B2")) == [2.0, 4.0]


def test_xlsm_input_is_read(tmp_path: Path) -> None:
    path = build_book(tmp_path / "m.xlsm", {"S": [[1.0, 2.0]]})
    assert open_book(path).xlwings_value(open_book(path).resolve("S!A1:B1")) == [1.0, 2.0]


@settings(max_examples=25,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.lists(st.one_of(
    st.none(), st.floats(allow_nan=False, allow_infinity=False, width=64),
    # whitespace-only text is left out: openpyxl writes it without xml:space="preserve",
    # so XML readers (calamine, the spreadsheet program) see an empty string
    st.booleans(), st.text(alphabet="abcxyz =+-@", min_size=1, max_size=8).filter(str.strip),
    st.integers(min_value=-10**9, max_value=10**9)), min_size=3, max_size=3),
    min_size=1, max_size=6))
def test_values_agree_with_openpyxl_as_independent_reader(tmp_path: Path, rows) -> None:
    path = tmp_path / "h.xlsx"
    build_book(path, {"H": rows})
    ours = open_book(path).read_area(Area("H", 1, 1, len(rows), 3))
    theirs = openpyxl.load_workbook(path, data_only=True)["H"]
    for i, row in enumerate(ours):
        for j, v in enumerate(row):
            t = theirs.cell(i + 1, j + 1).value
            if isinstance(t, int) and not isinstance(t, bool):
                t = float(t)
            assert v == t and type(v) is type(t)



@pytest.mark.parametrize("top, left", [(1, 1), (3, 3), (1, 4), (6, 1)])
def test_sheet_away_from_a1_and_longer_than_one_read_step(tmp_path: Path, top: int,
                                                          left: int) -> None:
    """The reader turns rows into columns a few thousand at a time (book.xlsx); blank rows
    and columns before the first cell stay in place. Reference: openpyxl reading the file."""
    path = tmp_path / "far.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "S"
    n = 9000  # more than two steps of rows
    for i in range(n):
        ws.cell(top + i, left, i * 0.5)
        if i % 7 == 0:
            ws.cell(top + i, left + 1, f"t{i}")
    ws.cell(top + n + 2, left + 2, True)
    wb.save(path)
    last_row, last_col = top + n + 2, left + 2
    book = open_book(path)
    assert book.used_extent("S") == (last_row, last_col)
    ours = book.read_area(Area("S", 1, 1, last_row + 1, last_col + 1))
    theirs = openpyxl.load_workbook(path, data_only=True)["S"]
    for i, row in enumerate(ours):
        assert row == [theirs.cell(i + 1, j + 1).value for j in range(last_col + 1)]
    whole = book.resolve("S!$A:$A" if left == 1 else f"S!{col_letters(left)}:{col_letters(left)}")
    assert whole.r2 == top + n - 1


# --- reference text (pure) ------------------------------------------------------------------

_sheet_names = st.text(alphabet="ab xyz'!1_-.", min_size=1, max_size=10).filter(
    lambda s: s.strip() == s and not s.startswith("'") and "[" not in s)


@given(_sheet_names, st.integers(1, MAX_ROW), st.integers(1, MAX_COL),
       st.integers(0, 50), st.integers(0, 5))
def test_area_label_round_trips(sheet: str, r1: int, c1: int, dr: int, dc: int) -> None:
    r2, c2 = min(MAX_ROW, r1 + dr), min(MAX_COL, c1 + dc)
    area = Area(sheet, r1, c1, r2, c2)
    assert parse_ref(area.label()) == area


@given(st.integers(1, MAX_COL))
def test_column_letters_round_trip(n: int) -> None:
    assert col_number(col_letters(n)) == n


def test_parse_ref_kinds_and_messages() -> None:
    assert parse_ref("Data!B:D") == Area("Data", 1, 2, MAX_ROW, 4, whole_columns=True)
    assert parse_ref("2:3") == Area(None, 2, 1, 3, MAX_COL, whole_rows=True)
    assert parse_ref("my_y") == NameRef("my_y")
    assert parse_ref("Data!my_y") == NameRef("my_y", "Data")
    t = parse_ref("Sales[[#Headers],[Unit Price']]]")  # ' escapes ] inside a column name
    assert isinstance(t, TableRef) and t.parts == {"headers"} and t.first == "Unit Price]"
    assert parse_ref("B9:A2") == Area(None, 2, 1, 9, 2)  # corners in any order
    assert quote_sheet("Site data") == "'Site data'" and quote_sheet("Data") == "Data"
    assert quote_sheet("A1") == "'A1'"  # a sheet named like a cell must be quoted
    for bad, msg in [("[1]S!A1", "another workbook"), ("S!", "nothing after"),
                     ("'S!A1", "no closing quote"), ("A1:", "not a cell"),
                     ("Sales[#This Row]", "this row"), ("S!Sales[x]", "no sheet name"),
                     ("", "empty")]:
        with pytest.raises(RefError, match=msg):
            parse_ref(bad)


# --- safe output -------------------------------------------------------------------------------


def test_atomic_write_refuses_overwrite_and_leaves_no_temp(tmp_path: Path) -> None:
    out = tmp_path / "o.txt"
    write_atomically(out, lambda p: p.write_text("one"), force=False)
    with pytest.raises(BookError, match="already exists; add --force"):
        write_atomically(out, lambda p: p.write_text("two"), force=False)
    assert out.read_text() == "one"

    def boom(p: Path) -> None:
        p.write_text("half")
        raise OSError(28, "No space left on device")

    with pytest.raises(BookError, match="No space left"):
        write_atomically(out, boom, force=True)
    assert out.read_text() == "one"  # the old file survives a failed write
    write_atomically(out, lambda p: p.write_text("two"), force=True)
    assert out.read_text() == "two"
    assert [p.name for p in tmp_path.iterdir()] == ["o.txt"]


def test_output_checks(tmp_path: Path) -> None:
    src = tmp_path / "in.xlsx"
    src.write_bytes(b"x")
    with pytest.raises(BookError, match="is the input file"):
        check_output(src, force=True, inputs=[src])
    ro = tmp_path / "ro.xlsx"
    ro.write_bytes(b"x")
    os.chmod(ro, stat.S_IRUSR)
    with pytest.raises(BookError, match="read-only"):
        check_output(ro, force=True)
    (tmp_path / "~$open.xlsx").write_bytes(b"")
    with pytest.raises(BookError, match="open in another program"):
        check_output(tmp_path / "open.xlsx", force=True)
    with pytest.raises(BookError, match="does not exist"):
        check_output(tmp_path / "no" / "x.xlsx", force=False)


def test_formula_looking_text_is_kept_as_text(tmp_path: Path) -> None:
    assert formula_safe_text("=1+2") == "'=1+2"
    assert formula_safe_text("-x") == "'-x" and formula_safe_text("@a") == "'@a"
    assert formula_safe_text("size") == "size" and formula_safe_text(1.5) == 1.5
    wb = openpyxl.Workbook()
    ws = wb.active
    for i, text in enumerate(["=HYPERLINK(\"http://x\")", "+1", "-2", "@x", "#N/A"], 1):
        set_value(ws.cell(i, 1), text)
    wb.save(tmp_path / "t.xlsx")
    back = openpyxl.load_workbook(tmp_path / "t.xlsx")
    cells = [back.active.cell(i, 1) for i in range(1, 6)]
    assert [c.data_type for c in cells] == ["s"] * 5
    assert cells[0].value == "=HYPERLINK(\"http://x\")"


# --- CSV ----------------------------------------------------------------------------------------


def test_csv_values_and_delimiters(tmp_path: Path) -> None:
    p = tmp_path / "d.csv"
    p.write_text("size,cost,flag\n1,2.5,TRUE\n2,,false\n3,#N/A,x\n", encoding="utf-8")
    book = open_book(p)
    assert book.sheet_names == ["d"]
    assert book.xlwings_value(book.resolve("A:C")) == [
        ["size", "cost", "flag"], [1.0, 2.5, True], [2.0, None, False], [3.0, "#N/A", "x"]]
    q = tmp_path / "e.csv"
    q.write_text("a;b\n1;2\n3;4\n", encoding="utf-8")
    assert open_book(q).xlwings_value(open_book(q).resolve("e!B1:B3")) == ["b", 2.0, 4.0]


def test_cells_without_their_r_attribute(tmp_path: Path) -> None:
    """Some writers omit a cell's r="B2"; the error and no-saved-value scans still work."""
    import re
    import zipfile

    from .bookfactory import replace_part

    src = build_book(tmp_path / "r.xlsx", {"S": [[1.0, 2.0], ["#N/A", 4.0]]},
                     formulas={"S": {"C1": "=A1+B1"}})
    with zipfile.ZipFile(src) as z:
        xml = z.read("xl/worksheets/sheet1.xml").decode()
    stripped = re.sub(r'(<c) r="[A-Z]+\d+"', r"\1", xml)
    assert 'r="A2"' not in stripped
    book = open_book(replace_part(src, tmp_path / "nor.xlsx", "xl/worksheets/sheet1.xml",
                                  stripped.encode()))
    assert book.xlwings_value(book.resolve("A1:B2")) == [[1.0, 2.0], ["#N/A", 4.0]]
    assert book.formulas_without_value(book.resolve("A1:C2")) == [(1, 3)]
