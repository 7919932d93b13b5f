"""BLAS thread count per product size.

OpenBLAS splits every product over all its threads. For the products of the modal solver
and the placement search most are small (tens of MFLOP), and two threads then cost more
than one: the split, the hand-over and, on a shared machine, waiting for a core busy with
other work. ``tests/bench/bench.py`` measures one thread against all of them for the
shapes these products have (its "BLAS threads" table); on the 2-core machine it was
measured on, one thread was as fast or faster below about 2 GFLOP (float64) and never
slower by more than the noise above, so the threshold below sits there.
Run the benchmark on a new machine and set :data:`MULTI_THREAD_MIN_FLOP` from its table.
"""

from __future__ import annotations

import contextlib
import functools

__all__ = ["blas_threads", "small_products", "MULTI_THREAD_MIN_FLOP"]

#: Products with fewer floating-point operations run on one BLAS thread (measured:
#: tests/bench/bench.py, "BLAS threads" table).
MULTI_THREAD_MIN_FLOP = 2e9


@functools.lru_cache(maxsize=1)
def _controller():
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # the package is a dependency; without it the BLAS keeps its own count
        return None
    return ThreadpoolController()


def blas_threads(flop):
    """Context manager: one BLAS thread for a product of fewer than
    :data:`MULTI_THREAD_MIN_FLOP` operations, the BLAS's own count otherwise.

    Parameters
    ----------
    flop : float
        Floating-point operations of the product (``2 m k n`` for an (m, k) by (k, n) GEMM).
    """
    ctl = _controller()
    if ctl is None or flop >= MULTI_THREAD_MIN_FLOP:
        return contextlib.nullcontext()
    return ctl.limit(limits=1, user_api="blas")


def small_products(fn):
    """Decorator: ``fn`` runs on one BLAS thread (for callers whose every product is far
    below :data:`MULTI_THREAD_MIN_FLOP`, such as the placement search's scoring: thousands
    of products of a few MFLOP, where two threads were measured several times slower)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with blas_threads(0):
            return fn(*args, **kwargs)

    return wrapper
