"""The result of a cost-estimating relationship (CER) fit, and its predictive spread."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .dist import t_ppf
from .errors import ModelError, ModelErrorKind, check_level
from .result import plain
from .unitstats import UnitStats, relevant_range

#: How each method's standard errors, p-values and intervals are obtained.
INTERVAL_SOURCES = {
    "log": "log-space least squares (t tests on ln a and the exponents/slopes; a's interval "
           "is exp of ln a's)",
    "mupe": "the final weighted least-squares step (weights 1/fitted^2 of the previous step)",
    "zmpe": "the Jacobian of the fitted values at the solution, weighted by 1/fitted",
    "ols": "the Jacobian of the fitted values at the solution (Gauss-Newton covariance)",
}
#: The error model behind each method's prediction intervals and percentiles.
ERROR_MODELS = {"log": "lognormal", "mupe": "multiplicative", "zmpe": "multiplicative",
                "ols": "additive"}


def design(form: str, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Z = [1, g(x)] and the offset of ``form`` at rows ``x`` (n x k): ln f = Z theta + offset
    with g = ln x (power) or x (exponential); factor has Z = [1] and offset ln x."""
    n = len(x)
    if form == "factor":
        return np.ones((n, 1)), np.log(x[:, 0])
    g = np.log(x) if form == "power" else x
    return np.column_stack([np.ones(n), g]), np.zeros(n)


@dataclass(frozen=True)
class CerCoefficient:
    """One coefficient: ``a`` (role 'scale') or a driver's exponent/slope. The test is of
    the value 0, except for ``a`` of a log fit, where it is of ln a = 0."""

    name: str
    role: str  # "scale", "exponent" or "slope"
    driver: str
    estimate: float
    std_error: float
    t_ratio: float
    p_value: float
    ci_lower: float
    ci_upper: float

    def to_dict(self) -> dict:
        return {k: plain(getattr(self, k)) for k in (
            "name", "role", "driver", "estimate", "std_error", "t_ratio", "p_value",
            "ci_lower", "ci_upper")}


@dataclass(frozen=True)
class Spread:
    """Distribution of one new observation at each new point.

    ``distribution`` 'log-t': ln y = loc + scale * T(df) (a lognormal with mu=loc,
    sigma=scale when df is large); 't': y = loc + scale * T(df) in units (normal with
    mean=loc, sd=scale when df is large)."""

    distribution: str
    loc: np.ndarray
    scale: np.ndarray
    df: int

    def quantile(self, p: float) -> np.ndarray:
        q = self.loc + t_ppf(p, self.df) * self.scale
        return np.exp(q) if self.distribution == "log-t" else q

    def params(self, i: int) -> dict:
        """The parameters of point ``i`` for a risk tool."""
        if self.distribution == "log-t":
            return {"distribution": "lognormal", "mu": float(self.loc[i]),
                    "sigma": float(self.scale[i]), "df": self.df, "quantiles": "t"}
        return {"distribution": "normal", "mean": float(self.loc[i]),
                "sd": float(self.scale[i]), "df": self.df, "quantiles": "t"}


@dataclass(frozen=True)
class CerPrediction:
    """Estimates at new points: the mean in units, the interval of one new observation
    following the fit's error model, and whether the point lies outside the relevant range."""

    fitted: np.ndarray
    pi_lower: np.ndarray
    pi_upper: np.ndarray
    extrapolated: np.ndarray
    level: float
    error_model: str

    def to_dict(self) -> dict:
        out = {k: [plain(v) for v in getattr(self, k).tolist()]
               for k in ("fitted", "pi_lower", "pi_upper")}
        out["extrapolated"] = [bool(v) for v in self.extrapolated]
        return out | {"level": self.level, "error_model": self.error_model}


@dataclass(frozen=True, eq=False)
class CerResult:
    """A fitted CER y = a * h(x). Every form is written ln(f) = Z theta + offset with
    theta = (ln a, exponents or slopes), Z = [1, g(x)]: g = ln x (power), x (exponential);
    factor has no g and offset ln x. ``cov`` is the covariance of theta; ``sigma`` is the
    residual scale of the error model (log-space SD, SPE, or SEE)."""

    form: str
    method: str
    response: str
    drivers: tuple[str, ...]
    coefficients: tuple[CerCoefficient, ...]
    theta: np.ndarray
    cov: np.ndarray
    sigma: float
    df: int
    level: float
    n_dropped: int
    used: np.ndarray
    x: np.ndarray
    y: np.ndarray
    fitted: np.ndarray  # mean estimate in units at the rows used
    unit: UnitStats
    correction: float  # factor applied to exp(Z theta) (log fits; 1 otherwise)
    details: dict  # method specifics: back-transform, iterations and stop rule, constraint
    max_vif: float
    notes: tuple[str, ...] = ()

    @property
    def error_model(self) -> str:
        return ERROR_MODELS[self.method]

    @property
    def estimates(self) -> np.ndarray:
        return np.array([c.estimate for c in self.coefficients])

    def _new_points(self, new_x) -> np.ndarray:
        try:
            x0 = np.asarray(new_x, dtype=float)
        except (TypeError, ValueError):
            raise ModelError("new x must hold numbers only", ModelErrorKind.DATA) from None
        k = len(self.drivers)
        if x0.ndim <= 1:
            x0 = x0.reshape(-1, 1) if k == 1 else x0.reshape(1, -1)
        if x0.ndim != 2 or x0.shape[1] != k:
            raise ModelError(f"new x has {x0.shape[-1]} columns; the CER has {k} drivers",
                             ModelErrorKind.DATA)
        bad = ~np.isfinite(x0).all(axis=1)
        if self.form in ("power", "factor"):
            bad |= (x0 <= 0).any(axis=1)
        if bad.any():
            row = int(np.argmax(bad)) + 1
            raise ModelError(f"new x row {row} must hold finite numbers"
                             f"{' above 0' if self.form != 'exponential' else ''} "
                             f"for a {self.form} CER", ModelErrorKind.DATA)
        return x0

    def spread(self, new_x) -> Spread:
        """Distribution of a new observation, following the error model: lognormal (log
        fits: t in log space), multiplicative (MUPE/ZMPE: normal with sd fitted * SPE *
        sqrt(1 + h), h = z' (cov / SPE^2) z), additive (OLS: t in units, linearised)."""
        x0 = self._new_points(new_x)
        z, off = design(self.form, x0)
        eta = z @ self.theta + off
        var_eta = np.einsum("ij,jk,ik->i", z, self.cov, z)  # variance of ln(fitted)
        s2 = self.sigma**2
        if self.method == "log":
            return Spread("log-t", eta, np.sqrt(s2 + var_eta), self.df)
        f = np.exp(eta)
        if self.method == "ols":
            return Spread("t", f, np.sqrt(s2 + f * f * var_eta), self.df)
        return Spread("t", f, f * np.sqrt(s2 + var_eta), self.df)

    def predict(self, new_x, level: float | None = None) -> CerPrediction:
        """Mean estimate and the ``level`` interval of one new observation at ``new_x``."""
        level = self.level if level is None else check_level(level)
        x0 = self._new_points(new_x)
        z, off = design(self.form, x0)
        fitted = np.exp(z @ self.theta + off) * self.correction
        sp = self.spread(x0)
        lo, hi = sp.quantile(0.5 - level / 2), sp.quantile(0.5 + level / 2)
        lo_r, hi_r = self.x.min(axis=0), self.x.max(axis=0)
        out = np.any((x0 < lo_r) | (x0 > hi_r), axis=1)
        return CerPrediction(fitted, lo, hi, out, level, self.error_model)

    def equation(self) -> str:
        """The fitted equation in units (a includes any back-transform correction)."""
        a = self.coefficients[0].estimate * self.correction
        rest = self.coefficients[1:]
        if self.form == "factor":
            return f"{self.response} = {a!r} * {self.drivers[0]}"
        if self.form == "power":
            body = " * ".join(f"{c.driver}^{c.estimate!r}" for c in rest)
            return f"{self.response} = {a!r} * {body}"
        body = " + ".join(f"{c.estimate!r}*{c.driver}" for c in rest)
        return f"{self.response} = {a!r} * exp({body})"

    def to_dict(self) -> dict:
        """JSON-ready dict; coefficients ``a`` first, then exponents/slopes."""
        return {
            "form": self.form, "method": self.method, "response": self.response,
            "drivers": list(self.drivers), "equation": self.equation(),
            "fit_space": "log" if self.method == "log" else "unit",
            "error_model": self.error_model, "level": self.level,
            "n_used": int(self.unit.n), "n_dropped": int(self.n_dropped),
            "coefficients": [c.to_dict() for c in self.coefficients],
            "intervals_from": INTERVAL_SOURCES[self.method],
            "unit_stats": self.unit.to_dict(),
            "relevant_range": relevant_range(self.x, self.drivers),
            "max_vif": plain(self.max_vif),
            "details": self.details,
            "notes": list(self.notes),
        }
