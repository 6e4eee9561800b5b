"""A real spreadsheet program opens what we ship and what the runner writes.

LibreOffice Calc, run headless, converts every sheet of each bundled template and of the
runner's copies (`xlbridge recalc`, `recalc --values`, `xlbridge fit --format xlsx`) to CSV.
The checks:

- in the `--values` copy every cell, the XB_ results included, shows the value xlbridge
  wrote (openpyxl reads it back from the copy; numbers to 12 significant digits);
- the live copy keeps its XB_ formulas, and its other cells show as before;
- in every book, no cell outside an XB_ formula shows an error unless its saved value was
  that error already;
- the templates as shipped hold live XB_ formulas without saved values: LibreOffice does not
  know the functions, so what it shows there is recorded (``record_property``), not asserted.

Skipped, with the reason, where ``soffice`` is not installed (`.ci/run` installs it).
"""

from __future__ import annotations

import csv
import math
import os
import re
import shutil
import subprocess
from collections import Counter
from collections.abc import Set
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import openpyxl
import pytest
from openpyxl.utils.cell import get_column_letter, range_boundaries
from openpyxl.worksheet.formula import ArrayFormula

from tests.bookfactory import run_process

REPO = Path(__file__).resolve().parents[1]
TEMPLATES = sorted((REPO / "workbook_templates").glob("*.xlsx"))
SOFFICE = shutil.which("soffice")
SOFFICE_TIMEOUT = 180  # seconds for one start, conversion of one book and exit

pytestmark = pytest.mark.skipif(
    SOFFICE is None,
    reason="LibreOffice Calc (soffice) is not installed; .ci/run installs the Debian package "
           "libreoffice-calc-nogui where it can")

# LibreOffice's CSV export filter, token by token: field separator ',' (44), text quote '"'
# (34), UTF-8, start at line 1, no column formats, default language, quoted fields not forced
# to text, detect special numbers, "save cell contents as shown" OFF (full precision instead of
# the cell's number format), values not formulas, spaces kept, and sheet -1: every sheet to
# its own file BOOK-SHEET.csv (LibreOffice 7.2 and later).
CSV_FILTER = "csv:Text - txt - csv (StarCalc):44,34,UTF8,1,,0,false,true,false,false,false,-1"

# How LibreOffice displays an error value: the usual spreadsheet codes, or its own Err:NNN.
LO_ERROR = re.compile(r"^(#NAME\?|#VALUE!|#REF!|#DIV/0!|#NUM!|#N/A|#NULL!|Err:\d+)$")
FIXED_DECIMALS = 20  # the most decimals LibreOffice's CSV export writes in fixed notation
XB_CALL = re.compile(r"\bXB_[A-Z]+\s*\(", re.IGNORECASE)

# The arguments of one `xlbridge fit --format xlsx` run per template (its data and model as
# the template's own XB_COEFS formula has them).
FIT_ARGS = {
    "equipment_cost.xlsx": ["--y", "Data!C1:C49", "--x", "Data!B1:B49", "--model", "2"],
    "margin_surface.xlsx": ["--y", "Data!D1:D61", "--x", "Data!B1:C61", "--model", "surface"],
    "steel_cer.xlsx": ["--y", "Data!E1:E25", "--x", "Data!B1:B25", "--model", "power",
                       "--options", "method=mupe"],
}

Cell = tuple[str, int, int]  # sheet, row, column (1-based)


def convert_to_csv(book: Path, outdir: Path, profile: Path) -> dict[str, list[list[str]]]:
    """Every sheet of `book` as LibreOffice shows it: sheet name -> rows of cell texts.

    One soffice start per book, with a profile folder of its own (parallel runs and a desktop
    instance of the same user do not share it)."""
    outdir.mkdir()
    cmd = [SOFFICE, f"-env:UserInstallation={profile.as_uri()}", "--headless", "--norestore",
           "--convert-to", CSV_FILTER, "--outdir", str(outdir), str(book)]
    # The locale decides the decimal separator and the words for TRUE/FALSE in the export.
    env = {**os.environ, "LC_ALL": "C.UTF-8", "LANG": "C.UTF-8"}
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=SOFFICE_TIMEOUT, env=env)
    grids = {}
    for name in sheet_names(book):
        path = outdir / f"{book.stem}-{name}.csv"
        assert path.exists(), (f"LibreOffice wrote no CSV for sheet {name!r} of {book.name} "
                               f"(exit {proc.returncode}): {proc.stdout} {proc.stderr}")
        with path.open(newline="", encoding="utf-8-sig") as fh:
            grids[name] = list(csv.reader(fh))
    return grids


def shown(grids: dict[str, list[list[str]]], cell: Cell) -> str:
    sheet, row, col = cell
    rows = grids[sheet]
    if row > len(rows) or col > len(rows[row - 1]):
        return ""
    return rows[row - 1][col - 1]


def xb_formulas(wb: openpyxl.Workbook) -> dict[Cell, set[Cell]]:
    """Each XB_ formula's cell -> the cells it fills: an array formula its range, a plain
    formula its own cell."""
    found: dict[Cell, set[Cell]] = {}
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for c in row:
                v, anchor = c.value, (ws.title, c.row, c.column)
                if isinstance(v, ArrayFormula) and XB_CALL.search(v.text or ""):
                    c1, r1, c2, r2 = range_boundaries(v.ref)
                    found[anchor] = {(ws.title, r, k) for r in range(r1, r2 + 1)
                                     for k in range(c1, c2 + 1)}
                elif isinstance(v, str) and v.startswith("=") and XB_CALL.search(v):
                    found[anchor] = {anchor}
    return found


def xb_formula_cells(wb: openpyxl.Workbook) -> set[Cell]:
    return set().union(*xb_formulas(wb).values())


def sheet_names(book: Path) -> list[str]:
    wb = openpyxl.load_workbook(book, read_only=True)
    try:
        return wb.sheetnames
    finally:
        wb.close()


def values(wb: openpyxl.Workbook) -> dict[Cell, Any]:
    return {(ws.title, c.row, c.column): c.value
            for ws in wb.worksheets for row in ws.iter_rows() for c in row
            if c.value is not None}


def printed_half_unit(text: str) -> float:
    """Half a unit in the last decimal place of a number LibreOffice printed without exponent.

    Its CSV export writes full precision (15 significant digits) but at most 20 decimals in
    fixed notation, so a p-value of 3.770884374358058e-10 comes out as 0.00000000037708843744:
    11 significant digits, and 5.55783103611653e-13 as 0.0000000000005557831 (the cut digit
    a 0, dropped). Only a number that may have been cut at that limit (at least 12 leading
    zeros after the point, so fewer than 9 of its digits fit) is compared to the digits
    printed; any other must match to 12 significant digits."""
    decimals = text.split(".", 1)[1] if "." in text and "e" not in text.lower() else ""
    cut = len(decimals) == FIXED_DECIMALS or decimals.startswith("0" * 12)
    return 0.5 * 10.0 ** -FIXED_DECIMALS if cut else 0.0


def same_display(text: str, value: Any) -> bool:
    """Whether LibreOffice's text for a cell shows the stored value (numbers to 12 significant
    digits, or to every digit printed where the export printed fewer)."""
    if value is None:
        return text == ""
    if isinstance(value, bool):
        return text == ("TRUE" if value else "FALSE")
    if isinstance(value, int | float):
        try:
            number = float(text)
        except ValueError:
            return False
        return math.isclose(number, value, rel_tol=1e-12,
                            abs_tol=printed_half_unit(text) * (1 + 1e-9))
    return text == str(value)


@dataclass
class Findings:
    compared: int = 0                     # stored values compared with LibreOffice's display
    xb_compared_numbers: int = 0          # of which numbers inside an XB_ result range
    short_printed: int = 0                # numbers printed with fewer than 12 digits
    xb_shown: Counter = field(default_factory=Counter)  # display of live XB_ formula cells
    problems: list[str] = field(default_factory=list)


def check_book(book: Path, original: Path, grids: dict[str, list[list[str]]],
               xb_results: Set[Cell] = frozenset()) -> Findings:
    """Compare LibreOffice's display of `book` with what the file stores.

    `original` is the template the book came from: its saved values say which errors were
    there before. `xb_results` are cells where XB_ results were written as values."""
    wb = openpyxl.load_workbook(book)
    stored, live_xb = values(wb), xb_formula_cells(wb)
    wb.close()
    wb = openpyxl.load_workbook(original, data_only=True)
    before = values(wb)
    wb.close()
    found = Findings()
    cells = set(stored) | {(s, r + 1, k + 1) for s, rows in grids.items()
                           for r, row in enumerate(rows) for k, t in enumerate(row) if t}
    for cell in sorted(cells):
        text, value = shown(grids, cell), stored.get(cell)
        where = f"{book.name} {cell[0]}!{get_column_letter(cell[2])}{cell[1]}"
        if cell in live_xb:
            found.xb_shown[text if LO_ERROR.match(text) else "a value"] += 1
            continue
        if LO_ERROR.match(text) and text not in (value, before.get(cell)):
            found.problems.append(f"{where}: shows {text} (stored {value!r})")
        elif isinstance(value, str) and value.startswith("="):
            continue  # another program's formula: LibreOffice recalculates it
        elif not same_display(text, value):
            found.problems.append(f"{where}: shows {text!r}, stored {value!r}")
        else:
            found.compared += 1
            if isinstance(value, int | float) and not isinstance(value, bool) \
                    and not math.isclose(float(text), value, rel_tol=1e-12):
                found.short_printed += 1  # matched only to the fewer digits printed
            if cell in xb_results and isinstance(value, int | float):
                found.xb_compared_numbers += 1
    return found


def report(record_property, label: str, found: Findings) -> None:
    record_property(f"{label}_compared", found.compared)
    record_property(f"{label}_numbers_printed_with_under_12_digits", found.short_printed)
    record_property(f"{label}_xb_shown", dict(found.xb_shown))


def problems_text(found: Findings) -> str:
    return f"{len(found.problems)} cells differ:\n" + "\n".join(found.problems[:30])


@pytest.mark.parametrize("template", TEMPLATES, ids=lambda p: p.name)
def test_template_as_shipped_opens_without_new_errors(template: Path, tmp_path: Path,
                                                      record_property) -> None:
    grids = convert_to_csv(template, tmp_path / "csv", tmp_path / "profile")
    found = check_book(template, template, grids)
    report(record_property, "shipped", found)
    assert not found.problems, problems_text(found)
    assert found.xb_shown, "the template holds no XB_ formula LibreOffice could show"
    assert found.compared > 0


@pytest.mark.parametrize("template", TEMPLATES, ids=lambda p: p.name)
def test_recalc_values_copy_shows_our_values(template: Path, tmp_path: Path,
                                             record_property) -> None:
    copy = tmp_path / f"{template.stem}-calculated.xlsx"
    proc = run_process(["recalc", template, "--out", copy, "--values"])
    assert proc.returncode == 0, proc.stderr + proc.stdout
    wb = openpyxl.load_workbook(template)
    formulas = xb_formulas(wb)
    wb.close()
    wb = openpyxl.load_workbook(copy)
    assert not xb_formulas(wb), "recalc --values left an XB_ formula in the copy"
    written = values(wb)
    wb.close()
    missing = [anchor for anchor in formulas if anchor not in written]
    assert not missing, f"no result written at the formula cells {missing}"
    xb_results = set().union(*formulas.values())
    grids = convert_to_csv(copy, tmp_path / "csv", tmp_path / "profile")
    found = check_book(copy, template, grids, xb_results)
    report(record_property, "recalc_values", found)
    assert not found.problems, problems_text(found)
    assert found.xb_compared_numbers >= 10, "too few XB_ result numbers were compared"


@pytest.mark.parametrize("template", TEMPLATES, ids=lambda p: p.name)
def test_recalc_live_copy_opens(template: Path, tmp_path: Path, record_property) -> None:
    """The live copy keeps its XB_ formulas (LibreOffice recalculates array formulas and
    shows what it can without the add-in: recorded); every other cell shows as before."""
    copy = tmp_path / f"{template.stem}-live.xlsx"
    proc = run_process(["recalc", template, "--out", copy])
    assert proc.returncode == 0, proc.stderr + proc.stdout
    wb = openpyxl.load_workbook(template)
    anchors = set(xb_formulas(wb))
    wb.close()
    wb = openpyxl.load_workbook(copy)
    assert set(xb_formulas(wb)) == anchors, "the live copy lost or gained an XB_ formula"
    wb.close()
    grids = convert_to_csv(copy, tmp_path / "csv", tmp_path / "profile")
    found = check_book(copy, template, grids)
    report(record_property, "recalc_live", found)
    assert not found.problems, problems_text(found)
    assert found.xb_shown


@pytest.mark.parametrize("template", TEMPLATES, ids=lambda p: p.name)
def test_fit_xlsx_copy_shows_our_values(template: Path, tmp_path: Path,
                                        record_property) -> None:
    if template.name not in FIT_ARGS:
        pytest.fail(f"add the fit arguments of {template.name} to FIT_ARGS")
    copy = tmp_path / f"{template.stem}-fit.xlsx"
    proc = run_process(["fit", template, *FIT_ARGS[template.name], "--format", "xlsx",
                        "--out", copy])
    assert proc.returncode == 0, proc.stderr + proc.stdout
    new_sheets = [name for name in sheet_names(copy) if name not in sheet_names(template)]
    assert len(new_sheets) == 1, new_sheets
    grids = convert_to_csv(copy, tmp_path / "csv", tmp_path / "profile")
    found = check_book(copy, template, grids)
    report(record_property, "fit", found)
    assert not found.problems, problems_text(found)
    result_numbers = sum(1 for row in grids[new_sheets[0]] for t in row
                         if re.fullmatch(r"-?[\d.]+(E[-+]?\d+)?", t))
    assert result_numbers >= 10, "the result sheet shows too few numbers"
