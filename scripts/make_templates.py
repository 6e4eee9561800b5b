"""Build the ready-to-use workbooks in workbook_templates/ (and the copies bundled in the
package, xlbridge/data/) from invented data with fixed seeds. This script is the source of
truth: tests/test_templates.py rebuilds every workbook and compares it cell by cell.

    python scripts/make_templates.py            # write both copies
    python scripts/make_templates.py --check    # exit 1 if a shipped file differs

The data are invented for demonstration (no real jobs, prices or products).
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
OUT_DIRS = (REPO / "workbook_templates", REPO / "xlbridge" / "data")
FIXED_TIME = dt.datetime(2026, 12, 1, 0, 0, 0)

CAUTIONS = [
    "The data in this workbook are invented for demonstration; replace them with your own.",
    "Results are statistical estimates. Intervals assume the model form is right and the "
    "errors independent, of constant spread (or the remedy chosen) and roughly normal: read "
    "the checks table before you rely on them.",
    "Predictions outside the range of the data are flagged 'extrapolated': a polynomial can "
    "turn sharply just beyond the data, so treat them with extra care.",
    "Fewer than 10 rows per coefficient is a common warning sign (small samples give wide "
    "intervals and unstable curvature).",
    "Where an estimate feeds safety-related or structural decisions, follow the applicable "
    "codes and standards and have it reviewed by a licensed professional.",
]


@dataclass
class Block:
    """One result block on the model sheet: a caption and an XB_ formula."""

    caption: str
    formula: str  # without the leading "="
    note: str = ""


@dataclass
class Scenario:
    file: str
    title: str
    seed: int
    columns: list[str]  # data sheet header
    rows: list[list[float | None]]
    y_col: str
    x_cols: list[str]
    model: object
    options: str
    inputs_caption: str
    inputs: list[list[float]]  # points for XB_PREDICT / XB_MARGINAL (columns = x_cols)
    blocks: list[Block] = field(default_factory=list)
    how_to: list[str] = field(default_factory=list)


def _round(v: np.ndarray, digits: int) -> list[float]:
    """Values as a person would type them: the double nearest each rounded decimal."""
    return [float(round(float(a), digits)) for a in v]


def equipment_cost() -> Scenario:
    """Estimating: installed cost (k$) of industrial air compressors against rated capacity
    (kW). Economies of scale bend the curve; the spread grows with size."""
    seed = 20261201
    rng = np.random.default_rng(seed)
    n = 48
    cap = np.sort(rng.uniform(15, 400, n))
    mean = 12 + 1.15 * cap - 0.0011 * cap**2
    cost = mean * (1 + rng.normal(0, 0.06, n))
    jobs = [f"J-{1001 + i}" for i in range(n)]
    rows = [[j, c, v] for j, c, v in zip(jobs, _round(cap, 1), _round(cost, 1))]
    rows[17][2] = None  # a job not yet invoiced: left out of the fit and counted
    return Scenario(
        file="equipment_cost.xlsx",
        title="Installed cost of industrial air compressors against rated capacity",
        seed=seed,
        columns=["job", "capacity_kW", "installed_cost"],
        rows=rows, y_col="installed_cost", x_cols=["capacity_kW"], model=2, options="",
        inputs_caption="Capacities to estimate (kW)",
        inputs=[[25.0], [75.0], [150.0], [250.0], [380.0], [450.0]],
        how_to=[
            "Data: one row per completed job; capacity in kW, installed cost in k$.",
            "Model!B4 holds the degree. XB_DEGREESCAN scans degrees 1 to 5 and marks the "
            "recommended one (lowest cross-validated error within one standard error of the "
            "best); set B4 to it.",
            "Model!B5 holds options, e.g. 'log=yes' or 'error=percent' when the checks show "
            "spread growing with size, 'se=hc3' for robust standard errors, 'level=0.9'.",
            "Type new capacities in the 'Capacities to estimate' column: XB_PREDICT gives the "
            "estimate with its confidence interval (mean) and prediction interval (one new "
            "job), and flags extrapolation; XB_MARGINAL gives the added cost of one more kW.",
        ],
    )


def margin_surface() -> Scenario:
    """Pricing: monthly gross margin (k$) of a spare-parts kit against list price ($) and
    dealer rebate (%), a complete second-order surface with a maximum inside the data."""
    seed = 20261202
    rng = np.random.default_rng(seed)
    n = 60
    price = rng.uniform(80, 160, n)
    rebate = rng.uniform(0, 20, n)
    margin = (-50 + 2.2 * price + 3.1 * rebate - 0.0095 * price**2 - 0.12 * rebate**2
              + 0.004 * price * rebate + rng.normal(0, 3, n))
    rows = [[f"M-{i + 1:02d}", p, r, m] for i, (p, r, m) in
            enumerate(zip(_round(price, 2), _round(rebate, 1), _round(margin, 1)))]
    return Scenario(
        file="margin_surface.xlsx",
        title="Monthly gross margin of a spare-parts kit against list price and dealer rebate",
        seed=seed,
        columns=["month", "list_price", "rebate_pct", "gross_margin"],
        rows=rows, y_col="gross_margin", x_cols=["list_price", "rebate_pct"],
        model="surface", options="",
        inputs_caption="Price and rebate combinations to evaluate",
        inputs=[[100.0, 5.0], [120.0, 15.0], [140.0, 10.0], [175.0, 25.0]],
        how_to=[
            "Data: one row per month; list price in $, dealer rebate in %, gross margin in k$.",
            "Model!B4 holds the model ('surface': linear terms, squares and the cross "
            "product). XB_OPTIMUM finds the stationary point of the fitted surface with its "
            "interval, says whether it is a maximum, minimum, saddle or ridge, and whether it "
            "lies inside the data.",
            "Type price/rebate combinations in the input block: XB_PREDICT gives the margin "
            "with intervals; XB_MARGINAL the change in margin per $ of price and per point of "
            "rebate.",
        ],
    )


SCENARIOS = (equipment_cost, margin_surface)


def _col(i: int) -> str:
    from openpyxl.utils import get_column_letter

    return get_column_letter(i)


def _shape(formula_value) -> tuple[int, int]:
    rows = len(formula_value)
    return rows, max(len(r) for r in formula_value)


def build(sc: Scenario):
    """The workbook for one scenario (an openpyxl Workbook)."""
    from openpyxl import Workbook
    from openpyxl.styles import Font
    from openpyxl.worksheet.formula import ArrayFormula

    from xlbridge import worksheet as ws

    wb = Workbook()
    wb.properties.creator = "xlbridge scripts/make_templates.py"
    wb.properties.created = FIXED_TIME
    wb.properties.modified = FIXED_TIME
    data = wb.active
    data.title = "Data"
    data.append(sc.columns)
    for r in sc.rows:
        data.append(r)
    for c in data[1]:
        c.font = Font(bold=True)
    n = len(sc.rows)
    last = n + 1

    def col_ref(name: str) -> str:
        j = sc.columns.index(name) + 1
        return f"Data!${_col(j)}$1:${_col(j)}${last}"

    y_ref = col_ref(sc.y_col)
    xs = [sc.columns.index(c) + 1 for c in sc.x_cols]
    x_ref = f"Data!${_col(min(xs))}$1:${_col(max(xs))}${last}"

    # the values a worksheet function receives for these ranges (header row included)
    y_vals = [[sc.y_col]] + [[r[sc.columns.index(sc.y_col)]] for r in sc.rows]
    x_vals = [sc.x_cols] + [[r[sc.columns.index(c)] for c in sc.x_cols] for r in sc.rows]
    in_vals = [sc.x_cols] + sc.inputs

    model = wb.create_sheet("Model")
    model["A1"] = sc.title
    model["A1"].font = Font(bold=True, size=13)
    model["A2"] = ("Invented demonstration data. Every table below is a worksheet function of "
                   "xlbridge; refresh headlessly with: xlbridge recalc BOOK --out COPY")
    model["A4"], model["B4"] = "model", sc.model
    model["A5"], model["B5"] = "options", sc.options or None
    model["C4"] = ("degree chosen from XB_DEGREESCAN (recommended row)"
                   if isinstance(sc.model, int) else "complete second-order surface")
    model["C5"] = "key=value; ... e.g. log=yes; se=hc3; error=percent; level=0.9"
    for c in ("A4", "A5"):
        model[c].font = Font(bold=True)
    args = f"{y_ref},{x_ref},$B$4,$B$5"
    row = 7
    k = len(sc.x_cols)

    def put(caption: str, formula: str, value, col: int = 1, note: str = "") -> int:
        """Write a caption and an array formula over exactly the result's shape."""
        nonlocal row
        model.cell(row=row, column=col, value=caption).font = Font(bold=True)
        if note:
            model.cell(row=row, column=col + 1, value=note)
        top = row + 1
        h, w = _shape(value)
        ref = f"{_col(col)}{top}:{_col(col + w - 1)}{top + h - 1}"
        if h == 1 and w == 1:
            model.cell(row=top, column=col, value=f"={formula}")
        else:
            model.cell(row=top, column=col).value = ArrayFormula(ref, f"={formula}")
        return top + h + 1

    m = sc.model
    opts = sc.options or None
    if isinstance(m, int):
        row = put("Degree scan", f"XB_DEGREESCAN({y_ref},{x_ref},5,$B$5)",
                  ws.XB_DEGREESCAN(y_vals, x_vals, 5.0, opts))
    row = put("Coefficients", f"XB_COEFS({args})", ws.XB_COEFS(y_vals, x_vals, m, opts))
    row = put("Fit statistics", f"XB_STATS({args})", ws.XB_STATS(y_vals, x_vals, m, opts))
    row = put("Equation (raw units, full precision)", f"XB_EQUATION({args})",
              ws.XB_EQUATION(y_vals, x_vals, m, opts))
    row = put("Checks of the assumptions", f"XB_CHECKS({args})",
              ws.XB_CHECKS(y_vals, x_vals, m, opts))
    if not isinstance(m, int):
        row = put("Stationary point", f"XB_OPTIMUM({args})",
                  ws.XB_OPTIMUM(y_vals, x_vals, m, opts))
    # prediction inputs, then predictions and slopes beside them
    model.cell(row=row, column=1, value=sc.inputs_caption).font = Font(bold=True)
    top = row + 1
    for i, point in enumerate(in_vals):
        for j, v in enumerate(point):
            model.cell(row=top + i, column=1 + j, value=v)
    in_ref = f"$A${top}:${_col(k)}${top + len(in_vals) - 1}"
    pcol = k + 2
    model.cell(row=row, column=pcol, value="Predictions").font = Font(bold=True)
    pred = ws.XB_PREDICT(y_vals, x_vals, m, in_vals, opts)
    h, w = _shape(pred)
    model.cell(row=top, column=pcol).value = ArrayFormula(
        f"{_col(pcol)}{top}:{_col(pcol + w - 1)}{top + h - 1}",
        f"=XB_PREDICT({y_ref},{x_ref},$B$4,{in_ref},$B$5)")
    scol = pcol + w + 1
    model.cell(row=row, column=scol, value="Slopes").font = Font(bold=True)
    slope = ws.XB_MARGINAL(y_vals, x_vals, m, in_vals, opts)
    h2, w2 = _shape(slope)
    model.cell(row=top, column=scol).value = ArrayFormula(
        f"{_col(scol)}{top}:{_col(scol + w2 - 1)}{top + h2 - 1}",
        f"=XB_MARGINAL({y_ref},{x_ref},$B$4,{in_ref},$B$5)")
    row = top + max(h, h2) + 1
    row = put("Versions (audit trail)", "XB_VERSIONS()", ws.XB_VERSIONS())
    model.column_dimensions["A"].width = 34

    diag = wb.create_sheet("Diagnostics")
    diag["A1"] = "Row diagnostics, aligned with the rows of the Data sheet"
    rows_v = ws.XB_ROWDIAG(y_vals, x_vals, m, opts)
    h, w = _shape(rows_v)
    diag["A2"] = ArrayFormula(f"A2:{_col(w)}{h + 1}",
                              f"=XB_ROWDIAG({y_ref},{x_ref},Model!$B$4,Model!$B$5)")

    conf = wb.create_sheet("xlwings.conf")
    conf["A1"], conf["B1"] = "UDF Modules", "xlbridge.worksheet"

    notes = wb.create_sheet("Notes")
    lines = [sc.title, "",
             f"Invented data, generated by scripts/make_templates.py with seed {sc.seed}.", "",
             "How to use"] + [f"- {t}" for t in sc.how_to] + [
             "", "Desktop (Windows and the desktop spreadsheet program): pip install "
             "\"xlbridge[desktop]\", xlwings addin install, then Import Functions on the "
             "xlwings tab (the xlwings.conf sheet already names xlbridge.worksheet), and save "
             "as a macro-enabled workbook.",
             "Anywhere (no spreadsheet program): xlbridge recalc THIS.xlsx --out COPY.xlsx "
             "fills every table; xlbridge pin / verify check them on CI.",
             "The tables are array formulas over their exact size; if a change makes a table "
             "larger (a higher degree), re-enter it over a larger range, or type the formula "
             "in the top-left cell only and let it spill.",
             "", "Cautions"] + [f"- {c}" for c in CAUTIONS]
    for i, text in enumerate(lines, 1):
        notes.cell(row=i, column=1, value=text)
    notes["A1"].font = Font(bold=True, size=13)
    notes.column_dimensions["A"].width = 120
    return wb


def write_all(dirs=OUT_DIRS) -> list[Path]:
    out = []
    for make in SCENARIOS:
        sc = make()
        wb = build(sc)
        for d in dirs:
            d.mkdir(parents=True, exist_ok=True)
            path = d / sc.file
            wb.save(path)
            out.append(path)
    return out


def cells_of(path: Path) -> dict:
    """Every cell's value (formula text for formulas, ref for array formulas), per sheet."""
    from openpyxl import load_workbook
    from openpyxl.worksheet.formula import ArrayFormula

    wb = load_workbook(path)
    out = {}
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for c in row:
                v = c.value
                if isinstance(v, ArrayFormula):
                    v = ("array", v.ref, v.text)
                if v is not None:
                    out[(ws.title, c.coordinate)] = v
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true", help="compare instead of writing")
    args = ap.parse_args(argv)
    if not args.check:
        for p in write_all():
            print(f"wrote {p.relative_to(REPO)}")
        return 0
    import tempfile

    bad = 0
    with tempfile.TemporaryDirectory() as tmp:
        fresh = write_all((Path(tmp),))
        for f in fresh:
            for d in OUT_DIRS:
                shipped = d / f.name
                if not shipped.exists() or cells_of(shipped) != cells_of(f):
                    print(f"differs from the script: {shipped.relative_to(REPO)}")
                    bad += 1
    return 1 if bad else 0


if __name__ == "__main__":
    sys.path.insert(0, str(REPO))
    sys.exit(main())
