"""Tables of the cost-estimating functions from cells: percentiles of a new estimate, the
candidate comparison, learning curves, base-year costs and the CER card. Same cell rules,
options and output rules as the basic tables (plain 2-D tables of float / str, a header row
unless ``header=no``); the engine's refusals arrive as ``xlbridge:`` cells, with the data
row the engine names placed in the selected range when a header row shifts it.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..engine import (
    CandidateTable,
    CerResult,
    FitResult,
    LearningCurve,
    ModelError,
    compare_candidates,
    learning_curve,
    percentiles,
    to_base_year,
)
from .cache import SCAN_CACHE, content_key
from .cerrows import with_base_year
from .errors import CellError, CellErrorKind, Table
from .options import Options
from .prepare import FitInput, fit_prepared, prepare_fit, sheet_row_text
from .statrows import interval_captions
from .tables import aligned_rows, finish_table, new_points, note_rows
from .values import OK, CleanCells, clean_cells, drop_summary, drops_text, options_value, row_codes

__all__ = ["CANDIDATE_CAPTIONS", "CANDIDATE_COLUMNS", "CARD_CAPTIONS", "CARD_DATE", "LotCost",
           "card_caption", "lot_costs", "CardFacts", "baseyear_cells", "candidates_cells",
           "candidates_table", "card_cells", "card_facts", "card_table", "learning_cells",
           "learning_table", "plevels_cells", "plevels_table", "run_engine"]

#: Fields of a candidate row (JSON names, table order) and their captions in the table.
CANDIDATE_COLUMNS = ("rank", "form", "method", "drivers", "n", "see", "cv", "spe", "r2_unit",
                     "bias_percent", "worst_p", "max_vif", "verdict")
CANDIDATE_CAPTIONS = ("rank", "form", "method", "drivers", "rows used", "SEE", "CV", "SPE",
                      "R² in units", "bias, mean % error", "largest p of the drivers",
                      "largest VIF", "verdict")
SHAPE = CellErrorKind.SHAPE
#: The card's item that records the day it was made (a pin file does not compare it).
CARD_DATE = "date"
RANGE_FIELD = "relevant_range"
#: Captions of the card's fields in its table (house style: plain words of the trade).
CARD_CAPTIONS = {
    "equation": "equation", "form": "form of the CER", "method": "fitting method",
    "error_model": "error model", "n_used": "rows used", "n_dropped": "rows left out",
    "dropped_rows": "why rows were left out", "see": "typical miss (SEE)",
    "cv": "typical miss as share of the mean (CV)", "spe": "typical percent miss (SPE)",
    "r2_unit": "R² of the estimates in units", "bias_percent": "bias, mean % error",
    "centre": "centre of the data (means of the drivers)",
    "estimate_at_centre": "estimate at the centre", "p20_at_centre": "P20 at the centre",
    "p80_at_centre": "P80 at the centre", "p20_percent": "P20 vs the estimate, %",
    "p80_percent": "P80 vs the estimate, %", "base_year": "price year of the costs",
    CARD_DATE: "date", "input_hash": "content hash of the input",
    "level": "confidence level of the intervals",
}


def card_caption(field: str) -> str:
    """The caption of a card field (a driver's relevant range names the driver)."""
    if field.startswith(RANGE_FIELD + " "):
        return f"relevant range of {field[len(RANGE_FIELD) + 1:]}"
    return CARD_CAPTIONS.get(field, field)


def run_engine(fn: Callable[[], Any], header_rows: int, top_row: int | None = None) -> Any:
    """Call an engine function; its ModelError becomes a cell error that places the data
    row it names on the sheet (``top_row``: the sheet row of the selection's first row) or
    in the selected range."""
    try:
        return fn()
    except ModelError as exc:
        first = None if top_row is None else top_row + header_rows
        raise CellError.from_model(exc, str(exc).rstrip(".") + sheet_row_text(
            exc.row, header_rows, first)) from None


# --- percentiles of a new estimate ---------------------------------------------------------

def plevels_table(result: FitResult | CerResult, new_x: Any,
                  options: Options | None = None) -> Table:
    """One row per row of ``new_x``: the estimate, one column per percentile level, and
    the distribution's parameters for a risk tool (distribution, location, scale, df)."""
    opts = options or Options()
    pts, good, codes = new_points(result, new_x, opts)
    levels = opts.levels
    cols = (["estimate"] + [f"P{v:g}" for v in levels]
            + ["distribution", "location", "scale", "degrees of freedom", "range"])
    rows: list[list[Any]] = [cols] if opts.header else []
    if good.any():
        pc = percentiles(result, pts, levels)
        pred = result.predict(pts, opts.level)
    else:
        pc = pred = None

    def row_of(j: int) -> list[Any]:
        assert pc is not None and pred is not None
        par = pc.params[j]
        loc, scale = (par["mu"], par["sigma"]) if "mu" in par else (par["mean"], par["sd"])
        flag = "extrapolated" if bool(pred.extrapolated[j]) else "inside"
        return [pred.fitted[j], *pc.values[j], par["distribution"], loc, scale, par["df"], flag]

    rows += aligned_rows(good, codes, len(cols), "new_x", row_of)
    dist = pc.params[0]["distribution"] if pc is not None else ""
    notes = [f"{pc.error_model if pc else ''} error model; the percentiles use Student's t "
             "with these degrees of freedom"]
    if dist == "lognormal":
        notes.append("lognormal: location and scale are the mean and SD of ln(cost)")
    elif dist == "normal":
        notes.append("normal: location and scale are the mean and SD in units")
    note_rows(rows, notes)
    return finish_table(rows)


def plevels_cells(y: Any, x: Any, model: Any, new_x: Any, options: Any = None) -> Table:
    inp = prepare_fit(y, x, model, options)
    return plevels_table(fit_prepared(inp), new_x, inp.options)


# --- candidate CERs ------------------------------------------------------------------------

def candidates_table(table: CandidateTable, options: Options | None = None) -> Table:
    """The ranked candidates, with the rule, the limits and why any fit failed below."""
    opts = options or Options()
    rows: list[list[Any]] = [list(CANDIDATE_CAPTIONS)] if opts.header else []
    notes = [table.rule, f"significance level {table.alpha:g}, VIF limit {table.vif_limit:g}; "
             "cv is SEE / mean y, spe the standard percent error (multiplicative methods)"]
    for r in table.rows:
        rows.append([r.rank, r.form, r.method, ", ".join(r.drivers), r.n or "", r.see, r.cv,
                     r.spe, r.r2_unit, r.bias_percent, r.worst_p, r.max_vif, r.verdict])
        if r.note:
            notes.append(f"rank {r.rank} ({r.form} {r.method} on {', '.join(r.drivers)}): "
                         f"{r.note}")
    note_rows(rows, notes)
    return finish_table(rows)


def candidates_fit(y: Any, drivers: Any, options: Any = None, *,
                   progress: Callable[[int, int], None] | None = None
                   ) -> tuple[CandidateTable, Options]:
    """Every candidate of the options' forms, methods and driver subsets (cached)."""
    inp = prepare_fit(y, drivers, "linear", options)
    o = inp.options
    names = inp.names or tuple(f"x{j + 1}" for j in range(inp.x.shape[1]))
    key = content_key("candidates", inp.y, inp.x, names, o.forms, o.methods, o.max_drivers,
                      o.level, o.vif_limit)

    def compute() -> CandidateTable:
        alpha = float(f"{1 - o.level:.12g}")  # 0.05, not 1 - 0.95 in binary
        return run_engine(lambda: compare_candidates(
            inp.y, inp.x, names, forms=o.forms, methods=o.methods, max_drivers=o.max_drivers,
            alpha=alpha, vif_limit=o.vif_limit, progress=progress), inp.header_rows,
            o.top_row)

    return SCAN_CACHE.get_or_compute(key, compute), o


def candidates_cells(y: Any, drivers: Any, options: Any = None) -> Table:
    table, opts = candidates_fit(y, drivers, options)
    return candidates_table(table, opts)


# --- learning curves -----------------------------------------------------------------------

def _learning_inputs(units: Any, costs: Any, opts: Options
                     ) -> tuple[CleanCells, CleanCells, int]:
    u = clean_cells(units, "units", names=opts.names)
    c = clean_cells(costs, "costs", names=opts.names)
    if c.n_cols != 1:
        raise CellError(f"costs must be one column; got {c.n_cols} columns", SHAPE)
    if u.n_cols not in (1, 2):
        raise CellError("units must be one column (unit numbers) or two columns (first and "
                        f"last unit of each lot); got {u.n_cols} columns", SHAPE)
    if u.n_rows != c.n_rows:
        raise CellError(f"units has {u.n_rows} rows but costs has {c.n_rows}; select ranges "
                        "of the same height", SHAPE)
    return u, c, int(u.names is not None or c.names is not None)


def learning_fit(units: Any, costs: Any, options: Any = None, *, top_row: int | None = None
                 ) -> tuple[LearningCurve, Options, tuple[tuple[str, int], ...]]:
    """The fitted curve, the options and the rows the cell rules dropped (``top_row``, the
    sheet row of the selections' first row, when the caller knows it)."""
    opts = options_value(options)
    if top_row is not None:
        opts = opts.replace(top_row=top_row)
    u, c, head = _learning_inputs(units, costs, opts)
    drops = drop_summary(row_codes(u.codes, c.codes))
    cost = c.values[:, 0]
    if u.n_cols == 1:
        curve = run_engine(lambda: learning_curve(u.values[:, 0], cost, opts.theory,
                                                  level=opts.level), head, opts.top_row)
    else:
        curve = run_engine(lambda: learning_curve(None, cost, opts.theory, first=u.values[:, 0],
                                                  last=u.values[:, 1], level=opts.level), head,
                           opts.top_row)
    return curve, opts, drops


@dataclass(frozen=True)
class LotCost:
    """The cost of units ``first``..``last`` on a learning curve."""

    first: float
    last: float
    cost: float

    @property
    def caption(self) -> str:
        if self.first == self.last:
            return f"cost of unit {self.first:g}"
        return f"cost of units {self.first:g}-{self.last:g}"


def lot_costs(curve: LearningCurve, at: Any) -> list[LotCost]:
    """The costs asked for in ``at``: a column of unit numbers n (unit n, and units 1..n) or
    two columns m, n (units m..n); rows without two numbers are skipped."""
    a = clean_cells(at, "at", names="no",
                    flat_as_row=isinstance(at, (list, tuple)) and len(at) == 2
                    and not isinstance(at[0], (list, tuple)))
    if a.n_cols not in (1, 2):
        raise CellError("at must be one column (unit numbers n) or two columns (first and last "
                        f"unit m, n); got {a.n_cols} columns", SHAPE)
    out: list[LotCost] = []
    for i in range(a.n_rows):
        if (a.codes[i] != OK).any():
            continue
        vals = a.values[i]
        try:
            if a.n_cols == 1:
                n = float(vals[0])
                out += [LotCost(n, n, curve.unit_cost(n)),
                        LotCost(1.0, n, curve.cumulative_cost(n))]
            else:
                m, n = (float(v) for v in vals)
                out.append(LotCost(m, n, curve.lot_cost(m, n)))
        except ModelError as exc:
            raise CellError.from_model(exc, f"at row {i + 1}: {exc}") from None
    return out


def learning_table(curve: LearningCurve, at: Any = None, options: Options | None = None, *,
                   drops: tuple[tuple[str, int], ...] = ()) -> Table:
    """Rows ``item, value``: theory, data, rows, slope (%) with its interval and standard
    error, the exponent, T1 with its interval and standard error, the log-space SEE, the
    level, then the costs asked for in ``at`` (``lot_costs``)."""
    opts = options or Options()
    s_low, s_high = interval_captions(curve.level, "slope")
    t_low, t_high = interval_captions(curve.level, "first-unit cost")
    rows: list[list[Any]] = [["item", "value"]] if opts.header else []
    rows += [["theory", curve.theory], ["data", curve.data or "given"],
             ["rows used", curve.n], ["slope, %", 100 * curve.slope],
             [f"{s_low}, %", 100 * curve.slope_ci[0]], [f"{s_high}, %", 100 * curve.slope_ci[1]],
             ["slope standard error, points of %", 100 * curve.slope_se],
             ["exponent b = log2(slope)", curve.b], ["first-unit cost (T1)", curve.t1],
             [t_low, curve.t1_ci[0]], [t_high, curve.t1_ci[1]],
             ["first-unit cost standard error", curve.t1_se],
             ["typical miss in log space (SEE)", curve.see_log],
             ["confidence level of the intervals", curve.level]]
    if at is not None:
        rows += [[c.caption, c.cost] for c in lot_costs(curve, at)]
    notes = ["fitted by least squares of ln(cost) on ln(unit number): the SEE is in log "
             "space; T1's interval is exp of ln T1's, the slope's is 2^(b's interval)"]
    if curve.data == "lot" and curve.theory == "unit":
        notes.append("lot midpoints Q solve T1*Q^b = the lot's average unit cost on the curve: "
                     "Q = (sum of i^b over the lot / lot size)^(1/b), iterated with b")
    if drops:
        notes.append(drops_text(drops))
    note_rows(rows, notes)
    return finish_table(rows)


def learning_cells(units: Any, costs: Any, at: Any = None, options: Any = None) -> Table:
    curve, opts, drops = learning_fit(units, costs, options)
    return learning_table(curve, at, opts, drops=drops)


# --- base-year costs -----------------------------------------------------------------------

def baseyear_cells(costs: Any, years: Any, index: Any, options: Any = None) -> Table:
    """Costs in the prices of the options' ``base_year``: cost * index[base] / index[year],
    one row per cost row (a header row when the costs had one); blank costs stay blank."""
    opts = options_value(options)
    if opts.base_year is None:
        raise CellError("give the year to convert to in the options, e.g. base_year=2024",
                        CellErrorKind.OPTIONS)
    c = clean_cells(costs, "costs", names=opts.names)
    yr = clean_cells(years, "years", names=opts.names)
    ix = clean_cells(index, "index", names=opts.names)
    if c.n_cols != 1 or yr.n_cols != 1:
        raise CellError("costs and years must be one column each", SHAPE)
    if c.n_rows != yr.n_rows:
        raise CellError(f"costs has {c.n_rows} rows but years has {yr.n_rows}; select ranges "
                        "of the same height", SHAPE)
    if ix.n_cols != 2:
        raise CellError(f"index must be two columns, year and index; got {ix.n_cols} columns",
                        SHAPE)
    keep = ~((ix.codes[:, 0] != OK) & (ix.codes[:, 1] != OK))  # fully blank index rows
    head = int(c.names is not None or yr.names is not None)
    out = run_engine(lambda: to_base_year(c.values[:, 0], yr.values[:, 0], ix.values[keep, 0],
                                          ix.values[keep, 1], opts.base_year), head)
    rows: list[list[Any]] = []
    if c.names is not None and opts.header:
        rows.append([f"{c.names[0]}_{opts.base_year}"])
    rows += [[v] for v in out]
    return finish_table(rows)


# --- the CER card --------------------------------------------------------------------------

@dataclass(frozen=True)
class CardFacts:
    """What a CER card shows, as (field, value) items (``CARD_CAPTIONS`` name them in the
    table; JSON keeps the fields), and its cautions."""

    items: tuple[tuple[str, Any], ...]
    cautions: tuple[str, ...]

    def to_dict(self) -> dict:
        out = {k: (v if not isinstance(v, float) or math.isfinite(v) else None)
               for k, v in self.items}
        return out | {"cautions": list(self.cautions)}


def _centre(res: CerResult) -> np.ndarray:
    return res.x.mean(axis=0)


def card_facts(res: CerResult, inp_key: str, options: Options | None = None,
               drops: tuple[tuple[str, int], ...] = (), today: dt.date | None = None
               ) -> CardFacts:
    """The card of a fitted CER: equation in units, form, method, rows, relevant range,
    unit-space statistics, the spread of a new estimate at the drivers' means, base year,
    date, the input's content hash and the cautions."""
    opts = options or Options()
    u = res.unit
    centre = _centre(res)
    pc = percentiles(res, centre.reshape(1, -1), (20, 50, 80))
    est = float(res.predict(centre.reshape(1, -1)).fitted[0])
    p20, p80 = float(pc.values[0][0]), float(pc.values[0][2])
    method = res.method
    if method == "log":
        bt = res.details["back_transform"]
        method = f"log ({bt['used']} back-transform factor {bt['factor']:.6g})"
    elif method == "mupe":
        method = f"mupe ({res.details['iterations']} reweighting steps)"
    items: list[tuple[str, Any]] = [
        ("equation", with_base_year(res.equation(), opts.base_year)),
        ("form", res.form), ("method", method), ("error_model", res.error_model),
        ("n_used", u.n), ("n_dropped", res.n_dropped),
    ]
    if drops:
        items.append(("dropped_rows", drops_text(drops)))
    for name, lo, hi in zip(res.drivers, res.x.min(axis=0), res.x.max(axis=0)):
        items.append((f"{RANGE_FIELD} {name}", f"{lo:.6g} to {hi:.6g}"))
    items += [("see", u.see), ("cv", u.cv)]
    if u.multiplicative:
        items.append(("spe", u.spe))
    items += [("r2_unit", u.r2_unit), ("bias_percent", u.bias_percent)]
    where = ", ".join(f"{n} = {v:.6g}" for n, v in zip(res.drivers, centre))
    items += [("centre", where), ("estimate_at_centre", est),
              ("p20_at_centre", p20), ("p80_at_centre", p80),
              ("p20_percent", 100 * (p20 / est - 1)), ("p80_percent", 100 * (p80 / est - 1)),
              ("base_year", opts.base_year if opts.base_year is not None else "not stated"),
              (CARD_DATE, (today or dt.datetime.now(dt.timezone.utc).date()).isoformat()),
              ("input_hash", inp_key[:16]), ("level", res.level)]
    return CardFacts(tuple(items), tuple(cautions(res, opts.base_year)))


def cautions(res: CerResult, base_year: int | None) -> list[str]:
    """What a reviewer should weigh before using the CER (limits are common practice)."""
    out = []
    alpha = 1 - res.level
    for c in res.coefficients[1:]:
        if not c.p_value < alpha:
            out.append(f"{c.name} is not significant at the {res.level:g} level "
                       f"(p = {c.p_value:.3g})")
    if math.isfinite(res.max_vif) and res.max_vif >= 10:
        out.append(f"drivers are collinear: max VIF {res.max_vif:.3g} (10 or more; common "
                   "practice)")
    p = res.unit.n_params
    if res.unit.n < 10 * p:
        out.append(f"{res.unit.n} rows for {p} coefficients: fewer than 10 per coefficient "
                   "(common rule of thumb)")
    if res.n_dropped:
        out.append(f"{res.n_dropped} row(s) left out of the fit")
    if math.isfinite(res.unit.r2_unit) and res.unit.r2_unit < 0:
        out.append("R² in units is negative: the back-transformed fit is worse than the mean")
    if base_year is None:
        out.append("no base year stated (base_year=YYYY): costs of different years should be "
                   "brought to one year's prices first")
    out.extend(res.notes)
    out.append("estimates outside the relevant range are extrapolations")
    return out


def card_table(facts: CardFacts, options: Options | None = None) -> Table:
    """Two columns, item and value; one ``caution`` row per caution."""
    opts = options or Options()
    rows: list[list[Any]] = [["item", "value"]] if opts.header else []
    rows += [[card_caption(k), v] for k, v in facts.items]
    rows += [["caution", c] for c in facts.cautions]
    return finish_table(rows)


def card_input(y: Any, x: Any, model: Any, options: Any = None) -> tuple[CerResult, FitInput]:
    """The fitted CER of the cells, and their cleaned input; refuses other models."""
    inp = prepare_fit(y, x, model, options)
    res = fit_prepared(inp)
    if not isinstance(res, CerResult):
        raise CellError("the CER card documents a power, factor or exponential model with a "
                        "method in the options, e.g. model power and method=mupe",
                        CellErrorKind.OPTIONS)
    return res, inp


def card_cells(y: Any, x: Any, model: Any, options: Any = None) -> Table:
    res, inp = card_input(y, x, model, options)
    return card_table(card_facts(res, inp.key(), inp.options, inp.drops), inp.options)
