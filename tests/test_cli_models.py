"""CLI commands degrees, checks, rows, optimum, slope, plot, report and demo: the same
numbers as the Python API (itself checked against statsmodels / scipy in
test_diagnostics.py), valid files, and the input left byte for byte as it was."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

import xlbridge

from .bookfactory import cost_book, invented_cost_data, run, sha256

Y, X = "'Site data'!B:B", "'Site data'!A:A"


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    return cost_book(tmp_path / "costs.xlsx", blanks=(3,))


def _api(model=2, **kw):
    size, cost = invented_cost_data(40)
    cost = cost.copy()
    cost[3] = np.nan
    return size, cost, xlbridge.fit(cost, size, model, names=("size",), **kw)


def test_degrees_json_equals_api(book, capsys):
    before = sha256(book)
    code, out, err = run(["degrees", book, "--y", Y, "--x", X, "--max-degree", "4",
                          "--format", "json", "--options", "folds=5"], capsys)
    assert code == 0, err
    size, cost, _ = _api()
    keep = ~np.isnan(cost)
    scan = xlbridge.scan_degrees(cost[keep], size[keep], 4, folds=5)
    assert json.loads(out) == json.loads(json.dumps(scan.to_dict()))
    assert sha256(book) == before


@pytest.mark.parametrize("command", ["checks", "rows", "optimum"])
def test_model_tables_json_equal_api(book, capsys, command):
    code, out, err = run([command, book, "--y", Y, "--x", X, "--model", "2", "--format",
                          "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    _, _, res = _api()
    if command == "checks":
        own = [{k: v for k, v in c.items() if k not in ("sheet_row", "sheet_span")}
               for c in doc["checks"]]
        assert own == json.loads(json.dumps([c.to_dict() for c in xlbridge.checks(res)]))
        # the command line adds where the named row sits (header in sheet row 1)
        assert all(c["sheet_row"] == (None if c["row"] is None else c["row"] + 1)
                   for c in doc["checks"])
    elif command == "rows":
        rows = xlbridge.row_diagnostics(res).to_dict()
        assert doc["rows"]["leverage"][:3] == rows["leverage"][:3]
        assert doc["rows"]["flag"][3] == "dropped"
    else:
        notes = doc.pop("notes")  # the table's notes, then the fit's
        assert doc == json.loads(json.dumps(xlbridge.optimum(res).to_dict()))
        assert notes[0] == xlbridge.optimum(res).note
        assert "1 row dropped (blank 1): sheet row 5" in notes


def test_slope_and_weights(book, tmp_path, capsys):
    code, out, err = run(["slope", book, "--y", Y, "--x", X, "--model", "2", "--at-x",
                          "'Site data'!A2:A4", "--format", "json"], capsys)
    assert code == 0, err
    size, cost, res = _api()
    api = xlbridge.slopes(res, size[:3])
    assert json.loads(out)["slope"] == api.to_dict()["slope"]
    # weights from a column of the same sheet (source: the API with the same weights)
    code, out, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--weights", X,
                          "--format", "json"], capsys)
    assert code == 0, err
    keep = ~np.isnan(cost)
    ref = xlbridge.fit(cost, size, 2, names=("size",), weights=size)
    assert json.loads(out)["coefficients"] == ref.to_dict()["coefficients"]
    assert keep.sum() == ref.stats.n_used


def test_table_output_and_failures(book, capsys):
    code, out, err = run(["checks", book, "--y", Y, "--x", X, "--model", "2"], capsys)
    assert code == 0 and "verdict" in out and "Breusch-Pagan" in out
    code, out, err = run(["optimum", book, "--y", Y, "--x", X, "--model", "1"], capsys)
    assert code == 1 and err.startswith("xlbridge: ") and "straight line" in err
    code, out, err = run(["degrees", book, "--y", Y, "--x", X, "--max-degree", "11"], capsys)
    assert code == 1 and "max_degree must be 1 to 10" in err


def _png_size(path: Path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")


def test_plot_and_report(book, tmp_path, capsys):
    figs = tmp_path / "figs"
    code, out, err = run(["plot", book, "--y", Y, "--x", X, "--model", "2", "--out", figs,
                          "--svg"], capsys)
    assert code == 0, err
    names = sorted(p.name for p in figs.iterdir())
    assert "curve.png" in names and "degrees.svg" in names and "influence.png" in names
    from xlbridge.plots import DPI, SIZE

    assert _png_size(figs / "curve.png") == (round(SIZE[0] * DPI), round(SIZE[1] * DPI))
    report = tmp_path / "model.html"
    code, out, err = run(["report", book, "--y", Y, "--x", X, "--model", "2", "--out",
                          report], capsys)
    assert code == 0, err
    text = report.read_text()
    for section in ("data", "equation", "coefficients", "statistics", "checks", "degrees",
                    "plots", "cautions", "versions"):
        assert f"id='{section}'" in text
    assert not re.search(r"(?:src|href)=[\"']?(?:https?:)?//", text)
    assert "http://" not in text and "https://" not in text
    code, _, err = run(["report", book, "--y", Y, "--x", X, "--model", "2", "--out",
                        report], capsys)
    assert code == 2 and "already exists" in err


def test_demo_writes_every_file(tmp_path, capsys):
    out = tmp_path / "demo"
    code, text, err = run(["demo", "--out", out], capsys)
    assert code == 0, err
    assert "0 errors" in text and "errors" in text
    assert text.count(", 0 errors") == 3  # every template, the CER workbook included
    assert "power CER by mupe" in text and "(costs in 2025 prices)" in text
    for stem in ("equipment_cost", "margin_surface", "steel_cer"):
        for suffix in (".xlsx", "-calculated.xlsx", "-report.html"):
            assert (out / f"{stem}{suffix}").stat().st_size > 0
    pngs = list((out / "figures").glob("*.png"))
    assert len(pngs) >= 8
    for p in pngs:
        w, h = _png_size(p)
        assert w >= 700 and h >= 450
    # a second run into the same demo folder replaces its own files
    code, _, err = run(["demo", "--out", out], capsys)
    assert code == 0, err
    other = tmp_path / "busy"
    other.mkdir()
    (other / "mine.txt").write_text("keep")
    code, _, err = run(["demo", "--out", other], capsys)
    assert code == 2 and "other files" in err and (other / "mine.txt").read_text() == "keep"
