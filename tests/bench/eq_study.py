"""Before/after study of the bass correction, judged in the room rather than in the model.

For each bundled room (rooms/) and the spare-bedroom case (4.9 x 3.6 x 2.55 m, sealed
speakers rolling off at 45 Hz, the room's (1,0,0) mode at 35 Hz below the roll-off), the
correction is designed on the default solver's prediction (the exact solution of the box) at
the seat and the head positions around it, then judged on:

* ``exact``     the design model itself (the exact solver, the room as given);
* ``modal``     another solver (the modal sum) on the room as given;
* ``perturbed`` the room with length +1 %, width -1 %, height +1 %, absorption x1.3 (modal sum);
* ``image``     the image-source solver on the room as given (``--image``; very slow: more
                than 5 minutes per room on 2 cores);
* ``drawn``     medians over 20 rooms drawn from the room's [uncertainty] with a seed no
                design uses (exact solver).

With ``--uncertainty [N]`` a second design is held to N rooms drawn from the room's
[uncertainty] (``eq --uncertainty``; default 40) and judged the same way.

Printed per channel and position (seat, then head positions 15 cm forward, back, left,
right, up, down): rms deviation from the target (deep dips left out) before -> after,
the fall in per cent, and the largest amount the correction lifts the curve further
above the target anywhere in 15-300 Hz.

    python tests/bench/eq_study.py [--image] [--uncertainty [N]]
"""

from __future__ import annotations

import sys
import time

import numpy as np

import roommodes
from roommodes.analysis.correction import correct_prediction
from roommodes.analysis.eqcheck import judge_in_room, perturbed_room
from roommodes.analysis.uncertainty import sample_rooms
from roommodes.dsp.response import log_frequencies
from roommodes.io.roomfile import example_rooms, parse_room

POSITIONS = ("seat", "+x", "-x", "+y", "-y", "+z", "-z")

BEDROOM = """
[room]
name = "Spare-bedroom studio (4.9 x 3.6 x 2.55 m)"
size_m = [4.90, 3.60, 2.55]
[surfaces]
front = "plasterboard-on-studs"
back = "plasterboard-on-studs"
left = "plasterboard-on-studs"
right = "plasterboard-on-studs"
floor = "carpet-on-underlay"
ceiling = "plasterboard-on-studs"
[speakers.left]
position_m = [0.45, 1.10, 1.15]
lowcut_hz = 45
lowcut_order = 2
[speakers.right]
position_m = [0.45, 2.50, 1.15]
lowcut_hz = 45
lowcut_order = 2
[seat]
position_m = [1.70, 1.80, 1.20]
"""


def bedroom_room():
    import tomllib

    return parse_room(tomllib.loads(BEDROOM), name="bedroom")


def study_rooms():
    rooms = [(p.stem, roommodes.load_room(p)) for p in example_rooms()]
    return rooms + [("bedroom", bedroom_room())]


def references(room, with_image):
    refs = [("exact", room, "exact"), ("modal", room, "modal"), ("perturbed", perturbed_room(room), "modal")]
    if with_image:
        refs.append(("image", room, "image"))
    return refs


DRAWN_ROOMS = 20
DRAWN_SEED = 777


def drawn_reference(room, corr, f):
    """Median over rooms drawn from the room's [uncertainty] with a seed of their own (rooms
    no design saw), exact solver: per channel, the seat's and each head position's fall,
    and the worst lift in any drawn room."""
    per = {}
    for d in sample_rooms(room, DRAWN_ROOMS, seed=DRAWN_SEED):
        for name, js in judge_in_room(d, d.layout, corr, f, method="exact").items():
            per.setdefault(name, []).append(([j.reduction for j in js], max(j.worst_raise_db for j in js)))
    out = {}
    for name, rows in per.items():
        k = min(len(r[0]) for r in rows)
        red = np.median([r[0][:k] for r in rows], axis=0)
        out[name] = (red, max(r[1] for r in rows))
    return out


def _stability(flt):
    st = dict(getattr(flt, "stability", ()))
    if not st:
        return ""
    if "present_share" in st:
        return (f" [peak in {100 * st['present_share']:.0f}%, moves {st['freq_spread_octaves']:.2f} of "
                f"{st['bandwidth_octaves']:.2f} oct, kept {100 * st.get('depth_share', 1):.0f}%]")
    return f" [kept {100 * st.get('depth_share', 1):.0f}%]"


def designs(room, f, held_samples):
    out = [("single", correct_prediction(room, freq_hz=f))]
    if held_samples:
        out.append((f"held{held_samples}", correct_prediction(
            room, freq_hz=f, uncertainty={"n_samples": held_samples, "seed": 11})))
    return out


def main(argv):
    with_image = "--image" in argv
    held = 0
    if "--uncertainty" in argv:
        i = argv.index("--uncertainty")
        held = int(argv[i + 1]) if i + 1 < len(argv) and argv[i + 1].isdigit() else 40
    f = log_frequencies(15.0, 300.0, 48)
    summary = []
    for key, room in study_rooms():
        print(f"\n=== {key}: {room.name}")
        for label, (corr, _) in designs(room, f, held):
            print(f"  design {label}")
            for c in corr:
                p = c.parametric
                fl = ", ".join(f"{x.freq_hz:.0f} Hz {x.gain_db:+.1f} dB Q {x.q:.1f}" + _stability(x) for x in p.filters)
                print(f"  {c.name}: band {p.band_hz[0]:.0f}-{p.band_hz[1]:.0f} Hz; filters: {fl or 'none'}")
                left = [w.message for w in p.warnings if w.code.endswith("_left_uncertain")]
                if left:
                    print("    left alone: " + "; ".join(left))
            for ref, rroom, method in references(room, with_image):
                t0 = time.perf_counter()
                res = judge_in_room(rroom, room.layout, corr, f, method=method)
                dt = time.perf_counter() - t0
                print(f"  reference {ref} ({dt:.1f} s)")
                for name, js in res.items():
                    cells = [f"{pos} {j.rms_before_db:.1f}->{j.rms_after_db:.1f} ({100 * j.reduction:+.0f}%)"
                             for pos, j in zip(POSITIONS, js)]
                    worst = max(j.worst_raise_db for j in js)
                    print(f"    {name:<6} " + "  ".join(cells) + f"  | worst lift above target {worst:+.2f} dB")
                    heads = [j.reduction for j in js[1:]]
                    summary.append((key, label, ref, name, js[0].reduction, min(heads), worst))
                    print(f"           seat {100 * js[0].reduction:.0f}% lower; head positions {100 * min(heads):.0f}%"
                          f" to {100 * max(heads):.0f}% lower (mean {100 * np.mean(heads):.0f}%)")
            for name, (red, worst) in drawn_reference(room, corr, f).items():
                summary.append((key, label, "drawn", name, red[0], min(red[1:]), worst))
                print(f"  reference drawn ({DRAWN_ROOMS} rooms, seed {DRAWN_SEED}, exact, medians): {name} seat "
                      f"{100 * red[0]:.0f}% lower; head positions {100 * min(red[1:]):.0f}% to "
                      f"{100 * max(red[1:]):.0f}%; worst lift in any room {worst:+.2f} dB")
    print("\nSummary (fall of the rms deviation at the seat, least fall over the head positions, worst lift "
          "above target in 15-300 Hz; worst channel of each room; 'drawn': medians over the drawn rooms):")
    print(f"  {'room':<14}{'design':<9}{'reference':<11}{'seat':>7}{'heads':>7}{'lift dB':>9}")
    for key in dict.fromkeys(s[0] for s in summary):
        for label in dict.fromkeys(s[1] for s in summary if s[0] == key):
            for ref in dict.fromkeys(s[2] for s in summary if s[0] == key and s[1] == label):
                rows = [s for s in summary if s[:3] == (key, label, ref)]
                print(f"  {key:<14}{label:<9}{ref:<11}{100 * min(r[4] for r in rows):6.0f}%"
                      f"{100 * min(r[5] for r in rows):6.0f}%{max(r[6] for r in rows):+9.2f}")


if __name__ == "__main__":
    main(sys.argv[1:])
