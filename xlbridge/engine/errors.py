"""Errors of the engine and the rules they enforce in one place.

Every ``ModelError`` carries a ``kind``; callers branch on the kind, never on the words of
the message (which say what to fix and may change).
"""

from __future__ import annotations

import difflib
import functools
from collections.abc import Callable, Iterable
from enum import Enum
from typing import Any, TypeVar


class ModelErrorKind(str, Enum):
    """What is wrong, for code that must react differently to different problems."""

    SPEC = "spec"  # the model text or a fit option (level, se, ...) is invalid
    DATA = "data"  # data shape/values unusable (lengths differ, non-finite, bad weights)
    SHORTAGE = "shortage"  # too few rows, or too few distinct x values, for the model
    ALIASED = "aliased"  # a term is (numerically) a combination of others / zero column
    SCALE = "scale"  # numbers too large or too small to compute with; rescale


class ModelError(ValueError):
    """A model, its data or its options cannot be fitted; the message says what to fix and
    ``kind`` (a ``ModelErrorKind``) says which sort of problem it is. ``row`` is the 1-based
    data row the message names, when it names one (front ends add where that row sits)."""

    def __init__(self, message: str, kind: ModelErrorKind = ModelErrorKind.SPEC,
                 row: int | None = None):
        super().__init__(message)
        self.kind = kind
        self.row = row

    def __reduce__(self):  # keep the kind through pickling (e.g. to and from workers)
        return (type(self), (str(self), self.kind, self.row))


def check_level(level: object) -> float:
    """The confidence level as a float, or ModelError(SPEC) unless it is a number strictly
    between 0 and 1.

    Examples
    --------
    >>> check_level(0.9)
    0.9
    >>> check_level(95)
    Traceback (most recent call last):
    ...
    xlbridge.engine.errors.ModelError: level must be between 0 and 1 (e.g. 0.95); got 95
    """
    if not isinstance(level, (int, float)) or isinstance(level, bool) or not 0 < level < 1:
        raise ModelError(f"level must be between 0 and 1 (e.g. 0.95); got {level!r}",
                         ModelErrorKind.SPEC)
    return float(level)


def distinct_shortage(degree: int, found: int) -> str:
    """The message for a polynomial of ``degree`` fitted to ``found`` distinct x values.

    >>> distinct_shortage(3, 2)
    'degree 3 needs at least 4 distinct x values; found 2'
    """
    return f"degree {degree} needs at least {degree + 1} distinct x values; found {found}"


def nearest(word: str, valid: Iterable[str]) -> str | None:
    """The valid word nearest to ``word`` (difflib's similarity, any case), if one is near.

    >>> nearest("surfce", ("surface", "linear", "interact"))
    'surface'
    """
    pool = {v.lower(): v for v in valid}
    found = difflib.get_close_matches(word.strip().lower(), list(pool), n=1, cutoff=0.6)
    return pool[found[0]] if found else None


def did_you_mean(word: str, valid: Iterable[str]) -> str:
    """``"; did you mean 'x'?"`` for the nearest valid word, or ``""`` when none is near."""
    near = nearest(word, valid)
    return f"; did you mean {near!r}?" if near else ""


F = TypeVar("F", bound=Callable[..., Any])


def overflow_is_scale(fn: F) -> F:
    """Decorate an engine function so an OverflowError from float arithmetic (math.exp,
    ** on floats) becomes ModelError(SCALE) saying to rescale, never an internal error."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except OverflowError:
            raise ModelError("the numbers overflow double precision in this calculation; "
                             "rescale the data, e.g. work in thousands, millions or other "
                             "units", ModelErrorKind.SCALE) from None

    return wrapper  # type: ignore[return-value]
