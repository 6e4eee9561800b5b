"""BLAS thread control: one thread for small products, where starting and joining a second
thread costs more than it saves (and much more on a loaded machine); large ones keep the
library's own setting."""

from __future__ import annotations

from contextlib import nullcontext

#: Products whose operands hold fewer elements than this run on one BLAS thread.
SMALL_PRODUCT = 1_000_000

_controller = None


def _blas_controller():
    global _controller
    if _controller is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # a dependency, but only a speed-up: work without it
            _controller = False
        else:
            _controller = ThreadpoolController().select(user_api="blas")
    return _controller


def blas_threads_for(elements: int):
    """Context manager: a single BLAS thread when ``elements`` (the size of the largest
    operand about to be multiplied) is below SMALL_PRODUCT, otherwise no change."""
    if elements >= SMALL_PRODUCT:
        return nullcontext()
    ctrl = _blas_controller()
    if not ctrl or not ctrl.lib_controllers:
        return nullcontext()
    return ctrl.limit(limits=1)
