"""Reading the house-style tables back in tests (docs/output-style.md)."""

from __future__ import annotations

import re
from typing import Any

from xlbridge.cells import STATS_NOTE
from xlbridge.cells.statrows import stat_caption


def stats_by_field(table: list[list[Any]]) -> dict[str, Any]:
    """The statistics block's values by row name (model, n_used, r2, see, ...; the range
    rows as ``range_min <driver>``), checking on the way that each row sits under the
    question ``cells.statrows`` gives it; header optional."""
    from xlbridge.cells.statrows import STAT_ROWS

    names = [n for _, n, _ in STAT_ROWS if n not in ("range_min", "range_max")]
    for row in table:
        m = re.fullmatch(r"(lowest|highest) (.+) in the data", str(row[1]))
        if m:
            names.append(("range_min " if m[1] == "lowest" else "range_max ") + m[2])
    where = {stat_caption(n): n for n in names}
    body = table[1:] if table and table[0] == ["question", "measure", "value"] else table
    out = {}
    for question, caption, value in body:
        if question == STATS_NOTE:
            continue
        out[where[(question, caption)]] = value
    return out


def stats_notes(table: list[list[Any]]) -> list[str]:
    """The text of the statistics block's note rows."""
    return [r[2] for r in table if r[0] == STATS_NOTE]
