"""Fit results as plain 2-D tables, and the table functions of the basic worksheet functions.

Every table is a rectangular list of rows of ``float`` / ``str``: no None, NaN or inf (a
value that does not exist is ``""`` and a note says why), text at most 255 characters.
"""

from __future__ import annotations

import math
import numbers
import platform
import sys
from collections.abc import Callable, Iterable
from dataclasses import fields
from typing import Any

import numpy as np

from ..engine import CerResult, FitResult
from .cerrows import (
    cer_coef_rows,
    cer_predict_rows,
    cer_stats_rows,
    fit_unit_rows,
    with_base_year,
)
from .errors import Cell, CellError, CellErrorKind, Table, clip_text
from .options import Options
from .prepare import fit_cells
from .statrows import arrange, interval_captions
from .values import OK, CleanCells, clean_cells, drop_reason, from_array, grid_of

__all__ = ["COEF_COLUMNS", "PREDICT_COLUMNS", "MAX_TEXT", "MAX_CELL_TEXT", "NOTE_MARK",
           "STATS_NOTE", "aligned_rows", "coef_captions", "coef_table", "coefs_cells",
           "equation_cells", "equation_text", "finish_table", "info_cells", "info_table",
           "interval_captions", "new_points", "note_rows", "point_words", "predict_captions",
           "predict_cells", "predict_table", "split_notes", "stats_cells", "stats_table",
           "wrap_text"]

MAX_TEXT = 255  # longest string in a multi-cell result
MAX_CELL_TEXT = 32767  # longest text one spreadsheet cell holds

# Captions follow docs/output-style.md. The *_COLUMNS tuples are the fields behind each
# column in table order (and the JSON keys); the captions are for people.
COEF_COLUMNS = ("term", "estimate", "ci_lower", "ci_upper", "std_error", "t_ratio", "p_value",
                "vif", "vif_centered")
PREDICT_COLUMNS = ("fitted", "ci_lower", "ci_upper", "pi_lower", "pi_upper", "leverage",
                   "range_flag")

SHAPE = CellErrorKind.SHAPE


def _out(v: Any) -> Cell:
    """One output cell: finite float or text; anything else becomes ""."""
    if isinstance(v, str):
        return clip_text(v, MAX_TEXT)
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, numbers.Real):
        f = float(v)
        return f if math.isfinite(f) else ""
    return "" if v is None else clip_text(str(v), MAX_TEXT)


def finish_table(table: list[list[Any]]) -> Table:
    """Rows of any values as a rectangular table of finite floats and short text."""
    width = max((len(r) for r in table), default=0)
    return [[_out(v) for v in r] + [""] * (width - len(r)) for r in table]


def _missing_word(v: Any) -> str | None:
    """None for a finite number; otherwise how to describe the blank cell."""
    if isinstance(v, numbers.Real) and not isinstance(v, bool):
        f = float(v)
        if math.isfinite(f):
            return None
        return "not defined" if math.isnan(f) else "infinite"
    return "not defined"


def wrap_text(text: str, width: int) -> list[str]:
    """``text`` broken at spaces into lines of at most ``width`` characters."""
    words, lines, line = text.split(), [], ""
    for w in words:
        while len(w) > width:
            if line:
                lines.append(line)
                line = ""
            lines.append(w[:width])
            w = w[width:]
        if not line:
            line = w
        elif len(line) + 1 + len(w) <= width:
            line += " " + w
        else:
            lines.append(line)
            line = w
    if line:
        lines.append(line)
    return lines or [""]


NOTE_MARK = "note: "  # begins the first line of each note row below a table
STATS_NOTE = "notes"  # the question column of the statistics table's note rows


def note_rows(rows: list[list[Any]], notes: Iterable[str]) -> None:
    """Append each note as one-cell ``note: ...`` rows below a table (a long note goes on
    over more one-cell rows)."""
    for n in notes:
        rows.extend([line] for line in wrap_text(NOTE_MARK + n, MAX_TEXT))


def split_notes(table: Table) -> tuple[Table, list[str]]:
    """``(rows, notes)`` of a table built here: the note rows taken out, each note's text
    without its mark (the lines of a wrapped note joined again).

    >>> rows = [["a", 1.0]]
    >>> note_rows(rows, ["two rows left out"])
    >>> split_notes(finish_table(rows))
    ([['a', 1.0]], ['two rows left out'])
    >>> split_notes([["how good is the fit", "R²", 0.5], ["notes", "", "log scale"]])
    ([['how good is the fit', 'R²', 0.5]], ['log scale'])
    """
    body: Table = []
    notes: list[str] = []
    in_note = False
    for row in table:
        first = row[0] if row else ""
        rest_blank = all(v == "" for v in row[1:])
        if first == STATS_NOTE and len(row) == 3 and row[1] == "":
            notes.append(str(next(v for v in reversed(row) if v != "")))
            in_note = False
        elif isinstance(first, str) and first.startswith(NOTE_MARK) and rest_blank:
            notes.append(first[len(NOTE_MARK):])
            in_note = True
        elif in_note and isinstance(first, str) and first and rest_blank:
            notes[-1] += " " + first  # the next line of a wrapped note
        else:
            body.append(row)
            in_note = False
    return body, notes


def _blank_note(blanks: dict[str, str]) -> str | None:
    if not blanks:
        return None
    return "blank cells: " + ", ".join(f"{k} {v}" for k, v in blanks.items())


def coef_captions(level: float) -> list[str]:
    """Header of the coefficient table: the estimate with its interval, then the evidence
    (standard error, t, p), then the collinearity measures."""
    return ["term", "estimate", *interval_captions(level), "standard error", "t", "p", "VIF",
            "VIF, centered"]


def predict_captions(level: float) -> list[str]:
    """Header of the predictions table."""
    return ["fitted", *interval_captions(level, "mean"), *interval_captions(level, "new value"),
            "leverage", "range"]


def coef_table(result: FitResult | CerResult, options: Options | None = None) -> Table:
    """One row per term: estimate, interval, standard error, t, p, VIFs.

    VIF columns are blank for the intercept; any other blank gets a note row below.
    A CER: ``a`` first, then the exponents or slopes (``cells.cerrows``)."""
    opts = options or Options()
    if isinstance(result, CerResult):
        rows, notes = cer_coef_rows(result, opts.header)
        note_rows(rows, notes)
        return finish_table(rows)
    captions = coef_captions(result.level)
    rows: list[list[Any]] = [captions] if opts.header else []
    blanks: dict[str, str] = {}
    for c in result.coefficients:
        row: list[Any] = [c.term]
        for col, caption in zip(COEF_COLUMNS[1:], captions[1:]):
            v = getattr(c, col)
            word = _missing_word(v)
            if word and not (c.term == "intercept" and col.startswith("vif")):
                blanks.setdefault(caption, word)
            row.append(v)
        rows.append(row)
    note = _blank_note(blanks)
    if note:
        note_rows(rows, [note])
    return finish_table(rows)


def stats_table(result: FitResult | CerResult, options: Options | None = None) -> Table:
    """Rows ``question, measure, value`` (``cells.statrows``): model, rows, the FitStats
    fields, level, fit_space (the space of R², SEE and F: log for a log fit), the unit-space
    block (see, cv, r2_unit, bias_percent, spe for multiplicative fits), the relevant range,
    base_year when stated, then rows ``notes, "", text`` (engine notes, dropped rows, blank
    values). A CER: ``cells.cerrows``."""
    opts = options or Options()
    rows: list[list[Any]] = [["question", "measure", "value"]] if opts.header else []
    blanks: dict[str, str] = {}
    if isinstance(result, CerResult):
        body, notes = cer_stats_rows(result, opts.base_year)
    else:
        body = [["model", result.model_text]]
        for f in fields(result.stats):
            body.append([f.name, getattr(result.stats, f.name)])
            if f.name == "n_used":
                body.append(["n_dropped", result.n_dropped])
        body.append(["level", result.level])
        body.append(["fit_space", "log" if result.remedy.log else "unit"])
        body += fit_unit_rows(result)
        if opts.base_year is not None:
            body.append(["base_year", opts.base_year])
        notes = list(result.notes)
    body = arrange(body)
    for _, caption, v in body:
        word = _missing_word(v) if not isinstance(v, str) else None
        if word:
            blanks[caption] = word
    rows += body
    note = _blank_note(blanks)
    if note:
        notes.append(note)
    for n in notes:
        rows.extend([STATS_NOTE, "", line] for line in wrap_text(n, MAX_TEXT))
    return finish_table(rows)


def _order_by_names(block: CleanCells, predictors: tuple[str, ...]) -> CleanCells:
    """Reorder new_x columns when its header names the model's predictors."""
    if block.names is None or len(block.names) != len(predictors):
        return block
    want = [p.strip().lower() for p in predictors]
    have = [n.strip().lower() for n in block.names]
    if sorted(want) != sorted(have) or want == have or len(set(have)) != len(have):
        return block
    idx = [have.index(p) for p in want]
    return CleanCells(block.values[:, idx], block.codes[:, idx],
                      tuple(block.names[i] for i in idx))


def new_points(result: FitResult, new_x: Any, options: Options | None = None, *,
               what: str = "new_x"
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Points to evaluate a fit at, from raw cells: ``(points, good, codes)`` with one entry
    per row of ``what`` (after its header); ``points`` holds only the usable rows."""
    opts = options or Options()
    predictors = tuple(result.drivers if isinstance(result, CerResult)
                       else result.spec.predictors)
    k = len(predictors)
    flat_as_row = False
    raw = from_array(new_x)
    if isinstance(raw, (list, tuple)) and raw and not isinstance(raw[0], (list, tuple)):
        # a flat list is a column of points for one predictor, one point for k predictors
        if k > 1:
            if len(raw) != k:
                raise CellError(f"{what} has {len(raw)} values in one row or column but the "
                                f"model has {k} predictors ({', '.join(predictors)}); "
                                "give one row per point, one column per predictor", SHAPE)
            flat_as_row = True
    grid = grid_of(raw, what, flat_as_row)
    if k == 1:
        grid = grid.transposed_line()  # a row of points for one predictor, as a flat list
    block = clean_cells(grid, what, names=opts.names)
    if block.n_rows == 0:
        raise CellError(f"{what} has no rows; select the x values to evaluate at", SHAPE)
    if block.n_cols != k:
        raise CellError(f"{what} has {block.n_cols} columns but the model has {k} "
                        f"predictor{'s' if k != 1 else ''} ({', '.join(predictors)})", SHAPE)
    block = _order_by_names(block, predictors)
    codes = block.codes.max(axis=1)
    good = codes == OK
    pts = block.values[good]
    return (pts[:, 0] if k == 1 else pts), good, codes


def aligned_rows(good: np.ndarray, codes: np.ndarray, width: int, what: str,
                 row_of: Callable[[int], list[Any]]) -> list[list[Any]]:
    """One output row per input row: ``row_of(j)`` for the j-th usable row, blanks and a
    ``dropped: ...`` flag for the others."""
    rows, j = [], 0
    for i in range(len(good)):
        if not good[i]:
            rows.append([""] * (width - 1) + [f"dropped: {drop_reason(codes[i])} in {what}"])
            continue
        rows.append(row_of(j))
        j += 1
    return rows


def predict_table(result: FitResult, new_x: Any, options: Options | None = None) -> Table:
    """One row per row of ``new_x`` (after its header row, if any): fitted value,
    confidence and prediction intervals, leverage and ``range_flag`` (``inside``,
    ``extrapolated`` or ``dropped: ...`` with blanks for a row that has no usable x)."""
    opts = options or Options()
    pts, good, codes = new_points(result, new_x, opts)
    captions = predict_captions(opts.level)
    rows: list[list[Any]] = [captions] if opts.header else []
    if isinstance(result, CerResult):
        cer_rows = cer_predict_rows(result, pts, opts.level) if good.any() else []
        rows += aligned_rows(good, codes, len(PREDICT_COLUMNS), "new_x", cer_rows.__getitem__)
        note_rows(rows, [f"a CER gives the estimate and the interval of a new observation "
                         f"({result.error_model} error); mean intervals and leverage are blank"])
        return finish_table(rows)
    pred = result.predict(pts, level=opts.level) if good.any() else None

    def row_of(j: int) -> list[Any]:
        assert pred is not None
        vals = [pred.fitted[j], pred.ci_lower[j], pred.ci_upper[j], pred.pi_lower[j],
                pred.pi_upper[j], pred.leverage[j]]
        flag = "extrapolated" if bool(pred.extrapolated[j]) else "inside"
        missing = [name for name, v in zip(captions, vals) if _missing_word(v)]
        if missing:
            flag += "; blank: " + ", ".join(missing) + " not finite"
        return vals + [flag]

    rows += aligned_rows(good, codes, len(PREDICT_COLUMNS), "new_x", row_of)
    return finish_table(rows)


def equation_text(result: FitResult, options: Options | None = None) -> Table:
    """One cell: the fitted equation in raw units with round-trip coefficients."""
    text = with_base_year(result.equation(), (options or Options()).base_year)
    if len(text) > MAX_CELL_TEXT:
        raise CellError(f"the equation has {len(text)} characters, more than a cell holds; "
                        "use XB_COEFS for the coefficients", CellErrorKind.RESULT)
    return [[text]]


def _version(dist: str) -> str:
    import importlib.metadata  # ~40 ms; only XB_VERSIONS needs it, not every workbook load

    try:
        return importlib.metadata.version(dist)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def info_table(options: Options | None = None) -> Table:
    """Versions of xlbridge, Python and the numerical dependencies, for audit trails."""
    opts = options or Options()
    own = getattr(sys.modules.get("xlbridge"), "__version__", None) or _version("xlbridge-models")
    rows: list[list[Any]] = [["component", "version"]] if opts.header else []
    rows += [
        ["xlbridge", own],
        ["python", platform.python_version()],
        ["numpy", np.__version__],
        ["scipy", _version("scipy")],
        ["xlwings", _version("xlwings")],
        ["platform", platform.platform()],
    ]
    return finish_table(rows)


# --- one call per worksheet function (raise on bad input; wrap with ``guarded``) ------------

def coefs_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    return coef_table(res, opts)


def stats_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    return stats_table(res, opts)


def predict_cells(y: Any, x: Any, model: Any, new_x: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    return predict_table(res, new_x, opts)


def equation_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, opts = fit_cells(y, x, model, options)
    return equation_text(res, opts)


def info_cells() -> Table:
    return info_table()


def point_words(pt: Any, predictors: tuple[str, ...]) -> str:
    """What to call a stationary point: its kind (maximum, minimum, saddle, ...) only when
    it lies inside the data; otherwise ``outside the data at (x=...)``, because a turning
    point the data never reach is an extrapolation, not a maximum anyone observed."""
    if pt.inside:
        return pt.kind
    at = ", ".join(f"{n}={v:.4g}" for n, v in zip(predictors, pt.x))
    return f"outside the data at ({at})"
