"""The exact solver against the finite-element reference (slow).

Reference: the scikit-fem Helmholtz solution of tests/reference/fem_box.py (27-node
hexahedra; its default mesh, 20 elements per wavelength at the highest frequency, is good
to about 0.02 dB; tests/test_fem_reference.py checks it against closed forms). Both sides
use the same walls: the real normalised impedance whose random-incidence absorption is the
room's coefficient (roommodes.model.walls.impedance_from_absorption, London 1950).

Three checks, figures printed with ``pytest -s``:

1. Level agreement on the cases of tests/test_against_fem.py (tests/reference/
   agreement_study.py): two rooms, alpha 0.1 / 0.3 / 0.45 / mixed, three sources and six
   receivers, 20-200 Hz at 1/24 octave. Bar: pooled median |dL| <= 0.05 dB, 90th
   percentile <= 0.3 dB (the project's target for this solver; the FEM's own error is
   about 0.02 dB).
2. Resonance frequencies: the peaks of |H| on a fine grid, located the same way on both
   solutions, within 0.05 Hz.
3. Boundary gain (defined in :func:`_room_average_db`) of a source 3 cm from a corner, an
   edge and a wall of a 5.2 x 4.1 x 2.7 m room with alpha = 0.30 on every surface, within
   0.3 dB of the FEM.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from reference.agreement_study import ABSORPTION, ROOMS, SPEED_OF_SOUND, frequencies, level_db, positions, stats, zeta_of
from reference.fem_box import fem_transfer

from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers.exact import exact_transfer

pytestmark = pytest.mark.slow


def test_levels_agree_with_the_fem():
    freq = frequencies()
    pooled = []
    print(f"\nexact: |dL| against the FEM reference, {freq.size} frequencies 20-200 Hz")
    for room, size in ROOMS.items():
        src, rec = positions(size)
        for absname, alpha in ABSORPTION.items():
            zeta = zeta_of(alpha)
            ref = level_db(fem_transfer(size, zeta, src, rec, freq, SPEED_OF_SOUND))
            dl = np.abs(level_db(exact_transfer(size, zeta, src, rec, freq, SPEED_OF_SOUND)) - ref)
            pooled.append(dl.ravel())
            med, p90, mx = stats(dl)
            print(f"  {room} alpha {absname:5s}: median {med:.4f}  p90 {p90:.4f}  max {mx:.3f} dB")
    med, p90, mx = stats(np.concatenate(pooled))
    print(f"  pooled: median {med:.4f}  p90 {p90:.4f}  max {mx:.3f} dB (bar 0.05 / 0.3 dB)")
    assert med <= 0.05
    assert p90 <= 0.3


def _peak_hz(fn, f_lo, f_hi, step):
    """Frequency of the largest |H| in [f_lo, f_hi]: grid maximum, then the vertex of the
    parabola through the three grid points around it (in dB)."""
    f = np.arange(f_lo, f_hi + 0.5 * step, step)
    lv = level_db(fn(f))
    i = int(np.clip(np.argmax(lv), 1, f.size - 2))
    y0, y1, y2 = lv[i - 1], lv[i], lv[i + 1]
    return f[i] + 0.5 * step * (y0 - y2) / (y0 - 2 * y1 + y2)


def test_resonance_frequencies_agree_with_the_fem():
    size = ROOMS["3.6x3.0x2.4"]
    zeta = zeta_of(ABSORPTION["0.10"])
    s, r = np.array([[0.3, 0.3, 0.3]]), np.array([[3.3, 2.7, 2.1]])  # opposite corners: every mode
    # coarse scan with the exact solver: peaks standing at least 3 dB above both neighbouring dips
    f = np.arange(30.0, 120.0, 0.1)
    lv = level_db(exact_transfer(size, zeta, s, r, f, SPEED_OF_SOUND)[0, 0])
    peaks = [i for i in range(1, f.size - 1) if lv[i] >= lv[i - 1] and lv[i] > lv[i + 1]]
    keep = []
    for i in peaks:
        left = lv[max(0, i - 40):i].min()
        right = lv[i + 1:i + 41].min()
        if lv[i] - max(left, right) >= 3.0:
            keep.append(f[i])
    assert len(keep) >= 4
    print("\nresonance peaks, exact vs FEM (Hz):")
    worst = 0.0
    for f0 in keep:
        fe = _peak_hz(lambda ff: exact_transfer(size, zeta, s, r, ff, SPEED_OF_SOUND)[0, 0], f0 - 0.3, f0 + 0.3, 0.02)
        ff = _peak_hz(lambda ff: fem_transfer(size, zeta, s[0], r, ff, SPEED_OF_SOUND, h_m=0.1)[0], f0 - 0.3, f0 + 0.3, 0.02)
        worst = max(worst, abs(fe - ff))
        print(f"  {fe:9.4f} {ff:9.4f}  diff {fe - ff:+.4f}")
    assert worst <= 0.05


# ---------------------------------------------------------------------------------------
# boundary gains

GAIN_SIZE = np.array([5.2, 4.1, 2.7])
GAIN_ALPHA = 0.30
#: Receivers for the room average: the 4 x 3 x 2 cell centres of a regular subdivision of
#: the room (each at least 0.65 m from the walls).
GAIN_RECEIVERS = np.array([[GAIN_SIZE[0] * i / 8, GAIN_SIZE[1] * j / 6, GAIN_SIZE[2] * q / 4]
                           for i in (1, 3, 5, 7) for j in (1, 3, 5) for q in (1, 3)])
MID = GAIN_SIZE / 2
GAIN_SOURCES = {
    "corner": np.array([0.03, 0.03, 0.03]),
    "edge": np.array([0.03, 0.03, MID[2]]),
    "wall": np.array([0.03, MID[1], MID[2]]),
    "mid-room": MID,
}
#: Exact-solution gains quoted in the project's issue (an outside figure, compared in print only).
QUOTED_GAIN_DB = {"corner": 7.87, "edge": 5.78, "wall": 3.09}


def _room_average_db(h):
    """Boundary-gain building block: the level of the mean-square transfer over the room's
    receivers and the band's frequencies, ``10 log10 mean_{r, f} |H|^2`` (per source).
    The gain of a source position is this figure minus that of the same source mid-room:
    the change in the room-averaged level (hence in the power the source puts into the
    room) caused by moving it next to the boundary."""
    return 10 * np.log10(np.mean(np.abs(h) ** 2, axis=(1, 2)))


def test_boundary_gains_agree_with_the_fem():
    zeta = impedance_from_absorption(np.full(6, GAIN_ALPHA))
    freq = np.geomspace(150.0, 300.0, 25)  # 1/24 octave
    src = np.array(list(GAIN_SOURCES.values()))
    t0 = time.perf_counter()
    ref = _room_average_db(fem_transfer(GAIN_SIZE, zeta, src, GAIN_RECEIVERS, freq, SPEED_OF_SOUND))
    t_fem = time.perf_counter() - t0
    ex = _room_average_db(exact_transfer(GAIN_SIZE, zeta, src, GAIN_RECEIVERS, freq, SPEED_OF_SOUND))
    ex_conv = _room_average_db(exact_transfer(GAIN_SIZE, zeta, src, GAIN_RECEIVERS, freq, SPEED_OF_SOUND,
                                              tol_db=1e-5))
    gain_fem, gain_ex, gain_conv = ref[:3] - ref[3], ex[:3] - ex[3], ex_conv[:3] - ex_conv[3]
    print(f"\nboundary gain, 150-300 Hz, alpha {GAIN_ALPHA} on all surfaces, room average over "
          f"{len(GAIN_RECEIVERS)} receivers (FEM {t_fem:.1f} s):")
    for i, name in enumerate(list(GAIN_SOURCES)[:3]):
        print(f"  {name:7s} exact {gain_ex[i]:6.2f}  exact(tol 1e-5) {gain_conv[i]:6.2f}  FEM {gain_fem[i]:6.2f} dB"
              f"  (issue quotes {QUOTED_GAIN_DB[name]:.2f})")
    # second definition, exact solver only (the FEM does not resolve the source's own
    # field): radiated power W / W0 = -Im H(r0, r0) / k, band-averaged on a 1 Hz grid,
    # relative to mid-room; Waterhouse's rigid-image sums give 9.03 / 6.02 / 3.01 dB as kd -> 0
    f1 = np.arange(150.0, 301.0, 1.0)
    k1 = 2 * np.pi * f1 / SPEED_OF_SOUND
    power = []
    for s in src:
        h = exact_transfer(GAIN_SIZE, zeta, [s], [s + [0.0, 0.01, 0.01]], f1, SPEED_OF_SOUND)[0, 0]
        power.append(10 * np.log10(np.mean(-h.imag / k1)))
    power = np.array(power)
    print("  radiated power relative to mid-room: " + ", ".join(
        f"{n} {p:.2f}" for n, p in zip(list(GAIN_SOURCES)[:3], power[:3] - power[3])) + " dB"
          f" (mid-room itself {power[3]:+.2f} dB re free field)")
    np.testing.assert_allclose(gain_ex, gain_fem, atol=0.3)
    np.testing.assert_allclose(gain_ex, gain_conv, atol=0.01)
    # the ordering a boundary must give (images: 2^n in power at low kd; CHECKS.md, Waterhouse 1958)
    assert gain_ex[0] > gain_ex[1] > gain_ex[2] > 0
