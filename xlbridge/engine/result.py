"""Result objects of a fit: plain frozen dataclasses, serialisable to dicts."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from enum import Enum
from functools import cached_property

import numpy as np

from .dist import t_quantile
from .errors import ModelError, ModelErrorKind
from .solve import Basis
from .terms import ModelSpec
from .unitstats import UnitStats, fit_unit_stats, relevant_range

COEF_FIELDS = ("term", "estimate", "std_error", "t_ratio", "p_value", "ci_lower", "ci_upper",
               "vif", "vif_centered")
STAT_FIELDS = ("n_used", "n_params", "df_resid", "sse", "sst", "r2", "adj_r2", "rmse",
               "rmse_percent", "f_stat", "f_p_value", "aic", "bic", "press", "pred_r2",
               "cond_number", "cond_number_raw", "max_vif", "top_term_p_value")


def plain(v):
    """JSON-ready value: finite floats stay, NaN/inf become None, numpy scalars unwrap."""
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return v if math.isfinite(v) else None
    return v


class NoteKind(str, Enum):
    """Which sort of remark a note on a fit is, for code that reacts to some of them."""

    MODEL = "model"  # about the model spec (e.g. a term without its lower-order terms)
    REMEDY = "remedy"  # a remedy applied (log y, percent error, robust standard errors)
    ACCURACY = "accuracy"  # fewer digits are reliable than the results show
    ROWS = "rows"  # few rows per coefficient


class Note(str):
    """One note on a fit: its text (a plain ``str`` everywhere notes are shown) and its
    ``kind`` (a ``NoteKind``)."""

    kind: NoteKind

    def __new__(cls, text: str, kind: NoteKind) -> Note:
        note = super().__new__(cls, text)
        note.kind = kind
        return note

    def __reduce__(self):
        return (type(self), (str(self), self.kind))


@dataclass(frozen=True)
class Coefficient:
    """One term's raw-unit estimate with its inference (vif is nan for the intercept)."""

    term: str
    estimate: float
    std_error: float
    t_ratio: float
    p_value: float
    ci_lower: float
    ci_upper: float
    vif: float
    vif_centered: float

    def to_dict(self) -> dict:
        return {f: plain(getattr(self, f)) for f in COEF_FIELDS}


@dataclass(frozen=True)
class FitStats:
    """Fit statistics (definitions and scales in docs/statistics.md); aic/bic follow
    statsmodels' OLS/WLS (llf from the Gaussian likelihood, k = n_params); r2 uses the
    uncentered total sum of squares when there is no intercept; ``rmse_percent`` is the
    error's spread as a percent of y in y's units (100 rmse / mean y; 100 rmse for percent
    error; 100 sqrt(exp(rmse^2) - 1) for log fits); ``cond_number`` is that of the centered,
    unit-column basis the fit is solved in, ``cond_number_raw`` that of the raw design."""

    n_used: int
    n_params: int
    df_resid: int
    sse: float
    sst: float
    r2: float
    adj_r2: float
    rmse: float
    rmse_percent: float
    f_stat: float
    f_p_value: float
    aic: float
    bic: float
    press: float
    pred_r2: float
    cond_number: float
    cond_number_raw: float
    max_vif: float
    top_term_p_value: float

    def to_dict(self) -> dict:
        return {f.name: plain(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class CenteredForm:
    """The same fit written on (x_j - center_j); centers are 0 where centering would change
    the model (a predictor whose lower-order terms are missing)."""

    centers: tuple[float, ...]
    terms: tuple[str, ...]
    estimates: tuple[float, ...]
    std_errors: tuple[float, ...]

    def to_dict(self) -> dict:
        return {"centers": [plain(c) for c in self.centers], "terms": list(self.terms),
                "estimates": [plain(v) for v in self.estimates],
                "std_errors": [plain(v) for v in self.std_errors]}


@dataclass(frozen=True)
class Prediction:
    """Predictions at new points: mean with confidence interval, new-observation interval."""

    fitted: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    pi_lower: np.ndarray
    pi_upper: np.ndarray
    leverage: np.ndarray
    extrapolated: np.ndarray
    level: float

    def to_dict(self) -> dict:
        names = ("fitted", "ci_lower", "ci_upper", "pi_lower", "pi_upper", "leverage",
                 "extrapolated")
        return {k: [plain(v) for v in getattr(self, k).tolist()] for k in names} | {
            "level": self.level}


@dataclass(frozen=True)
class Remedy:
    """Remedies applied to the fit: ``se`` is 'ols' or 'hc0'..'hc3'; ``log`` fits ln(y)
    (``smearing`` is Duan's factor); ``error`` 'percent' is the multiplicative-error fit by
    iteratively reweighted least squares with weights 1 / fitted^2."""

    se: str = "ols"
    log: bool = False
    error: str = "additive"
    smearing: float = 1.0
    iterations: int = 0
    notes: tuple[str, ...] = ()

    def describe(self) -> str:
        parts = []
        if self.log:
            parts.append("log y")
        if self.error == "percent":
            parts.append("percent error")
        if self.se != "ols":
            parts.append(f"se {self.se}")
        return ", ".join(parts)


@dataclass(frozen=True, eq=False)
class FitResult:
    """Everything a fit produced. Arrays refer to the rows used, in input order."""

    spec: ModelSpec
    coefficients: tuple[Coefficient, ...]
    stats: FitStats
    centered: CenteredForm
    level: float
    n_dropped: int
    notes: tuple[str, ...]
    fitted: np.ndarray
    residuals: np.ndarray
    leverage: np.ndarray
    used: np.ndarray
    x_min: np.ndarray
    x_max: np.ndarray
    cov: np.ndarray  # raw-unit covariance of the estimates / y_scale^2
    method: str  # solve path: "qr", "cholesky", "refined" or "exact" (see solve.solve)
    response: str
    basis: Basis
    scaled_coef: np.ndarray
    scaled_inv: np.ndarray  # (T'WT)^-1, scaled basis: leverages
    scaled_cov: np.ndarray  # covariance of scaled_coef (OLS or robust) / y_scale^2
    weights: np.ndarray | None
    max_data_leverage_form: float
    remedy: Remedy
    x: np.ndarray  # predictor rows used
    y: np.ndarray  # response used (ln y when remedy.log)
    #: A power of two: ``cov`` and ``scaled_cov`` are the covariances divided by its square,
    #: so they stay inside the double range for responses of any size (1, the data's own
    #: units, unless a variance would fall outside 1e-280..1e280).
    y_scale: float = 1.0

    @property
    def terms(self) -> tuple[str, ...]:
        return self.spec.terms

    @cached_property
    def unit_stats(self) -> UnitStats:
        """SEE, CV, R² in units, bias and SPE of this fit (computed once, on first use)."""
        return fit_unit_stats(self)

    @property
    def model_text(self) -> str:
        """The model spec, with any remedy, e.g. 'degree 2 (log y, se hc3)'."""
        extra = self.remedy.describe()
        return f"{self.spec.spec} ({extra})" if extra else self.spec.spec

    @property
    def estimates(self) -> np.ndarray:
        return np.array([c.estimate for c in self.coefficients])

    @property
    def std_errors(self) -> np.ndarray:
        return np.array([c.std_error for c in self.coefficients])

    def predict(self, new_x, level: float | None = None, weights=None) -> Prediction:
        """Fitted mean, its confidence interval, the prediction interval of one new
        observation, leverage, and whether each point extrapolates (outside the observed
        range of any predictor or, with 2+ predictors, beyond the largest data leverage).

        The new observation's variance follows the fit's error model: s^2 / w0 for a new
        point of weight w0 (additive error; w0 = 1 unless ``weights`` are given), and
        s^2 * fitted0^2 / w0 for percent error, whose s is a fraction of the fitted value.
        The leverage is on the data's footing: w0 x0'(X'WX)^-1 x0, with weight w0 / fitted0^2
        for percent error, so a point of the data, given its weight, gets the data's leverage.

        Parameters
        ----------
        new_x : array_like, shape (m,) or (m, k)
            m values of one predictor, or m rows of the k predictors (one row may be
            given as a 1-D array of k values).
        level : float, optional
            Confidence level of the intervals (default: the fit's level).
        weights : float or array_like, shape (m,), optional
            Weight of each new observation, on the scale of the fit's weights (default 1,
            i.e. a new observation's variance is s^2, or s^2 * fitted0^2 for percent error).
            Only a weighted fit's prediction interval and leverage depend on it.

        Returns
        -------
        Prediction
            Arrays of m values: fitted, ci_lower/ci_upper (the mean), pi_lower/pi_upper (a
            new observation), leverage, extrapolated.

        Examples
        --------
        Invented cost figures for eight sizes; size 10 lies outside the data:

        >>> from xlbridge.engine import fit
        >>> res = fit([3.1, 4.9, 7.2, 9.8, 13.1, 16.9, 21.2, 25.8], [1, 2, 3, 4, 5, 6, 7, 8], 2)
        >>> p = res.predict([4.5, 10])
        >>> for row in zip(p.fitted, p.pi_lower, p.pi_upper, p.extrapolated):
        ...     print(" ".join(f"{v:.3f}" for v in row[:3]), bool(row[3]))
        11.450 11.249 11.651 False
        36.802 36.384 37.221 True
        """
        level = self.level if level is None else level
        x0 = new_points(self, new_x)
        t0 = self.basis.design(x0)
        eta = t0 @ self.scaled_coef
        form = design_form(self, x0)
        var_m = np.einsum("ij,jk,ik->i", t0, self.scaled_cov, t0)
        root = sd_factor(self, eta, new_weights(weights, len(eta)))
        s = self.stats.rmse
        q = t_quantile(self.stats.df_resid, level)
        se_m = np.sqrt(np.clip(var_m, 0, None)) * self.y_scale
        se_p = np.hypot(s * root, se_m)  # no square leaves the double range
        with np.errstate(divide="ignore", over="ignore"):
            lev = form / root / root
        lo_m, hi_m, lo_p, hi_p = eta - q * se_m, eta + q * se_m, eta - q * se_p, eta + q * se_p
        fitted = eta
        if self.remedy.log:
            # Duan's smearing: E[y | x] = exp(eta) * mean(exp(residuals)); the mean's interval
            # is the log-scale interval mapped the same way; a new observation's interval maps
            # its log-scale quantiles (no smearing: quantiles survive the monotone transform).
            sm = self.remedy.smearing
            fitted, lo_m, hi_m = np.exp(eta) * sm, np.exp(lo_m) * sm, np.exp(hi_m) * sm
            lo_p, hi_p = np.exp(lo_p), np.exp(hi_p)
        return Prediction(fitted, lo_m, hi_m, lo_p, hi_p, lev, extrapolates(self, x0, form),
                          level)

    def equation(self, response: str | None = None) -> str:
        """The fitted equation in raw units with round-trip (full precision) coefficients."""
        parts = []
        for c in self.coefficients:
            v = c.estimate
            mag = repr(abs(float(v)))
            term = "" if c.term == "intercept" else c.term
            body = mag if not term else f"{mag}*{term}"
            sign = "-" if math.copysign(1.0, v) < 0 else "+"
            parts.append((sign, body))
        name = response or self.response
        if self.remedy.log:
            name = f"ln({name})"
        first_sign, first = parts[0]
        text = f"{name} = {'-' if first_sign == '-' else ''}{first}"
        for sign, body in parts[1:]:
            text += f" {sign} {body}"
        return text

    def to_dict(self) -> dict:
        """JSON-ready dict: ``model``, ``coefficients``, ``stats`` (with the ``fit_space`` it
        was computed in), ``unit_stats`` (in the data's units), ``relevant_range`` and the
        fit's ``notes``."""
        out = {
            "model": {
                "spec": self.model_text,
                "terms": list(self.terms),
                "intercept": self.spec.intercept,
                "n_used": int(self.stats.n_used),
                "n_dropped": int(self.n_dropped),
            },
            "coefficients": [c.to_dict() for c in self.coefficients],
            "stats": self.stats.to_dict(),
        }
        out["stats"]["fit_space"] = "log" if self.remedy.log else "unit"
        out["unit_stats"] = self.unit_stats.to_dict()
        out["relevant_range"] = relevant_range(np.vstack([self.x_min, self.x_max]),
                                               self.spec.predictors)
        out["notes"] = [str(n) for n in self.notes]
        return out


def new_points(res: FitResult, new_x) -> np.ndarray:
    """``new_x`` as an (m, k) float array for the k predictors of ``res``: a 1-D array is m
    points of one predictor, or one point of k predictors."""
    x0 = np.asarray(new_x, dtype=float)
    k = res.spec.k
    if x0.ndim <= 1:
        x0 = x0.reshape(-1, 1) if k == 1 else x0.reshape(1, -1)
    if x0.ndim != 2 or x0.shape[1] != k:
        raise ModelError(f"new x has {x0.shape[-1]} columns; the model has {k} predictors",
                         ModelErrorKind.DATA)
    return x0


def design_form(res: FitResult, x0: np.ndarray) -> np.ndarray:
    """x0'(X'WX)^-1 x0 for each row of ``x0`` (computed in the scaled basis): the leverage
    of a new point of weight 1, and the distance measure that decides extrapolation."""
    t0 = res.basis.design(x0)
    return np.einsum("ij,jk,ik->i", t0, res.scaled_inv, t0)


def variance_factor(res: FitResult, eta: np.ndarray, weights=None) -> np.ndarray:
    """Variance of a new observation in units of s^2 under the fit's error model: 1 / w0,
    times fitted0^2 for percent error (``eta`` is the fitted value on the fit's scale);
    ``weights`` w0 default to 1 and must be positive."""
    return sd_factor(res, eta, new_weights(weights, len(eta))) ** 2


def new_weights(weights, m: int) -> np.ndarray:
    """Weights w0 of m new points (default 1); ModelError unless all are positive."""
    if weights is None:
        return np.ones(m)
    try:
        w0 = np.broadcast_to(np.asarray(weights, dtype=float).ravel(), (m,)).copy()
    except (TypeError, ValueError):
        raise ModelError(f"weights of the new points must be one positive number or one "
                         f"per point ({m})", ModelErrorKind.DATA) from None
    if not np.all(np.isfinite(w0) & (w0 > 0)):
        raise ModelError("weights of the new points must be positive numbers",
                         ModelErrorKind.DATA)
    return w0


def sd_factor(res: FitResult, eta: np.ndarray, w0: np.ndarray) -> np.ndarray:
    """The square root of ``variance_factor`` for new weights ``w0``, without squaring
    fitted values (which can leave the double range where their square root does not)."""
    root = 1.0 / np.sqrt(w0)
    return root * np.abs(eta) if res.remedy.error == "percent" else root


def extrapolates(res: FitResult, x0: np.ndarray, form: np.ndarray) -> np.ndarray:
    """Outside the observed range of any predictor or, with 2+ predictors, leverage above
    the largest leverage among the rows fitted."""
    outside = np.any((x0 < res.x_min) | (x0 > res.x_max), axis=1)
    if res.spec.k >= 2:
        outside |= form > res.max_data_leverage_form * (1 + 1e-12)
    return outside
