"""Reference text -> parsed reference (no file access, no openpyxl).

Forms read: ``B2:B40``, ``$B$2:$B$40``, ``B7``, ``Data!B2:C40``, ``'Site data'!B2:B352``,
whole columns ``B:B`` / ``Data!B:D``, whole rows ``2:2``, defined names ``my_y`` /
``Data!my_y``, and structured table references ``Sales[Price]``, ``Sales[[Price]:[Qty]]``,
``Sales[#All]``, ``Sales[[#Headers],[Price]]``.  Resolution against a workbook happens in
:mod:`xlbridge.book.reader`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = [
    "MAX_COL",
    "MAX_ROW",
    "Area",
    "NameRef",
    "RefError",
    "TableRef",
    "col_letters",
    "col_number",
    "misaligned",
    "parse_ref",
    "quote_sheet",
]

MAX_ROW = 1_048_576
MAX_COL = 16_384  # column XFD


class RefError(ValueError):
    """A reference cannot be read; the message says what is wrong."""


def col_number(letters: str) -> int:
    """``"A"`` -> 1, ``"XFD"`` -> 16384 (no range check; the sheet's edge is checked where
    references are read).

    The one column-letter rule of the reading side. openpyxl.utils has the same
    conversions, but importing openpyxl takes longer than a whole read of a small
    workbook, and reading never needs it otherwise (only writing a copy does).
    """
    n = 0
    for ch in letters.upper():
        n = n * 26 + (ord(ch) - 64)
    return n


def col_letters(number: int) -> str:
    """1 -> ``"A"``, 16384 -> ``"XFD"``."""
    if number < 1:
        raise ValueError(f"column number must be >= 1, got {number}")
    out = ""
    while number:
        number, rem = divmod(number - 1, 26)
        out = chr(65 + rem) + out
    return out


# U+00C0..U+FFFF written as a negated class: the same characters, but it compiles in
# microseconds where the plain range takes about 10 ms, paid by every command at start-up
_HIGH = r"[^\x00-\xbf\U00010000-\U0010ffff]"
_PLAIN_SHEET = re.compile(rf"^(?:[A-Za-z_]|{_HIGH})(?:[\w.]|{_HIGH})*$")


def quote_sheet(name: str) -> str:
    """Sheet name as it must be written in a reference (quoted when needed)."""
    if _PLAIN_SHEET.match(name) and not _CELL.match(name) and not _R1C1_LIKE.match(name):
        return name
    return "'" + name.replace("'", "''") + "'"


@dataclass(frozen=True)
class Area:
    """A rectangle of cells, 1-based inclusive; ``sheet`` None means 'the default sheet'."""

    sheet: str | None
    r1: int
    c1: int
    r2: int
    c2: int
    whole_columns: bool = False
    whole_rows: bool = False

    @property
    def n_rows(self) -> int:
        return self.r2 - self.r1 + 1

    @property
    def n_cols(self) -> int:
        return self.c2 - self.c1 + 1

    def with_sheet(self, sheet: str) -> Area:
        return Area(sheet, self.r1, self.c1, self.r2, self.c2, self.whole_columns,
                    self.whole_rows)

    def cells_text(self) -> str:
        """``B2:C40`` / ``B7`` / ``B:B`` without the sheet."""
        # Whole columns/rows print as such until trimmed to the data (then as cells).
        if self.whole_columns and self.r1 == 1 and self.r2 == MAX_ROW:
            return f"{col_letters(self.c1)}:{col_letters(self.c2)}"
        if self.whole_rows and self.c1 == 1 and self.c2 == MAX_COL:
            return f"{self.r1}:{self.r2}"
        a = f"{col_letters(self.c1)}{self.r1}"
        if self.r1 == self.r2 and self.c1 == self.c2:
            return a
        return f"{a}:{col_letters(self.c2)}{self.r2}"

    def label(self) -> str:
        """Reference text, e.g. ``'Site data'!B2:B352``."""
        if self.sheet is None:
            return self.cells_text()
        return f"{quote_sheet(self.sheet)}!{self.cells_text()}"

    def contains(self, row: int, col: int) -> bool:
        return self.r1 <= row <= self.r2 and self.c1 <= col <= self.c2

    def intersects(self, other: Area) -> bool:
        return (
            (self.sheet or "").casefold() == (other.sheet or "").casefold()
            and self.r1 <= other.r2
            and other.r1 <= self.r2
            and self.c1 <= other.c2
            and other.c1 <= self.c2
        )


@dataclass(frozen=True)
class NameRef:
    """A defined name, optionally sheet-scoped (``Data!my_y``)."""

    name: str
    sheet: str | None = None
    #: set when the text also reads as a cell beyond the sheet's edge (e.g. XFE1): the
    #: message to give if the workbook has no such name
    off_sheet: str | None = None

    def label(self) -> str:
        return self.name if self.sheet is None else f"{quote_sheet(self.sheet)}!{self.name}"


@dataclass(frozen=True)
class TableRef:
    """A structured reference.

    ``parts`` is a subset of {"all", "data", "headers", "totals"} (empty means data);
    ``first``/``last`` are column names (None: every column).
    """

    table: str
    parts: frozenset[str] = frozenset()
    first: str | None = None
    last: str | None = None
    text: str = ""

    def label(self) -> str:
        return self.text or self.table


_CELL = re.compile(r"^\$?([A-Za-z]{1,3})\$?([0-9]+)$")
_COL = re.compile(r"^\$?([A-Za-z]{1,3})$")
_ROW = re.compile(r"^\$?([0-9]+)$")
_R1C1_LIKE = re.compile(r"^[Rr][0-9]*[Cc][0-9]*$")
_NAME = re.compile(rf"^(?:[A-Za-z_\\]|{_HIGH})(?:[\w.?\\]|{_HIGH})*$")
_TABLE_START = re.compile(rf"^(?:[A-Za-z_\\]|{_HIGH})(?:[\w.\\]|{_HIGH})*\[")
_SPECIALS = {"#all": "all", "#data": "data", "#headers": "headers", "#totals": "totals"}

_SYNTAX_HELP = (
    "use A1 references such as B2:B40, $B$2:$B$40, Data!B2:B40, 'Site data'!B2:B40, "
    "a whole column such as Data!B:B, a defined name, or a table column such as Sales[Price]"
)


def _split_sheet(text: str) -> tuple[str | None, str]:
    """Split ``'Site data'!B2`` into the sheet name and the rest."""
    if text.startswith("'"):
        i, out = 1, []
        while i < len(text):
            ch = text[i]
            if ch == "'":
                if i + 1 < len(text) and text[i + 1] == "'":
                    out.append("'")
                    i += 2
                    continue
                break
            out.append(ch)
            i += 1
        else:
            raise RefError(f"{text!r}: the quoted sheet name has no closing quote")
        rest = text[i + 1 :]
        if not rest.startswith("!"):
            raise RefError(f"{text!r}: a quoted sheet name must be followed by '!'")
        sheet = "".join(out)
        body = rest[1:]
    elif "!" in text:
        sheet, _, body = text.rpartition("!")
        if not sheet:
            raise RefError(f"{text!r}: the sheet name before '!' is empty")
        if "'" in sheet:
            raise RefError(f"{text!r}: put a sheet name with quotes or spaces in '...'")
    else:
        return None, text
    if sheet.startswith("[") or "[" in sheet:
        raise RefError(
            f"{text!r} refers to another workbook; copy the data into this workbook first"
        )
    if not sheet.strip():
        raise RefError(f"{text!r}: the sheet name is empty")
    return sheet, body


def _cell(text: str, whole: str) -> tuple[int, int]:
    m = _CELL.match(text)
    if not m:
        raise RefError(f"{whole!r} is not a cell reference; {_SYNTAX_HELP}")
    col, row = col_number(m.group(1)), int(m.group(2))
    _check_bounds(whole, row=row, col=col)
    return row, col


def _check_bounds(whole: str, row: int | None = None, col: int | None = None) -> None:
    if row is not None and not (1 <= row <= MAX_ROW):
        raise RefError(
            f"{whole!r} is off the sheet: rows run from 1 to {MAX_ROW:,}"
        )
    if col is not None and not (1 <= col <= MAX_COL):
        raise RefError(
            f"{whole!r} is off the sheet: columns run from A to {col_letters(MAX_COL)}"
        )


def _parse_area(sheet: str | None, body: str, whole: str) -> Area | None:
    if ":" in body:
        a, _, b = body.partition(":")
        if _COL.match(a) and _COL.match(b):
            c1, c2 = col_number(_COL.match(a).group(1)), col_number(_COL.match(b).group(1))
            _check_bounds(whole, col=c1)
            _check_bounds(whole, col=c2)
            c1, c2 = min(c1, c2), max(c1, c2)
            return Area(sheet, 1, c1, MAX_ROW, c2, whole_columns=True)
        if _ROW.match(a) and _ROW.match(b):
            r1, r2 = int(_ROW.match(a).group(1)), int(_ROW.match(b).group(1))
            _check_bounds(whole, row=r1)
            _check_bounds(whole, row=r2)
            r1, r2 = min(r1, r2), max(r1, r2)
            return Area(sheet, r1, 1, r2, MAX_COL, whole_rows=True)
        if _CELL.match(a) or _CELL.match(b) or _looks_like_cell(a) or _looks_like_cell(b):
            r1, c1 = _cell(a, whole)
            r2, c2 = _cell(b, whole)
            return Area(sheet, min(r1, r2), min(c1, c2), max(r1, r2), max(c1, c2))
        raise RefError(f"{whole!r} is not a reference; {_SYNTAX_HELP}")
    if _CELL.match(body):
        try:
            r, c = _cell(body, whole)
        except RefError:
            return None  # off the edge; parse_ref decides between a name and a message
        return Area(sheet, r, c, r, c)
    return None


def _looks_like_cell(text: str) -> bool:
    """Letters then digits, e.g. XFE1 or A0: a cell reference, possibly off the sheet."""
    return bool(re.match(r"^\$?[A-Za-z]{1,4}\$?[0-9]+$", text))


def _unescape_column(text: str, whole: str) -> str:
    out, i = [], 0
    while i < len(text):
        ch = text[i]
        if ch == "'":
            if i + 1 >= len(text):
                raise RefError(f"{whole!r}: a ' at the end of a column name escapes nothing")
            out.append(text[i + 1])
            i += 2
            continue
        if ch in "[]":
            raise RefError(f"{whole!r}: write [ and ] inside a column name as '[ and ']")
        out.append(ch)
        i += 1
    return "".join(out).strip()


def _bracket_items(spec: str, whole: str) -> list[tuple[str, str]]:
    """``[#Headers],[Price]:[Qty]`` -> [("#Headers", ","), ("Price", ":"), ("Qty", "")]."""
    items: list[tuple[str, str]] = []
    i = 0
    while i < len(spec):
        while i < len(spec) and spec[i] == " ":
            i += 1
        if i >= len(spec):
            break
        if spec[i] != "[":
            raise RefError(f"{whole!r}: expected [ in the table reference")
        j, buf = i + 1, []
        while j < len(spec):
            ch = spec[j]
            if ch == "'" and j + 1 < len(spec):
                buf.append(spec[j : j + 2])
                j += 2
                continue
            if ch == "]":
                break
            buf.append(ch)
            j += 1
        else:
            raise RefError(f"{whole!r}: a [ in the table reference is not closed")
        j += 1
        while j < len(spec) and spec[j] == " ":
            j += 1
        sep = ""
        if j < len(spec):
            sep = spec[j]
            if sep not in ",:":
                raise RefError(f"{whole!r}: expected , or : between [..] parts")
            j += 1
        items.append(("".join(buf), sep))
        i = j
    if items and items[-1][1]:
        raise RefError(f"{whole!r}: the table reference ends with {items[-1][1]!r}")
    return items


def _parse_table(text: str) -> TableRef:
    table, _, rest = text.partition("[")
    table = table.strip()
    if not rest.endswith("]") or not _NAME.match(table):
        raise RefError(f"{text!r} is not a table reference such as Sales[Price]")
    spec = rest[:-1].strip()
    if spec == "":
        return TableRef(table, frozenset(), text=text)
    if not spec.startswith("["):
        items = [(spec, "")]
    else:
        items = _bracket_items(spec, text)
    parts: set[str] = set()
    columns: list[str] = []
    for k, (raw, sep) in enumerate(items):
        key = raw.strip().lower()
        if key == "#this row" or key.startswith("@"):
            raise RefError(
                f"{text!r} refers to 'this row' of the table; the runner needs whole columns"
            )
        if key.startswith("#"):
            if key not in _SPECIALS:
                raise RefError(
                    f"{text!r}: unknown table part {raw.strip()!r}; use #All, #Data, "
                    "#Headers or #Totals"
                )
            parts.add(_SPECIALS[key])
            continue
        columns.append(_unescape_column(raw, text))
        if sep == ":" and (k + 1 >= len(items) or items[k + 1][0].strip().startswith("#")):
            raise RefError(f"{text!r}: a column range needs [First]:[Last]")
    if len(columns) > 2:
        raise RefError(f"{text!r}: name one column or a range [First]:[Last]")
    if len(columns) == 2 and not any(sep == ":" for _, sep in items):
        raise RefError(f"{text!r}: two columns must be a range [First]:[Last]")
    first = columns[0] if columns else None
    last = columns[-1] if columns else None
    return TableRef(table, frozenset(parts), first, last, text=text)


def parse_ref(text: str) -> Area | NameRef | TableRef:
    """Parse reference text; raises :class:`RefError` with a message saying what to fix."""
    if not isinstance(text, str):
        raise RefError(f"a reference must be text; got {text!r}")
    whole = text.strip()
    if whole.startswith("="):
        whole = whole[1:].strip()
    if not whole:
        raise RefError(f"the reference is empty; {_SYNTAX_HELP}")
    if whole.startswith("["):
        raise RefError(
            f"{whole!r} refers to another workbook; copy the data into this workbook first"
        )
    if _TABLE_START.match(whole):
        return _parse_table(whole)
    sheet, body = _split_sheet(whole)
    body = body.strip()
    if not body:
        raise RefError(f"{whole!r}: nothing after the sheet name; {_SYNTAX_HELP}")
    area = _parse_area(sheet, body, whole)
    if area is not None:
        return area
    if "[" in body:
        raise RefError(f"{whole!r}: a table reference has no sheet name; write Sales[Price]")
    if _looks_like_cell(body):
        # XFE1 or A0 reads as a cell off the sheet's edge, but may also be a defined name.
        try:
            _cell(body, whole)
        except RefError as exc:
            if _NAME.match(body):
                return NameRef(body, sheet, off_sheet=str(exc))
            raise
    if _NAME.match(body) and not _R1C1_LIKE.match(body):
        return NameRef(body, sheet)
    raise RefError(f"{whole!r} is not a reference; {_SYNTAX_HELP}")


def misaligned(spans: list[tuple[str, Area]]) -> str | None:
    """Ranges read side by side, paired row by row ((what, area), the first the reference):
    the first pair that starts or ends on different sheet rows, in words, or None."""
    if len(spans) < 2:
        return None
    what0, a0 = spans[0]
    for what, a in spans[1:]:
        for end, r0, r in (("start", a0.r1, a.r1), ("end", a0.r2, a.r2)):
            if r0 != r:
                return (f"{what0} {a0.label()} and {what} {a.label()} {end} on different "
                        f"sheet rows ({r0} vs {r}); rows are paired by position")
    return None
