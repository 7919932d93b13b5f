"""Exponential sine sweeps: the measurement signal, its description and its inverse.

The sweep of Farina (2000) is

.. math:: x(t) = A \\sin\\left(2 \\pi f_1 L \\left(e^{t/L} - 1\\right)\\right),
          \\qquad L = T / \\ln(f_2 / f_1),

with instantaneous frequency ``f(t) = f1 exp(t / L)``. A harmonic of order ``n``
of the swept frequency appears where the sweep itself reaches ``n f``, that is
``L ln(n)`` earlier; after deconvolution the harmonic responses sit at negative
times ``-L ln(n)``, separated from the linear response.

Synchronised sweep (the default here): Novak, Simon & Lotton (2015) round ``L`` so
that ``f1 L`` is a whole number. Then ``x(t + L ln n) = A sin(n phi(t))`` exactly
(``phi`` the sweep's phase), so the harmonic responses have a well-defined phase
and a pure delay of ``L ln n``. The price is that the sweep's length is
``L ln(f2/f1)`` rather than the requested length (within ``ln(f2/f1) / (2 f1)``
seconds of it). With ``synchronized=False`` the length is the requested one and
``L = T / ln(f2/f1)`` exactly as in Farina (2000); harmonic magnitudes are then
still right, their phases are offset by a constant.

Everything needed to rebuild the emitted signal sample for sample (and hence to
deconvolve a recording of it) is held by :class:`SweepSpec`, which converts to and
from a small JSON-able dictionary with a schema version.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with
   a swept-sine technique", 108th AES Convention, Paris, 2000, preprint 5093.
.. [2] A. Novak, L. Simon, P. Lotton, "Synchronized swept-sine: theory, application,
   and implementation", J. Audio Eng. Soc. 63(10):786-798, 2015.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .signals import _half_hann

__all__ = [
    "MAX_LEVEL_DBFS",
    "SWEEP_SCHEMA",
    "SWEEP_SCHEMA_VERSION",
    "SweepSpec",
    "exponential_sweep",
    "harmonic_delay_s",
    "instantaneous_frequency_hz",
    "inverse_filter",
    "sweep_signal",
    "sweep_time_constant_s",
]

#: Name and version written into every sweep description.
SWEEP_SCHEMA = "roommodes.sweep"
SWEEP_SCHEMA_VERSION = 1

#: Highest allowed sweep level (peak) in dBFS. Kept 1 dB below full scale because
#: reconstruction filters in converters overshoot between samples and because a
#: signal at full scale leaves no room for any gain after the file (common practice).
MAX_LEVEL_DBFS = -1.0
_MIN_LEVEL_DBFS = -60.0


def sweep_time_constant_s(duration_s, f1_hz, f2_hz):
    """Farina's sweep time constant ``L = T / ln(f2 / f1)`` in seconds.

    Parameters
    ----------
    duration_s : float
        Sweep length ``T`` in s, > 0.
    f1_hz, f2_hz : float
        Start and end frequency in Hz, 0 < f1 < f2.

    Returns
    -------
    float
        ``L`` in s; 20 Hz-20 kHz over 10 s gives 1.447648 s.

    References
    ----------
    .. [1] A. Farina, AES 108th Convention, 2000, preprint 5093.
    """
    duration_s, f1_hz, f2_hz = float(duration_s), float(f1_hz), float(f2_hz)
    if not (duration_s > 0 and 0 < f1_hz < f2_hz):
        raise ValueError(
            f"need duration_s > 0 and 0 < f1_hz < f2_hz, got {duration_s:g} s, "
            f"{f1_hz:g}..{f2_hz:g} Hz"
        )
    return duration_s / np.log(f2_hz / f1_hz)


@dataclass(frozen=True)
class SweepSpec:
    """Everything needed to rebuild an emitted sweep and deconvolve a recording of it.

    Attributes
    ----------
    fs_hz : int
        Sample rate in Hz.
    f1_hz, f2_hz : float
        Nominal start and end frequency in Hz.
    duration_s : float
        Length of the sweep itself (``n_sweep / fs_hz``), without the silences.
    n_sweep : int
        Sweep length in samples.
    time_constant_s : float
        ``L`` of the sweep law ``f(t) = f1 exp(t / L)``.
    synchronized : bool
        Whether ``f1 L`` was rounded to a whole number (Novak et al. 2015).
    level_dbfs : float
        Peak level of the sweep in dBFS (amplitude ``10**(level_dbfs / 20)``).
    fade_in_s, fade_out_s : float
        Raised-cosine fade lengths at the sweep's start and end.
    n_before, n_after : int
        Leading and trailing silence in samples.
    """

    fs_hz: int
    f1_hz: float
    f2_hz: float
    duration_s: float
    n_sweep: int
    time_constant_s: float
    synchronized: bool
    level_dbfs: float
    fade_in_s: float
    fade_out_s: float
    n_before: int
    n_after: int

    @property
    def amplitude(self):
        """Peak amplitude of the sweep in full-scale units."""
        return 10.0 ** (self.level_dbfs / 20.0)

    @property
    def n_total(self):
        """Length of the emitted signal (silence, sweep, silence) in samples."""
        return self.n_before + self.n_sweep + self.n_after

    @property
    def silence_before_s(self):
        """Leading silence in s."""
        return self.n_before / self.fs_hz

    @property
    def silence_after_s(self):
        """Trailing silence in s."""
        return self.n_after / self.fs_hz

    @property
    def sweep_end_s(self):
        """Time from the start of the emitted signal to the end of the sweep, in s."""
        return (self.n_before + self.n_sweep) / self.fs_hz

    def to_dict(self):
        """A JSON-able dictionary with the schema name and version.

        Returns
        -------
        dict
            ``{"schema": "roommodes.sweep", "schema_version": 1, "fs_hz": ..., ...}``
            with every field of the dataclass (plain ``int``, ``float``, ``bool``).
        """
        d = {"schema": SWEEP_SCHEMA, "schema_version": SWEEP_SCHEMA_VERSION}
        for k, v in asdict(self).items():
            d[k] = v.item() if isinstance(v, np.generic) else v
        return d

    @classmethod
    def from_dict(cls, d):
        """Rebuild a spec written by :meth:`to_dict`, checking schema and consistency.

        Parameters
        ----------
        d : dict
            As written by :meth:`to_dict` (extra keys are ignored).

        Returns
        -------
        SweepSpec

        Raises
        ------
        ValueError
            Wrong schema or version, a missing key, a value of the wrong type, or values
            that contradict each other (the message names the key).
        """
        if not isinstance(d, dict):
            # a value read from a file: report it like any other bad value
            raise ValueError(  # noqa: TRY004
                f"sweep description must be a JSON object, got {type(d).__name__}")
        if d.get("schema") != SWEEP_SCHEMA:
            raise ValueError(
                f"not a sweep description: 'schema' is {d.get('schema')!r}, "
                f"expected {SWEEP_SCHEMA!r}"
            )
        ver = d.get("schema_version")
        if ver != SWEEP_SCHEMA_VERSION:
            raise ValueError(
                f"sweep description has schema_version {ver!r}; this version of roommodes "
                f"reads version {SWEEP_SCHEMA_VERSION}"
            )
        kinds = {
            "fs_hz": int, "n_sweep": int, "n_before": int, "n_after": int,
            "synchronized": bool,
        }
        vals = {}
        for name in cls.__dataclass_fields__:
            if name not in d:
                raise ValueError(f"sweep description lacks the key {name!r}")
            v = d[name]
            want = kinds.get(name, float)
            if want is bool:
                ok = isinstance(v, bool)
            elif want is int:
                ok = isinstance(v, int) and not isinstance(v, bool)
            else:
                ok = isinstance(v, (int, float)) and not isinstance(v, bool) and np.isfinite(v)
            if not ok:
                raise ValueError(
                    f"sweep description key {name!r} must be {want.__name__}, got {v!r}")
            vals[name] = want(v)
        spec = cls(**vals)
        _validate(spec.fs_hz, spec.f1_hz, spec.f2_hz, spec.duration_s, spec.level_dbfs,
                  spec.fade_in_s, spec.fade_out_s, spec.silence_before_s, spec.silence_after_s)
        if abs(spec.duration_s - spec.n_sweep / spec.fs_hz) > 0.5 / spec.fs_hz:
            raise ValueError(
                f"sweep description is inconsistent: duration_s = {spec.duration_s!r} but "
                f"n_sweep / fs_hz = {spec.n_sweep / spec.fs_hz!r}"
            )
        if spec.synchronized:
            k = spec.f1_hz * spec.time_constant_s
            if abs(k - round(k)) > 1e-6 or round(k) < 1:
                raise ValueError(
                    f"sweep description is inconsistent: synchronized but f1_hz * "
                    f"time_constant_s = {k!r} is not a whole number"
                )
        elif not np.isclose(spec.time_constant_s,
                            sweep_time_constant_s(spec.duration_s, spec.f1_hz, spec.f2_hz),
                            rtol=1e-9):
            raise ValueError(
                "sweep description is inconsistent: time_constant_s does not equal "
                "duration_s / ln(f2_hz / f1_hz)"
            )
        return spec


def _validate(fs_hz, f1_hz, f2_hz, duration_s, level_dbfs, fade_in_s, fade_out_s,
              silence_before_s, silence_after_s):
    if not isinstance(fs_hz, (int, np.integer)) or not 8000 <= fs_hz <= 384000:
        raise ValueError(f"fs_hz must be a whole number 8000..384000 Hz, got {fs_hz!r}")
    if not (np.isfinite(f1_hz) and 1.0 <= f1_hz):
        raise ValueError(f"f1_hz must be >= 1 Hz, got {f1_hz!r}")
    if not (np.isfinite(f2_hz) and f1_hz * 2 <= f2_hz < fs_hz / 2):
        raise ValueError(
            f"f2_hz must be at least one octave above f1_hz ({2 * f1_hz:g} Hz) and below "
            f"half the sample rate ({fs_hz / 2:g} Hz), got {f2_hz!r}"
        )
    if not (np.isfinite(duration_s) and 0.5 <= duration_s <= 600):
        raise ValueError(f"duration_s must be 0.5..600 s, got {duration_s!r}")
    if not (np.isfinite(level_dbfs) and _MIN_LEVEL_DBFS <= level_dbfs <= MAX_LEVEL_DBFS):
        raise ValueError(
            f"level_dbfs must be {_MIN_LEVEL_DBFS:g}..{MAX_LEVEL_DBFS:g} dBFS (peak), got "
            f"{level_dbfs!r}; levels closer to full scale risk clipping in the converter"
        )
    for name, v in (("fade_in_s", fade_in_s), ("fade_out_s", fade_out_s)):
        if not (np.isfinite(v) and 0 <= v <= duration_s / 4):
            raise ValueError(
                f"{name} must be 0..{duration_s / 4:g} s (a quarter of the sweep), got {v!r}")
    for name, v in (("silence_before_s", silence_before_s), ("silence_after_s", silence_after_s)):
        if not (np.isfinite(v) and 0 <= v <= 60):
            raise ValueError(f"{name} must be 0..60 s, got {v!r}")


def exponential_sweep(
    fs_hz=48000,
    duration_s=10.0,
    f1_hz=15.0,
    f2_hz=20000.0,
    level_dbfs=-12.0,
    fade_in_s=0.1,
    fade_out_s=0.01,
    silence_before_s=0.5,
    silence_after_s=3.0,
    synchronized=True,
):
    """An exponential sine sweep with leading and trailing silence, and its description.

    Parameters
    ----------
    fs_hz : int
        Sample rate in Hz, 8000..384000.
    duration_s : float
        Requested sweep length in s, 0.5..600 (see Notes for the synchronised sweep).
    f1_hz, f2_hz : float
        Start and end frequency in Hz; ``f1 >= 1``, ``f2 >= 2 f1``, ``f2 < fs / 2``.
    level_dbfs : float
        Peak level in dBFS, -60..-1; default -12 dBFS. Above -1 dBFS is refused: a
        converter's reconstruction can overshoot between samples, and a sweep at full
        scale excites a loudspeaker far harder than programme material at low
        frequency, where each octave gets the same energy (common practice).
    fade_in_s, fade_out_s : float
        Raised-cosine (half-Hann) fades at the sweep's start and end, each 0..T/4 s.
        The fade-in attenuates the first ``fade_in_s / (L ln 2)`` octaves above f1.
    silence_before_s, silence_after_s : float
        Zeros before and after the sweep, 0..60 s. The trailing silence should exceed
        the room's decay time so the recording holds the whole response.
    synchronized : bool
        Round ``L`` so ``f1 L`` is a whole number (Novak et al. 2015); default True.

    Returns
    -------
    x : ndarray, shape (spec.n_total,)
        The emitted signal in full-scale units.
    spec : SweepSpec
        Its description (see :meth:`SweepSpec.to_dict`).

    Notes
    -----
    ``x(t) = A sin(2 pi f1 L (exp(t/L) - 1))`` for ``t = k / fs``, ``0 <= k < n``
    (Farina 2000). Classic sweep: ``n = round(T fs)``, ``L = (n / fs) / ln(f2/f1)``.
    Synchronised sweep: ``L = round(f1 T / ln(f2/f1)) / f1`` (Novak et al. 2015,
    as recalled), ``n = round(L ln(f2/f1) fs)``, so the actual length can differ
    from the requested one by up to ``ln(f2/f1) / (2 f1)`` s; ``spec.duration_s`` holds
    the actual one.

    References
    ----------
    .. [1] A. Farina, AES 108th Convention, 2000, preprint 5093.
    .. [2] A. Novak, L. Simon, P. Lotton, J. Audio Eng. Soc. 63(10):786-798, 2015.
    """
    if isinstance(fs_hz, float) and fs_hz.is_integer():
        fs_hz = int(fs_hz)
    f1_hz, f2_hz, duration_s = float(f1_hz), float(f2_hz), float(duration_s)
    level_dbfs = float(level_dbfs)
    fade_in_s, fade_out_s = float(fade_in_s), float(fade_out_s)
    silence_before_s, silence_after_s = float(silence_before_s), float(silence_after_s)
    _validate(fs_hz, f1_hz, f2_hz, duration_s, level_dbfs, fade_in_s, fade_out_s,
              silence_before_s, silence_after_s)
    c = np.log(f2_hz / f1_hz)
    if synchronized:
        k = round(f1_hz * duration_s / c)
        if k < 1:
            raise ValueError(
                f"duration_s = {duration_s:g} s is too short for a synchronised sweep from "
                f"{f1_hz:g} Hz (need at least {c / f1_hz:.3g} s)"
            )
        time_constant_s = k / f1_hz
        n_sweep = round(time_constant_s * c * fs_hz)
    else:
        n_sweep = round(duration_s * fs_hz)
        time_constant_s = (n_sweep / fs_hz) / c
    spec = SweepSpec(
        fs_hz=int(fs_hz),
        f1_hz=f1_hz,
        f2_hz=f2_hz,
        duration_s=n_sweep / fs_hz,
        n_sweep=n_sweep,
        time_constant_s=float(time_constant_s),
        synchronized=bool(synchronized),
        level_dbfs=level_dbfs,
        fade_in_s=fade_in_s,
        fade_out_s=fade_out_s,
        n_before=round(silence_before_s * fs_hz),
        n_after=round(silence_after_s * fs_hz),
    )
    _validate(spec.fs_hz, f1_hz, f2_hz, spec.duration_s, level_dbfs, fade_in_s, fade_out_s,
              silence_before_s, silence_after_s)
    return sweep_signal(spec), spec


def _sweep_only(spec):
    """The sweep without silences, faded, at its amplitude."""
    t = np.arange(spec.n_sweep) / spec.fs_hz
    L = spec.time_constant_s
    x = spec.amplitude * np.sin(2.0 * np.pi * spec.f1_hz * L * np.expm1(t / L))
    n_in = round(spec.fade_in_s * spec.fs_hz)
    n_out = round(spec.fade_out_s * spec.fs_hz)
    if n_in:
        x[:n_in] *= _half_hann(n_in)
    if n_out:
        x[-n_out:] *= _half_hann(n_out)[::-1]
    return x


def sweep_signal(spec):
    """Rebuild the emitted signal (silence, sweep, silence) from its description.

    Parameters
    ----------
    spec : SweepSpec

    Returns
    -------
    x : ndarray, shape (spec.n_total,)
        Identical, sample for sample, to what :func:`exponential_sweep` returned.
    """
    return np.concatenate([np.zeros(spec.n_before), _sweep_only(spec), np.zeros(spec.n_after)])


def harmonic_delay_s(spec_or_time_constant_s, order):
    """How much earlier than the linear response the harmonic of ``order`` arrives.

    Parameters
    ----------
    spec_or_time_constant_s : SweepSpec or float
        A sweep, or its time constant ``L`` in s.
    order : int or array_like of int
        Harmonic order(s) ``n >= 1``.

    Returns
    -------
    float or ndarray
        ``L ln(n)`` in s (Farina 2000); 20 Hz-20 kHz in 10 s: 1.00343 s for n = 2.
    """
    L = getattr(spec_or_time_constant_s, "time_constant_s", spec_or_time_constant_s)
    n = np.asarray(order)
    if np.any(n < 1):
        raise ValueError(f"harmonic order must be >= 1, got {order!r}")
    out = float(L) * np.log(n)
    return float(out) if out.ndim == 0 else out


def instantaneous_frequency_hz(spec, t_s):
    """Frequency of the sweep ``f1 exp(t / L)`` at times ``t_s`` from the sweep's start."""
    return spec.f1_hz * np.exp(np.asarray(t_s, dtype=float) / spec.time_constant_s)


def inverse_filter(spec):
    """Farina's inverse filter: the time-reversed sweep with a 6 dB/octave envelope.

    Parameters
    ----------
    spec : SweepSpec

    Returns
    -------
    g : ndarray, shape (spec.n_sweep,)
        ``g[k] = c x[n-1-k] exp(-k / (fs L))`` with ``x`` the faded sweep (no silences).
        Convolving the sweep with ``g`` gives a pulse at sample ``n - 1`` with unit
        gain in the band (``|X(f) G(f)| = 1`` between f1 and f2 away from the fades).

    Notes
    -----
    The envelope falls from 1 to ``exp(-T/L) = f1/f2`` (60 dB for 20 Hz-20 kHz), which
    whitens the sweep's pink spectrum. By the stationary-phase approximation the
    sweep's spectrum is ``|X(f)| = fs (A/2) sqrt(L / f)``, and the reversed, weighted
    sweep has ``|G(f)| = c fs (A/2) sqrt(L / f) (f / f_e)``, ``f_e`` the frequency at the
    sweep's last sample, so ``c = 4 f_e / (fs**2 A**2 L)`` gives a flat unit product
    (derived here from the sweep law; checked numerically in tests/test_sweep.py).

    References
    ----------
    .. [1] A. Farina, AES 108th Convention, 2000, preprint 5093.
    """
    x = _sweep_only(spec)
    fs, L, A = spec.fs_hz, spec.time_constant_s, spec.amplitude
    k = np.arange(spec.n_sweep)
    f_end = spec.f1_hz * np.exp((spec.n_sweep - 1) / (fs * L))  # frequency at g[0]
    c = 4.0 * f_end / (fs**2 * A**2 * L)
    return c * x[::-1] * np.exp(-k / (fs * L))
