"""Commands that fit one model and show a table of it: fit, predict, degrees, checks,
rows, optimum, slope."""

from __future__ import annotations

import argparse

from .common import (
    EXIT_OK,
    add_base_year_options,
    add_data_options,
    add_output_options,
    as_failure,
    as_usage,
    csv_text,
    emit,
    emit_tables,
    fit_from_args,
    json_text,
    read_points,
    render_table,
    xlsx_copy,
)

__all__ = ["configure_fit", "run_fit", "configure_predict", "run_predict",
           "configure_degrees", "run_degrees", "configure_model_table", "run_checks",
           "run_rows", "run_optimum", "configure_slope", "run_slope"]

FORMATS = ("table", "json", "csv", "xlsx")


def configure_fit(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_base_year_options(p)
    add_output_options(p, FORMATS)


def run_fit(args: argparse.Namespace) -> int:
    from xlbridge import cells
    from xlbridge.cells.cerrows import model_title, rows_used
    from xlbridge.cells.tables import split_notes

    f = fit_from_args(args, cer=True)
    res, opts = f.result, f.inp.options
    with_header = opts.replace(header=True)
    coefs = cells.coef_table(res, with_header)
    stats = cells.stats_table(res, with_header)
    equation = cells.equation_text(res, with_header)[0][0]
    if args.format == "json":
        emit(json_text(res.to_dict()), args.out, args.force, [f.book.path])
    elif args.format == "csv":  # the worksheet functions' tables (header=no respected)
        emit(csv_text([cells.coef_table(res, opts), cells.stats_table(res, opts)]),
             args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        src = f"{f.y_area.label()} on {f.x_area.label()}"
        xlsx_copy(f.book, args.out, args.force, "xlbridge fit", [
            (f"xlbridge fit of {src}, model {model_title(res)}", [["equation", equation]]),
            ("coefficients", cells.coef_table(res, opts)),
            ("statistics", cells.stats_table(res, opts))])
    else:
        head = (f"xlbridge fit: {f.y_area.label()} on {f.x_area.label()} in "
                f"{f.book.path.name}, model {model_title(res)}\n"
                f"rows used {rows_used(res)}, dropped {res.n_dropped}\n\n")
        coef_rows, coef_notes = split_notes(coefs)
        stat_rows, notes = split_notes(stats)
        text = (head + render_table(coef_rows) + "\n\n" + render_table(stat_rows) + "\n\n"
                + f"equation: {equation}\n"
                + "".join(f"note: {n}\n" for n in coef_notes + notes))
        emit(text, args.out, args.force, [f.book.path])
    return EXIT_OK


def configure_predict(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--new-x", required=True, metavar="REF",
                   help="cells of the points to predict at (one row per point)")
    add_output_options(p, FORMATS)


def run_predict(args: argparse.Namespace) -> int:
    from xlbridge import cells
    from xlbridge.cells import PREDICT_COLUMNS
    from xlbridge.cells.cerrows import model_title

    f = fit_from_args(args, cer=True)
    nx_area, new_x = read_points(f, args, "new-x", args.new_x)
    opts = f.inp.options
    with as_usage(f"--new-x {args.new_x}: "):
        table = cells.predict_table(f.result, new_x, opts.replace(header=True))
    shown = table if opts.header else table[1:]
    if args.format == "json":
        rows = [{k: (None if v == "" else v) for k, v in zip(PREDICT_COLUMNS, r)}
                for r in table[1:]]
        full = f.result.to_dict()
        model = full.get("model") or {k: full[k] for k in ("form", "method", "equation")}
        doc = {"model": model, "level": f.result.level,
               "new_x": nx_area.label(), "predictions": rows,
               "notes": [str(n) for n in f.result.notes]}
        emit(json_text(doc), args.out, args.force, [f.book.path])
    elif args.format == "csv":
        emit(csv_text([shown]), args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        xlsx_copy(f.book, args.out, args.force, "xlbridge predict", [
            (f"xlbridge predictions at {nx_area.label()} from {f.y_area.label()} on "
             f"{f.x_area.label()}, model {model_title(f.result)}", shown)])
    else:
        head = (f"xlbridge predict: {f.y_area.label()} on {f.x_area.label()}, model "
                f"{model_title(f.result)}, at {nx_area.label()} (level {f.result.level:g})\n\n")
        emit(head + render_table(table) + "\n", args.out, args.force, [f.book.path])
    return EXIT_OK


def configure_degrees(p: argparse.ArgumentParser) -> None:
    add_data_options(p, model_required=False)
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree to try, 1-10 (default 5)")
    add_output_options(p, FORMATS)


def run_degrees(args: argparse.Namespace) -> int:
    from xlbridge.cells import degrees_table
    from xlbridge.engine import scan_degrees

    f = fit_from_args(args, model=1)
    inp = f.inp
    opts = inp.options
    with as_failure():
        scan = scan_degrees(inp.y, inp.x[:, 0] if inp.x.shape[1] == 1 else inp.x,
                            args.max_degree, folds=opts.folds, weights=inp.weights,
                            **opts.polynomial_kwargs())
    table = degrees_table(scan, opts.replace(header=True))
    return emit_tables(args, f, "degrees", table, scan.to_dict(),
                       f", degrees 1-{args.max_degree}")


def configure_model_table(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_output_options(p, FORMATS)


def run_checks(args: argparse.Namespace) -> int:
    from xlbridge.cells import checks_table
    from xlbridge.cells.prepare import sheet_row
    from xlbridge.engine import checks

    f = fit_from_args(args)
    table = checks_table(f.result, f.inp.options.replace(header=True), f.first_row)
    if f.labels:  # the label of the row a check names, after its sheet row
        for row, c in zip(table[1:], checks(f.result)):
            if c.row is not None and f.labels[c.row - 1]:
                row[-1] += f" ({f.labels[c.row - 1]})"
    found = [c.to_dict() for c in checks(f.result)]
    for c in found:
        c["sheet_row"] = None if c["row"] is None else sheet_row(c["row"], f.first_row)
        c["sheet_span"] = None if c["span"] is None else [sheet_row(r, f.first_row)
                                                          for r in c["span"]]
    doc = {"model": f.result.to_dict()["model"], "checks": found}
    return emit_tables(args, f, "checks", table, doc, f", model {f.result.model_text}")


def run_rows(args: argparse.Namespace) -> int:
    from xlbridge.cells import rows_table
    from xlbridge.cells.prepare import sheet_row
    from xlbridge.engine import row_diagnostics

    f = fit_from_args(args)
    table = rows_table(f.result, f.inp.options.replace(header=True), first_row=f.first_row,
                       labels=f.labels, row_codes=f.inp.row_codes)
    rows = row_diagnostics(f.result).to_dict()
    rows["sheet_row"] = [sheet_row(i + 1, f.first_row) for i in range(len(f.inp.y))]
    if f.labels is not None:
        rows["label"] = f.labels
    doc = {"model": f.result.to_dict()["model"], "rows": rows}
    return emit_tables(args, f, "rows", table, doc, f", model {f.result.model_text}")


def run_optimum(args: argparse.Namespace) -> int:
    from xlbridge.cells import optimum_table
    from xlbridge.engine import optimum

    f = fit_from_args(args)
    with as_failure():
        opt = optimum(f.result)
    table = optimum_table(f.result, f.inp.options.replace(header=True))
    return emit_tables(args, f, "optimum", table, opt.to_dict(),
                       f", model {f.result.model_text}")


def configure_slope(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--at-x", required=True, metavar="REF",
                   help="cells of the points to take the slope at (one row per point)")
    add_output_options(p, FORMATS)


def run_slope(args: argparse.Namespace) -> int:
    from xlbridge import cells
    from xlbridge.cells import slope_table
    from xlbridge.engine import slopes

    f = fit_from_args(args)
    at_area, at = read_points(f, args, "at-x", args.at_x)
    opts = f.inp.options
    with as_usage(f"--at-x {args.at_x}: "):
        table = slope_table(f.result, at, opts.replace(header=True))
        pts, good, _ = cells.new_points(f.result, at, opts)
    doc = slopes(f.result, pts, opts.level).to_dict() if good.any() else {}
    return emit_tables(args, f, "slope", table, doc, f", at {at_area.label()}")
