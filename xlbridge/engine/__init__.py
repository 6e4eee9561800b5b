"""Numerical core: model specs, accurate least squares, inference. No I/O, no xlwings.

The grouped fit (``fit_groups``, ``GroupsResult``) is imported on first use, so importing
the engine does not load it or scipy.sparse.
"""

from typing import TYPE_CHECKING

from .api import fit
from .candidates import CandidateRow, CandidateTable, compare_candidates
from .cer import fit_cer
from .cerresult import CerCoefficient, CerPrediction, CerResult
from .diagnostics import Check, RowDiagnostics, checks, row_diagnostics
from .errors import ModelError, ModelErrorKind, check_level
from .learning import LearningCurve, learning_curve
from .normalize import to_base_year
from .optimum import Optimum, Slopes, StationaryPoint, optimum, slopes
from .percentiles import Percentiles, percentiles
from .result import CenteredForm, Coefficient, FitResult, FitStats, NoteKind, Prediction
from .scan import DegreeRow, DegreeScan, scan_degrees
from .terms import ModelSpec, parse_model
from .unitstats import UnitStats, unit_stats

if TYPE_CHECKING:  # for type checkers and editors; at run time see __getattr__
    from .groups import GroupsResult, fit_groups

__all__ = ["fit", "fit_groups", "GroupsResult", "FitResult", "FitStats", "Coefficient",
           "CenteredForm", "Prediction", "NoteKind", "ModelError", "ModelErrorKind", "check_level",
           "ModelSpec", "parse_model", "checks", "Check", "row_diagnostics", "RowDiagnostics",
           "scan_degrees", "DegreeScan", "DegreeRow", "optimum", "Optimum", "StationaryPoint",
           "slopes", "Slopes"]
# cost-estimating relationships, learning curves, base-year indexing (issue 13)
__all__ += ["fit_cer", "CerResult", "CerCoefficient", "CerPrediction", "unit_stats",
            "UnitStats", "percentiles", "Percentiles", "learning_curve", "LearningCurve",
            "compare_candidates", "CandidateTable", "CandidateRow", "to_base_year"]

_LAZY = {"fit_groups", "GroupsResult"}


def __getattr__(name: str):
    if name in _LAZY:
        from . import groups

        value = getattr(groups, name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'xlbridge.engine' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
