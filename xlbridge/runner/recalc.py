"""Evaluate the XB_ formulas of a workbook with the worksheet functions themselves.

Steps: take the formula cells of the workbook (:mod:`xlbridge.book.formulas`), keep those
that call an XB_ function, read each call (:mod:`xlbridge.runner.formula`), order the cells
so that a cell reading another XB_ cell's result comes after it, and call the function in
``xlbridge.worksheet.FUNCTIONS`` with the raw values xlwings would hand it.  A cell whose
arguments cannot be evaluated exactly gets a message instead of a value.

Used by ``xlbridge recalc`` (results into a copy: :mod:`xlbridge.runner.write`) and
``pin`` / ``verify`` (:mod:`xlbridge.runner.pins`).
"""

from __future__ import annotations

import inspect
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from xlbridge.book.formulas import FormulaCell, FormulaIndex, formula_index
from xlbridge.book.reader import Book, missing_value_message, xlwings_shape
from xlbridge.book.refs import Area, RefError, misaligned
from xlbridge.book.safety import BookError
from xlbridge.book.values import is_message_cell
from xlbridge.runner.formula import (
    ArrayConst,
    Call,
    Literal,
    Missing,
    Ref,
    Spill,
    Unsupported,
    calls_xb,
    parse_xb_formula,
    reference_texts,
)

__all__ = ["BadCall", "CircularReference", "EvaluationError", "Evaluation", "Misaligned",
           "NoInputValue",
           "XbCell", "evaluate_book"]

Progress = Callable[[int, int, str], None]


@dataclass
class XbCell:
    """One XB_ formula and what evaluating it gave."""

    formula: FormulaCell
    call: Call | None = None
    result: list[list[Any]] | None = None
    message: str | None = None  # "xlbridge: ..." when there is no result
    reads: list[Area] = field(default_factory=list)
    warning: str | None = None  # ranges paired by row that sit on different sheet rows

    @property
    def sheet(self) -> str:
        return self.formula.sheet

    @property
    def anchor(self) -> Area:
        f = self.formula
        return Area(f.sheet, f.row, f.col, f.row, f.col)

    @property
    def label(self) -> str:
        return self.anchor.label()

    @property
    def function(self) -> str:
        if self.call is not None:
            return self.call.name
        m = re.search(r"XB_[A-Za-z0-9_]*", self.formula.text, re.IGNORECASE)
        return m.group(0).upper() if m else "XB_?"

    @property
    def ok(self) -> bool:
        return self.result is not None and not is_message_cell(self.result)

    def output_area(self) -> Area:
        """Where the result goes: the anchor with the result's shape."""
        a = self.anchor
        if self.result is None:
            return self.formula.array_ref or a
        rows = len(self.result)
        cols = max((len(r) for r in self.result), default=1)
        return Area(a.sheet, a.r1, a.c1, a.r1 + max(rows, 1) - 1, a.c1 + max(cols, 1) - 1)

    def region(self) -> Area:
        """Cells this formula owns: its output and (array formulas) its array range."""
        out = self.output_area()
        arr = self.formula.array_ref
        if arr is None:
            return out
        return Area(out.sheet, min(out.r1, arr.r1), min(out.c1, arr.c1),
                    max(out.r2, arr.r2), max(out.c2, arr.c2))


# --- evaluation --------------------------------------------------------------------------


class EvaluationError(Exception):
    """The arguments of an XB_ call cannot be evaluated exactly; the message says why
    (the cell then shows it instead of a value: the runner never guesses one)."""


class CircularReference(EvaluationError):
    """An argument reads the cell's own result, or a result that cannot come first."""


class NoInputValue(EvaluationError):
    """An argument reads a cell without a value: an XB_ cell that failed, a formula whose
    value was never saved, or a spill reference to a cell that holds no spilled result."""


class BadCall(EvaluationError):
    """The call itself is wrong: unknown function, wrong number of arguments, or a
    reference that does not resolve in this workbook."""


class Misaligned(EvaluationError):
    """Ranges paired row by row start or end on different sheet rows (strict runs only)."""


#: Arguments of the XB_ functions whose ranges are paired row by row with y (the first).
PAIRED = ("y", "x", "weights", "group", "drivers", "units", "costs", "years")


@dataclass
class Evaluation:
    """The XB_ cells of a workbook, evaluated."""

    book: Book
    cells: list[XbCell]
    formulas: FormulaIndex
    reads: int = 0  # areas read from the book (each once, however many formulas use it)

    @property
    def n_ok(self) -> int:
        return sum(1 for c in self.cells if c.ok)

    @property
    def failed(self) -> list[XbCell]:
        return [c for c in self.cells if not c.ok]


class _Evaluator:
    def __init__(self, book: Book, formulas: FormulaIndex,
                 functions: dict[str, Callable[..., Any]], strict: bool = False) -> None:
        self.book = book
        self.strict = strict
        self.formulas = formulas
        self.functions = functions
        self.cells: list[XbCell] = []
        for sheet in book.sheet_names:
            for rc in sorted(formulas.get(sheet, {})):
                f = formulas[sheet][rc]
                if calls_xb(f.text):
                    self.cells.append(XbCell(f))
        self.by_anchor = {(c.sheet, c.formula.row, c.formula.col): c for c in self.cells}
        self.done: set[int] = set()  # ids of cells evaluated in the current pass
        # each area is read from the book once per run, whichever formulas read it
        self.blocks: dict[Area, list[list[Any]]] = {}
        self.shaped: dict[Area, Any] = {}
        self.n_reads = 0
        self._taint_memo: dict[tuple[str, int, int], str | None] = {}

    def _xb_regions_hit(self, area: Area) -> list[XbCell]:
        return [x for x in self.cells if x.region().intersects(area)]

    def _formulas_in(self, area: Area) -> list[FormulaCell]:
        sheet = self.formulas.get(area.sheet or "", {})
        if area.n_rows * area.n_cols <= len(sheet):
            return [sheet[(r, c)] for r in range(area.r1, area.r2 + 1)
                    for c in range(area.c1, area.c2 + 1) if (r, c) in sheet]
        return [f for (r, c), f in sheet.items() if area.contains(r, c)]

    def _formula_depends_on_xb(self, f: FormulaCell, depth: int = 0) -> str | None:
        """Label of an XB_ cell an ordinary formula reads (directly or through others)."""
        key = (f.sheet, f.row, f.col)
        if key in self._taint_memo:
            return self._taint_memo[key]
        self._taint_memo[key] = None  # cycles among ordinary formulas end here
        found = None
        for tok in reference_texts(f.text):
            try:
                area = self.book.resolve(tok, default_sheet=f.sheet)
            except (BookError, RefError, ValueError):
                continue
            hit = self._xb_regions_hit(area)
            if hit:
                found = hit[0].label
                break
            if depth < 50:
                for g in self._formulas_in(area):
                    if not calls_xb(g.text):
                        dep = self._formula_depends_on_xb(g, depth + 1)
                        if dep:
                            found = dep
                            break
            if found:
                break
        self._taint_memo[key] = found
        return found

    def _read(self, area: Area, me: XbCell) -> Any:
        sheet = area.sheet or me.sheet
        if me.region().intersects(area):
            raise CircularReference(
                f"{area.label()} overlaps the cell's own result (a circular reference)"
            )
        owners = self._xb_regions_hit(area)
        for o in owners:
            if id(o) not in self.done:
                raise CircularReference(
                    f"{area.label()} reads the result of {o.label}, which could not be "
                    "evaluated first (circular XB_ references?)"
                )
            if not o.ok:
                raise NoInputValue(f"{area.label()} reads {o.label}, which has no result "
                                      f"({_first_line(o)})")
        missing = [rc for rc in self.book.formulas_without_value(area)
                   if not any(o.region().contains(*rc) for o in owners)]
        if missing:
            raise NoInputValue(missing_value_message(self.book.path.name, sheet, missing)
                                  .removeprefix("xlbridge: "))
        me.reads.append(area)
        if not owners:
            return self._shaped(area)
        block = [list(r) for r in self._block(area)]
        for o in owners:
            out = o.output_area()
            for r in range(max(out.r1, area.r1), min(out.r2, area.r2) + 1):
                for c in range(max(out.c1, area.c1), min(out.c2, area.c2) + 1):
                    row = o.result[r - out.r1] if o.result else []
                    v = row[c - out.c1] if c - out.c1 < len(row) else None
                    block[r - area.r1][c - area.c1] = None if v == "" else v
            arr = o.formula.array_ref
            if arr is not None:  # cells of the old array range beyond the new result
                for r in range(max(arr.r1, area.r1), min(arr.r2, area.r2) + 1):
                    for c in range(max(arr.c1, area.c1), min(arr.c2, area.c2) + 1):
                        if not out.contains(r, c):
                            block[r - area.r1][c - area.c1] = None
        return xlwings_shape(block)

    def _block(self, area: Area) -> list[list[Any]]:
        block = self.blocks.get(area)
        if block is None:
            self.n_reads += 1
            block = self.blocks[area] = self.book.read_area(area)
        return block

    def _shaped(self, area: Area) -> Any:
        """The value xlwings passes for ``area``; shared by every formula reading it (the
        functions never change their arguments)."""
        value = self.shaped.get(area)
        if value is None and area not in self.shaped:
            if area.n_cols == 1 and area.n_rows > 1 and area not in self.blocks:
                self.n_reads += 1
                value = self.book.read_columns(area)[0]
            else:
                value = xlwings_shape(self._block(area))
            self.shaped[area] = value
        return value

    def _spill_area(self, anchor: Area, me: XbCell) -> Area:
        """The area of ``A2#``: the result of the XB_ cell at A2, or the array range of the
        formula there (its saved values)."""
        owner = self.by_anchor.get((anchor.sheet, anchor.r1, anchor.c1))
        if owner is not None:
            if owner is me:
                raise CircularReference(f"{anchor.label()}# is the cell's own result")
            if id(owner) not in self.done or not owner.ok:
                raise NoInputValue(f"{anchor.label()}# has no result "
                                      f"({_first_line(owner) or 'not evaluated'})")
            return owner.output_area()
        f = self.formulas.get(anchor.sheet or "", {}).get((anchor.r1, anchor.c1))
        if f is not None and f.array_ref is not None:
            return f.array_ref
        raise NoInputValue(f"{anchor.label()}# refers to a cell that holds no spilled "
                              "result")

    def _arg(self, arg: Any, me: XbCell, areas: dict[int, Area]) -> Any:
        if isinstance(arg, Missing):
            return None
        if isinstance(arg, Literal):
            return arg.value
        if isinstance(arg, ArrayConst):
            return xlwings_shape([list(r) for r in arg.rows])
        if isinstance(arg, Ref):
            return self._read(areas[id(arg)], me)
        if isinstance(arg, Spill):
            return self._read(self._spill_area(areas[id(arg.anchor)], me), me)
        if isinstance(arg, Call):
            result = self._call(arg, me)
            return xlwings_shape(result)
        raise BadCall(f"argument {arg!r} cannot be evaluated")  # pragma: no cover

    def _call(self, call: Call, me: XbCell) -> list[list[Any]]:
        fn = self.functions.get(call.name)
        if fn is None:
            known = ", ".join(sorted(self.functions))
            raise BadCall(
                f"{call.name} is not a function of this xlbridge version (functions: {known})"
            )
        params = list(inspect.signature(fn).parameters.values())
        required = [p for p in params if p.default is inspect.Parameter.empty]
        if not (len(required) <= len(call.args) <= len(params)):
            sig = ", ".join(p.name if p.default is inspect.Parameter.empty else f"[{p.name}]"
                            for p in params)
            raise BadCall(
                f"{call.name} takes ({sig}); the formula gives {len(call.args)} argument"
                f"{'s' if len(call.args) != 1 else ''}"
            )
        refs = [a.anchor if isinstance(a, Spill) else a for a in call.args
                if isinstance(a, (Ref, Spill))]
        try:
            # whole columns of one call keep equal heights, as in the spreadsheet
            resolved = self.book.resolve_together([a.target for a in refs],
                                                  default_sheet=me.sheet)
        except (BookError, RefError) as exc:
            raise BadCall(str(exc)) from exc
        areas = {id(a): area for a, area in zip(refs, resolved)}
        me.warning = misaligned(sorted(
            ((p.name, areas[id(a)]) for p, a in zip(params, call.args)
             if p.name in PAIRED and isinstance(a, Ref)),
            key=lambda pa: PAIRED.index(pa[0])))
        if me.warning and self.strict:
            raise Misaligned(me.warning + " (--strict)")
        values = [self._arg(a, me, areas) for a in call.args]
        result = fn(*values)
        table = _as_table(result)
        if call.single and not is_message_cell(table):
            table = [[table[0][0]]]
        return table

    def dependencies(self) -> dict[int, set[int]]:
        """For each cell (by index) the cells whose regions its arguments read."""
        deps: dict[int, set[int]] = {}
        for i, x in enumerate(self.cells):
            areas = list(x.reads) or self._static_reads(x)
            deps[i] = {j for j, o in enumerate(self.cells)
                       if j != i and any(o.region().intersects(a) for a in areas)}
        return deps

    def _static_reads(self, x: XbCell) -> list[Area]:
        out: list[Area] = []

        def walk(call: Call) -> None:
            for a in call.args:
                if isinstance(a, (Ref, Spill)):
                    target = a.anchor.target if isinstance(a, Spill) else a.target
                    try:
                        out.append(self.book.resolve(target, default_sheet=x.sheet))
                    except (BookError, RefError):
                        pass
                elif isinstance(a, Call):
                    walk(a)

        if x.call is not None:
            walk(x.call)
        return out

    def run(self, progress: Progress | None = None) -> None:
        for x in self.cells:
            try:
                x.call = parse_xb_formula(x.formula.text)
            except Unsupported as exc:
                x.message = "xlbridge: " + str(exc)
        # Result shapes are known only after evaluation, so the order is found by rounds:
        # evaluate in the order the known regions give, then recompute the dependencies
        # with the actual result areas; stop when they no longer change.
        edges: dict[int, set[int]] = {}
        for round_ in range(6):
            deps = self.dependencies()
            merged = {i: deps.get(i, set()) | edges.get(i, set()) for i in range(len(self.cells))}
            if round_ > 0 and merged == edges:
                break
            edges = merged
            order, cyclic = _topo(edges)
            self.done.clear()
            for x in self.cells:
                x.reads = []
                if x.call is not None:
                    x.result = None
                    x.message = None
            n = len(order) + len(cyclic)
            for k, i in enumerate(order + cyclic):
                x = self.cells[i]
                if progress is not None and round_ == 0:
                    progress(k, n, x.label)
                if x.call is not None:
                    if i in cyclic:
                        x.message = ("xlbridge: circular reference between XB_ cells ("
                                     + ", ".join(self.cells[j].label for j in cyclic)
                                     + "); break the cycle")
                    else:
                        self._evaluate(x)
                self.done.add(id(x))
            if progress is not None and round_ == 0:
                progress(n, n, "")
        else:  # pragma: no cover - needs result shapes that change every round
            for x in self.cells:
                x.result = None
                x.message = "xlbridge: the XB_ cells' dependencies did not settle; simplify them"
            return
        self._check_ordinary_formulas()

    def _check_ordinary_formulas(self) -> None:
        """A result that read an ordinary formula fed by an XB_ result is not trusted: the
        runner does not recompute ordinary formulas, so that saved value may be stale."""
        self._taint_memo.clear()
        for x in self.cells:
            if not x.ok:
                continue
            for area in x.reads:
                owners = self._xb_regions_hit(area)
                for f in self._formulas_in(area):
                    if calls_xb(f.text) or any(o.region().contains(f.row, f.col)
                                               for o in owners):
                        continue
                    dep = self._formula_depends_on_xb(f)
                    if dep:
                        x.result = None
                        x.message = (
                            f"xlbridge: {Area(f.sheet, f.row, f.col, f.row, f.col).label()} is "
                            f"an ordinary formula that reads the result of {dep}; the runner "
                            "does not recompute ordinary formulas, so its saved value may be "
                            "out of date. Refer to the XB_ result directly"
                        )
                        break
                if not x.ok:
                    break

    def _evaluate(self, x: XbCell) -> None:
        assert x.call is not None
        try:
            x.result = self._call(x.call, x)
            x.message = _first_line(x) if is_message_cell(x.result) else None
        except EvaluationError as exc:
            x.result = None
            x.message = "xlbridge: " + str(exc)
        except Exception as exc:  # a worksheet function never raises; keep the cell honest
            x.result = None
            x.message = f"xlbridge: internal error ({type(exc).__name__}: {exc})"


def _first_line(x: XbCell) -> str:
    if x.result is not None and is_message_cell(x.result):
        return str(x.result[0][0])
    return x.message or ""


def _as_table(result: Any) -> list[list[Any]]:
    if isinstance(result, (list, tuple)):
        if not result:
            return [[""]]
        if all(isinstance(r, (list, tuple)) for r in result):
            return [list(r) for r in result]
        return [[v] for v in result]
    return [[result]]


def _topo(edges: dict[int, set[int]]) -> tuple[list[int], list[int]]:
    """Order with dependencies first (stable by position); the rest are in cycles."""
    remaining = {i: set(d) for i, d in edges.items()}
    order: list[int] = []
    while True:
        ready = sorted(i for i, d in remaining.items() if not d)
        if not ready:
            break
        for i in ready:
            order.append(i)
            del remaining[i]
        for d in remaining.values():
            d.difference_update(ready)
    # cells that merely depend on a cycle are not in it, but cannot be ordered either
    return order, sorted(remaining)


def _worksheet_functions() -> dict[str, Callable[..., Any]]:
    from xlbridge import worksheet

    return dict(worksheet.FUNCTIONS)


def evaluate_book(book: Book, workbook: Any = None, progress: Progress | None = None,
                  functions: dict[str, Callable[..., Any]] | None = None,
                  strict: bool = False) -> Evaluation:
    """Find and evaluate every XB_ formula of ``book`` (``workbook``: an open openpyxl copy
    whose formulas to use; by default they are read from the file). A call whose paired
    ranges sit on different sheet rows gets a warning, or with ``strict`` an error cell."""
    if book.kind == "csv":
        raise BookError(f"{book.path.name} is a CSV file; it holds no formulas to evaluate "
                        "(give the .xlsx or .xlsm workbook)")
    formulas = formula_index(book, workbook)
    ev = _Evaluator(book, formulas, functions or _worksheet_functions(), strict)
    from xlbridge.cells.prepare import shared_arguments

    # every formula reading a range gets the one value read for it, never changed: the
    # cells of a fit are then cleaned once for all the formulas given the same ranges
    with shared_arguments():
        ev.run(progress)
    return Evaluation(book, ev.cells, formulas, ev.n_reads)
