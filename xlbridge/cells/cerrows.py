"""Rows of the basic tables (coefficients, statistics, predictions, equation) for a
cost-estimating relationship (``CerResult``), and the unit-space rows every fit's statistics
table carries. Raw rows and notes only: ``cells/tables.py`` finishes them into tables.
"""

from __future__ import annotations

from typing import Any

from ..engine import CerResult, FitResult
from ..engine.cerresult import INTERVAL_SOURCES
from ..engine.unitstats import UnitStats, relevant_range
from .statrows import interval_captions

__all__ = ["CER_COEF_COLUMNS", "base_year_text", "cer_coef_rows", "cer_predict_rows",
           "cer_stats_rows", "fit_unit_rows", "model_label", "model_title", "range_rows",
           "rows_used", "unit_rows", "with_base_year"]

CER_COEF_COLUMNS = ("term", "role", "estimate", "ci_lower", "ci_upper", "std_error", "t_ratio",
                    "p_value")  # fields in table order; captions as the polynomial table's

Rows = list[list[Any]]


def model_label(res: CerResult) -> str:
    """``'power CER by mupe'``."""
    return f"{res.form} CER by {res.method}"


def model_title(res: FitResult | CerResult) -> str:
    """The model as titles name it: ``'2'``, ``'surface'``, ``'power CER by mupe'``."""
    return model_label(res) if isinstance(res, CerResult) else res.spec.spec


def rows_used(res: FitResult | CerResult) -> int:
    """Rows the fit used."""
    return int(res.unit.n if isinstance(res, CerResult) else res.stats.n_used)


def base_year_text(base_year: int | None) -> str:
    """How an output states the price year of the costs."""
    return f"costs in {base_year} prices" if base_year is not None else ""


def with_base_year(equation: str, base_year: int | None) -> str:
    """The equation followed by the base year of its costs, when one is stated."""
    return f"{equation} ({base_year_text(base_year)})" if base_year is not None else equation


def cer_coef_rows(res: CerResult, header: bool) -> tuple[Rows, list[str]]:
    """One row per coefficient, ``a`` first, then each driver's exponent or slope."""
    head = ["term", "role", "estimate", *interval_captions(res.level), "standard error", "t",
            "p"]
    rows: Rows = [head] if header else []
    for c in res.coefficients:
        rows.append([c.name, c.role, c.estimate, c.ci_lower, c.ci_upper, c.std_error,
                     c.t_ratio, c.p_value])
    notes = [f"standard errors and intervals from {INTERVAL_SOURCES[res.method]}"]
    if res.method == "log" and res.correction != 1.0:
        notes.append(f"a is exp of the log-space constant; the equation in units multiplies "
                     f"it by the back-transform factor {res.correction:.6g}")
    return rows, notes


def unit_rows(unit: UnitStats) -> Rows:
    """SEE, CV, R² in units, percent bias and (multiplicative fits) SPE, named as in JSON."""
    rows: Rows = [["see", unit.see], ["cv", unit.cv], ["r2_unit", unit.r2_unit],
                  ["bias_percent", unit.bias_percent]]
    if unit.multiplicative:
        rows.append(["spe", unit.spe])
    return rows


def range_rows(ranges: dict[str, list[float]]) -> Rows:
    """The relevant range: min and max of each driver over the rows used."""
    rows: Rows = []
    for name, (lo, hi) in ranges.items():
        rows += [[f"range_min {name}", lo], [f"range_max {name}", hi]]
    return rows


def fit_unit_rows(res: FitResult) -> Rows:
    """The unit-space block of a polynomial or surface fit's statistics table."""
    import numpy as np

    ranges = relevant_range(np.vstack([res.x_min, res.x_max]), res.spec.predictors)
    return [["unit_space", "unit"]] + unit_rows(res.unit_stats) + range_rows(ranges)


def cer_stats_rows(res: CerResult, base_year: int | None) -> tuple[Rows, list[str]]:
    """``statistic, value`` rows of a CER; the space of each block is named in a row."""
    d = res.details
    rows: Rows = [["model", model_label(res)], ["form", res.form], ["method", res.method],
                  ["error_model", res.error_model], ["n_used", res.unit.n],
                  ["n_dropped", res.n_dropped], ["n_params", res.unit.n_params],
                  ["df", res.df], ["unit_space", "unit"]]
    rows += unit_rows(res.unit)
    if res.method == "log":
        bt, ls = d["back_transform"], d["log_stats"]
        rows += [["log_space", "log"], ["see_log", ls["see"]], ["r2_log", ls["r2"]],
                 ["back_transform", bt["used"]], ["back_transform_factor", bt["factor"]],
                 ["smearing_factor", bt["smearing"]], ["normal_factor", bt["normal"]]]
    elif res.method == "mupe":
        rows += [["iterations", d["iterations"]], ["last_change", d["last_change"]],
                 ["stop_rule", d["stop_rule"]]]
    elif res.method == "zmpe":
        rows += [["sum_percent_errors", d["sum_percent_errors"]]]
    if len(res.drivers) > 1:
        rows.append(["max_vif", res.max_vif])
    rows += range_rows(relevant_range(res.x, res.drivers))
    rows.append(["level", res.level])
    rows.append(["base_year", base_year if base_year is not None else "not stated"])
    return rows, list(res.notes)


def cer_predict_rows(res: CerResult, pts: Any, level: float) -> list[list[Any]]:
    """Per usable point: fitted, "", "", pi_lower, pi_upper, "", range flag (a CER has no
    mean interval or leverage in this table: the columns keep the polynomial layout)."""
    pred = res.predict(pts, level)
    out = []
    for j in range(len(pred.fitted)):
        flag = "extrapolated" if bool(pred.extrapolated[j]) else "inside"
        out.append([pred.fitted[j], "", "", pred.pi_lower[j], pred.pi_upper[j], "", flag])
    return out
