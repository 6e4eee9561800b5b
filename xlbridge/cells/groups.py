"""One model per group from cells: the group column cleaned, the grouped fit, its table."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ..engine import ModelError
from ..engine.cer import is_form
from .errors import CellError, CellErrorKind, Table
from .options import Options
from .prepare import prepare_fit
from .tables import finish_table, note_rows
from .values import grid_of, group_key

if TYPE_CHECKING:
    from ..engine import GroupsResult

__all__ = ["GROUP_CAPTIONS", "groups_fit", "groups_table", "groups_cells"]


def groups_fit(group: Any, y: Any, x: Any, model: Any, options: Any = None, *,
               weights: Any = None
               ) -> tuple[GroupsResult, Options, list[str]]:
    """One model per group from raw cells: ``(GroupsResult, Options, notes)``. The group
    cells line up with y's rows (a header row of y and x is one of the group cells too)."""
    from ..engine import fit_groups  # grouped fits load their solver only when used

    inp = prepare_fit(y, x, model, options, weights=weights)
    if is_form(inp.model):
        raise CellError(f"grouped fits take polynomial and surface models; a "
                        f"{str(inp.model).strip().lower()} CER "
                        "is fitted one group at a time: select one group's rows (a filtered "
                        "copy or one range per group) and use XB_COEFS or XB_CERCARD with "
                        "that model", CellErrorKind.OPTIONS)
    unsupported = [k for k in ("log", "se", "error")
                   if getattr(inp.options, k) != getattr(Options(), k)]
    if unsupported:
        raise CellError(f"option {unsupported[0]} is not available for grouped fits; fit a "
                        "group on its own for remedies", CellErrorKind.OPTIONS)
    g = grid_of(group, "group").transposed_line()
    if g.cols != 1:
        raise CellError(f"group must be one column; got {g.cols} columns", CellErrorKind.SHAPE)
    keys = list(g.flat)
    keys = keys[inp.header_rows:]  # the header row of y and x
    n = len(inp.y)
    if len(keys) < n or any(k is not None for k in keys[n:]):
        raise CellError(f"group has {len(keys)} rows but y has {n}; select ranges of the same "
                        "height", CellErrorKind.SHAPE)
    cleaned = [group_key(k) for k in keys[:n]]
    usable = np.array([ok for _, ok in cleaned], dtype=bool)
    notes = list(inp.notes)  # the guard rails' notes (totals, numbers stored as text, ...)
    if not usable.all():
        notes.append(f"{int((~usable).sum())} rows left out: their group cell holds an error")
    x = inp.x[usable]
    w = None if inp.weights is None else inp.weights[usable]
    try:
        res = fit_groups([k for (k, ok) in cleaned if ok], inp.y[usable],
                         x[:, 0] if x.shape[1] == 1 else x, inp.model, names=inp.names,
                         weights=w, **{k: v for k, v in inp.options.fit_kwargs().items()
                                       if k in ("intercept", "level")})
    except ModelError as exc:
        raise CellError.from_model(exc) from None
    return res, inp.options, notes


#: Captions of the groups table's fixed columns (docs/output-style.md); each term's two
#: columns read "<term>" and "<term>: standard error".
GROUP_CAPTIONS = {"group": "group", "n_used": "rows used", "r2": "R²", "adj_r2": "adjusted R²",
                  "rmse": "SEE", "flag": "flag"}


def groups_table(res: GroupsResult, options: Options | None = None,
                 notes: Sequence[str] = ()) -> Table:
    """One row per group: key, rows used, R², adjusted R², SEE, estimate and standard error
    per term, flag; the blank group shows as "(blank)"."""
    opts = options or Options()
    fields = list(res.columns)  # the engine's column names (it refuses duplicates)
    order = ["group", "n_used", "r2", "adj_r2", "rmse"]
    order += [f for f in fields if f not in order and f != "flag"] + ["flag"]
    at = [fields.index(f) for f in order]
    se = {f"{t}_se": f"{t}: standard error" for t in res.terms}
    rows: list[list[Any]] = [[GROUP_CAPTIONS.get(f) or se.get(f) or f for f in order]
                             ] if opts.header else []
    for r in res.table(header=False):
        rows.append([r[i] for i in at])
        if rows[-1][0] is None:
            rows[-1][0] = "(blank)"
    note_rows(rows, notes)
    return finish_table(rows)


def groups_cells(group: Any, y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, opts, notes = groups_fit(group, y, x, model, options)
    return groups_table(res, opts, notes)
