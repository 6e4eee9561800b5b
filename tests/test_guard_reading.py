"""Guard rails of reading: misaligned ranges (warning, --strict refuses), numbers stored
as text (read and counted the same way in .xlsx, CSV and the worksheet cells), European
CSV files (semicolons and decimal commas found from the file), and the loud warning of a
fit that leaves out more than a fifth of its rows. Reference: the Python API
``xlbridge.fit`` on the plain numbers (no workbook, no cells)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import xlbridge
from xlbridge import cells

from .bookfactory import build_book, invented_cost_data, run

N = 30


def _rows(text_rows: tuple[int, ...] = ()) -> list[list]:
    size, cost = invented_cost_data(N)
    rows: list[list] = [["size", "cost"]]
    for i, (s, c) in enumerate(zip(size, cost)):
        rows.append([float(s), f" {float(c)!r} " if i in text_rows else float(c)])
    return rows


def _api(notes: bool = True, **kw):
    """The API's JSON of the same fit (without its ``notes`` when ``notes`` is false: the
    readers add their own, such as the numbers read from text)."""
    size, cost = invented_cost_data(N)
    doc = xlbridge.fit(cost, size, 2, names=("size",), **kw).to_dict()
    return doc if notes else {k: v for k, v in doc.items() if k != "notes"}


def test_misaligned_ranges_warn_and_strict_refuses(tmp_path: Path, capsys) -> None:
    book = build_book(tmp_path / "b.xlsx", {"Data": _rows()})
    argv = ["fit", book, "--y", "Data!B3:B31", "--x", "Data!A2:A30", "--model", "1"]
    code, _, err = run(argv, capsys)
    assert code == 0
    assert ("xlbridge: warning: --y Data!B3:B31 and --x Data!A2:A30 start on different "
            "sheet rows (3 vs 2); rows are paired by position") in err
    code, _, err = run([*argv, "--strict"], capsys)
    assert code == 2 and err.startswith("xlbridge: --y Data!B3:B31 and --x Data!A2:A30")
    # aligned ranges: no warning
    code, _, err = run(["fit", book, "--y", "Data!B2:B31", "--x", "Data!A2:A31", "--model",
                        "1", "--strict"], capsys)
    assert code == 0 and "different rows" not in err


def test_numbers_stored_as_text_are_read_and_named(tmp_path: Path, capsys) -> None:
    book = build_book(tmp_path / "b.xlsx", {"Data": _rows(text_rows=(5, 10))})
    code, out, err = run(["fit", book, "--y", "Data!B:B", "--x", "Data!A:A", "--model", "2",
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc.pop("notes") == ["2 numbers stored as text were read: sheet rows 7 and 12"]
    assert doc == _api(notes=False)  # every row used, the same numbers
    # data rows 6 and 11 are sheet rows 7 and 12 under the header
    assert "xlbridge: warning: 2 numbers stored as text were read: sheet rows 7 and 12" in err


def test_text_number_reads_alike_in_xlsx_csv_and_cells(tmp_path: Path, capsys) -> None:
    rows = _rows(text_rows=(3,))
    book = build_book(tmp_path / "b.xlsx", {"Data": rows})
    csv_path = tmp_path / "b.csv"
    csv_path.write_text("\n".join(f'{r[0]},"{r[1]}"' for r in rows) + "\n")
    docs = []
    for path in (book, csv_path):
        code, out, err = run(["fit", path, "--y", "B:B", "--x", "A:A", "--model", "2",
                              "--format", "json"], capsys)
        assert code == 0, err
        docs.append(json.loads(out))
    # the workbook names its text cell; in a CSV file every value is text, so none is
    assert [d.pop("notes") for d in docs] == [["1 number stored as text was read: "
                                               "sheet row 5"], []]
    assert docs[0] == docs[1] == _api(notes=False)
    res, _ = cells.fit_cells([r[1] for r in rows], [r[0] for r in rows], 2)
    assert {k: v for k, v in res.to_dict().items() if k != "notes"} == _api(notes=False)
    assert "1 number stored as text was read: data row 4" in res.notes


def _european(path: Path, sep: str = ";") -> Path:
    size, cost = invented_cost_data(N)
    lines = [f"size{sep}cost"] + [f"{float(s)!r}{sep}{float(c)!r}".replace(".", ",")
                                  for s, c in zip(size, cost)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("sep", [";", "\t"])
def test_european_csv_fits_every_row(tmp_path: Path, capsys, sep) -> None:
    path = _european(tmp_path / "eu.csv", sep)
    code, out, err = run(["fit", path, "--y", "B:B", "--x", "A:A", "--model", "2",
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc == _api() and doc["model"]["n_used"] == N
    assert "warning" not in err


def test_stated_dialect_and_the_loud_warning(tmp_path: Path, capsys) -> None:
    path = _european(tmp_path / "eu.csv")
    # read as commas, the decimal commas split every number: refused, never a silent fit
    code, _, err = run(["fit", path, "--y", "B:B", "--x", "A:A", "--model", "1",
                        "--csv-dialect", "comma"], capsys)
    assert code == 2 and err.startswith("xlbridge: ")
    code, out, err = run(["fit", path, "--y", "B:B", "--x", "A:A", "--model", "2",
                          "--csv-dialect", "semicolon", "--decimal-comma", "--format", "json"],
                         capsys)
    assert code == 0 and json.loads(out) == _api()


def test_many_rows_left_out_warns(tmp_path: Path, capsys) -> None:
    rows = _rows()
    for r in rows[1:10]:
        r[1] = "n/a"
    book = build_book(tmp_path / "b.xlsx", {"Data": rows})
    code, _, err = run(["fit", book, "--y", "Data!B:B", "--x", "Data!A:A", "--model", "1"],
                       capsys)
    assert code == 0
    assert "xlbridge: warning: 9 of 30 rows (30 %) were left out" in err


def test_dataframe_text_follows_the_cells_rule() -> None:
    # a DataFrame column holding a number stored as text and a word: the API reads the
    # number and leaves the word's row out, as the cells (and so the command line) do
    pd = pytest.importorskip("pandas")
    rows = _rows(text_rows=(5,))
    rows[9][1] = "n/a"
    df = pd.DataFrame(rows[1:], columns=rows[0])
    got = xlbridge.fit(df["cost"], df[["size"]], 2)
    res, _ = cells.fit_cells([r[1] for r in rows], [r[0] for r in rows], 2)
    size, cost = invented_cost_data(N)
    keep = np.arange(N) != 8
    want = xlbridge.fit(cost[keep], size[keep], 2)  # plain numbers, the row left out
    np.testing.assert_array_equal(got.estimates, want.estimates)
    np.testing.assert_array_equal(res.estimates, want.estimates)
    assert got.n_dropped == res.n_dropped == 1
    assert "y: 1 number stored as text was read: row 6" in got.notes
    assert "y: row 9 holds text that is not a number and was left out" in got.notes
    assert "1 number stored as text was read: data row 6" in res.notes


def test_groups_command_checks_alignment(tmp_path: Path, capsys) -> None:
    rows = [["site", *r] for r in _rows()]
    for i, r in enumerate(rows[1:]):
        r[0] = "north" if i % 2 else "south"
    book = build_book(tmp_path / "g.xlsx", {"Data": rows})
    argv = ["groups", book, "--group", "Data!A2:A31", "--y", "Data!C2:C31", "--x",
            "Data!B1:B30", "--model", "1"]
    code, _, err = run(argv, capsys)
    assert ("xlbridge: warning: --y Data!C2:C31 and --x Data!B1:B30 start on different sheet "
            "rows (2 vs 1)") in err
    code, _, err = run([*argv, "--strict"], capsys)
    assert code == 2 and "start on different sheet rows" in err


def test_recalc_pin_verify_warn_on_misaligned_xb_calls(tmp_path: Path, capsys) -> None:
    """The runner knows each XB_ argument's range: y and x one row apart are named on
    stderr (one `xlbridge: warning:` line per call); with --strict the cell fails."""
    book = build_book(tmp_path / "b.xlsx", {"Data": _rows()}, formulas={"Model": {
        "A1": "=XB_EQUATION(Data!B3:B31,Data!A2:A30,1)",
        "A3": "=XB_EQUATION(Data!B2:B31,Data!A2:A31,1)"}})
    copy = tmp_path / "c.xlsx"
    code, out, err = run(["recalc", book, "--out", str(copy)], capsys)
    warnings = [ln for ln in err.splitlines() if ln.startswith("xlbridge: warning:")]
    assert code == 0 and warnings == [
        "xlbridge: warning: Model!A1 XB_EQUATION: y Data!B3:B31 and x Data!A2:A30 start "
        "on different sheet rows (3 vs 2); rows are paired by position"]
    pins = tmp_path / "p.json"
    code, _, err = run(["pin", book, "--out", str(pins)], capsys)
    assert code == 0 and err.count("xlbridge: warning:") == 1
    code, _, err = run(["verify", book, "--pins", str(pins)], capsys)
    assert code == 0 and err.count("xlbridge: warning:") == 1
    code, out, _ = run(["recalc", book, "--out", str(copy), "--force", "--strict"], capsys)
    assert code == 1 and "Model!A1 XB_EQUATION: xlbridge: y Data!B3:B31" in out
    assert "(--strict)" in out and "Model!A3" not in out


def test_top_row_names_sheet_rows_in_cells() -> None:
    """With top_row (the sheet row of the selection's first row) the worksheet functions
    name sheet rows, as the command line does: a text cell at data row 4 below a header on
    sheet row 5 is sheet row 9. Reference: the row arithmetic of the sheet itself."""
    rows = _rows()
    rows[4][1] = "n/a"  # data row 4
    y = [[r[1]] for r in rows]
    x = [[r[0]] for r in rows]
    table = cells.rows_cells(y, x, 1, "top_row=5")
    assert table[0][0] == "sheet row" and table[1][0] == 6.0
    assert table[4][0] == 9.0 and table[4][-1] == "dropped: text"
    checks = {r[0]: r[-1] for r in cells.checks_cells(y, x, 1, "top_row=5")}
    assert f"are sheet rows 6..{5 + N}" in checks["independence (Durbin-Watson)"]
    plain = cells.rows_cells(y, x, 1)
    assert plain[0][0] != "sheet row"
    # a model the data cannot carry names the sheet row of the offending data row
    bad = [[r[0]] for r in rows]
    bad[7] = [-1.0]  # data row 7 is sheet row 12
    with pytest.raises(cells.CellError, match=r"data row 7 is sheet row 12"):
        cells.coefs_cells(bad, x, "power", "method=log; top_row=5")


def _grouped_csv(path: Path, european: bool) -> Path:
    """The invented cost data with costs in thousands (x 1,000) written with thousands
    separators, as a spreadsheet program exports them in either convention."""
    size, cost = invented_cost_data(N)
    lines = ["size;cost" if european else "size,cost"]
    for s, c in zip(size, cost * 1000):
        us = f"{c:,.2f}"
        if european:
            eu = us.replace(",", " ").replace(".", ",").replace(" ", ".")
            lines.append(f"{s:.6f}".replace(".", ",") + ";" + eu)
        else:
            lines.append(f'{s:.6f},"{us}"')
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("european", [False, True])
def test_csv_thousands_separators_are_read(tmp_path: Path, capsys, european: bool) -> None:
    """"12,345.67" (and "12.345,67" beside a decimal comma) is a number, as a spreadsheet
    program reads it; the fit equals the API's on the same numbers rounded as written.
    Reference: xlbridge.fit on the plain arrays."""
    size, cost = invented_cost_data(N)
    want = xlbridge.fit(np.round(cost * 1000, 2), np.round(size, 6), 1)
    path = _grouped_csv(tmp_path / "g.csv", european)
    code, out, err = run(["fit", str(path), "--y", "B:B", "--x", "A:A", "--model", "1",
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["stats"]["n_used"] == N and not doc["notes"]
    got = [c["estimate"] for c in doc["coefficients"]]
    np.testing.assert_allclose(got, want.estimates, rtol=1e-12)


@settings(max_examples=200, derandomize=True)
@given(st.floats(min_value=-1e12, max_value=1e12, allow_nan=False))
def test_csv_grouped_number_text_round_trips(value: float) -> None:
    """Property: a number written with thousands separators in either convention reads
    back as the number written with two decimals (Python's own formatting is the
    reference)."""
    from xlbridge.book.csvbook import csv_value

    us = f"{value:,.2f}"
    eu = us.replace(",", " ").replace(".", ",").replace(" ", ".")
    want = float(f"{value:.2f}")
    assert csv_value(us) == want
    assert csv_value(eu, decimal_comma=True) == want
