"""Numerical core: model specs, accurate least squares, inference. No I/O, no xlwings."""

from .api import fit
from .batch import GroupsResult, fit_groups
from .diagnostics import Check, RowDiagnostics, checks, row_diagnostics
from .optimum import Optimum, Slopes, StationaryPoint, optimum, slopes
from .result import CenteredForm, Coefficient, FitResult, FitStats, Prediction
from .scan import DegreeRow, DegreeScan, scan_degrees
from .terms import ModelError, ModelSpec, parse_model

__all__ = ["fit", "fit_groups", "GroupsResult", "FitResult", "FitStats", "Coefficient",
           "CenteredForm", "Prediction", "ModelError", "ModelSpec", "parse_model", "checks",
           "Check", "row_diagnostics", "RowDiagnostics", "scan_degrees", "DegreeScan", "DegreeRow",
           "optimum", "Optimum", "StationaryPoint", "slopes", "Slopes"]
