"""Cost-estimating relationships: power, factor and exponential forms, fitted four ways.

Forms (a > 0):  power  y = a * x1^b1 * x2^b2 ...;  factor  y = a * x;
exponential  y = a * exp(b1*x1 + b2*x2 ...).  Each is ln f = Z theta + offset with
theta = (ln a, b...), which all four methods share:

- ``log``: least squares of ln y on Z; back to units with a bias correction, both computed:
  Duan's smearing factor mean(exp(e)) and the normal-theory factor exp(s^2/2); ``correction``
  chooses the one used (smearing by default) and the result says which.
- ``mupe``: minimum unbiased percentage error, iteratively reweighted least squares in units
  with weights 1/f^2 from the previous step (one weighted Gauss-Newton step per reweighting),
  started at the log fit, until no element of theta moves by more than MUPE_TOL (relative to
  max(1, |theta_j|)); standard errors from that final weighted least-squares step.
- ``zmpe``: minimum sum of squared percentage errors ((y - f)/f)^2 subject to their sum being
  zero. Percentage errors are relative to the estimate f, as in the multiplicative error
  model y = f * (1 + e) (relative to y instead, the factor form would give the harmonic mean
  of y/x rather than MUPE's mean(y/x)). The constraint fixes a given the exponents
  (a = mean(y / h(x))), so it holds to rounding; the exponents then minimise the profiled
  objective (scipy least_squares), which solves the constrained problem exactly.
- ``ols``: least squares in units (scipy least_squares), started at the log fit.
"""

from __future__ import annotations

import math

import numpy as np

from .cerresult import CerCoefficient, CerResult, design
from .dist import t_pvalue, t_quantile
from .errors import ModelError, ModelErrorKind, check_level, overflow_is_scale
from .unitstats import unit_stats

FORMS = ("power", "factor", "exponential")
METHODS = ("log", "mupe", "zmpe", "ols")
CORRECTIONS = ("smearing", "normal", "none")
MUPE_TOL = 1e-12
MUPE_MAX_STEPS = 200
_LSQ = {"method": "lm", "xtol": 1e-15, "ftol": 1e-15, "gtol": 1e-15, "max_nfev": 5000}

DATA, SHORT = ModelErrorKind.DATA, ModelErrorKind.SHORTAGE


def _column_names(x, names, k: int) -> tuple[str, ...]:
    if names is None:
        cols = getattr(x, "columns", None)
        if cols is not None:
            names = [str(c) for c in cols]
        elif getattr(x, "name", None) is not None and k == 1:
            names = [str(x.name)]
        else:
            names = ["x"] if k == 1 else [f"x{j + 1}" for j in range(k)]
    names = tuple(str(n) for n in names)
    if len(names) != k:
        raise ModelError(f"{len(names)} driver names given for {k} driver columns")
    return names


def prepare(y, x, form: str, names=None):
    """Checked float arrays (rows with a blank/NaN dropped) and driver names. Raises
    ModelError naming the 1-based input row for values a multiplicative form cannot take."""
    try:
        yv = np.asarray(y, dtype=float)
        xv = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise ModelError("y and x must hold numbers only", DATA) from None
    yv = yv.ravel() if yv.ndim == 2 and 1 in yv.shape else yv
    if yv.ndim != 1:
        raise ModelError(f"y must be one column of numbers; got shape {yv.shape}", DATA)
    xv = xv.reshape(-1, 1) if xv.ndim == 1 else xv
    if xv.ndim != 2 or xv.shape[0] != len(yv):
        raise ModelError(f"y has {len(yv)} rows but x has {xv.shape[0]} rows", DATA)
    k = xv.shape[1]
    drivers = _column_names(x, names, k)
    if form == "factor" and k != 1:
        raise ModelError(f"the factor form y = a*x takes one driver; x has {k} columns")
    used = ~np.isnan(yv) & ~np.isnan(xv).any(axis=1)
    checks = [("y", np.isinf(yv), "a finite number"), ("y", yv <= 0, "above 0")]
    if form in ("power", "factor"):
        checks += [("x", np.isinf(xv).any(axis=1), "finite numbers"),
                   ("x", (xv <= 0).any(axis=1), "above 0")]
    else:
        checks += [("x", np.isinf(xv).any(axis=1), "finite numbers")]
    for what, bad, need in checks:
        bad = bad & used
        if bad.any():
            row = int(np.argmax(bad)) + 1
            val = yv[row - 1] if what == "y" else xv[row - 1]
            raise ModelError(f"a {form} CER needs {what} {need} in every row; row {row} has "
                             f"{what} = {np.array2string(np.asarray(val), separator=', ')}",
                             DATA, row=row)
    return yv[used], xv[used], used, drivers


def _lstsq(z: np.ndarray, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares coefficients of r on z and (z'z)^-1, through QR of unit-length columns
    (``fit_cer`` hands in drivers centered at their means)."""
    norms = np.linalg.norm(z, axis=0)
    if np.any(norms == 0) or np.any(~np.isfinite(norms)):
        raise ModelError("a driver is constant (or not finite) in the rows used: it cannot be "
                         "estimated; drop it", ModelErrorKind.ALIASED)
    q, rr = np.linalg.qr(z / norms)
    if np.min(np.abs(np.diag(rr))) < 1e-10:
        raise ModelError("the drivers are (nearly) collinear: one driver's column is a "
                         "combination of the others; drop a driver", ModelErrorKind.ALIASED)
    rinv = np.linalg.inv(rr)
    return (rinv @ (q.T @ r)) / norms, (rinv @ rinv.T) / np.outer(norms, norms)


def _vif(z: np.ndarray) -> float:
    """Largest VIF of the driver columns of Z (1/(1 - R^2) of each on the others, with a
    constant); nan with fewer than two drivers."""
    g = z[:, 1:]
    if g.shape[1] < 2:
        return math.nan
    c = np.corrcoef(g, rowvar=False)
    return float(np.max(np.diag(np.linalg.inv(c))))


def _log_fit(z, off, y, correction):
    theta, inv = _lstsq(z, np.log(y) - off)
    e = np.log(y) - off - z @ theta
    df = len(y) - z.shape[1]
    s2 = math.fsum(e * e) / df
    smear = math.fsum(np.exp(e)) / len(y)
    normal = math.exp(s2 / 2)
    factor = {"smearing": smear, "normal": normal, "none": 1.0}[correction]
    ly = np.log(y) - off
    sst = math.fsum((ly - ly.mean()) ** 2)
    details = {
        "back_transform": {"smearing": smear, "normal": normal, "used": correction,
                           "factor": factor},
        "log_stats": {"fit_space": "log", "see": math.sqrt(s2),
                      "r2": 1 - math.fsum(e * e) / sst if sst > 0 and z.shape[1] > 1
                      else None, "df": df},
    }
    return theta, s2 * inv, math.sqrt(s2), factor, details


def _weighted_nls(z, off, y, theta, weights):
    """argmin sum(weights * (y - exp(Z theta + off))^2), from ``theta``."""
    from scipy.optimize import least_squares

    sw = np.sqrt(weights)

    def res(t):
        return sw * (y - np.exp(z @ t + off))

    def jac(t):
        return -(sw * np.exp(z @ t + off))[:, None] * z

    return least_squares(res, theta, jac=jac, **_LSQ).x


def _mupe_fit(z, off, y, theta):
    """Each step is the weighted least-squares (Gauss-Newton) step with weights 1/f^2 of the
    previous step's fit: its working response regressed on d f / d theta = f * Z reduces to
    (y - f)/f on Z. The fixed point is MUPE's solution."""
    df = len(y) - z.shape[1]
    step, change = 0, math.inf
    while change > MUPE_TOL:
        if step == MUPE_MAX_STEPS:
            raise ModelError(f"MUPE did not converge in {MUPE_MAX_STEPS} reweighting steps; "
                             "try the log or zmpe method, or check the data for outliers",
                             DATA)
        step += 1
        prev = np.exp(z @ theta + off)  # weights 1/prev^2 from the previous step's fit
        delta, inv = _lstsq(z, (y - prev) / prev)
        theta = theta + delta
        change = float(np.max(np.abs(delta) / np.maximum(1.0, np.abs(theta))))
    f = np.exp(z @ theta + off)
    s2 = math.fsum(((y - f) / prev) ** 2) / df
    details = {"iterations": step,
               "stop_rule": f"largest change of (ln a, b) relative to max(1, |value|) <= "
                            f"{MUPE_TOL:g} (at most {MUPE_MAX_STEPS} steps)",
               "last_change": change, "final_weights": "1/fitted^2 of the previous step"}
    return theta, s2 * inv, math.sqrt(s2), details


def _zmpe_fit(z, off, y, theta):
    """Profile out a: for exponents b, the zero-sum constraint gives a = mean(y / h)."""
    from scipy.optimize import least_squares

    g = z[:, 1:]
    n, df = len(y), len(y) - z.shape[1]

    def ratios(b):
        return y * np.exp(-(g @ b) - off)

    if g.shape[1]:
        def res(b):
            r = ratios(b)
            return r / r.mean() - 1.0

        def jac(b):
            r = ratios(b)
            m = r.mean()
            dr = -r[:, None] * g
            return dr / m - np.outer(r, dr.mean(axis=0)) / m**2

        b = least_squares(res, theta[1:], jac=jac, **_LSQ).x
    else:
        b = np.zeros(0)
    r = ratios(b)
    a = math.fsum(r) / n
    theta = np.concatenate([[math.log(a)], b])
    f = np.exp(z @ theta + off)
    pct = (y - f) / f
    s2 = math.fsum(pct * pct) / df
    cov = s2 * np.linalg.inv(z.T @ z)
    return theta, cov, math.sqrt(s2), {"sum_percent_errors": math.fsum(pct),
                                       "constraint": "sum((y - fitted)/fitted) = 0"}


def _ols_fit(z, off, y, theta):
    theta = _weighted_nls(z, off, y, theta, np.ones(len(y)))
    f = np.exp(z @ theta + off)
    j = f[:, None] * z
    s2 = math.fsum((y - f) ** 2) / (len(y) - z.shape[1])
    return theta, s2 * np.linalg.inv(j.T @ j), math.sqrt(s2), {}


def _coefficients(form, method, drivers, theta, cov, df, level):
    q = t_quantile(df, level)
    se_t = np.sqrt(np.clip(np.diag(cov), 0, None))
    a = math.exp(theta[0])
    out = []
    if method == "log":  # tests and intervals on the log-space coefficients
        t = theta[0] / se_t[0]
        out.append(CerCoefficient("a", "scale", "", a, a * se_t[0], t,
                                  float(t_pvalue(t, df)), math.exp(theta[0] - q * se_t[0]),
                                  math.exp(theta[0] + q * se_t[0])))
    else:  # delta method: se(a) = a * se(ln a) exactly at the solution
        se_a = a * se_t[0]
        t = a / se_a
        out.append(CerCoefficient("a", "scale", "", a, se_a, t, float(t_pvalue(t, df)),
                                  a - q * se_a, a + q * se_a))
    role = "exponent" if form == "power" else "slope"
    for j, name in enumerate(drivers if form != "factor" else ()):
        b, se = theta[j + 1], se_t[j + 1]
        t = b / se
        out.append(CerCoefficient(f"b_{name}", role, name, float(b), float(se), float(t),
                                  float(t_pvalue(t, df)), b - q * se, b + q * se))
    return tuple(out)


@overflow_is_scale
def fit_cer(y, x, form: str = "power", method: str = "log", *, names=None,
            level: float = 0.95, correction: str = "smearing", response: str | None = None,
            ) -> CerResult:
    """Fit the CER ``form`` ('power', 'factor', 'exponential') by ``method`` ('log', 'mupe',
    'zmpe', 'ols'); see the module docstring. Rows with a blank (NaN) are dropped; y (and x
    for power/factor) must be above 0. Standard errors, p-values and intervals come from the
    log-space regression (log), the final weighted least squares (mupe), or the Jacobian at
    the solution (zmpe: weighted by 1/fitted; ols: unweighted).

    Examples
    --------
    Invented costs of eight items by weight, fitted by MUPE:

    >>> from xlbridge.engine import fit_cer
    >>> weight = [12.0, 18.0, 25.0, 31.0, 40.0, 52.0, 66.0, 80.0]
    >>> cost = [40.1, 52.3, 68.0, 77.9, 95.2, 117.0, 137.5, 160.3]
    >>> r = fit_cer(cost, weight, "power", "mupe", names=("weight",))
    >>> [c.name for c in r.coefficients], r.details["iterations"]
    (['a', 'b_weight'], 5)
    >>> print(", ".join(f"{v:.4f}" for v in r.estimates))
    6.3488, 0.7350
    >>> u = r.unit
    >>> print(f"SEE {u.see:.3f}  SPE {u.spe:.4f}  R2 in units {u.r2_unit:.4f}")
    SEE 1.028  SPE 0.0131  R2 in units 0.9995
    """
    form, method = str(form).strip().lower(), str(method).strip().lower()
    correction = str(correction).strip().lower()
    if form not in FORMS:
        raise ModelError(f"form must be one of {', '.join(FORMS)}; got {form!r}")
    if method not in METHODS:
        raise ModelError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if correction not in CORRECTIONS:
        raise ModelError(f"correction must be one of {', '.join(CORRECTIONS)}; "
                         f"got {correction!r}")
    level = check_level(level)
    if response is None:
        response = str(getattr(y, "name", None) or "y")
    yu, xu, used, drivers = prepare(y, x, form, names)
    z, off = design(form, xu)
    n, p = z.shape
    if n <= p:
        raise ModelError(f"the {form} CER has {p} coefficients, so it needs at least {p + 1} "
                         f"rows with numbers; found {n}", SHORT)
    # every solver works on drivers centered at their means (well scaled even for drivers
    # far from 0, e.g. years); the constant absorbs the shift exactly on the way back
    means = np.concatenate([[0.0], z[:, 1:].mean(axis=0)])
    back = np.eye(p)
    back[0, 1:] = -means[1:]
    zc = z - means
    theta, cov, s, factor, details = _log_fit(zc, off, yu, correction)
    with np.errstate(over="ignore", invalid="ignore"):
        if method != "log":
            factor, details = 1.0, {}
            solver = {"mupe": _mupe_fit, "zmpe": _zmpe_fit, "ols": _ols_fit}[method]
            theta, cov, s, details = solver(zc, off, yu, theta)
        fitted = np.exp(zc @ theta + off) * factor
        theta, cov = back @ theta, back @ cov @ back.T
    if not np.all(np.isfinite(fitted)) or not np.all(np.isfinite(cov)):
        raise ModelError("the fit overflowed: rescale the drivers (e.g. thousands of units)",
                         ModelErrorKind.SCALE)
    df = n - p
    coefs = _coefficients(form, method, drivers, theta, cov, df, float(level))
    ustats = unit_stats(yu, fitted, p, multiplicative=method != "ols")
    notes = []
    if method == "log":
        notes.append(f"fitted on ln y: coefficient tests are in log space; estimates in units "
                     f"are multiplied by the {correction} factor {factor:.6g}")
    return CerResult(form, method, response, drivers, coefs, theta, cov, s, df, float(level),
                     int(np.count_nonzero(~used)), used, xu, yu, fitted, ustats, factor,
                     details, _vif(z), tuple(notes))


#: ``method=`` on today's polynomial/surface models: the remedy each name stands for.
_MODEL_METHODS = {"ols": (False, "additive"), "log": (True, "additive"),
                  "mupe": (False, "percent")}


def is_form(model: object) -> bool:
    """True when ``model`` names a CER form rather than a polynomial/surface model."""
    return isinstance(model, str) and model.strip().lower() in FORMS


def model_remedy(method: str) -> tuple[bool, str]:
    """(log, error) of ``fit`` for ``method`` on a polynomial or surface model."""
    key = str(method).strip().lower()
    if key not in _MODEL_METHODS:
        allowed = ", ".join(_MODEL_METHODS)
        hint = " (zmpe applies to the power, factor and exponential forms)" if key == "zmpe" \
            else ""
        raise ModelError(f"method for a polynomial or surface model must be one of {allowed}; "
                         f"got {method!r}{hint}")
    return _MODEL_METHODS[key]

