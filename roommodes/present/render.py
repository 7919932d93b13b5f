"""Rendering figures to PNG and SVG bytes in a worker process, beside the work that makes them.

Drawing a figure is pure Python (matplotlib's artists, text layout, the SVG writer) and
holds the interpreter for its whole length: in the report it took more than half of the
wall time, with the second core mostly idle. A :class:`FigureRenderer` hands each figure,
pickled, to one worker process that draws it while the caller goes on computing the next
section; :meth:`FigureRenderer.submit` returns at once, and the bytes are collected when
the page is put together.

The worker draws with the same :func:`roommodes.present.plots.figure_bytes` as the caller
would: a pickled figure carries its resolved properties, and the bytes are the same as an
in-process drawing (tests/present/test_render.py compares them). A figure that cannot be
pickled, a machine with one core, or a worker that fails is drawn in the calling process
instead, so the result never depends on the worker.

The worker is started on first use (``spawn``, so no lock held by another thread of the
caller is copied into it) and kept for later calls of the same process; it exits with the
process.
"""

from __future__ import annotations

import atexit
import os
import pickle
import threading
from concurrent.futures import Future, ProcessPoolExecutor

__all__ = ["FigureRenderer", "render_worker_available"]

_POOL = None
_POOL_LOCK = threading.Lock()


def render_worker_available():
    """Whether figures go to a worker process: more than one CPU for this process, and not
    switched off by the environment variable ``ROOMMODES_RENDER_WORKER=0``."""
    if os.environ.get("ROOMMODES_RENDER_WORKER", "1") == "0":
        return False
    try:
        n_cpu = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not on every platform
        n_cpu = os.cpu_count() or 1
    return n_cpu > 1


def _pool():
    global _POOL
    with _POOL_LOCK:
        if _POOL is None:
            import multiprocessing

            _POOL = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("spawn"),
                                        initializer=_start_worker)
            atexit.register(_POOL.shutdown, wait=False, cancel_futures=True)
        return _POOL


def _start_worker():
    import matplotlib

    matplotlib.use("Agg")
    from . import plots  # noqa: F401 - imported once, before the first figure


def _render_pickled(data, kwargs):
    from .plots import figure_bytes

    return figure_bytes(pickle.loads(data), **kwargs)


class FigureRenderer:
    """Draws figures to PNG and SVG bytes, in a worker process when one is available.

    Parameters
    ----------
    use_worker : bool, optional
        Default :func:`render_worker_available`; False draws every figure in the caller.
    **kwargs
        Passed to :func:`roommodes.present.plots.figure_bytes` for every figure.
    """

    def __init__(self, use_worker=None, **kwargs):
        self.kwargs = kwargs
        self.use_worker = render_worker_available() if use_worker is None else bool(use_worker)

    def submit(self, fig):
        """Start drawing ``fig``; returns a future whose ``result()`` is ``(png, svg)``.

        The figure is pickled at once (later changes to it are not drawn) and left laid
        out as :func:`~roommodes.present.plots.figure_bytes` leaves it only when drawn here.
        """
        if self.use_worker:
            try:
                data = pickle.dumps(fig)
            except Exception:  # noqa: BLE001 - an artist that does not pickle: drawn here instead
                data = None
            if data is not None:
                try:
                    work = _pool().submit(_render_pickled, data, self.kwargs)
                except RuntimeError:  # the pool is shut down or broken: drawn here instead
                    work = None
                if work is not None:
                    return _Fallback(work, fig, self.kwargs)
        done = Future()
        done.set_result(self._here(fig))
        return done

    def _here(self, fig):
        from .plots import figure_bytes

        return figure_bytes(fig, **self.kwargs)


class _Fallback:
    """A worker's future that draws the figure in the caller if the worker failed."""

    def __init__(self, work, fig, kwargs):
        self._work, self._fig, self._kwargs = work, fig, kwargs

    def result(self):
        try:
            return self._work.result()
        except Exception:  # noqa: BLE001 - a broken worker must not lose the figure
            from .plots import figure_bytes

            return figure_bytes(self._fig, **self._kwargs)
