"""The headless runner: evaluates the XB_ formulas of a workbook with the worksheet
functions themselves, writes the results into a copy, and pins/verifies them.

Modules (import what a command needs; importing the package imports nothing):
``formula`` the one formula reader (XB_ calls and the references of ordinary formulas, on
openpyxl's tokenizer), ``recalc`` evaluation order and values, ``write`` results into a
copy patched into the original package (live or values), ``pins`` pin files and drift.

Uses :mod:`xlbridge.book` for files and references and :mod:`xlbridge.worksheet` as plain
Python functions; nothing below imports the runner.
"""
