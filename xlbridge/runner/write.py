"""Put the results of an evaluation into a copy of the workbook, never over data.

Two kinds of copy, both patched into the original package (:mod:`xlbridge.book.patch`),
which keeps every other part byte for byte:

- live (the default): each XB_ formula stays and gets its result as the saved value. An
  array formula's range becomes the result's size, and the cells it covers get the values;
  a plain formula holds its first value, as a spreadsheet program shows a plain formula.
- values (``--values``): each XB_ formula is replaced by its values, for readers without
  the add-in; the whole table is written, from a plain formula too.

A result that would cover data or another formula (a spreadsheet shows ``#SPILL!``) or
another result is not written: the formula's cell gets a message instead.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from xlbridge.book.patch import CellEdit, PatchReport, patch_copy
from xlbridge.book.refs import Area
from xlbridge.runner.recalc import Evaluation, XbCell

__all__ = ["WriteReport", "plan_results", "write_copy"]

Edits = dict[str, dict[tuple[int, int], CellEdit]]


@dataclass
class WriteReport:
    written: int = 0
    conflicts: list[str] = field(default_factory=list)
    plain_multi: int = 0  # plain (non-array) formulas whose result spans several cells
    package: PatchReport | None = None
    ranges: dict[str, str] = field(default_factory=dict)  # cell label -> cells written


def _range_text(area: Area) -> str:
    return area.cells_text().replace("$", "")


def plan_results(evaluation: Evaluation, *, values: bool = False) -> tuple[Edits, WriteReport]:
    """The cell edits that put every XB_ result into a copy ({sheet: {(row, col): edit}})
    and what they do. ``values``: formulas replaced by their values."""
    rep = WriteReport()
    edits: Edits = {}
    written: list[XbCell] = []
    formula_edit = "drop" if values else "keep"
    for x in evaluation.cells:
        cells = edits.setdefault(x.sheet, {})
        anchor = (x.formula.row, x.formula.col)
        arr = x.formula.array_ref
        if arr is not None:  # the old range is emptied; the result fills its own range
            for r in range(arr.r1, arr.r2 + 1):
                for c in range(arr.c1, arr.c2 + 1):
                    cells.setdefault((r, c), CellEdit(None))
        one_cell = _range_text(x.anchor) if arr is not None and not values else None
        if not x.ok:
            cells[anchor] = CellEdit(x.message or "xlbridge: no result", formula_edit,
                                     one_cell)
            continue
        assert x.result is not None
        out = x.output_area()
        if arr is None and not values:
            # a plain formula shows its first value; the table needs an array formula
            if out.n_rows > 1 or out.n_cols > 1:
                rep.plain_multi += 1
            cells[anchor] = CellEdit(_first(x.result), formula_edit)
            rep.ranges[x.label] = x.anchor.label()
            rep.written += 1
            written.append(x)
            continue
        cell = _blocked(evaluation, x, out)
        blocked = f"{cell} is not empty" if cell else None
        if blocked is None:
            clash = next((o for o in written if o.output_area().intersects(out)), None)
            if clash is not None:
                blocked = f"it overlaps the result of {clash.label}"
        if blocked:
            msg = (f"xlbridge: the result needs {out.cells_text()} but {blocked} (a "
                   "spreadsheet shows #SPILL!); clear those cells or move the formula")
            cells[anchor] = CellEdit(msg, formula_edit, one_cell)
            rep.conflicts.append(f"{x.label}: {msg}")
            x.message = msg
            x.result = None
            continue
        for i, row in enumerate(x.result):
            for j, v in enumerate(row):
                cells[(out.r1 + i, out.c1 + j)] = CellEdit(None if v == "" else v)
        cells[anchor] = CellEdit(_first(x.result), formula_edit,
                                 None if values or arr is None else _range_text(out))
        if arr is None and (out.n_rows > 1 or out.n_cols > 1):
            rep.plain_multi += 1
        rep.ranges[x.label] = out.label()
        rep.written += 1
        written.append(x)
    return edits, rep


def _first(table: list[list[Any]]) -> Any:
    v = table[0][0] if table and table[0] else None
    return None if v == "" else v


def _blocked(evaluation: Evaluation, x: XbCell, out: Area) -> str | None:
    """First cell of ``out`` holding data or a formula that is not this cell's own."""
    book = evaluation.book
    formulas = evaluation.formulas.get(x.sheet, {})
    arr = x.formula.array_ref
    block = book.read_area(out)
    for i in range(out.n_rows):
        for j in range(out.n_cols):
            r, c = out.r1 + i, out.c1 + j
            if (r, c) == (x.formula.row, x.formula.col) or (arr and arr.contains(r, c)):
                continue
            other = next((o for o in evaluation.cells if o is not x
                          and o.formula.array_ref and o.formula.array_ref.contains(r, c)
                          and o.sheet == x.sheet), None)
            if (r, c) in formulas or block[i][j] is not None or other is not None:
                return Area(x.sheet, r, c, r, c).cells_text()
    return None


def write_copy(evaluation: Evaluation, out: Path, *, values: bool = False,
               force: bool = False) -> WriteReport:
    """Write the copy of the evaluated workbook to ``out`` (see the module text)."""
    edits, rep = plan_results(evaluation, values=values)
    rep.package = patch_copy(evaluation.book.path, out, edits, force=force,
                             drop_calc_chain=values)
    return rep
