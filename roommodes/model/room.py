"""The room, its surfaces, and where the loudspeakers and the seat are.

Coordinates (metres) have their origin at the floor corner where the front wall (the
wall behind the speakers) meets the left wall, as seen from the seat facing the
speakers::

        back wall (x = Lx)
      +-------------------+
      |                   |
 left |       seat        | right
 wall |                   | wall
(y=0) |                   | (y = Ly)
      |   L           R   |
      +-------------------+   z is up: floor z = 0, ceiling z = Lz
        front wall (x = 0)

x runs from the front wall toward the back wall, y from the left wall to the right
wall, z up from the floor. The six surfaces are named ``front``, ``back``, ``left``,
``right``, ``floor`` and ``ceiling``, always in that order (:data:`WALLS`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .materials import get_material
from .walls import impedance_from_absorption

__all__ = [
    "WALLS",
    "WALL_AXIS",
    "Surface",
    "Cabinet",
    "Speaker",
    "Seat",
    "Layout",
    "SubSearch",
    "SystemSettings",
    "Box",
    "ROLES",
    "Room",
    "Uncertainty",
    "speed_of_sound",
]

#: Surface names in the order every (6, ...) array uses.
WALLS = ("front", "back", "left", "right", "floor", "ceiling")
#: Axis (0 = x, 1 = y, 2 = z) normal to each surface of :data:`WALLS`.
WALL_AXIS = (0, 0, 1, 1, 2, 2)
#: Whether each surface of :data:`WALLS` lies at the far end of its axis (x = Lx, ...).
WALL_FAR = (False, True, False, True, False, True)


#: Plausible room dimensions, m (what a room file may give).
MAX_DIMENSION_M = 100.0
#: Least absorption coefficient used: a surface given 0 (rigid, lossless) is taken at this
#: minimum, so that every mode has a finite decay (T60 of the order of 100 s in a small room)
#: and every command treats a rigid box alike. Real walls absorb more (painted concrete
#: about 0.01 at low frequencies, common practice).
MIN_ABSORPTION = 0.001
MIN_DIMENSION_M = 0.5
#: Speakers and the seat must be at least this far from every surface, m.
WALL_MARGIN_M = 0.02
#: What a speaker does: a full-range "main" or a "sub" (subwoofer, fed the bass only).
ROLES = ("main", "sub")


def speed_of_sound(temperature_c=20.0):
    """Speed of sound in dry air, m/s.

    ``c = 331.3 sqrt(1 + T / 273.15)``: 343.2 m/s at 20 C. This is the one place the
    package computes it.

    References
    ----------
    L. E. Kinsler, A. R. Frey, A. B. Coppens, J. V. Sanders, Fundamentals of Acoustics,
    4th ed., Wiley, 2000, eq. 5.6.9 (ideal-gas speed of sound; the 331.3 m/s at 0 C
    figure is the commonly quoted value).
    """
    return 331.3 * np.sqrt(1.0 + np.asarray(temperature_c, dtype=float) / 273.15)


@dataclass(frozen=True)
class Surface:
    """One of the six room surfaces and its random-incidence absorption.

    Attributes
    ----------
    name : str
        One of :data:`WALLS`.
    absorption : tuple of float
        Random-incidence energy absorption coefficient(s), 0 <= alpha < 1: one value
        (frequency independent) or one per band of ``bands_hz``.
    bands_hz : tuple of float or None
        Band centre frequencies (Hz) of ``absorption``; None for a single value.
    material : str or None
        Library material the values came from, if any.
    extrapolated_hz : tuple of float
        Bands whose values are extrapolated below the source's lowest band.
    absorption_rel : float or None
        The surface's own range, given in the room file: relative standard deviation of its
        absorption, used by ``--uncertainty`` before anything else
        (:meth:`Uncertainty.surface_rel`); None when not given.
    """

    name: str
    absorption: tuple
    bands_hz: tuple | None = None
    material: str | None = None
    extrapolated_hz: tuple = ()
    absorption_rel: float | None = None

    @classmethod
    def from_material(cls, name, material, absorption_rel=None):
        """The surface ``name`` made of the library material ``material``.

        It carries the material's band values, name and extrapolated bands; its range is the
        material's own through :meth:`Uncertainty.surface_rel` (when the uncertainty lets
        library ranges count), or ``absorption_rel`` when given (the surface's own).

        Raises
        ------
        ValueError
            When the library has no such material (the message lists the closest names).
        """
        m = get_material(material)
        return cls(name, tuple(m.absorption), tuple(m.bands_hz), m.name, tuple(m.extrapolated_hz), absorption_rel)

    def absorption_at(self, freq_hz):
        """Absorption at ``freq_hz``: linear in log frequency between band centres,
        held constant beyond the first and last band."""
        f = np.asarray(freq_hz, dtype=float)
        if self.bands_hz is None or len(self.absorption) == 1:
            return np.full(f.shape, float(self.absorption[0]))
        return np.interp(np.log(f), np.log(np.asarray(self.bands_hz)), np.asarray(self.absorption))

    def describe(self):
        """Short text for tables: the material or the value(s)."""
        if self.material:
            return self.material
        if self.bands_hz is None:
            return f"alpha {self.absorption[0]:.2f}"
        pairs = ", ".join(f"{a:.2f}@{b:g}" for a, b in zip(self.absorption, self.bands_hz))
        return f"alpha {pairs}"


@dataclass(frozen=True)
class Cabinet:
    """A speaker's box: its outer size and where the drivers sit on its front face.

    The speaker's ``position_m`` is the woofer's centre, on the front face; the box
    extends ``depth`` behind it. Positions on the front face are measured from the face's
    vertical centre line (``across``, positive toward the listener's axis, i.e. inboard,
    so that a mirrored pair has mirrored boxes) and from the box's bottom (``up``).

    Attributes
    ----------
    size_m : tuple of float
        (width, height, depth) of the box, m, each > 0.
    woofer_m : tuple of float
        (across, up) of the woofer's centre on the front face, m.
    tweeter_m : tuple of float or None
        (across, up) of the tweeter's centre, m; None when the speaker has one driver
        (or the acoustic centre is the woofer's).
    """

    size_m: tuple
    woofer_m: tuple
    tweeter_m: tuple | None = None

    @property
    def centre_above_woofer_m(self):
        """Height of the tweeter (or the woofer, without one) above the woofer's centre, m."""
        return 0.0 if self.tweeter_m is None else float(self.tweeter_m[1] - self.woofer_m[1])


@dataclass(frozen=True)
class Speaker:
    """A loudspeaker, modelled at low frequency as a point monopole.

    Attributes
    ----------
    name : str
        Channel name ("left", "right", ...).
    position_m : tuple of float
        Acoustic centre of the woofer (x, y, z), metres.
    lowcut_hz : float or None
        The speaker's own -3 dB point; None for a flat source.
    lowcut_order : int
        2 (sealed box) or 4 (vented box); see :mod:`roommodes.speaker`.
    response : tuple or None
        An imported anechoic curve ``(freq_hz, level_db)``; replaces the high-pass.
    sensitivity_db : float or None
        dB SPL at 1 m for 1 W, when known.
    amplifier_w : float or None
        Amplifier power per channel, watts.
    max_spl_db : float or None
        Maker's maximum SPL at 1 m, dB (for a sub: its maximum output).
    role : str
        "main" (full range, the default) or "sub" (a subwoofer); see :data:`ROLES`.
    cabinet : Cabinet or None
        The box, when the room file describes it (used by the placement search).
    gain_db, delay_ms : float
        A sub's level and delay as set on its controls or in the DSP (0 dB, 0 ms by default);
        the mains keep 0 (their delay is :attr:`SystemSettings.mains_delay_ms`).
    polarity : int
        A sub's polarity, +1 (normal) or -1 (inverted).
    """

    name: str
    position_m: tuple
    lowcut_hz: float | None = None
    lowcut_order: int = 2
    response: tuple | None = None
    response_file: str | None = None
    sensitivity_db: float | None = None
    amplifier_w: float | None = None
    max_spl_db: float | None = None
    role: str = "main"
    cabinet: Cabinet | None = None
    gain_db: float = 0.0
    delay_ms: float = 0.0
    polarity: int = 1

    def moved(self, position_m):
        """The same speaker at another position."""
        return replace(self, position_m=tuple(float(v) for v in position_m))

    @property
    def is_sub(self):
        """True for a subwoofer."""
        return self.role == "sub"


@dataclass(frozen=True)
class Seat:
    """One listening position and how much it counts.

    Attributes
    ----------
    name : str
    position_m : tuple of float
        Ear position (x, y, z), metres.
    weight : float
        Relative weight (>= 0) in seat-averaged figures; weights need not sum to 1.
    """

    name: str
    position_m: tuple
    weight: float = 1.0


@dataclass(frozen=True)
class Box:
    """An axis-aligned box (a region allowed to subs, or a keep-out), metres."""

    name: str
    min_m: tuple
    max_m: tuple

    def contains(self, points_m):
        """Boolean mask of the points (..., 3) inside the box (edges included)."""
        p = np.asarray(points_m, dtype=float)
        return np.all((p >= np.asarray(self.min_m)) & (p <= np.asarray(self.max_m)), axis=-1)


@dataclass(frozen=True)
class SubSearch:
    """Constraints of the subwoofer search (the room file's ``[subs]`` table).

    Attributes
    ----------
    counts : tuple of int
        How many subs to consider (each of 1, 2, 4).
    crossover_hz : tuple of float
        (low, high) range searched for the crossover frequency, Hz.
    max_delay_ms : float
        Largest delay the DSP can add to a sub (or to the mains), ms.
    max_gain_db : float
        Largest boost of a sub's level, dB (cuts are not limited).
    height_m : float
        Woofer-centre height of the candidate positions that regions generate, m.
    step_m : float
        Grid step of the candidate positions inside the regions, m.
    wall_gap_m : float
        Distance of the woofer centre from the walls on the grid, m.
    regions : tuple of Box
        Where subs may go; empty means along the walls (within ``wall_band_m`` of a side,
        front or back wall).
    wall_band_m : float
        Width of the default band along the walls, m.
    candidates_m : tuple of tuple
        Extra candidate positions given one by one, m.
    keep_out : tuple of Box
        Boxes no sub may enter.
    band_hz : tuple of float
        Frequency band the score is computed over, Hz.
    """

    counts: tuple = (1, 2, 4)
    crossover_hz: tuple = (50.0, 120.0)
    max_delay_ms: float = 20.0
    max_gain_db: float = 6.0
    height_m: float = 0.3
    step_m: float = 0.25
    wall_gap_m: float = 0.2
    regions: tuple = ()
    wall_band_m: float = 0.8
    candidates_m: tuple = ()
    keep_out: tuple = ()
    band_hz: tuple = (20.0, 160.0)


@dataclass(frozen=True)
class SystemSettings:
    """How mains and subs are joined (the room file's ``[system]`` table).

    Attributes
    ----------
    crossover_hz : float or None
        Linkwitz-Riley 4th-order crossover: low-pass on every sub, high-pass on every main at
        this frequency; None: no crossover (mains and subs full range, each with only its own
        roll-off).
    mains_delay_ms : float
        Delay of the mains, ms (when a sub must come earlier than them).
    """

    crossover_hz: float | None = None
    mains_delay_ms: float = 0.0


@dataclass(frozen=True)
class Layout:
    """Where the speakers and the seat are.

    Attributes
    ----------
    speakers : tuple of Speaker
    seat_m : tuple of float
        Listening position (ear height), metres: the main seat.
    name : str
        "file" for the room file's own layout, or a preset name.
    seats : tuple of Seat
        All listening positions when the file lists several (``[seats.NAME]``), the main
        seat first; empty when there is one seat (``[seat]``). Use :attr:`all_seats`.

    Notes
    -----
    ``speakers`` holds every speaker, mains first and subs after them (the room file puts
    them in that order), so code that takes the first two as the stereo pair keeps working;
    :attr:`mains` and :attr:`subs` tell them apart.
    """

    speakers: tuple
    seat_m: tuple
    name: str = "file"
    seats: tuple = ()

    @property
    def mains(self):
        """The full-range speakers (role "main")."""
        return tuple(s for s in self.speakers if not s.is_sub)

    @property
    def subs(self):
        """The subwoofers (role "sub")."""
        return tuple(s for s in self.speakers if s.is_sub)

    @property
    def all_seats(self):
        """Every seat with its weight, the main seat first; the single seat as one."""
        if self.seats:
            return tuple(self.seats)
        return (Seat("seat", tuple(self.seat_m), 1.0),)

    @property
    def source_positions_m(self):
        """(N, 3) array of speaker positions."""
        return np.array([s.position_m for s in self.speakers], dtype=float)


@dataclass(frozen=True)
class Uncertainty:
    """How well the room file knows the room: standard deviations (the ``[uncertainty]`` table).

    The defaults are conservative figures for a tape-measure survey and handbook absorption
    values: 2 cm on each measured coordinate, 1 cm on each room dimension, 25 % on each
    surface's absorption, 1.5 C on the air temperature.

    Attributes
    ----------
    position_m : float
        Standard deviation of each coordinate of every speaker and seat position, m.
    size_m : float
        Standard deviation of each room dimension, m.
    absorption_rel : float
        Relative standard deviation of each surface's absorption (a log-normal factor of mean
        1 applied to all of the surface's band values), for surfaces without a range of their
        own (:meth:`surface_rel`).
    material_ranges : bool
        Whether a surface's library material's own range (``absorption_rel`` in the library)
        comes before :attr:`absorption_rel`: true for a room file whose ``[uncertainty]`` table
        does not state ``absorption_rel``; false when it is stated (the user's figure holds for
        every surface without a range of its own).
    temperature_c : float
        Standard deviation of the air temperature, C.
    """

    position_m: float = 0.02
    size_m: float = 0.01
    absorption_rel: float = 0.25
    temperature_c: float = 1.5
    material_ranges: bool = False

    def surface_rel(self, surface):
        """Relative sd of ``surface``'s absorption.

        The surface's own range (:attr:`Surface.absorption_rel`), else (with
        :attr:`material_ranges`) its library material's, else :attr:`absorption_rel`.
        """
        if surface.absorption_rel is not None:
            return float(surface.absorption_rel)
        if self.material_ranges and surface.material:
            rel = get_material(surface.material).absorption_rel
            if rel is not None:
                return float(rel)
        return float(self.absorption_rel)

    def to_dict(self):
        """JSON-ready values, keyed as in the room file."""
        return {"position_m": self.position_m, "size_m": self.size_m, "absorption_rel": self.absorption_rel,
                "temperature_c": self.temperature_c, "material_ranges": self.material_ranges}


@dataclass(frozen=True)
class Room:
    """A rectangular room: its size, surfaces, air and (optionally) a layout.

    Attributes
    ----------
    name : str
    size_m : tuple of float
        (Lx, Ly, Lz): length (front to back), width (left to right), height.
    surfaces : tuple of Surface
        In :data:`WALLS` order.
    temperature_c : float
        Air temperature, C; sets the speed of sound.
    layout : Layout or None
    search : dict
        The room file's raw ``[search]`` table (placement constraints), if any.
    source : str or None
        The file the room was read from.
    subs_search : SubSearch or None
        The room file's ``[subs]`` table (subwoofer search constraints), if any.
    uncertainty : Uncertainty
        How well the file knows the room (``[uncertainty]``; conservative defaults).
    system : SystemSettings or None
        The room file's ``[system]`` table (crossover and mains delay), if any.
    """

    name: str
    size_m: tuple
    surfaces: tuple
    temperature_c: float = 20.0
    layout: Layout | None = None
    search: dict = field(default_factory=dict)
    source: str | None = None
    subs_search: SubSearch | None = None
    uncertainty: Uncertainty = Uncertainty()
    system: SystemSettings | None = None

    @property
    def seats(self):
        """Every seat with its weight (:attr:`Layout.all_seats`); empty without a layout."""
        return () if self.layout is None else self.layout.all_seats

    @property
    def speed_of_sound(self):
        """Speed of sound at the room's air temperature, m/s."""
        return float(speed_of_sound(self.temperature_c))

    @property
    def volume_m3(self):
        """Room volume, m^3."""
        return float(np.prod(self.size_m))

    @property
    def surface_areas_m2(self):
        """(6,) areas of the surfaces in :data:`WALLS` order, m^2."""
        lx, ly, lz = self.size_m
        return np.array([ly * lz, ly * lz, lx * lz, lx * lz, lx * ly, lx * ly])

    @property
    def total_area_m2(self):
        """Total surface area, m^2."""
        return float(self.surface_areas_m2.sum())

    def absorption(self, freq_hz):
        """(6, F) random-incidence absorption of each surface at ``freq_hz``, at least
        :data:`MIN_ABSORPTION` (a rigid surface, given as 0, is taken at that minimum)."""
        f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
        return np.maximum(np.stack([s.absorption_at(f) for s in self.surfaces]), MIN_ABSORPTION)

    @property
    def rigid_surfaces(self):
        """Names of the surfaces given less absorption than :data:`MIN_ABSORPTION` somewhere."""
        return tuple(s.name for s in self.surfaces if min(s.absorption) < MIN_ABSORPTION)

    def impedance(self, freq_hz):
        """(6, F) real normalised wall impedance (see :mod:`roommodes.walls`)."""
        return impedance_from_absorption(self.absorption(freq_hz))

    def with_layout(self, layout):
        """The same room with another layout."""
        return replace(self, layout=layout)

    def contains(self, points_m, margin_m=0.0):
        """Boolean mask: which points lie inside the room by at least ``margin_m``."""
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        size = np.asarray(self.size_m)
        return np.all((p > margin_m) & (p < size - margin_m), axis=-1)
