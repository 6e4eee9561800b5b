"""pin / verify: the CI gate for workbook models.

Each check changes the workbook in a known way (a data cell, a planted outlier, an added
formula) and expects verify to pass or fail accordingly; the verdicts before and after are
computed directly with the worksheet function, independently of the pin machinery.
"""

from __future__ import annotations

import json
from pathlib import Path

import openpyxl
import pytest
from openpyxl.worksheet.formula import ArrayFormula

from xlbridge import worksheet

from .bookfactory import cost_book, invented_cost_data, run, sha256

D = "'Site data'"
FORMULAS = {"Model": {
    "A1": ArrayFormula("A1:I4", f"=XB_COEFS({D}!B:B,{D}!A:A,2)"),
    "A10": f"=XB_STATS({D}!B:B,{D}!A:A,2)",
    "K1": f"=XB_EQUATION({D}!B:B,{D}!A:A,2)",
}}


def _edit(src: Path, dst: Path, cell: str, change) -> Path:
    wb = openpyxl.load_workbook(src)
    ws = wb["Site data"]
    ws[cell] = change(ws[cell].value)
    wb.save(dst)
    return dst


@pytest.fixture()
def pinned(tmp_path: Path, capsys) -> tuple[Path, Path]:
    book = cost_book(tmp_path / "model.xlsx", formulas=FORMULAS)
    pins = tmp_path / "model.pins.json"
    code, out, err = run(["pin", book, "--out", pins], capsys)
    assert code == 0, err
    assert "3 XB_ results" in out
    return book, pins


def test_unchanged_workbook_verifies(pinned, capsys) -> None:
    book, pins = pinned
    before = sha256(book)
    code, out, err = run(["verify", book, "--pins", pins], capsys)
    assert code == 0, out + err
    assert "all 3 pinned XB_ results hold" in out
    assert sha256(book) == before


def test_pin_file_is_deterministic_and_exact(pinned, tmp_path: Path, capsys) -> None:
    book, pins = pinned
    again = tmp_path / "again.json"
    assert run(["pin", book, "--out", again], capsys)[0] == 0
    assert again.read_bytes() == pins.read_bytes()
    doc = json.loads(pins.read_text())
    assert doc["format"] == "xlbridge-pins" and doc["workbook_sha256"] == sha256(book)
    size, cost = invented_cost_data(40)
    y, x = ["cost", *map(float, cost)], ["size", *map(float, size)]
    assert doc["cells"]["Model!A1"]["values"] == worksheet.XB_COEFS(y, x, 2.0)
    code, _, err = run(["pin", book, "--out", pins], capsys)
    assert code == 2 and "add --force" in err


def test_changed_data_cell_is_caught(pinned, tmp_path: Path, capsys) -> None:
    book, pins = pinned
    edited = _edit(book, tmp_path / "edited.xlsx", "B7", lambda v: v + 25.0)
    code, out, _ = run(["verify", edited, "--pins", pins], capsys)
    assert code == 1
    assert "3 of 3 XB_ results differ" in out
    assert "Model!A1 XB_COEFS row 2 (intercept), column 2 (estimate): pinned" in out
    assert "Model!K1 XB_EQUATION: changed: \"cost = " in out
    assert "relative difference" in out and "workbook file differs" in out


def test_tolerance(pinned, tmp_path: Path, capsys) -> None:
    book, pins = pinned
    edited = _edit(book, tmp_path / "tiny.xlsx", "B7", lambda v: v * (1 + 1e-13))
    assert run(["verify", edited, "--pins", pins], capsys)[0] == 0  # within rtol 1e-9
    code, out, _ = run(["verify", edited, "--pins", pins, "--rtol", "0"], capsys)
    assert code == 1 and "pinned" in out
    assert run(["verify", edited, "--pins", pins, "--rtol", "-1"], capsys)[0] == 2


@pytest.mark.skipif(not hasattr(worksheet, "XB_CHECKS"), reason="XB_CHECKS not available")
def test_verdict_change_is_caught(tmp_path: Path, capsys) -> None:
    book = cost_book(tmp_path / "checks.xlsx", formulas={
        "Model": {"A1": f"=XB_CHECKS({D}!B:B,{D}!A:A,2)"}})
    pins = tmp_path / "checks.json"
    assert run(["pin", book, "--out", pins], capsys)[0] == 0
    edited = _edit(book, tmp_path / "outlier.xlsx", "B12", lambda v: v + 400.0)
    size, cost = invented_cost_data(40)
    y = ["cost", *map(float, cost)]
    x = ["size", *map(float, size)]
    before = {r[0]: r[1] for r in worksheet.XB_CHECKS(y, x, 2.0)}
    y[11] += 400.0
    after = {r[0]: r[1] for r in worksheet.XB_CHECKS(y, x, 2.0)}
    assert before["outliers"] != after["outliers"]  # the planted outlier changes it
    code, out, _ = run(["verify", edited, "--pins", pins], capsys)
    assert code == 1
    assert (f"row 6 (outliers), column 2 (verdict): verdict changed: "
            f"\"{before['outliers']}\" -> \"{after['outliers']}\"") in out


def test_added_and_removed_cells(pinned, tmp_path: Path, capsys) -> None:
    book, pins = pinned
    wb = openpyxl.load_workbook(book)
    wb["Model"]["K1"] = None
    wb["Model"]["K5"] = f"=XB_EQUATION({D}!B:B,{D}!A:A,1)"
    wb.save(tmp_path / "moved.xlsx")
    code, out, _ = run(["verify", tmp_path / "moved.xlsx", "--pins", pins, "--format", "json"],
                       capsys)
    assert code == 1
    doc = json.loads(out)
    status = {r["cell"]: r["status"] for r in doc["cells"]}
    assert status == {"Model!A1": "same", "Model!K1": "gone", "Model!A10": "same",
                      "Model!K5": "new"}
    assert doc["ok"] is False and doc["cells_drifted"] == 2


def test_bad_pin_files(pinned, tmp_path: Path, capsys) -> None:
    book, _ = pinned
    (tmp_path / "bad.json").write_text("{not json")
    (tmp_path / "other.json").write_text(json.dumps({"format": "something", "cells": {}}))
    for pins, msg in [(tmp_path / "bad.json", "not valid JSON"),
                      (tmp_path / "other.json", "not an xlbridge pin file"),
                      (tmp_path / "none.json", "not found")]:
        code, _, err = run(["verify", book, "--pins", pins], capsys)
        assert code == 2 and msg in err and err.startswith("xlbridge:")


def test_verify_process_imports_no_desktop_or_plotting_modules(pinned) -> None:
    """verify starts a process per workbook on CI: xlwings (the desktop bridge), pandas and
    matplotlib are not needed and must not be imported."""
    import subprocess
    import sys

    book, pins = pinned
    code = (
        "import sys, io, contextlib\n"
        "from xlbridge.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        f"    rc = main(['verify', {str(book)!r}, '--pins', {str(pins)!r}])\n"
        "print(rc, sorted(m for m in ('xlwings', 'pandas', 'matplotlib', 'statsmodels')"
        " if m in sys.modules))\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert proc.stdout.strip() == "0 []", proc.stderr


def test_pin_and_verify_write_no_workbook(pinned, capsys) -> None:
    """pin writes its JSON file only, verify nothing; the workbook is only read."""
    book, pins = pinned
    folder = book.parent
    before = {p.name: sha256(p) for p in folder.iterdir()}
    code, _, err = run(["verify", book, "--pins", pins], capsys)
    assert code == 0, err
    code, _, err = run(["pin", book, "--out", folder / "again.json"], capsys)
    assert code == 0, err
    after = {p.name: sha256(p) for p in folder.iterdir()}
    assert set(after) - set(before) == {"again.json"}
    assert {k: after[k] for k in before} == before


def test_card_date_is_not_compared_but_its_numbers_are(tmp_path: Path, capsys) -> None:
    """A CER card records the day it was made: a pin of yesterday still verifies; a changed
    number in the same card is still caught."""
    book = cost_book(tmp_path / "cer.xlsx", formulas={"Model": {
        "A1": f"=XB_CERCARD({D}!B:B,{D}!A:A,\"power\",\"method=mupe\")"}})
    pins = tmp_path / "cer.pins.json"
    assert run(["pin", book, "--out", pins], capsys)[0] == 0
    doc = json.loads(pins.read_text(encoding="utf-8"))
    (cell,) = doc["cells"].values()
    rows = {r[0]: r for r in cell["values"]}
    rows["date"][1] = "2001-01-01"  # pinned long ago
    pins.write_text(json.dumps(doc), encoding="utf-8")
    code, out, err = run(["verify", book, "--pins", pins], capsys)
    assert code == 0, out + err
    rows["typical miss (SEE)"][1] = rows["typical miss (SEE)"][1] * 1.01
    pins.write_text(json.dumps(doc), encoding="utf-8")
    code, out, err = run(["verify", book, "--pins", pins], capsys)
    assert code == 1 and "SEE" in out + err
