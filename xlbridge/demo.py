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

TEMPLATES = ("equipment_cost.xlsx", "margin_surface.xlsx")
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


def run_demo(out: str | Path = "xlbridge-demo", *, force: bool = False) -> str:
    """Run the demo into folder ``out``; returns the summary text."""
    from . import cells, worksheet
    from .book.reader import open_book
    from .cells import models as model_cells
    from .plots import write_figures
    from .report import Source, write_report
    from .runner.recalc import evaluate_book
    from .runner.write import write_copy

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
        functions = _capturing(worksheet.FUNCTIONS, ("XB_COEFS", "XB_DEGREESCAN"), captured)
        evaluation = evaluate_book(book, functions=functions)
        calculated = out / f"{stem}-calculated.xlsx"
        write_copy(evaluation, calculated, values=True, force=True)
        res, _ = cells.fit_cells(*captured["XB_COEFS"])
        scan = None
        if "XB_DEGREESCAN" in captured:
            scan, _ = model_cells.scan_cells(*captured["XB_DEGREESCAN"])
        figures = write_figures(res, out / "figures", scan=scan, prefix=f"{stem}-",
                                force=True)
        report = out / f"{stem}-report.html"
        write_report(report, res, scan=scan, pngs=figures,
                     source=Source(file=name, y_ref=f"{res.response} (sheet Data)",
                                   x_ref=", ".join(res.spec.predictors) + " (sheet Data)"))
        failed = evaluation.failed
        lines.append(f"{name}: {len(evaluation.cells)} model tables evaluated, "
                     f"{len(failed)} errors")
        for x in failed:
            lines.append(f"  {x.label} {x.function}: {x.message}")
        lines.append(f"  model {res.model_text} on {res.stats.n_used} rows "
                     f"({res.n_dropped} dropped): adj R2 {res.stats.adj_r2:.4f}, "
                     f"rmse {res.stats.rmse:.4g}")
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
