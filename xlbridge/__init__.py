"""xlbridge: accurate polynomial and second-order regression models for workbooks."""

__version__ = "0.1.0"

from .engine import (  # noqa: E402
    CenteredForm,
    Coefficient,
    FitResult,
    FitStats,
    ModelError,
    ModelSpec,
    Prediction,
    checks,
    fit,
    optimum,
    row_diagnostics,
    scan_degrees,
    slopes,
)

__all__ = ["__version__", "fit", "FitResult", "FitStats", "Coefficient", "CenteredForm",
           "Prediction", "ModelError", "ModelSpec", "checks", "row_diagnostics", "scan_degrees",
           "optimum", "slopes"]
