"""Calibrating a room model to measurements.

:func:`fit_room` adjusts a small set of physical parameters, each within bounds, so that
the modal prediction matches measured curves:

* the absorption of the surfaces, by groups (opposite pairs by default), as a factor on
  the file's values at every band;
* the effective dimensions, within a few percent;
* small offsets of the speaker and microphone positions (tape-measure tolerance);
* each speaker's roll-off frequency (``lowcut_hz``), when the file gives one.

The fit is a robust, regularised least-squares problem on smoothed dB curves: the
residual of every measured curve (the prediction minus the measurement, both smoothed
alike on a coarse log grid, with the level offset between them removed unless the
chain is calibrated) passes through a soft-L1 function, and each parameter is pulled
toward the room file's value by a quadratic penalty. Nothing here reads or writes
files; the command line writes the calibrated room with
:func:`roommodes.roomfile.room_to_toml`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import least_squares

from ..dsp.bands import band_average_matrix, band_centres
from ..dsp.response import log_frequencies, smooth_db
from ..model.room import WALL_MARGIN_M, WALLS, Surface
from ..solvers import DEFAULT_METHOD
from .levels import speaker_levels
from .uncertainty import DEFAULT_SAMPLES, DEFAULT_SEED, ensemble_levels

__all__ = [
    "after_band",
    "ABSORPTION_GROUPS", "DEFAULT_POINTS_PER_OCTAVE", "EffectiveSize", "FitParameter", "FitResult", "FitTarget",
    "effective_size", "estimate_effective_size", "fit_error", "fit_room", "follow_walls", "follow_walls_subs",
    "narrow_uncertainty", "before_band"]

#: Absorption groupings: name -> tuple of surface groups.
ABSORPTION_GROUPS = {
    "axes": (("front", "back"), ("left", "right"), ("floor", "ceiling")),
    "each": tuple((w,) for w in WALLS),
    "all": (WALLS,),
    "none": (),
}
#: Absorption factors move on a log scale; one prior unit is a factor of 2, the bound 4.
_ABS_SCALE = math.log(2.0)
_ABS_BOUND_UNITS = 2.0
#: Highest absorption coefficient the fit will write (the file format needs < 1).
_MAX_ALPHA = 0.95
#: Density of the fit's log-frequency grid (24 per octave: a 20-200 Hz fit has 81 points).
DEFAULT_POINTS_PER_OCTAVE = 24
#: Finite-difference step, in prior units.
_FD_STEP = 1e-3


@dataclass(frozen=True, eq=False)
class FitTarget:
    """One measured curve, tied to the speaker that played and the microphone position.

    Attributes
    ----------
    channel : str
        Speaker name in the room file.
    position_m : tuple of float
        Microphone position (x, y, z), m.
    freq_hz : ndarray (F,)
        Frequencies, Hz, rising.
    level_db : ndarray (F,)
        Measured level, dB (any reference unless the fit is absolute).
    label : str
    band_fraction : int or None
        ``b`` when the levels are 1/b-octave band levels at the band centres.
    """

    channel: str
    position_m: tuple
    freq_hz: np.ndarray
    level_db: np.ndarray
    label: str = ""
    band_fraction: int | None = None


@dataclass(frozen=True)
class FitParameter:
    """One fitted parameter.

    Attributes
    ----------
    name : str
        E.g. ``"absorption front+back"``, ``"length"``, ``"left x"``, ``"mic 1 y"``,
        ``"left lowcut"``.
    unit : str
        ``"m"``, ``"Hz"``, or ``""`` for absorption (the area-weighted coefficient of the
        group at ``reference_hz``).
    initial, value : float
        In the unit given.
    lower, upper : float
        Bounds, same unit.
    std_error : float
        Approximate standard error, same unit (see :func:`fit_room`, Notes).
    at_bound : bool
        The fit stopped at a bound: the data pull further than allowed.
    kind : str
        ``"absorption"``, ``"size"``, ``"speaker"``, ``"mic"`` or ``"lowcut"``.
    data_std_error : float
        The standard error from the measurements alone (without the pull toward the file's
        values), combined with the shift that pull causes, same unit; inf where they say
        nothing about the parameter (see :func:`narrow_uncertainty`).
    """

    name: str
    unit: str
    initial: float
    value: float
    lower: float
    upper: float
    std_error: float
    at_bound: bool
    kind: str
    data_std_error: float = math.inf

    @property
    def change(self):
        """``value - initial``."""
        return self.value - self.initial


@dataclass(frozen=True, eq=False)
class FitResult:
    """What :func:`fit_room` found.

    Attributes
    ----------
    room : Room
        The calibrated room (absorption, size, speaker positions and roll-off); the seat
        is left as it was.
    parameters : tuple of FitParameter
    freq_hz : ndarray (F,)
        The fit's grid, Hz.
    measured_db : ndarray (T, F)
        Each target, on the grid, smoothed.
    before_db, after_db : ndarray (T, F)
        The prediction before and after the fit, smoothed, level-aligned to the target.
    level_offsets_db : ndarray (T,)
        Level added to each prediction after the fit (0 when absolute).
    error_before, error_after : dict
        ``median_abs_db``, ``p90_abs_db``, ``rms_db`` of the residual over all targets.
    mic_positions_m : ndarray (M, 3)
        Fitted microphone positions (in the order of first appearance in the targets).
    iterations, evaluations : int
    success : bool
    message : str
    reference_hz : float
        Frequency at which absorption values are reported.
    labels : tuple of str
    uncertainty : dict
        How the fit narrowed the room's uncertainty (:func:`narrow_uncertainty`): ``given``
        and ``narrowed`` (``[uncertainty]`` values) and ``surfaces`` (each fitted surface's
        relative sd of absorption, given and narrowed); ``room`` carries the narrowed values.
    """

    room: object
    parameters: tuple
    freq_hz: np.ndarray
    measured_db: np.ndarray
    before_db: np.ndarray
    after_db: np.ndarray
    level_offsets_db: np.ndarray
    error_before: dict
    error_after: dict
    mic_positions_m: np.ndarray
    iterations: int
    evaluations: int
    success: bool
    message: str
    reference_hz: float
    labels: tuple = field(default=())
    uncertainty: dict = field(default_factory=dict)

    def to_dict(self):
        """JSON-ready values: the keys of ``fit --json`` (without the command's own)."""
        return {
            "iterations": self.iterations, "evaluations": self.evaluations, "success": self.success,
            "message": self.message, "absorption_reference_hz": self.reference_hz,
            "parameters": [{"name": p.name, "kind": p.kind, "unit": p.unit, "initial": p.initial, "value": p.value,
                            "change": p.change, "std_error": p.std_error, "lower": p.lower, "upper": p.upper,
                            "at_bound": p.at_bound,
                            "data_std_error": p.data_std_error if math.isfinite(p.data_std_error) else None}
                           for p in self.parameters],
            "error_before": self.error_before, "error_after": self.error_after,
            "frequencies_hz": self.freq_hz, "measured_db": self.measured_db, "before_db": self.before_db,
            "after_db": self.after_db, "uncertainty": self.uncertainty,
        }


@dataclass
class _Param:
    name: str
    kind: str
    key: tuple
    scale: float  # natural units per prior unit (linear kinds)
    bound: float  # in prior units
    unit: str


def fit_error(difference_db):
    """Error figures of a residual: median and 90th percentile of ``|d|``, and rms (dB)."""
    a = np.abs(np.asarray(difference_db, dtype=float)).ravel()
    return {"median_abs_db": float(np.median(a)), "p90_abs_db": float(np.percentile(a, 90)),
            "rms_db": float(np.sqrt(np.mean(a**2)))}


def _soft_l1(d, scale):
    """Residual whose square is the soft-L1 loss ``2 s^2 (sqrt(1 + (d/s)^2) - 1)``."""
    z = (d / scale) ** 2
    return scale * np.sign(d) * np.sqrt(2.0 * (np.sqrt(1.0 + z) - 1.0))


def _check_tol(name, value, lo, hi):
    v = float(value)
    if not (math.isfinite(v) and lo <= v <= hi):
        raise ValueError(f"{name} must be {lo:g}..{hi:g}, got {value!r}")
    return v


def follow_walls(search, old_size_m, new_size_m, touch_m=0.01):
    """The ``[search]`` table with its keep-out boxes following walls that moved.

    A box that reached a far wall (back, right, ceiling: within ``touch_m`` of it) in the
    old room reaches it in the new one; a box corner beyond a wall that came closer is
    brought back to it. The front, left and floor surfaces are the origin and do not move.
    Returns a new dict (the input is not changed); a table without keep-out boxes comes
    back as it is.
    """
    boxes = search.get("keep_out") if isinstance(search, dict) else None
    if not boxes:
        return search
    moved = []
    for box in boxes:
        b = dict(box)
        b["min_m"], b["max_m"] = _follow_box(b["min_m"], b["max_m"], old_size_m, new_size_m, touch_m)
        moved.append(b)
    return {**search, "keep_out": moved}


def _follow_box(min_m, max_m, old_size_m, new_size_m, touch_m):
    """A box's corners after the far walls moved (see :func:`follow_walls`)."""
    old = np.asarray(old_size_m, dtype=float)
    new = np.asarray(new_size_m, dtype=float)
    hi = [float(v) for v in max_m]
    lo = [float(v) for v in min_m]
    for a in range(3):
        if hi[a] >= old[a] - touch_m or hi[a] > new[a]:
            hi[a] = float(new[a]) if hi[a] >= old[a] - touch_m else min(hi[a], float(new[a]))
        lo[a] = min(lo[a], hi[a] - 1e-3)
    return lo, hi


def follow_walls_subs(subs_search, old_size_m, new_size_m, touch_m=0.01):
    """The ``[subs]`` search settings following walls that moved, like :func:`follow_walls`.

    Regions and keep-out boxes follow as in :func:`follow_walls`. A candidate position in
    the far half of a dimension keeps its distance from the far wall (it was measured from
    there, a sub against the back wall stays against it); one in the near half keeps its
    coordinate. Candidates stay at least ``WALL_MARGIN_M`` inside the room. ``None`` comes
    back as ``None``; the input is not changed.
    """
    if subs_search is None:
        return None
    old = np.asarray(old_size_m, dtype=float)
    new = np.asarray(new_size_m, dtype=float)
    if np.array_equal(old, new):
        return subs_search

    def boxes(bs):
        return tuple(replace(b, **dict(zip(("min_m", "max_m"),
                                           map(tuple, _follow_box(b.min_m, b.max_m, old, new, touch_m)))))
                     for b in bs)

    cands = []
    for p in subs_search.candidates_m:
        q = [float(new[a] - (old[a] - v)) if v > old[a] / 2 else float(v) for a, v in enumerate(p)]
        cands.append(tuple(float(np.clip(v, WALL_MARGIN_M, new[a] - WALL_MARGIN_M)) for a, v in enumerate(q)))
    return replace(subs_search, regions=boxes(subs_search.regions), keep_out=boxes(subs_search.keep_out),
                   candidates_m=tuple(cands))


def _solver_options(method, cutoff_factor, top_hz):
    """The fit's solver options: the modal sum is cut off at ``cutoff_factor`` times the top of
    the fitted band (the other solvers take none)."""
    return {"cutoff_hz": float(cutoff_factor) * float(top_hz)} if method == "modal" else {}


def fit_room(room, targets, *, band_hz=(20.0, 200.0), points_per_octave=DEFAULT_POINTS_PER_OCTAVE, smoothing=12,
             absorption="axes", size_tolerance=0.05, position_tolerance_m=0.05, fit_speaker_positions=True,
             fit_mic_positions=True, fit_lowcut=True, lowcut_tolerance=0.3, absolute=False,
             regularization_db=0.5, robust_scale_db=3.0, cutoff_factor=2.0, max_iterations=40,
             method=DEFAULT_METHOD, progress=None):
    """Adjust absorption, dimensions, positions and roll-off so the model fits measurements.

    Parameters
    ----------
    room : Room
        The room file's model, with a layout naming every target's speaker.
    targets : sequence of FitTarget
        Measured curves; each must cover ``band_hz``.
    band_hz : (float, float)
        Fit band, Hz (below the Schroeder frequency, where the modal model holds).
    points_per_octave : int
        Density of the fit's log grid, 6..96 (24: a 20-200 Hz fit has 81 points).
    smoothing : float
        ``b`` of the 1/b-octave power smoothing applied alike to the prediction and the
        measurement on the grid, 1..48, or 0 for none.
    absorption : {"axes", "each", "all", "none"}
        Surface groups whose absorption is scaled by one factor each (:data:`ABSORPTION_GROUPS`):
        opposite pairs (default), every surface, one factor for all, or none.
    size_tolerance : float
        Largest relative change of each dimension, 0..0.2 (0 fixes them); default 5 %.
    position_tolerance_m : float
        Largest offset of each speaker and microphone coordinate, m, 0..0.5; default 5 cm.
    fit_speaker_positions, fit_mic_positions, fit_lowcut : bool
        Which of those parameter sets to adjust.
    lowcut_tolerance : float
        Largest relative change of a speaker's ``lowcut_hz``, 0..1; default 30 %.
    absolute : bool
        Keep the measured level as it is (a calibrated chain, levels in dB re the
        free-field level at 1 m); otherwise each target gets its own level offset.
    regularization_db : float
        Strength of the pull toward the file's values, dB, >= 0: moving a parameter by
        its prior unit (the tolerance; a factor 2 for absorption) costs as much as this
        rms residual.
    robust_scale_db : float
        Residuals much larger than this count linearly, not quadratically (soft L1), dB, > 0.
    cutoff_factor : float
        Modes up to this multiple of the band's top enter the modal sum, 1.2..4 (the
        solver's static tail accounts for the rest).
    max_iterations : int
        Jacobian evaluations (iterations) at most, 1..500.
    method : str
        The solver of the model (:data:`roommodes.solvers.METHODS`); ``cutoff_factor``
        applies to the modal one.
    progress : callable, optional
        ``progress(iteration, max_iterations, cost)`` after each iteration.

    Returns
    -------
    FitResult

    Notes
    -----
    With ``u`` the parameters in prior units (0 at the file's values), the fit minimises

    .. math:: \\frac{1}{N}\\sum_{t,i} \\rho(d_{t,i}) + \\lambda^2 \\sum_j u_j^2,\\qquad
              \\rho(d) = 2 s^2 \\left(\\sqrt{1 + (d/s)^2} - 1\\right),

    where ``d_{t,i}`` is the smoothed prediction minus the smoothed measurement of target
    ``t`` at grid point ``i`` (minus its mean over the band unless absolute), ``s`` is
    ``robust_scale_db`` and ``lambda`` is ``regularization_db`` (Tikhonov regularisation
    toward the input; the soft-L1 function is the one ``scipy.optimize.least_squares``
    calls ``"soft_l1"``). It is solved by ``scipy.optimize.least_squares`` (trust-region
    reflective, bounds) with a forward-difference Jacobian.

    Standard errors come from the Gauss-Newton covariance at the solution,
    ``cov(u) = sigma^2 (J^T J)^{-1}`` with ``J`` the Jacobian of the residual including the
    prior rows, and ``sigma^2 = mean(rho) / (N_eff - P)`` with ``N_eff`` the number of
    independent points (``b`` per octave per target at 1/b-octave smoothing) and ``P``
    the number of parameters. The figure is approximate: residuals of a model error are
    not independent noise. A standard error near the prior unit means the measurements
    say little about that parameter.

    Surfaces on opposite sides of the room enter the modal model's damping only through
    their sum, so with ``absorption="each"`` the split between them follows the file.
    """
    targets = list(targets)
    if not targets:
        raise ValueError("fit_room needs at least one measured curve")
    if room.layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat] to fit")
    if absorption not in ABSORPTION_GROUPS:
        raise ValueError(f"absorption must be one of {', '.join(ABSORPTION_GROUPS)}, got {absorption!r}")
    size_tol = _check_tol("size_tolerance", size_tolerance, 0.0, 0.2)
    pos_tol = _check_tol("position_tolerance_m", position_tolerance_m, 0.0, 0.5)
    lc_tol = _check_tol("lowcut_tolerance", lowcut_tolerance, 0.0, 1.0)
    lam = _check_tol("regularization_db", regularization_db, 0.0, 1e3)
    robust = _check_tol("robust_scale_db", robust_scale_db, 1e-3, 1e3)
    cut = _check_tol("cutoff_factor", cutoff_factor, 1.2, 4.0)
    if not (6 <= int(points_per_octave) <= 96):
        raise ValueError(f"points_per_octave must be 6..96, got {points_per_octave!r}")
    if not 1 <= int(max_iterations) <= 500:
        raise ValueError(f"max_iterations must be 1..500, got {max_iterations!r}")
    if smoothing and not 1 <= smoothing <= 48:
        raise ValueError(f"smoothing must be 1..48 (1/b octave) or 0, got {smoothing!r}")
    lo, hi = (float(v) for v in band_hz)
    f = log_frequencies(lo, hi, int(points_per_octave))
    f_ref = math.sqrt(lo * hi)
    fractions = {t.band_fraction for t in targets}
    if len(fractions) > 1:
        raise ValueError("the measurements mix band levels and response curves; fit them separately (band levels "
                         "can only calibrate the absorption)")
    fraction = fractions.pop()
    band_note = ""
    if fraction:
        # Band levels cannot resolve single modes, so they cannot tell a dimension, a position or a
        # roll-off: only the overall absorption is fitted, against band levels of the model.
        centres = np.asarray(targets[0].freq_hz, dtype=float)
        centres = centres[(centres >= lo * 0.98) & (centres <= hi * 1.02)]
        if centres.size < 3:
            raise ValueError(f"{targets[0].label or 'the band levels'}: fewer than three bands lie in the fit band "
                             f"{lo:g}-{hi:g} Hz; widen the band")
        exact, _, lower, upper = band_centres(int(fraction), float(centres.min()) / 1.1, float(centres.max()) * 1.1)
        bi = np.abs(np.log(centres[:, None] / exact[None, :])).argmin(axis=1)
        f = log_frequencies(float(lower[bi].min()), float(upper[bi].max()), max(24, int(points_per_octave)))
        band_matrix = band_average_matrix(f, lower[bi], upper[bi])
        absorption = "all" if absorption != "none" else "none"
        size_tolerance, position_tolerance_m, fit_lowcut = 0.0, 0.0, False
        size_tol = pos_tol = 0.0
        band_note = (f"band data (1/{fraction} octave): only the overall absorption is fitted; the dimensions, "
                     "positions and roll-off are kept, since band levels cannot resolve the modes that would tell them")

    speakers = {s.name: s for s in room.layout.speakers}
    spk_names, mic_list, pairs, meas = [], [], [], []
    for t in targets:
        if t.channel not in speakers:
            raise ValueError(f"{t.label or 'a target'}: channel '{t.channel}' is not a speaker of the room file; "
                             f"choose one of {', '.join(speakers)}")
        tf = np.asarray(t.freq_hz, dtype=float)
        if tf[0] > lo * 1.02 or tf[-1] < hi * 0.98:
            raise ValueError(f"{t.label or 'a target'} covers {tf[0]:.4g}-{tf[-1]:.4g} Hz; the fit band "
                             f"{lo:g}-{hi:g} Hz must lie inside it, within 2 % (narrow the band)")
        if t.channel not in spk_names:
            spk_names.append(t.channel)
        pos = tuple(float(v) for v in t.position_m)
        if not room.contains([pos])[0]:
            raise ValueError(f"{t.label or 'a target'}: microphone position {pos} lies outside the room")
        if pos not in mic_list:
            mic_list.append(pos)
        pairs.append((spk_names.index(t.channel), mic_list.index(pos)))
        if fraction:
            tl = np.asarray(t.level_db, float)
            at = [int(np.argmin(np.abs(np.log(tf / c)))) for c in centres]
            if any(abs(tf[i] / c - 1) > 0.03 for i, c in zip(at, centres)):
                raise ValueError(f"{t.label or 'a target'}: its bands differ from the first measurement's; give band "
                                 "levels of the same bands")
            meas.append(tl[at])
        else:
            meas.append(smooth_db(f, np.interp(np.log(f), np.log(tf), np.asarray(t.level_db, float)), smoothing))
    meas = np.array(meas)
    mic0 = np.array(mic_list)
    spk0 = np.array([speakers[n].position_m for n in spk_names], dtype=float)
    size0 = np.asarray(room.size_m, dtype=float)
    areas = room.surface_areas_m2
    alpha_ref = room.absorption([f_ref])[:, 0]

    # ---- the parameter list
    params = []
    for group in ABSORPTION_GROUPS[absorption]:
        params.append(_Param(f"absorption {'+'.join(group)}", "absorption", tuple(WALLS.index(w) for w in group),
                             _ABS_SCALE, _ABS_BOUND_UNITS, ""))
    if size_tol > 0:
        for a, nm in enumerate(("length", "width", "height")):
            params.append(_Param(nm, "size", (a,), size_tol * size0[a], 1.0, "m"))
    if pos_tol > 0 and fit_speaker_positions:
        for k, n in enumerate(spk_names):
            for a, ax in enumerate("xyz"):
                params.append(_Param(f"{n} {ax}", "speaker", (k, a), pos_tol, 1.0, "m"))
    if pos_tol > 0 and fit_mic_positions:
        for k in range(len(mic_list)):
            for a, ax in enumerate("xyz"):
                params.append(_Param(f"mic {k + 1} {ax}", "mic", (k, a), pos_tol, 1.0, "m"))
    if lc_tol > 0 and fit_lowcut:
        for k, n in enumerate(spk_names):
            sp = speakers[n]
            if sp.lowcut_hz and sp.response is None:
                params.append(_Param(f"{n} lowcut", "lowcut", (k,), math.log1p(lc_tol), 1.0, "Hz"))
    n_par = len(params)

    def build(u):
        """Room, speaker positions, speakers and mic positions for parameters ``u``."""
        size = size0.copy()
        factors = np.ones(6)
        spk = spk0.copy()
        mic = mic0.copy()
        lowcut = {n: speakers[n].lowcut_hz for n in spk_names}
        for p, uj in zip(params, u):
            if p.kind == "absorption":
                factors[list(p.key)] = math.exp(uj * p.scale)
            elif p.kind == "size":
                size[p.key[0]] += uj * p.scale
            elif p.kind == "speaker":
                spk[p.key] += uj * p.scale
            elif p.kind == "mic":
                mic[p.key] += uj * p.scale
            else:
                n = spk_names[p.key[0]]
                lowcut[n] = speakers[n].lowcut_hz * math.exp(uj * p.scale)
        surfaces = tuple(
            s if factors[i] == 1.0 else Surface(s.name, tuple(min(a * factors[i], _MAX_ALPHA) for a in s.absorption),
                                                s.bands_hz, None, s.extrapolated_hz)
            for i, s in enumerate(room.surfaces))
        lo_m = WALL_MARGIN_M
        spk = np.clip(spk, lo_m, size - lo_m)
        mic = np.clip(mic, lo_m, size - lo_m)
        sps = [replace(speakers[n], position_m=tuple(float(v) for v in spk[k]), lowcut_hz=lowcut[n])
               for k, n in enumerate(spk_names)]
        r = replace(room, size_m=tuple(float(v) for v in size), surfaces=surfaces)
        return r, spk, sps, mic

    solver_options = _solver_options(method, cut, hi)

    def predict_all(u):
        r, _, sps, mic = build(u)
        lv = speaker_levels(r, sps, mic, f, method=method, **solver_options).level_db
        if fraction:
            return np.array([10.0 * np.log10(band_matrix @ 10.0 ** (lv[s, m] / 10.0)) for s, m in pairs])
        return np.array([smooth_db(f, lv[s, m], smoothing) for s, m in pairs])

    def differences(u):
        pred = predict_all(u)
        d = pred - meas
        off = np.zeros(len(targets)) if absolute else -d.mean(axis=1)
        return d + off[:, None], pred, off

    n_data = meas.size
    octaves = math.log2(hi / lo)
    n_eff = len(targets) * (meas.shape[1] if fraction else min(f.size, max(1.0, octaves * (smoothing or points_per_octave))))
    state = {"iter": 0, "calls": 0, "last": None}

    def rows(u):
        state["calls"] += 1
        d, _, _ = differences(u)
        return np.concatenate([_soft_l1(d.ravel(), robust) / math.sqrt(n_data), lam * np.asarray(u)])

    def residual(u):
        r = rows(u)
        state["last"] = (np.array(u, copy=True), r)
        return r

    bounds_u = np.array([p.bound for p in params])

    def jacobian(u):
        u = np.asarray(u, dtype=float)
        last = state["last"]
        r0 = last[1] if last is not None and np.array_equal(last[0], u) else residual(u)
        jac = np.empty((r0.size, n_par))
        for j in range(n_par):
            step = _FD_STEP if u[j] + _FD_STEP <= bounds_u[j] else -_FD_STEP
            uj = u.copy()
            uj[j] += step
            jac[:, j] = (rows(uj) - r0) / step
        state["iter"] += 1
        if progress is not None:
            progress(state["iter"], int(max_iterations), float(0.5 * r0 @ r0))
        return jac

    u0 = np.zeros(n_par)
    d_before, pred_before, off_before = differences(u0)
    if n_par:
        sol = least_squares(residual, u0, jac=jacobian, bounds=(-bounds_u, bounds_u), method="trf",
                            x_scale=1.0, max_nfev=int(max_iterations), xtol=1e-6, ftol=1e-8, gtol=1e-8)
        u, jac, success, message = sol.x, sol.jac, bool(sol.success), str(sol.message)
    else:
        u, jac, success, message = u0, np.zeros((0, 0)), True, "nothing to fit"
    d_after, pred_after, off_after = differences(u)

    # ---- standard errors (Gauss-Newton, prior rows included)
    if n_par:
        rho_mean = float(np.mean(_soft_l1(d_after.ravel(), robust) ** 2))
        sigma2 = rho_mean / max(1.0, n_eff - n_par)
        jtj = jac.T @ jac
        try:
            cov = np.linalg.inv(jtj) * sigma2
        except np.linalg.LinAlgError:
            cov = np.full((n_par, n_par), np.nan)
        se_u = np.sqrt(np.maximum(np.diag(cov), 0.0))
        # the same from the measurements alone (no prior rows): what the data support, for the
        # uncertainty the calibrated file may claim (narrow_uncertainty); inf where they say nothing
        jd = jac[:-n_par]
        with np.errstate(all="ignore"):
            try:
                inv_d = np.linalg.inv(jd.T @ jd)
                # where the data alone would put the parameters (one Gauss-Newton step without the
                # prior's pull, lam^2 u): that shift counts as uncertainty too
                shift_u = inv_d @ (lam**2 * np.asarray(u))
                var_d = np.diag(inv_d) * sigma2
                se_data_u = np.sqrt(np.where(var_d > 0, var_d + shift_u**2, np.inf))
            except np.linalg.LinAlgError:
                se_data_u = np.full(n_par, np.inf)
        se_data_u = np.where(np.isfinite(se_data_u) & (se_data_u < 1e6), se_data_u, np.inf)
    else:
        se_u = np.zeros(0)
        se_data_u = np.zeros(0)

    new_room, _spk_fit, sps_fit, mic_fit = build(u)
    # keep speakers that were not fitted as they were, in the file's order
    fitted = {s.name: s for s in sps_fit}
    layout = replace(room.layout, speakers=tuple(fitted.get(s.name, s) for s in room.layout.speakers))
    new_room = replace(new_room, layout=layout, source=None,
                       search=follow_walls(room.search, room.size_m, new_room.size_m),
                       subs_search=follow_walls_subs(room.subs_search, room.size_m, new_room.size_m))

    out = []
    for j, p in enumerate(params):
        uj, bu = float(u[j]), p.bound
        at_bound = abs(uj) >= bu - 1e-3
        if p.kind == "absorption":
            idx = list(p.key)
            a0 = float(np.sum(alpha_ref[idx] * areas[idx]) / np.sum(areas[idx]))
            a1 = float(np.sum(np.minimum(alpha_ref[idx] * math.exp(uj * p.scale), _MAX_ALPHA) * areas[idx])
                       / np.sum(areas[idx]))
            out.append(FitParameter(p.name, p.unit, a0, a1, a0 * math.exp(-bu * p.scale),
                                    min(a0 * math.exp(bu * p.scale), _MAX_ALPHA), a1 * p.scale * se_u[j],
                                    at_bound, p.kind, a1 * p.scale * se_data_u[j]))
        elif p.kind == "lowcut":
            n = spk_names[p.key[0]]
            v0 = float(speakers[n].lowcut_hz)
            v1 = v0 * math.exp(uj * p.scale)
            out.append(FitParameter(p.name, p.unit, v0, v1, v0 * math.exp(-bu * p.scale),
                                    v0 * math.exp(bu * p.scale), v1 * p.scale * se_u[j], at_bound, p.kind,
                                    v1 * p.scale * se_data_u[j]))
        else:
            if p.kind == "size":
                v0 = float(size0[p.key[0]])
            elif p.kind == "speaker":
                v0 = float(spk0[p.key])
            else:
                v0 = float(mic0[p.key])
            out.append(FitParameter(p.name, p.unit, v0, v0 + uj * p.scale, v0 - bu * p.scale, v0 + bu * p.scale,
                                    p.scale * se_u[j], at_bound, p.kind, p.scale * se_data_u[j]))

    new_room, narrowing = narrow_uncertainty(room, new_room, out, success, f_ref)
    return FitResult(
        room=new_room, parameters=tuple(out), freq_hz=centres if fraction else f, measured_db=meas,
        before_db=pred_before + off_before[:, None], after_db=pred_after + off_after[:, None],
        level_offsets_db=off_after, error_before=fit_error(d_before), error_after=fit_error(d_after),
        mic_positions_m=mic_fit, iterations=state["iter"], evaluations=state["calls"], success=success,
        message="; ".join(m for m in (band_note, message) if m), reference_hz=f_ref,
        labels=tuple(t.label for t in targets), uncertainty=narrowing)


def _lognormal_rel(sigma_ln):
    """Relative sd of a log-normal factor whose log-space sd is ``sigma_ln``: ``sqrt(exp(s^2) - 1)``."""
    s2 = float(sigma_ln) ** 2
    return math.inf if s2 > 700.0 else math.sqrt(math.expm1(s2))  # beyond exp's range: unbounded


def narrow_uncertainty(room, fitted_room, parameters, success=True, reference_hz=63.245553203367585):
    """The fitted room with the uncertainty the fit can justify, and a summary of the change.

    Parameters
    ----------
    room : Room
        The room file's model (its ``uncertainty`` is what the fit was given).
    fitted_room : Room
        :func:`fit_room`'s calibrated room.
    parameters : sequence of FitParameter
    success : bool
        Whether the fit converged; a fit that did not narrows nothing.
    reference_hz : float
        Frequency of the absorption values in ``parameters`` (:attr:`FitResult.reference_hz`;
        default that of a 20-200 Hz fit, sqrt(20 x 200) Hz).

    Returns
    -------
    (Room, dict)
        ``fitted_room`` with a narrowed ``uncertainty`` and per-surface ranges, and
        ``{"given", "narrowed", "surfaces"}`` (see :class:`FitResult`).

    Notes
    -----
    Nothing is made narrower than the standard error the measurements alone support
    (:attr:`FitParameter.data_std_error`: the Gauss-Newton error of :func:`fit_room`, Notes,
    without the prior rows, in quadrature with the distance the prior's pull holds the
    parameter from where the data alone would put it (one Gauss-Newton step), so that the pull
    toward the file's values cannot make the file look better known than the data show) nor
    wider than given, and a parameter that stopped at a bound or has no finite error narrows
    nothing:

    * ``size_m``: the largest of the three fitted dimensions' errors, when all three were fitted;
    * each fitted surface's absorption: the fitted group factor's log-space error ``s``
      (relative sd ``sqrt(exp(s^2) - 1)``), divided by ``sqrt(sum w_i^2)`` with ``w_i`` the
      surfaces' shares of the group's absorption area, so that the group's total absorption,
      drawn as independent factors per surface, spreads as much as the fit allows (the fit
      tells the group's total, not how it splits between the surfaces). Written as each
      surface's own ``absorption_rel``;
    * ``position_m`` and ``temperature_c``: unchanged (the seat is not fitted, and one figure
      holds for every position).
    """
    u = room.uncertainty
    size_m = u.size_m
    rels = {}
    if success:
        sizes = [p for p in parameters if p.kind == "size"]
        if len(sizes) == 3 and not any(p.at_bound for p in sizes) and \
                all(math.isfinite(p.data_std_error) for p in sizes):
            size_m = min(u.size_m, max(p.data_std_error for p in sizes))
        areas = room.surface_areas_m2
        for p in parameters:
            if p.kind != "absorption":
                continue
            idx = [WALLS.index(w) for w in p.name.removeprefix("absorption ").split("+")]
            given = {WALLS[i]: u.surface_rel(room.surfaces[i]) for i in idx}
            if p.at_bound or not (math.isfinite(p.data_std_error) and p.value > 0):
                rels.update({w: (g, g) for w, g in given.items()})
                continue
            rel_group = _lognormal_rel(p.data_std_error / p.value)
            a = np.array([room.surfaces[i].absorption_at(reference_hz)[()] for i in idx]) * areas[idx]
            w = a / a.sum() if a.sum() > 0 else np.full(len(idx), 1.0 / len(idx))
            rel_each = rel_group / math.sqrt(float(np.sum(w**2)))
            rels.update({wall: (g, min(g, rel_each)) for wall, g in given.items()})
    surfaces = tuple(replace(s, absorption_rel=float(rels[s.name][1])) if s.name in rels else s
                     for s in fitted_room.surfaces)
    narrowed = replace(u, size_m=float(size_m))
    summary = {"given": u.to_dict(), "narrowed": narrowed.to_dict(),
               "surfaces": {w: {"absorption_rel_given": g, "absorption_rel": n} for w, (g, n) in rels.items()}}
    return replace(fitted_room, surfaces=surfaces, uncertainty=narrowed), summary


@dataclass(frozen=True)
class EffectiveSize:
    """The room's effective dimensions, as the model fitted to measurements sees them.

    The one estimate of the effective dimensions: ``compare`` (against a prediction) and
    ``fit`` both report it, from :func:`estimate_effective_size` and :func:`effective_size`,
    so they give the same figures for the same measurements and options.

    Attributes
    ----------
    size_m : tuple of float
        Effective length, width and height, m.
    file_size_m : tuple of float
        The room file's dimensions, m.
    std_error_m : tuple of float
        Approximate standard errors, m (0 for a dimension that was not fitted).
    at_bound : tuple of bool
        The fit stopped at the size tolerance: the data pull further.
    fitted : bool
        False when the dimensions could not be read (band data, or a zero size tolerance);
        ``size_m`` is then the file's.
    note : str
        Why the dimensions were not fitted, or "".
    """

    size_m: tuple
    file_size_m: tuple
    std_error_m: tuple
    at_bound: tuple
    fitted: bool
    note: str = ""

    @property
    def change(self):
        """Relative change of each dimension, ``size / file_size - 1``."""
        return tuple(a / b - 1.0 for a, b in zip(self.size_m, self.file_size_m))

    def to_dict(self):
        """JSON-ready values (the ``effective_size`` key of ``compare --json`` and ``fit --json``)."""
        return {"size_m": list(self.size_m), "file_size_m": list(self.file_size_m),
                "std_error_m": list(self.std_error_m), "at_bound": list(self.at_bound),
                "relative_change": list(self.change), "fitted": self.fitted, "note": self.note}


def effective_size(result, room):
    """The :class:`EffectiveSize` of a :class:`FitResult` of ``room`` (the room that was fitted)."""
    sizes = {p.name: p for p in result.parameters if p.kind == "size"}
    file_size = tuple(float(v) for v in room.size_m)
    out, se, bound = [], [], []
    for a, nm in enumerate(("length", "width", "height")):
        p = sizes.get(nm)
        out.append(file_size[a] if p is None else float(p.value))
        se.append(0.0 if p is None else float(p.std_error))
        bound.append(False if p is None else bool(p.at_bound))
    note = ""
    if not sizes:
        note = ("band levels cannot resolve the modes that tell the dimensions" if "band data" in result.message
                else "the dimensions were held fixed (size tolerance 0)")
    return EffectiveSize(tuple(out), file_size, tuple(se), tuple(bound), bool(sizes), note)


def estimate_effective_size(room, targets, **options):
    """Estimate the effective dimensions from measured curves: the calibration of :func:`fit_room`.

    Parameters
    ----------
    room : Room
    targets : sequence of FitTarget
        Each measured curve with its speaker and microphone position (not averaged: each
        position is its own target, as in ``fit``).
    **options
        Passed to :func:`fit_room`; its defaults are the ``fit`` command's, so that
        ``compare`` and ``fit`` on the same files report the same dimensions.

    Returns
    -------
    EffectiveSize, FitResult

    Notes
    -----
    The dimensions are fitted together with the absorption, the positions and the
    roll-off, because each of them moves peaks too: a ratio of single mode frequencies
    (an axial mode at ``n c / 2L``, Rayleigh) reads a shift of the smoothed peaks that
    damping and the neighbouring modes also cause, and on the synthetic room of
    tests/analysis/test_effective_size.py it overstates a 3 % longer room.
    """
    result = fit_room(room, targets, **options)
    return effective_size(result, room), result


def before_band(room, result, targets, *, smoothing=12, absolute=False, method=DEFAULT_METHOD, cutoff_factor=2.0,
                band_hz=(20.0, 200.0), n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED, uncertainty=None):
    """10th, 50th and 90th percentiles of the fit's 'before' curves over rooms drawn from ``room.uncertainty``.

    Each drawn room (:func:`roommodes.analysis.uncertainty.ensemble_levels`, speakers and
    microphone positions drawn with it) gives every target's predicted level on the fit's
    grid, smoothed as the fit smooths and, unless ``absolute``, shifted by the fit's own
    alignment (minus the mean dB difference to the smoothed measurement), as the fit's
    'before' curve is.

    Parameters
    ----------
    room : Room
        The room file the fit started from.
    result : FitResult
        From :func:`fit_room` on ``room`` and ``targets``; not for band levels.
    targets : sequence of FitTarget
    smoothing, absolute, method, cutoff_factor, band_hz
        As given to :func:`fit_room`.
    n_samples, seed : int
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.

    Returns
    -------
    ndarray (3, T, F)
        The percentiles (10, 50, 90) per target on ``result.freq_hz``, dB.
    """
    if any(t.band_fraction for t in targets):
        raise ValueError("a band of the model over drawn rooms needs fine-resolution measurements (impulse "
                         "responses or frequency-response files), not band levels")
    f = np.asarray(result.freq_hz, dtype=float)
    names = [s.name for s in room.layout.speakers]
    pts = np.array([t.position_m for t in targets], dtype=float)
    opts = _solver_options(method, cutoff_factor, band_hz[1])
    lv = ensemble_levels(room, f, points_m=pts, n_samples=n_samples, seed=seed, method=method,
                         uncertainty=uncertainty, **opts)
    curves = np.empty((lv.shape[0], len(targets), f.size))
    for k, t in enumerate(targets):
        s = names.index(t.channel)
        for i in range(lv.shape[0]):
            cv = smooth_db(f, lv[i, s, k], smoothing)
            curves[i, k] = cv if absolute else cv - np.mean(cv - result.measured_db[k])
    return np.percentile(curves, [10.0, 50.0, 90.0], axis=0)


def after_band(result, targets, **options):
    """10th, 50th and 90th percentiles of the fit's 'after' curves over rooms drawn around the calibrated room.

    :func:`before_band` on ``result.room`` (the calibrated room, whose ``uncertainty`` is the
    one the fit narrowed) with the targets at the fitted microphone positions, so that with
    no uncertainty the band collapses onto ``result.after_db``.

    Parameters
    ----------
    result : FitResult
    targets : sequence of FitTarget
        As given to :func:`fit_room`.
    **options
        As for :func:`before_band` (``smoothing``, ``absolute``, ``method``, ``cutoff_factor``,
        ``band_hz``, ``n_samples``, ``seed``, ``uncertainty``: default the narrowed one).

    Returns
    -------
    ndarray (3, T, F)
    """
    moved = [replace(t, position_m=tuple(float(v) for v in m)) for t, m in zip(targets, result.mic_positions_m)]
    return before_band(result.room, result, moved, **options)
