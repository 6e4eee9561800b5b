"""The groups command: one model per group, locally or on a Dask cluster."""

from __future__ import annotations

import argparse

from .common import (
    EXIT_OK,
    UsageError,
    add_output_options,
    add_reading_options,
    as_usage,
    check_alignment,
    choice,
    csv_text,
    emit,
    json_text,
    open_book,
    read_ref,
    render_table,
    resolve,
    xlsx_copy,
)

__all__ = ["configure_groups", "run_groups"]

ENGINES = ("local", "dask")


def configure_groups(p: argparse.ArgumentParser) -> None:
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
    p.add_argument("--engine", type=choice(ENGINES, "engine"), choices=list(ENGINES),
                   default="local",
                   help="local (default) or dask: a dataset larger than memory, on a cluster")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="with --engine dask: address of an existing Dask scheduler, e.g. "
                        "tcp://10.0.0.5:8786 (default: a local Dask)")
    add_reading_options(p)
    add_output_options(p, ("table", "json", "csv", "xlsx"))


def _run_dask(args: argparse.Namespace) -> int:
    from xlbridge.cells import groups_table, parse_options
    from xlbridge.groups_dask import fit_groups_dask

    if args.format == "xlsx":
        raise UsageError("--engine dask writes table, json or csv, not an xlsx copy")
    xs = [c.strip() for c in args.x.split(",") if c.strip()]
    with as_usage():
        opts = parse_options(args.options)
        res = fit_groups_dask(args.book, args.group, args.y, xs, args.model,
                              intercept=opts.intercept, level=opts.level,
                              weights_col=args.weights, scheduler=args.scheduler)
    table = groups_table(res, opts.replace(header=True))
    if args.format == "json":
        emit(json_text(res.to_dict()), args.out, args.force)
    elif args.format == "csv":
        emit(csv_text([table if opts.header else table[1:]]), args.out, args.force)
    else:
        emit(f"xlbridge groups: {args.y} on {', '.join(xs)} by {args.group} in "
             f"{args.book} (dask)\n\n" + render_table(table) + "\n", args.out, args.force)
    return EXIT_OK


def run_groups(args: argparse.Namespace) -> int:
    if args.engine == "dask":
        return _run_dask(args)
    from xlbridge.cells import groups_fit, groups_table

    book = open_book(args.book, args)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    refs = [("group", args.group), ("y", args.y), ("x", args.x)]
    if args.weights:
        refs.append(("weights", args.weights))
    areas = resolve(book, refs, sheet)
    order = [1, 0, *range(2, len(refs))]  # named against y, as in the other commands
    check_alignment([(*refs[i], areas[i]) for i in order], args.strict)
    values = [read_ref(book, ref, what, a)[1] for (what, ref), a in zip(refs, areas)]
    with as_usage():
        res, opts, notes = groups_fit(values[0], values[1], values[2], args.model,
                                      args.options,
                                      weights=values[3] if len(values) > 3 else None)
    table = groups_table(res, opts.replace(header=True), notes)
    shown = table if opts.header else table[1:]
    src = f"{areas[1].label()} on {areas[2].label()} by {areas[0].label()}"
    if args.format == "json":
        emit(json_text({**res.to_dict(), "notes": [str(n) for n in notes]}), args.out,
             args.force, [book.path])
    elif args.format == "csv":
        emit(csv_text([shown]), args.out, args.force, [book.path])
    elif args.format == "xlsx":
        xlsx_copy(book, args.out, args.force, "xlbridge groups",
                  [(f"xlbridge groups: {src}", shown)])
    else:
        emit(f"xlbridge groups: {src} in {book.path.name}\n\n" + render_table(table) + "\n",
             args.out, args.force, [book.path])
    return EXIT_OK
