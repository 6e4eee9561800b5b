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


@dataclass
class CerScenario:
    """A cost-estimating-relationship workbook: costs of several years brought to one base
    year, a power CER and its candidates, its card, percentiles, and a learning curve."""

    file: str
    title: str
    seed: int
    rows: list[list]  # item, weight_t, length_m, year, cost_k
    index: list[list[float]]  # year, index
    base_year: int
    lots: list[list[float]]  # first unit, last unit, lot labour hours
    inputs: list[list[float]]  # weights of new estimates
    how_to: list[str] = field(default_factory=list)


def steel_cer() -> CerScenario:
    """Estimating: fabricated steel assemblies (invented): cost (k$, in the prices of the
    year built) against weight, with a price index to bring them to one year; labour hours of
    lots of a repeated truss for a learning curve."""
    seed = 20261203
    rng = np.random.default_rng(seed)
    years = list(range(2018, 2026))
    index = dict(zip(years, _round(100 * np.cumprod([1.0] + list(1 + rng.uniform(
        0.01, 0.05, len(years) - 1))), 1)))
    n = 24
    weight = np.sort(rng.uniform(2, 60, n))
    length = 4 + 0.9 * weight + rng.normal(0, 4, n)
    year = rng.integers(2018, 2026, n)
    cost_base = 9.5 * weight**0.82 * np.exp(rng.normal(0, 0.09, n))
    cost = cost_base * np.array([index[int(y)] for y in year]) / index[2025]
    rows = [[f"S-{101 + i}", w, ln, int(y), c] for i, (w, ln, y, c) in
            enumerate(zip(_round(weight, 1), _round(np.abs(length), 1), year,
                          _round(cost, 1)))]
    b = np.log2(0.88)
    lots = []
    for first, last in ((1, 4), (5, 12), (13, 24), (25, 40), (41, 64)):
        hours = sum(120 * i**b for i in range(first, last + 1)) * (1 + rng.normal(0, 0.02))
        lots.append([first, last, float(round(hours, 1))])
    return CerScenario(
        file="steel_cer.xlsx",
        title="Cost of fabricated steel assemblies against weight (a power CER)",
        seed=seed, rows=rows, index=[[y, v] for y, v in index.items()], base_year=2025,
        lots=lots, inputs=[[5.0], [20.0], [45.0], [80.0]],
        how_to=[
            "Data: one row per assembly built; weight in tonnes, length in m, the year it was "
            "built and its cost in k$ of that year. Column F (XB_BASEYEAR) brings every cost "
            "to 2025 prices with the price index on the Index sheet; the CER is fitted to it.",
            "Model!B4 holds the form (power, factor or exponential), Model!B5 the method and "
            "base year, e.g. method=mupe; base_year=2025 (method=log, zmpe or ols also work).",
            "XB_CERCARD documents the CER on one screen for review; XB_CANDIDATES compares "
            "forms, methods and drivers ranked by unit-space SPE/CV; XB_PLEVELS gives "
            "percentiles of new estimates for a risk analysis.",
            "Lots sheet: labour hours of lots of a repeated truss; XB_LEARNING fits a unit "
            "learning curve from the lots (slope, first-unit hours) and costs the next lot.",
        ],
    )


def build_cer(sc: CerScenario):
    """The workbook of a CER scenario (an openpyxl Workbook)."""
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
    columns = ["item", "weight_t", "length_m", "year", "cost_k"]
    data.append(columns)
    for r in sc.rows:
        data.append(r)
    last = len(sc.rows) + 1
    index = wb.create_sheet("Index")
    index.append(["year", "index"])
    for r in sc.index:
        index.append(r)
    index_ref = f"Index!$A$1:$B${len(sc.index) + 1}"
    by_opts = f"base_year={sc.base_year}"
    cost_v = [["cost_k"]] + [[r[4]] for r in sc.rows]
    year_v = [["year"]] + [[r[3]] for r in sc.rows]
    index_v = [["year", "index"]] + sc.index
    y_vals = ws.XB_BASEYEAR(cost_v, year_v, index_v, by_opts)
    data["F1"] = ArrayFormula(f"F1:F{last}", f"=XB_BASEYEAR(Data!$E$1:$E${last},"
                                             f"Data!$D$1:$D${last},{index_ref},\"{by_opts}\")")
    for c in data[1]:
        c.font = Font(bold=True)
    y_ref, x_ref, d_ref = (f"Data!$F$1:$F${last}", f"Data!$B$1:$B${last}",
                           f"Data!$B$1:$C${last}")
    x_vals = [["weight_t"]] + [[r[1]] for r in sc.rows]
    d_vals = [["weight_t", "length_m"]] + [[r[1], r[2]] for r in sc.rows]

    model = wb.create_sheet("Model")
    model["A1"] = sc.title
    model["A1"].font = Font(bold=True, size=13)
    model["A2"] = ("Invented demonstration data. Every table below is a worksheet function of "
                   "xlbridge; refresh headlessly with: xlbridge recalc BOOK --out COPY")
    form, opts = "power", f"method=mupe; {by_opts}"
    cand = "forms=power,linear,exponential; methods=log,mupe,zmpe; max_drivers=2"
    for r, (k, v, note) in enumerate((
            ("model", form, "power, factor or exponential"),
            ("options", opts, "method=log|mupe|zmpe|ols; base_year=YYYY; levels=10,50,90"),
            ("candidates", cand, "forms, methods and drivers per model to compare")), 4):
        model.cell(row=r, column=1, value=k).font = Font(bold=True)
        model.cell(row=r, column=2, value=v)
        model.cell(row=r, column=3, value=note)
    args = f"{y_ref},{x_ref},$B$4,$B$5"
    row = 8
    for caption, formula, value in (
            ("CER card", f"XB_CERCARD({args})", ws.XB_CERCARD(y_vals, x_vals, form, opts)),
            ("Coefficients (a first, then the exponent)", f"XB_COEFS({args})",
             ws.XB_COEFS(y_vals, x_vals, form, opts)),
            ("Fit statistics", f"XB_STATS({args})", ws.XB_STATS(y_vals, x_vals, form, opts)),
            ("Equation (raw units, full precision)", f"XB_EQUATION({args})",
             ws.XB_EQUATION(y_vals, x_vals, form, opts)),
            ("Candidate CERs, ranked", f"XB_CANDIDATES({y_ref},{d_ref},$B$6)",
             ws.XB_CANDIDATES(y_vals, d_vals, cand))):
        row = put_block(model, row, caption, formula, value)
    model.cell(row=row, column=1, value="Weights to estimate (t)").font = Font(bold=True)
    in_vals = [["weight_t"]] + sc.inputs
    for i, (v,) in enumerate(in_vals):
        model.cell(row=row + 1 + i, column=1, value=v)
    in_ref = f"$A${row + 1}:$A${row + len(in_vals)}"
    put_block(model, row, "Percentiles of a new estimate (for a risk analysis)",
              f"XB_PLEVELS({y_ref},{x_ref},$B$4,{in_ref},$B$5)",
              ws.XB_PLEVELS(y_vals, x_vals, form, in_vals, opts), col=3)
    model.column_dimensions["A"].width = 34

    lots = wb.create_sheet("Lots")
    lots.append(["first_unit", "last_unit", "labour_hours", None, "from_unit", "to_unit"])
    for i, r in enumerate(sc.lots):
        lots.append(r + ([None, 65, 80] if i == 0 else []))
    n_lots = len(sc.lots) + 1
    put_block(lots, 1, "Learning curve (unit theory) from the lots; cost of units 65-80",
              f"XB_LEARNING(Lots!$A$1:$B${n_lots},Lots!$C$1:$C${n_lots},Lots!$E$2:$F$2)",
              ws.XB_LEARNING([["first_unit", "last_unit"]] + [r[:2] for r in sc.lots],
                             [["labour_hours"]] + [[r[2]] for r in sc.lots], [[65, 80]]),
              col=8)

    conf = wb.create_sheet("xlwings.conf")
    conf["A1"], conf["B1"] = "UDF Modules", "xlbridge.worksheet"
    notes_sheet(wb, sc.title, sc.seed, sc.how_to)
    return wb




def _col(i: int) -> str:
    from openpyxl.utils import get_column_letter

    return get_column_letter(i)


def _shape(formula_value) -> tuple[int, int]:
    rows = len(formula_value)
    return rows, max(len(r) for r in formula_value)


def notes_sheet(wb, title: str, seed: int, how_to: list[str]) -> None:
    """The Notes sheet: what the data are, how to use the workbook, the cautions."""
    from openpyxl.styles import Font

    notes = wb.create_sheet("Notes")
    lines = [title, "",
             f"Invented data, generated by scripts/make_templates.py with seed {seed}.", "",
             "How to use"] + [f"- {t}" for t in how_to] + [
             "", "Desktop (Windows and the desktop spreadsheet program): in the xlbridge "
             "folder (a checkout of its repository) run python -m pip install \".[desktop]\" "
             "(not the short name from the package index, an unrelated project), then "
             "xlwings addin install, then Import Functions on the "
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


def put_block(sheet, row: int, caption: str, formula: str, value, col: int = 1,
              note: str = "") -> int:
    """Write a caption at ``row`` and an array formula over exactly the result's shape
    below it; returns the next free row (one blank row after the block)."""
    from openpyxl.styles import Font
    from openpyxl.worksheet.formula import ArrayFormula

    sheet.cell(row=row, column=col, value=caption).font = Font(bold=True)
    if note:
        sheet.cell(row=row, column=col + 1, value=note)
    top = row + 1
    h, w = _shape(value)
    ref = f"{_col(col)}{top}:{_col(col + w - 1)}{top + h - 1}"
    if h == 1 and w == 1:
        sheet.cell(row=top, column=col, value=f"={formula}")
    else:
        sheet.cell(row=top, column=col).value = ArrayFormula(ref, f"={formula}")
    return top + h + 1


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
        return put_block(model, row, caption, formula, value, col, note)

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

    notes_sheet(wb, sc.title, sc.seed, sc.how_to)
    return wb


SCENARIOS = ((equipment_cost, build), (margin_surface, build), (steel_cer, build_cer))


def write_all(dirs=OUT_DIRS) -> list[Path]:
    out = []
    for make, builder in SCENARIOS:
        sc = make()
        wb = builder(sc)
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
