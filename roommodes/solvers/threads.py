"""BLAS thread count per product size.

OpenBLAS splits every product over all its threads. For the products of the modal solver
and the placement search most are small (tens of MFLOP), and two threads then cost more
than one: the split, the hand-over and, on a shared machine, waiting for a core busy with
other work. ``tests/bench/bench.py`` measures one thread against all of them for the
shapes these products have (its "BLAS threads" table). On the shared 2-core machine it was
measured on (load average 10-15), one thread was 3 to 20 times faster for products of
about 1e8 flop, 1.2-1.4 times faster at 1.4e9 flop (300 x 1037 x 2200), and 1.2 times
slower at 1.7e9 flop (2000 x 1037 x 400) and above, so the threshold sits at 1.5e9.
Run the benchmark on a new machine and set :data:`MULTI_THREAD_MIN_FLOP` from its table.
"""

from __future__ import annotations

import contextlib
import functools

__all__ = ["blas_threads", "small_products", "MULTI_THREAD_MIN_FLOP"]

#: Products with fewer floating-point operations run on one BLAS thread (measured:
#: tests/bench/bench.py, "BLAS threads" table).
MULTI_THREAD_MIN_FLOP = 1.5e9


@functools.lru_cache(maxsize=1)
def _controller():
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # the package is a dependency; without it the BLAS keeps its own count
        return None
    return ThreadpoolController()


@functools.lru_cache(maxsize=1)
def _own_threads():
    """The BLAS's own thread count (as first seen, outside any limit of this module)."""
    ctl = _controller()
    return max([lib.num_threads for lib in ctl.select(user_api="blas").lib_controllers] or [1])


def blas_threads(flop):
    """Context manager: one BLAS thread for a product of fewer than
    :data:`MULTI_THREAD_MIN_FLOP` operations, the BLAS's own count otherwise (also inside
    an enclosing one-thread context, so that a call can run its small products on one
    thread and its large one on all).

    Parameters
    ----------
    flop : float
        Floating-point operations of the product (``2 m k n`` for an (m, k) by (k, n) GEMM).
    """
    ctl = _controller()
    if ctl is None:
        return contextlib.nullcontext()
    own = _own_threads()
    return ctl.limit(limits=1 if flop < MULTI_THREAD_MIN_FLOP else own, user_api="blas")


def small_products(fn):
    """Decorator: ``fn`` runs on one BLAS thread (for callers whose every product is far
    below :data:`MULTI_THREAD_MIN_FLOP`, such as the placement search's scoring: thousands
    of products of a few MFLOP, where two threads were measured several times slower)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with blas_threads(0):
            return fn(*args, **kwargs)

    return wrapper
