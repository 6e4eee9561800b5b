"""Commands for cost-estimating relationships: card, plevels, candidates, learning.

A CER itself is fitted by ``fit`` (``--model power --options method=mupe``). Costs of
different years are brought to the options' ``base_year`` with ``--years REF --index REF``
on every command that fits (see ``common.add_base_year_options``).
"""

from __future__ import annotations

import argparse
from typing import Any

from .common import (
    EXIT_OK,
    Progress,
    UsageError,
    add_base_year_options,
    add_data_options,
    add_output_options,
    as_failure,
    as_usage,
    base_year_y,
    check_alignment,
    csv_text,
    emit,
    emit_tables,
    fit_from_args,
    json_text,
    open_book,
    read_points,
    read_ref,
    render_table,
    resolve,
    warn,
    xlsx_copy,
)

__all__ = ["configure_card", "run_card", "configure_plevels", "run_plevels",
           "configure_candidates", "run_candidates", "configure_learning", "run_learning"]

FORMATS = ("table", "json", "csv", "xlsx")


def configure_card(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_base_year_options(p)
    add_output_options(p, FORMATS)


def run_card(args: argparse.Namespace) -> int:
    from xlbridge.cells.cer import card_facts, card_table
    from xlbridge.engine import CerResult

    f = fit_from_args(args, cer=True)
    if not isinstance(f.result, CerResult):
        raise UsageError("the CER card documents a power, factor or exponential model with a "
                         "method: --model power --options method=mupe")
    opts = f.inp.options
    facts = card_facts(f.result, f.inp.key(), opts, f.inp.drops)
    table = card_table(facts, opts.replace(header=True))
    return emit_tables(args, f, "card", table, facts.to_dict() | {"fit": f.result.to_dict()})


def configure_plevels(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--new-x", required=True, metavar="REF",
                   help="cells of the points of the new estimates (one row per point)")
    add_base_year_options(p)
    add_output_options(p, FORMATS)


def run_plevels(args: argparse.Namespace) -> int:
    from xlbridge.cells.cer import plevels_table
    from xlbridge.engine import percentiles

    f = fit_from_args(args, cer=True)
    nx_area, new_x = read_points(f, args, "new-x", args.new_x)
    opts = f.inp.options
    with as_usage(f"--new-x {args.new_x}: "):
        table = plevels_table(f.result, new_x, opts.replace(header=True))
    from xlbridge.cells.tables import new_points

    doc: dict[str, Any] = {"new_x": nx_area.label(), "levels": list(opts.levels)}
    pts, good, _ = new_points(f.result, new_x, opts)
    if good.any():  # the usable rows of new_x, in order
        doc |= percentiles(f.result, pts, opts.levels).to_dict()
        pred = f.result.predict(pts)
        doc["estimate"] = [float(v) for v in pred.fitted]
        rows = [i + 1 for i in range(len(good)) if good[i]]
        for row, out in zip(rows, pred.extrapolated):
            if out:
                warn(f"--new-x row {row} lies outside the data's relevant range: its "
                     "percentiles are an extrapolation")
    return emit_tables(args, f, "plevels", table, doc, f", at {nx_area.label()}")


def configure_candidates(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx, .xlsm or .csv file (only read)")
    p.add_argument("--y", required=True, metavar="REF", help="cells of the costs")
    p.add_argument("--drivers", required=True, metavar="REF",
                   help="cells of the candidate drivers (columns; a text first row names them)")
    p.add_argument("--options", default=None, metavar="TEXT",
                   help="e.g. 'forms=power,exponential; methods=log,mupe,zmpe; "
                        "max_drivers=2; level=0.95; vif_limit=10'")
    p.add_argument("--sheet", default=None, metavar="NAME",
                   help="sheet for references without one (default: the first sheet)")
    add_base_year_options(p)
    add_output_options(p, FORMATS)


def run_candidates(args: argparse.Namespace) -> int:
    from xlbridge.cells.cer import candidates_fit, candidates_table

    book = open_book(args.book)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    y_area, d_area = resolve(book, [("y", args.y), ("drivers", args.drivers)], sheet)
    y = read_ref(book, args.y, "y", y_area)[1]
    x = read_ref(book, args.drivers, "drivers", d_area)[1]
    y, options = base_year_y(args, book, sheet, y)
    bar = Progress("candidates")
    try:
        with as_usage():
            from xlbridge.cells import prepare_fit

            prepare_fit(y, x, "linear", options)  # cells and options that cannot be read
        with as_failure():
            table, opts = candidates_fit(y, x, options,
                                         progress=lambda d, t: bar(d, t, f"{d}/{t}"))
    finally:
        bar.close()
    for r in table.rows:
        if r.verdict == "failed":
            warn(f"candidate {r.form} {r.method} on {', '.join(r.drivers)} failed: {r.note}")
    rows = candidates_table(table, opts.replace(header=True))
    src = f"{y_area.label()} by {d_area.label()}"
    return _emit(args, book, "candidates", src, rows, table.to_dict(), opts.header)


def configure_learning(p: argparse.ArgumentParser) -> None:
    p.add_argument("book", metavar="BOOK", help="the .xlsx, .xlsm or .csv file (only read)")
    p.add_argument("--units", required=True, metavar="REF",
                   help="unit numbers (one column), or the first and last unit of each lot "
                        "(two columns)")
    p.add_argument("--costs", required=True, metavar="REF",
                   help="cost of each unit, or each lot's total cost")
    p.add_argument("--at", default=None, metavar="REF",
                   help="unit numbers n (one column: unit n and units 1..n) or pairs m, n "
                        "(two columns: units m..n) to cost")
    p.add_argument("--options", default=None, metavar="TEXT",
                   help="e.g. 'theory=cumulative; level=0.9'")
    p.add_argument("--sheet", default=None, metavar="NAME",
                   help="sheet for references without one (default: the first sheet)")
    add_output_options(p, FORMATS)


def run_learning(args: argparse.Namespace) -> int:
    from xlbridge.cells.cer import learning_fit, learning_table, lot_costs

    book = open_book(args.book)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    refs = [("units", args.units), ("costs", args.costs)]
    if args.at:
        refs.append(("at", args.at))
    areas = resolve(book, refs, sheet)
    check_alignment([(*refs[i], areas[i]) for i in (1, 0)], getattr(args, "strict", False))
    units = read_ref(book, args.units, "units", areas[0])[1]
    costs = read_ref(book, args.costs, "costs", areas[1])[1]
    at = read_ref(book, args.at, "at", areas[2])[1] if args.at else None
    with as_usage():
        curve, opts, drops = learning_fit(units, costs, args.options, top_row=areas[1].r1)
        rows = learning_table(curve, at, opts.replace(header=True), drops=drops)
        costs = lot_costs(curve, at) if at is not None else []
    if drops:
        from xlbridge.cells.values import drops_text

        warn(f"{drops_text(drops)} of --units/--costs left out of the fit")
    doc = curve.to_dict() | {"costs": [{"first_unit": c.first, "last_unit": c.last,
                                        "cost": c.cost} for c in costs]}
    src = f"{areas[1].label()} by {areas[0].label()}"
    return _emit(args, book, "learning", src, rows, doc, opts.header)


def _emit(args: argparse.Namespace, book: Any, command: str, src: str, table: list[list[Any]],
          doc: Any, header: bool) -> int:
    """One table as table, json, csv or an xlsx copy (for commands without a Fitted)."""
    from xlbridge.cells.tables import split_notes

    shown = table if header else table[1:]
    if args.format == "json":
        emit(json_text(doc), args.out, args.force, [book.path])
    elif args.format == "csv":
        emit(csv_text([shown]), args.out, args.force, [book.path])
    elif args.format == "xlsx":
        xlsx_copy(book, args.out, args.force, f"xlbridge {command}",
                  [(f"xlbridge {command} of {src}", shown)])
    else:
        body, notes = split_notes(table)
        head = f"xlbridge {command}: {src} in {book.path.name}\n\n"
        emit(head + render_table(body) + "\n" + "".join(f"note: {n}\n" for n in notes),
             args.out, args.force, [book.path])
    return EXIT_OK
