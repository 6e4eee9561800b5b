"""``fit``: validate inputs, solve accurately, and assemble a ``FitResult``."""

from __future__ import annotations

import math

import numpy as np

from . import inference
from .result import FitResult
from .solve import solve
from .terms import ModelError, parse_model


def _names_of(obj) -> tuple[str, ...] | None:
    cols = getattr(obj, "columns", None)
    if cols is not None:
        return tuple(str(c) for c in cols)
    name = getattr(obj, "name", None)
    if name is not None and getattr(obj, "ndim", 0) == 1:
        return (str(name),)
    return None


def _few_distinct(col: np.ndarray, need: int) -> bool:
    """True unless ``col`` has at least ``need`` distinct values (stops as soon as it does)."""
    seen: set[float] = set()
    for v in col:
        seen.add(float(v))
        if len(seen) >= need:
            return False
    return True


def _as_float(a, what: str) -> np.ndarray:
    try:
        arr = np.asarray(a, dtype=float)
    except (TypeError, ValueError):
        raise ModelError(f"{what} must hold numbers only") from None
    return arr


def fit(
    y,
    x,
    model: int | str = 2,
    *,
    intercept: bool = True,
    level: float = 0.95,
    names=None,
    weights=None,
) -> FitResult:
    """Least-squares fit of ``y`` on a polynomial or second-order model in ``x``.

    ``x`` is 1-D (one predictor) or n x k; pandas objects lend their names. ``model`` is a
    degree 1-10, 'surface', 'linear', 'interact' or a term list like 'size, size^2'. Rows with
    a NaN in y, x or weights are dropped and counted. Raises ModelError with what to fix.
    """
    if not isinstance(level, (int, float)) or isinstance(level, bool) or not 0 < level < 1:
        raise ModelError(f"level must be between 0 and 1 (e.g. 0.95); got {level!r}")
    if names is None:
        names = _names_of(x)
    response = _names_of(y)
    response = response[0] if response else "y"
    yv = _as_float(y, "y")
    xv = _as_float(x, "x")
    if yv.ndim == 2 and 1 in yv.shape:
        yv = yv.ravel()
    if yv.ndim != 1:
        raise ModelError(f"y must be one column of numbers; got shape {yv.shape}")
    if xv.ndim == 1:
        xv = xv.reshape(-1, 1)
    if xv.ndim != 2:
        raise ModelError(f"x must be one column or a block of columns; got shape {xv.shape}")
    if xv.shape[0] != len(yv):
        raise ModelError(f"y has {len(yv)} rows but x has {xv.shape[0]} rows")
    wv = None
    if weights is not None:
        wv = _as_float(weights, "weights").ravel()
        if len(wv) != len(yv):
            raise ModelError(f"weights has {len(wv)} rows but y has {len(yv)}")
    spec = parse_model(model, xv.shape[1], tuple(names) if names is not None else None,
                       intercept=bool(intercept))

    used = ~np.isnan(yv) & ~np.isnan(xv).any(axis=1)
    if wv is not None:
        used &= ~np.isnan(wv)
    for what, arr in (("y", yv), ("x", xv), ("weights", wv)):
        if arr is not None and np.isinf(arr).any():
            bad = np.isinf(arr.reshape(len(yv), -1)).any(axis=1) & used
            if bad.any():
                row = int(np.argmax(bad)) + 1
                raise ModelError(f"{what} has an infinite value in row {row}")
    if wv is not None and np.any(wv[used] <= 0):
        raise ModelError("weights must be positive numbers")
    n_dropped = int(np.count_nonzero(~used))
    if n_dropped:
        yu, xu = yv[used], xv[used]
        wu = None if wv is None else wv[used]
    else:
        yu, xu, wu = yv, xv, wv
    n, p = len(yu), spec.n_params
    if spec.kind == "polynomial" and _few_distinct(xu[:, 0], spec.degree + 1):
        distinct = len(np.unique(xu[:, 0]))
        if distinct < spec.degree + 1:
            raise ModelError(f"degree {spec.degree} needs at least {spec.degree + 1} distinct "
                             f"x values; found {distinct}")
    if n <= p:
        raise ModelError(
            f"the model has {p} coefficients, so it needs at least {p + 1} rows with numbers "
            f"(one more than the coefficients, to estimate the error); found {n}"
        )
    if wu is not None and not math.isfinite(float(np.sum(wu))):
        raise ModelError("weights are too large")
    core = solve(xu, yu, wu, spec)
    return inference.build(spec, core, xu, yu, wu, float(level), used, n_dropped, response)
