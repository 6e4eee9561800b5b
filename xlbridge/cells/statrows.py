"""Captions of the house style (docs/output-style.md): interval ends, and the statistics
block with each measure under the question it answers, in the order a reviewer asks them.

The tables are built from ``[name, value]`` rows whose names are the JSON field names
(``r2``, ``see``, ``range_min size``, ...); ``arrange`` turns them into ``[question,
measure, value]`` rows. A name not listed here keeps its name, under "other".
"""

from __future__ import annotations

from typing import Any

__all__ = ["QUESTIONS", "STAT_ROWS", "arrange", "interval_captions", "stat_caption"]


def interval_captions(level: float, what: str = "") -> tuple[str, str]:
    """Captions of an interval's two ends in every table, e.g. ``("low (95%)",
    "high (95%)")``."""
    pct = f"{level * 100:.10g}%"
    lead = f"{what} " if what else ""
    return f"{lead}low ({pct})", f"{lead}high ({pct})"

#: The questions, in the order the block answers them.
QUESTIONS = ("what was fitted", "how good is the fit", "how good is the fit in units",
             "how good is the fit in log space", "can I trust the coefficients",
             "is it overfitted", "how was it solved", "where does it apply", "other")

FITTED, FIT, UNITS, LOGS, TRUST, OVERFIT, SOLVED, APPLIES = QUESTIONS[:8]

#: ``(question, name, caption)`` for every named row, in the order shown.
STAT_ROWS = (
    (FITTED, "model", "model"),
    (FITTED, "form", "form of the CER"),
    (FITTED, "method", "fitting method"),
    (FITTED, "error_model", "error model"),
    (FITTED, "n_used", "rows used"),
    (FITTED, "n_dropped", "rows left out"),
    (FITTED, "n_params", "coefficients"),
    (FITTED, "df_resid", "residual degrees of freedom"),
    (FITTED, "df", "degrees of freedom"),
    (FITTED, "level", "confidence level of the intervals"),
    (FITTED, "fit_space", "space of the fit (of R², SEE and F below)"),
    (FIT, "r2", "share of the variation explained (R²)"),
    (FIT, "adj_r2", "adjusted R²"),
    (FIT, "rmse", "typical miss (SEE), in the space of the fit"),
    (FIT, "rmse_percent", "typical miss as % of the mean of y"),
    (FIT, "sse", "residual sum of squares"),
    (FIT, "sst", "total sum of squares"),
    (FIT, "f_stat", "F of all terms together"),
    (FIT, "f_p_value", "p of that F"),
    (UNITS, "unit_space", "space of these measures"),
    (UNITS, "see", "typical miss (SEE)"),
    (UNITS, "cv", "typical miss as share of the mean (CV)"),
    (UNITS, "r2_unit", "R² of the estimates in units"),
    (UNITS, "bias_percent", "bias, mean % error"),
    (UNITS, "spe", "typical percent miss (SPE)"),
    (LOGS, "log_space", "space of these measures"),
    (LOGS, "see_log", "typical miss (SEE)"),
    (LOGS, "r2_log", "R²"),
    (TRUST, "max_vif", "largest VIF"),
    (TRUST, "cond_number", "condition number (scaled basis)"),
    (TRUST, "cond_number_raw", "condition number (raw terms)"),
    (OVERFIT, "top_term_p_value", "p of the highest-order term"),
    (OVERFIT, "press", "PRESS"),
    (OVERFIT, "pred_r2", "predicted R² (from PRESS)"),
    (OVERFIT, "aic", "AIC"),
    (OVERFIT, "bic", "BIC"),
    (SOLVED, "back_transform", "back-transform to units"),
    (SOLVED, "back_transform_factor", "back-transform factor"),
    (SOLVED, "smearing_factor", "smearing factor (Duan)"),
    (SOLVED, "normal_factor", "normal-theory factor"),
    (SOLVED, "iterations", "iterations"),
    (SOLVED, "last_change", "last relative change"),
    (SOLVED, "stop_rule", "stop rule"),
    (SOLVED, "sum_percent_errors", "sum of percent errors"),
    (APPLIES, "range_min", "lowest {} in the data"),
    (APPLIES, "range_max", "highest {} in the data"),
    (APPLIES, "base_year", "price year of the costs"),
)

_BY_NAME = {name: (q, caption) for q, name, caption in STAT_ROWS}
_ORDER = {name: i for i, (_, name, _) in enumerate(STAT_ROWS)}


def _split(name: str) -> tuple[str, str]:
    """``"range_min size"`` -> ``("range_min", "size")``; other names have no subject."""
    head, _, subject = name.partition(" ")
    return (head, subject) if head in ("range_min", "range_max") else (name, "")


def stat_caption(name: str) -> tuple[str, str]:
    """``(question, caption)`` of a row name (a JSON field name)."""
    head, subject = _split(name)
    question, caption = _BY_NAME.get(head, (QUESTIONS[-1], name))
    return question, caption.format(subject) if subject else caption


def arrange(body: list[list[Any]]) -> list[list[Any]]:
    """``[name, value]`` rows as ``[question, measure, value]`` rows, grouped by question
    (in ``QUESTIONS`` order) and ordered within each as ``STAT_ROWS`` lists them (rows of
    one kind, such as each driver's range, keep their order)."""
    def key(item: tuple[int, list[Any]]) -> tuple[int, int, int]:
        i, (name, _) = item
        head, _ = _split(name)
        question, _ = stat_caption(name)
        return QUESTIONS.index(question), _ORDER.get(head, len(_ORDER)), i

    return [[*stat_caption(name), value] for _, (name, value) in sorted(enumerate(body),
                                                                        key=key)]
