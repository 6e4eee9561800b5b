"""Worksheet function names are our own: none repeats a built-in spreadsheet function.

The list below is written from memory of the built-in function catalogue of common
spreadsheet programs (statistical, lookup, information, math and text functions); it is
not exhaustive, but holds every name a reader could confuse with a model function.
"""

from __future__ import annotations

from xlbridge import worksheet as ws

BUILT_INS = {
    "ABS", "ADDRESS", "AGGREGATE", "AREAS", "AVERAGE", "BYCOL", "BYROW", "CELL", "CHOOSE",
    "COLUMN", "COLUMNS", "CORREL", "COUNT", "COVAR", "DEGREES", "DEVSQ", "EXP", "FILTER",
    "FIND", "FISHER", "FORECAST", "FREQUENCY", "GROWTH", "INDEX", "INDIRECT", "INFO",
    "INTERCEPT", "LET", "LINEST", "LN", "LOG", "LOGEST", "LOOKUP", "MATCH", "MAX", "MEDIAN",
    "MIN", "MODE", "NORMDIST", "PEARSON", "PERCENTILE", "POWER", "PRODUCT",
    "QUARTILE", "RADIANS", "RANK", "ROUND", "ROW", "ROWS", "RSQ", "SEQUENCE", "SHEET",
    "SHEETS", "SKEW", "SLOPE", "SORT", "STDEV", "STEYX", "SUM", "SUMPRODUCT", "TEXT",
    "TREND", "TYPE", "UNIQUE", "VALUE", "VAR", "VERSION", "XLOOKUP",
}


def test_no_function_takes_a_built_in_name():
    clashes = [n for n in ws.FUNCTIONS if n.removeprefix("XB_") in BUILT_INS]
    assert clashes == []


def test_every_function_carries_the_prefix_and_is_exported():
    assert ws.FUNCTIONS and all(n.startswith("XB_") for n in ws.FUNCTIONS)
    assert set(ws.FUNCTIONS) <= set(ws.__all__)
