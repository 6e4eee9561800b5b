"""Many groups, one model: ``fit_groups`` fits the same model to every group of rows at once.

Every group gets the single fit's basis: each predictor centered at the group's (weighted)
mean where the model allows it and divided by a power of two (``solve.power_of_two_scale``).
Then up to three stages, each answering the groups its own error estimate vouches for and
passing on the rest (groups of blocks are computed with array operations, no loop per
group):

1. Double precision ("batched", ``first.py``): the Gram matrix and X'Wy from the scaled
   design, a first solution from the Cholesky factor of the unit-column Gram matrix
   (accepted under the single fit's rule for that factor: every diagonal entry above
   ``solve.CHOLESKY_MIN_DIAG``), the residuals computed row by row from it, and one
   correction step from them (corrected semi-normal equations). The residual sum of squares
   is summed from the residuals, so it does not cancel. A first-order bound of the rounding
   error of every reported estimate, standard error, residual SD and R^2 must be at most
   ``first.BATCH_ACCEPT``.
2. Double-double ("refined", ``refined.py``): the scaled design in double-double arithmetic
   (``ddarith.py``: a pair of doubles per entry, so it equals the monomials of the stored
   data to about 32 significant digits), the normal-equation sums (the Gram matrix, X'Wy and
   y'Wy) exact but for a final rounding far below double precision: the batched counterpart
   of the single fit's exact path. The same first solution, then one refinement step with
   its residual h - G b in double-double; residual and total sums of squares and the
   variance factors from forms that are stationary in the solution, so the remaining error
   enters squared; raw-unit coefficients converted in double-double (the map of
   ``Basis.raw_map``). Its error estimate must be below ``solve.ACCEPT_ERROR``, the
   threshold at which the single fit accepts its own double-precision answer.
3. The single-group ``fit`` ("single", ``solver.py``) for every other group (ill
   conditioned, aliased, or with at least ``solve.CHOLESKY_MIN_ROWS`` rows), which decides
   aliasing with ``solve.ALIAS_TOL`` and takes its exact path where needed.

Group keys and their order: ``keys.py``. The result and its table: ``table.py``.
"""

from .first import BATCH_ACCEPT
from .keys import group_codes, group_sort_key, normalize_key
from .solver import EXTRAPOLATION_SPAN, finite_range, fit_groups
from .table import GroupsResult

__all__ = ["BATCH_ACCEPT", "EXTRAPOLATION_SPAN", "GroupsResult", "finite_range", "fit_groups",
           "group_codes", "group_sort_key", "normalize_key"]
