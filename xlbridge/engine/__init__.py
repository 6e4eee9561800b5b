"""Numerical core: model specs, accurate least squares, inference. No I/O, no xlwings."""

from .api import fit
from .result import CenteredForm, Coefficient, FitResult, FitStats, Prediction
from .terms import ModelError, ModelSpec, parse_model

__all__ = ["fit", "FitResult", "FitStats", "Coefficient", "CenteredForm", "Prediction",
           "ModelError", "ModelSpec", "parse_model"]
