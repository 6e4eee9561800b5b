"""Row addresses a person can find: rows reported by the command line (row diagnostics,
checks, rows left out) name the SHEET row, off by none, and the --label cell beside it.

The data are invented (fixed seed, tests/bookfactory.py): a header in sheet row 1, so
data row 37 sits on sheet row 38. The outlier is planted there; which row is the outlier
is checked independently with numpy (externally studentized residuals computed here from
the hat matrix, the textbook formula).
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pytest

from .bookfactory import build_book, invented_cost_data, run

OUTLIER, BLANK = 37, 5  # data rows (1-based)


def _data():
    size, cost = invented_cost_data(50)
    cost = cost.copy()
    cost[OUTLIER - 1] += 120.0
    return size, cost


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    size, cost = _data()
    rows = [["job", "size", "cost"]] + [[f"J{i + 1:03d}", float(s), float(c)]
                                        for i, (s, c) in enumerate(zip(size, cost))]
    rows[BLANK][2] = None
    return build_book(tmp_path / "jobs.xlsx", {"Data": rows})


def _studentized_argmax() -> int:
    """Data row (1-based) of the largest |externally studentized residual| of a quadratic,
    from the hat matrix (textbook formula), the blank row left out."""
    size, cost = _data()
    keep = np.arange(len(size)) != BLANK - 1
    X = np.column_stack([np.ones(keep.sum()), size[keep], size[keep] ** 2])
    y = cost[keep]
    H = X @ np.linalg.pinv(X)
    e = y - H @ y
    n, p = X.shape
    h = np.diag(H)
    s2_i = (e @ e - e**2 / (1 - h)) / (n - p - 1)
    t = e / np.sqrt(s2_i * (1 - h))
    return int(np.flatnonzero(keep)[np.argmax(np.abs(t))]) + 1


@pytest.mark.parametrize(("y", "x"), [("Data!C:C", "Data!B:B"), ("Data!C1:C51", "Data!B1:B51"),
                                      ("Data!C2:C51", "Data!B2:B51")])
def test_rows_command_names_the_sheet_row_of_the_outlier(book, capsys, y, x):
    assert _studentized_argmax() == OUTLIER  # the reference agrees on the data row
    code, out, err = run(["rows", book, "--y", y, "--x", x, "--model", "2", "--format", "csv"],
                         capsys)
    assert code == 0, err
    table = list(csv.reader(io.StringIO(out)))
    assert table[0][0] == "sheet row"
    flagged = [r for r in table[1:] if "outlier" in r[-1]]
    assert [int(float(r[0])) for r in flagged] == [OUTLIER + 1]  # sheet row 38, not 37
    dropped = [r for r in table[1:] if r[-1].startswith("dropped")]
    assert [int(float(r[0])) for r in dropped] == [BLANK + 1]
    assert dropped[0][-1] == "dropped: blank"


def test_label_column_and_json_sheet_rows(book, capsys):
    code, out, _ = run(["rows", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "2",
                        "--label", "Data!A:A", "--format", "json"], capsys)
    assert code == 0
    rows = json.loads(out)["rows"]
    i = rows["flag"].index(next(f for f in rows["flag"] if "outlier" in f))
    assert rows["sheet_row"][i] == OUTLIER + 1 and rows["label"][i] == f"J{OUTLIER:03d}"
    code, out, _ = run(["rows", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "2",
                        "--label", "Data!A:A"], capsys)
    line = next(ln for ln in out.splitlines() if "outlier" in ln)
    assert line.split()[:2] == [str(OUTLIER + 1), f"J{OUTLIER:03d}"]


def test_checks_and_notes_name_sheet_rows(book, capsys):
    code, out, _ = run(["checks", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "2",
                        "--label", "Data!A:A"], capsys)
    assert code == 0
    outliers = next(ln for ln in out.splitlines() if ln.startswith("outliers"))
    assert f"row {OUTLIER} is sheet row {OUTLIER + 1} (J{OUTLIER:03d})" in outliers
    code, out, _ = run(["checks", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "2",
                        "--format", "json"], capsys)
    found = {c["check"]: c for c in json.loads(out)["checks"]}
    assert found["outliers"]["row"] == OUTLIER
    assert found["outliers"]["sheet_row"] == OUTLIER + 1
    code, out, _ = run(["fit", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "2"],
                       capsys)
    assert f"note: 1 row dropped (blank 1): sheet row {BLANK + 1}" in out


def test_influence_figure_uses_the_same_rule():
    from xlbridge.cells.prepare import sheet_row, sheet_rows_text
    from xlbridge.plots import row_label

    assert row_label(OUTLIER, 2) == f"row {OUTLIER} (sheet row {OUTLIER + 1})"
    assert sheet_row(OUTLIER, 2) == OUTLIER + 1
    assert sheet_rows_text([1, 4], 2) == "sheet rows 2 and 5"
    assert sheet_rows_text(range(1, 16), 1, limit=3) == "sheet rows 1, 2, 3 and 12 more"


def test_worksheet_rows_table_keeps_its_shape():
    from xlbridge.cells.models import ROW_CAPTIONS, rows_cells

    size, cost = _data()
    table = rows_cells(cost.reshape(-1, 1).tolist(), size.reshape(-1, 1).tolist(), 2)
    assert table[0] == list(ROW_CAPTIONS) and len(table) == len(size) + 1
