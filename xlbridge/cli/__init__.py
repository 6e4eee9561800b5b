"""The ``xlbridge`` command: the workbook models without a spreadsheet program.

Each command is one entry of :data:`COMMANDS` (name, summary, example, options, run); a
later command is added by adding an entry.  Shared options and output helpers live in
:mod:`xlbridge.cli.common`; the commands in one module per group (``fitting``, ``runner``,
``figures``, ``groups``, ``cer``).

Exit codes: 0 success, 1 drift or model failure, 2 usage or input error
(:func:`xlbridge.cli.common.exit_code` maps every error class and kind to one).  Messages
start with ``xlbridge:``.  Start-up matters (one process per command, big sheets): this
package imports only the standard library at import time; each command imports what it
needs.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import NoReturn

from . import cer, figures, fitting, groups, runner
from .common import EXIT_OK, EXIT_USAGE, REF_HELP, closest, exit_code, info, message_of

__all__ = ["COMMANDS", "Command", "build_parser", "main"]


@dataclass(frozen=True)
class Command:
    """One command: its name, a one-line summary, an example, and how it reads its options
    and runs (returning the exit code)."""

    name: str
    summary: str
    example: str
    configure: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


COMMANDS: list[Command] = [
    Command("fit", "fit a model to workbook cells and show coefficients and statistics",
            "xlbridge fit prices.xlsx --y \"'Site data'!B:B\" --x \"'Site data'!A:A\" "
            "--model 2 --format json",
            fitting.configure_fit, fitting.run_fit),
    Command("predict", "fit, then predict with intervals at new x values",
            "xlbridge predict prices.xlsx --y Sales[Price] --x Sales[Size] --model 2 "
            "--new-x Quote!A2:A10",
            fitting.configure_predict, fitting.run_predict),
    Command("recalc", "evaluate every XB_ formula and write the results into a copy",
            "xlbridge recalc estimate.xlsx --out estimate-calculated.xlsx",
            runner.configure_recalc, runner.run_recalc),
    Command("pin", "record every XB_ result of a workbook in a pin file (for CI)",
            "xlbridge pin estimate.xlsx --out estimate.pins.json",
            runner.configure_pin, runner.run_pin),
    Command("verify", "recompute the XB_ results and compare them with a pin file",
            "xlbridge verify estimate.xlsx --pins estimate.pins.json --rtol 1e-9",
            runner.configure_verify, runner.run_verify),
    Command("degrees", "fit degrees 1..N, cross-validate, and recommend one",
            "xlbridge degrees costs.xlsx --y Data!C:C --x Data!B:B --max-degree 5",
            fitting.configure_degrees, fitting.run_degrees),
    Command("checks", "check the regression assumptions (verdicts ok / watch / problem)",
            "xlbridge checks costs.xlsx --y Data!C:C --x Data!B:B --model 2",
            fitting.configure_model_table, fitting.run_checks),
    Command("rows", "per-row residuals, leverage and Cook's distance, aligned with the data",
            "xlbridge rows costs.xlsx --y Data!C:C --x Data!B:B --model 2 --format csv",
            fitting.configure_model_table, fitting.run_rows),
    Command("optimum", "where the fitted curve or surface turns, with intervals",
            "xlbridge optimum margin.xlsx --y Data!D:D --x Data!B:C --model surface",
            fitting.configure_model_table, fitting.run_optimum),
    Command("slope", "marginal effect dy/dx at given points, with intervals",
            "xlbridge slope costs.xlsx --y Data!C:C --x Data!B:B --model 2 "
            "--at-x Model!A71:A76",
            fitting.configure_slope, fitting.run_slope),
    Command("plot", "write the figures of a fit (PNG, optionally SVG)",
            "xlbridge plot costs.xlsx --y Data!C:C --x Data!B:B --model 2 --out figures",
            figures.configure_plot, figures.run_plot),
    Command("report", "write a self-contained HTML report of a model",
            "xlbridge report costs.xlsx --y Data!C:C --x Data!B:B --model 2 "
            "--out model.html",
            figures.configure_report, figures.run_report),
    Command("groups", "fit the same model separately for every group (one row per group)",
            "xlbridge groups sales.xlsx --group Data!A:A --y Data!C:C --x Data!B:B --model 2",
            groups.configure_groups, groups.run_groups),
    Command("card", "the one-screen review card of a cost-estimating relationship (CER)",
            "xlbridge card steel.xlsx --y Data!C:C --x Data!B:B --model power "
            "--options \"method=mupe; base_year=2024\"",
            cer.configure_card, cer.run_card),
    Command("plevels", "percentiles of new estimates (P10..P90) and their distribution",
            "xlbridge plevels steel.xlsx --y Data!C:C --x Data!B:B --model power "
            "--options \"method=mupe; levels=10,50,80\" --new-x Quote!A2:A5",
            cer.configure_plevels, cer.run_plevels),
    Command("candidates", "compare candidate CERs (forms x methods x drivers), ranked",
            "xlbridge candidates steel.xlsx --y Data!C:C --drivers Data!B:D "
            "--options \"forms=power,linear; methods=log,mupe; max_drivers=2\"",
            cer.configure_candidates, cer.run_candidates),
    Command("learning", "fit a learning curve from unit or lot costs; cost units and lots",
            "xlbridge learning lots.xlsx --units Lots!A:B --costs Lots!C:C --at Lots!E2:F3",
            cer.configure_learning, cer.run_learning),
    Command("demo", "run the bundled example workbooks end to end (recalc, figures, reports)",
            "xlbridge demo --out xlbridge-demo",
            figures.configure_demo, figures.run_demo),
]

EXIT_HELP = "exit codes: 0 success, 1 drift or model failure, 2 usage or input error"


class Parser(argparse.ArgumentParser):
    """argparse with ``xlbridge:`` messages (exit 2), no abbreviated options, and unknown
    options and commands named with the nearest valid one before anything else is checked
    (argparse alone reports a misspelled required option as missing)."""

    def __init__(self, *args, commands: Sequence[str] = (), **kwargs) -> None:
        kwargs.setdefault("allow_abbrev", False)
        self.commands = tuple(commands)
        self.option_names: list[str] = []  # before argparse adds --help through add_argument
        super().__init__(*args, **kwargs)

    def add_argument(self, *args, **kwargs):  # noqa: ANN201 - argparse's own signature
        self.option_names += [a for a in args if isinstance(a, str) and a.startswith("-")]
        return super().add_argument(*args, **kwargs)

    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"xlbridge: {message} (see {self.prog} --help)\n")

    def parse_known_args(self, args=None, namespace=None):  # noqa: ANN001, ANN201
        words = list(sys.argv[1:] if args is None else args)
        self.check_words(words)
        return super().parse_known_args(words, namespace)

    def check_words(self, words: Sequence[str]) -> None:
        """Refuse an unknown option, or an unknown command, naming the nearest."""
        for word in words:
            if word == "--":
                return
            if word.startswith("--") and len(word) > 2:
                name = word.split("=", 1)[0]
                if name not in self.option_names:
                    near = closest(name, self.option_names)
                    self.error(f"unknown option {name}"
                               + (f"; did you mean {near}?" if near else ""))
            elif self.commands and not word.startswith("-"):
                if word not in self.commands:
                    near = closest(word, self.commands)
                    self.error(f"unknown command {word!r}"
                               + (f"; did you mean {near}?" if near else "")
                               + f" (commands: {', '.join(self.commands)})")
                return  # the rest belongs to the command


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser of the ``xlbridge`` command and its subcommands (with ``only``, the
    options of that command alone are set up: the others are listed, not configured)."""
    from xlbridge import __version__

    examples = "\n".join(f"  {c.example}" for c in COMMANDS)
    parser = Parser(
        prog="xlbridge",
        description="Polynomial and second-order models for workbooks, without a "
                    "spreadsheet program. The input workbook is only read.",
        epilog=f"examples:\n{examples}\n\n{REF_HELP}.\n{EXIT_HELP}",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        commands=[c.name for c in COMMANDS],
    )
    parser.add_argument("--version", action="version", version=f"xlbridge {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for c in COMMANDS:
        p = sub.add_parser(
            c.name, help=c.summary, description=c.summary[:1].upper() + c.summary[1:] + ".",
            epilog=f"example:\n  {c.example}\n\n{REF_HELP}.\n{EXIT_HELP}",
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        if only is None or c.name == only:
            c.configure(p)
            p.set_defaults(_command=c)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``xlbridge`` console command; returns the exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    # setting up the options of every command costs more start-up than any one needs
    named = argv[0] if argv and any(c.name == argv[0] for c in COMMANDS) else None
    parser = build_parser(named)
    args = parser.parse_args(argv)
    command: Command | None = getattr(args, "_command", None)
    if command is None:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    try:
        return command.run(args)
    except KeyboardInterrupt:
        info("xlbridge: interrupted; no output was left half-written")
        return 130
    except BrokenPipeError:  # e.g. "xlbridge fit ... | head": the reader stopped early
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - a message, never a traceback
        code = exit_code(exc)
        if code is None:
            info(f"xlbridge: internal error ({type(exc).__name__}: {exc}); please report it "
                 "with the command that caused it")
            return EXIT_USAGE
        info(message_of(exc))
        return code
