"""Without python-calamine (the ``cli`` extra), workbooks are read through openpyxl's
read-only reader: the same values and the same fits.

Each check runs the same code in two fresh interpreters, one of which cannot import
python_calamine (``sys.modules["python_calamine"] = None`` makes the import fail), and
compares what they print: python-calamine is the reference for the fallback. The workbooks
are written with openpyxl (invented data, fixed seed) and the shipped templates.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import subprocess
import sys
from pathlib import Path

import openpyxl
import pytest
from openpyxl.utils.datetime import CALENDAR_MAC_1904

from tests.bookfactory import REPO, cost_book

BLOCK = "import sys; sys.modules['python_calamine'] = None\n"

DUMP = """
import json, sys
from xlbridge.book.reader import open_book
from xlbridge.book.refs import Area
from xlbridge.book.xlsx import fast_reader
book = open_book(sys.argv[1])
out = {"fast": fast_reader() is not None}
for name in book.sheet_names:
    rows, cols = book.used_extent(name)
    area = Area(name, 1, 1, max(rows, 1), max(cols, 1))
    cells = book.read_area(area)
    out[name] = [[None if v is None else [type(v).__name__, repr(v)] for v in row]
                 for row in cells]
    out[name + " unsaved"] = book.formulas_without_value(area)
print(json.dumps(out))
"""


def _run(code: str, *args: str, blocked: bool) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run([sys.executable, "-c", (BLOCK if blocked else "") + code, *args],
                          capture_output=True, text=True, timeout=120, env=env, cwd=REPO)


def _both(code: str, *args: str) -> tuple[str, str]:
    fast, slow = _run(code, *args, blocked=False), _run(code, *args, blocked=True)
    assert fast.returncode == 0, fast.stderr
    assert slow.returncode == 0, slow.stderr
    return fast.stdout, slow.stdout


def _mixed_book(path: Path, epoch_1904: bool = False) -> Path:
    """Every kind of cell value a sheet can hold, some far from A1 and after gaps."""
    wb = openpyxl.Workbook()
    if epoch_1904:
        wb.epoch = CALENDAR_MAC_1904
    ws = wb.active
    ws.title = "Mixed"
    # the first date after the 1900 system's missing leap day, or the 1904 system's first
    # March (a date before 1904 has a negative serial in that system, which spreadsheet
    # programs do not store and the two readers do not read alike)
    early = dt.datetime(1904 if epoch_1904 else 1900, 3, 1)
    rows = [
        ["label", "number", "whole", "flag", "when"],
        ["a", 1.25, 3, True, dt.datetime(2021, 3, 4, 5, 6, 7)],
        ["b", -0.1, 10**15 + 1, False, dt.date(1999, 12, 31)],
        ["  spaced  ", 1e-300, 0, None, dt.time(13, 45, 30)],
        ["", 6.02214076e23, -7, "TRUE", dt.timedelta(hours=30, minutes=15)],
        ["ünïcødé ✓", 0.1 + 0.2, 2**53 + 1, None, early],
    ]
    for row in rows:
        ws.append(row)
    ws["B8"] = "#N/A"  # an error value (openpyxl stores error text as an error cell)
    ws["C8"] = "#DIV/0!"
    ws["D9"] = "=B2*2"  # a formula without a saved value
    ws["H12"] = 42.5  # a lone cell after empty rows and columns
    other = wb.create_sheet("Second")
    other["C3"] = "only cell"
    wb.create_sheet("Empty")
    wb.save(path)
    return path


@pytest.mark.parametrize("epoch_1904", [False, True], ids=["1900", "1904"])
def test_every_kind_of_cell_reads_the_same(tmp_path: Path, epoch_1904: bool) -> None:
    """Reference: python-calamine's values (the fast reader) for the same file."""
    book = _mixed_book(tmp_path / "mixed.xlsx", epoch_1904)
    fast, slow = (json.loads(s) for s in _both(DUMP, str(book)))
    assert fast.pop("fast") is True and slow.pop("fast") is False
    assert fast == slow
    # the check can fail: the sheet holds numbers, dates, text, flags and error values
    kinds = {c[0] for row in fast["Mixed"] for c in row if c is not None}
    assert {"float", "str", "bool", "datetime"} <= kinds
    assert fast["Mixed unsaved"] == [[9, 4]]


@pytest.mark.parametrize("name", sorted(p.name for p in (REPO / "workbook_templates").glob(
    "*.xlsx")))
def test_templates_read_the_same(name: str) -> None:
    """Reference: python-calamine's values of the shipped templates (formulas, tables)."""
    fast, slow = _both(DUMP, str(REPO / "workbook_templates" / name))
    assert json.loads(fast).pop("fast") is True
    a, b = json.loads(fast), json.loads(slow)
    a.pop("fast"), b.pop("fast")
    assert a == b


FIT = """
import sys
from xlbridge.cli import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("model,options", [("2", "level=0.9"), ("power", "method=mupe")])
def test_fit_results_are_the_same(tmp_path: Path, model: str, options: str) -> None:
    """Reference: the fit of the same cells read by python-calamine (JSON, every digit)."""
    book = cost_book(tmp_path / "cost.xlsx", n=30, blanks=(4, 11))
    args = (str(book), "--y", "B:B", "--x", "A:A", "--model", model, "--options",
            options, "--format", "json")
    fast, slow = _both(FIT, "fit", *args)
    assert json.loads(fast)  # a real result, not an empty line
    assert fast == slow


def test_a_sheet_too_large_to_read_whole_reads_the_same(tmp_path: Path) -> None:
    """A far-away cell makes the block too large; both readers get only the columns asked
    for (the copy of the sheet without the cells right of them) and fit the same."""
    from xlbridge.book.safety import MAX_BLOCK_CELLS

    book = cost_book(tmp_path / "far.xlsx", n=25)
    wb = openpyxl.load_workbook(book)
    far_row = MAX_BLOCK_CELLS // 1000 + 10
    wb["Site data"].cell(far_row, 2000).value = "far away"
    wb.save(book)
    args = (str(book), "--y", "B2:B26", "--x", "A2:A26", "--model", "1", "--format", "json")
    fast, slow = _both(FIT, "fit", *args)
    assert json.loads(fast)
    assert fast == slow
