"""Output that keeps its context: notes in JSON and CSV, counts as whole numbers in CSV,
the report dated and carrying the versions its numbers depend on, and a table column's
header naming the results.

Data invented (fixed seeds, tests/bookfactory.py). Reference numbers: xlbridge.fit on the
same arrays (whose coefficients are checked against the NIST sets elsewhere) and numpy's
polyfit for the table-reference fit, computed here.
"""

from __future__ import annotations

import csv
import datetime
import io
import json
import re
from pathlib import Path

import numpy as np
import pytest
import scipy

import xlbridge

from .bookfactory import build_book, cost_book, invented_cost_data, run

Y, X = "'Site data'!B:B", "'Site data'!A:A"


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    return cost_book(tmp_path / "costs.xlsx", blanks=(3,))


@pytest.mark.parametrize("command", ["fit", "checks", "rows", "optimum", "degrees"])
def test_json_carries_the_notes(book, capsys, command):
    extra = ["--max-degree", "3"] if command == "degrees" else ["--model", "2"]
    code, out, err = run([command, book, "--y", Y, "--x", X, *extra, "--format", "json"],
                         capsys)
    assert code == 0, err
    notes = json.loads(out)["notes"]
    if command != "degrees":  # the scan fits its own columns; the fit's notes elsewhere
        assert "1 row dropped (blank 1): sheet row 5" in notes


def test_csv_carries_the_notes_and_whole_numbers(book, capsys):
    code, out, _ = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "csv"],
                       capsys)
    rows = list(csv.reader(io.StringIO(out)))
    assert ["notes", "", "1 row dropped (blank 1): sheet row 5"] in rows
    used = next(r for r in rows if len(r) > 2 and r[1] == "rows used")
    assert used[2] == "39"  # 40 rows, one blank; not 39.0
    code, out, _ = run(["degrees", book, "--y", Y, "--x", X, "--max-degree", "3", "--format",
                        "csv"], capsys)
    rows = list(csv.reader(io.StringIO(out)))
    assert [r[0] for r in rows[1:4]] == ["1", "2", "3"]
    assert any(r[0].startswith("note: recommended") for r in rows)
    # other numbers keep every digit
    size, cost = invented_cost_data(40)
    keep = np.arange(40) != 3
    scan = xlbridge.scan_degrees(cost[keep], size[keep], 3)
    assert float(rows[1][2]) == scan.rows[0].r2


def test_grouped_csv_counts_are_integers(tmp_path, capsys):
    rng = np.random.default_rng(12)
    rows = [["family", "size", "price"]]
    for fam in ("a", "b"):
        for s in rng.uniform(1, 10, 12):
            rows.append([fam, float(s), float(3 + 2 * s + 0.1 * s * s + rng.normal(0, 0.2))])
    book = build_book(tmp_path / "g.xlsx", {"Data": rows})
    code, out, err = run(["groups", book, "--group", "Data!A:A", "--y", "Data!C:C", "--x",
                          "Data!B:B", "--model", "2", "--format", "csv"], capsys)
    assert code == 0, err
    table = list(csv.reader(io.StringIO(out)))
    col = table[0].index("rows used")
    assert [r[col] for r in table[1:3]] == ["12", "12"]


def test_report_is_dated_with_versions_beside_the_fingerprint(book, tmp_path, capsys):
    out = tmp_path / "r.html"
    today = datetime.datetime.now(datetime.timezone.utc).date()
    code, _, err = run(["report", book, "--y", Y, "--x", X, "--model", "2", "--out", out],
                       capsys)
    assert code == 0, err
    text = out.read_text(encoding="utf-8")
    data = text[text.index("id='data'"):text.index("id='equation'")]
    assert "SHA-256 of the rows used" in data
    made = re.search(r"made on</td><td[^>]*>(\d{4}-\d\d-\d\d) \d\d:\d\d UTC", data)
    assert made, data
    assert abs((datetime.date.fromisoformat(made.group(1)) - today).days) <= 1
    assert (f"xlbridge {xlbridge.__version__}, numpy {np.__version__}, "
            f"scipy {scipy.__version__}") in data


def test_table_column_reference_names_the_results(tmp_path, capsys):
    size, cost = invented_cost_data(30)
    rows = [["Size", "Price"]] + [[float(a), float(b)] for a, b in zip(size, cost)]
    book = build_book(tmp_path / "t.xlsx", {"S": rows}, tables=[("S", "Sales", "A1:B31")])
    code, out, err = run(["fit", book, "--y", "Sales[Price]", "--x", "Sales[Size]",
                          "--model", "2", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["model"]["terms"] == ["intercept", "Size", "Size^2"]
    assert doc["model"]["n_used"] == 30
    ref = np.polyfit(size, cost, 2)[::-1]  # numpy's least squares, lowest power first
    got = [c["estimate"] for c in doc["coefficients"]]
    assert got == pytest.approx(ref, rel=1e-9)
    code, out, _ = run(["rows", book, "--y", "Sales[Price]", "--x", "Sales[Size]",
                        "--model", "2", "--format", "csv"], capsys)
    first = list(csv.reader(io.StringIO(out)))[1]
    assert first[0] == "2"  # the first data row of the table is sheet row 2
    # names=no keeps the data alone (the header is not read as a row)
    code, out, _ = run(["fit", book, "--y", "Sales[Price]", "--x", "Sales[Size]", "--model",
                        "2", "--options", "names=no", "--format", "json"], capsys)
    doc = json.loads(out)
    assert doc["model"]["terms"] == ["intercept", "x", "x^2"] and doc["model"]["n_dropped"] == 0
