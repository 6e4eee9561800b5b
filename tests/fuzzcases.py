"""Deterministic fuzz of the worksheet functions: random (seeded) arguments in every value
shape a runtime can pass, and the rules every answer must keep (a 2-D list, no internal
error, no NaN or infinite number in a cell, within the time limit). Used by
tests/test_fuzz.py (a few thousand calls) and scripts/fuzz_worksheet.py (as many as asked)."""

from __future__ import annotations

import datetime as dt
import math
import time
from dataclasses import dataclass, field

import numpy as np

from xlbridge import worksheet

#: Seconds one call may take (the README's bound is 10 s for 10,000 rows on one core).
CALL_LIMIT = 10.0
EXTREMES = (5e-324, 2.2e-308, 1e-300, 1e-200, 1e-160, 1e160, 1e200, 3e260, 9.4e307, 1.79e308,
            -1.79e308, -1e-300, 0.0, -0.0)
ERRORS = ("#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NUM!", "", "text", " 12 ", "1e400")
MODELS = (1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 2.0, 0, 11, -1, "surface", "linear", "interact",
          "power", "factor", "exponential", "x1, x1^2", "x1*x2", "x1, x2, x1*x2", "x, x^2",
          "x*x*x", "x1^10", "", None, "#N/A", "degree 3")
OPTIONS = ("log=yes", "error=percent", "se=hc3", "se=hc1", "level=0.9", "intercept=no",
           "method=mupe", "method=log", "method=zmpe", "method=ols", "folds=3",
           "correction=normal", "levels=10 50 90", "base_year=2020", "theory=cumulative",
           "max_drivers=2", "vif_limit=5", "totals=keep", "error=percent; log=yes")
BAD_OPTIONS = ("level=2", "level=", "bogus=1", ";;", "names=a b", "header=maybe")
PLOT_KINDS = ("curve", "residuals", "quantiles", "influence", "degrees", "contour", "other")


@dataclass
class Tally:
    """What a fuzz run saw: calls per function, and the rule breaks (empty when clean)."""

    calls: dict[str, int] = field(default_factory=dict)
    problems: list[str] = field(default_factory=list)
    slowest: float = 0.0


def _number(rng: np.random.Generator) -> float:
    r = rng.random()
    if r < 0.08:
        return float(rng.choice(EXTREMES))
    if r < 0.12:
        return float(rng.integers(-3, 50))
    return float(rng.uniform(0.5, 100.0))


def _cell(rng: np.random.Generator, v: float):
    """One cell as some runtime might hand it over."""
    r = rng.random()
    if r < 0.03:
        return None
    if r < 0.06:
        return str(rng.choice(ERRORS))
    if r < 0.08:
        return dt.datetime(2020, 1, 1) + dt.timedelta(days=int(rng.integers(0, 3000)))
    if r < 0.10 and float(v).is_integer() and abs(v) < 1e15:
        return int(v)
    return v


def _column(rng: np.random.Generator, n: int, kind: float) -> list[float]:
    x = np.sort(rng.uniform(1, 20, n)) if kind < 0.7 else rng.integers(1, 5, n).astype(float)
    if kind > 0.9:
        x = x * float(rng.choice(EXTREMES))
    return [float(v) for v in x]


def _shape(rng: np.random.Generator, cols: list[list[float]]):
    """The columns as a 2-D list, a flat list, a scalar, a bare None or a 2-D list of mixed
    cell values."""
    n = len(cols[0]) if cols else 0
    r = rng.random()
    if r < 0.02:
        return None
    if r < 0.04 and n:
        return cols[0][0]
    if r < 0.2 and len(cols) == 1:
        return [_cell(rng, v) for v in cols[0]]
    return [[_cell(rng, c[i]) for c in cols] for i in range(n)]


def arguments(rng: np.random.Generator, name: str) -> tuple:
    """Random arguments for the worksheet function ``name``."""
    n = int(rng.choice((0, 3, 6, 12, 12, 20, 20, 40)))
    k = int(rng.choice((1, 1, 1, 2, 3)))
    xs = [_column(rng, n, rng.random()) for _ in range(k)]
    ys = [_number(rng) if rng.random() < 0.1 else 2 + 0.5 * sum(c[i] for c in xs)
          + float(rng.normal(0, 0.5)) for i in range(n)]
    y, x = _shape(rng, [ys]), _shape(rng, xs)
    model = MODELS[int(rng.integers(len(MODELS)))]
    if k == 1 and rng.random() < 0.5:
        model = int(rng.integers(1, 11))
    picked = rng.choice(len(OPTIONS), size=int(rng.integers(0, 3)), replace=False)
    opts = [OPTIONS[int(i)] for i in picked]
    if rng.random() < 0.1:
        opts.append(BAD_OPTIONS[int(rng.integers(len(BAD_OPTIONS)))])
    options = "; ".join(opts) or None
    new_x = _shape(rng, [_column(rng, 3, rng.random()) for _ in range(k)])
    if name in ("XB_PREDICT", "XB_MARGINAL", "XB_PLEVELS"):
        return (y, x, model, new_x, options)
    if name == "XB_DEGREESCAN":
        return (y, x, MODELS[int(rng.integers(14))], options)
    if name == "XB_PLOT":
        return (y, x, model, PLOT_KINDS[int(rng.integers(len(PLOT_KINDS)))], options)
    if name == "XB_GROUPS":
        g = _shape(rng, [[float(rng.integers(0, 3)) for _ in range(n)]])
        return (g, y, x, model, options)
    if name == "XB_VERSIONS":
        return ()
    if name == "XB_CANDIDATES":
        return (y, x, options)
    if name == "XB_LEARNING":
        return (_shape(rng, [[float(i + 1) for i in range(n)]]), y,
                _number(rng) if rng.random() < 0.5 else None, options)
    if name == "XB_BASEYEAR":
        years = _shape(rng, [[float(2000 + int(rng.integers(0, 30))) for _ in range(n)]])
        table = [[float(1990 + i), 1 + i / 50] for i in range(40)]
        return (y, years, table, options if rng.random() < 0.3 else "base_year=2020")
    return (y, x, model, options)


def check(name: str, args: tuple, tally: Tally) -> None:
    """Call ``name`` with ``args`` and record any rule it breaks."""
    fn = getattr(worksheet, name)
    tally.calls[name] = tally.calls.get(name, 0) + 1
    start = time.perf_counter()
    out = fn(*args)
    took = time.perf_counter() - start
    tally.slowest = max(tally.slowest, took)
    where = f"{name}{_brief(args)}"
    if took > CALL_LIMIT:
        tally.problems.append(f"{where}: took {took:.1f} s")
    if not isinstance(out, list) or not all(isinstance(r, list) for r in out):
        tally.problems.append(f"{where}: not a 2-D list: {type(out).__name__}")
        return
    for row in out:
        for v in row:
            if isinstance(v, str) and "internal error" in v:
                tally.problems.append(f"{where}: {v[:200]}")
            elif isinstance(v, float) and not math.isfinite(v):
                tally.problems.append(f"{where}: a {v} cell")
                return


def run(calls: int, seed: int = 2026) -> Tally:
    """``calls`` fuzzed calls spread over every worksheet function (seeded, repeatable)."""
    rng = np.random.default_rng(seed)
    names = sorted(worksheet.FUNCTIONS)
    tally = Tally()
    for i in range(calls):
        name = names[i % len(names)]
        check(name, arguments(rng, name), tally)
    return tally


def _brief(args: tuple) -> str:
    text = repr(args)
    return f"({text[:300]}{'...' if len(text) > 300 else ''})"
