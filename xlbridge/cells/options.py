"""The options grammar shared by the worksheet functions and the command line.

Text of ``key=value`` pairs separated by ``;``; keys and values ignore case and surrounding
spaces: ``level=0.9; intercept=no; header=no; names=no``.

Every option is one field of :class:`Options`; the field's metadata is the whole table
entry (how to parse the text, what to list as valid, whether the value changes the fit and
under which ``xlbridge.fit`` keyword). A later option is added by adding one field there.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields, replace
from typing import Any

from ..engine.api import ERROR_TYPES, SE_TYPES
from ..engine.candidates import CANDIDATE_FORMS, MAX_DRIVERS
from ..engine.cer import CORRECTIONS, METHODS
from ..engine.errors import did_you_mean
from ..engine.learning import THEORIES
from ..engine.percentiles import DEFAULT_LEVELS

__all__ = [
    "Options",
    "OptionsError",
    "option_keys",
    "options_help",
    "parse_options",
]


class OptionsError(ValueError):
    """The options text cannot be read; the message lists what is valid."""


# --- value parsers: text (already stripped, any case) -> value, or ValueError ---------------

_YES = {"yes": True, "y": True, "true": True, "no": False, "n": False, "false": False}


def _yes_no(text: str) -> bool:
    try:
        return _YES[text.lower()]
    except KeyError:
        raise ValueError("use yes or no") from None


def _level(text: str) -> float:
    t = text.replace(" ", "")
    percent = t.endswith("%")
    try:
        value = float(t[:-1] if percent else t)
    except ValueError:
        raise ValueError("use a number between 0 and 1, e.g. 0.95 (or 95%)") from None
    if percent:
        value /= 100.0
    if not (math.isfinite(value) and 0.0 < value < 1.0):  # TODO(merge): engine.check_level
        raise ValueError("use a number between 0 and 1, e.g. 0.95 (or 95%)")
    return value


def _choice(*allowed: str) -> Callable[[str], str]:
    def parse(text: str) -> str:
        t = text.lower()
        if t not in allowed:
            near = did_you_mean(t, allowed).lstrip("; ")
            raise ValueError(("use " + " or ".join(allowed)) + (f" ({near})" if near else ""))
        return t

    return parse


def _folds(text: str) -> int | None:
    t = text.lower()
    if t == "auto":
        return None
    if t in ("loo", "leave-one-out"):
        return 0  # leave-one-out: as many folds as rows
    try:
        v = float(t)
    except ValueError:
        raise ValueError("use auto, loo or a whole number 2 or more") from None
    if not v.is_integer() or v < 2:
        raise ValueError("use auto, loo or a whole number 2 or more")
    return int(v)


def _auto_or(parse: Callable[[str], Any]) -> Callable[[str], Any]:
    """``auto`` means None (the function's own default), anything else ``parse``."""
    def inner(text: str) -> Any:
        return None if text.lower() == "auto" else parse(text)

    return inner


def _list_of(*allowed: str) -> Callable[[str], tuple[str, ...]]:
    """A comma-separated list of ``allowed`` words, each once, in the order given."""
    def parse(text: str) -> tuple[str, ...]:
        items = [t.strip().lower() for t in text.split(",") if t.strip()]
        if not items or any(t not in allowed for t in items) or len(set(items)) != len(items):
            bad = next((t for t in items if t not in allowed), "")
            near = did_you_mean(bad, allowed).lstrip("; ") if bad else ""
            raise ValueError("use one or more of " + ", ".join(allowed) + " separated by commas"
                             + (f" ({bad!r} is not one of them; {near})" if near else ""))
        return tuple(items)

    return parse


def _levels(text: str) -> tuple[float, ...]:
    msg = "use percent levels between 0 and 100 separated by commas, e.g. 10,20,50,80,90"
    try:
        vals = tuple(float(t) for t in text.replace(" ", "").split(","))
    except ValueError:
        raise ValueError(msg) from None
    if not vals or not all(math.isfinite(v) and 0 < v < 100 for v in vals):
        raise ValueError(msg)
    return vals


def _whole_between(lo: int, hi: int) -> Callable[[str], int]:
    def parse(text: str) -> int:
        try:
            v = float(text)
        except ValueError:
            v = math.nan
        if not (math.isfinite(v) and v.is_integer() and lo <= v <= hi):
            raise ValueError(f"use a whole number from {lo} to {hi}")
        return int(v)

    return parse


def _above_one(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        v = math.nan
    if not (math.isfinite(v) and v > 1):
        raise ValueError("use a number above 1, e.g. 10")
    return v


def _show_list(value: tuple) -> str:
    return ",".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value)


def _listed(choices: tuple[str, ...]) -> str:
    """``"a, b or c"``."""
    return ", ".join(choices[:-1]) + " or " + choices[-1]


def _opt(
    default: Any,
    parse: Callable[[str], Any],
    valid: str,
    help: str,
    fit_kwarg: str | None = None,
    show: Callable[[Any], str] | None = None,
) -> Any:
    """One row of the options table, stored as the field's metadata."""
    meta = {"parse": parse, "valid": valid, "help": help, "fit_kwarg": fit_kwarg, "show": show}
    return field(default=default, metadata=meta)


def _show_yes_no(value: bool) -> str:
    return "yes" if value else "no"


@dataclass(frozen=True)
class Options:
    """Parsed options; build with :func:`parse_options`."""

    level: float = _opt(
        0.95, _level, "a number between 0 and 1", "confidence level of intervals",
        fit_kwarg="level", show=repr,
    )
    intercept: bool = _opt(
        True, _yes_no, "yes or no", "fit an intercept", fit_kwarg="intercept",
        show=_show_yes_no,
    )
    header: bool = _opt(
        True, _yes_no, "yes or no", "put a header row on top of result tables",
        show=_show_yes_no,
    )
    names: str = _opt(
        "auto", _choice("auto", "yes", "no"), "auto, yes or no",
        "first row of y/x/new_x holds names: auto = when it is text",
    )
    log: bool = _opt(
        False, _yes_no, "yes or no",
        "fit ln(y); predictions back-transformed with Duan's smearing", fit_kwarg="log",
        show=_show_yes_no,
    )
    totals: str = _opt(
        "drop", _choice("drop", "keep"), "drop or keep",
        "rows that look like totals (y and x the sum or mean of the rows above, or a "
        "label such as 'total'): drop = leave them out with a note, keep = fit them",
    )
    top_row: int | None = _opt(
        None, _auto_or(_whole_between(1, 1_048_576)), "a sheet row number, or auto",
        "the sheet row of the first row of the y selection (its header row, if any), e.g. "
        "top_row=2: notes, checks and row tables then name sheet rows (auto: data rows, "
        "counted from the first row of data)", show=lambda v: "auto" if v is None else str(v),
    )
    # the valid se and error values are the engine's (one list each)
    se: str = _opt(
        "ols", _choice(*SE_TYPES), _listed(SE_TYPES),
        "standard errors: ols, or heteroscedasticity-consistent hc0-hc3", fit_kwarg="se",
    )
    error: str = _opt(
        "additive", _choice(*ERROR_TYPES), _listed(ERROR_TYPES),
        "error model: percent = multiplicative error, weights 1/fitted^2 (IRLS)",
        fit_kwarg="error",
    )
    folds: int | None = _opt(
        None, _folds, "auto, loo or a whole number 2 or more",
        "cross-validation folds for the degree scan (auto: 10, or leave-one-out up to 20 "
        "rows)", show=lambda v: "auto" if v is None else ("loo" if v == 0 else str(v)),
    )

    # cost-estimating relationships (model power, factor or exponential), percentiles,
    # candidate comparison, learning curves and base-year costs
    method: str | None = _opt(
        None, _auto_or(_choice(*METHODS)), "auto, " + _listed(METHODS),
        "how to fit: a power, factor or exponential model needs one (log = least squares "
        "on ln y, mupe, zmpe, ols = least squares in units); on a polynomial, log and mupe "
        "mean log=yes and error=percent", fit_kwarg="method", show=lambda v: v or "auto",
    )
    correction: str = _opt(
        "smearing", _choice(*CORRECTIONS), _listed(CORRECTIONS),
        "back-transform of a log fit to units: smearing (Duan) or normal (exp(s^2/2))",
        fit_kwarg="correction",
    )
    levels: tuple[float, ...] = _opt(
        tuple(float(v) for v in DEFAULT_LEVELS), _levels,
        "percent levels separated by commas", "percentiles of a new estimate",
        show=_show_list,
    )
    base_year: int | None = _opt(
        None, _auto_or(_whole_between(1000, 9999)), "a year such as 2024, or auto",
        "the year whose prices the costs are in: shown with every equation; the year to "
        "convert to in XB_BASEYEAR", show=lambda v: "auto" if v is None else str(v),
    )
    theory: str = _opt(
        "unit", _choice(*THEORIES), _listed(THEORIES),
        "learning-curve theory: unit cost or cumulative average",
    )
    forms: tuple[str, ...] = _opt(
        ("power",), _list_of(*CANDIDATE_FORMS), "one or more of " + ", ".join(CANDIDATE_FORMS),
        "model forms to compare as candidates", show=_show_list,
    )
    methods: tuple[str, ...] = _opt(
        ("log", "mupe"), _list_of(*METHODS), "one or more of " + ", ".join(METHODS),
        "fitting methods to compare as candidates", show=_show_list,
    )
    max_drivers: int = _opt(
        1, _whole_between(1, MAX_DRIVERS), f"a whole number from 1 to {MAX_DRIVERS}",
        "most drivers in one candidate model", show=str,
    )
    vif_limit: float = _opt(
        10.0, _above_one, "a number above 1",
        "a candidate with a larger VIF is collinear (10 is common practice)", show=repr,
    )

    def fit_kwargs(self) -> dict[str, Any]:
        """Keyword arguments for ``xlbridge.fit`` taken from these options (the correction
        only with a method: it applies to CER log fits alone)."""
        out = {
            f.metadata["fit_kwarg"]: getattr(self, f.name)
            for f in fields(self)
            if f.metadata.get("fit_kwarg") and getattr(self, f.name) is not None
        }
        if self.method is None:
            out.pop("correction", None)
        return out

    def polynomial_kwargs(self) -> dict[str, Any]:
        """``fit_kwargs`` for the engine calls that take polynomial and surface models only
        (the degree scan): ``method`` becomes the remedy it stands for on those models, as
        ``xlbridge.fit`` reads it (``engine.cer.model_remedy``; zmpe is refused there)."""
        from ..engine.cer import model_remedy

        out = self.fit_kwargs()
        out.pop("correction", None)
        method = out.pop("method", None)
        if method is not None:
            out["log"], out["error"] = model_remedy(method)
        return out

    def to_text(self, only_changed: bool = True) -> str:
        """Canonical options text that :func:`parse_options` reads back to equal options."""
        parts = []
        for f in fields(self):
            value = getattr(self, f.name)
            if only_changed and value == f.default:
                continue
            show = f.metadata.get("show") or str
            parts.append(f"{f.name}={show(value)}")
        return "; ".join(parts)

    def replace(self, **changes: Any) -> Options:
        return replace(self, **changes)


def option_keys() -> tuple[str, ...]:
    """The valid option keys, in table order."""
    return tuple(f.name for f in fields(Options))


def options_help() -> str:
    """One line per option: key, valid values, default, meaning (for --help texts)."""
    lines = []
    for f in fields(Options):
        show = f.metadata.get("show") or str
        lines.append(
            f"{f.name}: {f.metadata['valid']} (default {show(f.default)}) - {f.metadata['help']}"
        )
    return "\n".join(lines)


_FIELDS: Mapping[str, Any] = {f.name: f for f in fields(Options)}


def _valid_keys_text() -> str:
    return "; ".join(f"{f.name}=<{f.metadata['valid']}>" for f in fields(Options))


def parse_options(text: object = None) -> Options:
    """Read options text such as ``"level=0.9; intercept=no"``; blank or None = defaults.

    Raises OptionsError with a message naming the valid keys or values.
    """
    if text is None:
        return Options()
    if isinstance(text, Options):
        return text
    if not isinstance(text, str):
        raise OptionsError(
            f"options must be text such as 'level=0.9; intercept=no'; got {text!r}. "
            f"Valid options: {_valid_keys_text()}"
        )
    values: dict[str, Any] = {}
    for raw in text.split(";"):
        part = raw.strip()
        if not part:
            continue
        key, sep, value = part.partition("=")
        key = re.sub(r"\s+", "", key).lower()
        value = value.strip()
        if not sep or not key:
            raise OptionsError(
                f"option {part!r} is not key=value. Valid options: {_valid_keys_text()}"
            )
        if re.search(r"[,\s][\w ]*=", value):
            raise OptionsError(
                f"option {part!r} holds another option: separate options with ';' "
                "(not ',' or a space), e.g. 'level=0.9; se=hc3'"
            )
        f = _FIELDS.get(key)
        if f is None:
            raise OptionsError(
                f"unknown option {key!r}{did_you_mean(key, _FIELDS) or '.'} "
                f"Valid options: {_valid_keys_text()}"
            )
        if key in values:
            raise OptionsError(f"option {key!r} is given twice")
        try:
            values[key] = f.metadata["parse"](value)
        except ValueError as exc:
            raise OptionsError(f"option {key}={value!r} is not valid: {exc}") from None
    return Options(**values)
