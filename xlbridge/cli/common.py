"""What the commands share: exit codes and the errors that carry them, the shared options,
reading references from a workbook, and writing output (table, json, csv, an xlsx copy).

Only the standard library is imported here at import time; each helper imports the layer
it needs when called, because every command is a new process and start-up time counts.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TextIO

from .textout import csv_text, json_text, render_table

__all__ = ["EXIT_OK", "EXIT_FAIL", "EXIT_USAGE", "REF_HELP", "CommandError", "UsageError",
           "Failure", "Fitted", "Progress", "add_base_year_options", "add_data_options",
           "add_output_options", "add_reading_options", "as_failure", "check_alignment",
           "label_cells", "as_usage", "base_year_y", "choice", "closest",
           "csv_text", "emit", "emit_tables",
           "exit_code", "fit_from_args", "info", "warn", "json_text", "message_of", "open_book",
           "read_points", "read_ref", "render_table", "resolve", "xlsx_copy"]

EXIT_OK, EXIT_FAIL, EXIT_USAGE = 0, 1, 2


# --- errors and exit codes --------------------------------------------------------------------


class CommandError(Exception):
    """An error of a command with its exit code; ``__cause__`` is the error it stands for,
    whose message follows ``context`` in what the user sees."""

    code = EXIT_USAGE

    def __init__(self, message: str = "", context: str = "") -> None:
        super().__init__(message)
        self.context = context


class UsageError(CommandError):
    """Bad command line, file or reference: exit 2."""

    code = EXIT_USAGE


class Failure(CommandError):
    """The command ran but the model failed or results drifted: exit 1."""

    code = EXIT_FAIL


def _user_errors() -> tuple[type[BaseException], ...]:
    """The lower layers' exception classes whose message tells a user what to fix."""
    from xlbridge.book.refs import RefError
    from xlbridge.book.safety import BookError
    from xlbridge.cells import CellError, OptionsError
    from xlbridge.engine import ModelError

    return (BookError, RefError, OptionsError, CellError, ModelError)


def exit_code(exc: BaseException) -> int | None:
    """The exit code for an error a user can act on, by class and kind (never by the words
    of its message); None for anything else, which is a fault of xlbridge.

    The command's own errors carry their code.  Otherwise: a model the engine cannot fit to
    these data (too few rows or distinct values, aliased terms, numbers out of scale) exits
    1; an unusable option, reference, file, path or cell exits 2."""
    if isinstance(exc, CommandError):
        return exc.code
    if isinstance(exc, MemoryError):
        return EXIT_FAIL
    if isinstance(exc, OSError) and exc.filename is not None:
        return EXIT_USAGE  # a path typed at the command line that cannot be used
    from xlbridge.cells import CellError, CellErrorKind
    from xlbridge.engine import ModelError, ModelErrorKind

    if isinstance(exc, CellError):
        return EXIT_FAIL if exc.kind is CellErrorKind.MODEL else EXIT_USAGE
    if isinstance(exc, ModelError):
        model_usage = (ModelErrorKind.SPEC, ModelErrorKind.DATA)
        return EXIT_USAGE if exc.kind in model_usage else EXIT_FAIL
    from xlbridge.runner.recalc import EvaluationError

    if isinstance(exc, (*_user_errors(), EvaluationError)):
        return EXIT_USAGE
    return None


def message_of(exc: BaseException) -> str:
    """One line ``xlbridge: ...`` for the user: for a command's error, the context it
    added and then its own message or that of the error it stands for."""
    if isinstance(exc, CommandError):
        own = str(exc)
        cause = exc.__cause__
        text = exc.context + (own if own or cause is None else str(cause))
    elif isinstance(exc, MemoryError):
        text = "not enough memory; use fewer rows or a smaller model"
    elif isinstance(exc, OSError) and exc.filename is not None:
        text = (f"cannot use {exc.filename}: {exc.strerror or type(exc).__name__}; "
                "give a path that exists and that you may write to")
    else:
        text = str(exc)
    return "xlbridge: " + " ".join(text.split())


@contextmanager
def as_usage(context: str = "") -> Iterator[None]:
    """Errors a user can fix raised in the block become a usage error (exit 2), with
    ``context`` (e.g. the option and reference) before their message."""
    try:
        yield
    except _user_errors() as exc:
        raise UsageError(context=context) from exc


@contextmanager
def as_failure() -> Iterator[None]:
    """Errors raised while running a model on data that read well become a failure
    (exit 1): the inputs were usable, the model is not."""
    try:
        yield
    except _user_errors() as exc:
        raise Failure() from exc


# --- choices and near misses ------------------------------------------------------------------


def closest(word: str, valid: Sequence[str]) -> str | None:
    """The valid word nearest to ``word``, by the engine's one rule (imported here, on the
    error path only, so that a command's start does not load the engine)."""
    from xlbridge.engine.errors import nearest

    return nearest(word, valid)


def unknown_text(what: str, word: str, valid: Sequence[str]) -> str:
    """``unknown <what> 'word'; did you mean 'x'? <what>s: a, b, c``."""
    near = closest(word, valid)
    hint = f"; did you mean {near}?" if near else ""
    return f"unknown {what} {word}{hint} (valid: {', '.join(valid)})"


def choice(valid: Sequence[str], what: str) -> Callable[[str], str]:
    """An argparse ``type`` that accepts one of ``valid`` and names the nearest otherwise."""

    def check(text: str) -> str:
        if text in valid:
            return text
        raise argparse.ArgumentTypeError(unknown_text(what, repr(text), valid))

    check.__name__ = what
    return check


# --- shared options ---------------------------------------------------------------------------

CSV_DIALECTS = ("auto", "comma", "semicolon", "tab")

REF_HELP = (
    "REF forms: B2:B40, $B$2:$B$40, Data!B2:B40, 'Site data'!B2:B352, whole columns "
    "Data!B:B (trailing blanks ignored), a defined name, or a table column Sales[Price]"
)


def add_data_options(p: argparse.ArgumentParser, *, model_required: bool = True) -> None:
    """--y, --x, --model, --options, --sheet, --weights: what to fit."""
    p.add_argument("book", metavar="BOOK", help="the .xlsx, .xlsm or .csv file (only read)")
    p.add_argument("--y", required=True, metavar="REF", help="cells of the response")
    p.add_argument("--x", required=True, metavar="REF", help="cells of the predictor(s)")
    p.add_argument("--model", required=model_required, metavar="M",
                   help="degree 1-10, 'surface', 'linear', 'interact', terms such as "
                        "'size, size^2', or a CER form 'power', 'factor', 'exponential' "
                        "(with method= in --options)")
    p.add_argument("--options", default=None, metavar="TEXT",
                   help="key=value pairs separated by ';' as in the worksheet functions, "
                        "e.g. 'level=0.9; intercept=no'")
    p.add_argument("--sheet", default=None, metavar="NAME",
                   help="sheet for references without one (default: the first sheet)")
    p.add_argument("--weights", default=None, metavar="REF",
                   help="cells of positive weights, one per row of y (weighted least squares)")
    p.add_argument("--label", default=None, metavar="REF",
                   help="cells naming each row (a job number, a name): shown beside the "
                        "sheet row wherever a row is reported")
    add_reading_options(p)


def add_reading_options(p: argparse.ArgumentParser) -> None:
    """--strict, --csv-dialect, --decimal-comma: how the cells are read."""
    p.add_argument("--strict", action="store_true",
                   help="ranges that start or end on different sheet rows are an error "
                        "(without it, a warning; rows are paired by position)")
    p.add_argument("--csv-dialect", type=choice(CSV_DIALECTS, "CSV dialect"), default="auto",
                   metavar="D", help="field separator of a CSV input: auto (found from the "
                                     "file), comma, semicolon or tab")
    p.add_argument("--decimal-comma", action="store_true",
                   help="numbers in a CSV input are written with a decimal comma (1,5); "
                        "found from the file when the separator is ; or tab")


def add_output_options(p: argparse.ArgumentParser, formats: Sequence[str],
                       default: str = "table") -> None:
    """--format, --out, --force."""
    p.add_argument("--format", type=choice(formats, "format"), choices=list(formats),
                   default=default, help=f"output format (default {default})")
    p.add_argument("--out", type=Path, default=None, metavar="FILE",
                   help="write the output to FILE instead of the screen (never the input)")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")


# --- output -----------------------------------------------------------------------------------


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
    """One line for the user on stderr (or ``stream``)."""
    print(text, file=stream or sys.stderr)


def warn(text: str) -> None:
    """One ``xlbridge: warning: ...`` line on stderr."""
    info("xlbridge: warning: " + " ".join(text.split()))


class Progress:
    """A progress bar on a terminal for long runs (rich's, or one plain line rewritten in
    place when rich, of the ``cli`` extra, is not installed); nothing otherwise."""

    def __init__(self, what: str) -> None:
        self.what = what
        self.bar: Any = None
        self.task: Any = None
        self.plain = False  # the plain line is showing
        self.enabled = sys.stderr.isatty()  # the bar goes to stderr; stdout may be a file

    def __call__(self, done: int, total: int, label: str) -> None:
        if not self.enabled or total < 10:
            return
        if self.bar is None and not self.plain:
            try:
                from rich.console import Console
                from rich.progress import Progress as Bar
            except ImportError:
                self.plain = True
            else:
                self.bar = Bar(transient=True, console=Console(stderr=True))
                self.bar.start()
                self.task = self.bar.add_task(self.what, total=total)
        if self.plain:
            sys.stderr.write(f"\r\033[K{self.what} {label} {done}/{total}")
            sys.stderr.flush()
        else:
            self.bar.update(self.task, completed=done, description=f"{self.what} {label}")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()
        if self.plain:  # clear the line, as rich's transient bar does
            sys.stderr.write("\r\033[K")
            sys.stderr.flush()


# --- reading the data of a fit ----------------------------------------------------------------


def open_book(path: str, args: argparse.Namespace | None = None) -> Any:
    """The workbook or CSV file at ``path``, opened for reading (a CSV file in the dialect
    of ``args.csv_dialect`` / ``args.decimal_comma`` when given)."""
    from xlbridge.book.reader import open_book as open_any

    dialect = getattr(args, "csv_dialect", "auto")
    return open_any(path, delimiter=None if dialect == "auto" else dialect,
                    decimal_comma=True if getattr(args, "decimal_comma", False) else None)


def check_alignment(spans: Sequence[tuple[str, str, Any]], strict: bool) -> None:
    """Ranges read together (option, REF text, area) that start or end on different sheet
    rows: a warning naming both spans, or with ``strict`` a usage error."""
    from xlbridge.book.refs import misaligned

    text = misaligned([(f"--{what}", area) for what, _, area in spans])
    if text is None:
        return
    if strict:
        raise UsageError(text + " (--strict)")
    warn(text)


def resolve(book: Any, refs: Sequence[tuple[str, str]], sheet: str | None) -> list[Any]:
    """Areas of the (option, REF) pairs, resolved together (whole columns cut alike)."""
    from xlbridge.book.refs import parse_ref

    parsed = []
    for what, ref in refs:
        with as_usage(f"--{what} {ref}: "):
            parsed.append(parse_ref(ref))
    return book.resolve_together(parsed, default_sheet=sheet)


def read_ref(book: Any, ref: str, what: str, area: Any) -> tuple[Any, Any]:
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
class Fitted:
    """A fit from the command line: the book, the areas read, the prepared input, the
    result."""

    book: Any
    y_area: Any
    x_area: Any
    inp: Any
    result: Any
    labels: list[str] | None = None  # one per data row, from --label

    @property
    def first_row(self) -> int:
        """The sheet row of data row 1: y's first cell plus the header rows above the data."""
        return self.y_area.r1 + self.inp.header_rows

    def where(self, row: int) -> str:
        """``sheet row N`` of 1-based data ``row`` (with its label when --label gave one)."""
        from xlbridge.cells.prepare import sheet_row

        text = f"sheet row {sheet_row(row, self.first_row)}"
        label = self.labels[row - 1] if self.labels and row <= len(self.labels) else ""
        return f"{text} ({label})" if label else text


def fit_from_args(args: argparse.Namespace, model: Any = None, *, cer: bool = False) -> Fitted:
    """Read --y/--x/--weights and fit --model (or ``model``): a bad input exits 2, a model
    that cannot be fitted to data that read well exits 1. A CER form (--model power with
    method= in --options) only where ``cer`` says the command takes one."""
    from xlbridge import cells

    book = open_book(args.book, args)
    sheet = book.sheet_name(args.sheet) if args.sheet else None
    refs = [("y", args.y), ("x", args.x)]
    if getattr(args, "weights", None):
        refs.append(("weights", args.weights))
    if getattr(args, "label", None):
        refs.append(("label", args.label))
    resolved = resolve(book, refs, sheet)
    check_alignment([(w, r, a) for (w, r), a in zip(refs, resolved)],
                    getattr(args, "strict", False))
    areas = dict(zip((what for what, _ in refs), resolved))
    for what, ref in refs[:3]:  # y, x, weights: a table column's name is its header
        if what != "label":
            areas[what] = _with_table_header(book, ref, areas[what], args.options)
    y_area, y = read_ref(book, args.y, "y", areas["y"])
    x_area, x = read_ref(book, args.x, "x", areas["x"])
    w = read_ref(book, args.weights, "weights", areas["weights"])[1] \
        if "weights" in areas else None
    y, options = base_year_y(args, book, sheet, y)
    from xlbridge.engine import parse_model
    from xlbridge.engine.cer import FORMS, is_form

    with as_usage():
        inp = cells.prepare_fit(y, x, args.model if model is None else model, options,
                                weights=w,
                                labels=label_cells(book, y_area, x_area, areas.get("label")),
                                first_row=y_area.r1)
        # a model text that cannot be read is a usage error, not a failed fit (a CER form
        # is not a term list: the engine checks it with its method)
        if is_form(inp.model) and inp.options.method is not None and not cer:
            raise UsageError(f"--model {inp.model} with a method is a cost-estimating "
                             "relationship; this command is made for polynomial and surface "
                             "models (for a CER: fit, predict, plevels, card, report)")
        if is_form(inp.model) and inp.options.method is None:
            raise UsageError(f"--model {inp.model} is a cost-estimating-relationship form: "
                             "give its method in --options, e.g. method=mupe (log, mupe, "
                             "zmpe or ols)")
        if not is_form(inp.model):
            parse_model(inp.model, inp.x.shape[1], inp.names,
                        intercept=bool(inp.options.fit_kwargs().get("intercept", True)),
                        forms=FORMS)
    for note in inp.notes:
        warn(note)
    with as_failure():
        result = cells.fit_prepared(inp)
    fitted = Fitted(book, y_area, x_area, inp, result)
    if "label" in areas:
        fitted.labels = _labels(book, args.label, areas["label"], fitted.first_row,
                                len(inp.y))
    return fitted


def _with_table_header(book: Any, ref: str, area: Any, options: Any) -> Any:
    """The area of a table column reference (``Sales[Price]``) with the table's header row
    on top, so the column's name labels the results as a header row of cells would (the
    options' names=no keeps the data alone); any other reference's area unchanged."""
    import dataclasses

    from xlbridge.book.refs import TableRef, parse_ref
    from xlbridge.book.safety import BookError
    from xlbridge.cells import OptionsError, parse_options

    try:
        parsed = parse_ref(ref)
        if not isinstance(parsed, TableRef) or parsed.parts - {"data"} or \
                parse_options(options).names == "no":
            return area
        with_header = book.resolve(dataclasses.replace(parsed, parts=frozenset(
            {"headers", "data"})))
    except (BookError, OptionsError):  # no header row, or options read (and refused) later
        return area
    return with_header if with_header.r2 == area.r2 else area


def _labels(book: Any, ref: str, area: Any, first_row: int, n: int) -> list[str]:
    """The --label text of each of the ``n`` data rows, matched by sheet row."""
    from xlbridge.book.refs import Area

    if area.n_cols != 1:
        raise UsageError(f"--label {ref} ({area.label()}) must be one column; it has "
                         f"{area.n_cols}")
    cells = Area(area.sheet, first_row, area.c1, first_row + n - 1, area.c1)
    grid = book.read_area(cells)
    out = []
    for row in grid:
        v = row[0] if row else None
        if isinstance(v, float) and v.is_integer():
            v = int(v)
        out.append("" if v is None else str(v))
    return out


def label_cells(book: Any, y_area: Any, x_area: Any, label_area: Any = None) -> Any:
    """The cells beside y, over y's rows, whose words can mark a total row: the --label
    column, else the sheet's first column when neither y nor x is that column (where a
    label such as TOTAL usually stands); None otherwise."""
    from xlbridge.book.refs import Area

    if label_area is not None:
        sheet, col = label_area.sheet, label_area.c1
    elif y_area.c1 == 1 or (x_area.sheet == y_area.sheet and x_area.c1 == 1):
        return None
    else:
        sheet, col = y_area.sheet, 1
    return book.xlwings_value(Area(sheet, y_area.r1, col, y_area.r2, col))


def add_base_year_options(p: argparse.ArgumentParser) -> None:
    """--years, --index: bring the costs (--y) to the options' base_year before fitting."""
    p.add_argument("--years", default=None, metavar="REF",
                   help="the year of each cost (with --index and base_year=YYYY in --options)")
    p.add_argument("--index", default=None, metavar="REF",
                   help="the price index: two columns, year and index value; the costs are "
                        "converted to the prices of the options' base_year before fitting")


def base_year_y(args: argparse.Namespace, book: Any, sheet: str | None, y: Any
                ) -> tuple[Any, Any]:
    """(y, options): with --years and --index, y in the prices of the options' base_year
    (cells.baseyear_cells, so the response is named with its year); else y unchanged."""
    years, index = getattr(args, "years", None), getattr(args, "index", None)
    if years is None and index is None:
        return y, args.options
    if years is None or index is None:
        raise UsageError("give both --years REF and --index REF (and base_year=YYYY in "
                         "--options) to bring the costs to one year's prices")
    from xlbridge import cells

    areas = resolve(book, [("years", years), ("index", index)], sheet)
    yr = read_ref(book, years, "years", areas[0])[1]
    ix = read_ref(book, index, "index", areas[1])[1]
    with as_usage():
        return cells.baseyear_cells(y, yr, ix, args.options), args.options


def read_points(f: Fitted, args: argparse.Namespace, option: str, ref: str
                ) -> tuple[Any, Any]:
    """(area, raw value) of the points a fitted model is evaluated at (--new-x, --at-x)."""
    sheet = f.book.sheet_name(args.sheet) if args.sheet else None
    (area,) = resolve(f.book, [(option, ref)], sheet)
    return read_ref(f.book, ref, option, area)


def xlsx_copy(book: Any, out: Path | None, force: bool, title: str,
              blocks: Sequence[tuple[str, Sequence[Sequence[Any]]]]) -> None:
    """A copy of the workbook with one new sheet of result tables (every other part of an
    .xlsx/.xlsm input copied unchanged; a CSV input becomes a new workbook)."""
    from xlbridge.book.safety import check_output

    if out is None:
        raise UsageError("--format xlsx writes a copy of the workbook: give --out FILE.xlsx")
    src = book.path
    want = ".xlsx" if src.suffix.lower() == ".csv" else src.suffix.lower()
    if out.suffix.lower() != want:
        raise UsageError(f"--out {out.name}: the copy of {src.name} must end in {want}")
    check_output(out, force=force, inputs=[src])
    if book.kind == "csv":
        from xlbridge.book import writer
        from xlbridge.book.refs import Area

        sheet = book.sheet_names[0]
        n_rows, n_cols = book.used_extent(sheet)
        rows = book.read_area(Area(sheet, 1, 1, max(n_rows, 1), max(n_cols, 1)))
        wb = writer.new_workbook_from_rows(sheet, rows)
        name = writer.add_result_sheet(wb, title, blocks)
        writer.save_copy(wb, out, force=force, inputs=[src])
    else:
        from xlbridge.book.patch import NewSheet, patch_copy

        lines: list[Sequence[Any]] = []
        for caption, table in blocks:
            lines += ([[caption]] if caption else []) + list(table) + [[]]
        name = patch_copy(src, out, {}, force=force,
                          new_sheet=NewSheet(title, lines)).sheet_title
    info(f"wrote {out} (copy of {src.name} with sheet {name!r})")


def emit_tables(args: argparse.Namespace, f: Fitted, command: str, table: list[list[Any]],
                doc: Any, extra: str = "") -> int:
    """Show one result table (header row first) as table, json, csv or an xlsx copy; on
    the screen its note rows follow the table as ``note: ...`` lines."""
    from xlbridge.cells.tables import split_notes

    shown = table if f.inp.options.header else table[1:]
    src = f"{f.y_area.label()} on {f.x_area.label()}"
    if args.format == "json":
        if isinstance(doc, dict) and "notes" not in doc:  # the table's notes, then the fit's
            doc = {**doc, "notes": list(dict.fromkeys(
                split_notes(table)[1] + [str(n) for n in f.result.notes]))}
        emit(json_text(doc), args.out, args.force, [f.book.path])
    elif args.format == "csv":
        emit(csv_text([shown]), args.out, args.force, [f.book.path])
    elif args.format == "xlsx":
        xlsx_copy(f.book, args.out, args.force, f"xlbridge {command}",
                  [(f"xlbridge {command} of {src}{extra}", shown)])
    else:
        body, notes = split_notes(table)
        head = f"xlbridge {command}: {src} in {f.book.path.name}{extra}\n\n"
        emit(head + render_table(body) + "\n" + "".join(f"note: {n}\n" for n in notes),
             args.out, args.force, [f.book.path])
    return EXIT_OK
