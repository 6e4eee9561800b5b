"""The workbook as the runner reads it: :class:`Book`, the shapes of values xlwings hands a
function, and the rules that do not depend on the file format.

Raw values: ``None`` for a blank, ``float`` for a number, ``bool``, ``datetime`` for a date
or time cell, ``str`` for text, and the error text (``"#N/A"``, ``"#DIV/0!"``) for an error
cell -- the values xlwings gives a worksheet function with ``err_to_str``.  The file formats
are read in :mod:`xlbridge.book.xlsx` and :mod:`xlbridge.book.csvbook`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from xlbridge.book.refs import MAX_COL, MAX_ROW, Area, NameRef, RefError, TableRef, parse_ref
from xlbridge.book.safety import BookError
from xlbridge.book.values import EPOCH

__all__ = ["Book", "SheetData", "Structure", "TableInfo", "cell_value", "convert_column",
           "missing_value_message", "xlwings_shape"]


def xlwings_shape(block: list[list[Any]]) -> Any:
    """The value xlwings passes for a range: scalar, flat list (one row/column), or 2-D."""
    if not block or not block[0]:
        return None
    if len(block) == 1 and len(block[0]) == 1:
        return block[0][0]
    if len(block) == 1:
        return list(block[0])
    if len(block[0]) == 1:
        return [row[0] for row in block]
    return [list(row) for row in block]


def cell_value(v: Any) -> Any:
    """A value as python-calamine gives it -> the raw value xlwings passes."""
    if v is None or v == "":
        return None
    t = type(v)
    if t is float or t is str or t is bool:
        return v
    if t is int:
        return float(v)
    if isinstance(v, dt.datetime):
        return v
    if isinstance(v, dt.date):
        return dt.datetime(v.year, v.month, v.day)
    if isinstance(v, dt.time):
        return dt.datetime.combine(EPOCH.date(), v)
    if isinstance(v, dt.timedelta):
        return EPOCH + v
    return v


@dataclass(frozen=True)
class TableInfo:
    """A worksheet table (``ListObject``): name, sheet, full area, header/totals rows."""

    name: str
    sheet: str
    area: Area
    columns: tuple[str, ...]
    header_rows: int = 1
    totals_rows: int = 0


def convert_column(col: list[Any]) -> list[Any]:
    """A column as python-calamine (or openpyxl) gives it -> the raw values xlwings passes
    (the list itself when it holds numbers only)."""
    kinds = set(map(type, col))
    if kinds <= {float}:
        return col
    if kinds <= {float, str}:  # numbers and text: only "" (a blank) changes
        return [None if v == "" else v for v in col] if "" in col else col
    conv = cell_value
    return [v if v.__class__ is float else conv(v) for v in col]


@dataclass
class SheetData:
    """A sheet's values held column by column (a list per column costs 8 bytes a cell; a
    list per row added about 90 bytes a row)."""

    name: str
    #: column j + 1 from row 1, as xlwings passes the values (None for a blank); every
    #: column holds ``n_rows`` values
    columns: list[list[Any]]
    n_rows: int
    errors: dict[tuple[int, int], str] = field(default_factory=dict)
    no_value: set[tuple[int, int]] = field(default_factory=set)
    #: None when the columns hold the whole sheet; else only columns 1 to this (a sheet too
    #: large to read whole is read as far as the references need).
    cols_read: int | None = None

    @property
    def n_cols(self) -> int:
        return len(self.columns)

    @classmethod
    def from_rows(cls, name: str, rows: list[list[Any]], *, converted: bool = False,
                  cols_read: int | None = None) -> SheetData:
        """From rows as a reader gives them (ragged rows are padded with blanks);
        ``converted``: the values are already those xlwings passes."""
        width = max(map(len, rows), default=0)
        columns = [[row[c] if c < len(row) else None for row in rows] for c in range(width)]
        if not converted:
            columns = [convert_column(col) for col in columns]
        return cls(name, columns, len(rows), cols_read=cols_read)


@dataclass
class Structure:
    sheets: list[str]
    sheet_parts: dict[str, str]
    names: dict[tuple[str | None, str], str]  # (sheet scope or None, name casefold) -> text
    name_spelling: dict[str, str]
    tables: dict[str, TableInfo]


# --- the book ----------------------------------------------------------------------------


class Book:
    """An input workbook opened for reading; the file itself is never written."""

    def __init__(self, path: Path, kind: str, sheets: list[str],
                 structure: Structure | None = None) -> None:
        self.path = path
        self.kind = kind
        self.sheet_names = sheets
        self._sheets: dict[str, SheetData] = {}
        self._structure = structure or Structure(sheets, {}, {}, {}, {})

    def load_sheet(self, name: str, last_col: int | None = None
                   ) -> SheetData:  # pragma: no cover - abstract
        """Read one sheet's values, at least columns 1 to ``last_col`` (None: all of them;
        each file format implements this)."""
        raise NotImplementedError

    def formula_box(self, name: str) -> tuple[int, int, int, int] | None:
        """(first row, first column, last row, last column) of the cells of a sheet that
        may hold formulas; None if it holds none. Formats that cannot tell say the whole
        sheet."""
        return None if self.kind == "csv" else (1, 1, MAX_ROW, MAX_COL)

    def sheet_part(self, name: str) -> str | None:
        """The archive part holding a sheet's XML (None for CSV or when not known)."""
        return self._structure.sheet_parts.get(name)

    @property
    def tables(self) -> dict[str, TableInfo]:
        return self._structure.tables

    @property
    def defined_names(self) -> dict[tuple[str | None, str], str]:
        return self._structure.names

    @property
    def default_sheet(self) -> str:
        return self.sheet_names[0]

    def sheet_name(self, name: str | None) -> str:
        """Canonical spelling of a sheet name (names match regardless of case)."""
        if name is None:
            return self.default_sheet
        if name in self.sheet_names:
            return name
        for s in self.sheet_names:
            if s.casefold() == name.casefold():
                return s
        raise BookError(
            f"sheet {name!r} not found in {self.path.name}; its sheets are: "
            + ", ".join(repr(s) for s in self.sheet_names)
        )

    def _sheet(self, name: str, last_col: int | None = None) -> SheetData:
        """The sheet's values, holding at least columns 1 to ``last_col`` (None: all)."""
        sh = self._sheets.get(name)
        if sh is not None and (sh.cols_read is None
                               or (last_col is not None and last_col <= sh.cols_read)):
            return sh
        sh = self._sheets[name] = self.load_sheet(name, last_col)
        return sh

    def used_extent(self, sheet: str) -> tuple[int, int]:
        """(last row, last column) of the sheet's stored cells; (0, 0) when empty."""
        sh = self._sheet(self.sheet_name(sheet))
        return sh.n_rows, sh.n_cols

    # -- references
    def resolve(self, ref: str | Area | NameRef | TableRef, default_sheet: str | None = None,
                _depth: int = 0) -> Area:
        """Reference -> concrete Area on a named sheet (whole columns trimmed)."""
        parsed = parse_ref(ref) if isinstance(ref, str) else ref
        if isinstance(parsed, Area):
            area = parsed.with_sheet(self.sheet_name(parsed.sheet or default_sheet))
            return self._trim(area)
        if isinstance(parsed, TableRef):
            return self._table_area(parsed)
        return self._name_area(parsed, default_sheet, _depth)

    def resolve_together(self, refs: list[Any], default_sheet: str | None = None
                         ) -> list[Area]:
        """Resolve several references used together (y and x of one fit): whole columns are
        cut at the same row, the last row holding data in any of them, so that they keep
        equal heights as they have in the spreadsheet."""
        areas = [self.resolve(r, default_sheet) for r in refs]
        whole = [a for a in areas if a.whole_columns]
        if len(whole) < 2:
            return areas
        last = max(a.r2 for a in whole)
        return [Area(a.sheet, a.r1, a.c1, last, a.c2, whole_columns=True) if a.whole_columns
                else a for a in areas]

    def _trim(self, area: Area) -> Area:
        if not ((area.whole_columns and area.r2 == MAX_ROW)
                or (area.whole_rows and area.c2 == MAX_COL)):
            return area  # a cell range, or whole columns already cut at the data
        whole_columns = area.whole_columns and area.r2 == MAX_ROW
        sh = self._sheet(area.sheet or self.default_sheet, area.c2 if whole_columns else None)
        if whole_columns:
            # the last row holding a value, an error or a formula without a saved value
            # in any of the columns (within the rows read)
            n = min(sh.n_rows, MAX_ROW)
            last = 0
            for c in range(area.c1, min(area.c2, sh.n_cols) + 1):
                col = sh.columns[c - 1]
                i = n
                while i > last and col[i - 1] is None:
                    i -= 1
                last = max(last, i)
            marked = [r for (r, c) in (*sh.errors, *sh.no_value)
                      if area.c1 <= c <= area.c2 and last < r <= n]
            last = max([last, *marked])
            return Area(area.sheet, 1, area.c1, max(last, 1), area.c2, whole_columns=True)
        last = 0
        for r in range(area.r1, min(area.r2, sh.n_rows) + 1):
            for c in range(min(sh.n_cols, MAX_COL), 0, -1):
                if self._value(sh, r, c) is not None:
                    last = max(last, c)
                    break
        return Area(area.sheet, area.r1, 1, area.r2, max(last, 1), whole_rows=True)

    def _table_area(self, ref: TableRef) -> Area:
        info = self.tables.get(ref.table.casefold())
        if info is None:
            known = ", ".join(t.name for t in self.tables.values()) or "none"
            raise BookError(
                f"{ref.label()}: no table called {ref.table!r} in {self.path.name} "
                f"(tables: {known})"
            )
        a = info.area
        h, t = info.header_rows, info.totals_rows
        parts = set(ref.parts) or {"data"}
        if "all" in parts:
            r1, r2 = a.r1, a.r2
        else:
            spans = []
            if "headers" in parts:
                if h == 0:
                    raise BookError(f"{ref.label()}: table {info.name} has no header row")
                spans.append((a.r1, a.r1 + h - 1))
            if "data" in parts:
                spans.append((a.r1 + h, a.r2 - t))
            if "totals" in parts:
                if t == 0:
                    raise BookError(f"{ref.label()}: table {info.name} has no totals row")
                spans.append((a.r2 - t + 1, a.r2))
            if "headers" in parts and "totals" in parts and "data" not in parts:
                raise BookError(f"{ref.label()}: #Headers and #Totals are not adjacent")
            r1, r2 = min(s[0] for s in spans), max(s[1] for s in spans)
        c1, c2 = a.c1, a.c2
        if ref.first is not None:
            lookup = {c.casefold(): i for i, c in enumerate(info.columns)}
            idx = []
            for col in (ref.first, ref.last or ref.first):
                if col.casefold() not in lookup:
                    raise BookError(
                        f"{ref.label()}: table {info.name} has no column {col!r}; its "
                        "columns are: " + ", ".join(repr(c) for c in info.columns)
                    )
                idx.append(lookup[col.casefold()])
            c1, c2 = a.c1 + min(idx), a.c1 + max(idx)
        if r2 < r1:
            raise BookError(f"{ref.label()}: table {info.name} has no data rows")
        return Area(info.sheet, r1, c1, r2, c2)

    def _name_area(self, ref: NameRef, default_sheet: str | None, depth: int) -> Area:
        names = self.defined_names
        key = ref.name.casefold()
        text = None
        if ref.sheet is not None:
            text = names.get((self.sheet_name(ref.sheet).casefold(), key))
        else:
            if default_sheet is not None:
                text = names.get((default_sheet.casefold(), key))
            if text is None:
                text = names.get((None, key))
            if text is None:
                scoped = [s for (s, n) in names if n == key and s is not None]
                if len(scoped) == 1:
                    text = names[(scoped[0], key)]
        if text is None:
            if ref.sheet is None and key in self.tables:
                return self._table_area(TableRef(ref.name, text=ref.name))
            if ref.off_sheet:
                raise BookError(ref.off_sheet)
            known = sorted({self._structure.name_spelling.get(n, n)
                            for (_, n) in names})
            raise BookError(
                f"{ref.label()!r} is not a cell reference and {self.path.name} has no defined "
                "name or table of that name"
                + (f" (defined names: {', '.join(known[:20])})" if known else "")
            )
        label = ref.label()
        if "#REF!" in text.upper():
            raise BookError(f"defined name {label} refers to a deleted range ({text})")
        if depth > 5:
            raise BookError(f"defined name {label} refers to names nested too deeply")
        try:
            target = parse_ref(text)
        except RefError:
            raise BookError(
                f"defined name {label} is {text!r}, not a plain range; the runner reads "
                "names that refer to one rectangular range"
            ) from None
        return self.resolve(target, default_sheet=default_sheet, _depth=depth + 1)

    # -- values
    def _value(self, sh: SheetData, r: int, c: int) -> Any:
        if sh.errors and (r, c) in sh.errors:
            return sh.errors[(r, c)]
        if r > sh.n_rows or c > sh.n_cols:
            return None
        return sh.columns[c - 1][r - 1]

    def read_columns(self, area: Area) -> list[list[Any]]:
        """Raw values of a resolved area, column by column (blanks beyond the data: None)."""
        sh = self._sheet(area.sheet or self.default_sheet, area.c2)
        r1, r2 = area.r1 - 1, min(area.r2, sh.n_rows)
        cols: list[list[Any]] = []
        for c in range(area.c1 - 1, area.c2):
            col = sh.columns[c][r1:r2] if c < sh.n_cols else []
            if len(col) < area.n_rows:
                col.extend([None] * (area.n_rows - len(col)))
            cols.append(col)
        if sh.errors:
            for (r, c), err in sh.errors.items():
                if area.contains(r, c):
                    cols[c - area.c1][r - area.r1] = err
        return cols

    def read_area(self, area: Area) -> list[list[Any]]:
        """Raw values of a resolved area, row by row (blanks beyond the data are None)."""
        cols = self.read_columns(area)
        return [list(r) for r in zip(*cols)]

    def xlwings_value(self, area: Area) -> Any:
        """The value xlwings would pass a worksheet function for this area."""
        if area.n_cols == 1 and area.n_rows > 1:
            return self.read_columns(area)[0]
        return xlwings_shape(self.read_area(area))

    def formulas_without_value(self, area: Area) -> list[tuple[int, int]]:
        """Cells in ``area`` holding a formula whose value was never saved."""
        sh = self._sheet(area.sheet or self.default_sheet, area.c2)
        return sorted(rc for rc in sh.no_value if area.contains(*rc))

    def read(self, ref: str | Area, default_sheet: str | None = None) -> tuple[Area, list]:
        """Resolve and read; refuses areas containing formulas without saved values."""
        area = self.resolve(ref, default_sheet) if not isinstance(ref, Area) else ref
        missing = self.formulas_without_value(area)
        if missing:
            raise BookError(missing_value_message(self.path.name, area.sheet or "", missing))
        return area, self.read_area(area)

    def close(self) -> None:
        self._sheets.clear()


def missing_value_message(book: str, sheet: str, cells: Iterable[tuple[int, int]]) -> str:
    from xlbridge.book.refs import quote_sheet

    cells = list(cells)
    shown = ", ".join(
        Area(sheet, r, c, r, c).cells_text() for r, c in cells[:5]
    ) + (f" and {len(cells) - 5} more" if len(cells) > 5 else "")
    one = len(cells) == 1
    return (
        f"{quote_sheet(sheet)}!{shown} in {book} "
        + ("holds a formula whose value was" if one else "hold formulas whose values were")
        + " never saved (the file was written by a program that does not calculate); open "
        "it in a spreadsheet program, recalculate and save, then run xlbridge again"
    )


