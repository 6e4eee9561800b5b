"""Bring costs from different years to one base year with a price index."""

from __future__ import annotations

import math

import numpy as np

from .errors import ModelError, ModelErrorKind

DATA = ModelErrorKind.DATA


def _year(v, where: str, row: int | None = None) -> int:
    try:
        f = float(v)
    except (TypeError, ValueError):
        f = math.nan
    if not math.isfinite(f) or not f.is_integer():
        raise ModelError(f"{where}: the year must be a whole number; got {v!r}", DATA, row=row)
    return int(f)


def index_table(index_years, index_values) -> dict[int, float]:
    """{year: index} from two columns; each year once, each index above 0."""
    years, values = list(np.ravel(index_years)), list(np.ravel(index_values))
    if len(years) != len(values):
        raise ModelError(f"the index has {len(years)} years but {len(values)} values", DATA)
    table: dict[int, float] = {}
    for i, (y, v) in enumerate(zip(years, values), start=1):
        yr = _year(y, f"index row {i}")
        try:
            val = float(v)
        except (TypeError, ValueError):
            val = math.nan
        if not math.isfinite(val) or val <= 0:
            raise ModelError(f"index row {i} (year {yr}) needs an index above 0; got {v!r}",
                             DATA)
        if yr in table:
            raise ModelError(f"index row {i}: year {yr} appears twice in the index", DATA)
        table[yr] = val
    return table


def to_base_year(costs, years, index_years, index_values, base_year: int) -> np.ndarray:
    """Costs in base-year terms: cost * index[base_year] / index[year of the cost]. Blank
    (NaN) costs stay NaN. A year missing from the index raises ModelError naming the
    1-based data row and the year.

    Examples
    --------
    >>> from xlbridge.engine import to_base_year
    >>> to_base_year([100.0, 200.0], [2020, 2022], [2020, 2021, 2022], [100.0, 104.0, 110.0],
    ...              2022).tolist()
    [110.0, 200.0]
    """
    table = index_table(index_years, index_values)
    base = _year(base_year, "base year")
    if base not in table:
        raise ModelError(f"base year {base} is not in the index table; add its index", DATA)
    try:
        c = np.asarray(costs, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ModelError("costs must hold numbers only", DATA) from None
    yrs = list(np.ravel(years))
    if len(yrs) != len(c):
        raise ModelError(f"{len(c)} costs but {len(yrs)} years", DATA)
    out = np.full(len(c), np.nan)
    for i, (cost, y) in enumerate(zip(c, yrs), start=1):
        if math.isnan(cost):
            continue
        yr = _year(y, f"row {i}", row=i)
        if yr not in table:
            raise ModelError(f"row {i}: year {yr} is not in the index table; add its index",
                             DATA, row=i)
        out[i - 1] = cost * table[base] / table[yr]
    return out
