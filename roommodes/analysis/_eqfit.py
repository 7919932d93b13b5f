"""Numerical core of :mod:`roommodes.eq`: biquad formulas, responses and the fits.

Everything here works on plain arrays; validation, result objects and the
documented public API live in :mod:`roommodes.eq`, which re-exports what users need.

Biquads follow R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad filter
coefficients" (W3C Audio Working Group note), with ``A = 10**(gain_db/40)``,
``w0 = 2 pi f0 / fs`` and ``alpha = sin(w0) / (2 Q)``.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares, minimize_scalar

#: Filter kinds known to the coefficient and response functions.
FILTER_TYPES = ("peaking", "low_shelf", "high_shelf", "highpass")

_TINY = 1e-30


# ----------------------------------------------------------------------------------------
# Coefficients and responses
# ----------------------------------------------------------------------------------------
def biquad_rows(kind, freq_hz, gain_db, q, sample_rate):
    """Cookbook biquads as normalised sos rows ``[b0, b1, b2, 1, a1, a2]``.

    ``freq_hz``, ``gain_db`` and ``q`` broadcast against each other; the result has
    their broadcast shape plus a last axis of 6. For shelves ``q`` is the Cookbook
    shelf Q (``alpha = sin(w0) / (2 Q)``); ``gain_db`` is ignored for ``highpass``.
    """
    f0, g, qq = np.broadcast_arrays(
        np.asarray(freq_hz, float), np.asarray(gain_db, float), np.asarray(q, float)
    )
    a_lin = 10.0 ** (g / 40.0)
    w0 = 2.0 * np.pi * f0 / float(sample_rate)
    cw, sw = np.cos(w0), np.sin(w0)
    alpha = sw / (2.0 * qq)
    if kind == "peaking":
        b = (1 + alpha * a_lin, -2 * cw, 1 - alpha * a_lin)
        a = (1 + alpha / a_lin, -2 * cw, 1 - alpha / a_lin)
    elif kind in ("low_shelf", "high_shelf"):
        sa = 2.0 * np.sqrt(a_lin) * alpha
        ap, am = a_lin + 1.0, a_lin - 1.0
        if kind == "low_shelf":
            b = (a_lin * (ap - am * cw + sa), 2 * a_lin * (am - ap * cw),
                 a_lin * (ap - am * cw - sa))
            a = (ap + am * cw + sa, -2 * (am + ap * cw), ap + am * cw - sa)
        else:
            b = (a_lin * (ap + am * cw + sa), -2 * a_lin * (am + ap * cw),
                 a_lin * (ap + am * cw - sa))
            a = (ap - am * cw + sa, 2 * (am - ap * cw), ap - am * cw - sa)
    elif kind == "highpass":
        b = ((1 + cw) / 2, -(1 + cw), (1 + cw) / 2)
        a = (1 + alpha, -2 * cw, 1 - alpha)
    else:
        raise ValueError(f"filter type must be one of {FILTER_TYPES}, got {kind!r}")
    a0 = a[0]
    return np.stack([b[0] / a0, b[1] / a0, b[2] / a0, np.ones_like(a0), a[1] / a0, a[2] / a0],
                    axis=-1)


def sos_response(sos, freq_hz, sample_rate):
    """Complex response of sos rows ``(..., 6)`` at ``freq_hz`` (F,): shape ``(..., F)``.

    ``H = (b0 + b1 z^-1 + b2 z^-2) / (a0 + a1 z^-1 + a2 z^-2)`` at ``z = exp(j 2 pi f / fs)``.
    """
    s = np.asarray(sos, float)
    z1 = np.exp(-2j * np.pi * np.asarray(freq_hz, float) / float(sample_rate))
    s = s[..., None, :]
    num = s[..., 0] + z1 * (s[..., 1] + z1 * s[..., 2])
    den = s[..., 3] + z1 * (s[..., 4] + z1 * s[..., 5])
    return num / den


def analog_response(kind, freq_hz, gain_db, q, f):
    """Cookbook analog prototype ``H(s)`` at ``s = j f / f0`` (the limit ``fs -> inf``).

    Parameters broadcast as in :func:`biquad_rows`; ``f`` (F,) is appended as last axis.
    """
    f0, g, qq = np.broadcast_arrays(
        np.asarray(freq_hz, float), np.asarray(gain_db, float), np.asarray(q, float)
    )
    a_lin = 10.0 ** (g / 40.0)[..., None]
    qq = qq[..., None]
    s = 1j * np.asarray(f, float) / f0[..., None]
    if kind == "peaking":
        return (s * s + s * (a_lin / qq) + 1) / (s * s + s / (a_lin * qq) + 1)
    if kind == "low_shelf":
        r = np.sqrt(a_lin) / qq
        return a_lin * (s * s + r * s + a_lin) / (a_lin * s * s + r * s + 1)
    if kind == "high_shelf":
        r = np.sqrt(a_lin) / qq
        return a_lin * (a_lin * s * s + r * s + 1) / (s * s + r * s + a_lin)
    if kind == "highpass":
        return (s * s) / (s * s + s / qq + 1) + 0 * a_lin
    raise ValueError(f"filter type must be one of {FILTER_TYPES}, got {kind!r}")


def response(kind, freq_hz, gain_db, q, f, sample_rate):
    """Complex response: digital at ``sample_rate``, or the analog prototype if ``None``."""
    if sample_rate is None:
        return analog_response(kind, freq_hz, gain_db, q, f)
    return sos_response(biquad_rows(kind, freq_hz, gain_db, q, sample_rate), f, sample_rate)


def response_db(kind, freq_hz, gain_db, q, f, sample_rate):
    """``20 log10 |H|`` of :func:`response`."""
    h = response(kind, freq_hz, gain_db, q, f, sample_rate)
    return 10.0 * np.log10(np.maximum(np.abs(h) ** 2, _TINY))


def shelf_q_from_slope(slope, gain_db):
    """Cookbook shelf Q from the shelf slope S: ``1/Q = sqrt((A + 1/A)(1/S - 1) + 2)``."""
    a_lin = 10.0 ** (np.asarray(gain_db, float) / 40.0)
    return 1.0 / np.sqrt((a_lin + 1.0 / a_lin) * (1.0 / np.asarray(slope, float) - 1.0) + 2.0)


def shelf_slope_from_q(q, gain_db):
    """Inverse of :func:`shelf_q_from_slope`: ``S = 1 / ((1/Q^2 - 2) / (A + 1/A) + 1)``."""
    a_lin = 10.0 ** (np.asarray(gain_db, float) / 40.0)
    return 1.0 / ((1.0 / np.asarray(q, float) ** 2 - 2.0) / (a_lin + 1.0 / a_lin) + 1.0)


# ----------------------------------------------------------------------------------------
# Cascades and their maximum
# ----------------------------------------------------------------------------------------
def cascade_db(specs, f, sample_rate):
    """Sum in dB of filters given as ``(kind, freq_hz, gain_db, q)`` tuples, at ``f``."""
    f = np.asarray(f, float)
    total = np.zeros_like(f)
    for kind, f0, g, q in specs:
        total = total + response_db(kind, f0, g, q, f, sample_rate)
    return total


def log_grid(lo_hz, hi_hz, per_octave):
    """Log-spaced grid including both ends."""
    n = max(int(np.ceil(np.log2(hi_hz / lo_hz) * per_octave)), 1)
    return lo_hz * (hi_hz / lo_hz) ** (np.arange(n + 1) / n)


def _local_maxima(f, c, count):
    """Return the indices of the ``count`` highest local maxima of ``c`` (ends included)."""
    interior = np.flatnonzero((c[1:-1] >= c[:-2]) & (c[1:-1] >= c[2:])) + 1
    cands = np.concatenate([interior, [0, f.size - 1]])
    return cands[np.argsort(c[cands])[::-1][:count]]


def _parabola_peak(f, c, i):
    """Vertex of the parabola through three grid points (in ln f) around index ``i``."""
    if i == 0 or i == f.size - 1:
        return float(c[i]), float(f[i])
    u = np.log(f[i - 1:i + 2])
    y = c[i - 1:i + 2]
    den = (u[0] - u[1]) * (u[0] - u[2]) * (u[1] - u[2])
    a = (u[2] * (y[1] - y[0]) + u[1] * (y[0] - y[2]) + u[0] * (y[2] - y[1])) / den
    b = (u[2] ** 2 * (y[0] - y[1]) + u[1] ** 2 * (y[2] - y[0]) + u[0] ** 2 * (y[1] - y[2])) / den
    if a >= 0:
        return float(c[i]), float(f[i])
    uv = np.clip(-b / (2 * a), u[0], u[2])
    cc = y[1] - a * u[1] ** 2 - b * u[1]
    return float(max(a * uv**2 + b * uv + cc, c[i])), float(np.exp(uv))


def cascade_max(specs, sample_rate, lo_hz, hi_hz, per_octave=192, exact=True):
    """Maximum of the cascade in dB over ``[lo_hz, hi_hz]`` and where it occurs.

    A dense log grid finds the best few local maxima; each is refined by a bounded
    scalar search in log frequency between its grid neighbours (``exact``) or by a
    parabola through the three grid points around it.
    """
    if not specs:
        return 0.0, float("nan")
    f = log_grid(lo_hz, hi_hz, per_octave)
    c = cascade_db(specs, f, sample_rate)
    cands = _local_maxima(f, c, 6 if exact else 3)
    best_db, best_f = float(c[cands[0]]), float(f[cands[0]])
    for i in cands:
        if i in (0, f.size - 1):
            continue
        if not exact:
            m, fm = _parabola_peak(f, c, i)
            if m > best_db:
                best_db, best_f = m, fm
            continue
        lo, hi = np.log(f[i - 1]), np.log(f[i + 1])
        res = minimize_scalar(lambda u: -cascade_db(specs, [np.exp(u)], sample_rate)[0],
                              bounds=(lo, hi), method="bounded",
                              options={"xatol": 1e-10})
        if -res.fun > best_db:
            best_db, best_f = float(-res.fun), float(np.exp(res.x))
    return best_db, best_f


def log_weights(f):
    """Trapezoid weights in ln f, normalised to mean 1 (uniform weight per octave)."""
    u = np.log(np.asarray(f, float))
    if u.size < 2:
        return np.ones_like(u)
    d = np.diff(u)
    w = np.zeros_like(u)
    w[:-1] += d / 2
    w[1:] += d / 2
    return w / w.mean()


def run_width_octaves(f, e, i, level):
    """Width (octaves) of the run around index ``i`` where ``e`` is beyond ``level``.

    "Beyond" means on the side of ``e[i]``'s sign; edges are interpolated linearly in
    log f.
    """
    sign = 1.0 if e[i] >= 0 else -1.0
    v = sign * np.asarray(e, float) - abs(level)
    u = np.log2(np.asarray(f, float))
    lo = i
    while lo > 0 and v[lo - 1] >= 0:
        lo -= 1
    hi = i
    while hi < len(v) - 1 and v[hi + 1] >= 0:
        hi += 1
    u_lo = u[lo] if lo == 0 else u[lo] - (u[lo] - u[lo - 1]) * v[lo] / (v[lo] - v[lo - 1])
    u_hi = u[hi] if hi == len(v) - 1 else u[hi] + (u[hi + 1] - u[hi]) * v[hi] / (v[hi] - v[hi + 1])
    return float(u_hi - u_lo)


# ----------------------------------------------------------------------------------------
# Limits shared by the three fits
# ----------------------------------------------------------------------------------------
class Limits:
    """Where and how much the combined curve may boost, checked on a dense grid.

    ``noboost`` is a list of ``(lo_hz, hi_hz)`` intervals where the combined curve must
    stay at or below ``tol_db``; everywhere in ``[span_lo, span_hi]`` it must stay at or
    below ``max_boost_db``. Above ``band`` the curve should stay near 0 dB (rows of
    weight ``above_weight`` relative to in-band error rows of a fit grid with steps of
    ``fit_step_oct`` octaves); below it a boost costs ``below_boost_cost`` as in band.
    Inside the no-boost intervals a cut costs like a deviation above the band (weight
    ``above_weight``): cutting into a cancellation null only deepens it.

    ``ceiling`` ``(freq_hz, ceiling_db)``, optional: a frequency-dependent upper limit on
    the combined curve over ``freq_hz[0]..freq_hz[-1]`` (interpolated linearly in log
    frequency), held like the other limits. A correction uses it so that no boost lifts
    any part of the curve further above the target than it already was.
    """

    def __init__(self, max_boost_db, noboost, tol_db, span_lo, span_hi, sample_rate,
                 band=None, fit_step_oct=1.0 / 48, above_weight=0.5, below_boost_cost=0.02,
                 weight=30.0, per_octave=24, ceiling=None):
        self.max_boost_db = float(max_boost_db)
        self.noboost = [(float(a), float(b)) for a, b in noboost]
        self.tol_db = float(tol_db)
        self.span = (float(span_lo), float(span_hi))
        self.sample_rate = sample_rate
        self.weight = float(weight)
        grid = [log_grid(span_lo, span_hi, per_octave)]
        for a, b in self.noboost:
            grid.append(log_grid(a, b, per_octave) if b > a else np.array([a]))
        self.ceiling = None
        if ceiling is not None:
            cf, cd = (np.asarray(v, float) for v in ceiling)
            self.ceiling = (cf, cd)
            grid.append(cf)
        self.f = np.unique(np.concatenate(grid))
        self.ceil_db = self.ceiling_at(self.f)
        self.nb = np.zeros(self.f.size, bool)
        for a, b in self.noboost:
            self.nb |= (self.f >= a * (1 - 1e-12)) & (self.f <= b * (1 + 1e-12))
        above = np.zeros(self.f.size, bool)
        below = np.zeros(self.f.size, bool)
        if band is not None:
            above = self.f > band[1] * (1 + 1e-9)
            below = self.f < band[0] * (1 - 1e-9)
        # one row per grid point, each weighing like (1/per_octave)/fit_step_oct fit rows
        row_w = np.sqrt((1.0 / per_octave) / fit_step_oct)
        self.above_idx = np.flatnonzero(above)
        self.below_idx = np.flatnonzero(below)
        self.above_w = row_w * np.sqrt(above_weight)
        self.nb_idx = np.flatnonzero(self.nb)
        self.below_w = row_w * np.sqrt(below_boost_cost)
        self.set_check_span(span_lo, span_hi)

    def penalty(self, curve_db):
        """Residual rows for the limits and the out-of-band curve (``curve_db`` on ``self.f``).

        One row per grid point and limit, ``weight * excess``; points in a no-boost
        interval also ``above_w * min(curve, 0)``; points above the band one
        row ``above_w * curve`` each, points below it ``below_w * max(curve, 0)``.
        """
        over = np.maximum(curve_db - self.max_boost_db, 0.0)
        nb = np.maximum(curve_db[self.nb] - self.tol_db, 0.0)
        ceil = np.maximum(curve_db - self.ceil_db, 0.0)
        return np.concatenate([self.weight * over, self.weight * nb, self.weight * ceil,
                               self.above_w * np.minimum(curve_db[self.nb_idx], 0.0),
                               self.above_w * curve_db[self.above_idx],
                               self.below_w * np.maximum(curve_db[self.below_idx], 0.0)])

    def ceiling_at(self, f):
        """The ceiling (dB) at ``f``: interpolated inside its range, ``inf`` outside."""
        f = np.asarray(f, float)
        if self.ceiling is None:
            return np.full(f.shape, np.inf)
        cf, cd = self.ceiling
        out = np.interp(np.log(f), np.log(cf), cd)
        out[(f < cf[0] * (1 - 1e-12)) | (f > cf[-1] * (1 + 1e-12))] = np.inf
        return out

    def set_check_span(self, lo_hz, hi_hz, per_octave=192):
        """Grid on which :meth:`violation` looks for excess boost."""
        self.check_span = (float(lo_hz), float(hi_hz))
        grids = [log_grid(lo_hz, hi_hz, per_octave)]
        for a, b in self.noboost:
            grids.append(log_grid(a, b, 2 * per_octave) if b > a else np.array([a]))
        self._check_f = grids
        self._ceil_f = None
        if self.ceiling is not None:
            cf = self.ceiling[0]
            self._ceil_f = np.unique(np.concatenate([log_grid(cf[0], cf[-1], per_octave), cf]))
            self._ceil_db = self.ceiling_at(self._ceil_f)

    def ceiling_excess(self, specs):
        """Largest excess (dB) of the cascade over the ceiling; ``-inf`` without one."""
        if self._ceil_f is None or not specs:
            return -np.inf
        return float(np.max(cascade_db(specs, self._ceil_f, self.sample_rate) - self._ceil_db))

    def violation(self, specs, exact=False):
        """Largest excess over either limit (dB, <= 0 when both hold).

        The fast form refines grid maxima by parabolas; ``exact`` uses
        :func:`cascade_max`.
        """
        if not specs:
            return -np.inf
        if exact:
            top, _ = cascade_max(specs, self.sample_rate, *self.check_span)
            worst = top - self.max_boost_db
            for a, b in self.noboost:
                m = (cascade_max(specs, self.sample_rate, a, b, per_octave=384)[0] if b > a
                     else float(cascade_db(specs, [a], self.sample_rate)[0]))
                worst = max(worst, m - self.tol_db)
            return max(worst, self.ceiling_excess(specs))
        grids = self._check_f
        c = cascade_db(specs, np.concatenate(grids), self.sample_rate)
        worst = -np.inf
        start = 0
        for n, g in enumerate(grids):
            cg = c[start:start + g.size]
            start += g.size
            if g.size < 3:
                m = float(np.max(cg))
            else:
                m = max(_parabola_peak(g, cg, i)[0] for i in _local_maxima(g, cg, 3))
            worst = max(worst, m - (self.max_boost_db if n == 0 else self.tol_db))
        return max(worst, self.ceiling_excess(specs))

    def in_noboost(self, f_hz):
        """Whether ``f_hz`` lies in one of the no-boost intervals."""
        return any(a <= f_hz <= b for a, b in self.noboost)

    def enforce(self, specs, boost_idx):
        """Scale the boosting gains down until both limits hold.

        The gains at ``boost_idx`` are multiplied by the largest factor in [0, 1] for
        which both limits hold (bisection to 1e-6, then checked with the exact maximum).

        Returns the new specs and the factor (1.0 when nothing had to change).
        """
        specs = list(specs)
        if not boost_idx or self.violation(specs, exact=True) <= 1e-9:
            return specs, 1.0

        def scaled(factor):
            out = list(specs)
            for k in boost_idx:
                kind, f0, g, q = out[k]
                out[k] = (kind, f0, g * factor, q)
            return out

        lo, hi = 0.0, 1.0
        while hi - lo > 1e-6:
            mid = 0.5 * (lo + hi)
            if self.violation(scaled(mid)) <= 1e-9:
                lo = mid
            else:
                hi = mid
        while lo > 0 and self.violation(scaled(lo), exact=True) > 1e-9:
            lo = max(lo - 1e-4, 0.0)
        return scaled(lo), lo


# ----------------------------------------------------------------------------------------
# Parametric fit
# ----------------------------------------------------------------------------------------
def _unpack(x):
    """(f0, gain, Q) of peaking filters from the fit's vector (log f0, gain, log Q per filter)."""
    x = x.reshape(-1, 3)
    return np.exp(x[:, 0]), x[:, 1], np.exp(x[:, 2])


def _peaking_objective(f, dev, w, limits, sqrt_bc, sqrt_gc, sample_rate):
    """The curves, residual rows and cost of a set of peaking filters: weighted deviation after
    correction, the no-harm limits, a price on boost, and (optionally) a small price on gains."""
    def curves(x, grid):
        if not x.size:
            return np.zeros(np.size(grid))
        f0, g, q = _unpack(x)
        return response_db("peaking", f0, g, q, grid, sample_rate).sum(axis=0)

    def resid(x, gain_rows=True):
        c = curves(x, f)
        cd = curves(x, limits.f)
        rows = [w * (dev + c), limits.penalty(cd), sqrt_bc * w * np.maximum(c, 0.0)]
        if gain_rows:
            rows.append(sqrt_gc * x.reshape(-1, 3)[:, 1])
        return np.concatenate(rows)

    def cost(x):
        r = resid(x)
        return float(r @ r)

    return curves, resid, cost


def fit_peaking(f, dev, limits, f_bounds, q_range, gain_bounds, max_filters, sample_rate,
                boost_cost=0.02, boost_preference=0.7, stop_db=1.0, weights=None, gain_cost=0.003):
    """Greedy-then-joint least-squares fit of peaking filters to cancel ``dev``.

    Parameters
    ----------
    f, dev : ndarray (N,)
        Frequencies (Hz) where the error counts and the deviation ``level - target`` (dB).
    limits : Limits
        Boost limits, enforced by penalty rows during the fit.
    f_bounds, q_range, gain_bounds : (float, float)
        Box bounds on centre frequency (Hz), Q and gain (dB) of each filter.
    max_filters : int
        Upper bound on the number of filters.
    boost_cost : float
        Weight of the residual rows ``sqrt(boost_cost) * max(curve, 0)`` that make
        boosting cost more than cutting.
    boost_preference : float
        Weight (< 1 prefers cuts) of a shortfall when the greedy step picks where to put
        the next filter.
    stop_db : float
        The greedy loop stops once no weighted deviation exceeds this.
    gain_cost : float
        Weight of one row ``sqrt(gain_cost * sum(w^2)) * gain_i`` per filter: a small
        price on every dB of every filter, so that the fit does not sculpt a curve with
        large opposing pairs of filters when a single one does nearly as well.

    Returns
    -------
    specs : list of (kind, f0, gain, q)
    """
    f = np.asarray(f, float)
    dev = np.asarray(dev, float)
    w = np.sqrt(log_weights(f) if weights is None else np.asarray(weights, float))
    lo = np.array([np.log(f_bounds[0]), gain_bounds[0], np.log(q_range[0])])
    hi = np.array([np.log(f_bounds[1]), gain_bounds[1], np.log(q_range[1])])
    sqrt_bc = np.sqrt(boost_cost)
    sqrt_gc = np.sqrt(gain_cost * float(np.sum(w**2)))

    unpack = _unpack
    curves, resid, cost = _peaking_objective(f, dev, w, limits, sqrt_bc, sqrt_gc, sample_rate)

    x = np.zeros(0)
    best_cost = cost_empty = float(np.sum((w * dev) ** 2))
    for _ in range(max_filters):
        c_now = curves(x, f) if x.size else np.zeros_like(f)
        e = dev + c_now
        cd_now = curves(x, limits.f) if x.size else np.zeros_like(limits.f)
        head = np.interp(np.log(f), np.log(limits.f), limits.max_boost_db - cd_now)
        score = np.where(e > 0, e, -e * boost_preference)
        can_boost = (head > 0.5) & np.array([not limits.in_noboost(v) for v in f])
        score = np.where((e < 0) & ~can_boost, 0.0, score)
        i = int(np.argmax(score))
        if score[i] < stop_db:
            break
        g0 = float(np.clip(-e[i], gain_bounds[0], gain_bounds[1]))
        if g0 > 0:
            g0 = min(g0, float(head[i]))
        width = max(run_width_octaves(f, e, i, abs(e[i]) / 2), 0.05)
        q0 = 1.0 / (2.0 * np.sinh(np.log(2) / 2 * width))
        x0 = np.array([np.log(f[i]), g0, np.log(q0)])
        x0 = np.clip(x0, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
        trial = np.concatenate([x, x0])
        n = trial.size // 3
        sol = least_squares(resid, trial, bounds=(np.tile(lo, n), np.tile(hi, n)),
                            method="trf", x_scale=np.tile([0.05, 1.0, 0.2], n), tr_solver="lsmr",
                            max_nfev=200 * n)
        new_cost = cost(sol.x)
        if new_cost > best_cost - 1e-3 * cost_empty:
            break
        x, best_cost = sol.x, new_cost
    x = _merge_twins(x, resid, cost, lo, hi, best_cost)
    if x.size:
        # final polish without the gain price: it chose the filters, it must not bias them
        n = x.size // 3
        x = least_squares(lambda v: resid(v, gain_rows=False), x, bounds=(np.tile(lo, n), np.tile(hi, n)),
                          method="trf", x_scale=np.tile([0.05, 1.0, 0.2], n), tr_solver="lsmr",
                          max_nfev=50 * n).x
    f0, g, q = unpack(x)
    return [("peaking", float(a), float(b), float(c)) for a, b, c in zip(f0, g, q)]


def _merge_twins(x, resid, cost, lo, hi, best_cost, tol=0.02):
    """Replace two filters at nearly the same frequency and Q by one, when the refitted
    cascade is hardly worse (<= 2 % in cost): a table with two identical lines helps no one."""
    while x.size >= 6:
        p = x.reshape(-1, 3)
        pair = next(((i, j) for i in range(len(p)) for j in range(i + 1, len(p))
                     if abs(p[i, 0] - p[j, 0]) < tol and abs(p[i, 2] - p[j, 2]) < 0.3), None)
        if pair is None:
            return x
        i, j = pair
        trial = np.delete(p.copy(), j, axis=0)
        trial[i, 1] = np.clip(p[i, 1] + p[j, 1], lo[1], hi[1])
        n = len(trial)
        sol = least_squares(resid, trial.ravel(), bounds=(np.tile(lo, n), np.tile(hi, n)), method="trf",
                            x_scale=np.tile([0.05, 1.0, 0.2], n), tr_solver="lsmr", max_nfev=100 * n)
        if cost(sol.x) > 1.02 * best_cost + 1e-12:
            return x
        x, best_cost = sol.x, cost(sol.x)
    return x


def bandwidth_to_q(width_octaves):
    """Cookbook Q of a peaking filter whose half-gain bandwidth is ``width_octaves``."""
    return float(1.0 / (2.0 * np.sinh(np.log(2) / 2 * max(float(width_octaves), 1e-3))))


def fit_cuts_and_boosts(f, dev, limits, f_bounds, q_range, gain_bounds, max_filters, sample_rate, *,
                        boostable=(), peaks=(), boost_q_max=2.0, cut_q=None, q_window=1.5,
                        min_cut_octaves=1.0 / 12.0, boost_cost=0.02,
                        boost_preference=0.7, stop_db=1.0, weights=None, gain_cost=0.003,
                        min_gain_db=0.5, min_gain_fraction=0.01):
    """Greedy-then-joint least-squares fit of peaking cuts and boosts, each kept to its role.

    Like :func:`fit_peaking`, but every filter is placed for one feature of the remaining
    deviation and keeps that feature's bounds through the joint refinement:

    * a cut (gain <= 0) sits inside the half-height span of the peak it was placed for,
      with its Q within ``q_window`` of the Q the peak's own bandwidth asks for
      (``cut_q(freq_hz, gain_db, width_octaves) -> (q, basis)``, default: the Cookbook Q of
      the half-height width). The width is that of the peak of the original curve
      (``peaks``: ``(lo_hz, hi_hz, width_octaves)``) the cut lands in, else that of the
      remaining deviation; a remainder narrower than ``min_cut_octaves`` is not cut;
    * a boost (gain >= 0) is placed only inside one of the ``boostable`` ``(lo_hz, hi_hz)``
      intervals, stays inside it, and has a Q of at most ``boost_q_max`` (broad).

    Returns
    -------
    list of (spec, meta)
        ``spec = ("peaking", f0, gain, q)``; ``meta`` a dict with ``role`` ("cut" or
        "boost"), the bounds ``f_hz``, ``q``, ``gain_db`` and ``basis`` (how Q was chosen).
        In rising frequency.
    """
    f = np.asarray(f, float)
    dev = np.asarray(dev, float)
    w = np.sqrt(log_weights(f) if weights is None else np.asarray(weights, float))
    sqrt_bc = np.sqrt(boost_cost)
    sqrt_gc = np.sqrt(gain_cost * float(np.sum(w**2)))
    boostable = [(float(a), float(b)) for a, b in boostable]
    qmin, qmax = float(q_range[0]), float(q_range[1])
    bqmax = min(float(boost_q_max), qmax)
    if cut_q is None:
        def cut_q(f0, g, width):
            return bandwidth_to_q(width), "the peak's half-height width"

    unpack = _unpack

    curves, resid, cost = _peaking_objective(f, dev, w, limits, sqrt_bc, sqrt_gc, sample_rate)

    def solve(x0, lo, hi, fn=resid, nfev=200):
        n = x0.size // 3
        x0 = np.clip(x0, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
        return least_squares(fn, x0, bounds=(lo, hi), method="trf", x_scale=np.tile([0.05, 1.0, 0.2], n),
                             tr_solver="lsmr", max_nfev=nfev * n).x

    def interval_of(v):
        return next(((a, b) for a, b in boostable if a <= v <= b), None)

    def peak_of(v):
        return next((pk for pk in peaks if pk[0] <= v <= pk[1]), None)

    x, lo, hi, metas = np.zeros(0), np.zeros(0), np.zeros(0), []
    best_cost = cost_empty = float(np.sum((w * dev) ** 2))
    tried = np.zeros(f.size, bool)
    lf = np.log2(f)
    for _ in range(3 * max_filters):
        if len(metas) >= max_filters:
            break
        e = dev + curves(x, f)
        cd = curves(x, limits.f)
        room_db = np.minimum(limits.max_boost_db - cd, limits.ceil_db - cd)
        head = np.interp(np.log(f), np.log(limits.f), room_db)
        in_box = np.array([interval_of(v) is not None and not limits.in_noboost(v) for v in f])
        can_boost = (head > 0.5) & in_box & (gain_bounds[1] > 0)
        score = np.where(e > 0, e, np.where(can_boost, -e * boost_preference, 0.0))
        score[tried] = 0.0
        i = int(np.argmax(score))
        if score[i] < stop_db:
            break
        width = max(run_width_octaves(f, e, i, abs(e[i]) / 2), 0.02)
        near = np.abs(lf - lf[i]) <= max(width / 2, 1.0 / 48)
        tried |= near
        if e[i] > 0:
            own = peak_of(float(f[i]))
            if own is None and width < min_cut_octaves:
                continue
            f_start, f_lo, f_hi = float(f[i]), f_bounds[0], f_bounds[1]
            if own is not None:  # one cut per peak of the original curve, Q from its width
                width = own[2]
                tried |= (f >= own[0]) & (f <= own[1])
                if len(own) > 3:  # a peak that runs on past the band's edge: cut the whole peak
                    f_start, f_lo, f_hi = float(own[3]), float(f[0]), float(f[-1])
                    k = int(np.argmin(np.abs(lf - np.log2(f_start))))
                    e_i = max(float(e[k]), float(e[i]))
                else:
                    e_i = float(e[i])
            else:
                e_i = float(e[i])
            g0 = float(max(-e_i, gain_bounds[0]))
            q0, basis = cut_q(f_start, g0, width)
            q0 = float(np.clip(q0, qmin, qmax))
            qb = (max(qmin, q0 / q_window), min(qmax, q0 * q_window))
            fb = (max(f_lo, f_start * 2 ** (-width / 2)), min(f_hi, f_start * 2 ** (width / 2)))
            gb = (float(gain_bounds[0]), 0.0)
            role = "cut"
        else:
            a, b = interval_of(float(f[i]))
            g0 = float(min(-e[i], head[i], gain_bounds[1]))
            q0 = float(np.clip(bandwidth_to_q(width), qmin, bqmax))
            qb = (qmin, bqmax)
            for na, nb in limits.noboost:  # the boost may not wander into a null
                if nb < f[i]:
                    a = max(a, nb)
                elif na > f[i]:
                    b = min(b, na)
            fb = (max(f_bounds[0], a), min(f_bounds[1], b))
            gb = (0.0, float(gain_bounds[1]))
            role, basis = "boost", f"broad boost (Q at most {bqmax:g})"
        if not (fb[1] > fb[0] and qb[1] > qb[0]):
            continue
        lo_k = np.array([np.log(fb[0]), gb[0], np.log(qb[0])])
        hi_k = np.array([np.log(fb[1]), gb[1], np.log(qb[1])])
        x0 = np.array([np.log(f_start if e[i] > 0 else f[i]), g0, np.log(q0)])
        tlo, thi = np.concatenate([lo, lo_k]), np.concatenate([hi, hi_k])
        trial = solve(np.concatenate([x, x0]), tlo, thi)
        new_cost = cost(trial)
        if new_cost > best_cost - min_gain_fraction * cost_empty:
            continue
        if abs(trial[-2]) < min_gain_db:
            continue
        x, lo, hi, best_cost = trial, tlo, thi, new_cost
        metas.append({"role": role, "basis": basis})
    if x.size:
        # final polish without the gain price: it chose the filters, it must not bias them
        x = solve(x, lo, hi, fn=lambda v: resid(v, gain_rows=False), nfev=50)
    f0, g, q = unpack(x)
    out = []
    for k, m in enumerate(metas):
        m = dict(m, f_hz=(float(np.exp(lo[3 * k])), float(np.exp(hi[3 * k]))),
                 gain_db=(float(lo[3 * k + 1]), float(hi[3 * k + 1])),
                 q=(float(np.exp(lo[3 * k + 2])), float(np.exp(hi[3 * k + 2]))))
        out.append((("peaking", float(f0[k]), float(g[k]), float(q[k])), m))
    return sorted(out, key=lambda sm: sm[0][1])


# ----------------------------------------------------------------------------------------
# Shelf fit
# ----------------------------------------------------------------------------------------
def fit_low_shelf(f, dev, limits, f_bounds, slope_range, gain_bounds, sample_rate,
                  boost_cost=0.02, weights=None):
    """Least-squares fit of one Cookbook low shelf (corner, gain, slope S).

    Returns ``(corner_hz, gain_db, slope)``. A grid over the corner (slope 1, gain by
    linear least squares on the unit-gain shape) gives the start; a bounded least-squares
    refinement of all three follows.
    """
    f = np.asarray(f, float)
    dev = np.asarray(dev, float)
    w = np.sqrt(log_weights(f) if weights is None else np.asarray(weights, float))
    sqrt_bc = np.sqrt(boost_cost)

    def curve(p, grid):
        fc, g, s = np.exp(p[0]), p[1], p[2]
        q = shelf_q_from_slope(s, g)
        return response_db("low_shelf", fc, g, q, grid, sample_rate)

    def resid(p):
        c = curve(p, f)
        return np.concatenate([w * (dev + c), limits.penalty(curve(p, limits.f)),
                               sqrt_bc * w * np.maximum(c, 0.0)])

    best = None
    s0 = float(np.clip(1.0, *slope_range))
    for fc in log_grid(f_bounds[0], f_bounds[1], 4):
        for sign in (-1.0, 1.0):
            g_probe = 6.0 * sign
            u = curve([np.log(fc), g_probe, s0], f) / g_probe
            g = -float(np.sum(w**2 * u * dev) / max(np.sum(w**2 * u * u), _TINY))
            g = float(np.clip(g, gain_bounds[0], gain_bounds[1]))
            p = np.array([np.log(fc), g, s0])
            r = resid(p)
            c = float(r @ r)
            if best is None or c < best[0]:
                best = (c, p)
    lo = np.array([np.log(f_bounds[0]), gain_bounds[0], slope_range[0]])
    hi = np.array([np.log(f_bounds[1]), gain_bounds[1], slope_range[1]])
    p0 = np.clip(best[1], lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
    sol = least_squares(resid, p0, bounds=(lo, hi), method="trf",
                        x_scale=[0.05, 1.0, 0.05], tr_solver="lsmr", max_nfev=400)
    return float(np.exp(sol.x[0])), float(sol.x[1]), float(sol.x[2])


# ----------------------------------------------------------------------------------------
# Graphic-EQ fit
# ----------------------------------------------------------------------------------------
def fit_graphic(f, dev, limits, centres_hz, band_q, gain_bounds, sample_rate, start_db,
                boost_cost=0.02, weights=None):
    """Bounded least squares for slider gains of constant-Q peaking bands.

    Returns the gains (dB) at ``centres_hz``. The residual uses the realised band
    responses, so overlapping skirts are accounted for.
    """
    f = np.asarray(f, float)
    dev = np.asarray(dev, float)
    centres = np.asarray(centres_hz, float)
    w = np.sqrt(log_weights(f) if weights is None else np.asarray(weights, float))
    sqrt_bc = np.sqrt(boost_cost)

    def curve(g, grid):
        return response_db("peaking", centres, g, band_q, grid, sample_rate).sum(axis=0)

    def resid(g):
        c = curve(g, f)
        return np.concatenate([w * (dev + c), limits.penalty(curve(g, limits.f)),
                               sqrt_bc * w * np.maximum(c, 0.0)])

    lo = np.full(centres.size, float(gain_bounds[0]))
    hi = np.full(centres.size, float(gain_bounds[1]))
    g0 = np.clip(np.asarray(start_db, float), lo + 1e-9, hi - 1e-9)
    sol = least_squares(resid, g0, bounds=(lo, hi), method="trf", tr_solver="lsmr",
                        max_nfev=100 * centres.size)
    return sol.x
