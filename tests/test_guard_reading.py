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
            "rows (3 vs 2); rows are paired by position") in err
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
    assert ("xlbridge: warning: --y Data!C2:C31 and --x Data!B1:B30 start on different rows "
            "(2 vs 1)") in err
    code, _, err = run([*argv, "--strict"], capsys)
    assert code == 2 and "start on different rows" in err
