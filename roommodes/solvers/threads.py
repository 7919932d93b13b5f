"""BLAS thread count per product size, and whether the machine has cores to spare.

OpenBLAS splits every product over all its threads. Whether that pays depends on the
product's size and on whether the cores are free: ``tests/bench/bench.py`` measures one
thread against the BLAS's own count for the shapes the modal solver and the placement
search run (its "BLAS threads" table: time with one thread / time with all, medians of
interleaved rounds; < 1 means one thread is faster). On the shared 2-core machine:

==========================  =========  =================  =================  =================
product (m x k x n)         flop       load 1.1-1.2       load 3.7-4.4       load 5.1-5.7
                                       float64  float32   float64  float32   float64  float32
==========================  =========  =================  =================  =================
600 x 1037 x 2200           2.7e9        1.95     1.95      1.52     1.44      1.01     1.39
4608 x 1037 x 220           2.1e9        1.95     1.92      1.86     1.73      1.46     1.69
2000 x 1037 x 400           1.7e9        1.98     1.92      2.06     1.38      1.52     1.28
300 x 1037 x 2200           1.4e9        1.93     1.91      1.24     1.39      1.02     0.82
240 x 1037 x 220            1.1e8        1.71     1.67      1.05     0.10      0.41     0.07
100 x 1037 x 100            2.1e7        1.34     1.14      0.02    <0.01      0.11     0.80
30 x 1037 x 60              3.7e6        1.25     1.16      0.64     0.36      0.37     0.19
8 x 1037 x 50               8.3e5        0.98     0.97      1.38     2.05      1.38     0.99
1 x 1037 x 418              8.7e5        0.99     0.95      0.99     0.99      1.00     1.02
==========================  =========  =================  =================  =================

On the idle machine (load 1.1-1.2, this process's own threads included) two threads win from
about 1e6 flop on: by 1.2-1.3 times at a few MFLOP, 1.7 times at 1e8 and nearly 2 from 1e9.
With other work on the cores (load about 2 per CPU and more) one thread wins from a few MFLOP
to 1e8 flop, by 2 to over 100 times (medians of noisy rounds), and two threads win again from
about 1.5e9 (as in the first measurement of this rule, at load 10-15). Below 1e6 flop the two
are alike when idle and mixed under load.

So the threshold depends on the load: with cores to spare (1-minute load average at most
:data:`BUSY_LOAD_PER_CPU` per CPU) products from :data:`MULTI_THREAD_MIN_FLOP` on run on
all threads; on a busy machine, where a second thread waits for a core other work holds,
only products from :data:`BUSY_MULTI_THREAD_MIN_FLOP` on. The load average counts this
process's own threads too (about one per core while it multiplies), hence a cut above 1.
Run the benchmark on a new machine and set the constants from its table.

The same test decides whether the modal solver's compiled loops run on all cores
(:func:`spare_cores`). numba's OpenMP workers are asked to wait passively
(``OMP_WAIT_POLICY=PASSIVE`` unless set): spinning workers left over from a compiled loop
otherwise hold the cores the next BLAS product wants (under load 5, with the modal solver's
loops then on all cores, its 2,000-source call took 1.75 times the plain product with
spinning workers and 1.19 with passive ones).

The reverse holds too: OpenBLAS's own workers spin for about 2^28 clock ticks (~0.1 s; the
library's default, recalled from its build notes) after every product and take the cores
from the numba loops that follow. ``import roommodes`` sets ``OPENBLAS_THREAD_TIMEOUT=22``
(2^22 ticks, ~1.4 ms) unless the environment sets it; OpenBLAS reads it when numpy first
loads, so a program that imports numpy before roommodes keeps the default (set the
variable in its environment instead). Measured on the idle 2-core machine
(tests/bench/bench.py, 5 interleaved rounds, default against 22): the image solver with
100 receivers 251 ms -> 162 ms wall, 406 -> 293 ms CPU; right after a GEMM alone, 205 ->
150 ms (values 4 and 18 gave the same); the modal 2,000-source call 1.00 -> 0.97 times the
plain product, the placement search 13,771 -> 13,810 layouts/s (unchanged).
"""

from __future__ import annotations

import contextlib
import functools
import os
import time

os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

__all__ = ["blas_threads", "small_products", "spare_cores", "multi_thread_min_flop", "MULTI_THREAD_MIN_FLOP",
           "BUSY_MULTI_THREAD_MIN_FLOP", "BUSY_LOAD_PER_CPU"]

#: With cores to spare, products with fewer floating-point operations run on one BLAS
#: thread (measured: tests/bench/bench.py, "BLAS threads" table, idle machine).
MULTI_THREAD_MIN_FLOP = 1e6
#: The same on a busy machine (measured there under load 5-15 on 2 CPUs).
BUSY_MULTI_THREAD_MIN_FLOP = 1.5e9
#: The machine counts as busy above this 1-minute load average per CPU.
BUSY_LOAD_PER_CPU = 1.5
#: Seconds a reading of the load average is reused.
_LOAD_TTL_S = 1.0
_load_cache = [-1e9, False]


def spare_cores():
    """Whether this process may use more than one core: the BLAS was given more than one
    thread (a process started with ``OPENBLAS_NUM_THREADS=1``, as Dask starts its workers,
    keeps to one) and the 1-minute load average is at most :data:`BUSY_LOAD_PER_CPU` per
    CPU (read at most once per second; no load average counts as idle)."""
    if _own_threads() <= 1:
        return False
    now = time.monotonic()
    if now - _load_cache[0] > _LOAD_TTL_S:
        try:
            load = os.getloadavg()[0]
        except (OSError, AttributeError):
            load = 0.0
        _load_cache[0] = now
        _load_cache[1] = load <= BUSY_LOAD_PER_CPU * (os.cpu_count() or 1)
    return _load_cache[1]


def multi_thread_min_flop():
    """The product size (flop) from which the BLAS's own thread count is used, for the
    machine's present load (:data:`MULTI_THREAD_MIN_FLOP` or :data:`BUSY_MULTI_THREAD_MIN_FLOP`)."""
    return MULTI_THREAD_MIN_FLOP if spare_cores() else BUSY_MULTI_THREAD_MIN_FLOP


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
    if ctl is None:
        return os.cpu_count() or 1
    return max([lib.num_threads for lib in ctl.select(user_api="blas").lib_controllers] or [1])


def blas_threads(flop):
    """Context manager: one BLAS thread for a product of fewer than
    :func:`multi_thread_min_flop` operations, the BLAS's own count otherwise (also inside
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
    return ctl.limit(limits=1 if flop < multi_thread_min_flop() else own, user_api="blas")


def small_products(fn):
    """Decorator: ``fn`` runs on one BLAS thread, except for the products it wraps in
    :func:`blas_threads` (for callers whose products are mostly small, such as the
    placement search's scoring: thousands of products of a few MFLOP)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with blas_threads(0):
            return fn(*args, **kwargs)

    return wrapper
