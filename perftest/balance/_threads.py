"""BLAS threads for small problems.

A multi-threaded BLAS starts and spins its threads for every call; for the matrices
of a plant (tens to hundreds of rows) that costs far more than the arithmetic (a
100-stream linear reconciliation measured 20-40x slower with the default thread
count than with one thread on a 2-core machine).  The engine's entry points run
problems up to ``SMALL`` variables with one BLAS thread, through threadpoolctl,
and leave the user's setting alone for larger ones (large dense factorisations and
batches, where threads pay).

Layer: imports threadpoolctl only.
"""

from __future__ import annotations

import functools
from contextlib import nullcontext

__all__ = ["SMALL", "blas_for", "one_blas_thread_when_small"]

#: Largest problem (measured + unmeasured variables) run with one BLAS thread.  Dense
#: factorisations of this size take ~10 ms on one core; below it thread start-up
#: and synchronisation are not repaid (measured with benchmarks/bench_balance.py
#: and bench_model.py under the default setting and one thread).
SMALL = 1000

_controller = None


def blas_for(size: int):
    """Context: one BLAS thread for a problem of ``size`` variables up to SMALL."""
    global _controller
    if size > SMALL:
        return nullcontext()
    if _controller is None:
        import threadpoolctl

        _controller = threadpoolctl.ThreadpoolController()
    return _controller.limit(limits=1, user_api="blas")


def one_blas_thread_when_small(size_of):
    """Decorator: run the function under :func:`blas_for` (``size_of(*args, **kw)``).

    It adds one frame between the caller and the function: warnings the function
    issues itself use ``stacklevel=3`` to point at the caller.
    """

    def wrap(func):
        @functools.wraps(func)
        def inner(*args, **kwargs):
            try:
                size = int(size_of(*args, **kwargs))
            except Exception:  # bad input: let the function itself report it
                size = SMALL + 1
            with blas_for(size):
                return func(*args, **kwargs)

        return inner

    return wrap
