"""``xlbridge demo``: the whole job on the bundled example workbooks (invented data).

For each template in ``xlbridge/data``: a copy of the template as shipped, the copy with
every XB_ table evaluated headlessly, the figures of its main model and its HTML report.
"""

from __future__ import annotations

import functools
import importlib.resources
import shutil
import time
from pathlib import Path

from .book.safety import BookError

TEMPLATES = ("equipment_cost.xlsx", "margin_surface.xlsx", "steel_cer.xlsx")
FIRST_ROW = 2  # the templates' data start in row 2 of sheet Data, below the names
MARKER = ".xlbridge-demo"


def _capturing(functions: dict, wanted: tuple[str, ...], captured: dict) -> dict:
    """The worksheet functions, the ``wanted`` ones also recording their arguments (the
    cell values exactly as the workbook supplies them)."""
    out = dict(functions)
    for name in wanted:
        fn = functions[name]

        @functools.wraps(fn)
        def wrapped(*args, _fn=fn, _name=name):
            captured.setdefault(_name, args)
            return _fn(*args)

        out[name] = wrapped
    return out


def _prepare(out: Path, force: bool) -> None:
    if out.exists() and not out.is_dir():
        raise BookError(f"{out} is a file; give a folder for the demo")
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).exists() and not force:
        raise BookError(f"{out} already holds other files; choose an empty or new folder, "
                        "or add --force")
    out.mkdir(parents=True, exist_ok=True)
    (out / MARKER).write_text("written by xlbridge demo; its files may be replaced\n")


def _cer_outputs(out: Path, name: str, captured: dict, evaluation, calculated: Path
                 ) -> list[str]:
    """The figures and the report (its card on top) of a CER workbook; summary lines."""
    from .cells.cer import candidates_cells, card_facts, card_input
    from .cerplots import cer_pngs
    from .report import Source, build_cer_report

    stem = name.removesuffix(".xlsx")
    res, inp = card_input(*captured["XB_COEFS"])
    facts = card_facts(res, inp.key(), inp.options, inp.drops)
    pngs = cer_pngs(res)
    (out / "figures").mkdir(exist_ok=True)
    for kind, data in pngs.items():
        (out / "figures" / f"{stem}-{kind}.png").write_bytes(data)
    candidates = (candidates_cells(*captured["XB_CANDIDATES"])
                  if "XB_CANDIDATES" in captured else None)
    report = out / f"{stem}-report.html"
    report.write_text(build_cer_report(
        res, facts, options=inp.options, candidates=candidates, pngs=pngs,
        source=Source(file=name, y_ref=f"{res.response} (sheet Data)",
                      x_ref=", ".join(res.drivers) + " (sheet Data)",
                      options=inp.options.to_text())), encoding="utf-8")
    failed = evaluation.failed
    u = res.unit
    lines = [f"{name}: {len(evaluation.cells)} model tables evaluated, {len(failed)} errors"]
    lines += [f"  {x.label} {x.function}: {x.message}" for x in failed]
    lines += [f"  {res.form} CER by {res.method} on {u.n} rows ({res.n_dropped} dropped): "
              f"SPE {u.spe:.4g}, CV {u.cv:.4g}, R2 in units {u.r2_unit:.4f}",
              f"  {dict(facts.items)['equation']}",
              f"  files: {name}, {calculated.name}, {report.name}, {len(pngs)} figures in "
              "figures/", ""]
    return lines


def run_demo(out: str | Path = "xlbridge-demo", *, force: bool = False) -> str:
    """Run the demo into folder ``out``; returns the summary text."""
    from . import cells, worksheet
    from .book.reader import open_book
    from .cells import models as model_cells
    from .engine import CerResult
    from .plots import figure_class, write_figures
    from .report import Source, write_report
    from .runner.recalc import evaluate_book
    from .runner.write import write_copy

    figure_class()  # without matplotlib, say how to add it before writing anything
    start = time.perf_counter()
    out = Path(out)
    _prepare(out, force)
    lines = [f"xlbridge demo: invented example data, written to {out.resolve()}", ""]
    for name in TEMPLATES:
        stem = name.removesuffix(".xlsx")
        template = out / name
        with importlib.resources.as_file(importlib.resources.files("xlbridge") / "data"
                                         / name) as src:
            shutil.copyfile(src, template)
        book = open_book(template)
        captured: dict = {}
        functions = _capturing(worksheet.FUNCTIONS, ("XB_COEFS", "XB_DEGREESCAN",
                                                     "XB_CANDIDATES"), captured)
        evaluation = evaluate_book(book, functions=functions)
        calculated = out / f"{stem}-calculated.xlsx"
        write_copy(evaluation, calculated, values=True, force=True)
        res, _ = cells.fit_cells(*captured["XB_COEFS"])
        if isinstance(res, CerResult):
            lines += _cer_outputs(out, name, captured, evaluation, calculated)
            continue
        scan = None
        if "XB_DEGREESCAN" in captured:
            scan, _ = model_cells.scan_cells(*captured["XB_DEGREESCAN"])
        figures = write_figures(res, out / "figures", scan=scan, prefix=f"{stem}-",
                                force=True, first_row=FIRST_ROW)
        report = out / f"{stem}-report.html"
        write_report(report, res, scan=scan, pngs=figures,
                     source=Source(file=name, y_ref=f"{res.response} (sheet Data)",
                                   x_ref=", ".join(res.spec.predictors) + " (sheet Data)",
                                   first_row=FIRST_ROW))
        failed = evaluation.failed
        lines.append(f"{name}: {len(evaluation.cells)} model tables evaluated, "
                     f"{len(failed)} errors")
        for x in failed:
            lines.append(f"  {x.label} {x.function}: {x.message}")
        lines.append(f"  model {res.model_text} on {res.stats.n_used} rows "
                     f"({res.n_dropped} left out): adjusted R² {res.stats.adj_r2:.4f}, "
                     f"typical miss (SEE) {res.stats.rmse:.4g}")
        if scan is not None and scan.chosen is not None:
            lines.append(f"  degree scan recommends degree {scan.chosen}")
        lines.append(f"  {res.equation()}")
        lines.append(f"  files: {template.name}, {calculated.name}, {report.name}, "
                     f"{len(figures)} figures in figures/")
        lines.append("")
    lines.append(f"done in {time.perf_counter() - start:.1f} s. Open the *-report.html files "
                 "in a browser; the *-calculated.xlsx copies hold every table as values.")
    lines.append("The estimates are statistical: read the checks and cautions in each report.")
    return "\n".join(lines)
