"""Errors of the numerical engine, each with a kind that callers branch on (never the words)."""

from __future__ import annotations

from enum import Enum

__all__ = ["ModelError", "ModelErrorKind"]


class ModelErrorKind(str, Enum):
    SPEC = "spec"          # the model text or a fit option (level, se, ...) is invalid
    DATA = "data"          # data shape/values unusable (lengths differ, non-finite, bad weights)
    SHORTAGE = "shortage"  # too few rows, or too few distinct x values, for the model
    ALIASED = "aliased"    # a term is (numerically) a combination of others / zero column
    SCALE = "scale"        # numbers too large or too small to compute with; rescale


class ModelError(ValueError):
    """A model, its data or its options cannot be fitted; the message says what to fix."""

    def __init__(self, message: str, kind: ModelErrorKind = ModelErrorKind.SPEC):
        super().__init__(message)
        self.kind = kind
