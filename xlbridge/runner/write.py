"""Write the results of an evaluation into an openpyxl copy of the workbook: each XB_
formula is replaced by its values (or its message), never over data it would cover."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from xlbridge.book.refs import Area
from xlbridge.book.writer import set_value
from xlbridge.runner.recalc import Evaluation, XbCell

__all__ = ["WriteReport", "write_results"]


@dataclass
class WriteReport:
    written: int = 0
    conflicts: list[str] = field(default_factory=list)
    plain_multi: int = 0  # plain (non-array) formulas whose result spans several cells


def write_results(evaluation: Evaluation, workbook: Any) -> WriteReport:
    """Replace each XB_ formula of the openpyxl ``workbook`` by its values (or message)."""
    rep = WriteReport()
    cells = evaluation.cells
    written: list[XbCell] = []
    for x in cells:
        ws = workbook[x.sheet]
        arr = x.formula.array_ref
        if arr is not None:
            for r in range(arr.r1, arr.r2 + 1):
                for c in range(arr.c1, arr.c2 + 1):
                    ws.cell(r, c).value = None
        anchor = ws.cell(x.formula.row, x.formula.col)
        if not x.ok:
            set_value(anchor, x.message or "xlbridge: no result")
            continue
        assert x.result is not None
        out = x.output_area()
        cell = _blocked(evaluation, x, out)
        blocked = f"{cell} is not empty" if cell else None
        if blocked is None:
            clash = next((o for o in written if o.output_area().intersects(out)), None)
            if clash is not None:
                blocked = f"it overlaps the result of {clash.label}"
        if blocked:
            msg = (f"xlbridge: the result needs {out.cells_text()} but {blocked} (a "
                   "spreadsheet shows #SPILL!); clear those cells or move the formula")
            set_value(anchor, msg)
            rep.conflicts.append(f"{x.label}: {msg}")
            x.message = msg
            x.result = None
            continue
        for i, row in enumerate(x.result):
            for j, v in enumerate(row):
                set_value(ws.cell(out.r1 + i, out.c1 + j), v)
        if arr is None and (out.n_rows > 1 or out.n_cols > 1):
            rep.plain_multi += 1
        rep.written += 1
        written.append(x)
    return rep


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
