"""Plain text of result tables for the screen, CSV and JSON (standard library only)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

__all__ = ["csv_text", "json_text", "render_table"]


def _num(v: Any, digits: int = 10) -> str:
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        return format(v, f".{digits}g")
    return str(v)


def render_table(rows: Sequence[Sequence[Any]], header: bool = True) -> str:
    """Plain aligned text table (numbers right-aligned)."""
    if not rows:
        return ""
    cells = [[_num(v) for v in r] for r in rows]
    width = max(len(r) for r in cells)
    cells = [r + [""] * (width - len(r)) for r in cells]
    numeric = [all(isinstance(r[j], float) or r[j] == "" for r in rows[1 if header else 0:]
                   if j < len(r)) for j in range(width)]
    w = [max(len(r[j]) for r in cells) for j in range(width)]
    lines = []
    for i, r in enumerate(cells):
        parts = [r[j].rjust(w[j]) if numeric[j] and not (header and i == 0) else r[j].ljust(w[j])
                 for j in range(width)]
        lines.append("  ".join(parts).rstrip())
        if header and i == 0:
            lines.append("  ".join("-" * w[j] for j in range(width)))
    return "\n".join(lines)


def csv_text(tables: Sequence[Sequence[Sequence[Any]]]) -> str:
    """Tables as CSV (a blank line between), text that could be a formula quoted."""
    import csv
    import io

    from xlbridge.book.safety import formula_safe_text

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    for k, table in enumerate(tables):
        if k:
            w.writerow([])
        for row in table:
            w.writerow([_csv_number(v) if isinstance(v, float) else formula_safe_text(v)
                        for v in row])
    return buf.getvalue()


def _csv_number(v: float) -> str:
    """A float for CSV: a whole number (a count, a row, a degree) without ``.0``, any other
    with every digit (repr)."""
    if math.isfinite(v) and v.is_integer() and abs(v) < 2**53:
        return str(int(v))
    return repr(v)


def json_text(doc: Any) -> str:
    """Indented JSON; values that are not finite become null."""
    import json

    return json.dumps(_json_ready(doc), indent=2, allow_nan=False, ensure_ascii=False) + "\n"


def _json_ready(v: Any) -> Any:
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {k: _json_ready(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_json_ready(x) for x in v]
    return v
