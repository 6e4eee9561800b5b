"""CSV files read as one sheet, each value converted as a spreadsheet program would."""

from __future__ import annotations

import csv
import io
import re
from pathlib import Path
from typing import Any

from xlbridge.book.safety import BookError, reader_guard
from xlbridge.book.workbook import Book, SheetData

__all__ = ["CsvBook", "DELIMITERS", "csv_value", "sniff_dialect"]


_NUM = re.compile(r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*$")
_COMMA_NUM = re.compile(r"^\s*[+-]?\d+,\d+([eE][+-]?\d+)?\s*$")
# thousands grouped the usual way: by commas beside a decimal point ("12,345.6"), by
# points or (narrow) spaces beside a decimal comma ("12.345,6", "12 345,6")
_GROUPED = re.compile(r"^\s*[+-]?\d{1,3}(,\d{3})+(\.\d*)?\s*$")
_GROUPED_COMMA = re.compile(r"^\s*[+-]?\d{1,3}([.\u00a0\u202f ]\d{3})+(,\d*)?\s*$")
_GROUP_MARKS = str.maketrans("", "", ".\u00a0\u202f ")
_SAMPLE = 65536
DELIMITERS = {"comma": ",", "semicolon": ";", "tab": "\t"}


def csv_value(text: str, decimal_comma: bool = False) -> Any:
    """CSV text -> the value a spreadsheet program would put in the cell (``1,5`` is 1.5
    when the file writes a decimal comma; ``12,345.6`` is 12345.6, and with a decimal comma
    ``12.345,6`` and ``12 345,6`` are too)."""
    s = text.strip()
    if s == "":
        return None
    if _NUM.match(s):
        return float(s)
    if decimal_comma and _COMMA_NUM.match(s):
        return float(s.replace(",", "."))
    if not decimal_comma and _GROUPED.match(s):
        return float(s.replace(",", ""))
    if decimal_comma and _GROUPED_COMMA.match(s):
        return float(s.translate(_GROUP_MARKS).replace(",", "."))
    up = s.upper()
    if up == "TRUE":
        return True
    if up == "FALSE":
        return False
    return text


def sniff_dialect(sample: str, delimiter: str | None = None) -> tuple[str, bool]:
    """(delimiter, decimal comma) of a CSV sample (its first 64 KiB): a ``;`` or tab the
    same number of times on every line is the separator (else what csv.Sniffer finds,
    else a comma); a decimal comma when the separator is not a comma and some field reads
    like ``1,5``. A ``delimiter`` given is taken as it is."""
    lines = [ln for ln in sample.splitlines()[:200] if ln.strip()]
    if len(sample) >= _SAMPLE and len(lines) > 1:
        lines = lines[:-1]  # the sample may cut its last line
    delim = delimiter or ""
    for d in ("" if delim else ";\t"):
        counts = {ln.count(d) for ln in lines}
        if len(counts) == 1 and counts.pop() > 0:
            delim = d
            break
    if not delim:
        try:
            delim = csv.Sniffer().sniff(sample, delimiters=",;\t").delimiter
        except csv.Error:
            delim = ","
    comma = delim != "," and any(_COMMA_NUM.match(f) or (_GROUPED_COMMA.match(f) and "," in f)
                                 for ln in lines for f in ln.split(delim))
    return delim, comma


class CsvBook(Book):
    """A CSV file as one sheet. ``delimiter`` (a name of ``DELIMITERS`` or the character)
    and ``decimal_comma`` are found from the file when None (``sniff_dialect``)."""

    def __init__(self, path: Path, *, delimiter: str | None = None,
                 decimal_comma: bool | None = None) -> None:
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise BookError(f"cannot read {path.name}: {exc.strerror or exc}") from None
        if raw.startswith(b"PK\x03\x04"):
            raise BookError(f"{path.name} is a zip archive (a workbook?), not a CSV text file; "
                            "name it .xlsx")
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = raw.decode("cp1252", errors="replace")
        if "\x00" in text:
            raise BookError(f"{path.name} is not a text file; a CSV file must be text")
        delim, comma = sniff_dialect(text[:_SAMPLE], DELIMITERS.get(delimiter or "", delimiter))
        if decimal_comma is None:
            decimal_comma = comma
        self.delimiter, self.decimal_comma = delim, decimal_comma
        with reader_guard(path.name):
            grid = [[csv_value(v, decimal_comma) for v in row]
                    for row in csv.reader(io.StringIO(text), delimiter=delim)]
        while grid and all(v is None for v in grid[-1]):
            grid.pop()
        sheet = path.stem
        super().__init__(path, "csv", [sheet])
        self._grid = grid

    def load_sheet(self, name: str, last_col: int | None = None) -> SheetData:
        return SheetData.from_rows(name, self._grid, converted=True)


