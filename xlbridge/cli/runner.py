"""Commands over a workbook's XB_ formulas: recalc, pin, verify."""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import Any

from .common import (
    EXIT_FAIL,
    EXIT_OK,
    Progress,
    UsageError,
    choice,
    emit,
    info,
    json_text,
    open_book,
    warn,
)

__all__ = ["configure_recalc", "run_recalc", "configure_pin", "run_pin", "configure_verify",
           "run_verify"]

SUMMARY_FORMATS = ("table", "json")


def _add_strict(p: argparse.ArgumentParser) -> None:
    p.add_argument("--strict", action="store_true",
                   help="an XB_ call whose y, x, weights or group ranges start or end on "
                        "different sheet rows fails (by default: a warning)")


def _evaluate(book: Any, what: str, strict: bool) -> Any:
    """Every XB_ formula of ``book`` evaluated, with a warning line for each call whose
    paired ranges sit on different sheet rows."""
    from xlbridge.runner.recalc import evaluate_book

    progress = Progress(what)
    try:
        evaluation = evaluate_book(book, None, progress, strict=strict)
    finally:
        progress.close()
    for x in evaluation.cells:
        if x.warning and x.ok:
            warn(f"{x.label} {x.function}: {x.warning}")
    return evaluation


def configure_recalc(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--out", type=Path, required=True, metavar="COPY",
                   help="the copy to write: the XB_ formulas with their results saved")
    p.add_argument("--values", action="store_true",
                   help="replace the XB_ formulas by their results (for readers without "
                        "the add-in)")
    p.add_argument("--force", action="store_true", help="replace COPY if it exists")
    p.add_argument("--format", type=choice(SUMMARY_FORMATS, "format"),
                   choices=list(SUMMARY_FORMATS), default="table",
                   help="summary format (default table)")
    _add_strict(p)


def _cell_rows(evaluation: Any, written: dict[str, str]) -> list[dict[str, Any]]:
    rows = []
    for x in evaluation.cells:
        rows.append({"cell": x.label, "function": x.function,
                     "status": "ok" if x.ok else "error",
                     "range": written.get(x.label, x.label),
                     "message": None if x.ok else x.message})
    return rows


def run_recalc(args: argparse.Namespace) -> int:
    from xlbridge.book.safety import check_output
    from xlbridge.runner.write import write_copy

    book = open_book(args.book)
    src = book.path
    if book.kind == "csv":
        raise UsageError(f"{src.name} is a CSV file; recalc needs the .xlsx or .xlsm workbook")
    if args.out.suffix.lower() != src.suffix.lower():
        raise UsageError(f"--out {args.out.name}: the copy of {src.name} must end in "
                         f"{src.suffix.lower()}")
    check_output(args.out, force=args.force, inputs=[src])
    evaluation = _evaluate(book, "recalc", args.strict)
    if not evaluation.cells:
        info(f"xlbridge: no XB_ formulas found in {src.name}; nothing written")
        return EXIT_OK
    report = write_copy(evaluation, args.out, values=args.values, force=args.force)
    failed = evaluation.failed
    kept = ("the XB_ formulas are replaced by their values" if args.values else
            "the XB_ formulas stay, with their results saved")
    if args.format == "json":
        doc = {"book": str(src), "out": str(args.out), "cells_found": len(evaluation.cells),
               "evaluated": len(evaluation.cells) - len(failed), "errors": len(failed),
               "cells": _cell_rows(evaluation, report.ranges), "values": args.values,
               "parts": report.package.to_dict() if report.package else None}
        sys.stdout.write(json_text(doc))
    else:
        lines = [f"xlbridge recalc: {src.name} -> {args.out}",
                 f"  XB_ cells found: {len(evaluation.cells)}, evaluated: "
                 f"{len(evaluation.cells) - len(failed)}, errors: {len(failed)}"]
        lines += [f"  {x.label} {x.function}: {x.message}" for x in failed]
        lines.append(f"  {kept}; every other part of the workbook is copied unchanged")
        if report.plain_multi and not args.values:
            lines.append(f"  {report.plain_multi} plain formula(s) give a table: the copy "
                         "saves the first value, as a spreadsheet program shows a plain "
                         "formula; enter it as an array formula over its range, or use "
                         "--values, to get the whole table")
        print("\n".join(lines))
    return EXIT_FAIL if failed else EXIT_OK


def configure_pin(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--out", type=Path, required=True, metavar="PINS.json",
                   help="the pin file to write")
    p.add_argument("--force", action="store_true", help="replace the pin file if it exists")
    _add_strict(p)


def run_pin(args: argparse.Namespace) -> int:
    from xlbridge import __version__
    from xlbridge.book.safety import check_output
    from xlbridge.runner.pins import pins_document

    check_output(args.out, force=args.force, inputs=[Path(args.book)])
    evaluation = _evaluate(open_book(args.book), "pin", args.strict)
    if not evaluation.cells:
        raise UsageError(f"no XB_ formulas found in {Path(args.book).name}; nothing to pin")
    doc = pins_document(evaluation, __version__)
    emit(json_text(doc), args.out, args.force, [evaluation.book.path])
    failed = evaluation.failed
    print(f"xlbridge pin: {len(evaluation.cells)} XB_ results of {evaluation.book.path.name} "
          f"pinned to {args.out}" + (f" ({len(failed)} are error messages)" if failed else ""))
    for x in failed:
        warn(f"{x.label} {x.function} pinned as an error message: {x.message}")
    return EXIT_OK


def configure_verify(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx or .xlsm workbook (only read)")
    p.add_argument("--pins", type=Path, required=True, metavar="PINS.json",
                   help="pin file written by xlbridge pin")
    p.add_argument("--rtol", type=float, default=1e-9,
                   help="relative tolerance for numbers (default 1e-9)")
    p.add_argument("--atol", type=float, default=0.0,
                   help="absolute tolerance for numbers (default 0)")
    p.add_argument("--format", type=choice(SUMMARY_FORMATS, "format"),
                   choices=list(SUMMARY_FORMATS), default="table",
                   help="report format (default table)")
    _add_strict(p)


def run_verify(args: argparse.Namespace) -> int:
    from xlbridge.runner.pins import compare, file_sha256, load_pins

    if not (args.rtol >= 0 and math.isfinite(args.rtol)) or not (
            args.atol >= 0 and math.isfinite(args.atol)):
        raise UsageError("--rtol and --atol must be finite numbers >= 0")
    pins = load_pins(args.pins)
    evaluation = _evaluate(open_book(args.book), "verify", args.strict)
    drift = compare(pins, evaluation, rtol=args.rtol, atol=args.atol)
    same_file = pins.get("workbook_sha256") == file_sha256(evaluation.book.path)
    if args.format == "json":
        doc = {"book": str(evaluation.book.path), "pins": str(args.pins), "ok": drift.ok,
               "rtol": args.rtol, "atol": args.atol, "cells_checked": drift.cells_checked,
               "cells_drifted": drift.cells_drifted, "values_checked": drift.values_checked,
               "workbook_unchanged": same_file, "cells": drift.records,
               "differences": [ln.strip() for ln in drift.lines]}
        sys.stdout.write(json_text(doc))
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
