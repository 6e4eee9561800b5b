"""xlbridge: accurate polynomial and second-order regression models for workbooks.

The public API lives in :mod:`xlbridge.engine`; it is imported on first use, so that
``xlbridge --help`` and other commands that never fit start quickly.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__", "fit", "fit_groups", "GroupsResult", "FitResult", "FitStats",
           "Coefficient", "CenteredForm", "Prediction", "ModelError", "ModelSpec", "checks",
           "row_diagnostics", "scan_degrees", "optimum", "slopes"]
# cost-estimating relationships, learning curves, base-year indexing (issue 13)
__all__ += ["CerResult", "percentiles", "Percentiles", "unit_stats", "learning_curve",
            "LearningCurve", "compare_candidates", "CandidateTable", "to_base_year"]


def __getattr__(name: str):
    if name in __all__:
        from . import engine

        value = getattr(engine, name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'xlbridge' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
