"""New workbooks written with openpyxl: the .xlsx copy of a CSV file, text always as text.

Copies of .xlsx/.xlsm workbooks are not written here but patched part by part
(:mod:`xlbridge.book.patch`), so that they keep every part openpyxl would drop.
"""

from __future__ import annotations

import math
import zipfile
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from xlbridge.book.safety import BookError, safe_openpyxl, write_atomically

__all__ = [
    "add_result_sheet",
    "new_workbook_from_rows",
    "save_copy",
    "set_value",
    "unique_sheet_title",
    "unique_title",
]

def new_workbook_from_rows(sheet: str, rows: Iterable[Sequence[Any]]) -> Any:
    """A new workbook holding CSV rows (the copy of a .csv input)."""
    openpyxl = safe_openpyxl()
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = unique_sheet_title(wb, sheet[:31] or "data", replace_active=True)
    for r, row in enumerate(rows, start=1):
        for c, v in enumerate(row, start=1):
            if v is not None:
                set_value(ws.cell(r, c), v)
    return wb


def set_value(cell: Any, value: Any) -> None:
    """Write a value; text is stored as text even when it starts with = + - @."""
    if value is None or value == "":
        cell.value = None
        return
    if isinstance(value, str):
        cell.value = value
        cell.data_type = "s"  # never a formula, never an error code
        if value[:1] in ("=", "+", "-", "@"):
            cell.quotePrefix = True  # stays text when the cell is edited and re-entered
        return
    if type(value) is float and math.isfinite(value) and float(format(value, ".16g")) != value:
        # openpyxl writes numbers with 16 significant digits, which does not round-trip
        # every double; the shortest text that does (repr, up to 17 digits) is handed over
        # ready-made, and the cell is marked a number so the text goes into the file as is.
        cell.value = repr(value)
        cell.data_type = "n"
        return
    cell.value = value


_BAD_TITLE = set("[]:*?/\\")


def unique_sheet_title(wb: Any, wanted: str, replace_active: bool = False) -> str:
    """A title for a new sheet of the openpyxl workbook ``wb`` (see :func:`unique_title`)."""
    existing = [ws.title for ws in wb.worksheets]
    if replace_active:
        existing.remove(wb.active.title)
    return unique_title(existing, wanted)


def unique_title(existing: Iterable[str], wanted: str) -> str:
    """``wanted`` as a valid sheet title (31 characters, no []:*?/\\) that differs, in
    any case, from the ``existing`` titles; ``(2)``, ``(3)``... are added if needed."""
    title = "".join("_" if ch in _BAD_TITLE else ch for ch in wanted)[:31].strip("'") or "sheet"
    existing = {t.casefold() for t in existing}
    if title.casefold() not in existing:
        return title
    for i in range(2, 1000):
        cand = f"{title[:27]} ({i})"
        if cand.casefold() not in existing:
            return cand
    raise BookError("the workbook has too many sheets of that name")


def add_result_sheet(wb: Any, title: str, blocks: Sequence[tuple[str, Sequence[Sequence[Any]]]]
                     ) -> str:
    """Add a sheet with captioned tables, one below the other; returns its title."""
    from openpyxl.styles import Font

    name = unique_sheet_title(wb, title)
    ws = wb.create_sheet(name)
    r = 1
    for caption, table in blocks:
        if caption:
            set_value(ws.cell(r, 1), caption)
            ws.cell(r, 1).font = Font(bold=True)
            r += 1
        for row in table:
            for c, v in enumerate(row, start=1):
                set_value(ws.cell(r, c), v)
            r += 1
        r += 1
    return name


def save_copy(wb: Any, out: Path, *, force: bool, inputs: Iterable[Path]) -> None:
    """Save atomically (temporary file, then rename); never over an input. The copy gets
    the permission bits of the first input, the workbook it copies."""
    def write(tmp: Path) -> None:
        wb.save(tmp)

    inputs = list(inputs)
    write_atomically(out, write, force=force, inputs=inputs,
                     mode_from=inputs[0] if inputs else None)
    # Cheap self-check: the copy must be a readable archive.
    try:
        with zipfile.ZipFile(out) as zf:
            bad = zf.testzip()
    except zipfile.BadZipFile as exc:  # pragma: no cover - would be an openpyxl bug
        raise BookError(f"the copy {out} was written but cannot be read back: {exc}") from None
    if bad:  # pragma: no cover
        raise BookError(f"the copy {out} was written but part {bad} is damaged")
