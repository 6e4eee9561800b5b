"""recalc: the XB_ call reader, evaluation order, messages, and the copy it writes.

Reference: the worksheet functions called directly with the cell values (the same values
xlwings would pass), so "recalc fills the same values as calling the functions". The copy
is read back with python-calamine and openpyxl, independent readers.
"""

from __future__ import annotations

from pathlib import Path

import openpyxl
import pytest
import python_calamine
from hypothesis import given
from hypothesis import strategies as st
from openpyxl.worksheet.formula import ArrayFormula

from xlbridge import worksheet
from xlbridge.book.reader import open_book
from xlbridge.book.refs import Area, parse_ref
from xlbridge.runner.formula import (
    ArrayConst,
    Call,
    Literal,
    Missing,
    Ref,
    Spill,
    Unsupported,
    calls_xb,
    parse_xb_formula,
    reference_texts,
)
from xlbridge.runner.recalc import evaluate_book

from .bookfactory import cost_book, invented_cost_data, run, sha256, with_cached_values

D = "'Site data'"


def _data(n: int = 40) -> tuple[list, list]:
    """y and x as xlwings hands them for D!B1:B41 and D!A1:A41 (header row first)."""
    size, cost = invented_cost_data(n)
    return ["cost", *map(float, cost)], ["size", *map(float, size)]


def _region(path: Path, sheet: str, area: str) -> list[list]:
    a = parse_ref(area)
    assert isinstance(a, Area)
    grid = python_calamine.CalamineWorkbook.from_path(str(path)).get_sheet_by_name(
        sheet).to_python(skip_empty_area=False)
    out = []
    for r in range(a.r1, a.r2 + 1):
        row = grid[r - 1] if r <= len(grid) else []
        out.append([row[c - 1] if c <= len(row) else "" for c in range(a.c1, a.c2 + 1)])
    return out


def _cells(table: list[list]) -> list[list]:
    """A result table as calamine reads it back ("" for blank cells)."""
    return [["" if v is None else v for v in row] for row in table]


# --- the XB_ call reader -----------------------------------------------------------------


def test_reader_reads_the_argument_kinds() -> None:
    c = parse_xb_formula('=XB_PREDICT(Sales[Price], \'Site data\'!$A$2:$A$9, 2, '
                         '{1,2;3,4}, , TRUE, "a ""q"" b", -1.5e-3, 50%, #N/A)')
    assert c.name == "XB_PREDICT" and not c.single
    assert c.args[0] == Ref("Sales[Price]", parse_ref("Sales[Price]"))
    assert c.args[1] == Ref("'Site data'!$A$2:$A$9", Area("Site data", 2, 1, 9, 1))
    assert c.args[2:] == (Literal(2.0), ArrayConst(((1.0, 2.0), (3.0, 4.0))), Missing(),
                          Literal(True), Literal('a "q" b'), Literal(-0.0015), Literal(0.5),
                          Literal("#N/A"))
    assert parse_xb_formula("=xb_versions()") == Call("XB_VERSIONS", ())
    assert parse_xb_formula("=_xludf.XB_STATS(y,x,1)").name == "XB_STATS"
    assert parse_xb_formula("='xlbridge.xlam'!XB_STATS(y,x,1)").name == "XB_STATS"
    assert parse_xb_formula("=_xlfn.SINGLE(XB_EQUATION(y,x,1))").single
    spill = parse_xb_formula("=XB_PREDICT(y,x,2,Model!D2#,_xlfn.ANCHORARRAY(E5))")
    assert spill.args[3:] == (Spill(Ref("Model!D2", Area("Model", 2, 4, 2, 4))),
                              Spill(Ref("E5", Area(None, 5, 5, 5, 5))))
    nested = parse_xb_formula("=XB_COEFS(A1:A9, XB_PREDICT(A1:A9,B1:B9,1,C1:C9), 1)")
    assert isinstance(nested.args[1], Call) and nested.args[1].name == "XB_PREDICT"


@pytest.mark.parametrize(("formula", "message"), [
    ("=SUM(XB_COEFS(A1,B1,2))", "inside a larger expression"),
    ("=-XB_COEFS(A1,B1,2)", "inside a larger expression"),
    ("=XB_COEFS(A1,B1,2)+1", "continues after the XB_ call"),
    ("=XB_COEFS(A1+1,B1,2)", "is an expression"),
    ("=XB_COEFS(A1,SUM(B1:B3),2)", "calls SUM()"),
    ('=XB_COEFS(A1,B1,"a"&C1)', "not expressions"),
    ("=XB_COEFS(A1:A3 B1:B3,1,2)", "not expressions"),
    ("=XB_COEFS(A1,B1,2", "not closed"),
    ("=XB_COEFS(A1,B1,{1,2;3})", "different lengths"),
    ("=XB_COEFS(A1,Sales[@Price],2)", "this row"),
    ("=XB_COEFS(A1,[1]Sheet!B1,2)", "another workbook"),
    ("=XB_COEFS(A1,B1,A1:A2#)", "must name one cell"),
    ("=XB_COEFS(A1,B1,_xlfn.ANCHORARRAY(A1,B1))", "one cell reference"),
])
def test_reader_refuses_what_it_cannot_evaluate(formula: str, message: str) -> None:
    with pytest.raises(Unsupported, match=message):
        parse_xb_formula(formula)


def test_reader_reads_typed_spills_error_values_and_signed_constants() -> None:
    """The typed spill form is read outside text and quoted sheet names only; error values
    are any of the spreadsheet's, in any case; numbers keep their sign and exponent."""
    c = parse_xb_formula("=XB_PREDICT('It''s'!D2#, \"A2# stays text\", #spill!, "
                         "{-1,2.5e-3;\"a\",TRUE}, 0.5e-3, Sales[[#Headers],[Price]])")
    assert c.args == (Spill(Ref("'It''s'!D2", Area("It's", 2, 4, 2, 4))),
                      Literal("A2# stays text"), Literal("#SPILL!"),
                      ArrayConst(((-1.0, 0.0025), ("a", True))), Literal(0.0005),
                      Ref("Sales[[#Headers],[Price]]",
                          parse_ref("Sales[[#Headers],[Price]]")))
    with pytest.raises(Unsupported, match="unknown error literal"):
        parse_xb_formula("=XB_COEFS(A1,B1,#NOPE!)")
    with pytest.raises(Unsupported, match="no closing"):
        parse_xb_formula('=XB_COEFS(A1,B1,"level=0.9)')


def test_references_of_ordinary_formulas() -> None:
    """Only references count as dependencies: not text, function names or numbers."""
    assert reference_texts("=SUM('It''s'!A1:A3)+B1#*Sales[Price]&\"C9\"+my_y*2") == [
        "'It''s'!A1:A3", "B1", "Sales[Price]", "my_y"]
    assert reference_texts("=SUM(A1") == ["A1"]
    assert reference_texts('="unclosed') == []


def test_calls_xb_ignores_text_and_other_names() -> None:
    assert calls_xb("=XB_COEFS(A1,B1,2)") and calls_xb("=1+xb_stats(a,b,1)")
    assert not calls_xb('="XB_COEFS(" & A1') and not calls_xb("=MYXB_COEFS(A1)")


_ref_text = st.builds(
    lambda sheet, r, c, h: Area(sheet, r, c, r + h, c).label(),
    st.one_of(st.none(), st.sampled_from(["Data", "Site data", "It's", "x-1"])),
    st.integers(1, 5000), st.integers(1, 200), st.integers(0, 30))
_arg = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False).map(lambda v: ("num", v)),
    st.text(alphabet='ab ;="\'x', max_size=12).map(lambda v: ("text", v)),
    st.booleans().map(lambda v: ("bool", v)),
    _ref_text.map(lambda v: ("ref", v)),
)


@given(st.lists(_arg, min_size=1, max_size=6))
def test_reader_round_trips_generated_calls(args) -> None:
    parts = []
    for kind, v in args:
        if kind == "num":
            parts.append(repr(v))
        elif kind == "text":
            parts.append('"' + v.replace('"', '""') + '"')
        elif kind == "bool":
            parts.append("TRUE" if v else "FALSE")
        else:
            parts.append(v)
    call = parse_xb_formula("=XB_COEFS(" + ", ".join(parts) + ")")
    assert len(call.args) == len(args)
    for (kind, v), got in zip(args, call.args):
        if kind == "ref":
            assert got == Ref(v, parse_ref(v))
        else:
            assert got == Literal(v)


# --- evaluation and the copy ---------------------------------------------------------------


def _model_book(tmp_path: Path) -> Path:
    """Dependent cells come first in reading order: A1 reads the array result at A20,
    A10 reads part of the plain formula's result at A30 (known only after evaluating it)."""
    y, x = f"{D}!B1:B41", f"{D}!A1:A41"
    formulas = {"Model": {
        "A1": f"=XB_PREDICT({y},{x},2,Model!B21:B23)",
        "A10": f"=XB_PREDICT({y},{x},2,Model!C32:C34)",
        "A20": ArrayFormula("A20:I24", f"=XB_COEFS({y},{x},2)"),  # one row more than needed
        "A30": f"=XB_STATS({D}!B:B,{D}!A:A,2,\"level=0.9\")",
        "L1": f"=XB_EQUATION({y},{x},2)",
    }}
    return cost_book(tmp_path / "model.xlsx", formulas=formulas)


def test_recalc_fills_the_values_the_functions_give(tmp_path: Path, capsys) -> None:
    src = _model_book(tmp_path)
    before = sha256(src)
    out = tmp_path / "copy.xlsx"
    code, text, err = run(["recalc", src, "--out", out, "--values"], capsys)
    assert code == 0, text + err
    assert sha256(src) == before
    assert "XB_ cells found: 5, evaluated: 5, errors: 0" in text
    y, x = _data()
    coefs = worksheet.XB_COEFS(y, x, 2.0)
    stats = worksheet.XB_STATS(y, x, 2.0, "level=0.9")
    p1 = worksheet.XB_PREDICT(y, x, 2.0, [coefs[1][1], coefs[2][1], coefs[3][1]])
    p2 = worksheet.XB_PREDICT(y, x, 2.0, [stats[2][2], stats[3][2], stats[4][2]])
    eq = worksheet.XB_EQUATION(y, x, 2.0)
    assert _region(out, "Model", "A20:I23") == _cells(coefs)
    assert _region(out, "Model", "A24:I24") == [[""] * 9]  # the array range's spare row
    assert _region(out, "Model", f"A30:C{29 + len(stats)}") == _cells(stats)
    assert _region(out, "Model", "A1:G4") == _cells(p1)
    assert _region(out, "Model", "A10:G13") == _cells(p2)
    assert _region(out, "Model", "L1") == eq
    assert all(isinstance(v, float) for v in (p1[1][0], p2[1][0]))
    # the data sheet is carried over unchanged
    assert [r[0] for r in _region(out, "Site data", "B1:B41")] == y
    assert [r[0] for r in _region(out, "Site data", "A1:A41")] == x
    wb = openpyxl.load_workbook(out)
    assert wb["Model"]["A20"].data_type != "f"  # values, no formula left behind

    # the live copy: the formulas stay, the array range fits the table, plain formulas
    # hold their first value (what a spreadsheet program shows of a plain formula)
    live = tmp_path / "live.xlsx"
    code, text, err = run(["recalc", src, "--out", live], capsys)
    assert code == 0, text + err
    assert "3 plain formula(s) give a table" in text
    assert _region(live, "Model", "A20:I23") == _cells(coefs)
    assert _region(live, "Model", "A24:I24") == [[""] * 9]
    assert _region(live, "Model", "A1:B2") == [[p1[0][0], ""], ["", ""]]
    assert _region(live, "Model", "L1") == eq
    wb = openpyxl.load_workbook(live)
    array = wb["Model"]["A20"].value
    assert isinstance(array, ArrayFormula) and array.ref == "A20:I23"
    assert array.text == f"=XB_COEFS({D}!B1:B41,{D}!A1:A41,2)"
    assert wb["Model"]["A30"].value == f"=XB_STATS({D}!B:B,{D}!A:A,2,\"level=0.9\")"
    assert openpyxl.load_workbook(live, data_only=True)["Model"]["A30"].value == stats[0][0]


def test_evaluate_without_writing_reads_formulas_read_only(tmp_path: Path) -> None:
    ev = evaluate_book(open_book(_model_book(tmp_path)))
    assert [c.label for c in ev.cells] == ["Model!A1", "Model!L1", "Model!A10", "Model!A20",
                                           "Model!A30"]
    assert all(c.ok for c in ev.cells)
    assert ev.cells[3].output_area().label() == "Model!A20:I23"


def test_messages_instead_of_numbers(tmp_path: Path, capsys) -> None:
    y, x = f"{D}!B1:B41", f"{D}!A1:A41"
    formulas = {"Model": {
        "A1": f"=SUM(XB_COEFS({y},{x},2))",
        "A3": f"=XB_NOPE({y},{x},2)",
        "A5": f"=XB_COEFS({y},{x},2,\"\",7)",
        "A7": f"=XB_COEFS({y},{x},Model!Z1)",  # Z1: formula without a saved value
        "A9": "=XB_COEFS(A9:A12,B9:B12,1)",  # reads its own result
        "C20": "=XB_COEFS(E20,F20,1)",
        "E20": "=XB_COEFS(C20,D20,1)",  # a cycle of two
        "A30": f"=XB_STATS({y},{x},2)",  # plain formula: its result would cover A31 (data)
        "A31": None,
        "Z1": "=1+1",
    }}
    src = cost_book(tmp_path / "bad.xlsx", formulas=formulas,
                    extra_sheets={"Model": [[None]] * 30 + [[None, None], [None, "in the way"]]})
    out = tmp_path / "bad-copy.xlsx"
    code, text, err = run(["recalc", src, "--out", out, "--values"], capsys)
    assert code == 1, err
    got = {row[0]: row for row in [line.strip().split(" ", 2) for line in text.splitlines()]
           if row[0].startswith("Model!")}
    assert "inside a larger expression" in got["Model!A1"][2]
    assert "XB_NOPE is not a function" in got["Model!A3"][2]
    assert "takes (y, x, model, [options])" in got["Model!A5"][2]
    assert "never saved" in got["Model!A7"][2]
    assert "own result" in got["Model!A9"][2]
    assert "circular reference" in got["Model!C20"][2] and "circular" in got["Model!E20"][2]
    assert "is not empty" in got["Model!A30"][2] and "B32" in got["Model!A30"][2]
    back = python_calamine.CalamineWorkbook.from_path(str(out)).get_sheet_by_name(
        "Model").to_python(skip_empty_area=False)
    for r, c in [(1, 1), (3, 1), (5, 1), (7, 1), (9, 1), (30, 1)]:
        assert str(back[r - 1][c - 1]).startswith("xlbridge: ")  # the message, no number
    assert back[31][1] == "in the way"  # the data that blocked the result is kept


def test_saved_values_of_ordinary_formulas(tmp_path: Path) -> None:
    """A column of ordinary formulas with saved values is used as the spreadsheet shows it;
    an ordinary formula that reads an XB_ result gets a message (it may be stale)."""
    y, x = _data(12)
    rows = [["size", "cost", "double"]] + [[a, b, None] for a, b in zip(x[1:], y[1:])]
    formulas = {"Site data": {f"C{r}": f"=A{r}*2" for r in range(2, 14)},
                "Model": {"A1": f"=XB_COEFS({D}!B2:B13,{D}!C2:C13,1)",
                          "A10": ArrayFormula("A10:I12", f"=XB_COEFS({D}!B2:B13,{D}!A2:A13,1)"),
                          "K1": "=B11*1",
                          "A20": f"=XB_PREDICT({D}!B2:B13,{D}!A2:A13,1,Model!K1)"}}
    from .bookfactory import build_book

    src = build_book(tmp_path / "f.xlsx", {"Site data": rows, "Model": [[None]]},
                     formulas=formulas)
    cached = {f"C{r}": repr(2 * x[r - 1]) for r in range(2, 14)}
    book = with_cached_values(src, tmp_path / "g.xlsx", "xl/worksheets/sheet1.xml", cached)
    book = with_cached_values(book, tmp_path / "h.xlsx", "xl/worksheets/sheet2.xml",
                              {"K1": "3.5"})
    ev = {c.label: c for c in evaluate_book(open_book(book)).cells}
    assert ev["Model!A1"].ok
    assert ev["Model!A1"].result == worksheet.XB_COEFS(y[1:13], [2 * v for v in x[1:13]], 1.0)
    assert not ev["Model!A20"].ok
    assert "ordinary formula that reads the result of Model!A10" in ev["Model!A20"].message


def test_text_that_looks_like_a_formula_stays_text(tmp_path: Path, capsys) -> None:
    src = cost_book(tmp_path / "t.xlsx", extra_sheets={"Notes": [["=2+3"], ["@margin"]]},
                    formulas={"Model": {"A1": f"=XB_EQUATION({D}!B:B,{D}!A:A,1)"}})
    out = tmp_path / "t-copy.xlsx"
    code, _, err = run(["recalc", src, "--out", out], capsys)
    assert code == 0, err
    ws = openpyxl.load_workbook(out)["Notes"]
    assert (ws["A1"].value, ws["A1"].data_type) == ("=2+3", "s")
    assert _region(out, "Notes", "A1:A2") == [["=2+3"], ["@margin"]]


def test_recalc_output_rules(tmp_path: Path, capsys) -> None:
    src = _model_book(tmp_path)
    code, _, err = run(["recalc", src, "--out", src, "--force"], capsys)
    assert code == 2 and "is the input file" in err
    code, _, err = run(["recalc", src, "--out", tmp_path / "x.xlsm"], capsys)
    assert code == 2 and "must end in .xlsx" in err
    plain = cost_book(tmp_path / "plain.xlsx")
    code, _, err = run(["recalc", plain, "--out", tmp_path / "p2.xlsx"], capsys)
    assert code == 0 and "no XB_ formulas" in err
    assert not (tmp_path / "p2.xlsx").exists()
    code, text, _ = run(["recalc", src, "--out", tmp_path / "j.xlsx", "--format", "json"],
                        capsys)
    import json

    doc = json.loads(text)
    assert code == 0 and doc["errors"] == 0 and len(doc["cells"]) == 5
    written = {c["cell"]: c["range"] for c in doc["cells"]}
    assert written["Model!A20"] == "Model!A20:I23"  # the array range, sized to the table
    assert written["Model!A30"] == "Model!A30"  # a plain formula: its first value only
    assert doc["parts"]["changed"] == ["xl/worksheets/sheet2.xml"]


def test_spill_references(tmp_path: Path) -> None:
    """``D1#`` reads the whole array at D1 (saved values of an ordinary array formula, or
    the fresh result of an XB_ cell)."""
    from .bookfactory import build_book

    y, x = _data()
    rows = [[b, a] for a, b in zip(y, x)]
    formulas = {"Model": {
        "D1": ArrayFormula("D1:D3", "=SEQUENCE(3)"),
        "A1": f"=XB_PREDICT({D}!B:B,{D}!A:A,2,D1#)",
        "A10": f"=XB_PREDICT({D}!B:B,{D}!A:A,2,_xlfn.ANCHORARRAY(K10))",
        "K10": f"=XB_PREDICT({D}!B:B,{D}!A:A,2,{{20;30}},\"header=no\")",
        "A20": f"=XB_PREDICT({D}!B:B,{D}!A:A,2,B30#)",
    }}
    src = build_book(tmp_path / "s.xlsx", {"Site data": rows,
                                           "Model": [[None], [None, None, None, 2.0],
                                                     [None, None, None, 3.0]]},
                     formulas=formulas)
    book = with_cached_values(src, tmp_path / "s2.xlsx", "xl/worksheets/sheet2.xml",
                              {"D1": "1"})
    ev = {c.label: c for c in evaluate_book(open_book(book)).cells}
    assert ev["Model!A1"].result == worksheet.XB_PREDICT(y, x, 2.0, [1.0, 2.0, 3.0])
    assert ev["Model!K10"].ok and ev["Model!K10"].output_area().label() == "Model!K10:Q11"
    assert "new_x has 7 columns" in ev["Model!A10"].message  # it read all of K10:Q11
    assert "holds no spilled result" in ev["Model!A20"].message


def test_results_that_would_overlap(tmp_path: Path) -> None:
    """B5's table (B5:J8) and A6's statistics (A6:C27) cross at B6:C8: the second one
    written gets a message, the first keeps its values."""
    from xlbridge.runner.write import plan_results

    src = cost_book(tmp_path / "o.xlsx", formulas={"Model": {
        "B5": f"=XB_COEFS({D}!B:B,{D}!A:A,2)", "A6": f"=XB_STATS({D}!B:B,{D}!A:A,2)"}})
    ev = evaluate_book(open_book(src))
    edits, report = plan_results(ev, values=True)
    cells = {c.label: c for c in ev.cells}
    assert cells["Model!B5"].ok
    assert "overlaps the result of Model!B5" in cells["Model!A6"].message
    assert str(edits["Model"][(6, 1)].value).startswith("xlbridge: ")
    assert edits["Model"][(6, 2)].value == "intercept"
    assert report.conflicts and report.written == 1


def test_each_range_is_read_once_and_fitted_once(tmp_path: Path, monkeypatch) -> None:
    """Five formulas over the same y and x: two reads of the book, the two ranges cleaned
    once each, one fit in the cache, and every result still equals the function called on
    its own."""
    from xlbridge.cells import prepare
    from xlbridge.cells.cache import FIT_CACHE

    cleaned: list[str] = []
    real_clean = prepare.clean_cells

    def counted(value, what="x", **kw):
        cleaned.append(what)
        return real_clean(value, what, **kw)

    monkeypatch.setattr(prepare, "clean_cells", counted)

    y, x = f"{D}!B1:B41", f"{D}!A1:A41"
    formulas = {"Model": {"A1": ArrayFormula("A1:I4", f"=XB_COEFS({y},{x},2)"),
                          "A10": f"=XB_STATS({y},{x},2)",
                          "D10": f"=XB_EQUATION({y},{x},2)",
                          "F10": f"=XB_COEFS({y},{x},2)",
                          "H10": f"=XB_CHECKS({y},{x},2)"}}
    src = cost_book(tmp_path / "shared.xlsx", formulas=formulas)
    FIT_CACHE.clear()
    ev = evaluate_book(open_book(src))
    assert all(c.ok for c in ev.cells)
    assert ev.reads == 2
    assert sorted(cleaned) == ["x", "y"]
    assert FIT_CACHE.misses == 1 and FIT_CACHE.hits >= 4
    yv, xv = _data()
    got = {c.label: c.result for c in ev.cells}
    assert got["Model!A1"] == worksheet.XB_COEFS(yv, xv, 2.0)
    assert got["Model!H10"] == worksheet.XB_CHECKS(yv, xv, 2.0)


def test_formula_scan_equals_openpyxl(tmp_path: Path) -> None:
    """The XML scan of formula cells gives what openpyxl (an independent reader) gives, for
    the templates, a book of array and plain formulas with escaped text, and a sheet of
    shared formulas (left to openpyxl, which translates them cell by cell)."""
    from xlbridge.book.formulas import formula_index

    from .bookfactory import REPO, replace_part

    books = sorted((REPO / "workbook_templates").glob("*.xlsx")) + [_model_book(tmp_path)]
    escaped = cost_book(tmp_path / "esc.xlsx", formulas={"Model": {
        "A1": f'=XB_COEFS({D}!B:B,{D}!A:A,2,"level=0.9; note=a<b & c")'}})
    books.append(escaped)
    shared_xml = (b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/'
                  b'main"><sheetData><row r="1"><c r="A1"><f t="shared" ref="A1:A3" si="0">'
                  b"B1*2</f><v>2</v></c></row><row r=\"2\"><c r=\"A2\"><f t=\"shared\" si=\"0\"/>"
                  b"<v>4</v></c></row></sheetData></worksheet>")
    books.append(replace_part(escaped, tmp_path / "shared.xlsx", "xl/worksheets/sheet2.xml",
                              shared_xml))
    for path in books:
        wb = openpyxl.load_workbook(path)
        by_openpyxl = formula_index(open_book(path), wb)
        assert formula_index(open_book(path)) == by_openpyxl, path.name
    assert by_openpyxl["Model"][(2, 1)].text == "=B2*2"
