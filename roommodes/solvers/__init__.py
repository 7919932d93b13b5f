"""Solvers for the low-frequency transfer from a loudspeaker to a listener.

The solvers share one signature and one normalisation (``H = 4 pi G``: pressure
relative to the free-field pressure of the same source at 1 m), so they can be swapped
and compared:

* ``"modal"``: the modal sum of :mod:`roommodes.solvers.modal` (fast; its perturbation
  damping drifts from the wave solution as absorption grows);
* ``"image"``: the image-source sum of :mod:`roommodes.solvers.images`;
* ``"exact"``: the frequency-domain solution of :mod:`roommodes.solvers.exact`, exact
  for locally reacting walls (Robin eigenfunctions on two axes, a closed-form 1-D
  impedance Green's function on the third); the default (:data:`DEFAULT_METHOD`), as
  its single predictions and floor maps cost about as much as the modal sum's
  (tests/bench/bench_exact.py).
"""

from __future__ import annotations

import warnings

import numpy as np

from .exact import exact_transfer
from .modal import modal_transfer

__all__ = ["transfer_function", "METHODS", "DEFAULT_METHOD", "ACCURACY_DB", "ASSUMPTIONS", "SolverConvergenceWarning"]


class SolverConvergenceWarning(UserWarning):
    """A solver stopped before its result converged to the requested tolerance."""

#: The solvers, with a few words on each (the ``--method`` help lists them).
METHODS = {
    "modal": "modal sum of the rigid-wall modes with perturbation damping and a closed-form tail (fast)",
    "image": "image sources reflected by sqrt(1 - alpha) at every wall (slow in hard rooms)",
    "exact": "separable wave solution of the box with impedance walls (the reference)",
}
#: The solver used where none is chosen.
DEFAULT_METHOD = "exact"

#: How each solver's level differs from a finite-element wave solution of the same box: median
#: and 90th percentile of |dL| in dB, pooled over the acceptance cases of
#: tests/solvers/test_against_fem.py and tests/solvers/test_exact_fem.py (docs/validation.md
#: gives the same figures; tests/solvers/test_validation_figures.py holds the two together).
ACCURACY_DB = {
    "modal": (0.10, 0.88),
    "image": (0.40, 1.39),
    "exact": (0.0001, 0.0023),
}

#: What each solver assumes beyond the shared box model, in one sentence (the report's
#: model section and the commands' validity notes use it).
ASSUMPTIONS = {
    "modal": "The transfer is the modal sum of the rigid-wall modes with perturbation damping and a closed-form "
             "static tail for the modes above the cutoff; its damping is least accurate on strongly absorbing "
             "surfaces.",
    "image": "The transfer is the sum of image sources, each reflection scaled by sqrt(1 - alpha) with alpha "
             "the wall's random-incidence absorption.",
    "exact": "The transfer is the exact wave solution of the box with locally reacting walls: Robin "
             "eigenfunctions along two axes and the closed-form Green's function along the third, summed to a "
             "stated error bound.",
}


def _check_points(room, name, pts):
    p = np.atleast_2d(np.asarray(pts, dtype=float))
    if p.ndim != 2 or p.shape[1] != 3 or not np.all(np.isfinite(p)):
        raise ValueError(f"{name} must be finite (N, 3) positions in metres, got shape {p.shape}")
    bad = ~room.contains(p)
    if np.any(bad):
        i = int(np.argmax(bad))
        lx, ly, lz = room.size_m
        raise ValueError(
            f"{name}[{i}] = ({p[i, 0]:.3g}, {p[i, 1]:.3g}, {p[i, 2]:.3g}) m lies outside the room "
            f"(0 < x < {lx:g}, 0 < y < {ly:g}, 0 < z < {lz:g} m)"
        )
    return p


#: Highest frequency the image-source solver is asked for (about 10 s per source and
#: receiver at 300 Hz in the demo room; its work grows with the cube of the frequency).
IMAGE_MAX_HZ = 500.0


def transfer_function(room, sources_m, receivers_m, freq_hz, method=None, **options):
    """Complex transfer from point sources to receivers in ``room``.

    Parameters
    ----------
    room : Room
        The room (size, surfaces, air temperature).
    sources_m : array_like, shape (N, 3)
        Source positions, metres, inside the room.
    receivers_m : array_like, shape (M, 3)
        Receiver positions, metres, inside the room.
    freq_hz : array_like, shape (F,)
        Frequencies, Hz.
    method : {"modal", "image", "exact"}, optional
        Solver; default :data:`DEFAULT_METHOD`.
    **options
        Passed to the solver (``cutoff_hz`` for the modal sum; ``tol_db``,
        ``max_order``, ``reflection`` for image sources; ``tol_db``, ``near_m`` for
        the exact solver).

    Returns
    -------
    H : ndarray, complex, shape (N, M, F)
        Pressure relative to the free-field pressure the same source gives at 1 m;
        ``20 log10 |H|`` is ``level_db``. The loudspeaker's own response is *not*
        included (see :func:`roommodes.predict`).

    Examples
    --------
    >>> import roommodes
    >>> room = roommodes.load_room(roommodes.demo_room_path())
    >>> H = roommodes.transfer_function(room, [[0.5, 0.9, 1.1]], [[2.0, 1.7, 1.2]], [40.0, 50.0])
    >>> H.shape
    (1, 1, 2)
    """
    src = _check_points(room, "sources_m", sources_m)
    rec = _check_points(room, "receivers_m", receivers_m)
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("freq_hz must be a 1-D array of positive frequencies in Hz")
    zeta = room.impedance(f)
    method = DEFAULT_METHOD if method is None else method
    if method == "modal":
        return modal_transfer(room.size_m, zeta, src, rec, f, room.speed_of_sound, **options)
    if method == "image":
        if f.max() > IMAGE_MAX_HZ:
            raise ValueError(
                f"the image-source solver computes up to {IMAGE_MAX_HZ:g} Hz (its images, and its time, grow "
                f"with the cube of the frequency), got frequencies up to {f.max():g} Hz; use the exact solver "
                "(--method exact, the default) or lower the top of --freq-range")
        # imported on first use: the image kernel loads numba, which costs start-up time
        from .images import image_source_transfer

        h, info = image_source_transfer(room.size_m, zeta, src, rec, f, room.speed_of_sound, **options)
        if not info["converged"]:
            warnings.warn(SolverConvergenceWarning(
                f"the image-source sum stopped at reflection order {info['order']} before converging "
                f"(remainder up to {np.max(info['remainder_db']):.2f} dB); the walls are too hard for "
                "image sources to be practical: use the modal solver"), stacklevel=2)
        return h
    if method == "exact":
        return exact_transfer(room.size_m, zeta, src, rec, f, room.speed_of_sound, **options)
    raise ValueError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
