"""``GroupsResult``: one fit per group, its inference, its table and its dict."""

from __future__ import annotations

import datetime as dt
import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..dist import t_pvalue, t_quantile
from ..errors import ModelError, ModelErrorKind
from ..result import plain
from ..terms import ModelSpec
from .keys import group_sort_key, normal_form


def table_columns(spec: ModelSpec) -> tuple[str, ...]:
    cols = ["group", "n_used"]
    for t in spec.terms:
        cols += [t, f"{t}_se"]
    cols += ["r2", "adj_r2", "rmse", "flag"]
    dup = sorted({c for c in cols if cols.count(c) > 1})
    if dup:
        raise ModelError(f"a predictor name makes the column name {dup[0]!r} appear twice in "
                         "the groups table; rename that predictor", ModelErrorKind.SPEC)
    return tuple(cols)


#: The stage that answered each group (``GroupsResult.methods``).
METHODS = ("", "batched", "refined", "single")


def _key_json(key):
    if isinstance(key, (dt.date, dt.time)):
        return key.isoformat()
    if isinstance(key, float) and not math.isfinite(key):
        return repr(key)
    return key


@dataclass(frozen=True, eq=False)
class GroupsResult:
    """One fit per group, in group order. Arrays have one row per group; coefficient arrays
    one column per term (``terms``); NaN where a group was not fitted (``flags`` says why).
    ``methods``: the stage that answered: "batched" (double precision), "refined" (double-
    double), "single" (the single-group fit) or "" (not fitted)."""

    spec: ModelSpec
    groups: tuple
    n_used: np.ndarray
    n_dropped: np.ndarray
    estimates: np.ndarray
    std_errors: np.ndarray
    r2: np.ndarray
    adj_r2: np.ndarray
    rmse: np.ndarray
    flags: tuple[str, ...]
    methods: tuple[str, ...]
    level: float

    def __len__(self) -> int:
        return len(self.groups)

    @property
    def terms(self) -> tuple[str, ...]:
        return self.spec.terms

    @functools.cached_property
    def _inference(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        est, se = self.estimates, self.std_errors
        df = self.n_used - est.shape[1]
        with np.errstate(divide="ignore", invalid="ignore"):
            t = est / se
        t = np.where((se == 0) & (est == 0), np.nan, t)
        pv, lo, hi = (np.full_like(est, np.nan) for _ in range(3))
        fitted = np.array([m != "" for m in self.methods], dtype=bool)
        for d in np.unique(df[fitted]).tolist():
            sel = fitted & (df == d)
            pv[sel] = t_pvalue(t[sel], d)
            qt = t_quantile(d, self.level)
            lo[sel] = est[sel] - qt * se[sel]
            hi[sel] = est[sel] + qt * se[sel]
        return np.where(fitted[:, None], t, np.nan), pv, lo, hi

    @property
    def t_ratios(self) -> np.ndarray:
        return self._inference[0]

    @property
    def p_values(self) -> np.ndarray:
        """Two-sided p-values of the t ratios (df = n_used - n_params)."""
        return self._inference[1]

    @property
    def ci_lower(self) -> np.ndarray:
        """Lower end of the ``level`` confidence interval of each estimate."""
        return self._inference[2]

    @property
    def ci_upper(self) -> np.ndarray:
        return self._inference[3]

    @property
    def columns(self) -> tuple[str, ...]:
        """Header of ``table()``: group, n_used, each term and ``<term>_se``, r2, adj_r2,
        rmse, flag."""
        return table_columns(self.spec)

    def index(self, key) -> int:
        """Row of the group holding raw key ``key``; raises KeyError if there is none."""
        want = normal_form(key)
        for i, g in enumerate(self.groups):
            if normal_form(g) == want:
                return i
        raise KeyError(key)

    def table(self, header: bool = True) -> list[list]:
        """Rows of ``columns`` (header first unless ``header=False``): the group key (None
        for the blank group), n_used, estimate and standard error per term, r2, adj_r2, rmse
        (float, NaN where not fitted) and the flag text ("" when none)."""
        rows: list[list] = [list(self.columns)] if header else []
        est, se = self.estimates.tolist(), self.std_errors.tolist()
        r2, adj, rmse = self.r2.tolist(), self.adj_r2.tolist(), self.rmse.tolist()
        n_used = self.n_used.tolist()
        for i, key in enumerate(self.groups):
            row = [key, n_used[i]]
            for e, s in zip(est[i], se[i]):
                row += [e, s]
            rows.append(row + [r2[i], adj[i], rmse[i], self.flags[i]])
        return rows

    def to_dict(self) -> dict:
        """JSON-ready dict: ``model``, ``columns`` and one entry per group (non-finite
        numbers become None; date keys ISO text)."""
        out = []
        for i, key in enumerate(self.groups):
            coefs = [{"term": t, "estimate": plain(self.estimates[i, j]),
                      "std_error": plain(self.std_errors[i, j]),
                      "p_value": plain(self.p_values[i, j]),
                      "ci_lower": plain(self.ci_lower[i, j]),
                      "ci_upper": plain(self.ci_upper[i, j])}
                     for j, t in enumerate(self.terms)]
            out.append({"group": _key_json(key), "n_used": int(self.n_used[i]),
                        "n_dropped": int(self.n_dropped[i]), "coefficients": coefs,
                        "r2": plain(self.r2[i]), "adj_r2": plain(self.adj_r2[i]),
                        "rmse": plain(self.rmse[i]), "flag": self.flags[i],
                        "method": self.methods[i]})
        return {"model": {"spec": self.spec.spec, "terms": list(self.terms),
                          "intercept": self.spec.intercept, "level": self.level},
                "columns": list(self.columns), "groups": out}

    @classmethod
    def combine(cls, parts: Sequence[GroupsResult]) -> GroupsResult:
        """One result from results on disjoint sets of groups (e.g. one per partition),
        in group order. Raises ModelError if a group appears in two parts."""
        if not parts:
            raise ModelError("no results to combine", ModelErrorKind.DATA)
        spec = parts[0].spec
        keys = [g for part in parts for g in part.groups]
        order = sorted(range(len(keys)), key=lambda i: group_sort_key(keys[i]))
        normal = [normal_form(keys[i]) for i in order]
        for a, b in zip(normal, normal[1:]):
            if a == b:
                raise ModelError(f"group {a[1]!r} appears in two parts; each group must be "
                                 "fitted whole", ModelErrorKind.DATA)
        idx = np.array(order, dtype=np.intp)

        def cat(name):
            return np.concatenate([getattr(part, name) for part in parts])[idx]

        def cat_t(name):
            flat = [v for part in parts for v in getattr(part, name)]
            return tuple(flat[i] for i in order)

        return cls(spec=spec, groups=tuple(kv[1] for kv in normal), n_used=cat("n_used"),
                   n_dropped=cat("n_dropped"), estimates=cat("estimates"),
                   std_errors=cat("std_errors"), r2=cat("r2"),
                   adj_r2=cat("adj_r2"), rmse=cat("rmse"), flags=cat_t("flags"),
                   methods=cat_t("methods"), level=parts[0].level)
