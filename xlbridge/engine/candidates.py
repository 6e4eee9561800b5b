"""Side-by-side comparison of candidate CERs: every form x method x driver subset, ranked.

Ranking rule: candidates whose every exponent/slope is significant (p < ``alpha``) and whose
largest VIF among the drivers is below ``vif_limit`` come first, ordered by their unit-space
spread: SPE for the multiplicative-error methods (log, mupe, zmpe), CV for ols (both are
fractions of the estimate). The others follow in the same order, then fits that failed.
Verdicts: 'best' (first of the passing), 'ok', 'insignificant', 'collinear', 'failed'.
The factor form has no exponent to test (worst p blank). The linear form (y = a + b1 x1 ...)
is compared with the ols and mupe methods only.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from itertools import combinations

import numpy as np

from .errors import ModelError, ModelErrorKind
from .result import plain

DATA = ModelErrorKind.DATA
MAX_DRIVERS = 3
MAX_CANDIDATES = 200
CANDIDATE_FORMS = ("power", "factor", "exponential", "linear")
_LINEAR_METHODS = ("ols", "mupe")
RULE = ("ranked by unit-space SPE (log, mupe, zmpe) or CV (ols) among candidates whose "
        "exponents/slopes are all significant and whose max VIF is below the limit; then the "
        "others, then failed fits")


@dataclass(frozen=True)
class CandidateRow:
    """One candidate CER and its unit-space statistics (nan where not applicable)."""

    rank: int
    form: str
    method: str
    drivers: tuple[str, ...]
    n: int
    see: float
    cv: float
    spe: float
    spread: float  # the ranking measure: spe, or cv for ols
    r2_unit: float
    bias_percent: float
    worst_p: float
    max_vif: float
    verdict: str
    note: str = ""

    def to_dict(self) -> dict:
        return {f.name: list(getattr(self, f.name)) if f.name == "drivers"
                else plain(getattr(self, f.name)) for f in fields(self)}


@dataclass(frozen=True)
class CandidateTable:
    """Ranked candidates with the rule and limits used."""

    rows: tuple[CandidateRow, ...]
    alpha: float
    vif_limit: float
    rule: str = RULE

    @property
    def best(self) -> CandidateRow | None:
        return self.rows[0] if self.rows and self.rows[0].verdict == "best" else None

    def to_dict(self) -> dict:
        return {"rule": self.rule, "alpha": self.alpha, "vif_limit": self.vif_limit,
                "rows": [r.to_dict() for r in self.rows]}


def _plan(m: int, forms, methods, max_drivers: int) -> list[tuple[str, str, tuple[int, ...]]]:
    plan = []
    for k in range(1, max_drivers + 1):
        for subset in combinations(range(m), k):
            for form in forms:
                if form == "factor" and k > 1:
                    continue
                for method in methods:
                    if form == "linear" and method not in _LINEAR_METHODS:
                        continue
                    plan.append((form, method, subset))
    return plan


def _measure(form, method, y, x, names, alpha):
    """(unit stats dict, worst p, max vif) of one candidate."""
    from .api import fit

    res = fit(y, x, form, method=method, names=names, level=1 - alpha)
    d = res.to_dict()
    u = d["unit_stats"]
    if form == "linear":
        ps = [c.p_value for c in res.coefficients if c.term != "intercept"]
        vif = res.stats.max_vif if len(ps) > 1 else math.nan
    else:
        ps = [c.p_value for c in res.coefficients if c.role != "scale"]
        vif = res.max_vif
    worst = max(ps) if ps else math.nan
    return u, worst, vif


def compare_candidates(
    y,
    drivers,
    names=None,
    *,
    forms=("power",),
    methods=("log", "mupe"),
    max_drivers: int = 1,
    alpha: float = 0.05,
    vif_limit: float = 10.0,
    limit: int = MAX_CANDIDATES,
    progress: Callable[[int, int], None] | None = None,
) -> CandidateTable:
    """Fit every ``forms`` x ``methods`` x subset of at most ``max_drivers`` (<= 3) columns
    of ``drivers`` (n x m; pandas columns lend names) and rank them (module docstring).
    At most ``limit`` (<= 200) candidates; ``progress(done, total)`` is called after each."""
    from .cer import METHODS

    forms = tuple(str(f).strip().lower() for f in np.atleast_1d(forms))
    methods = tuple(str(m).strip().lower() for m in np.atleast_1d(methods))
    for f in forms:
        if f not in CANDIDATE_FORMS:
            raise ModelError(f"forms must be among {', '.join(CANDIDATE_FORMS)}; got {f!r}")
    for m in methods:
        if m not in METHODS:
            raise ModelError(f"methods must be among {', '.join(METHODS)}; got {m!r}")
    if not 0 < alpha < 1:
        raise ModelError(f"the significance level must be between 0 and 1; got {alpha!r}")
    if not vif_limit > 1:
        raise ModelError(f"the VIF limit must be above 1 (10 is common practice); got "
                         f"{vif_limit!r}")
    if not 1 <= int(limit) <= MAX_CANDIDATES:
        raise ModelError(f"the candidate limit must be 1 to {MAX_CANDIDATES}; got {limit!r}")
    if names is None and getattr(drivers, "columns", None) is not None:
        names = [str(c) for c in drivers.columns]
    try:
        xv = np.asarray(drivers, dtype=float)
    except (TypeError, ValueError):
        raise ModelError("the candidate drivers must hold numbers only", DATA) from None
    xv = xv.reshape(-1, 1) if xv.ndim == 1 else xv
    n_y = len(np.ravel(np.asarray(y, dtype=object)))
    if xv.ndim != 2 or xv.shape[0] != n_y:
        raise ModelError(f"y has {n_y} rows but the candidate drivers have {xv.shape[0]}", DATA)
    m = xv.shape[1]
    names = tuple(str(n) for n in names) if names is not None else tuple(
        f"x{j + 1}" for j in range(m))
    if len(names) != m:
        raise ModelError(f"{len(names)} names given for {m} candidate driver columns")
    if not 1 <= max_drivers <= MAX_DRIVERS:
        raise ModelError(f"drivers per model must be 1 to {MAX_DRIVERS}; got {max_drivers!r}")
    plan = _plan(m, forms, methods, min(int(max_drivers), m))
    if len(plan) > int(limit):
        raise ModelError(f"{len(plan)} candidates requested (forms x methods x driver "
                         f"subsets); the limit is {int(limit)}: use fewer drivers, forms or "
                         "methods, or fewer drivers per model")
    rows = []
    for i, (form, method, subset) in enumerate(plan, start=1):
        sub = tuple(names[j] for j in subset)
        try:
            u, worst, vif = _measure(form, method, y, xv[:, list(subset)], sub, alpha)
        except ModelError as err:
            rows.append(CandidateRow(0, form, method, sub, 0, *(math.nan,) * 8, "failed",
                                     str(err)))
        else:
            spe = u["spe"] if u["spe"] is not None else math.nan
            cv = u["cv"] if u["cv"] is not None else math.nan
            spread = cv if method == "ols" else spe
            if worst >= alpha:
                verdict = "insignificant"
            elif vif >= vif_limit:
                verdict = "collinear"
            else:
                verdict = "ok"
            rows.append(CandidateRow(0, form, method, sub, u["n"], _f(u["see"]), cv, spe,
                                     spread, _f(u["r2_unit"]), _f(u["bias_percent"]), worst,
                                     vif, verdict))
        if progress is not None:
            progress(i, len(plan))
    group = {"ok": 0, "insignificant": 1, "collinear": 1, "failed": 2}
    rows.sort(key=lambda r: (group[r.verdict], r.spread if math.isfinite(r.spread) else math.inf))
    out = []
    for rank, r in enumerate(rows, start=1):
        verdict = "best" if rank == 1 and r.verdict == "ok" else r.verdict
        out.append(replace(r, rank=rank, verdict=verdict))
    return CandidateTable(tuple(out), float(alpha), float(vif_limit))


def _f(v) -> float:
    return math.nan if v is None else float(v)
