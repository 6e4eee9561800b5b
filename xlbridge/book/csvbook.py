"""CSV files read as one sheet, each value converted as a spreadsheet program would."""

from __future__ import annotations

import csv
import io
import re
from pathlib import Path
from typing import Any

from xlbridge.book.safety import BookError, reader_guard
from xlbridge.book.workbook import Book, SheetData

__all__ = ["CsvBook"]


_NUM = re.compile(r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*$")


def _csv_value(text: str) -> Any:
    """CSV text -> the value a spreadsheet program would put in the cell."""
    s = text.strip()
    if s == "":
        return None
    if _NUM.match(s):
        return float(s)
    up = s.upper()
    if up == "TRUE":
        return True
    if up == "FALSE":
        return False
    return text


class CsvBook(Book):
    def __init__(self, path: Path) -> None:
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
        sample = text[:65536]
        try:
            dialect: Any = csv.Sniffer().sniff(sample, delimiters=",;\t")
        except csv.Error:
            dialect = csv.excel
        with reader_guard(path.name):
            grid = [[_csv_value(v) for v in row]
                    for row in csv.reader(io.StringIO(text), dialect)]
        while grid and all(v is None for v in grid[-1]):
            grid.pop()
        sheet = path.stem
        super().__init__(path, "csv", [sheet])
        self._grid = grid

    def load_sheet(self, name: str, last_col: int | None = None) -> SheetData:
        return SheetData(name, self._grid, converted=True)


