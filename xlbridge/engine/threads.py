"""BLAS thread control: one thread for small products, where starting and joining a second
thread costs more than it saves (and far more on a loaded machine: measured 1.4-4x slower
fits below about 10^7 multiply-adds on 2 cores); large products keep the library's count."""

from __future__ import annotations

from contextlib import nullcontext

#: Products of at least this many multiply-adds keep the BLAS library's own thread count.
LARGE_PRODUCT = 50_000_000

_controller = None
_default_threads = 1


def _blas_controller():
    global _controller, _default_threads
    if _controller is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # a dependency, but only a speed-up: work without it
            _controller = False
        else:
            _controller = ThreadpoolController().select(user_api="blas")
            counts = [lib.num_threads for lib in _controller.lib_controllers]
            _default_threads = max(counts) if counts else 1
    return _controller


def blas_threads(work: int):
    """Context manager: one BLAS thread for products of fewer than LARGE_PRODUCT
    multiply-adds (``work``), the library's own count (as found at first use) above."""
    ctrl = _blas_controller()
    if not ctrl or not ctrl.lib_controllers:
        return nullcontext()
    return ctrl.limit(limits=1 if work < LARGE_PRODUCT else _default_threads)
