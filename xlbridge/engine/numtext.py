"""Numbers stored as text: the one rule for every reader and the Python API.

Text that reads as a number once trimmed (Python's float syntax without the words nan/inf
and without underscores: ``" 7.5"``, ``"-1e3"``) is that number; the fit's notes count it.
Other text is not a number. ``cells.values`` applies the rule to cells, ``engine.api`` to
arrays and DataFrame columns holding text.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

__all__ = ["number_of_text", "rows_text", "text_numbers_note"]

_NUMBER_TEXT = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def number_of_text(text: str) -> float | None:
    """The number ``text`` holds by the rule above, or None."""
    s = text.strip()
    return float(s) if _NUMBER_TEXT.fullmatch(s) else None


def text_numbers_note(count: int, where: str) -> str:
    """``"2 numbers stored as text were read: rows 7, 12"`` (``where`` names the rows)."""
    return (f"{count} number{'s' if count != 1 else ''} stored as text "
            f"{'were' if count != 1 else 'was'} read: {where}")


def rows_text(rows: Sequence[int], word: str = "row") -> str:
    """``"rows 7, 12"`` (at most ten shown)."""
    nums = [int(r) for r in rows]
    shown = ", ".join(map(str, nums[:10])) + (", ..." if len(nums) > 10 else "")
    return f"{word}{'s' if len(nums) != 1 else ''} {shown}"
