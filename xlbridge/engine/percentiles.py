"""Percentiles of a new observation, for handing an estimate to a risk analysis.

The distribution follows the fit's error model:
- additive (polynomial/surface fits, OLS CERs): y = mean + sd * T(df), in units;
- log (log=True fits, log CERs): ln y = mu + sigma * T(df), back-transformed (a lognormal
  with the t's heavier tails for small df);
- multiplicative (error='percent' fits, MUPE and ZMPE CERs): y = fitted + fitted * SPE *
  sqrt(1 + h) * T(df), normal in units with a spread proportional to the estimate.
Each scale includes the uncertainty of the fitted mean (the ``h`` or its variance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .cerresult import CerResult, Spread
from .dist import t_quantile
from .errors import ModelError

DEFAULT_LEVELS = (10, 20, 50, 80, 90)
_REFERENCE_LEVEL = 0.95  # any level works: the scale is read back from its interval


@dataclass(frozen=True)
class Percentiles:
    """``values[i][j]`` is percentile ``levels[j]`` (in percent) at new point i. ``params[i]``
    describes that point's distribution for a risk tool: {'distribution': 'lognormal', 'mu',
    'sigma'} (of ln y) or {'distribution': 'normal', 'mean', 'sd'} (in units), each with
    'df' and 'quantiles': 't', because the percentiles use Student's t with df degrees of
    freedom (slightly wider than the normal for small samples)."""

    levels: tuple[float, ...]
    values: np.ndarray
    params: tuple[dict, ...]
    error_model: str

    def to_dict(self) -> dict:
        return {"levels": list(self.levels), "error_model": self.error_model,
                "values": [[float(v) if math.isfinite(v) else None for v in row]
                           for row in self.values.tolist()],
                "params": list(self.params)}


def _fit_spread(res, new_x) -> tuple[Spread, str]:
    """A polynomial/surface FitResult's predictive distribution, read from its interval."""
    pred = res.predict(new_x, _REFERENCE_LEVEL)
    q = t_quantile(res.stats.df_resid, _REFERENCE_LEVEL)
    lo, hi = pred.pi_lower, pred.pi_upper
    if res.remedy.log:
        lo, hi = np.log(lo), np.log(hi)
        sp = Spread("log-t", (lo + hi) / 2, (hi - lo) / (2 * q), res.stats.df_resid)
        return sp, "lognormal"
    model = "multiplicative" if res.remedy.error == "percent" else "additive"
    return Spread("t", (lo + hi) / 2, (hi - lo) / (2 * q), res.stats.df_resid), model


def percentiles(result, new_x, levels=DEFAULT_LEVELS) -> Percentiles:
    """Percentiles (``levels`` in percent, each between 0 and 100) of one new observation
    at each row of ``new_x``, for a ``FitResult`` or a ``CerResult``.

    Examples
    --------
    P10, P50 and P90 of an item of weight 30 on a MUPE power CER (invented data):

    >>> from xlbridge.engine import fit_cer, percentiles
    >>> weight = [12.0, 18.0, 25.0, 31.0, 40.0, 52.0, 66.0, 80.0]
    >>> cost = [40.1, 52.3, 68.0, 77.9, 95.2, 117.0, 137.5, 160.3]
    >>> p = percentiles(fit_cer(cost, weight, "power", "mupe"), [30.0], levels=(10, 50, 90))
    >>> print(" ".join(f"{v:.2f}" for v in p.values[0]), p.params[0]["distribution"])
    75.79 77.34 78.88 normal
    """
    try:
        levs = tuple(float(v) for v in np.atleast_1d(np.asarray(levels, dtype=float)))
    except (TypeError, ValueError):
        raise ModelError("levels must be numbers between 0 and 100, e.g. 10, 50, 90") from None
    if not levs or not all(0 < v < 100 for v in levs):
        raise ModelError(f"levels must be numbers between 0 and 100 (percent), e.g. 10, 50, "
                         f"90; got {list(levs)}")
    if isinstance(result, CerResult):
        sp, model = result.spread(new_x), result.error_model
    else:
        sp, model = _fit_spread(result, new_x)
    values = np.column_stack([sp.quantile(v / 100) for v in levs])
    params = tuple(sp.params(i) for i in range(len(sp.loc)))
    return Percentiles(levs, values, params, model)
