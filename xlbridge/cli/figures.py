"""Commands that draw or write documents: plot, report, demo."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from .common import (
    EXIT_OK,
    Fitted,
    UsageError,
    add_base_year_options,
    add_data_options,
    as_failure,
    choice,
    emit,
    fit_from_args,
)

__all__ = ["PLOT_KINDS", "configure_plot", "run_plot", "configure_report", "run_report",
           "configure_demo", "run_demo"]

PLOT_KINDS = ("curve", "residuals", "quantiles", "influence", "degrees", "contour")


def configure_plot(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    p.add_argument("--out", type=Path, required=True, metavar="DIR",
                   help="folder for the figures (created if missing)")
    p.add_argument("--kind", action="append", type=choice(PLOT_KINDS, "figure kind"),
                   choices=PLOT_KINDS,
                   help="which figure (repeatable; default: all that apply to the model)")
    p.add_argument("--svg", action="store_true", help="write SVG as well as PNG")
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree for the degree-scan figure (default 5)")
    p.add_argument("--force", action="store_true", help="replace figures that exist")


def _scan(f: Fitted, max_degree: int) -> Any:
    """The degree scan of a one-predictor fit (a failure exits 1)."""
    from xlbridge.engine import scan_degrees

    inp = f.inp
    with as_failure():
        return scan_degrees(inp.y, inp.x[:, 0], max_degree, folds=inp.options.folds,
                            weights=inp.weights, **inp.options.polynomial_kwargs())


def require_plots() -> None:
    """A usage error (exit 2) saying how to add matplotlib when it is missing; checked
    before anything is read or written."""
    from xlbridge.plots import PlotsUnavailable, figure_class

    try:
        figure_class()
    except PlotsUnavailable as exc:
        raise UsageError() from exc


def run_plot(args: argparse.Namespace) -> int:
    from xlbridge.plots import applicable, write_figures

    require_plots()
    f = fit_from_args(args)
    kinds = args.kind
    one = f.result.spec.k == 1
    scan = _scan(f, args.max_degree) if one and (not kinds or "degrees" in kinds) else None
    # checked before any folder is made: a kind that does not apply to this model is a
    # usage error naming the kinds that do
    fits = applicable(f.result, scan)
    wrong = [k for k in kinds or () if k not in fits]
    if wrong:
        k = f.result.spec.k
        raise UsageError(f"--kind {wrong[0]} does not apply to a model with {k} "
                         f"predictor{'s' if k != 1 else ''}; kinds that apply: "
                         f"{', '.join(fits)}")
    for kind in write_figures(f.result, args.out, kinds, svg=args.svg, force=args.force,
                              scan=scan, first_row=f.y_area.r1 + f.inp.header_rows):
        for suffix in (".png", ".svg") if args.svg else (".png",):
            print(f"wrote {args.out / (kind + suffix)}")
    return EXIT_OK


def configure_report(p: argparse.ArgumentParser) -> None:
    add_data_options(p)
    add_base_year_options(p)
    p.add_argument("--out", type=Path, required=True, metavar="FILE.html",
                   help="the report to write")
    p.add_argument("--max-degree", type=int, default=5, metavar="N",
                   help="highest degree of the degree scan (default 5; one predictor)")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


def run_report(args: argparse.Namespace) -> int:
    from xlbridge.report import Source, build_report

    if args.out.suffix.lower() not in (".html", ".htm"):
        raise UsageError(f"--out {args.out.name}: the report is an .html file")
    require_plots()
    from xlbridge.engine import CerResult

    f = fit_from_args(args, cer=True)
    src = Source(file=f.book.path.name, y_ref=f.y_area.label(), x_ref=f.x_area.label(),
                 options=f.inp.options.to_text(), first_row=f.y_area.r1 + f.inp.header_rows)
    if isinstance(f.result, CerResult):  # a CER: its card on top (report.build_cer_report)
        from xlbridge.cells.cer import card_facts
        from xlbridge.report import build_cer_report

        facts = card_facts(f.result, f.inp.key(), f.inp.options, f.inp.drops)
        text = build_cer_report(f.result, facts, source=src, options=f.inp.options)
        emit(text, args.out, args.force, [f.book.path])
        return EXIT_OK
    scan = _scan(f, args.max_degree) if f.result.spec.k == 1 else None
    emit(build_report(f.result, scan=scan, source=src), args.out, args.force, [f.book.path])
    return EXIT_OK


def configure_demo(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", type=Path, default=Path("xlbridge-demo"), metavar="DIR",
                   help="folder to write into (default ./xlbridge-demo)")
    p.add_argument("--force", action="store_true", help="replace files of an earlier demo")


def run_demo(args: argparse.Namespace) -> int:
    from xlbridge.demo import run_demo as demo

    require_plots()
    print(demo(args.out, force=args.force))
    return EXIT_OK
