"""Write copies of workbooks with openpyxl: results as values, text always as text.

openpyxl re-saves only what it understands, so the runner never writes to its input; see
:data:`OPENPYXL_LOSSES` for what a copy does not keep.
"""

from __future__ import annotations

import math
import zipfile
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from xlbridge.book.safety import BookError, check_archive, safe_openpyxl, write_atomically

__all__ = [
    "OPENPYXL_LOSSES",
    "add_result_sheet",
    "load_for_copy",
    "losses_in",
    "new_workbook_from_rows",
    "save_copy",
    "set_value",
    "unique_sheet_title",
]

OPENPYXL_LOSSES = (
    "openpyxl, which writes the copy, does not keep charts, images, shapes and text boxes, "
    "form controls, slicers, timelines, sparklines, threaded comments or the data model, "
    "and may drop some formatting (conditional-format extensions, custom views); formulas "
    "keep their text but lose their saved values. The input file is never changed."
)

# Parts of the archive that a copy written by openpyxl loses: (path prefix, description).
_LOST_PARTS = (
    ("xl/charts/chart", "chart"),
    ("xl/media/", "image or media file"),
    ("xl/drawings/vmlDrawing", None),  # comment boxes: kept by openpyxl
    ("xl/drawings/drawing", "drawing (shapes, text boxes, pictures)"),
    ("xl/slicers/", "slicer"),
    ("xl/timelines/", "timeline"),
    ("xl/threadedComments/", "threaded comment part"),
    ("xl/ctrlProps/", "form control"),
    ("xl/model/", "data model part"),
    ("xl/webextensions/", "web extension"),
)


def losses_in(path: Path) -> list[str]:
    """What a copy of this workbook written by openpyxl will not keep, e.g. ``2 charts``."""
    if path.suffix.lower() == ".csv":
        return []
    counts: dict[str, int] = {}
    try:
        with zipfile.ZipFile(path) as zf:
            names = zf.namelist()
            sparklines = any(
                b"sparklineGroup" in zf.read(n)
                for n in names
                if n.startswith("xl/worksheets/sheet") and n.endswith(".xml")
                and zf.getinfo(n).file_size < 50 * 1024**2
            )
    except (OSError, zipfile.BadZipFile):
        return []
    for name in names:
        for prefix, what in _LOST_PARTS:
            if name.startswith(prefix) and not name.endswith(".rels"):
                if what:
                    counts[what] = counts.get(what, 0) + 1
                break
    out = [f"{n} {what}{'s' if n != 1 and not what.endswith('part') else ''}"
           for what, n in counts.items()]
    if sparklines:
        out.append("sparklines")
    return out


def load_for_copy(path: Path) -> Any:
    """openpyxl workbook of an .xlsx/.xlsm input (formulas, not values), for a copy."""
    check_archive(path)
    openpyxl = safe_openpyxl()
    import warnings

    try:
        with warnings.catch_warnings():
            # openpyxl warns about every extension it drops; losses_in() reports them once
            warnings.simplefilter("ignore")
            return openpyxl.load_workbook(
                path, keep_vba=path.suffix.lower() == ".xlsm", keep_links=True,
                data_only=False, rich_text=False,
            )
    except Exception as exc:  # openpyxl raises many types for damaged files
        raise BookError(f"{path.name} cannot be opened for writing a copy: {exc}") from None


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
    title = "".join("_" if ch in _BAD_TITLE else ch for ch in wanted)[:31].strip("'") or "sheet"
    existing = {ws.title.casefold() for ws in wb.worksheets}
    if replace_active:
        existing.discard(wb.active.title.casefold())
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
