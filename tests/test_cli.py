"""The ``xlbridge`` command: fit / predict output equals the Python API, formats, exit codes,
help texts, start-up imports, and the input file left byte for byte as it was.

References: the Python API ``xlbridge.fit`` on the same numbers (a different code path:
no workbook, no cell adaptation) and NIST StRD certified values; python-calamine and
openpyxl read the written files back as independent readers.
"""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from decimal import Decimal
from pathlib import Path

import numpy as np
import pytest
import python_calamine

import xlbridge
from xlbridge.cli import COMMANDS

from .bookfactory import (
    build_book,
    cost_book,
    invented_cost_data,
    run,
    run_process,
    sha256,
)
from .conftest import NIST_DIR, lre, nist_sets
from .tablecheck import stats_by_field

Y, X = "'Site data'!B:B", "'Site data'!A:A"


def _api_fit(n: int = 40, blanks=(), model=2, **kw):
    size, cost = invented_cost_data(n)
    y = cost.copy()
    y[list(blanks)] = np.nan
    return xlbridge.fit(y, size, model, names=("size",), **kw)


def _no_notes(doc: dict) -> dict:
    """A fit's JSON without its notes (the command line adds the sheet rows left out)."""
    return {k: v for k, v in doc.items() if k != "notes"}


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    return cost_book(tmp_path / "costs.xlsx", blanks=(3, 17))


def test_fit_json_equals_python_api(book: Path, capsys) -> None:
    before = sha256(book)
    code, out, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "json"],
                         capsys)
    assert code == 0, err
    doc = json.loads(out)
    notes = doc.pop("notes")
    assert doc == _no_notes(_api_fit(blanks=(3, 17)).to_dict())
    assert doc["model"]["n_dropped"] == 2
    # the notes say which rows were left out, by sheet row (header in sheet row 1)
    assert notes == ["2 rows dropped (blank 2): sheet rows 5 and 19"]
    assert sha256(book) == before


def test_options_reach_the_fit(book: Path, capsys) -> None:
    code, out, _ = run(["fit", book, "--y", Y, "--x", X, "--model", "1",
                        "--options", "level=0.9; intercept=no", "--format", "json"], capsys)
    assert code == 0
    assert _no_notes(json.loads(out)) == _no_notes(_api_fit(blanks=(3, 17), model=1,
                                                            level=0.9,
                                                            intercept=False).to_dict())


@pytest.mark.parametrize(("y", "x"), [
    ("'Site data'!B2:B41", "'Site data'!A2:A41"),
    ("'Site data'!$B$2:$B$41", "'Site data'!$A$2:$A$41"),
    ("B2:B41", "A2:A41"),  # the first sheet is the default
    ("cost_y", "size_x"),
    ("Costs[cost]", "Costs[size]"),
])
def test_every_ref_form_gives_the_same_fit(tmp_path: Path, capsys, y: str, x: str) -> None:
    size, cost = invented_cost_data(40)
    rows = [["size", "cost"]] + [[float(a), float(b)] for a, b in zip(size, cost)]
    path = build_book(tmp_path / "forms.xlsx", {"Site data": rows},
                      tables=[("Site data", "Costs", "A1:B41")],
                      names={"cost_y": "'Site data'!$B$2:$B$41",
                             "size_x": "'Site data'!$A$2:$A$41"})
    code, out, err = run(["fit", path, "--y", y, "--x", x, "--model", "2", "--format", "json"],
                         capsys)
    assert code == 0, err
    got = json.loads(out)
    want = xlbridge.fit(cost, size, 2).to_dict()
    # names come from a header row only when the reference includes it
    assert got["coefficients"][1]["estimate"] == want["coefficients"][1]["estimate"]
    assert [c["estimate"] for c in got["coefficients"]] == [
        c["estimate"] for c in want["coefficients"]]
    assert got["stats"] == want["stats"]


def test_csv_input(tmp_path: Path, capsys) -> None:
    size, cost = invented_cost_data(25)
    p = tmp_path / "costs.csv"
    p.write_text("size,cost\n"
                 + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(size, cost)))
    code, out, _ = run(["fit", p, "--y", "B:B", "--x", "A:A", "--model", "2", "--format",
                        "json"], capsys)
    assert code == 0
    assert json.loads(out) == xlbridge.fit(cost, size, 2, names=("size",)).to_dict()


SETS = nist_sets()


@pytest.mark.skipif(not SETS, reason=f"NIST StRD reference data not found at {NIST_DIR}")
@pytest.mark.parametrize("d", SETS, ids=[d["name"] for d in SETS] or None)
def test_nist_through_the_cli(tmp_path: Path, capsys, d) -> None:
    """NIST StRD, Linear Least Squares Regression, <name>: the CLI reads the cells and
    gives the API's result, which meets the certified estimates."""
    y = [float(v) for v in d["y"]]
    multi = d["degree"] is None
    xs = [[float(v) for v in row] for row in d["x"]] if multi else [[float(v)] for v in d["x"]]
    k = len(xs[0])
    rows = [[*xr, yv] for xr, yv in zip(xs, y)]
    path = build_book(tmp_path / f"{d['name']}.xlsx", {"data": rows})
    last_x = chr(ord("A") + k - 1)
    ycol = chr(ord("A") + k)
    model = "linear" if multi else str(d["degree"])
    opts = "names=no" + ("" if d["intercept"] else "; intercept=no")
    code, out, err = run(["fit", path, "--y", f"{ycol}:{ycol}", "--x", f"A:{last_x}",
                          "--model", model, "--options", opts, "--format", "json"], capsys)
    assert code == 0, err
    got = json.loads(out)
    xa = np.array(xs) if multi else np.array(xs)[:, 0]
    api = xlbridge.fit(np.array(y), xa, "linear" if multi else int(d["degree"]),
                       intercept=bool(d["intercept"]))
    assert got == api.to_dict()
    for est, cert in zip(got["coefficients"], d["certified"]["estimates"]):
        assert lre(est["estimate"], Decimal(str(cert))) >= 9.0, d["name"]


def test_table_and_csv_formats(book: Path, capsys) -> None:
    res = _api_fit(blanks=(3, 17))
    code, out, _ = run(["fit", book, "--y", Y, "--x", X, "--model", "2"], capsys)
    assert code == 0
    assert "equation: " + res.equation(response="cost") in out
    assert "rows used 38, dropped 2" in out
    code, out, _ = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "csv"],
                       capsys)
    assert code == 0
    rows = list(csv.reader(io.StringIO(out)))
    assert rows[0][:5] == ["term", "estimate", "low (95%)", "high (95%)", "standard error"]
    assert [r[0] for r in rows[1:4]] == list(res.terms)
    assert [float(r[1]) for r in rows[1:4]] == [c.estimate for c in res.coefficients]
    assert [float(r[4]) for r in rows[1:4]] == [c.std_error for c in res.coefficients]
    stats = stats_by_field([r for r in rows[5:] if len(r) == 3])
    assert float(stats["r2"]) == res.stats.r2


def test_xlsx_output_is_a_copy_readable_by_calamine(book: Path, tmp_path: Path, capsys) -> None:
    before = sha256(book)
    out = tmp_path / "copy.xlsx"
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "xlsx",
                        "--out", out], capsys)
    assert code == 0, err
    assert sha256(book) == before
    wb = python_calamine.CalamineWorkbook.from_path(str(out))
    assert wb.sheet_names == ["Site data", "xlbridge fit"]
    cells = wb.get_sheet_by_name("xlbridge fit").to_python()
    res = _api_fit(blanks=(3, 17))
    est = {r[0]: r[1] for r in cells if r and r[0] in res.terms}
    assert est == {c.term: c.estimate for c in res.coefficients}
    data = wb.get_sheet_by_name("Site data").to_python()
    assert data[1][0] == invented_cost_data(40)[0][0]
    # a second run refuses to overwrite without --force
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "xlsx",
                        "--out", out], capsys)
    assert code == 2 and "already exists; add --force" in err
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "xlsx",
                        "--out", out, "--force"], capsys)
    assert code == 0, err


def test_predict_json_equals_python_api(tmp_path: Path, capsys) -> None:
    new = [[20.0], [55.5], [None], [130.0]]  # data span 11.3 to 120
    path = cost_book(tmp_path / "p.xlsx", extra_sheets={"Quote": new})
    before = sha256(path)
    code, out, err = run(["predict", path, "--y", Y, "--x", X, "--model", "2",
                          "--new-x", "Quote!A1:A4", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    size, cost = invented_cost_data(40)
    pred = xlbridge.fit(cost, size, 2).predict(np.array([20.0, 55.5, 130.0]))
    rows = doc["predictions"]
    assert len(rows) == 4 and rows[2]["fitted"] is None
    assert rows[2]["range_flag"].startswith("dropped")
    good = [rows[0], rows[1], rows[3]]
    for key in ("fitted", "ci_lower", "ci_upper", "pi_lower", "pi_upper", "leverage"):
        assert [r[key] for r in good] == list(getattr(pred, key))
    assert [r["range_flag"] for r in good] == [
        "extrapolated" if e else "inside" for e in pred.extrapolated]
    assert list(pred.extrapolated) == [False, False, True]
    assert sha256(path) == before


def test_exit_codes(book: Path, tmp_path: Path, capsys) -> None:
    few = build_book(tmp_path / "few.xlsx", {"S": [[1.0, 1.0], [2.0, 4.0], [3.0, 9.0],
                                                    [1.0, 1.5], [2.0, 4.5]]})
    code, _, err = run(["fit", few, "--y", "B1:B5", "--x", "A1:A5", "--model", "4"], capsys)
    assert code == 1 and err.startswith("xlbridge:") and "distinct x values" in err
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--options",
                        "colour=red"], capsys)
    assert code == 2 and "unknown option 'colour'" in err
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "cubic"], capsys)
    assert code == 2 and err.startswith("xlbridge:")
    code, _, err = run(["fit", book, "--y", Y, "--x", "'Site data'!A2:A10", "--model", "2"],
                       capsys)
    assert code == 2 and "rows" in err
    code, _, err = run(["fit", book, "--x", X, "--model", "2"], capsys)
    assert code == 2 and "--y" in err
    code, _, err = run(["fit", book, "--y", "'Site data'!Q1:Q9", "--x", X, "--model", "2"],
                       capsys)
    assert code == 2 and "holds no values" in err
    code, _, err = run(["nonsense"], capsys)
    assert code == 2


def test_every_command_has_help_with_an_example(capsys) -> None:
    for c in COMMANDS:
        code, out, _ = run([c.name, "--help"], capsys)
        assert code == 0
        assert "example:" in out and f"xlbridge {c.name} " in out
    code, out, _ = run(["--help"], capsys)
    assert code == 0 and all(c.name in out for c in COMMANDS)


def test_console_script_and_start_up_imports(book: Path) -> None:
    """A whole process, as users and the benchmark run it: output, exit code, and which
    modules were imported (none of the heavy libraries or xlbridge parts one fit does not
    use: xlwings, pandas, scipy.stats/special/sparse/optimize, openpyxl, matplotlib, rich, the
    grouped fits, degree scan, diagnostics, CER tables, runner, figures, report)."""
    code = (
        "import sys, io, contextlib\n"
        "from xlbridge.cli import main\n"
        "buf = io.StringIO()\n"
        "with contextlib.redirect_stdout(buf):\n"
        f"    rc = main(['fit', {str(book)!r}, '--y', {Y!r}, '--x', {X!r}, '--model', '2',"
        " '--format', 'json'])\n"
        "heavy = sorted(m for m in ('xlwings', 'pandas', 'scipy.stats', 'openpyxl',"
        " 'matplotlib', 'rich', 'scipy.special', 'scipy.sparse', 'scipy.optimize',"
        " 'xlbridge.engine.groups',"
        " 'xlbridge.engine.scan', 'xlbridge.engine.diagnostics', 'xlbridge.cells.models',"
        " 'xlbridge.cells.groups', 'xlbridge.cells.cer',"
        " 'xlbridge.runner', 'xlbridge.plots', 'xlbridge.report') if m in sys.modules)\n"
        "print(rc, heavy)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert proc.stdout.strip() == "0 []", proc.stderr
    proc = run_process(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "json"])
    assert proc.returncode == 0
    assert _no_notes(json.loads(proc.stdout)) == _no_notes(_api_fit(blanks=(3, 17)).to_dict())
    assert "\x1b[" not in proc.stdout + proc.stderr  # no progress bar or colour off a terminal


def test_formula_looking_names_are_written_as_text(tmp_path: Path, capsys) -> None:
    size, cost = invented_cost_data(20)
    p = tmp_path / "inj.csv"
    p.write_text('"=HYPERLINK(""http://x"")",cost\n'
                 + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(size, cost)))
    code, out, _ = run(["fit", p, "--y", "B:B", "--x", "A:A", "--model", "1", "--format",
                        "csv"], capsys)
    assert code == 0
    rows = list(csv.reader(io.StringIO(out)))
    assert rows[2][0] == "'=HYPERLINK(\"http://x\")"  # quoted: not a formula in a spreadsheet
    out_x = tmp_path / "inj.xlsx"
    code, _, err = run(["fit", p, "--y", "B:B", "--x", "A:A", "--model", "1", "--format",
                        "xlsx", "--out", out_x], capsys)
    assert code == 0, err
    import openpyxl

    wb = openpyxl.load_workbook(out_x)
    texts = [c for ws in wb.worksheets for row in ws.iter_rows() for c in row
             if isinstance(c.value, str) and c.value.startswith("=")]
    assert texts and all(c.data_type == "s" for c in texts)
