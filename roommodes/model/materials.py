"""Library of surface absorption coefficients, and interpolation between bands.

The library lives in ``roommodes/data/materials.toml``: common room surfaces with
their random-incidence energy absorption coefficients at octave-band centres, each
with the handbook table it comes from. Handbook tables stop at 125 Hz; every entry
also carries a 63 Hz value estimated by a stated rule (``extrapolated_hz`` names the
estimated bands, ``extrapolation_rule`` the rule; the rules are described at the top
of the TOML file).

Reading the packaged TOML file is the one piece of I/O here; it happens once, on the
first call, through :mod:`importlib.resources`.
"""

from __future__ import annotations

import difflib
import tomllib
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np

__all__ = [
    "Material",
    "material_names",
    "get_material",
    "absorption_at",
]

#: Version of the library file layout this module reads.
SCHEMA_VERSION = 1
#: Largest relative standard deviation of a material's absorption (``absorption_rel``) accepted.
MAX_ABSORPTION_REL = 2.0


@dataclass(frozen=True)
class Material:
    """One surface of the absorption library.

    Attributes
    ----------
    name : str
        Kebab-case key used in room files (``"carpet-on-concrete"``).
    description : str
        What the surface is.
    bands_hz : tuple of float
        Octave-band centres in Hz, strictly rising.
    absorption : tuple of float
        Random-incidence energy absorption coefficient at each band, 0 <= alpha < 1.
    source : str
        Book, edition and table the values come from.
    extrapolated_hz : tuple of float
        Bands whose value is an estimate of ours rather than the source's.
    source_note : str
        How the values were checked; "memory" marks values recalled, not seen.
    extrapolation_rule : str
        ``"hold"`` or ``"porous-ratio"`` (see the TOML file header).
    absorption_rel : float or None
        The material's own range: relative standard deviation of its absorption (all bands
        together), used by ``--uncertainty`` instead of the room file's default; None when the
        library gives none.
    absorption_rel_basis : str
        Why that range.
    """

    name: str
    description: str
    bands_hz: tuple
    absorption: tuple
    source: str
    extrapolated_hz: tuple = ()
    source_note: str = ""
    extrapolation_rule: str = ""
    absorption_rel: float | None = None
    absorption_rel_basis: str = ""

    def at(self, freq_hz):
        """Absorption at ``freq_hz`` (Hz), interpolated as in :func:`absorption_at`."""
        return absorption_at(self.bands_hz, self.absorption, freq_hz)


def _check_entry(entry, where):
    required = ("key", "description", "bands_hz", "absorption", "source")
    missing = [k for k in required if k not in entry]
    if missing:
        raise ValueError(f"{where}: missing key(s) {', '.join(missing)}")
    bands = np.asarray(entry["bands_hz"], dtype=float)
    alpha = np.asarray(entry["absorption"], dtype=float)
    if bands.ndim != 1 or bands.shape != alpha.shape or bands.size < 1:
        raise ValueError(f"{where}: bands_hz and absorption must be lists of equal length")
    if np.any(bands <= 0) or np.any(np.diff(bands) <= 0):
        raise ValueError(f"{where}: bands_hz must be positive and strictly rising")
    if np.any(alpha < 0) or np.any(alpha >= 1):
        raise ValueError(f"{where}: absorption must lie in 0 <= alpha < 1")
    rel = entry.get("absorption_rel")
    if rel is not None:
        if isinstance(rel, bool) or not isinstance(rel, (int, float)) or not 0.0 <= float(rel) <= MAX_ABSORPTION_REL:
            raise ValueError(f"{where}: absorption_rel must be a relative standard deviation from 0 to "
                             f"{MAX_ABSORPTION_REL:g} (e.g. 0.3 for 30 %), got {rel!r}")
        if not str(entry.get("absorption_rel_basis", "")).strip():
            raise ValueError(f"{where}: absorption_rel needs an absorption_rel_basis saying where the range comes from")
    return Material(
        name=str(entry["key"]),
        description=str(entry["description"]),
        bands_hz=tuple(float(b) for b in bands),
        absorption=tuple(float(a) for a in alpha),
        source=str(entry["source"]),
        extrapolated_hz=tuple(float(b) for b in entry.get("extrapolated_hz", ())),
        source_note=str(entry.get("source_note", "")),
        extrapolation_rule=str(entry.get("extrapolation", "")),
        absorption_rel=None if rel is None else float(rel),
        absorption_rel_basis=str(entry.get("absorption_rel_basis", "")),
    )


@lru_cache(maxsize=1)
def _library():
    text = resources.files("roommodes.data").joinpath("materials.toml").read_text("utf-8")
    data = tomllib.loads(text)
    version = data.get("schema_version")
    if version != SCHEMA_VERSION:
        raise ValueError(
            f"materials.toml has schema_version {version!r}; this roommodes reads "
            f"version {SCHEMA_VERSION}"
        )
    out = {}
    for i, entry in enumerate(data.get("material", [])):
        m = _check_entry(entry, f"materials.toml, material #{i + 1} ({entry.get('key', '?')})")
        if m.name in out:
            raise ValueError(f"materials.toml: duplicate key {m.name!r}")
        out[m.name] = m
    return out


def material_names():
    """Sorted list of the library's material names."""
    return sorted(_library())


def get_material(name):
    """The library entry called ``name``.

    Parameters
    ----------
    name : str
        Kebab-case material name, e.g. ``"plasterboard-on-studs"``. Case and
        surrounding spaces are ignored; underscores and spaces count as hyphens.

    Returns
    -------
    Material

    Raises
    ------
    ValueError
        When no entry has that name; the message lists the closest names.
    """
    lib = _library()
    key = str(name).strip().lower().replace("_", "-").replace(" ", "-")
    if key in lib:
        return lib[key]
    close = difflib.get_close_matches(key, list(lib), n=4, cutoff=0.5)
    hint = (
        f"; did you mean {', '.join(repr(c) for c in close)}?"
        if close
        else f"; known materials: {', '.join(sorted(lib))}"
    )
    raise ValueError(f"unknown material {name!r}{hint}")


def absorption_at(bands_hz, absorption, freq_hz):
    """Absorption coefficient at arbitrary frequencies from band values.

    Parameters
    ----------
    bands_hz : array_like, shape (B,)
        Band centre frequencies in Hz, > 0 and strictly rising.
    absorption : array_like, shape (B,) or (..., B)
        Absorption coefficient at each band, 0..1. Leading axes (several surfaces)
        are kept.
    freq_hz : float or array_like, shape (F,)
        Frequencies in Hz, > 0.

    Returns
    -------
    alpha : float or ndarray, shape (..., F)
        Interpolated coefficients (a float for scalar ``freq_hz`` and 1-D
        ``absorption``).

    Notes
    -----
    Linear interpolation in ``log f``: between centres ``f_i < f < f_{i+1}``

    .. math:: \\alpha(f) = \\alpha_i + (\\alpha_{i+1} - \\alpha_i)
              \\frac{\\ln(f / f_i)}{\\ln(f_{i+1} / f_i)}

    so the value is exact at the centres and lies between the two neighbouring band
    values. Below the lowest centre and above the highest the end values are held
    flat: no trend is extrapolated. A single band gives a constant.
    """
    b = np.asarray(bands_hz, dtype=float)
    a = np.asarray(absorption, dtype=float)
    f = np.asarray(freq_hz, dtype=float)
    if b.ndim != 1 or b.size == 0:
        raise ValueError(f"bands_hz must be a non-empty 1-D list of frequencies, got {bands_hz!r}")
    if not np.all(np.isfinite(b)) or np.any(b <= 0) or np.any(np.diff(b) <= 0):
        raise ValueError(f"bands_hz must be finite, > 0 Hz and strictly rising, got {bands_hz!r}")
    if a.ndim == 0 or a.shape[-1] != b.size:
        raise ValueError(
            f"absorption must have {b.size} values (one per band) along its last axis, "
            f"got shape {a.shape}"
        )
    if not np.all(np.isfinite(a)) or np.any(a < 0) or np.any(a > 1):
        raise ValueError("absorption must lie in 0..1 (random-incidence coefficients)")
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"freq_hz must be finite and > 0 Hz, got {freq_hz!r}")
    if b.size == 1:
        out = np.broadcast_to(a[..., :1], a.shape[:-1] + (f.size,)).reshape(
            a.shape[:-1] + f.shape
        )
    else:
        x = np.log(f).ravel()
        xb = np.log(b)
        rows = a.reshape(-1, b.size)
        out = np.stack([np.interp(x, xb, r) for r in rows])
        out = out.reshape(a.shape[:-1] + f.shape)
    out = np.array(out, dtype=float)
    return float(out) if out.ndim == 0 else out
