"""What the cell layer raises, and how any exception becomes one ``xlbridge: ...`` cell.

Callers branch on ``CellError.kind`` (or on the exception class), never on message words.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from enum import Enum
from typing import Any, ParamSpec

from ..engine import ModelError
from ..engine.errors import ModelErrorKind
from .options import OptionsError

__all__ = ["CellError", "CellErrorKind", "PREFIX", "Cell", "Table", "clip_text",
           "error_message", "guarded", "run_guarded"]

Cell = float | str
Table = list[list[Cell]]

PREFIX = "xlbridge: "


class CellErrorKind(str, Enum):
    INPUT = "input"      # a cell holds something unusable (an error value, a list, nothing)
    SHAPE = "shape"      # a range has the wrong shape or size (columns, heights, empty)
    OPTIONS = "options"  # an option cannot be used with this function
    MODEL = "model"      # the engine cannot fit the model to these values (see model_kind)
    RESULT = "result"    # the result cannot be shown in cells


class CellError(ValueError):
    """The cell values cannot be used as given; the message says what to fix.

    ``kind`` says what went wrong; for ``CellErrorKind.MODEL`` the engine's own
    ``ModelErrorKind`` is kept in ``model_kind`` (None otherwise)."""

    def __init__(self, message: str, kind: CellErrorKind = CellErrorKind.INPUT,
                 model_kind: ModelErrorKind | None = None) -> None:
        super().__init__(message)
        self.kind = kind
        self.model_kind = model_kind

    @classmethod
    def from_model(cls, exc: ModelError, text: str | None = None) -> CellError:
        """The engine's refusal as a cell error (``text`` replaces its message)."""
        return cls(str(exc) if text is None else text, CellErrorKind.MODEL,
                   getattr(exc, "kind", None))


def clip_text(s: str, limit: int) -> str:
    """One line of at most ``limit`` characters (an ellipsis marks a cut)."""
    s = s.replace("\r", " ").replace("\n", " ")
    return s if len(s) <= limit else s[: limit - 1] + "\u2026"


_USER_ERRORS = (CellError, OptionsError, ModelError)


def error_message(exc: BaseException) -> str:
    """The one-line ``xlbridge: ...`` text shown for an exception (never a traceback)."""
    if isinstance(exc, _USER_ERRORS):
        text = str(exc)
    elif isinstance(exc, MemoryError):
        text = "not enough memory for this fit; use fewer rows or a smaller model"
    else:
        text = (f"internal error ({type(exc).__name__}: {exc}); please report it "
                "with the inputs that caused it")
    text = " ".join(text.split())
    if not text.lower().startswith("xlbridge:"):
        text = PREFIX + text
    return clip_text(text, 1000)


P = ParamSpec("P")


def guarded(fn: Callable[P, Table]) -> Callable[P, Table]:
    """Wrap a table function so any exception becomes ``[["xlbridge: ..."]]``."""

    @functools.wraps(fn)
    def wrapper(*args: P.args, **kwargs: P.kwargs) -> Table:
        try:
            return fn(*args, **kwargs)
        except Exception as exc:  # noqa: BLE001 - a cell must never show a traceback
            return [[error_message(exc)]]

    return wrapper


def run_guarded(fn: Callable[..., Table], *args: Any, **kwargs: Any) -> Table:
    """Call ``fn`` and turn any exception into a one-cell ``xlbridge:`` message."""
    return guarded(fn)(*args, **kwargs)
