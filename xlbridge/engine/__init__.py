"""Numerical core: model specs, accurate least squares, inference. No I/O, no xlwings.

What one fit needs (``fit``, its errors, results and terms) is imported with the package;
grouped fits (and scipy.sparse), checks, row diagnostics, the degree scan, CER comparisons,
learning curves and base-year indexing are imported on first use, so that one fit from
the command line loads little more than it uses.
"""

from typing import TYPE_CHECKING

from .api import fit
from .cer import fit_cer
from .cerresult import CerCoefficient, CerPrediction, CerResult
from .errors import ModelError, ModelErrorKind, check_level

# optimum and percentiles name a function and its module alike: imported here, so that a
# later import of the module cannot leave the module where the function is expected
from .optimum import Optimum, Slopes, StationaryPoint, optimum, slopes
from .percentiles import Percentiles, percentiles
from .result import CenteredForm, Coefficient, FitResult, FitStats, NoteKind, Prediction
from .terms import ModelSpec, parse_model
from .unitstats import UnitStats, unit_stats

if TYPE_CHECKING:  # for type checkers and editors; at run time see __getattr__
    from .candidates import CandidateRow, CandidateTable, compare_candidates
    from .diagnostics import Check, RowDiagnostics, checks, cooks_cutoff, row_diagnostics
    from .groups import GroupsResult, fit_groups
    from .learning import LearningCurve, learning_curve
    from .normalize import to_base_year
    from .scan import DegreeRow, DegreeScan, scan_degrees

__all__ = ["fit", "fit_groups", "GroupsResult", "FitResult", "FitStats", "Coefficient",
           "CenteredForm", "Prediction", "NoteKind", "ModelError", "ModelErrorKind", "check_level",
           "ModelSpec", "parse_model", "checks", "Check", "cooks_cutoff", "row_diagnostics",
           "RowDiagnostics",
           "scan_degrees", "DegreeScan", "DegreeRow", "optimum", "Optimum", "StationaryPoint",
           "slopes", "Slopes"]
# cost-estimating relationships, learning curves, base-year indexing (issue 13)
__all__ += ["fit_cer", "CerResult", "CerCoefficient", "CerPrediction", "unit_stats",
            "UnitStats", "percentiles", "Percentiles", "learning_curve", "LearningCurve",
            "compare_candidates", "CandidateTable", "CandidateRow", "to_base_year"]

_LAZY = {  # name -> the module that defines it, imported on first use
    **dict.fromkeys(("fit_groups", "GroupsResult"), "groups"),
    **dict.fromkeys(("checks", "Check", "cooks_cutoff", "row_diagnostics", "RowDiagnostics"),
                    "diagnostics"),
    **dict.fromkeys(("scan_degrees", "DegreeScan", "DegreeRow"), "scan"),
    **dict.fromkeys(("compare_candidates", "CandidateTable", "CandidateRow"), "candidates"),
    **dict.fromkeys(("learning_curve", "LearningCurve"), "learning"),
    "to_base_year": "normalize",
}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'xlbridge.engine' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
