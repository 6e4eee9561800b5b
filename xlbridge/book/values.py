"""What a spreadsheet cell can hold, as plain rules: the error values and the date serials.

The one home of these rules; the readers, the formula parser and the cell layer all use it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
from collections.abc import Sequence

__all__ = ["EPOCH", "ERROR_CODES", "ERROR_TEXTS", "MAX_NAME_CHARS", "MESSAGE_PREFIX",
           "bounded_name", "is_error_code",
           "is_error_text", "is_message_cell", "serial_of", "date_of"]

#: Error values a spreadsheet program shows in a cell (the classic seven, the dynamic-array
#: and data-type ones, and those of hosted runtimes). Anything else of the shape ``#WORD!``
#: or ``#WORD?`` is taken as an error value too (:func:`is_error_text`).
ERROR_TEXTS = frozenset({
    "#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A", "#GETTING_DATA",
    "#SPILL!", "#CALC!", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
    "#PYTHON!", "#TIMEOUT!",
})
_ERROR_LIKE = re.compile(r"#[A-Z][A-Z0-9_/]*[!?]")

#: Error cells as the classic Windows add-in passes those it does not turn into text (the
#: newer ones such as ``#SPILL!``): a whole number, the error's automation code. Codes are
#: 0x800A0000 + 2000..2099 as a signed 32-bit number, e.g. ``#N/A`` = -2146826246.
ERROR_CODES = range(-2146828288 + 2000, -2146828288 + 2100)

#: The longest name or label (a header text that names a column, a group key, a sheet, table
#: or defined name) carried into equations, tables, reports and messages; the longest name a
#: spreadsheet program allows for a defined name.
MAX_NAME_CHARS = 255


def bounded_name(text: str) -> str:
    """``text`` if it has at most MAX_NAME_CHARS characters; else its start followed by a
    note saying it was cut, with a digest of the whole text so that two long names that
    differ only after the cut stay different."""
    if len(text) <= MAX_NAME_CHARS:
        return text
    digest = hashlib.blake2s(text.encode("utf-8", "surrogatepass"), digest_size=4).hexdigest()
    note = f"... [cut from {len(text):,} characters, {digest}]"
    return text[: MAX_NAME_CHARS - len(note)] + note


#: How a message of ours begins. A worksheet function that cannot give a result returns one
#: cell holding ``xlbridge: what to fix``, where a spreadsheet function would show an error
#: value; fed back in as data it counts as one (:func:`is_error_text`).
MESSAGE_PREFIX = "xlbridge:"

#: Day 0 of the 1900 date system as the spreadsheet counts it (serial 1 is 1900-01-01 only
#: after the historical leap-day bug; from 1900-03-01 on, serial = days since this date).
EPOCH = dt.datetime(1899, 12, 30)


def is_error_text(text: str) -> bool:
    """True for an error value shown as text (``#N/A``, ``#SPILL!`` ...) or a message of
    ours (``xlbridge: ...``) fed back in as data."""
    s = text.strip()
    return (s.upper() in ERROR_TEXTS or bool(_ERROR_LIKE.fullmatch(s))
            or s.lower().startswith(MESSAGE_PREFIX))


def is_error_code(value: int) -> bool:
    """True for a whole number that is an error cell's automation code (:data:`ERROR_CODES`).

    Numbers reach Python from that add-in as ``float``, so only an ``int`` is read this way;
    a whole number in this narrow band (about -2.1468e9) from any other source is taken as an
    error cell too, which drops its row rather than fitting a wrong number."""
    return value in ERROR_CODES


def is_message_cell(table: Sequence[Sequence[object]]) -> bool:
    """True when a worksheet function's result is its one-cell message instead of a table.

    This is the cell protocol of the XB_ functions (what a cell shows), read by callers
    that place results (the runner); why a function failed is said in the message for the
    reader, never decided from its words.
    """
    return (len(table) == 1 and len(table[0]) == 1 and isinstance(table[0][0], str)
            and table[0][0].lower().startswith(MESSAGE_PREFIX))


def serial_of(v: dt.date | dt.time | dt.timedelta) -> float:
    """The serial number a date, date-time, time of day or duration cell holds."""
    if isinstance(v, dt.datetime):
        d = v.replace(tzinfo=None) - EPOCH
        return d.days + (d.seconds + d.microseconds / 1e6) / 86400.0
    if isinstance(v, dt.date):
        return float((v - EPOCH.date()).days)
    if isinstance(v, dt.timedelta):
        return v.days + (v.seconds + v.microseconds / 1e6) / 86400.0
    return (v.hour * 3600 + v.minute * 60 + v.second + v.microsecond / 1e6) / 86400.0


def date_of(serial: float) -> dt.datetime:
    """The date-time of a serial number (inverse of :func:`serial_of` for dates)."""
    return EPOCH + dt.timedelta(days=serial)
