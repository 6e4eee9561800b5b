"""Workbook files for the headless runner: reading values, resolving references, writing
copies, evaluating XB_ formulas, pinning results.

Modules (import what a command needs; nothing here imports openpyxl at import time):
``refs`` reference text, ``safety`` hostile-file guards and atomic output, ``reader``
values through python-calamine, ``writer`` copies through openpyxl, ``xbcall`` the XB_ call
reader, ``recalc`` evaluation, ``pins`` pin files.
"""

from xlbridge.book.safety import BookError

__all__ = ["BookError"]
