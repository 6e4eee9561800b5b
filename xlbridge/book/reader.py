"""Open a workbook (.xlsx/.xlsm) or CSV file for reading: the front door of :mod:`xlbridge.book`.

The book itself is :class:`~xlbridge.book.workbook.Book`; the formats are read in
:mod:`xlbridge.book.xlsx` (python-calamine and the archive's XML) and
:mod:`xlbridge.book.csvbook`.
"""

from __future__ import annotations

from pathlib import Path

from xlbridge.book.csvbook import CsvBook
from xlbridge.book.safety import BookError
from xlbridge.book.workbook import Book, TableInfo, missing_value_message, xlwings_shape
from xlbridge.book.xlsx import XlsxBook

__all__ = ["Book", "TableInfo", "missing_value_message", "open_book", "xlwings_shape"]

_WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")


def open_book(path: str | Path, *, delimiter: str | None = None,
              decimal_comma: bool | None = None) -> Book:
    """Open .xlsx/.xlsm/.csv for reading; raises BookError with a message for bad files.
    A CSV file's ``delimiter`` (comma, semicolon or tab) and ``decimal_comma`` are found
    from the file when None (``csvbook.CsvBook``)."""
    p = Path(path)
    if not p.exists():
        raise BookError(f"file {p} not found")
    if p.is_dir():
        raise BookError(f"{p} is a folder, not a workbook")
    suffix = p.suffix.lower()
    if suffix == ".csv":
        return CsvBook(p, delimiter=delimiter, decimal_comma=decimal_comma)
    if suffix in _WORKBOOK_SUFFIXES:
        return XlsxBook(p)
    if suffix in (".xls", ".xlsb", ".ods", ".numbers"):
        raise BookError(f"{p.name}: {suffix} files are not read; save it as .xlsx and try again")
    raise BookError(f"{p.name}: give an .xlsx, .xlsm or .csv file")
