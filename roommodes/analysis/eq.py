"""Bass correction: biquad filters, graphic-EQ bands, dip classification, fits, headroom.

This module is the pure computational core of room correction. It does not care where a
curve comes from: every design function takes a frequency axis ``freq_hz`` (F,) and a
level ``level_db`` (F,) (a prediction or a measurement) and a target ``target_db`` (F,).

Contents
--------
* Audio EQ Cookbook biquads (peaking, low shelf, high shelf, high-pass) as
  second-order sections, the :class:`Filter` record, bandwidth/Q conversions.
* IEC 61260-1 base-10 band centres and edges with ISO 266 nominal labels.
* Targets (flat, low-frequency tilt, table) aligned to the response's power mean.
* Dip and peak classification (:func:`classify_regions`), with evidence per region.
* Fits: parametric peaking filters (:func:`design_parametric`), one low shelf
  (:func:`design_shelf`), graphic-EQ sliders (:func:`design_graphic`).
* Headroom of the combined curve, maximum clean level at the seat, warnings.
* Export: sos rows at 44.1 / 48 / 96 kHz and a plain-text rendering.

Q convention
------------
``q`` of a peaking filter is the Cookbook Q: the bandwidth ``BW`` (octaves) between
the two frequencies where the gain in dB is half the peak gain satisfies
``1/Q = 2 sinh(ln(2)/2 * BW)`` exactly for the analog prototype (for the digital filter
up to bilinear warping, negligible below 1 kHz at 44.1 kHz and above). Another common
convention measures the bandwidth 3 dB below the peak of a boost (above the floor of a
cut); :func:`q_at_3db_below_peak` converts. For shelves ``q`` is the Cookbook shelf Q
(``alpha = sin(w0)/(2Q)``); :func:`shelf_q_to_slope` and :func:`shelf_slope_to_q`
convert to and from the shelf slope S (S = 1 is the steepest monotonic shelf).

References
----------
.. [1] R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad filter coefficients",
   W3C Audio Working Group note (Audio EQ Cookbook).
.. [2] IEC 61260-1:2014, Electroacoustics - Octave-band and fractional-octave-band
   filters - Part 1: Specifications, clause 5 (base-10 midband frequencies).
.. [3] ISO 266:1997, Acoustics - Preferred frequencies.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np

from ..dsp.bands import BandSet, band_label, iec_bands
from ..dsp.checks import check_range
from ..dsp.response import align_level
from . import _eqfit

__all__ = [
    "FILTER_TYPES",
    "EXPORT_SAMPLE_RATES",
    "REGION_KINDS",
    "STABLE_SHARE",
    "HELD_SAMPLES",
    "held_rule_text",
    "CAUTIONS",
    "Filter",
    "bandwidth_octaves_to_q",
    "q_to_bandwidth_octaves",
    "q_at_3db_below_peak",
    "shelf_slope_to_q",
    "shelf_q_to_slope",
    "peaking_sos",
    "low_shelf_sos",
    "high_shelf_sos",
    "highpass_sos",
    "sos_response",
    "correction_db",
    "cascade_max_db",
    "BandSet",
    "iec_bands",
    "band_label",
    "target_flat",
    "target_tilt",
    "target_from_table",
    "align_target",
    "make_target",
    "Region",
    "Classification",
    "classify_regions",
    "FitError",
    "EqWarning",
    "EqDesign",
    "ShelfDesign",
    "GraphicDesign",
    "design_parametric",
    "design_shelf",
    "design_graphic",
    "Headroom",
    "headroom",
    "CleanLevel",
    "max_clean_spl",
    "full_scale_level",
    "recommended_highpass",
    "vented_boost_warnings",
    "channel_headroom_warnings",
    "sos_export",
    "render_text",
]

FILTER_TYPES = _eqfit.FILTER_TYPES

#: Sample rates of the digital export (Hz).
EXPORT_SAMPLE_RATES = (44100, 48000, 96000)

#: Region labels of :func:`classify_regions`.
REGION_KINDS = ("peak", "broad dip", "narrow null", "ok", "narrow dip")

#: Cautions to show beside every correction (exposure figures: NIOSH REL, 3 dB exchange).
CAUTIONS = (
    "Boosting bass costs amplifier power (x2 for +3 dB, x4 for +6 dB) and cone excursion "
    "(x1.4 for +3 dB, x2 for +6 dB).",
    "Start at a low volume and raise it slowly after loading a correction.",
    "Respect the loudspeaker maker's power and excursion limits; a vented speaker must not "
    "be boosted below its tuning.",
    "Protect your hearing: 85 dBA for 8 h, 94 dBA for 1 h, 100 dBA for 15 min "
    "(NIOSH recommended exposure limits, 3 dB exchange rate).",
)

_SQRT_HALF = float(np.sqrt(0.5))
_LN2 = float(np.log(2.0))

# default classification thresholds (common practice, see classify_regions)
_REGION_THRESHOLD_DB = 1.5
_NARROW_OCTAVES = 1.0 / 3.0
_NULL_DEPTH_DB = 6.0
_DEEP_DB = 15.0
_SPREAD_DB = 6.0
_SPLIT_DB = 3.0
_MIN_BOOST_OCTAVES = 1.0 / 3.0
_BOOST_Q_MAX = 2.0
#: With an ensemble of drawn rooms, a peak is cut only when present in at least this share
#: of them ("most"; see :func:`design_parametric`).
STABLE_SHARE = 0.6
#: Default count of drawn rooms a design is held to (``eq --uncertainty``, docs/eq.md): the kept
#: share of each cut and the median-sized depth are settled well before ``predict``'s
#: percentile tails.
HELD_SAMPLES = 200


def held_rule_text(stable_share=STABLE_SHARE):
    """The rule a design held to drawn rooms follows, in words (every surface that says a
    correction was held to drawn rooms uses this one wording).

    Parameters
    ----------
    stable_share : float
        The share of the drawn rooms a peak must be present in to be cut.

    Returns
    -------
    str
        One sentence-ending clause, starting lower case.
    """
    return (f"a peak is cut only when it is present in at least {stable_share:.0%} of them and its top moves "
            "less than the cut is wide; each filter is sized to their median.")


# ========================================================================================
# Validation helpers
# ========================================================================================
def _finite_float(name, value, lo=None, hi=None, lo_open=False, unit=""):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number, got {value!r}") from None
    bad = not np.isfinite(v)
    if lo is not None:
        bad |= v <= lo if lo_open else v < lo
    if hi is not None:
        bad |= v > hi
    if bad:
        lo_s = "" if lo is None else f"{'>' if lo_open else '>='} {lo:g}{unit}"
        hi_s = "" if hi is None else f"<= {hi:g}{unit}"
        rng = " and ".join(s for s in (lo_s, hi_s) if s)
        raise ValueError(f"{name} must be finite{' and ' + rng if rng else ''}, got {value!r}")
    return v


_pair = check_range


def _grid(freq_hz, name="freq_hz"):
    f = np.asarray(freq_hz, dtype=float)
    if f.ndim != 1 or f.size < 3:
        raise ValueError(
            f"{name} must be a 1-D array of at least 3 frequencies, got shape {f.shape}")
    if not np.all(np.isfinite(f)) or f[0] <= 0:
        raise ValueError(f"{name} must hold finite positive frequencies (Hz)")
    d = np.diff(f)
    if np.any(d <= 0):
        i = int(np.flatnonzero(d <= 0)[0]) + 1
        raise ValueError(
            f"{name} must be strictly rising; entry {i} ({f[i]:g} Hz) follows {f[i - 1]:g} Hz"
        )
    return f


def _curve(values, f, name):
    v = np.asarray(values, dtype=float)
    if v.ndim == 0:
        v = np.full(f.shape, float(v))
    if v.shape != f.shape:
        raise ValueError(f"{name} must have the shape of freq_hz {f.shape}, got {v.shape}")
    return v


def _band(band_hz, f):
    lo, hi = _pair("band_hz", band_hz, lo=0.0, unit=" Hz")
    if lo < f[0] * (1 - 1e-9) or hi > f[-1] * (1 + 1e-9):
        raise ValueError(
            f"band_hz {lo:g}-{hi:g} Hz lies outside the data range {f[0]:g}-{f[-1]:g} Hz"
        )
    sel = (f >= lo * (1 - 1e-12)) & (f <= hi * (1 + 1e-12))
    if sel.sum() < 3:
        raise ValueError(f"band_hz {lo:g}-{hi:g} Hz holds fewer than 3 points of freq_hz")
    return (lo, hi), sel


def _sample_rate(sample_rate, allow_none=True):
    if sample_rate is None and allow_none:
        return None
    return _finite_float("sample_rate", sample_rate, lo=8000.0, hi=1_000_000.0, unit=" Hz")


# ========================================================================================
# Q and bandwidth
# ========================================================================================
def bandwidth_octaves_to_q(bandwidth_octaves):
    """Cookbook Q of a peaking filter from its bandwidth in octaves.

    Parameters
    ----------
    bandwidth_octaves : float or array_like
        Bandwidth between the half-gain (in dB) frequencies, octaves, > 0.

    Returns
    -------
    q : float or ndarray

    Notes
    -----
    ``1/Q = 2 sinh(ln(2)/2 * BW)`` [1]_: 1 octave gives 1.41421, 1/3 octave 4.3185.

    References
    ----------
    .. [1] R. Bristow-Johnson, Audio EQ Cookbook (W3C Audio WG note), definition of BW.
    """
    bw = np.asarray(bandwidth_octaves, dtype=float)
    if np.any(~np.isfinite(bw)) or np.any(bw <= 0) or np.any(bw > 10):
        raise ValueError(f"bandwidth_octaves must be in (0, 10] octaves, got {bandwidth_octaves!r}")
    q = 1.0 / (2.0 * np.sinh(_LN2 / 2.0 * bw))
    return float(q) if q.ndim == 0 else q


def q_to_bandwidth_octaves(q):
    """Bandwidth in octaves of a Cookbook peaking filter of quality ``q``.

    Inverse of :func:`bandwidth_octaves_to_q`: ``BW = (2/ln 2) asinh(1/(2Q))``.
    ``q`` must be in (0, 1000].
    """
    qq = np.asarray(q, dtype=float)
    if np.any(~np.isfinite(qq)) or np.any(qq <= 0) or np.any(qq > 1000):
        raise ValueError(f"q must be in (0, 1000], got {q!r}")
    bw = 2.0 / _LN2 * np.arcsinh(1.0 / (2.0 * qq))
    return float(bw) if bw.ndim == 0 else bw


def q_at_3db_below_peak(q, gain_db):
    """Q in the "3 dB below the peak" convention for a Cookbook peaking filter.

    Parameters
    ----------
    q : float or array_like
        Cookbook Q (half-gain bandwidth convention), > 0.
    gain_db : float or array_like
        Peak gain, dB. The convention needs ``|gain_db| > 3.0103`` dB; smaller gains give
        ``nan``.

    Returns
    -------
    q3 : float or ndarray
        ``1 / (2 sinh(ln2/2 BW3))`` where ``BW3`` is the bandwidth (octaves) between the
        frequencies 3.0103 dB below a boost's peak (above a cut's floor).

    Notes
    -----
    With ``P = 10**(gain_db/20)`` (peak amplitude gain) the analog Cookbook prototype
    ``H(s) = (s^2 + s P^(1/2)/Q + 1) / (s^2 + s/(P^(1/2) Q) + 1)`` has
    ``|H|^2 = (y + P/Q^2) / (y + 1/(P Q^2))`` with ``y = (w - 1/w)^2``. Setting
    ``|H|^2 = P^2/2`` (boost) or ``2 P^2`` (cut) gives
    ``Q3 = Q sqrt(P - 2/P)`` and ``Q3 = Q sqrt(1/P - 2P)`` respectively (derived here from
    the Cookbook prototype).
    """
    qq = np.asarray(q, dtype=float)
    p = 10.0 ** (np.abs(np.asarray(gain_db, dtype=float)) / 20.0)
    with np.errstate(invalid="ignore"):
        arg = p - 2.0 / p  # a cut gives the same expression with P -> 1/P
        q3 = np.where(arg > 0, qq * np.sqrt(np.where(arg > 0, arg, 1.0)), np.nan)
    return float(q3) if q3.ndim == 0 else q3


def shelf_slope_to_q(slope, gain_db):
    """Cookbook shelf Q from shelf slope S: ``1/Q = sqrt((A + 1/A)(1/S - 1) + 2)``.

    ``A = 10**(gain_db/40)``. S = 1 gives Q = 0.7071 at any gain.
    """
    s = _finite_float("slope", slope, lo=0.0, lo_open=True, hi=10.0)
    arg = (10 ** (gain_db / 40) + 10 ** (-gain_db / 40)) * (1 / s - 1) + 2
    if arg <= 0:
        raise ValueError(f"shelf slope S = {s:g} is too steep for {gain_db:g} dB (no real Q)")
    return float(_eqfit.shelf_q_from_slope(s, gain_db))


def shelf_q_to_slope(q, gain_db):
    """Shelf slope S from the Cookbook shelf Q (inverse of :func:`shelf_slope_to_q`)."""
    return float(_eqfit.shelf_slope_from_q(q, gain_db))


# ========================================================================================
# Biquads
# ========================================================================================
def _check_biquad(freq_hz, sample_rate, q):
    fs = _sample_rate(sample_rate, allow_none=False)
    f0 = _finite_float("freq_hz", freq_hz, lo=0.0, lo_open=True, unit=" Hz")
    if f0 >= 0.5 * fs:
        raise ValueError(
            f"freq_hz must be below half the sample rate ({0.5 * fs:g} Hz), got {f0:g}")
    _finite_float("q", q, lo=0.0, lo_open=True, hi=1000.0)
    return f0, fs


def peaking_sos(freq_hz, gain_db, q, sample_rate):
    """Cookbook peaking EQ as a normalised sos row ``[b0, b1, b2, 1, a1, a2]``.

    Parameters
    ----------
    freq_hz : float
        Centre frequency f0, Hz, 0 < f0 < sample_rate/2.
    gain_db : float
        Gain at f0, dB.
    q : float
        Cookbook Q (see module docstring), > 0.
    sample_rate : float
        Hz.

    Returns
    -------
    sos : ndarray, shape (6,)

    Notes
    -----
    ``A = 10^(G/40)``, ``w0 = 2 pi f0/fs``, ``alpha = sin(w0)/(2Q)``;
    ``b = [1 + alpha A, -2 cos w0, 1 - alpha A]``, ``a = [1 + alpha/A, -2 cos w0, 1 - alpha/A]``,
    divided by ``a0`` [1]_.

    References
    ----------
    .. [1] R. Bristow-Johnson, Audio EQ Cookbook (W3C Audio WG note), "peakingEQ".
    """
    f0, fs = _check_biquad(freq_hz, sample_rate, q)
    _finite_float("gain_db", gain_db, lo=-60, hi=60, unit=" dB")
    return _eqfit.biquad_rows("peaking", f0, gain_db, q, fs)


def _shelf_q(slope, q, gain_db):
    if slope is not None and q is not None:
        raise ValueError("give the shelf either a slope S or a q, not both")
    if q is None:
        return shelf_slope_to_q(1.0 if slope is None else slope, gain_db)
    return q


def low_shelf_sos(freq_hz, gain_db, sample_rate, slope=None, q=None):
    """Cookbook low shelf as a normalised sos row; gain ``gain_db`` at DC, half at f0.

    Parameters
    ----------
    freq_hz : float
        Corner (midpoint) frequency, Hz.
    gain_db : float
        Shelf gain, dB.
    sample_rate : float
        Hz.
    slope, q : float, optional
        Shelf slope S (default 1, the steepest monotonic shelf) or the Cookbook shelf Q.

    Notes
    -----
    ``b0 = A[(A+1) - (A-1)cos w0 + 2 sqrt(A) alpha]``, ``b1 = 2A[(A-1) - (A+1)cos w0]``,
    ``b2 = A[(A+1) - (A-1)cos w0 - 2 sqrt(A) alpha]``, ``a0 = (A+1) + (A-1)cos w0 +
    2 sqrt(A) alpha``, ``a1 = -2[(A-1) + (A+1)cos w0]``, ``a2 = (A+1) + (A-1)cos w0 -
    2 sqrt(A) alpha`` (Audio EQ Cookbook, "lowShelf").
    """
    _finite_float("gain_db", gain_db, lo=-60, hi=60, unit=" dB")
    qq = _shelf_q(slope, q, gain_db)
    f0, fs = _check_biquad(freq_hz, sample_rate, qq)
    return _eqfit.biquad_rows("low_shelf", f0, gain_db, qq, fs)


def high_shelf_sos(freq_hz, gain_db, sample_rate, slope=None, q=None):
    """Cookbook high shelf as a normalised sos row; gain ``gain_db`` at Nyquist, half at f0.

    Parameters as :func:`low_shelf_sos` (Audio EQ Cookbook, "highShelf").
    """
    _finite_float("gain_db", gain_db, lo=-60, hi=60, unit=" dB")
    qq = _shelf_q(slope, q, gain_db)
    f0, fs = _check_biquad(freq_hz, sample_rate, qq)
    return _eqfit.biquad_rows("high_shelf", f0, gain_db, qq, fs)


def highpass_sos(freq_hz, q, sample_rate):
    """Cookbook second-order high-pass as a normalised sos row.

    ``b = [(1 + cos w0)/2, -(1 + cos w0), (1 + cos w0)/2]``, ``a = [1 + alpha, -2 cos w0,
    1 - alpha]`` (Audio EQ Cookbook, "HPF"); Q = 0.7071 is a Butterworth section.
    """
    f0, fs = _check_biquad(freq_hz, sample_rate, q)
    return _eqfit.biquad_rows("highpass", f0, 0.0, q, fs)


def sos_response(sos, freq_hz, sample_rate):
    """Complex response of a cascade of sos rows at ``freq_hz``.

    Parameters
    ----------
    sos : array_like, shape (n, 6) or (6,)
        Rows ``[b0, b1, b2, a0, a1, a2]`` (scipy.signal layout).
    freq_hz : array_like, shape (F,)
        Frequencies, Hz.
    sample_rate : float
        Hz.

    Returns
    -------
    h : ndarray, complex, shape (F,)
        Product over rows of ``B(z)/A(z)`` at ``z = exp(j 2 pi f/fs)``.
    """
    fs = _sample_rate(sample_rate, allow_none=False)
    s = np.atleast_2d(np.asarray(sos, dtype=float))
    if s.shape[-1] != 6:
        raise ValueError(f"sos must have rows of 6 coefficients, got shape {s.shape}")
    f = np.asarray(freq_hz, dtype=float)
    return np.prod(_eqfit.sos_response(s, f, fs), axis=0)


# ========================================================================================
# Filter record
# ========================================================================================
@dataclass(frozen=True)
class Filter:
    """One biquad of the Audio EQ Cookbook.

    Attributes
    ----------
    type : str
        ``"peaking"``, ``"low_shelf"``, ``"high_shelf"`` or ``"highpass"``.
    freq_hz : float
        Centre (peaking), corner (shelves: half the gain in dB) or cutoff (high-pass), Hz.
    gain_db : float
        Gain at the centre (peaking) or of the shelf plateau, dB; 0 for ``highpass``.
    q : float
        Cookbook Q (see the module docstring); for shelves the Cookbook shelf Q (use
        :meth:`shelf` to build one from the slope S).
    role : str
        ``"cut"`` or ``"boost"`` for a filter of a correction design, else ``""``.
    basis : str
        How the design chose its Q (e.g. the half-power bandwidth of the mode that causes
        the peak), for the user; ``""`` when not from a design.
    at_limit : tuple of str
        The limits the design left this filter at (Q, gain, frequency), each a phrase for
        the user; empty when it sits inside all of them.
    stability : tuple of (str, float)
        For a design held to an ensemble of drawn rooms (:func:`design_parametric`'s
        ``ensemble_db``): ``samples``, ``present_share`` (share of the rooms in which the
        feature is present near the filter), ``freq_spread_octaves`` (10-90 % range of
        where its top lies), ``bandwidth_octaves`` (the filter's), ``design_gain_db`` (the
        gain the single model asked for) and ``depth_share`` (the gain kept, as a share of
        it). Empty otherwise.
    """

    type: str
    freq_hz: float
    gain_db: float = 0.0
    q: float = _SQRT_HALF
    role: str = field(default="", compare=False)
    basis: str = field(default="", compare=False)
    at_limit: tuple = field(default=(), compare=False)
    stability: tuple = field(default=(), compare=False)

    def __post_init__(self):
        if self.type not in FILTER_TYPES:
            raise ValueError(f"filter type must be one of {FILTER_TYPES}, got {self.type!r}")
        object.__setattr__(self, "freq_hz",
                           _finite_float("freq_hz", self.freq_hz, lo=0.0, lo_open=True, unit=" Hz"))
        object.__setattr__(self, "gain_db",
                           _finite_float("gain_db", self.gain_db, lo=-60.0, hi=60.0, unit=" dB"))
        object.__setattr__(self, "q", _finite_float("q", self.q, lo=0.0, lo_open=True, hi=1000.0))

    @classmethod
    def shelf(cls, type, freq_hz, gain_db, slope=1.0):
        """A low or high shelf from its shelf slope S (Cookbook)."""
        if type not in ("low_shelf", "high_shelf"):
            raise ValueError(f"shelf type must be 'low_shelf' or 'high_shelf', got {type!r}")
        return cls(type, freq_hz, gain_db, shelf_slope_to_q(slope, gain_db))

    @property
    def slope(self):
        """Shelf slope S of a shelf (``nan`` for other types)."""
        if self.type in ("low_shelf", "high_shelf"):
            return shelf_q_to_slope(self.q, self.gain_db)
        return float("nan")

    @property
    def bandwidth_octaves(self):
        """Half-gain bandwidth of a peaking filter in octaves (``nan`` for other types)."""
        return q_to_bandwidth_octaves(self.q) if self.type == "peaking" else float("nan")

    def sos(self, sample_rate):
        """Normalised sos row ``[b0, b1, b2, 1, a1, a2]`` at ``sample_rate`` (Hz)."""
        f0, fs = _check_biquad(self.freq_hz, sample_rate, self.q)
        return _eqfit.biquad_rows(self.type, f0, self.gain_db, self.q, fs)

    def response(self, freq_hz, sample_rate=None):
        """Complex response at ``freq_hz`` (Hz).

        With ``sample_rate`` (Hz) the digital biquad; with ``None`` the analog Cookbook
        prototype, i.e. the limit of the digital response as the sample rate grows (the
        response used to describe a filter independently of the sample rate).
        """
        fs = _sample_rate(sample_rate)
        if fs is not None:
            _check_biquad(self.freq_hz, fs, self.q)
        f = np.asarray(freq_hz, dtype=float)
        return _eqfit.response(self.type, self.freq_hz, self.gain_db, self.q, f, fs)

    def response_db(self, freq_hz, sample_rate=None):
        """``20 log10 |H|`` of :meth:`response`."""
        return 20.0 * np.log10(np.maximum(np.abs(self.response(freq_hz, sample_rate)), 1e-15))

    def to_dict(self):
        """Plain dict with ``type``, ``freq_hz``, ``gain_db``, ``q`` and derived figures."""
        d = {"type": self.type, "freq_hz": self.freq_hz, "gain_db": self.gain_db, "q": self.q}
        if self.role:
            d["role"] = self.role
        if self.basis:
            d["q_basis"] = self.basis
        d["at_limit"] = list(self.at_limit)
        if self.stability:
            d["stability"] = {k: _num(v) for k, v in self.stability}
        if self.type == "peaking":
            d["bandwidth_octaves"] = self.bandwidth_octaves
            d["q_3db_below_peak"] = _num(q_at_3db_below_peak(self.q, self.gain_db))
        elif self.type != "highpass":
            d["slope"] = self.slope
        return d

    def _spec(self):
        return (self.type, self.freq_hz, self.gain_db, self.q)


def _num(x):
    """A float for JSON: ``None`` instead of nan."""
    x = float(x)
    return x if np.isfinite(x) else None


def _specs(filters):
    out = []
    for flt in filters:
        if not isinstance(flt, Filter):
            raise ValueError(f"filters must be Filter objects, got {type(flt).__name__}")
        out.append(flt._spec())
    return out


def correction_db(filters, freq_hz, sample_rate=None):
    """Combined curve of a filter cascade, dB (sum of the individual dB responses).

    Parameters
    ----------
    filters : sequence of Filter
    freq_hz : array_like, shape (F,)
        Hz.
    sample_rate : float or None
        Digital response at this rate (Hz), or the analog prototypes when ``None``.
    """
    fs = _sample_rate(sample_rate)
    return _eqfit.cascade_db(_specs(filters), np.asarray(freq_hz, float), fs)


def cascade_max_db(filters, sample_rate=None, freq_range_hz=(2.0, 20000.0)):
    """Maximum of the combined curve and its frequency.

    Parameters
    ----------
    filters : sequence of Filter
    sample_rate : float or None
        Hz, or ``None`` for the analog prototypes.
    freq_range_hz : (float, float)
        Search range, Hz (clipped to 0.45 of the sample rate).

    Returns
    -------
    max_db : float
        0 for an empty cascade.
    freq_hz : float
        Where the maximum occurs (``nan`` for an empty cascade).

    Notes
    -----
    A 1/192-octave grid locates the local maxima; the best six are refined by a bounded
    scalar search in log frequency. The maximum of the cascade, not the largest single
    gain, sets the headroom: two +4 dB peaks at 40 and 60 Hz, Q 2, reach +5.15 dB.
    """
    fs = _sample_rate(sample_rate)
    lo, hi = _pair("freq_range_hz", freq_range_hz, lo=0.0, unit=" Hz")
    if fs is not None:
        hi = min(hi, 0.45 * fs)
    return _eqfit.cascade_max(_specs(filters), fs, lo, hi)


# ========================================================================================
# IEC 61260-1 / ISO 266 bands
# ========================================================================================

# ========================================================================================
# Targets
# ========================================================================================
def target_flat(freq_hz):
    """Flat target shape: zeros (dB) on ``freq_hz``."""
    return np.zeros_like(_grid(freq_hz), dtype=float)


def target_tilt(freq_hz, db_per_octave=1.0, corner_hz=100.0):
    """Low-frequency tilt: ``db_per_octave * log2(corner/f)`` below the corner, 0 above.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
    db_per_octave : float
        Rise per octave toward low frequencies, dB/octave, -6..6 (negative falls).
    corner_hz : float
        Where the tilt starts, Hz, > 0.

    Notes
    -----
    A gentle rise of about 1-3 dB/octave below 100-200 Hz is a common practice
    preference for loudspeakers in rooms; the shape is a free choice of the user.
    """
    f = _grid(freq_hz)
    s = _finite_float("db_per_octave", db_per_octave, lo=-6.0, hi=6.0, unit=" dB/octave")
    fc = _finite_float("corner_hz", corner_hz, lo=0.0, lo_open=True, unit=" Hz")
    return s * np.maximum(np.log2(fc / f), 0.0)


def target_from_table(freq_hz, table_freq_hz, table_db):
    """Target shape from a table, linear in dB against log frequency.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
    table_freq_hz, table_db : array_like, shape (R,)
        Table rows: strictly rising positive frequencies (Hz), finite levels (dB); R >= 2.

    Returns
    -------
    shape_db : ndarray, shape (F,)
        Interpolated; ``nan`` outside the table (no extrapolation: the design functions
        then reject a band the table does not cover).
    """
    f = _grid(freq_hz)
    tf = np.asarray(table_freq_hz, dtype=float)
    td = np.asarray(table_db, dtype=float)
    if tf.ndim != 1 or td.shape != tf.shape or tf.size < 2:
        raise ValueError(
            "target table needs at least 2 rows of (freq_hz, level_db), "
            f"got {tf.shape} and {td.shape}"
        )
    for i, (a, v) in enumerate(zip(tf, td)):
        if not np.isfinite(a) or a <= 0:
            raise ValueError(f"target table row {i + 1}: missing or invalid frequency {a!r} Hz")
        if not np.isfinite(v):
            raise ValueError(
                f"target table row {i + 1} ({a:g} Hz): missing or invalid level {v!r} dB")
    d = np.diff(tf)
    if np.any(d <= 0):
        i = int(np.flatnonzero(d <= 0)[0]) + 1
        raise ValueError(
            f"target table frequencies must be strictly rising; row {i + 1} ({tf[i]:g} Hz) "
            f"follows {tf[i - 1]:g} Hz"
        )
    u = np.log(f)
    out = np.interp(u, np.log(tf), td)
    out[(f < tf[0] * (1 - 1e-12)) | (f > tf[-1] * (1 + 1e-12))] = np.nan
    return out


def align_target(freq_hz, level_db, shape_db, reference_band_hz, mean="db"):
    """Shift a target shape so its mean over a band equals the response's.

    Parameters
    ----------
    freq_hz, level_db, shape_db : array_like, shape (F,)
    reference_band_hz : (float, float)
        Band of the alignment, Hz. The documented default is the band of the fit.
    mean : {"db", "power"}
        ``"db"`` (default): the mean level in dB, so that peaks and dips weigh alike and
        a correction cuts about as much as it boosts (common practice); ``"power"``: the
        mean of ``10^(L/10)``, which the strongest peaks dominate.

    Returns
    -------
    target_db : ndarray, shape (F,)
        ``shape_db + offset``.

    Notes
    -----
    Means with uniform weight in log frequency (trapezoid rule) over the grid points
    inside the band; the power mean via :func:`roommodes.response.align_level`.
    """
    f = _grid(freq_hz)
    lv = _curve(level_db, f, "level_db")
    sh = _curve(shape_db, f, "shape_db")
    band, sel = _band(reference_band_hz, f)
    if not np.all(np.isfinite(sh[sel])) or not np.all(np.isfinite(lv[sel])):
        raise ValueError(
            f"target shape or level undefined inside the reference band {band[0]:g}-{band[1]:g} Hz"
        )
    if mean == "power":
        return sh + align_level(lv, sh, f, band)
    if mean != "db":
        raise ValueError(f"mean must be 'db' or 'power', got {mean!r}")
    u = np.log(f[sel])
    return sh + (np.trapezoid(lv[sel] - sh[sel], u) / np.ptp(u))


def make_target(freq_hz, level_db, reference_band_hz, shape="flat", db_per_octave=1.0,
                corner_hz=100.0, table=None, mean="db"):
    """Target level: a flat, tilt or table shape aligned to the response.

    Parameters
    ----------
    freq_hz, level_db : array_like, shape (F,)
    reference_band_hz : (float, float)
        Alignment band, Hz (default in the CLI: the fit band).
    shape : {"flat", "tilt", "table"}
    db_per_octave, corner_hz : float
        Tilt parameters (see :func:`target_tilt`).
    table : (array_like, array_like), optional
        ``(table_freq_hz, table_db)`` for ``shape="table"``.
    """
    if shape == "flat":
        sh = target_flat(freq_hz)
    elif shape == "tilt":
        sh = target_tilt(freq_hz, db_per_octave, corner_hz)
    elif shape == "table":
        if table is None:
            raise ValueError("shape='table' needs table=(table_freq_hz, table_db)")
        sh = target_from_table(freq_hz, *table)
    else:
        raise ValueError(f"target shape must be 'flat', 'tilt' or 'table', got {shape!r}")
    return align_target(freq_hz, level_db, sh, reference_band_hz, mean)


# ========================================================================================
# Classification
# ========================================================================================
@dataclass(frozen=True)
class Region:
    """A contiguous stretch of the band with its classification and evidence.

    Attributes
    ----------
    kind : str
        One of :data:`REGION_KINDS`.
    freq_lo_hz, freq_hi_hz : float
        First and last grid frequency of the region, Hz.
    freq_extreme_hz : float
        Where the deviation is largest, Hz.
    deviation_db : float
        ``level - target`` there, dB (negative for dips).
    width_octaves : float
        Width of the part deviating by at least half of ``deviation_db``, octaves.
    spread_db : float
        Range (max - min) of the level at ``freq_extreme_hz`` across the main and the
        neighbour positions, dB; ``nan`` without neighbours.
    reasons : tuple of str
        Why the region got its kind.
    whole_hz : (float, float, float) or None
        For a peak that runs on below the band's low edge: where the whole peak's top lies
        and the edges of its half-height span on the computed grid, ``(top, lo, hi)``, Hz
        (its ``width_octaves`` is then the whole peak's). ``None`` otherwise.
    """

    kind: str
    freq_lo_hz: float
    freq_hi_hz: float
    freq_extreme_hz: float
    deviation_db: float
    width_octaves: float
    spread_db: float
    reasons: tuple = ()
    whole_hz: tuple | None = None

    def to_dict(self):
        """Plain dict of the fields."""
        d = {"kind": self.kind, "freq_hz": [self.freq_lo_hz, self.freq_hi_hz],
             "freq_extreme_hz": self.freq_extreme_hz, "deviation_db": self.deviation_db,
             "width_octaves": self.width_octaves, "spread_db": _num(self.spread_db),
             "reasons": list(self.reasons)}
        if self.whole_hz is not None:
            d["whole_peak_hz"] = list(self.whole_hz)
        return d


@dataclass(frozen=True)
class Classification:
    """Per-frequency labels and regions from :func:`classify_regions`.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    deviation_db : ndarray (F,)
        ``level - target``, dB.
    labels : ndarray of str (F,)
        A :data:`REGION_KINDS` label inside the band, ``""`` outside.
    regions : tuple of Region
        The non-"ok" regions in rising frequency.
    band_hz : (float, float)
    """

    freq_hz: np.ndarray
    deviation_db: np.ndarray
    labels: np.ndarray
    regions: tuple
    band_hz: tuple

    def mask(self, kind):
        """Boolean mask (F,) of the grid points labelled ``kind``."""
        if kind not in REGION_KINDS:
            raise ValueError(f"kind must be one of {REGION_KINDS}, got {kind!r}")
        return self.labels == kind

    @property
    def nulls(self):
        """The regions classified "narrow null"."""
        return tuple(r for r in self.regions if r.kind == "narrow null")


def classify_regions(freq_hz, level_db, target_db, band_hz, neighbour_levels_db=None, *,
                     threshold_db=_REGION_THRESHOLD_DB, narrow_octaves=_NARROW_OCTAVES,
                     null_depth_db=_NULL_DEPTH_DB, deep_db=_DEEP_DB, spread_db=_SPREAD_DB,
                     split_db=_SPLIT_DB, min_boost_octaves=_MIN_BOOST_OCTAVES,
                     stability_levels_db=None):
    """Classify each stretch of the band as peak, broad dip, narrow dip, narrow null or ok.

    Parameters
    ----------
    freq_hz, level_db, target_db : array_like, shape (F,)
        Frequencies (Hz, strictly rising), level and target (dB).
    band_hz : (float, float)
        Band to classify, Hz, inside the data range.
    neighbour_levels_db : array_like, shape (K, F), optional
        Level at K nearby positions (the seat or the speaker moved by a few cm).
    threshold_db : float
        A region starts where ``|level - target|`` exceeds this (default 1.5 dB).
    narrow_octaves : float
        A dip is narrow when its half-depth width is at most this (default 1/3 octave).
    null_depth_db : float
        A narrow dip at least this deep is a null (default 6 dB).
    deep_db : float
        Any dip at least this deep is a null (default 15 dB).
    spread_db : float
        A dip whose level at its deepest point varies by at least this across the
        positions is a null (default 6 dB).
    split_db : float
        A run beyond the threshold holding two extremes is split into two regions where
        the deviation recovers by at least this between them (default 3 dB).
    min_boost_octaves : float
        A dip that is not a null is a "broad dip" (may be boosted) only when it is at
        least this wide at half its depth and present, at least a quarter as deep, at every
        nearby position; otherwise it is a "narrow dip" (left alone, still counted in the
        error). Default 1/3 octave (common practice: a boost narrower than about 1/3
        octave buys little audible gain and lands on a peak when the listener moves).
    stability_levels_db : array_like, shape (M, F), optional
        Levels at the positions a boost must also help (head positions about 15 cm
        around the seat); default ``neighbour_levels_db``.

    Returns
    -------
    Classification

    Notes
    -----
    Deviation ``d = level - target``. Runs with ``d > threshold`` are peaks (to be cut),
    runs with ``d < -threshold`` dips (each split where it recovers by ``split_db``
    between two extremes); everything else is ok. Widths are measured at half the
    region's extreme deviation (in dB) and stay inside the region. A dip is a "narrow null"
    (not to be boosted) if any of: narrow and deep (half-depth width <= narrow_octaves
    and depth >= null_depth_db); very deep (depth >= deep_db); moves with position
    (spread across the positions >= spread_db). Otherwise it is a "broad dip" and may be
    boosted up to the boost limit, when it is wide and present at every position (see
    ``min_boost_octaves``), or a "narrow dip" that is not boosted. These thresholds are common practice, not a standard:
    cancellation nulls from boundary interference or a seat on a modal node are narrow,
    deep and shift when the seat or speaker moves a few centimetres, whereas a shortfall
    from roll-off or a broad pressure minimum is wide and stable, and boosting a null
    spends amplifier power and excursion for little audible gain.
    """
    f = _grid(freq_hz)
    lv = _curve(level_db, f, "level_db")
    tg = _curve(target_db, f, "target_db")
    band, sel = _band(band_hz, f)
    if not np.all(np.isfinite(lv[sel])):
        raise ValueError("level_db must be finite inside band_hz")
    _check_target_in_band(tg, f, sel, band)
    thr = _finite_float("threshold_db", threshold_db, lo=0.0, lo_open=True, hi=20.0, unit=" dB")
    nar = _finite_float("narrow_octaves", narrow_octaves, lo=0.0, lo_open=True, hi=4.0)
    ndep = _finite_float("null_depth_db", null_depth_db, lo=0.0, hi=60.0, unit=" dB")
    deep = _finite_float("deep_db", deep_db, lo=0.0, hi=100.0, unit=" dB")
    spr = _finite_float("spread_db", spread_db, lo=0.0, lo_open=True, hi=60.0, unit=" dB")
    spl = _finite_float("split_db", split_db, lo=0.0, lo_open=True, hi=60.0, unit=" dB")
    mbo = _finite_float("min_boost_octaves", min_boost_octaves, lo=0.0, hi=4.0)
    stab = None
    if stability_levels_db is not None:
        stab = np.atleast_2d(np.asarray(stability_levels_db, dtype=float))
        if stab.shape[1] != f.size:
            raise ValueError(f"stability_levels_db must have shape (M, {f.size}), "
                             f"got {np.shape(stability_levels_db)}")
    nb = None
    if neighbour_levels_db is not None:
        nb = np.asarray(neighbour_levels_db, dtype=float)
        if nb.ndim == 1:
            nb = nb[None, :]
        if nb.ndim != 2 or nb.shape[1] != f.size:
            raise ValueError(
                f"neighbour_levels_db must have shape (K, {f.size}), "
                f"got {np.shape(neighbour_levels_db)}"
            )
        if not np.all(np.isfinite(nb[:, sel])):
            raise ValueError("neighbour_levels_db must be finite inside band_hz")

    dev = lv - tg
    labels = np.full(f.size, "", dtype=object)
    labels[sel] = "ok"
    idx = np.flatnonzero(sel)
    fb, db = f[idx], dev[idx]
    state = np.where(db > thr, 1, np.where(db < -thr, -1, 0))
    pieces = []
    start = 0
    for k in range(1, idx.size + 1):
        if k < idx.size and state[k] == state[start]:
            continue
        s = int(state[start])
        if s != 0:
            pieces += [(a, b, s) for a, b in _split_run(s * db, start, k, spl)]
        start = k
    regions = []
    for a, b, s in pieces:
        fr, dr = fb[a:b], db[a:b]
        j = int(np.argmax(s * dr))
        extreme = float(dr[j])
        # width at half height on the whole band's curve, not only the part beyond the
        # threshold (a 2 dB peak 1 grid point above 1.5 dB is not 0 octaves wide)
        width = _eqfit.run_width_octaves(fb, db, a + j, abs(extreme) / 2)
        whole = None
        if s > 0 and a == 0:
            # a peak cut off by the band's low edge (the speaker's roll-off or the lowest
            # mode): its top and width are those of the whole peak. Not past the top edge:
            # there the prediction is indicative only (Schroeder) or the channel stops playing.
            whole = _whole_peak(f, dev, idx[a], -1, thr)
            if whole is not None:
                width = whole[3]
        spread = float("nan")
        if nb is not None:
            spread = float(np.ptp(np.concatenate([[lv[idx[a + j]]], nb[:, idx[a + j]]])))
        if s > 0:
            kind, reasons = "peak", [f"{extreme:+.1f} dB above target over {width:.2f} oct"]
            if whole is not None:
                reasons = [f"{extreme:+.1f} dB above target at the band's edge; the whole peak tops "
                           f"{whole[4]:+.1f} dB at {whole[0]:.1f} Hz, {width:.2f} oct wide at half height"]
        else:
            depth = -extreme
            reasons = []
            if width <= nar and depth >= ndep:
                reasons.append(f"narrow ({width:.2f} oct <= {nar:.2f}) and deep "
                               f"({depth:.1f} dB >= {ndep:g})")
            if depth >= deep:
                reasons.append(f"very deep ({depth:.1f} dB >= {deep:g})")
            if np.isfinite(spread) and spread >= spr:
                reasons.append(f"moves with position (spread {spread:.1f} dB >= {spr:g})")
            if reasons:
                kind = "narrow null"
            else:
                others = stab if stab is not None else nb
                absent = others is not None and len(others) > 0 and bool(
                    np.any(tg[idx[a + j]] - others[:, idx[a + j]] < depth / 4))
                if width < mbo:
                    kind = "narrow dip"
                    reasons.append(f"{depth:.1f} dB deep but only {width:.2f} oct wide (< {mbo:.2f}): "
                                   "too narrow to boost")
                elif absent:
                    kind = "narrow dip"
                    reasons.append(f"{depth:.1f} dB deep over {width:.2f} oct, but less than a quarter as "
                                   "deep at a nearby position: not stable enough to boost")
                else:
                    kind = "broad dip"
                    reasons.append(f"{depth:.1f} dB deep over {width:.2f} oct"
                                   + ("" if not np.isfinite(spread)
                                      else f", stable across positions ({spread:.1f} dB)"))
        labels[idx[a:b]] = kind
        regions.append(Region(kind, float(fr[0]), float(fr[-1]), float(fr[j]), extreme, width,
                              spread, tuple(reasons), None if whole is None else tuple(whole[:3])))
    return Classification(f, dev, labels, tuple(regions), band)


def _whole_peak(f, dev, edge, step, threshold_db):
    """A peak that runs past the band's edge at grid index ``edge``, followed outward
    (``step`` -1 below the band, +1 above it) on the whole grid while the deviation stays above
    ``threshold_db``. Returns ``(top_hz, lo_hz, hi_hz, width_octaves, top_db)`` of the whole
    peak (half-height span), or ``None`` when it does not continue past the edge (or the
    target is undefined there)."""
    k = edge + step
    if not (0 <= k < f.size) or not np.isfinite(dev[k]) or dev[k] <= threshold_db:
        return None
    run = [edge]
    while 0 <= k < f.size and np.isfinite(dev[k]) and dev[k] > threshold_db:
        run.append(k)
        k += step
    # the in-band part of the run, too: the whole peak is one feature
    k = edge - step
    while 0 <= k < f.size and np.isfinite(dev[k]) and dev[k] > threshold_db:
        run.append(k)
        k -= step
    run = np.sort(np.array(run))
    top = int(run[np.argmax(dev[run])])
    d = np.where(np.isfinite(dev), dev, -1e3)
    width = _eqfit.run_width_octaves(f, d, top, d[top] / 2)
    lo = hi = top
    while lo > 0 and d[lo - 1] >= d[top] / 2:
        lo -= 1
    while hi < f.size - 1 and d[hi + 1] >= d[top] / 2:
        hi += 1
    return (float(f[top]), float(f[lo]), float(f[hi]), float(width), float(d[top]))


def _split_run(v, lo, hi, split_db):
    """Split ``v[lo:hi]`` (all beyond the threshold, larger = more extreme) into pieces
    with one extreme each: two extremes stay apart when ``v`` falls by at least
    ``split_db`` below the smaller one between them. Returns ``[(a, b), ...]``."""
    if hi - lo < 3:
        return [(lo, hi)]
    j = lo + int(np.argmax(v[lo:hi]))
    m, mi = v[j], j
    for k in range(j - 1, lo - 1, -1):  # leftwards
        if v[k] < m:
            m, mi = v[k], k
        elif v[k] - m >= split_db:
            return _split_run(v, lo, mi, split_db) + _split_run(v, mi, hi, split_db)
    m, mi = v[j], j
    for k in range(j + 1, hi):  # rightwards
        if v[k] < m:
            m, mi = v[k], k
        elif v[k] - m >= split_db:
            return _split_run(v, lo, mi + 1, split_db) + _split_run(v, mi + 1, hi, split_db)
    return [(lo, hi)]


def _check_target_in_band(tg, f, sel, band):
    bad = sel & ~np.isfinite(tg)
    if np.any(bad):
        fb = f[bad]
        raise ValueError(
            f"target_db is undefined at {fb[0]:g}-{fb[-1]:g} Hz inside band_hz "
            f"{band[0]:g}-{band[1]:g} Hz (a target table must cover the band)"
        )


# ========================================================================================
# Designs
# ========================================================================================
@dataclass(frozen=True)
class FitError:
    """Error of ``level - target`` over the frequencies where correction is allowed.

    Attributes
    ----------
    rms_db : float
        Root-mean-square deviation, uniform weight per octave, dB.
    max_abs_db : float
        Largest absolute deviation, dB.
    within_3db : float
        Fraction (0..1, uniform per octave) of the allowed band within +-3 dB.
    """

    rms_db: float
    max_abs_db: float
    within_3db: float


def _fit_error(f, e, allowed):
    if allowed.sum() == 0:
        return FitError(float("nan"), float("nan"), float("nan"))
    w = _eqfit.log_weights(f)[allowed]
    ea = e[allowed]
    return FitError(float(np.sqrt(np.sum(w * ea**2) / w.sum())), float(np.max(np.abs(ea))),
                    float(np.sum(w * (np.abs(ea) <= 3.0)) / w.sum()))


@dataclass(frozen=True)
class EqWarning:
    """A caution attached to a result (the CLI prints them).

    Attributes
    ----------
    code : str
        Stable identifier: ``"vented_boost_refused"``, ``"shortfall_remains"`` (more
        than 3 dB below target where correction is allowed, after the design),
        ``"boost_scaled"``, ``"boost_into_null_removed"``, ``"channel_headroom_differs"``,
        ``"peak_left_uncertain"`` / ``"boost_left_uncertain"`` (a filter the single model
        asks for, left out by a design held to drawn rooms).
    message : str
        One sentence for the user.
    freq_hz : (float, float) or None
        Frequency range concerned, Hz.
    recommended : Filter or None
        A filter to use instead (e.g. a high-pass for a vented speaker).
    """

    code: str
    message: str
    freq_hz: tuple | None = None
    recommended: Filter | None = None

    def to_dict(self):
        """Plain dict of the fields (the filter as a dict)."""
        return {"code": self.code, "message": self.message,
                "freq_hz": None if self.freq_hz is None else list(self.freq_hz),
                "recommended": None if self.recommended is None else self.recommended.to_dict()}


@dataclass(frozen=True)
class EqDesign:
    """A correction and how well it does.

    Attributes
    ----------
    method : str
        ``"parametric"``, ``"shelf"`` or ``"graphic"``.
    filters : tuple of Filter
    freq_hz, before_db, target_db, correction_db, after_db : ndarray (F,)
        The grid, the level before, the target, the combined filter curve and
        ``before + correction`` (dB), at the design sample rate.
    band_hz : (float, float)
    allowed : ndarray of bool (F,)
        Where correction is allowed and the error counts: inside the band, outside
        narrow nulls and outside a refused zone (below a vented speaker's tuning).
    classification : Classification
    error_before, error_after : FitError
        Over ``allowed``.
    max_boost_db, max_boost_freq_hz : float
        Maximum of the combined curve (any frequency) and where.
    sample_rate : float or None
        Rate of the realised responses used for the design (``None``: analog).
    warnings : tuple of EqWarning
    positions_before_db, positions_after_db : ndarray (K, F)
        The head positions around the seat the design also worked on (K = 0 without).
    positions_error_before, positions_error_after : tuple of FitError
        Their deviation from the target where EQ may act, before and after.
    """

    method: str
    filters: tuple
    freq_hz: np.ndarray
    before_db: np.ndarray
    target_db: np.ndarray
    correction_db: np.ndarray
    after_db: np.ndarray
    band_hz: tuple
    allowed: np.ndarray
    classification: Classification
    error_before: FitError
    error_after: FitError
    max_boost_db: float
    max_boost_freq_hz: float
    sample_rate: float | None
    warnings: tuple
    positions_before_db: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    positions_after_db: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    positions_error_before: tuple = ()
    positions_error_after: tuple = ()

    def sos(self, sample_rates=EXPORT_SAMPLE_RATES):
        """:func:`sos_export` of the filters."""
        return sos_export(self.filters, sample_rates)

    def to_dict(self, sample_rates=EXPORT_SAMPLE_RATES):
        """Plain, JSON-ready dict of the design (curves as lists, nan as ``None``).

        Keys: ``method``, ``filters``, ``sos``, ``max_boost_db``, ``max_boost_freq_hz``,
        ``preattenuation_db``, ``before_db``, ``target_db``, ``correction_db``,
        ``after_db``, ``allowed``, ``band_hz``, ``regions``, ``error_before``,
        ``error_after``, ``warnings``, ``sample_rate`` (plus ``slope`` for a shelf and
        ``bands``, ``band_q``, ``gains_db``, ``naive_gains_db``, ``naive_error`` for a
        graphic EQ).
        """
        def curve(x):
            return [_num(v) for v in x]

        def err(e):
            return None if e is None else {k: _num(getattr(e, k))
                                           for k in ("rms_db", "max_abs_db", "within_3db")}

        d = {"method": self.method, "filters": [flt.to_dict() for flt in self.filters],
             "sos": self.sos(sample_rates), "max_boost_db": _num(self.max_boost_db),
             "max_boost_freq_hz": _num(self.max_boost_freq_hz),
             "preattenuation_db": max(float(self.max_boost_db), 0.0),
             "before_db": curve(self.before_db), "target_db": curve(self.target_db),
             "correction_db": curve(self.correction_db), "after_db": curve(self.after_db),
             "allowed": [bool(v) for v in self.allowed], "band_hz": list(self.band_hz),
             "regions": [r.to_dict() for r in self.classification.regions],
             "error_before": err(self.error_before), "error_after": err(self.error_after),
             "warnings": [w.to_dict() for w in self.warnings],
             "sample_rate": None if self.sample_rate is None else float(self.sample_rate),
             "positions": {"before_db": [curve(v) for v in self.positions_before_db],
                           "after_db": [curve(v) for v in self.positions_after_db],
                           "error_before": [err(e) for e in self.positions_error_before],
                           "error_after": [err(e) for e in self.positions_error_after]}}
        if isinstance(self, ShelfDesign):
            d["slope"] = _num(self.slope)
        if isinstance(self, GraphicDesign):
            d["bands"] = {"nominal_hz": [float(v) for v in self.bands.nominal_hz],
                          "exact_hz": [float(v) for v in self.bands.exact_hz],
                          "labels": list(self.bands.labels)}
            d["band_q"] = float(self.band_q)
            d["gains_db"] = curve(self.gains_db)
            d["naive_gains_db"] = curve(self.naive_gains_db)
            d["naive_error"] = err(self.naive_error)
        return d


@dataclass(frozen=True)
class ShelfDesign(EqDesign):
    """:class:`EqDesign` of a single low shelf, plus its slope S.

    ``filters[0]`` is the shelf (corner ``freq_hz``, ``gain_db``, Cookbook shelf ``q``).
    """

    slope: float = 1.0


@dataclass(frozen=True)
class GraphicDesign(EqDesign):
    """:class:`EqDesign` of graphic-EQ sliders, plus the naive setting for comparison.

    Attributes
    ----------
    bands : BandSet
        The bands with a slider in use (overlapping the fit band).
    band_q : float
        Cookbook Q of every band filter (constant-Q bands).
    gains_db : ndarray
        Fitted slider settings, dB, one per band.
    naive_gains_db : ndarray
        "Minus the curve" sliders: ``-(level - target)`` at each centre, clipped to the
        slider range and boost limits.
    naive_after_db : ndarray (F,)
    naive_error : FitError
    """

    bands: BandSet | None = None
    band_q: float = float("nan")
    gains_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    naive_gains_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    naive_after_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    naive_error: FitError | None = None


def _annotated(spec, meta, scale=1.0):
    """A :class:`Filter` from a fitted spec, with its role, Q basis and the limits it sits at."""
    kind, f0, g, q = spec
    if not meta:
        return Filter(kind, f0, g, q)
    at = []

    def near(v, bound):
        return abs(np.log(v / bound)) < 0.01 if v > 0 and bound > 0 else abs(v - bound) < 0.05

    qlo, qhi = meta["q"]
    if near(q, qhi):
        at.append(f"Q {q:.2f} at its upper limit ({meta.get('q_limit_hi', 'the allowed range')})")
    elif near(q, qlo):
        at.append(f"Q {q:.2f} at its lower limit ({meta.get('q_limit_lo', 'the allowed range')})")
    glo, ghi = meta["gain_db"]
    if meta["role"] == "cut" and glo < 0 and abs(g - glo) < 0.05:
        at.append(f"gain {g:+.1f} dB at the deepest cut allowed ({glo:+g} dB)")
    if meta["role"] == "boost" and (abs(g - ghi) < 0.05 or scale < 0.98):
        at.append(f"gain {g:+.1f} dB held down by the boost limits (at most {ghi:+g} dB, and no part of "
                  "the curve lifted above the target)")
    flo, fhi = meta["f_hz"]
    if near(f0, flo) or near(f0, fhi):
        at.append(f"frequency {f0:.1f} Hz at the edge of {meta.get('f_limit', 'its range')} "
                  f"({flo:.1f}-{fhi:.1f} Hz)")
    return Filter(kind, f0, g, q, role=meta["role"], basis=meta.get("basis", ""), at_limit=tuple(at),
                  stability=tuple(meta.get("stability", ())))


def _hold_to_ensemble(p, specs, metas, ensemble_db, stable_share, threshold_db=_REGION_THRESHOLD_DB):
    """Hold a fitted design to an ensemble of curves from drawn rooms.

    Each cut is kept only when its peak is stable across the ensemble: present (a top more
    than ``threshold_db`` above the target; the one nearest the cut) within one bandwidth
    of the cut in at least ``stable_share`` of the curves, and its top moving
    (10-90 % range) by no more than the cut's bandwidth. Then every filter's gain is
    sized to the ensemble: the share of its gain (0 to 1, never more than the single
    model asked for) that minimises the median over the drawn rooms of the rms deviation
    from the target (its shape aligned to each curve's own level, uniform weight per
    octave, where EQ may act; with several positions per room, their rms weighted like the
    design's curve: the seat ``seat_weight``, the head positions the rest), filter by
    filter, twice round.

    Returns ``(specs, metas, warnings)``.
    """
    f = p.f
    ens = np.asarray(ensemble_db, dtype=float)
    ens = ens[:, None, :] if ens.ndim == 2 else ens
    if ens.ndim != 3 or ens.shape[2] != f.size or not np.all(np.isfinite(ens[..., p.sel])):
        raise ValueError(f"ensemble_db must be finite, of shape (N, {f.size}) or (N, P, {f.size})")
    n = ens.shape[0]
    # each drawn curve against the target's shape aligned to its own level (a listener sets
    # the volume), as roommodes.analysis.eqcheck judges a correction
    ok = np.isfinite(p.target)
    tg = np.where(ok, p.target, np.interp(f, f[ok], p.target[ok]))
    sw = p.seat_weight if ens.shape[1] > 1 else 1.0
    pos_w = np.array([sw] + [(1.0 - sw) / max(ens.shape[1] - 1, 1)] * (ens.shape[1] - 1))
    dev_pos = ens - np.array([[align_target(f, e, tg, p.band) for e in row] for row in ens])
    combined = np.einsum("p,npf->nf", pos_w, ens)  # the curve the fit works on, in each room
    dev = combined - np.array([align_target(f, e, tg, p.band) for e in combined])
    lf = np.log2(f)
    # the tops of the peaks of every drawn curve: local maxima more than threshold_db above
    tops_mask = np.zeros(dev.shape, bool)
    tops_mask[:, 1:-1] = (dev[:, 1:-1] >= dev[:, :-2]) & (dev[:, 1:-1] >= dev[:, 2:]) & (dev[:, 1:-1] > threshold_db)
    warnings, kept = [], []
    for spec, meta in zip(specs, metas):
        bw = float(q_to_bandwidth_octaves(spec[3]))
        stab = {"samples": float(n), "bandwidth_octaves": bw, "design_gain_db": float(spec[2])}
        if meta["role"] == "cut":
            # in each drawn curve, the top nearest the cut, within one bandwidth of it
            dist = np.where(tops_mask, np.abs(lf - np.log2(spec[1]))[None, :], np.inf)
            tops = np.argmin(dist, axis=1)
            present = dist[np.arange(n), tops] <= max(bw, 1.0 / 24.0)
            share = float(np.mean(present))
            spread = float(np.ptp(np.percentile(lf[tops[present]], [10.0, 90.0]))) if present.sum() >= 2 \
                else float("inf")
            stab.update(present_share=share, freq_spread_octaves=spread)
            why = None
            if share < stable_share:
                why = (f"its peak is present in only {share:.0%} of the {n} drawn rooms "
                       f"(at least {stable_share:.0%} asked)")
            elif spread > bw:
                why = (f"its peak moves over {spread:.2f} oct across the drawn rooms (10-90 %), more than "
                       f"the cut's bandwidth ({bw:.2f} oct)")
            if why is not None:
                lo, hi = spec[1] * 2 ** (-bw / 2), spec[1] * 2 ** (bw / 2)
                warnings.append(EqWarning(
                    "peak_left_uncertain",
                    f"the {spec[2]:+.1f} dB cut at {spec[1]:.1f} Hz the model asks for was left out as "
                    f"uncertain: {why}", (float(lo), float(hi))))
                continue
        kept.append([spec, dict(meta), stab])
    w = np.where(p.allowed, _eqfit.log_weights(f), 0.0)

    def median_rms(parts):
        # per room: the rms at the seat and at each position, weighted like the design's curve
        c = _eqfit.cascade_db([s for s, _, _ in parts], f, p.fs) if parts else np.zeros_like(f)
        rms = np.sqrt(np.sum(w * (dev_pos + c) ** 2, axis=2) / np.sum(w))
        return float(np.median(rms @ pos_w))

    shares = np.linspace(0.0, 1.0, 21)
    for _ in range(2):
        for part in kept:
            g0 = part[2]["design_gain_db"]
            costs = []
            for k in shares:
                part[0] = (part[0][0], part[0][1], g0 * k, part[0][3])
                costs.append(median_rms(kept))
            k = shares[int(np.argmin(costs))]
            part[0] = (part[0][0], part[0][1], g0 * k, part[0][3])
            part[2]["depth_share"] = float(k)
    out_specs, out_metas = [], []
    for spec, meta, stab in kept:
        if abs(spec[2]) < 0.05:
            g0 = stab["design_gain_db"]
            warnings.append(EqWarning(
                "peak_left_uncertain" if meta["role"] == "cut" else "boost_left_uncertain",
                f"the {g0:+.1f} dB {meta['role']} at {spec[1]:.1f} Hz the model asks for was left out: over the "
                f"{n} drawn rooms it does not lower the median deviation from the target", (spec[1], spec[1])))
            continue
        meta["stability"] = tuple(stab.items())
        meta["gain_db"] = (min(meta["gain_db"][0], spec[2]), max(meta["gain_db"][1], spec[2]))
        out_specs.append(spec)
        out_metas.append(meta)
    return out_specs, out_metas, warnings


def _mode_cut_q(modes, q_width_fn):
    """``cut_q(f0, gain, width)``: Q from the peak's own width, or from the half-power
    bandwidth of the mode that causes it when one lies inside the peak."""
    def cut_q(f0, gain_db, width_oct):
        q_w = q_width_fn(width_oct)
        basis = f"the peak's own width ({width_oct:.2f} oct at half height)"
        if modes:
            fm = np.array([m[0] for m in modes])
            k = int(np.argmin(np.abs(np.log2(fm / f0))))
            if abs(np.log2(fm[k] / f0)) <= max(width_oct / 2, 1.0 / 24) and modes[k][1] > 0:
                # a peaking cut whose zeros sit on the mode's poles: zero Q = Q / A = f/B
                # (Audio EQ Cookbook peaking prototype, A = 10^(gain/40))
                q_m = 10 ** (gain_db / 40.0) * modes[k][0] / modes[k][1]
                if q_m < q_w:
                    label = f" {modes[k][2]}" if len(modes[k]) > 2 and modes[k][2] else ""
                    return q_m, (f"the half-power bandwidth of the mode{label} at {modes[k][0]:.1f} Hz "
                                 f"({modes[k][1]:.1f} Hz)")
        return q_w, basis
    return cut_q


class _Problem:
    """Validated inputs and the shared limits of one design."""

    def __init__(self, freq_hz, level_db, target_db, band_hz, max_boost_db, classification,
                 neighbour_levels_db, lowcut_hz, lowcut_order, sample_rate, null_tolerance_db,
                 position_levels_db=None, seat_weight=1.0 / 3.0, no_harm_db=0.5):
        self.f = _grid(freq_hz)
        self.level = _curve(level_db, self.f, "level_db")
        self.positions = np.zeros((0, self.f.size))
        if position_levels_db is not None:
            pos = np.asarray(position_levels_db, dtype=float)
            pos = pos[None, :] if pos.ndim == 1 else pos
            if pos.ndim != 2 or pos.shape[1] != self.f.size:
                raise ValueError(f"position_levels_db must have shape (K, {self.f.size}), "
                                 f"got {np.shape(position_levels_db)}")
            self.positions = pos
        sw = _finite_float("seat_weight", seat_weight, lo=0.0, hi=1.0)
        self.seat_weight = sw
        if len(self.positions):
            # the curve the fit works on: the seat and the head positions around it, in dB
            self.design = sw * self.level + (1.0 - sw) * np.mean(self.positions, axis=0)
        else:
            self.design = self.level
        self.target = _curve(target_db, self.f, "target_db")
        self.band, self.sel = _band(band_hz, self.f)
        if not np.all(np.isfinite(self.level[self.sel])):
            raise ValueError("level_db must be finite inside band_hz")
        _check_target_in_band(self.target, self.f, self.sel, self.band)
        self.max_boost = _finite_float("max_boost_db", max_boost_db, lo=0.0, hi=24.0, unit=" dB")
        self.fs = _sample_rate(sample_rate)
        if self.fs is not None and self.band[1] >= 0.45 * self.fs:
            raise ValueError(f"band_hz upper edge {self.band[1]:g} Hz must lie below 0.45 x "
                             f"sample_rate ({0.45 * self.fs:g} Hz)")
        self.tol = _finite_float("null_tolerance_db", null_tolerance_db, lo=0.0, hi=3.0, unit=" dB")
        if lowcut_order is not None and lowcut_order not in (2, 4):
            raise ValueError(f"lowcut_order must be 2 (sealed) or 4 (vented), got {lowcut_order!r}")
        if lowcut_hz is not None:
            lowcut_hz = _finite_float("lowcut_hz", lowcut_hz, lo=0.0, lo_open=True, unit=" Hz")
        if classification is None:
            classification = classify_regions(
                self.f, self.design, self.target, self.band, neighbour_levels_db,
                stability_levels_db=self.positions if len(self.positions) else None)
        elif not isinstance(classification, Classification):
            raise ValueError("classification must come from classify_regions")
        elif classification.freq_hz.shape != self.f.shape or not np.allclose(
                classification.freq_hz, self.f):
            raise ValueError("classification was made on a different frequency grid")
        elif not np.allclose(classification.band_hz, self.band):
            raise ValueError(
                f"classification covers {classification.band_hz[0]:g}-"
                f"{classification.band_hz[1]:g} Hz, the design band_hz is "
                f"{self.band[0]:g}-{self.band[1]:g} Hz")
        self.cls = classification
        null = classification.mask("narrow null")
        noboost = [(r.freq_lo_hz, r.freq_hi_hz) for r in classification.nulls]
        self.warnings = []
        refused = np.zeros(self.f.size, bool)
        if lowcut_order == 4 and lowcut_hz is not None:
            noboost.append((min(self.f[0], 1.0), lowcut_hz))
            refused = self.f < lowcut_hz
            short = self.sel & refused & (self.level - self.target < -_REGION_THRESHOLD_DB)
            if np.any(short):
                fs_ = self.f[short]
                self.warnings.append(vented_boost_warnings(
                    self.f, np.zeros_like(self.f), lowcut_hz, 4, shortfall=True,
                    freq_range_hz=(float(fs_[0]), float(fs_[-1])))[0])
        self.allowed = self.sel & ~null & ~refused
        self.weights = _eqfit.log_weights(self.f)[self.allowed]
        hi_check = 20000.0 if self.fs is None else min(20000.0, 0.45 * self.fs)
        self.noboost = noboost
        self.hi_check = hi_check
        self.no_harm = None if no_harm_db is None else _finite_float(
            "no_harm_db", no_harm_db, lo=0.0, hi=6.0, unit=" dB")
        self.ceiling = None
        if self.no_harm is not None:
            # Nowhere on the whole grid (not only the band) may the correction lift the
            # seat or a head position further above the target than it already was.
            tg = self.target.copy()
            ok = np.isfinite(tg)
            tg[~ok] = np.interp(self.f[~ok], self.f[ok], tg[ok])  # a table target, held flat
            curves = np.vstack([self.level[None, :], self.positions])
            room_db = np.min(np.maximum(tg[None, :] - curves, 0.0), axis=0)
            self.ceiling = (self.f, np.where(np.isfinite(room_db), room_db, 0.0) + self.no_harm)
        self.limits = self.make_limits()  # used for the checks in finish()
        self.check_span = (1.0, hi_check)

    def make_limits(self, above_weight=0.5, boost_cost=0.02):
        """Limits on the combined curve (see :class:`roommodes._eqfit.Limits`)."""
        step = np.log2(self.band[1] / self.band[0]) / max(self.sel.sum() - 1, 1)
        return _eqfit.Limits(self.max_boost, self.noboost, self.tol,
                             max(self.band[0] / 4, 1.0), min(self.band[1] * 4, self.hi_check),
                             self.fs, band=self.band, fit_step_oct=step,
                             above_weight=above_weight, below_boost_cost=boost_cost,
                             ceiling=self.ceiling)

    def finish(self, method, specs, boost_idx, metas=None, **extra):
        """Enforce the limits, build the result and its warnings."""
        warnings = list(self.warnings)
        metas = list(metas) if metas is not None else [None] * len(specs)
        # no boost filter centred inside a no-boost interval (a graphic slider goes to 0)
        keep = []
        specs = list(specs)
        for k, s in enumerate(specs):
            if s[0] == "peaking" and s[2] > 0 and self.limits.in_noboost(s[1]):
                warnings.append(EqWarning(
                    "boost_into_null_removed",
                    f"a {s[2]:+.1f} dB filter at {s[1]:.1f} Hz fell inside a region that must "
                    "not be boosted and was " + ("set to 0 dB" if method == "graphic"
                                                 else "removed"), (s[1], s[1])))
                if method == "graphic":
                    specs[k] = (s[0], s[1], 0.0, s[3])
                    keep.append(k)
            else:
                keep.append(k)
        boost_idx = [keep.index(k) for k in boost_idx if k in keep and specs[k][2] > 0]
        specs = [specs[k] for k in keep]
        metas = [metas[k] for k in keep]
        self.limits.set_check_span(*self.check_span)
        specs, scale = self.limits.enforce(specs, boost_idx)
        if scale < 0.98:
            warnings.append(EqWarning(
                "boost_scaled",
                f"boost gains were scaled by {scale:.2f} to keep the combined boost within "
                f"{self.max_boost:g} dB, out of nulls and below the target wherever the curve "
                "was not above it"))
        if method != "graphic":
            kept = [k for k, s in enumerate(specs) if abs(s[2]) >= 0.05 or s[0] == "highpass"]
            specs, metas = [specs[k] for k in kept], [metas[k] for k in kept]
            order = sorted(range(len(specs)), key=lambda k: specs[k][1])  # one order everywhere
            specs, metas = [specs[k] for k in order], [metas[k] for k in order]
        filters = tuple(_annotated(s, m, scale) for s, m in zip(specs, metas))
        for flt in filters:
            if flt.at_limit:
                warnings.append(EqWarning(
                    "filter_at_limit",
                    f"the {flt.gain_db:+.1f} dB filter at {flt.freq_hz:.1f} Hz sits at a limit: "
                    + "; ".join(flt.at_limit), (flt.freq_hz, flt.freq_hz)))
        corr = _eqfit.cascade_db(specs, self.f, self.fs)
        after = self.level + corr
        top, top_f = _eqfit.cascade_max(specs, self.fs, *self.check_span)
        if not specs:
            top, top_f = 0.0, float("nan")
        err_b = _fit_error(self.f, self.level - self.target, self.allowed)
        err_a = _fit_error(self.f, after - self.target, self.allowed)
        short = self.allowed & (after - self.target < -3.0)
        if np.any(short):
            fs_ = self.f[short]
            warnings.append(EqWarning(
                "shortfall_remains",
                f"up to {-np.min((after - self.target)[short]):.1f} dB below target remains at "
                f"{fs_[0]:.0f}-{fs_[-1]:.0f} Hz; the combined boost peaks at "
                f"{max(top, 0.0):.1f} dB "
                f"(limit {self.max_boost:g} dB)", (float(fs_[0]), float(fs_[-1]))))
        cls = {"shelf": ShelfDesign, "graphic": GraphicDesign}.get(method, EqDesign)
        pos_before = self.positions
        pos_after = self.positions + corr[None, :]
        errs_b = tuple(_fit_error(self.f, v - self.target, self.allowed) for v in pos_before)
        errs_a = tuple(_fit_error(self.f, v - self.target, self.allowed) for v in pos_after)
        return cls(method, filters, self.f, self.level, self.target, corr, after, self.band,
                   self.allowed, self.cls, err_b, err_a, float(top), float(top_f), self.fs,
                   tuple(warnings), positions_before_db=pos_before, positions_after_db=pos_after,
                   positions_error_before=errs_b, positions_error_after=errs_a, **extra)


def design_parametric(freq_hz, level_db, target_db, band_hz, *, max_filters=6,
                      max_boost_db=6.0, q_range=(0.5, 10.0), gain_range=(-15.0, 6.0),
                      classification=None, neighbour_levels_db=None, lowcut_hz=None,
                      lowcut_order=None, sample_rate=48000, null_tolerance_db=0.5,
                      stop_db=1.0, boost_cost=0.02, boost_q_max=_BOOST_Q_MAX,
                      position_levels_db=None, seat_weight=1.0 / 3.0, no_harm_db=0.5, modes=None,
                      ensemble_db=None, stable_share=STABLE_SHARE):
    """Fit up to ``max_filters`` peaking filters that bring the level toward the target.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
        Strictly rising frequencies, Hz.
    level_db, target_db : array_like, shape (F,)
        Level before correction and the target (e.g. from :func:`make_target`), dB.
    band_hz : (float, float)
        Band of the fit, Hz, inside the data range (the CLI default is max(speaker
        lowcut, 20 Hz) to 250 Hz).
    max_filters : int
        1..20 peaking filters.
    max_boost_db : float
        Limit on the combined curve at every frequency, 0..24 dB.
    q_range : (float, float)
        Cookbook Q bounds, 0 < low < high <= 100.
    gain_range : (float, float)
        Per-filter gain bounds, dB, low < 0; the upper bound is also capped by
        ``max_boost_db``.
    classification : Classification, optional
        From :func:`classify_regions`; computed with its defaults when omitted.
    neighbour_levels_db : array_like, shape (K, F), optional
        Levels at nearby positions, used when ``classification`` is computed here.
    lowcut_hz, lowcut_order : float, int, optional
        The speaker's -3 dB point and alignment order (2 sealed, 4 vented). For order 4
        no boost is allowed below ``lowcut_hz`` (a warning recommends a high-pass).
    sample_rate : float or None
        The filters are fitted with their digital responses at this rate (Hz); ``None``
        uses the analog prototypes.
    null_tolerance_db : float
        How far the combined curve may rise above 0 dB inside a null, dB.
    stop_db : float
        Stop adding filters once no deviation exceeds this, dB.
    boost_cost : float
        Weight of the small penalty on any boost that makes cuts preferred, >= 0.
    boost_q_max : float
        Largest Q of a boost (default 2, a bandwidth of 0.67 octave: boosts stay broad,
        common practice).
    position_levels_db : array_like, shape (K, F), optional
        Levels at head positions around the seat (about +-15 cm). The fit then works on
        ``seat_weight`` x the seat's level plus the rest x the positions' mean (dB), and
        the no-harm ceiling holds at every position.
    seat_weight : float
        Weight of the seat in that mean, 0..1 (default 1/3).
    no_harm_db : float or None
        The combined curve may lift the seat, or any position, at most this far (dB)
        further above the target than it already was, anywhere on the grid (not only in
        the band); default 0.5 dB. ``None`` drops this limit.
    modes : sequence of (freq_hz, bandwidth_hz[, label]), optional
        The room's modes; a cut on a peak that a mode causes takes its Q from the mode's
        half-power bandwidth when that is broader than the peak's own width.
    ensemble_db : array_like, shape (N, F) or (N, 1 + K, F), optional
        The level (or the levels at the seat and the K head positions of
        ``position_levels_db``) in each of N rooms drawn from the room's uncertainty. The design is then held to
        them: a cut is kept only when its peak is stable across them (present in at least
        ``stable_share`` of them within one bandwidth of the cut, its top moving by no
        more than the cut's bandwidth), and each filter's gain is sized to the ensemble
        (the share of it, never more, that minimises the median rms deviation). Left-out
        cuts are listed in the warnings (``peak_left_uncertain``); each filter carries
        its ``stability`` figures.
    stable_share : float
        See ``ensemble_db`` (default :data:`STABLE_SHARE`).

    Returns
    -------
    EqDesign

    Notes
    -----
    Every filter has a role. A cut is placed on a peak, stays inside its half-height
    span and keeps its Q within a factor 1.5 of the Q of the peak's own bandwidth (or the
    mode's: a cut with gain ``-G`` and Cookbook Q ``10^(-G/40) f_m/B_m`` puts its zeros on
    the poles of a mode of half-power bandwidth ``B_m``). A boost is placed only in a
    broad dip (see :func:`classify_regions`), stays inside it and has a Q of at most
    ``boost_q_max``. The fit minimises ``sum_i w_i (L_i - T_i + C_i)^2`` over the allowed frequencies (``C`` the
    combined realised filter curve in dB, ``w_i`` uniform weight per octave) plus
    ``boost_cost * sum_i w_i max(C_i, 0)^2`` (the same boost cost also applies below the
    band), ``0.5 * sum C^2`` per octave above the band (the correction should leave the
    response above the band alone), and heavy penalties on any excess of ``C`` over
    ``max_boost_db`` (1/24-octave grid from a quarter of the band's low edge to four
    times its top) or over ``null_tolerance_db`` inside nulls. Filters are added greedily
    at the largest remaining deviation (a shortfall counts 0.7 times an excess: cuts
    first), with the initial gain minus that deviation and Q from its half-height width;
    after each addition all frequencies, gains and Qs are refined jointly by bounded
    least squares (scipy.optimize.least_squares, trust-region reflective); a filter that
    does not lower the cost ends the loop. A final check finds the cascade's maximum
    (1/192-octave grid and local refinement, 1 Hz-20 kHz) and scales the boosting gains
    down by a common factor until both limits hold; boost filters centred inside a null
    are removed.
    """
    p = _Problem(freq_hz, level_db, target_db, band_hz, max_boost_db, classification,
                 neighbour_levels_db, lowcut_hz, lowcut_order, sample_rate, null_tolerance_db,
                 position_levels_db, seat_weight, no_harm_db)
    nf = int(_finite_float("max_filters", max_filters, lo=1, hi=20))
    if nf != max_filters:
        raise ValueError(f"max_filters must be a whole number 1..20, got {max_filters!r}")
    qr = _pair("q_range", q_range, lo=0.0, hi=100.0)
    gr = _pair("gain_range", gain_range, lo=-60.0, hi=60.0, unit=" dB")
    if gr[0] >= 0:
        raise ValueError(f"gain_range low end must be negative (cuts), got {gr[0]:g} dB")
    bc = _finite_float("boost_cost", boost_cost, lo=0.0, hi=100.0)
    sd = _finite_float("stop_db", stop_db, lo=0.0, lo_open=True, hi=20.0, unit=" dB")
    gain_bounds = (gr[0], max(min(gr[1], p.max_boost), 0.0))
    bq = _finite_float("boost_q_max", boost_q_max, lo=0.0, lo_open=True, hi=100.0)
    fitted = []
    if p.allowed.sum() >= 3:
        # a peak that runs on past the band's edge is one feature: its cut is placed on the
        # whole peak, and the fit sees the part outside the band too (where the cut acts)
        fit = p.allowed.copy()
        for r in p.cls.regions:
            if r.kind == "peak" and r.whole_hz is not None:
                fit |= (p.f >= r.whole_hz[1] * (1 - 1e-9)) & (p.f <= r.whole_hz[2] * (1 + 1e-9)) \
                    & np.isfinite(p.target)
        dev = (p.design - p.target)[fit]
        # a boost may move over the dip's half-depth span, a cut's Q follows its peak's width
        boostable = [(min(r.freq_lo_hz, r.freq_extreme_hz * 2 ** (-r.width_octaves / 2)),
                      max(r.freq_hi_hz, r.freq_extreme_hz * 2 ** (r.width_octaves / 2)))
                     for r in p.cls.regions if r.kind == "broad dip"]
        peaks = [(r.freq_lo_hz, r.freq_hi_hz, r.width_octaves) if r.whole_hz is None else
                 (min(r.freq_lo_hz, r.whole_hz[1]), max(r.freq_hi_hz, r.whole_hz[2]), r.width_octaves, r.whole_hz[0])
                 for r in p.cls.regions if r.kind == "peak"]
        fitted = _eqfit.fit_cuts_and_boosts(
            p.f[fit], dev, p.make_limits(boost_cost=bc), p.band, qr, gain_bounds, nf, p.fs,
            boostable=boostable, peaks=peaks, boost_q_max=bq,
            cut_q=_mode_cut_q(modes, bandwidth_octaves_to_q),
            boost_cost=bc, stop_db=sd, weights=_eqfit.log_weights(p.f)[fit])
    specs = [sp for sp, _ in fitted]
    metas = []
    for _, m in fitted:
        m = dict(m, f_limit="the peak" if m["role"] == "cut" else "the broad dip")
        qlo, qhi = m["q"]
        m["q_limit_hi"] = ("the boost limit: boosts stay broad" if m["role"] == "boost" and qhi >= bq * 0.999
                           else f"--q-range top {qr[1]:g}" if qhi >= qr[1] * 0.999
                           else "x1.5 of the Q its width asks for")
        m["q_limit_lo"] = (f"--q-range bottom {qr[0]:g}" if qlo <= qr[0] * 1.001
                           else "/1.5 of the Q its width asks for")
        metas.append(m)
    if ensemble_db is not None:
        share = _finite_float("stable_share", stable_share, lo=0.0, hi=1.0)
        specs, metas, held = _hold_to_ensemble(p, specs, metas, ensemble_db, share)
        p.warnings.extend(held)
    boost_idx = [k for k, s in enumerate(specs) if s[2] > 0]
    return p.finish("parametric", specs, boost_idx, metas)


def design_shelf(freq_hz, level_db, target_db, band_hz, *, max_boost_db=6.0,
                 gain_range=(-15.0, 6.0), slope_range=(0.3, 1.0), corner_range_hz=None,
                 classification=None, neighbour_levels_db=None, lowcut_hz=None,
                 lowcut_order=None, sample_rate=48000, null_tolerance_db=0.5, boost_cost=0.02,
                 position_levels_db=None, seat_weight=1.0 / 3.0, no_harm_db=0.5):
    """The best single low shelf (a bass tone control): corner, gain and slope S.

    Parameters
    ----------
    freq_hz, level_db, target_db, band_hz :
        As :func:`design_parametric`.
    max_boost_db : float
        Limit on the shelf gain when boosting, 0..24 dB.
    gain_range : (float, float)
        Gain bounds, dB, low < 0.
    slope_range : (float, float)
        Shelf slope S bounds, 0 < low < high <= 1 (S <= 1 keeps the shelf monotonic).
    corner_range_hz : (float, float), optional
        Corner frequency bounds, Hz; default the fit band.
    Others :
        As :func:`design_parametric`.

    Returns
    -------
    ShelfDesign
        ``filters[0]`` is the shelf, ``slope`` its S; ``error_after`` is the residual.

    Notes
    -----
    Same objective and limits as :func:`design_parametric` with one Cookbook low shelf;
    start from a 1/4-octave grid of corners (slope 1, gain by linear least squares on the
    unit shape), then bounded least squares on corner, gain and slope.
    """
    p = _Problem(freq_hz, level_db, target_db, band_hz, max_boost_db, classification,
                 neighbour_levels_db, lowcut_hz, lowcut_order, sample_rate, null_tolerance_db,
                 position_levels_db, seat_weight, no_harm_db)
    gr = _pair("gain_range", gain_range, lo=-60.0, hi=60.0, unit=" dB")
    if gr[0] >= 0:
        raise ValueError(f"gain_range low end must be negative (cuts), got {gr[0]:g} dB")
    sr = _pair("slope_range", slope_range, lo=0.0, hi=1.0)
    cr = p.band if corner_range_hz is None else _pair("corner_range_hz", corner_range_hz,
                                                      lo=0.0, unit=" Hz")
    bc = _finite_float("boost_cost", boost_cost, lo=0.0, hi=100.0)
    gain_bounds = (gr[0], max(min(gr[1], p.max_boost), 1e-6))
    specs, slope = [], 1.0
    if p.allowed.sum() >= 3:
        dev = (p.design - p.target)[p.allowed]
        fc, g, slope = _eqfit.fit_low_shelf(p.f[p.allowed], dev, p.make_limits(boost_cost=bc),
                                            cr, sr, gain_bounds,
                                            p.fs, boost_cost=bc, weights=p.weights)
        specs = [("low_shelf", fc, g, float(_eqfit.shelf_q_from_slope(slope, g)))]
    boost_idx = [0] if specs and specs[0][2] > 0 else []
    d = p.finish("shelf", specs, boost_idx, slope=float(slope))
    return replace(d, slope=d.filters[0].slope) if d.filters else d


def design_graphic(freq_hz, level_db, target_db, band_hz, *, bands="third", band_q=None,
                   slider_range_db=(-12.0, 12.0), max_boost_db=6.0, classification=None,
                   neighbour_levels_db=None, lowcut_hz=None, lowcut_order=None,
                   sample_rate=48000, null_tolerance_db=0.5, boost_cost=0.02,
                   position_levels_db=None, seat_weight=1.0 / 3.0, no_harm_db=0.5):
    """Graphic-EQ slider settings fitted with the realised band shapes.

    Parameters
    ----------
    freq_hz, level_db, target_db, band_hz :
        As :func:`design_parametric`.
    bands : {"third", "octave"}
        31-band one-third-octave or 10-band octave graphic EQ (ISO 266 centres).
    band_q : float, optional
        Cookbook Q of each band. Default: the Q whose half-gain bandwidth equals the band
        spacing, 4.318 for one-third octave and 1.414 for octave bands (a common
        constant-Q choice; real units differ, so give yours when known).
    slider_range_db : (float, float)
        Slider travel, dB (default +-12 dB).
    max_boost_db : float
        Limit on the combined curve at every frequency, 0..24 dB.
    Others :
        As :func:`design_parametric`.

    Returns
    -------
    GraphicDesign
        ``gains_db`` per band of ``bands`` (those overlapping the fit band; the others
        stay at 0), the band filters as ``filters``, and the naive setting for comparison.

    Notes
    -----
    Each slider is a Cookbook peaking filter at the exact IEC 61260-1 midband frequency
    with the constant ``band_q``; the sliders are found by bounded least squares on the
    realised cascade (same objective and limits as :func:`design_parametric`), so the
    overlap of neighbouring bands is accounted for. Setting each slider to minus the
    deviation at its centre overshoots where bands overlap; ``naive_error`` shows it.
    """
    p = _Problem(freq_hz, level_db, target_db, band_hz, max_boost_db, classification,
                 neighbour_levels_db, lowcut_hz, lowcut_order, sample_rate, null_tolerance_db,
                 position_levels_db, seat_weight, no_harm_db)
    if bands not in ("third", "octave"):
        raise ValueError(f"bands must be 'third' or 'octave', got {bands!r}")
    frac = 3 if bands == "third" else 1
    if band_q is None:
        band_q = bandwidth_octaves_to_q(1.0 / frac)
    bq = _finite_float("band_q", band_q, lo=0.0, lo_open=True, hi=100.0)
    sl = _pair("slider_range_db", slider_range_db, lo=-60.0, hi=60.0, unit=" dB")
    if sl[0] >= 0:
        raise ValueError(f"slider_range_db low end must be negative, got {sl[0]:g} dB")
    bc = _finite_float("boost_cost", boost_cost, lo=0.0, hi=100.0)
    allb = iec_bands(bands)  # the bands of a 31-band or 10-band unit
    use = (allb.upper_hz > p.band[0]) & (allb.lower_hz < p.band[1])
    if p.fs is not None:
        use &= allb.exact_hz < 0.45 * p.fs
    bs = BandSet(allb.fraction, allb.index[use], allb.exact_hz[use], allb.lower_hz[use],
                 allb.upper_hz[use], allb.nominal_hz[use])
    centres = bs.exact_hz
    hi_g = max(min(sl[1], p.max_boost), 0.0)
    dev_all = p.design - p.target
    # naive: minus the deviation at each centre (log-f interpolation over the band)
    fb, db = p.f[p.sel], dev_all[p.sel]
    naive = np.clip(-np.interp(np.log(centres), np.log(fb), db), sl[0], hi_g)
    naive = np.array([min(g, 0.0) if p.limits.in_noboost(c) else g
                      for g, c in zip(naive, centres)])
    if p.allowed.sum() >= 3:
        gains = _eqfit.fit_graphic(p.f[p.allowed], dev_all[p.allowed], p.make_limits(boost_cost=bc),
                                   centres, bq,
                                   (sl[0], max(hi_g, 1e-6)), p.fs, naive, boost_cost=bc,
                                   weights=p.weights)
    else:
        gains = np.zeros(centres.size)
    gains = np.where(np.abs(gains) < 1e-6, 0.0, gains)
    specs = [("peaking", float(c), float(g), bq) for c, g in zip(centres, gains)]
    boost_idx = [k for k, s in enumerate(specs) if s[2] > 0]
    naive_specs = [("peaking", float(c), float(g), bq) for c, g in zip(centres, naive)]
    naive_after = p.level + _eqfit.cascade_db(naive_specs, p.f, p.fs)
    naive_err = _fit_error(p.f, naive_after - p.target, p.allowed)
    d = p.finish("graphic", specs, boost_idx, bands=bs, band_q=bq, gains_db=np.zeros(0),
                 naive_gains_db=naive, naive_after_db=naive_after, naive_error=naive_err)
    return replace(d, gains_db=np.array([flt.gain_db for flt in d.filters]))


# ========================================================================================
# Headroom and level limits
# ========================================================================================
@dataclass(frozen=True)
class Headroom:
    """What a correction costs in headroom.

    Attributes
    ----------
    freq_hz, correction_db : ndarray (F,)
        Grid (Hz) and combined curve (dB).
    power_factor : ndarray (F,)
        Electrical power factor ``10^(C/10)`` per frequency.
    excursion_factor : ndarray (F,)
        Cone excursion and drive-voltage factor ``10^(C/20)`` per frequency.
    max_boost_db, max_boost_freq_hz : float
        Maximum of the combined curve over 1 Hz-20 kHz and where (not the largest gain).
    preattenuation_db : float
        Digital attenuation ahead of the EQ so that no frequency exceeds full scale:
        ``max(max_boost_db, 0)``.
    """

    freq_hz: np.ndarray
    correction_db: np.ndarray
    power_factor: np.ndarray
    excursion_factor: np.ndarray
    max_boost_db: float
    max_boost_freq_hz: float
    preattenuation_db: float


def headroom(filters, freq_hz, sample_rate=None):
    """Headroom figures of a filter cascade.

    Parameters
    ----------
    filters : sequence of Filter
    freq_hz : array_like, shape (F,)
        Grid for the per-frequency factors, Hz.
    sample_rate : float or None
        Hz, or ``None`` for the analog prototypes.

    Returns
    -------
    Headroom

    Notes
    -----
    Power for a boost of ``C`` dB is ``10^(C/10)`` (x2.0 at +3 dB, x3.98 at +6 dB), voltage
    and, below the driver's resonance, excursion ``10^(C/20)``. The pre-attenuation
    protects against clipping for steady tones; transients can overshoot slightly.
    """
    f = np.asarray(freq_hz, dtype=float)
    c = correction_db(filters, f, sample_rate)
    top, top_f = cascade_max_db(filters, sample_rate, (1.0, 20000.0))
    return Headroom(f, c, 10.0 ** (c / 10.0), 10.0 ** (c / 20.0), float(top), float(top_f),
                    float(max(top, 0.0)))


@dataclass(frozen=True)
class CleanLevel:
    """Maximum clean level at the seat per frequency, before and after a correction.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    before_db, after_db : ndarray (F,)
        SPL at the seat, dB re 20 uPa (``after_db`` is ``None`` without a correction).
    limit_before, limit_after : ndarray of str (F,)
        What limits each frequency: ``"amplifier"`` or ``"speaker"`` (from the room file's
        figures, :func:`max_clean_spl`), or ``"full scale"`` (a calibrated measurement,
        :func:`full_scale_level`).
    preattenuation_db : float
    basis : str
        ``"model"``: the room file's amplifier power, sensitivity and maximum SPL;
        ``"measured"``: the SPL a full-scale input gives at the seat, measured through a
        calibrated chain at the playback volume of the measurement.
    """

    freq_hz: np.ndarray
    before_db: np.ndarray
    after_db: np.ndarray | None
    limit_before: np.ndarray
    limit_after: np.ndarray | None
    preattenuation_db: float
    basis: str = "model"


def full_scale_level(freq_hz, level_spl_db, correction_db=None, preattenuation_db=None):
    """Highest level at the seat for a full-scale input, before and after EQ, from a calibrated measurement.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
    level_spl_db : array_like, shape (F,)
        The measured level at the seat in dB SPL for a full-scale (0 dBFS) sine at the
        playback volume of the measurement (an impulse response plus the chain's full-scale
        SPL, :mod:`roommodes.measure.calibration`).
    correction_db : array_like, shape (F,), optional
    preattenuation_db : float, optional
        As in :func:`max_clean_spl`.

    Returns
    -------
    CleanLevel
        ``basis="measured"``, limits ``"full scale"``.

    Notes
    -----
    At an unchanged volume setting a full-scale input gives ``L(f)`` before EQ and
    ``L(f) + C(f) - A`` after (``A`` the pre-attenuation that keeps the boosted input
    below full scale): the correction costs ``A`` dB of maximum level wherever it does
    not boost. The figure moves dB for dB with the calibration and says nothing of the
    amplifier's or the speaker's own limits, which apply on top.
    """
    f = _grid(freq_hz)
    lv = _curve(level_spl_db, f, "level_spl_db")
    lim = np.full(f.size, "full scale", dtype=object)
    if correction_db is None:
        return CleanLevel(f, lv, None, lim, None, 0.0, "measured")
    c = _curve(correction_db, f, "correction_db")
    pre = float(max(np.max(c), 0.0)) if preattenuation_db is None else _finite_float(
        "preattenuation_db", preattenuation_db, lo=0.0, hi=60.0, unit=" dB")
    return CleanLevel(f, lv, lv + c - pre, lim, lim.copy(), pre, "measured")


def max_clean_spl(freq_hz, level_db, amplifier_power_w, sensitivity_db, max_spl_db,
                  correction_db=None, preattenuation_db=None):
    """Highest clean SPL at the seat versus frequency, before and after EQ.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
        Hz.
    level_db : array_like, shape (F,)
        Level at the seat relative to the free-field level of the same speaker at 1 m
        (the project's level reference), dB.
    amplifier_power_w : float
        Rated amplifier power into the speaker's nominal load, W (> 0).
    sensitivity_db : float
        dB SPL at 1 m for 1 W into the nominal load, 60..120 dB.
    max_spl_db : float
        The speaker's maximum SPL at 1 m (free field), 60..150 dB.
    correction_db : array_like, shape (F,), optional
        Combined EQ curve, dB.
    preattenuation_db : float, optional
        Digital pre-attenuation; default ``max(max(correction_db), 0)`` on this grid (pass
        :attr:`Headroom.preattenuation_db` for the exact cascade maximum).

    Returns
    -------
    CleanLevel

    Notes
    -----
    Assumptions: the sensitivity holds at 1 W into the nominal load at every frequency
    in the band; no power compression; the gain structure is such that a full-scale
    input drives the amplifier to its rated power without EQ; ``max_spl_db`` is a
    frequency-independent ceiling at 1 m (the real low-frequency limit is excursion and
    falls toward low frequency, steeply below a vented box's tuning). Then the level at
    1 m is ``L1 = min(S + 10 log10(P), Lmax)`` before EQ and
    ``L1 = min(S + 10 log10(P) + C(f) - A, Lmax)`` after, ``A`` the pre-attenuation; the
    seat gets ``L1 + level_db``.
    """
    f = _grid(freq_hz)
    lv = _curve(level_db, f, "level_db")
    pw = _finite_float("amplifier_power_w", amplifier_power_w, lo=0.0, lo_open=True, hi=1e5,
                       unit=" W")
    sens = _finite_float("sensitivity_db", sensitivity_db, lo=60.0, hi=120.0, unit=" dB")
    mx = _finite_float("max_spl_db", max_spl_db, lo=60.0, hi=150.0, unit=" dB")
    amp = sens + 10.0 * np.log10(pw)
    before = np.minimum(amp, mx) + lv
    lim_b = np.where(amp <= mx, "amplifier", "speaker").astype(object)
    lim_b = np.full(f.size, lim_b, dtype=object)
    if correction_db is None:
        return CleanLevel(f, before, None, lim_b, None, 0.0)
    c = _curve(correction_db, f, "correction_db")
    pre = float(max(np.max(c), 0.0)) if preattenuation_db is None else _finite_float(
        "preattenuation_db", preattenuation_db, lo=0.0, hi=60.0, unit=" dB")
    drive = amp + c - pre
    after = np.minimum(drive, mx) + lv
    lim_a = np.where(drive <= mx, "amplifier", "speaker").astype(object)
    return CleanLevel(f, before, after, lim_b, lim_a, pre)


def recommended_highpass(lowcut_hz):
    """A high-pass to protect a vented speaker: second order, Q 0.7071, at its tuning.

    A high-pass near the box tuning is Thiele/Small practice (recalled from memory); the
    loudspeaker maker's advice takes precedence.
    """
    return Filter("highpass", _finite_float("lowcut_hz", lowcut_hz, lo=0.0, lo_open=True),
                  0.0, _SQRT_HALF)


def vented_boost_warnings(freq_hz, correction_db, lowcut_hz, lowcut_order, *,
                          tolerance_db=0.1, shortfall=False, freq_range_hz=None):
    """Warn when a curve boosts a vented speaker (``lowcut_order`` 4) below its tuning.

    Parameters
    ----------
    freq_hz, correction_db : array_like, shape (F,)
        Grid (Hz) and combined EQ curve (dB).
    lowcut_hz : float
        The speaker's tuning / -3 dB point, Hz.
    lowcut_order : int or None
        2 (sealed) or 4 (vented); only 4 triggers the rule.
    tolerance_db : float
        Boost up to this much is not reported.
    shortfall : bool
        Report that a boost was wanted and refused (used by the design functions).
    freq_range_hz : (float, float), optional
        Range to name in the message for ``shortfall``.

    Returns
    -------
    list of EqWarning
        Empty, or one ``"vented_boost_refused"`` record carrying :func:`recommended_highpass`.

    Notes
    -----
    Below its tuning a vented box no longer loads the driver, so excursion rises
    quickly; boosting there risks damage, a high-pass near the tuning protects it
    (Thiele/Small practice, recalled from memory).
    """
    if lowcut_order is None or lowcut_order == 2:
        return []
    if lowcut_order != 4:
        raise ValueError(f"lowcut_order must be 2 (sealed) or 4 (vented), got {lowcut_order!r}")
    fc = _finite_float("lowcut_hz", lowcut_hz, lo=0.0, lo_open=True, unit=" Hz")
    f = np.asarray(freq_hz, dtype=float)
    c = np.asarray(correction_db, dtype=float)
    hp = recommended_highpass(fc)
    if shortfall:
        lo, hi = freq_range_hz if freq_range_hz is not None else (float(f[0]), fc)
        return [EqWarning(
            "vented_boost_refused",
            f"boost below the vented speaker's tuning ({fc:g} Hz) refused at {lo:.0f}-{hi:.0f} Hz: "
            f"it unloads the driver; use a high-pass near {fc:g} Hz (e.g. 2nd order, Q 0.71) "
            "instead", (float(lo), float(hi)), hp)]
    bad = (f < fc) & (c > tolerance_db)
    if not np.any(bad):
        return []
    fb = f[bad]
    return [EqWarning(
        "vented_boost_refused",
        f"the correction boosts up to {np.max(c[bad]):.1f} dB below the vented speaker's tuning "
        f"({fc:g} Hz) at {fb[0]:.0f}-{fb[-1]:.0f} Hz: remove that boost and use a high-pass "
        f"near {fc:g} Hz (e.g. 2nd order, Q 0.71) instead", (float(fb[0]), float(fb[-1])), hp)]


def channel_headroom_warnings(max_boost_db, limit_db=3.0):
    """Warn when channels' maximum boosts differ by more than ``limit_db``.

    Parameters
    ----------
    max_boost_db : mapping of str to float
        Maximum combined boost per channel name, dB.
    limit_db : float
        Allowed difference, dB (default 3).

    Returns
    -------
    list of EqWarning
        One ``"channel_headroom_differs"`` record naming the most and least boosted
        channels, or an empty list.

    Notes
    -----
    The more boosted channel reaches its limit first; at high level the stereo image
    then shifts toward the other side (common practice).
    """
    if not isinstance(max_boost_db, Mapping) or not max_boost_db:
        raise ValueError("max_boost_db must be a non-empty mapping of channel name to dB")
    lim = _finite_float("limit_db", limit_db, lo=0.0, hi=60.0, unit=" dB")
    vals = {k: max(_finite_float(f"max_boost_db[{k!r}]", v), 0.0) for k, v in max_boost_db.items()}
    hi_k = max(vals, key=vals.get)
    lo_k = min(vals, key=vals.get)
    diff = vals[hi_k] - vals[lo_k]
    if diff <= lim:
        return []
    return [EqWarning(
        "channel_headroom_differs",
        f"channel {hi_k!r} is boosted {diff:.1f} dB more than {lo_k!r} (limit {lim:g} dB): it "
        "clips first and the image shifts at high level")]


# ========================================================================================
# Export
# ========================================================================================
def sos_export(filters, sample_rates=EXPORT_SAMPLE_RATES):
    """Second-order sections of a cascade at several sample rates.

    Parameters
    ----------
    filters : sequence of Filter
    sample_rates : sequence of int
        Hz (default 44100, 48000, 96000).

    Returns
    -------
    dict
        Keyed by the rate as a string (``"48000"``), each a list of rows
        ``[b0, b1, b2, a0, a1, a2]`` with ``a0 = 1`` (scipy.signal sos layout), one per
        filter in order.
    """
    if isinstance(sample_rates, (int, float)):
        sample_rates = (sample_rates,)
    out = {}
    for fs in sample_rates:
        fsv = _sample_rate(fs, allow_none=False)
        key = f"{int(fsv)}" if float(fsv).is_integer() else f"{fsv:g}"
        out[key] = [[float(v) for v in flt.sos(fsv)] for flt in filters]
    return out


def render_text(filters, version, *, sample_rates=EXPORT_SAMPLE_RATES, title="",
                preattenuation_db=None, notes=()):
    """Plain-text description of a filter cascade that a DSP user can read.

    Parameters
    ----------
    filters : sequence of Filter
    version : str
        Version stamp written in the header (e.g. ``roommodes.__version__``).
    sample_rates : sequence of int
        Rates of the coefficient blocks, Hz.
    title : str
        Free text after the header (channel name, room).
    preattenuation_db : float, optional
        Written as the input attenuation to apply before the filters.
    notes : sequence of str
        Extra lines (warnings, cautions), each written as a comment.

    Returns
    -------
    str
        Lines starting with ``#`` are comments; coefficients are written with 17
        significant digits (enough to round-trip a double).
    """
    filters = list(filters)
    _specs(filters)
    lines = [f"# roommodes {version}: correction filters", "# format: plain text, version 1"]
    if title:
        lines.append(f"# {title}")
    lines += [
        "# Q convention: Audio EQ Cookbook (R. Bristow-Johnson). Peaking: Q from the bandwidth",
        "#   BW in octaves between the half-gain (dB) points, 1/Q = 2 sinh(ln2/2 BW);",
        "#   Q3dB is the same filter's Q measured 3 dB below its peak (|gain| > 3 dB).",
        "#   Shelves: Cookbook shelf Q and slope S; high-pass: Q 0.7071 is Butterworth.",
    ]
    if preattenuation_db is not None:
        pre = _finite_float("preattenuation_db", preattenuation_db, lo=0.0, hi=60.0)
        lines.append(f"preattenuation_db {pre:.2f}")
    lines.append("")
    lines.append("# n  type        freq_hz   gain_db       q   extra")
    if not filters:
        lines.append("# (no filters)")
    for n, flt in enumerate(filters, 1):
        if flt.type == "peaking":
            q3 = q_at_3db_below_peak(flt.q, flt.gain_db)
            extra = f"BW {flt.bandwidth_octaves:.3f} oct" + (
                f", Q3dB {q3:.3f}" if np.isfinite(q3) else "")
        elif flt.type == "highpass":
            extra = ""
        else:
            extra = f"S {flt.slope:.3f}"
        lines.append(f"{n:3d}  {flt.type:<10s} {flt.freq_hz:9.2f} {flt.gain_db:+9.2f} "
                     f"{flt.q:7.3f}   {extra}".rstrip())
    for fs_key, rows in sos_export(filters, sample_rates).items():
        lines.append("")
        lines.append(f"# second-order sections at {fs_key} Hz: b0 b1 b2 a0 a1 a2")
        lines.append(f"sample_rate {fs_key}")
        for row in rows:
            lines.append(" ".join(f"{v:.17g}" for v in row))
    if notes:
        lines.append("")
        lines += [f"# {s}" for s in notes]
    return "\n".join(lines) + "\n"
