"""Result objects of a fit: plain frozen dataclasses, serialisable to dicts."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from .solve import Basis
from .terms import ModelSpec

COEF_FIELDS = ("term", "estimate", "std_error", "t_ratio", "p_value", "ci_lower", "ci_upper",
               "vif", "vif_centered")
STAT_FIELDS = ("n_used", "n_params", "df_resid", "sse", "sst", "r2", "adj_r2", "rmse",
               "cv_percent", "f_stat", "f_p_value", "aic", "bic", "press", "pred_r2",
               "cond_number", "max_vif", "top_term_p_value")


def _plain(v):
    """JSON-ready value: finite floats stay, NaN/inf become None, numpy scalars unwrap."""
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return v if math.isfinite(v) else None
    return v


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
        return {f: _plain(getattr(self, f)) for f in COEF_FIELDS}


@dataclass(frozen=True)
class FitStats:
    """Fit statistics; aic/bic follow statsmodels' OLS/WLS (llf from the Gaussian likelihood,
    k = n_params); r2 uses the uncentered total sum of squares when there is no intercept."""

    n_used: int
    n_params: int
    df_resid: int
    sse: float
    sst: float
    r2: float
    adj_r2: float
    rmse: float
    cv_percent: float
    f_stat: float
    f_p_value: float
    aic: float
    bic: float
    press: float
    pred_r2: float
    cond_number: float
    max_vif: float
    top_term_p_value: float

    def to_dict(self) -> dict:
        return {f.name: _plain(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class CenteredForm:
    """The same fit written on (x_j - center_j); centers are 0 where centering would change
    the model (a predictor whose lower-order terms are missing)."""

    centers: tuple[float, ...]
    terms: tuple[str, ...]
    estimates: tuple[float, ...]
    std_errors: tuple[float, ...]

    def to_dict(self) -> dict:
        return {"centers": [_plain(c) for c in self.centers], "terms": list(self.terms),
                "estimates": [_plain(v) for v in self.estimates],
                "std_errors": [_plain(v) for v in self.std_errors]}


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
        return {k: [_plain(v) for v in getattr(self, k).tolist()] for k in names} | {
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
    cov: np.ndarray  # raw-unit covariance of the estimates
    method: str  # solve path: "qr", "cholesky", "refined" or "exact" (see solve.solve)
    response: str
    basis: Basis
    scaled_coef: np.ndarray
    scaled_inv: np.ndarray  # (T'WT)^-1, scaled basis: leverages
    scaled_cov: np.ndarray  # covariance of scaled_coef (OLS or robust)
    weights: np.ndarray | None
    max_data_leverage_form: float
    remedy: Remedy
    x: np.ndarray  # predictor rows used
    y: np.ndarray  # response used (ln y when remedy.log)

    @property
    def terms(self) -> tuple[str, ...]:
        return self.spec.terms

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

    def predict(self, new_x, level: float | None = None) -> Prediction:
        """Fitted mean, its confidence interval, the prediction interval of one new
        observation, leverage, and whether each point extrapolates (outside the observed
        range of any predictor or, with 2+ predictors, beyond the largest data leverage)."""
        from . import inference

        return inference.predict(self, new_x, self.level if level is None else level)

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
        """JSON-ready dict: ``model``, ``coefficients`` and ``stats``."""
        return {
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
