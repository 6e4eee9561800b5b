"""Workbook files: reading values, resolving references, writing copies. Imports nothing
else of xlbridge (the runner above it evaluates formulas: :mod:`xlbridge.runner`).

Modules (import what a command needs; nothing here imports openpyxl at import time):
``values`` what a cell can hold (error values, date serials), ``refs`` reference text,
``safety`` hostile-file guards and atomic output, ``reader`` opening a workbook or CSV file
(``workbook`` the Book base, ``xlsx`` values through python-calamine, ``csvbook`` CSV text),
``formulas`` the formula cells of a workbook, ``patch`` copies that change only what must
change (``sheetxml`` the cells of a worksheet part, ``package`` the part-by-part zip copy),
``writer`` new workbooks through openpyxl (the copy of a CSV file).
"""

from xlbridge.book.safety import BookError

__all__ = ["BookError"]
