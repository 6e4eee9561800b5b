"""``fit``: validate inputs, solve accurately, and assemble a ``FitResult``."""

from __future__ import annotations

import math

import numpy as np

from . import cer, inference
from .cerresult import CerResult
from .errors import ModelError, ModelErrorKind, check_level, distinct_shortage
from .numtext import number_of_text, rows_text, text_numbers_note
from .result import FitResult, Remedy
from .solve import ACCEPT_ERROR, check_terms, solve, too_large
from .terms import parse_model

#: Where the statistical conventions are written down (named in notes that rely on one).
STATS_DOC = "see docs/statistics.md"
SE_TYPES = ("ols", "hc0", "hc1", "hc2", "hc3")
ERROR_TYPES = ("additive", "percent")


def names_of(obj) -> tuple[str, ...] | None:
    """Column names of a pandas DataFrame, or the name of a Series; None otherwise."""
    cols = getattr(obj, "columns", None)
    if cols is not None:
        return tuple(str(c) for c in cols)
    name = getattr(obj, "name", None)
    if name is not None and getattr(obj, "ndim", 0) == 1:
        return (str(name),)
    return None


def arrays(y, x, weights=None) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """y as (n,), x as (n, k) and weights as (n,) float arrays, shapes checked."""
    return read_arrays(y, x, weights)[:3]


def read_arrays(y, x, weights=None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, tuple[str, ...]]:
    """``arrays`` and the notes of reading them: text among the values follows the rule of
    ``engine.numtext`` (numbers stored as text are read and counted, other text leaves its
    row out, as in the cells), so a DataFrame column of text fits as its cells would."""
    texts: list[str] = []
    yv = _as_float(y, "y", texts)
    xv = _as_float(x, "x", texts)
    if yv.ndim == 2 and 1 in yv.shape:
        yv = yv.ravel()
    if yv.ndim != 1:
        raise ModelError(f"y must be one column of numbers; got shape {yv.shape}",
                         ModelErrorKind.DATA)
    if xv.ndim == 1:
        xv = xv.reshape(-1, 1)
    if xv.ndim != 2:
        raise ModelError(f"x must be one column or a block of columns; got shape {xv.shape}",
                         ModelErrorKind.DATA)
    if xv.shape[0] != len(yv):
        raise ModelError(f"y has {len(yv)} rows but x has {xv.shape[0]} rows", ModelErrorKind.DATA)
    wv = None
    if weights is not None:
        wv = _as_float(weights, "weights", texts).ravel()
        if len(wv) != len(yv):
            raise ModelError(f"weights has {len(wv)} rows but y has {len(yv)}", ModelErrorKind.DATA)
    return yv, xv, wv, tuple(texts)


def _few_distinct(col: np.ndarray, need: int) -> bool:
    """True unless ``col`` has at least ``need`` distinct values (stops as soon as it does)."""
    seen: set[float] = set()
    for v in col:
        seen.add(float(v))
        if len(seen) >= need:
            return False
    return True


def _as_float(a, what: str, notes: list[str] | None = None) -> np.ndarray:
    try:
        raw = np.asarray(a)
        if raw.dtype.kind in "US" and not isinstance(a, np.ndarray):
            raw = np.asarray(a, dtype=object)  # a list's numbers stay numbers, not text
    except (TypeError, ValueError):
        raise ModelError(f"{what} must hold numbers only", ModelErrorKind.DATA) from None
    if raw.dtype.kind in "OUS" and any(isinstance(v, str) for v in raw.ravel()):
        return _from_text(raw, what, notes)
    try:
        arr = np.asarray(a, dtype=float)
    except (TypeError, ValueError):
        raise ModelError(f"{what} must hold numbers only", ModelErrorKind.DATA) from None
    return arr


def _from_text(raw: np.ndarray, what: str, notes: list[str] | None) -> np.ndarray:
    """Values some of which are text, as floats by the rule of ``engine.numtext``."""
    out = np.empty(raw.shape, dtype=float)
    read = np.zeros(raw.shape, dtype=bool)
    other = np.zeros(raw.shape, dtype=bool)
    for i, v in np.ndenumerate(raw):
        if isinstance(v, str):
            num = number_of_text(v)
            read[i], other[i] = num is not None, num is None and bool(v.strip())
            out[i] = np.nan if num is None else num
            continue
        try:
            out[i] = np.nan if v is None else float(v)
        except (TypeError, ValueError):
            raise ModelError(f"{what} must hold numbers only", ModelErrorKind.DATA) from None

    def by_row(m: np.ndarray) -> np.ndarray:
        m = np.atleast_1d(m)
        return np.flatnonzero(m.reshape(m.shape[0], -1).any(axis=1)) + 1

    if notes is not None and read.any():
        notes.append(f"{what}: " + text_numbers_note(int(read.sum()), rows_text(by_row(read))))
    if notes is not None and other.any():
        rows = by_row(other)
        one = len(rows) == 1
        notes.append(f"{what}: {rows_text(rows)} {'holds' if one else 'hold'} text that is "
                     f"not a number and {'was' if one else 'were'} left out")
    return out


def fit(
    y,
    x,
    model: int | str = 2,
    *,
    intercept: bool = True,
    level: float = 0.95,
    names=None,
    weights=None,
    se: str = "ols",
    log: bool = False,
    error: str = "additive",
    method: str | None = None,
    correction: str = "smearing",
    certify: bool = True,
) -> FitResult | CerResult:
    """Least-squares fit of ``y`` on a polynomial or second-order model in ``x``.

    Rows with a NaN in y, x or weights are dropped and counted; everything else that cannot
    be fitted raises ModelError saying what to fix.

    Parameters
    ----------
    y : array_like, shape (n,)
        The response. A pandas Series lends its name.
    x : array_like, shape (n,) or (n, k)
        One predictor, or k predictor columns. pandas objects lend their names.
    model : int or str, default 2
        A degree 1-10 (one predictor), 'surface', 'linear', 'interact' or a term list
        such as 'size, size^2'.
    intercept : bool, default True
        Fit a constant term.
    level : float, default 0.95
        Confidence level of the intervals, strictly between 0 and 1.
    names : sequence of str, optional
        Predictor names (default: the columns' names, else x or x1, x2, ...).
    weights : array_like, shape (n,), optional
        Positive weights (weighted least squares).
    se : {'ols', 'hc0', 'hc1', 'hc2', 'hc3'}, default 'ols'
        Standard errors; 'hc0'..'hc3' are heteroscedasticity-consistent (robust).
    log : bool, default False
        Fit ln y; predictions are back-transformed with Duan's smearing.
    error : {'additive', 'percent'}, default 'additive'
        'percent': multiplicative error, fitted by iteratively reweighted least squares
        with weights 1 / fitted^2.
    method : {'log', 'mupe', 'zmpe', 'ols'}, optional
        With ``model`` 'power', 'factor' or 'exponential': fit that cost-estimating
        relationship by this method (see ``engine.cer``); without ``method`` such a name is
        read as before (a term list), so a predictor called 'power' keeps working. On the
        other models 'ols', 'log' and 'mupe' mean the default, ``log=True`` and
        ``error='percent'``.
    correction : {'smearing', 'normal', 'none'}, default 'smearing'
        The back-transform correction a CER fitted by 'log' applies in units.
    certify : bool, default True
        False keeps the double-precision answer without the refined or exact refit that
        certifies badly conditioned fits (an accuracy note gives its digits): for inner
        loops such as cross-validation folds, whose coefficients are not shown.

    Returns
    -------
    FitResult or CerResult
        Coefficients with their inference, fit statistics, the centered form and notes
        (a ``CerResult`` for a CER form).

    Raises
    ------
    ModelError
        With ``kind`` saying which sort of problem (``ModelErrorKind``).

    Examples
    --------
    Invented cost figures for eight sizes:

    >>> from xlbridge.engine import fit
    >>> size = [1, 2, 3, 4, 5, 6, 7, 8]
    >>> cost = [3.1, 4.9, 7.2, 9.8, 13.1, 16.9, 21.2, 25.8]
    >>> res = fit(cost, size, 2, names=("size",))
    >>> res.terms
    ('intercept', 'size', 'size^2')
    >>> print(", ".join(f"{v:.4f}" for v in res.estimates))
    1.8500, 1.0190, 0.2476
    >>> print(f"{res.stats.r2:.5f}")
    0.99995
    """
    if cer.is_form(model) and method is not None:
        if weights is not None or se != "ols" or log or error != "additive" or not intercept:
            raise ModelError("weights, se, log, error and intercept apply to polynomial and "
                             "surface models; a CER form takes method= and correction=",
                             ModelErrorKind.SPEC)
        return cer.fit_cer(y, x, model, method, names=names, level=level,
                           correction=correction)
    if method is not None:
        log, error = cer.model_remedy(method)
    level = check_level(level)
    se = str(se).lower()
    if se not in SE_TYPES:
        raise ModelError(f"se must be one of {', '.join(SE_TYPES)}; got {se!r}",
                         ModelErrorKind.SPEC)
    error = str(error).lower()
    if error not in ERROR_TYPES:
        raise ModelError(f"error must be one of {', '.join(ERROR_TYPES)}; got {error!r}",
                         ModelErrorKind.SPEC)
    if names is None:
        names = names_of(x)
    response = names_of(y)
    response = response[0] if response else "y"
    yv, xv, wv, text_notes = read_arrays(y, x, weights)
    try:
        spec = parse_model(model, xv.shape[1], tuple(names) if names is not None else None,
                           intercept=bool(intercept), forms=cer.FORMS)
    except ModelError:
        if cer.is_form(model):  # a CER form named without its method
            raise ModelError(f"{model.strip()!r} is a cost-estimating-relationship form: give "
                             f"the method too ({', '.join(cer.METHODS)})",
                             ModelErrorKind.SPEC) from None
        raise

    # built in one boolean array (no temporary per column); the same rows as
    # ~isnan(y) & ~isnan(x).any(axis=1) & ~isnan(weights)
    used = np.isnan(yv)
    spare = np.empty_like(used)
    for col in [xv[:, j] for j in range(xv.shape[1])] + ([] if wv is None else [wv]):
        used |= np.isnan(col, out=spare)
    del spare
    np.logical_not(used, out=used)
    for what, arr in (("y", yv), ("x", xv), ("weights", wv)):
        if arr is not None and np.isinf(arr).any():
            bad = np.isinf(arr.reshape(len(yv), -1)).any(axis=1) & used
            if bad.any():
                row = int(np.argmax(bad)) + 1
                raise ModelError(f"{what} has an infinite value in row {row}", ModelErrorKind.DATA)
    if wv is not None and np.any(wv[used] <= 0):
        raise ModelError("weights must be positive numbers", ModelErrorKind.DATA)
    n_dropped = len(used) - int(np.count_nonzero(used))
    if n_dropped:
        yu, xu = yv[used], xv[used]
        wu = None if wv is None else wv[used]
    else:
        yu, xu, wu = yv, xv, wv
    n, p = len(yu), spec.n_params
    if spec.kind == "polynomial" and _few_distinct(xu[:, 0], spec.degree + 1):
        distinct = len(np.unique(xu[:, 0]))
        if distinct < spec.degree + 1:
            raise ModelError(distinct_shortage(spec.degree, distinct), ModelErrorKind.SHORTAGE)
    if n <= p:
        raise ModelError(
            f"the model has {p} coefficients, so it needs at least {p + 1} rows with numbers "
            f"(one more than the coefficients, to estimate the error); found {n}",
            ModelErrorKind.SHORTAGE
        )
    if wu is not None and not math.isfinite(float(np.sum(wu))):
        raise ModelError("weights are too large", ModelErrorKind.SCALE)
    check_terms(xu, np.log(np.abs(yu[yu != 0])) if log else yu, spec)
    # overflow in extreme data is detected and reported as a message, not a warning
    with np.errstate(over="ignore", invalid="ignore"):
        return _fit_clean(spec, xu, yu, wu, float(level), used, n_dropped, response, se,
                          bool(log), error, yv, text_notes, bool(certify))


def _fit_clean(spec, xu, yu, wu, level, used, n_dropped, response, se, log, error, yv,
               text_notes=(), certify=True):
    notes: list[str] = list(text_notes)
    if wu is not None:
        notes.append("weighted fit: rmse is the error SD of an observation of weight 1, and "
                     "prediction intervals assume a new observation of weight 1 unless its "
                     f"weight is given; checks use sqrt(w)-scaled residuals ({STATS_DOC})")
    if log:
        if np.any(yu <= 0):
            row = int(np.argmax(yv <= 0)) + 1
            raise ModelError(f"log=yes needs every y above 0; row {row} has {yv[row - 1]:g}",
                             ModelErrorKind.DATA)
        yu = np.log(yu)
    # solve on y and weights divided by powers of two (exact), so no sum of squares leaves
    # the double range whatever the data's units; the result is scaled back at the end
    sy, cw = inference.response_scale(yu), inference.weight_scale(wu)
    ys = yu / sy
    ws = None if wu is None else wu / cw
    core = solve(xu, ys, ws, spec, certify and error != "percent")
    iterations = 0
    w_true, w_ratio = wu, cw
    if error == "percent":
        core, ws, iterations = _percent_error_fit(xu, ys, ws, spec, core, certify)
        w_ratio = cw / sy / sy  # weights 1 / fitted^2 on the scaled response
        w_true = ws * w_ratio
        if not (np.isfinite(w_ratio) and w_ratio > 0 and np.all(np.isfinite(w_true))
                and np.all(w_true > 0)):
            raise ModelError("error=percent weights each row by 1/fitted^2, which leaves the "
                             "double range for y this large or small; rescale y (e.g. work "
                             "in thousands, millions or other units)", ModelErrorKind.SCALE)
        notes.append(f"multiplicative (percent) error fit: weights 1/fitted^2, converged in "
                     f"{iterations} reweighting steps; rmse is the standard percent error as "
                     "a fraction of the fitted value, so a new observation's prediction "
                     f"interval uses rmse x fitted ({STATS_DOC})")
    smearing = 1.0
    if log:
        smearing = float(np.mean(np.exp(core.residuals * sy)))
        notes.append(f"fitted on ln(y): coefficients and fit statistics are on the log scale "
                     "(rmse_percent is in units of y); the mean and its interval are "
                     f"back-transformed with Duan's smearing factor {smearing:.6g}, the "
                     f"prediction interval without it ({STATS_DOC})")
    if se != "ols":
        notes.append(f"standard errors, tests and intervals use the {se.upper()} "
                     "heteroscedasticity-consistent covariance with t(df) and F(q, df) "
                     f"reference distributions ({STATS_DOC})")
    remedy = Remedy(se=se, log=log, error=error, smearing=smearing, iterations=iterations,
                    notes=tuple(notes))
    res = inference.build(spec, core, xu, ys, ws, level, used, n_dropped, response, remedy)
    res = inference.rescale(res, sy, w_true, w_ratio)
    if not all(math.isfinite(v) for c in res.coefficients
               for v in (c.estimate, c.std_error, c.ci_lower, c.ci_upper)):
        raise ModelError(too_large(yu, xu), ModelErrorKind.SCALE)
    return res


#: Reweighting stops when no raw coefficient moves by more than this, relative to its size.
PERCENT_TOL = 1e-12
PERCENT_MAX_STEPS = 100


def _percent_error_fit(x, y, w, spec, core, certify=True):
    """Minimum-unbiased-percentage-error fit: reweight by 1/fitted^2 until converged. The
    steps solve in double precision until they settle to within that solve's own error
    estimate; then one certified (refined or exact) solve at those weights gives the answer,
    so a badly conditioned model costs one certified solve, not one per step."""
    base = np.ones(len(y)) if w is None else w
    sure = False
    for step in range(1, PERCENT_MAX_STEPS + 1):
        fitted = y - core.residuals
        if np.any(fitted <= 0):
            raise ModelError("error=percent needs fitted values above 0 in every row; this "
                             "model predicts 0 or less for some rows", ModelErrorKind.DATA)
        wn = base / fitted**2
        new = solve(x, y, wn, spec, certify and sure)
        change = np.max(np.abs(new.beta - core.beta) / np.maximum(np.abs(new.beta), 1e-300))
        core = new
        # settled as far as this solve can tell: the weights are the fixed point to within
        # double precision; one certified solve at them then gives the answer
        if sure or change <= max(PERCENT_TOL, 1e3 * new.error_bound):
            if sure or not certify or new.error_bound <= ACCEPT_ERROR:
                return core, wn, step
            sure = True
    raise ModelError(f"error=percent did not converge in {PERCENT_MAX_STEPS} reweighting steps; "
                     "try a simpler model", ModelErrorKind.DATA)
