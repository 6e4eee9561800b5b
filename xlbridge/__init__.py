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
    fit,
)

__all__ = ["__version__", "fit", "FitResult", "FitStats", "Coefficient", "CenteredForm",
           "Prediction", "ModelError", "ModelSpec"]
