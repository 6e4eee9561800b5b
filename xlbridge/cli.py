"""The ``xlbridge`` command: the workbook models without a spreadsheet program.

Each command is one entry of :data:`COMMANDS` (name, summary, example, options, run); a
later command is added by adding an entry.  Shared options (``--y``, ``--x``, ``--model``,
``--options``, ``--sheet``, ``--format``, ``--out``, ``--force``) come from the helpers
``add_data_options`` and ``add_output_options``.

Exit codes: 0 success, 1 drift or model failure, 2 usage or input error.  Messages start
with ``xlbridge:``.  Start-up matters (one process per command, big sheets): this module
imports only the standard library at import time; each command imports what it needs.
"""

from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NoReturn, TextIO

__all__ = ["COMMANDS", "Command", "main"]

EXIT_OK, EXIT_FAIL, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """Bad command line, file or reference: exit 2."""


class Failure(Exception):
    """The command ran but the model failed or results drifted: exit 1."""


@dataclass(frozen=True)
class Command:
    name: str
    summary: str
    example: str
    configure: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


# --- shared options ------------------------------------------------------------------------

REF_HELP = (
    "REF forms: B2:B40, $B$2:$B$40, Data!B2:B40, 'Site data'!B2:B352, whole columns "
    "Data!B:B (trailing blanks ignored), a defined name, or a table column Sales[Price]"
)


def add_data_options(p: argparse.ArgumentParser, *, model_required: bool = True) -> None:
    """--y, --x, --model, --options, --sheet: what to fit."""
    p.add_argument("book", metavar="BOOK", help="the .xlsx, .xlsm or .csv file (only read)")
    p.add_argument("--y", required=True, metavar="REF", help="cells of the response")
    p.add_argument("--x", required=True, metavar="REF", help="cells of the predictor(s)")
    p.add_argument("--model", required=model_required, metavar="M",
                   help="degree 1-10, 'surface', 'linear', 'interact', or terms such as "
                        "'size, size^2'")
    p.add_argument("--options", default=None, metavar="TEXT",
                   help="key=value pairs separated by ';' as in the worksheet functions, "
                        "e.g. 'level=0.9; intercept=no'")
    p.add_argument("--sheet", default=None, metavar="NAME",
                   help="sheet for references without one (default: the first sheet)")
    p.add_argument("--weights", default=None, metavar="REF",
                   help="cells of positive weights, one per row of y (weighted least squares)")


def add_output_options(p: argparse.ArgumentParser, formats: Sequence[str],
                       default: str = "table") -> None:
    """--format, --out, --force."""
    p.add_argument("--format", choices=list(formats), default=default,
                   help=f"output format (default {default})")
    p.add_argument("--out", type=Path, default=None, metavar="FILE",
                   help="write the output to FILE instead of the screen (never the input)")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


# --- output helpers ------------------------------------------------------------------------


def _num(v: Any, digits: int = 10) -> str:
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        return format(v, f".{digits}g")
    return str(v)


def render_table(rows: Sequence[Sequence[Any]], header: bool = True) -> str:
    """Plain aligned text table (numbers right-aligned)."""
    if not rows:
        return ""
    cells = [[_num(v) for v in r] for r in rows]
    width = max(len(r) for r in cells)
    cells = [r + [""] * (width - len(r)) for r in cells]
    numeric = [all(isinstance(r[j], float) or r[j] == "" for r in rows[1 if header else 0:]
                   if j < len(r)) for j in range(width)]
    w = [max(len(r[j]) for r in cells) for j in range(width)]
    lines = []
    for i, r in enumerate(cells):
        parts = [r[j].rjust(w[j]) if numeric[j] and not (header and i == 0) else r[j].ljust(w[j])
                 for j in range(width)]
        lines.append("  ".join(parts).rstrip())
        if header and i == 0:
            lines.append("  ".join("-" * w[j] for j in range(width)))
    return "\n".join(lines)


def _csv_text(tables: Sequence[Sequence[Sequence[Any]]]) -> str:
    import csv
    import io

    from xlbridge.book.safety import formula_safe_text

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    for k, table in enumerate(tables):
        if k:
            w.writerow([])
        for row in table:
            w.writerow([repr(v) if isinstance(v, float) else formula_safe_text(v)
                        for v in row])
    return buf.getvalue()


def _json_text(doc: Any) -> str:
    import json

    return json.dumps(_json_ready(doc), indent=2, allow_nan=False, ensure_ascii=False) + "\n"


def _json_ready(v: Any) -> Any:
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {k: _json_ready(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_json_ready(x) for x in v]
    return v


def emit(text: str, out: Path | None, force: bool, inputs: Sequence[Path] = ()) -> None:
    """Print, or write atomically to ``out``."""
    if out is None:
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    from xlbridge.book.safety import write_atomically

    def write(tmp: Path) -> None:
        tmp.write_text(text, encoding="utf-8", newline="")

    write_atomically(out, write, force=force, inputs=inputs)
    info(f"wrote {out}")


def info(text: str, stream: TextIO | None = None) -> None:
    print(text, file=stream or sys.stderr)


class _Progress:
    """A rich progress bar on a terminal for long runs; nothing otherwise."""

    def __init__(self, what: str) -> None:
        self.what = what
        self.bar: Any = None
        self.task: Any = None
        self.enabled = sys.stdout.isatty() and sys.stderr.isatty()

    def __call__(self, done: int, total: int, label: str) -> None:
        if not self.enabled or total < 10:
            return
        if self.bar is None:
            from rich.progress import Progress

            self.bar = Progress(transient=True)
            self.bar.start()
            self.task = self.bar.add_task(self.what, total=total)
        self.bar.update(self.task, completed=done, description=f"{self.what} {label}")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()


# --- reading the data of fit / predict -------------------------------------------------------


def _open(path: str) -> Any:
    from xlbridge.book.reader import open_book

    return open_book(path)


def _resolve(book: Any, refs: Sequence[tuple[str, str]], sheet: str | None) -> list[Any]:
    """Areas of the (option, REF) pairs, resolved together (whole columns cut alike)."""
    from xlbridge.book.refs import RefError, parse_ref

    parsed = []
    for what, ref in refs:
        try:
            parsed.append(parse_ref(ref))
        except RefError as exc:
            raise UsageError(f"--{what} {ref}: {exc}") from None
    return book.resolve_together(parsed, default_sheet=sheet)


def _read_ref(book: Any, ref: str, what: str, area: Any) -> tuple[Any, Any]:
    """(area, raw xlwings-shaped value) of a REF, refusing empty areas and unsaved formulas."""
    from xlbridge.book.reader import missing_value_message

    missing = book.formulas_without_value(area)
    if missing:
        raise UsageError(missing_value_message(book.path.name, area.sheet, missing))
    value = book.xlwings_value(area)
    flat = value if isinstance(value, list) else [value]
    if all((v is None) if not isinstance(v, list) else all(c is None for c in v)
           for v in flat):
        rows, cols = book.used_extent(area.sheet)
        where = "is empty" if rows == 0 else (
            f"has data in rows 1-{rows:,} and columns 1-{cols:,}")
        raise UsageError(f"--{what} {ref} ({area.label()}) holds no values; sheet "
                         f"{area.sheet!r} {where}")
    return area, value


@dataclass
class _Fitted:
    book: Any
    y_area: Any
    x_area: Any
    inp: Any
    result: Any


def _fit_from_args(args: argparse.Namespace, model: Any = None) -> _Fitted:
    from xlbridge import cells
    from xlbridge.cells import OptionsError

    book = _open(args.book)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    refs = [("y", args.y), ("x", args.x)]
    if getattr(args, "weights", None):
        refs.append(("weights", args.weights))
    areas = _resolve(book, refs, sheet)
    y_area, y = _read_ref(book, args.y, "y", areas[0])
    x_area, x = _read_ref(book, args.x, "x", areas[1])
    w = _read_ref(book, args.weights, "weights", areas[2])[1] if len(areas) > 2 else None
    from xlbridge.engine import ModelError, parse_model

    try:
        inp = cells.prepare_fit(y, x, args.model if model is None else model, args.options,
                                weights=w)
        # a model text that cannot be read is a usage error, not a failed fit
        parse_model(inp.model, inp.x.shape[1], inp.names,
                    intercept=bool(inp.options.fit_kwargs().get("intercept", True)))
    except (cells.CellError, OptionsError, ModelError) as exc:
        raise UsageError(str(exc)) from None
    try:
        result = cells.fit_prepared(inp)
    except cells.CellError as exc:  # the model cannot be fitted to these data
        raise Failure(str(exc)) from None
    return _Fitted(book, y_area, x_area, inp, result)


def _read_points(f: _Fitted, args: argparse.Namespace, option: str, ref: str
                 ) -> tuple[Any, Any]:
    """(area, raw value) of the points a fitted model is evaluated at (--new-x, --at-x)."""
    sheet = f.book.sheet_name(args.sheet) if args.sheet else None
    (area,) = _resolve(f.book, [(option, ref)], sheet)
    return _read_ref(f.book, ref, option, area)


def _xlsx_copy(book: Any, out: Path | None, force: bool, title: str,
               blocks: Sequence[tuple[str, Sequence[Sequence[Any]]]]) -> None:
    """A copy of the workbook with one new sheet of result tables."""
    from xlbridge.book import writer
    from xlbridge.book.safety import check_output

    if out is None:
        raise UsageError("--format xlsx writes a copy of the workbook: give --out FILE.xlsx")
    src = book.path
    want = ".xlsx" if src.suffix.lower() == ".csv" else src.suffix.lower()
    if out.suffix.lower() != want:
        raise UsageError(f"--out {out.name}: the copy of {src.name} must end in {want}")
    check_output(out, force=force, inputs=[src])
    if book.kind == "csv":
        sheet = book.sheet_names[0]
        n_rows, n_cols = book.used_extent(sheet)
        from xlbridge.book.refs import Area

        rows = book.read_area(Area(sheet, 1, 1, max(n_rows, 1), max(n_cols, 1)))
        wb = writer.new_workbook_from_rows(sheet, rows)
    else:
        wb = writer.load_for_copy(src)
    name = writer.add_result_sheet(wb, title, blocks)
    writer.save_copy(wb, out, force=force, inputs=[src])
    info(f"wrote {out} (copy of {src.name} with sheet {name!r})")
    lost = writer.losses_in(src)
    if lost:
        info("note: " + writer.OPENPYXL_LOSSES + " This workbook has: " + ", ".join(lost) + ".")


# --- fit ---------------------------------------------------------------------------------------


def _configure_fit(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_fit(args: argparse.Namespace) -> int:
    from xlbridge import cells

    f = _fit_from_args(args)
    res, opts = f.result, f.inp.options
    with_header = opts.replace(header=True)
    coefs = cells.coef_table(res, with_header)
    stats = cells.stats_table(res, with_header)
    equation = cells.equation_text(res, with_header)[0][0]
    if args.format == "json":
        emit(_json_text(res.to_dict()), args.out, args.force, [f.book.path])
    elif args.format == "csv":  # the worksheet functions' tables (header=no respected)
        emit(_csv_text([cells.coef_table(res, opts), cells.stats_table(res, opts)]),
             args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        src = f"{f.y_area.label()} on {f.x_area.label()}"
        _xlsx_copy(f.book, args.out, args.force, "xlbridge fit", [
            (f"xlbridge fit of {src}, model {res.spec.spec}", [["equation", equation]]),
            ("coefficients", cells.coef_table(res, opts)),
            ("statistics", cells.stats_table(res, opts))])
    else:
        head = (f"xlbridge fit: {f.y_area.label()} on {f.x_area.label()} in "
                f"{f.book.path.name}, model {res.spec.spec}\n"
                f"rows used {res.stats.n_used}, dropped {res.n_dropped}\n\n")
        stat_rows = [r for r in stats if r[0] != "note"]
        notes = [r[1] for r in stats if r[0] == "note"]
        text = (head + render_table(coefs) + "\n\n" + render_table(stat_rows) + "\n\n"
                + f"equation: {equation}\n"
                + "".join(f"note: {n}\n" for n in notes))
        emit(text, args.out, args.force, [f.book.path])
    return EXIT_OK


# --- predict -----------------------------------------------------------------------------------


def _configure_predict(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--new-x", required=True, metavar="REF",
                   help="cells of the points to predict at (one row per point)")
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_predict(args: argparse.Namespace) -> int:
    from xlbridge import cells
    from xlbridge.cells import PREDICT_COLUMNS

    f = _fit_from_args(args)
    nx_area, new_x = _read_points(f, args, "new-x", args.new_x)
    opts = f.inp.options
    try:
        table = cells.predict_table(f.result, new_x, opts.replace(header=True))
    except cells.CellError as exc:
        raise UsageError(f"--new-x {args.new_x}: {exc}") from None
    shown = table if opts.header else table[1:]
    if args.format == "json":
        rows = [{k: (None if v == "" else v) for k, v in zip(PREDICT_COLUMNS, r)}
                for r in table[1:]]
        doc = {"model": f.result.to_dict()["model"], "level": f.result.level,
               "new_x": nx_area.label(), "predictions": rows}
        emit(_json_text(doc), args.out, args.force, [f.book.path])
    elif args.format == "csv":
        emit(_csv_text([shown]), args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        _xlsx_copy(f.book, args.out, args.force, "xlbridge predict", [
            (f"xlbridge predictions at {nx_area.label()} from {f.y_area.label()} on "
             f"{f.x_area.label()}, model {f.result.spec.spec}", shown)])
    else:
        head = (f"xlbridge predict: {f.y_area.label()} on {f.x_area.label()}, model "
                f"{f.result.spec.spec}, at {nx_area.label()} (level {f.result.level:g})\n\n")
        emit(head + render_table(table) + "\n", args.out, args.force, [f.book.path])
    return EXIT_OK


# --- recalc ------------------------------------------------------------------------------------


def _configure_recalc(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--out", type=Path, required=True, metavar="COPY",
                   help="the copy to write, with the XB_ results as values")
    p.add_argument("--force", action="store_true", help="replace COPY if it exists")
    p.add_argument("--format", choices=["table", "json"], default="table",
                   help="summary format (default table)")


def _cell_rows(evaluation: Any) -> list[dict[str, Any]]:
    rows = []
    for x in evaluation.cells:
        out = x.output_area()
        rows.append({"cell": x.label, "function": x.function,
                     "status": "ok" if x.ok else "error",
                     "range": out.label() if x.ok else x.label,
                     "message": None if x.ok else x.message})
    return rows


def _run_recalc(args: argparse.Namespace) -> int:
    from xlbridge.book import writer
    from xlbridge.book.safety import check_output
    from xlbridge.runner.recalc import evaluate_book
    from xlbridge.runner.write import write_results

    book = _open(args.book)
    src = book.path
    if book.kind == "csv":
        raise UsageError(f"{src.name} is a CSV file; recalc needs the .xlsx or .xlsm workbook")
    if args.out.suffix.lower() != src.suffix.lower():
        raise UsageError(f"--out {args.out.name}: the copy of {src.name} must end in "
                         f"{src.suffix.lower()}")
    check_output(args.out, force=args.force, inputs=[src])
    wb = writer.load_for_copy(src)
    progress = _Progress("recalc")
    try:
        evaluation = evaluate_book(book, wb, progress)
    finally:
        progress.close()
    if not evaluation.cells:
        info(f"xlbridge: no XB_ formulas found in {src.name}; nothing written")
        return EXIT_OK
    report = write_results(evaluation, wb)
    writer.save_copy(wb, args.out, force=args.force, inputs=[src])
    failed = evaluation.failed
    lost = writer.losses_in(src)
    if args.format == "json":
        doc = {"book": str(src), "out": str(args.out), "cells_found": len(evaluation.cells),
               "evaluated": len(evaluation.cells) - len(failed), "errors": len(failed),
               "cells": _cell_rows(evaluation), "not_kept_by_copy": lost,
               "note": writer.OPENPYXL_LOSSES}
        sys.stdout.write(_json_text(doc))
    else:
        lines = [f"xlbridge recalc: {src.name} -> {args.out}",
                 f"  XB_ cells found: {len(evaluation.cells)}, evaluated: "
                 f"{len(evaluation.cells) - len(failed)}, errors: {len(failed)}"]
        lines += [f"  {x.label} {x.function}: {x.message}" for x in failed]
        lines.append("  results are written as values in the copy (openpyxl cannot store a "
                     "formula together with its value)")
        if report.plain_multi:
            lines.append(f"  {report.plain_multi} plain formula(s) gave a table: written in "
                         "full; a spreadsheet program may show only the first value of a "
                         "plain formula, so enter it as an array formula over its range")
        lines.append("  note: " + writer.OPENPYXL_LOSSES
                     + (" This workbook has: " + ", ".join(lost) + "." if lost else ""))
        print("\n".join(lines))
    return EXIT_FAIL if failed else EXIT_OK


# --- pin / verify ------------------------------------------------------------------------------


def _configure_pin(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--out", type=Path, required=True, metavar="PINS.json",
                   help="the pin file to write")
    p.add_argument("--force", action="store_true", help="replace the pin file if it exists")


def _evaluate_for_pins(path: str, what: str) -> Any:
    from xlbridge.runner.recalc import evaluate_book

    book = _open(path)
    progress = _Progress(what)
    try:
        return evaluate_book(book, None, progress)
    finally:
        progress.close()


def _run_pin(args: argparse.Namespace) -> int:
    from xlbridge import __version__
    from xlbridge.book.safety import check_output
    from xlbridge.runner.pins import pins_document

    check_output(args.out, force=args.force, inputs=[Path(args.book)])
    evaluation = _evaluate_for_pins(args.book, "pin")
    if not evaluation.cells:
        raise UsageError(f"no XB_ formulas found in {Path(args.book).name}; nothing to pin")
    doc = pins_document(evaluation, __version__)
    emit(_json_text(doc), args.out, args.force, [evaluation.book.path])
    failed = evaluation.failed
    print(f"xlbridge pin: {len(evaluation.cells)} XB_ results of {evaluation.book.path.name} "
          f"pinned to {args.out}" + (f" ({len(failed)} are error messages)" if failed else ""))
    for x in failed:
        info(f"  warning: {x.label} {x.function}: {x.message}")
    return EXIT_OK


def _configure_verify(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--pins", type=Path, required=True, metavar="PINS.json",
                   help="pin file written by xlbridge pin")
    p.add_argument("--rtol", type=float, default=1e-9,
                   help="relative tolerance for numbers (default 1e-9)")
    p.add_argument("--atol", type=float, default=0.0,
                   help="absolute tolerance for numbers (default 0)")
    p.add_argument("--format", choices=["table", "json"], default="table",
                   help="report format (default table)")


def _run_verify(args: argparse.Namespace) -> int:
    from xlbridge.runner.pins import compare, file_sha256, load_pins

    if not (args.rtol >= 0 and math.isfinite(args.rtol)) or not (
            args.atol >= 0 and math.isfinite(args.atol)):
        raise UsageError("--rtol and --atol must be finite numbers >= 0")
    pins = load_pins(args.pins)
    evaluation = _evaluate_for_pins(args.book, "verify")
    drift = compare(pins, evaluation, rtol=args.rtol, atol=args.atol)
    same_file = pins.get("workbook_sha256") == file_sha256(evaluation.book.path)
    if args.format == "json":
        doc = {"book": str(evaluation.book.path), "pins": str(args.pins), "ok": drift.ok,
               "rtol": args.rtol, "atol": args.atol, "cells_checked": drift.cells_checked,
               "cells_drifted": drift.cells_drifted, "values_checked": drift.values_checked,
               "workbook_unchanged": same_file, "cells": drift.records,
               "differences": [ln.strip() for ln in drift.lines]}
        sys.stdout.write(_json_text(doc))
    else:
        name = evaluation.book.path.name
        if drift.ok:
            print(f"xlbridge verify: {name}: all {drift.cells_checked} pinned XB_ results "
                  f"hold ({drift.values_checked} values, rtol {args.rtol:g}, atol "
                  f"{args.atol:g})")
        else:
            print(f"xlbridge verify: {name}: {drift.cells_drifted} of {drift.cells_checked} "
                  f"XB_ results differ from {args.pins.name} (rtol {args.rtol:g}, atol "
                  f"{args.atol:g})")
            print("\n".join(drift.lines))
        if not same_file:
            print("  (the workbook file differs from the one pinned)")
    return EXIT_OK if drift.ok else EXIT_FAIL


# --- degrees / checks / rows / optimum / slope -------------------------------------------------


def _emit_tables(args: argparse.Namespace, f: _Fitted, command: str, table: list[list[Any]],
                 doc: Any, extra: str = "") -> int:
    """Show one result table (header row first) as table, json, csv or an xlsx copy."""
    shown = table if f.inp.options.header else table[1:]
    src = f"{f.y_area.label()} on {f.x_area.label()}"
    if args.format == "json":
        emit(_json_text(doc), args.out, args.force, [f.book.path])
    elif args.format == "csv":
        emit(_csv_text([shown]), args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        _xlsx_copy(f.book, args.out, args.force, f"xlbridge {command}",
                   [(f"xlbridge {command} of {src}{extra}", shown)])
    else:
        body = [r for r in table if not (len(r) > 1 and str(r[0]).startswith("note:"))]
        notes = [r[0] for r in table if str(r[0]).startswith("note:")]
        head = f"xlbridge {command}: {src} in {f.book.path.name}{extra}\n\n"
        emit(head + render_table(body) + "\n" + "".join(f"{n}\n" for n in notes), args.out,
             args.force, [f.book.path])
    return EXIT_OK


def _model_failure(fn: Callable[[], Any]) -> Any:
    from xlbridge.cells import CellError
    from xlbridge.engine import ModelError

    try:
        return fn()
    except (CellError, ModelError) as exc:
        raise Failure(str(exc)) from None


def _configure_degrees(p: argparse.ArgumentParser) -> None:
    add_data_options(p, model_required=False)
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree to try, 1-10 (default 5)")
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_degrees(args: argparse.Namespace) -> int:
    from xlbridge.cells import degrees_table
    from xlbridge.engine import scan_degrees

    f = _fit_from_args(args, model=1)
    inp = f.inp
    opts = inp.options
    scan = _model_failure(lambda: scan_degrees(
        inp.y, inp.x[:, 0] if inp.x.shape[1] == 1 else inp.x, args.max_degree,
        folds=opts.folds, weights=inp.weights, **opts.fit_kwargs()))
    table = degrees_table(scan, opts.replace(header=True))
    return _emit_tables(args, f, "degrees", table, scan.to_dict(),
                        f", degrees 1-{args.max_degree}")


def _configure_model_table(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_checks(args: argparse.Namespace) -> int:
    from xlbridge.cells import checks_table
    from xlbridge.engine import checks

    f = _fit_from_args(args)
    table = checks_table(f.result, f.inp.options.replace(header=True))
    doc = {"model": f.result.to_dict()["model"],
           "checks": [c.to_dict() for c in checks(f.result)]}
    code = _emit_tables(args, f, "checks", table, doc, f", model {f.result.model_text}")
    return code


def _run_rows(args: argparse.Namespace) -> int:
    from xlbridge.cells import rows_table
    from xlbridge.engine import row_diagnostics

    f = _fit_from_args(args)
    table = rows_table(f.result, f.inp.options.replace(header=True))
    doc = {"model": f.result.to_dict()["model"], "rows": row_diagnostics(f.result).to_dict()}
    return _emit_tables(args, f, "rows", table, doc, f", model {f.result.model_text}")


def _run_optimum(args: argparse.Namespace) -> int:
    from xlbridge.cells import optimum_table
    from xlbridge.engine import optimum

    f = _fit_from_args(args)
    opt = _model_failure(lambda: optimum(f.result))
    table = optimum_table(f.result, f.inp.options.replace(header=True))
    return _emit_tables(args, f, "optimum", table, opt.to_dict(),
                        f", model {f.result.model_text}")


def _configure_slope(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--at-x", required=True, metavar="REF",
                   help="cells of the points to take the slope at (one row per point)")
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_slope(args: argparse.Namespace) -> int:
    from xlbridge import cells
    from xlbridge.cells import slope_table
    from xlbridge.engine import slopes

    f = _fit_from_args(args)
    at_area, at = _read_points(f, args, "at-x", args.at_x)
    opts = f.inp.options
    try:
        table = slope_table(f.result, at, opts.replace(header=True))
        pts, good, _ = cells.new_points(f.result, at, opts)
    except cells.CellError as exc:
        raise UsageError(f"--at-x {args.at_x}: {exc}") from None
    doc = slopes(f.result, pts, opts.level).to_dict() if good.any() else {}
    return _emit_tables(args, f, "slope", table, doc, f", at {at_area.label()}")


# --- plot / report / demo ----------------------------------------------------------------------


PLOT_KINDS = ("curve", "residuals", "quantiles", "influence", "degrees", "contour")


def _configure_plot(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--out", type=Path, required=True, metavar="DIR",
                   help="folder for the figures (created if missing)")
    p.add_argument("--kind", action="append", choices=PLOT_KINDS,
                   help="which figure (repeatable; default: all that apply to the model)")
    p.add_argument("--svg", action="store_true", help="write SVG as well as PNG")
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree for the degree-scan figure (default 5)")
    p.add_argument("--force", action="store_true", help="replace figures that exist")


def _run_plot(args: argparse.Namespace) -> int:
    from xlbridge.engine import scan_degrees

    f = _fit_from_args(args)
    kinds = args.kind
    scan = None
    if f.result.spec.k == 1 and (not kinds or "degrees" in kinds):
        inp = f.inp
        scan = _model_failure(lambda: scan_degrees(
            inp.y, inp.x[:, 0], args.max_degree, folds=inp.options.folds,
            weights=inp.weights, **inp.options.fit_kwargs()))
    if kinds and "contour" in kinds and f.result.spec.k < 2:
        raise UsageError("--kind contour needs a model with two or more predictors")
    if kinds and "curve" in kinds and f.result.spec.k != 1:
        raise UsageError("--kind curve needs a model with one predictor; use contour")
    from xlbridge.plots import write_figures

    for kind in write_figures(f.result, args.out, kinds, svg=args.svg, force=args.force,
                              scan=scan):
        for suffix in (".png", ".svg") if args.svg else (".png",):
            print(f"wrote {args.out / (kind + suffix)}")
    return EXIT_OK


def _configure_report(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--out", type=Path, required=True, metavar="FILE.html",
                   help="the report to write")
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree of the degree scan (default 5; one predictor)")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


def _run_report(args: argparse.Namespace) -> int:
    from xlbridge.engine import scan_degrees
    from xlbridge.report import Source, build_report

    if args.out.suffix.lower() not in (".html", ".htm"):
        raise UsageError(f"--out {args.out.name}: the report is an .html file")
    f = _fit_from_args(args)
    scan = None
    if f.result.spec.k == 1:
        inp = f.inp
        scan = _model_failure(lambda: scan_degrees(
            inp.y, inp.x[:, 0], args.max_degree, folds=inp.options.folds,
            weights=inp.weights, **inp.options.fit_kwargs()))
    src = Source(file=f.book.path.name, y_ref=f.y_area.label(), x_ref=f.x_area.label(),
                 options=f.inp.options.to_text())
    emit(build_report(f.result, scan=scan, source=src), args.out, args.force, [f.book.path])
    return EXIT_OK


def _configure_demo(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", type=Path, default=Path("xlbridge-demo"), metavar="DIR",
                   help="folder to write into (default ./xlbridge-demo)")
    p.add_argument("--force", action="store_true", help="replace files of an earlier demo")


def _run_demo(args: argparse.Namespace) -> int:
    from xlbridge.demo import run_demo

    summary = run_demo(args.out, force=args.force)
    print(summary)
    return EXIT_OK


# --- groups ------------------------------------------------------------------------------------


def _configure_groups(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK",
                   help="the .xlsx, .xlsm or .csv file (only read); with --engine dask a "
                        "Parquet file or folder, or CSV files (globs allowed)")
    p.add_argument("--group", required=True, metavar="REF",
                   help="cells of the group of each row (with --engine dask: a column name)")
    p.add_argument("--y", required=True, metavar="REF",
                   help="cells of the response (with --engine dask: a column name)")
    p.add_argument("--x", required=True, metavar="REF",
                   help="cells of the predictor(s) (with --engine dask: column names, "
                        "comma-separated)")
    p.add_argument("--model", required=True, metavar="M",
                   help="degree 1-10, 'surface', 'linear', 'interact', or terms")
    p.add_argument("--options", default=None, metavar="TEXT",
                   help="level=0.95; intercept=yes; header=yes; names=auto")
    p.add_argument("--sheet", default=None, metavar="NAME",
                   help="sheet for references without one (default: the first sheet)")
    p.add_argument("--weights", default=None, metavar="REF",
                   help="cells (or, with --engine dask, the column) of positive weights")
    p.add_argument("--engine", choices=["local", "dask"], default="local",
                   help="local (default) or dask: a dataset larger than memory, on a cluster")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="with --engine dask: address of an existing Dask scheduler, e.g. "
                        "tcp://10.0.0.5:8786 (default: a local Dask)")
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_groups(args: argparse.Namespace) -> int:
    from xlbridge.cells import groups_fit, groups_table, parse_options

    if args.engine == "dask":
        from xlbridge.engine import ModelError
        from xlbridge.groups_dask import fit_groups_dask

        if args.format == "xlsx":
            raise UsageError("--engine dask writes table, json or csv, not an xlsx copy")
        opts = parse_options(args.options)
        xs = [c.strip() for c in args.x.split(",") if c.strip()]
        try:
            res = fit_groups_dask(args.book, args.group, args.y, xs, args.model,
                                  intercept=opts.intercept, level=opts.level,
                                  weights_col=args.weights, scheduler=args.scheduler)
        except ModelError as exc:
            raise UsageError(str(exc)) from None
        table = groups_table(res, opts.replace(header=True))
        if args.format == "json":
            emit(_json_text(res.to_dict()), args.out, args.force)
        elif args.format == "csv":
            emit(_csv_text([table if opts.header else table[1:]]), args.out, args.force)
        else:
            emit(f"xlbridge groups: {args.y} on {', '.join(xs)} by {args.group} in "
                 f"{args.book} (dask)\n\n" + render_table(table) + "\n", args.out, args.force)
        return EXIT_OK
    from xlbridge import cells

    book = _open(args.book)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    refs = [("group", args.group), ("y", args.y), ("x", args.x)]
    if args.weights:
        refs.append(("weights", args.weights))
    areas = _resolve(book, refs, sheet)
    values = [_read_ref(book, ref, what, a)[1] for (what, ref), a in zip(refs, areas)]
    try:
        res, opts, notes = groups_fit(values[0], values[1], values[2], args.model,
                                      args.options,
                                      weights=values[3] if len(values) > 3 else None)
    except (cells.CellError, cells.OptionsError) as exc:
        raise UsageError(str(exc)) from None
    table = groups_table(res, opts.replace(header=True), notes)
    shown = table if opts.header else table[1:]
    src = f"{areas[1].label()} on {areas[2].label()} by {areas[0].label()}"
    if args.format == "json":
        emit(_json_text(res.to_dict()), args.out, args.force, [book.path])
    elif args.format == "csv":
        emit(_csv_text([shown]), args.out, args.force, [book.path])
    elif args.format == "xlsx":
        _xlsx_copy(book, args.out, args.force, "xlbridge groups",
                   [(f"xlbridge groups: {src}", shown)])
    else:
        emit(f"xlbridge groups: {src} in {book.path.name}\n\n" + render_table(table) + "\n",
             args.out, args.force, [book.path])
    return EXIT_OK


# --- the command table ------------------------------------------------------------------------

COMMANDS: list[Command] = [
    Command("fit", "fit a model to workbook cells and show coefficients and statistics",
            "xlbridge fit prices.xlsx --y \"'Site data'!B:B\" --x \"'Site data'!A:A\" "
            "--model 2 --format json",
            _configure_fit, _run_fit),
    Command("predict", "fit, then predict with intervals at new x values",
            "xlbridge predict prices.xlsx --y Sales[Price] --x Sales[Size] --model 2 "
            "--new-x Quote!A2:A10",
            _configure_predict, _run_predict),
    Command("recalc", "evaluate every XB_ formula and write the results into a copy",
            "xlbridge recalc estimate.xlsx --out estimate-calculated.xlsx",
            _configure_recalc, _run_recalc),
    Command("pin", "record every XB_ result of a workbook in a pin file (for CI)",
            "xlbridge pin estimate.xlsx --out estimate.pins.json",
            _configure_pin, _run_pin),
    Command("verify", "recompute the XB_ results and compare them with a pin file",
            "xlbridge verify estimate.xlsx --pins estimate.pins.json --rtol 1e-9",
            _configure_verify, _run_verify),
    Command("degrees", "fit degrees 1..N, cross-validate, and recommend one",
            "xlbridge degrees costs.xlsx --y Data!C:C --x Data!B:B --max-degree 5",
            _configure_degrees, _run_degrees),
    Command("checks", "check the regression assumptions (verdicts ok / watch / problem)",
            "xlbridge checks costs.xlsx --y Data!C:C --x Data!B:B --model 2",
            _configure_model_table, _run_checks),
    Command("rows", "per-row residuals, leverage and Cook's distance, aligned with the data",
            "xlbridge rows costs.xlsx --y Data!C:C --x Data!B:B --model 2 --format csv",
            _configure_model_table, _run_rows),
    Command("optimum", "where the fitted curve or surface turns, with intervals",
            "xlbridge optimum margin.xlsx --y Data!D:D --x Data!B:C --model surface",
            _configure_model_table, _run_optimum),
    Command("slope", "marginal effect dy/dx at given points, with intervals",
            "xlbridge slope costs.xlsx --y Data!C:C --x Data!B:B --model 2 "
            "--at-x Model!A71:A76",
            _configure_slope, _run_slope),
    Command("plot", "write the figures of a fit (PNG, optionally SVG)",
            "xlbridge plot costs.xlsx --y Data!C:C --x Data!B:B --model 2 --out figures",
            _configure_plot, _run_plot),
    Command("report", "write a self-contained HTML report of a model",
            "xlbridge report costs.xlsx --y Data!C:C --x Data!B:B --model 2 "
            "--out model.html",
            _configure_report, _run_report),
    Command("groups", "fit the same model separately for every group (one row per group)",
            "xlbridge groups sales.xlsx --group Data!A:A --y Data!C:C --x Data!B:B --model 2",
            _configure_groups, _run_groups),
    Command("demo", "run the bundled example workbooks end to end (recalc, figures, reports)",
            "xlbridge demo --out xlbridge-demo",
            _configure_demo, _run_demo),
]


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"xlbridge: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    from xlbridge import __version__

    examples = "\n".join(f"  {c.example}" for c in COMMANDS)
    parser = _Parser(
        prog="xlbridge",
        description="Polynomial and second-order models for workbooks, without a "
                    "spreadsheet program. The input workbook is only read.",
        epilog=f"examples:\n{examples}\n\n{REF_HELP}.\n"
               "exit codes: 0 success, 1 drift or model failure, 2 usage or input error",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"xlbridge {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for c in COMMANDS:
        p = sub.add_parser(
            c.name, help=c.summary, description=c.summary[:1].upper() + c.summary[1:] + ".",
            epilog=f"example:\n  {c.example}\n\n{REF_HELP}.\n"
                   "exit codes: 0 success, 1 drift or model failure, 2 usage or input error",
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        c.configure(p)
        p.set_defaults(_command=c)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``xlbridge`` console command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    command: Command | None = getattr(args, "_command", None)
    if command is None:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    from xlbridge.book.safety import BookError

    try:
        return command.run(args)
    except (UsageError, BookError) as exc:
        return _fail(exc, EXIT_USAGE)
    except Failure as exc:
        return _fail(exc, EXIT_FAIL)
    except KeyboardInterrupt:
        info("xlbridge: interrupted; no output was left half-written")
        return 130
    except BrokenPipeError:  # e.g. "xlbridge fit ... | head": the reader stopped early
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - a message, never a traceback
        from xlbridge.book.refs import RefError
        from xlbridge.cells import OptionsError

        if isinstance(exc, (RefError, OptionsError)):
            return _fail(exc, EXIT_USAGE)
        return _fail(Exception(f"internal error ({type(exc).__name__}: {exc}); please "
                               "report it with the command that caused it"), EXIT_USAGE)


def _fail(exc: BaseException, code: int) -> int:
    text = " ".join(str(exc).split())
    if not text.lower().startswith("xlbridge:"):
        text = "xlbridge: " + text
    info(text)
    return code


if __name__ == "__main__":
    sys.exit(main())
