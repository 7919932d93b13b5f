"""Tuning the subs on measured impulse responses (`subs --measured SPEAKER@SEAT=IR.wav`).

The "measurements" are synthetic: impulse responses made from the solver's own transfer
functions on an FFT grid (sample 0 = the instant the test signal leaves the output, as a sweep
with its timing kept gives), so the tuning on them must agree with the tuning on the
predictions, and a known change (a later arrival, another level) must show in the settings.
"""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import load_room
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.subs import measured_transfer, tune_measured
from roommodes.cli import main
from roommodes.io.roomfile import example_rooms
from roommodes.io.wavio import write_wav_atomic

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
FS_HZ = 1000.0
LENGTH_S = 2.0


@pytest.fixture(scope="module")
def room():
    return load_room(SOFA)


@pytest.fixture(scope="module")
def irs(room):
    """Every speaker at every seat: the inverse FFT of the solver's transfer function."""
    n = int(FS_HZ * LENGTH_S)
    f = np.fft.rfftfreq(n, 1 / FS_HZ)
    seats = room.layout.all_seats
    h = speaker_levels(room, room.layout.speakers, [s.position_m for s in seats], f[1:]).transfer
    # faded out above the scored band (160 Hz) so that the response does not ring to the end
    fade = np.where(f[1:] < 180.0, 1.0, 0.5 + 0.5 * np.cos(np.pi * np.clip((f[1:] - 180.0) / 60.0, 0, 1)))
    h = h * fade
    # then padded with as many zeros, so that a shift of a few samples only moves zeros about
    return {(sp.name, st.name): (np.concatenate([np.fft.irfft(np.concatenate([[0.0], h[k, j]]), n), np.zeros(n)]),
                                 FS_HZ)
            for k, sp in enumerate(room.layout.speakers) for j, st in enumerate(seats)}


def test_the_measured_transfer_keeps_the_time_origin():
    # a unit impulse 4 ms late is exp(-j 2 pi f 0.004): phase lag for the e^{+jwt} time factor
    ir = np.zeros(1000)
    ir[8] = 1.0
    f = np.array([20.0, 50.0, 100.0])
    h = measured_transfer(ir, 2000.0, f, window_s=0.5)
    assert np.allclose(h, np.exp(-2j * np.pi * f * 0.004), atol=1e-9)


@pytest.fixture(scope="module")
def tuned(room, irs):
    return tune_measured(room, {}), tune_measured(room, irs, window_s=2 * LENGTH_S)


def test_measured_responses_made_from_the_model_give_the_models_settings(tuned):
    pred, meas = tuned
    a, b = pred.ranked[0], meas.ranked[0]
    assert b.crossover_hz == a.crossover_hz
    for sa, sb in zip(a.subs, b.subs):
        assert sb.polarity == sa.polarity
        assert abs(sb.gain_db - sa.gain_db) <= 1.0
        assert abs(sb.delay_ms - sa.delay_ms) <= 0.5
    assert abs(b.seat_spread_db - a.seat_spread_db) < 0.2
    assert abs(meas.level_offset_db) < 0.1  # the same scale: no offset
    assert all(v == "measured" for v in meas.sources.values())
    assert all(v == "predicted" for v in pred.sources.values())
    # and the tuned settings lower the spread against the file's own settings
    assert b.seat_spread_db < meas.before.seat_spread_db


def test_a_sub_arriving_2_ms_later_gets_2_ms_less_delay_and_the_scale_does_not_matter(room, irs):
    # The sub's responses 2 and 4 ms late (2 and 4 samples at 1 kHz; a sub's own DSP
    # latency, say), every response of the second set 40 dB down (another measuring chain):
    # the tuned delay of the sub relative to the mains drops by the 2 ms, the rest stays.
    # (Not against the undelayed set: its best delay lies at the edge of the delay window.)
    def shifted(samples, scale):
        return {(spk, seat): (scale * (np.roll(ir, samples) if spk == "sub" else ir), fs)
                for (spk, seat), (ir, fs) in irs.items()}

    a = tune_measured(room, shifted(2, 1.0), window_s=2 * LENGTH_S)
    b = tune_measured(room, shifted(4, 0.01), window_s=2 * LENGTH_S)
    assert a.level_offset_db == pytest.approx(0.0, abs=0.1)
    assert b.level_offset_db == pytest.approx(-40.0, abs=0.1)
    ca, cb = a.ranked[0], b.ranked[0]
    assert cb.crossover_hz == ca.crossover_hz and cb.subs[0].polarity == ca.subs[0].polarity
    assert cb.subs[0].gain_db == pytest.approx(ca.subs[0].gain_db, abs=0.51)
    rel = lambda c: c.subs[0].delay_ms - c.mains_delay_ms  # noqa: E731  sub minus mains
    assert rel(cb) == pytest.approx(rel(ca) - 2.0, abs=0.11)


def test_some_pairs_measured_the_rest_predicted(room, irs):
    part = {k: v for k, v in irs.items() if k[0] == "sub"}
    res = tune_measured(room, part, window_s=2 * LENGTH_S)
    assert {k for k, v in res.sources.items() if v == "measured"} == set(part)
    assert {k[0] for k, v in res.sources.items() if v == "predicted"} == {"left", "right"}
    d = res.to_dict()
    assert d["measured"]["note"].startswith("Measured responses cannot move a sub")
    assert len(d["ranked"]) == 1 and d["ranked"][0]["subs"][0]["position_m"] == list(room.layout.subs[0].position_m)


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_the_command_reads_the_wav_files_and_says_what_was_measured(room, irs, tmp_path, tuned):
    args = []
    peak = max(np.abs(ir).max() for ir, _ in irs.values())
    for (spk, seat), (ir, fs) in irs.items():
        path = tmp_path / f"{spk}-{seat}.wav"
        write_wav_atomic(path, 0.5 * ir / peak, int(fs), subtype="float32")  # one scale for all
        args += ["--measured", f"{spk}@{seat}={path}"]
    res = run("subs", SOFA, *args, "--window", 2 * LENGTH_S, "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert all(p["source"] == "measured" for p in d["measured"]["pairs"])
    assert d["ranked"][0]["crossover_hz"] == tuned[1].ranked[0].crossover_hz
    text = run("subs", SOFA, *args[:2], "--window", 2 * LENGTH_S).output
    assert "Measured (impulse responses): left@middle." in text
    assert "Predicted (exact solver): left@left, left@right, right@middle" in text
    assert "cannot move a sub" in text


@pytest.mark.parametrize("spec, message", [
    ("sub@sofa=x.wav", "no seat 'sofa'"),
    ("woofer@middle=x.wav", "no speaker 'woofer'"),
    ("sub-middle.wav", "expected SPEAKER@SEAT=IR.wav"),
    ("sub@middle=missing.wav", "missing.wav"),
])
def test_bad_measured_options_give_one_line(spec, message, tmp_path):
    res = run("subs", SOFA, "--measured", spec)
    assert res.exit_code == 2 and message in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1
