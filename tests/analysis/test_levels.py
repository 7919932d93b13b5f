"""The one chain from room to level (roommodes.analysis.levels) and the solver choice.

Check values and their sources:
- the speaker's own roll-off: the Butterworth high-pass magnitude
  |H|^2 = 1 / (1 + (fc / f)^(2n)) (Butterworth 1930, "On the theory of filter amplifiers";
  any filter handbook), computed here independently of roommodes.model.speaker;
- every other figure compares two routes through the package (the chain against the bare
  solver call, an analysis against the chain), so it has no outside value: it holds the
  analyses to one definition of the level.
"""

from __future__ import annotations

import numpy as np
import pytest

import roommodes
from roommodes import demo_room_path, load_room, log_frequencies, transfer_function
from roommodes.analysis import levels as levels_module
from roommodes.analysis.compare import compare_to_prediction, predicted_level
from roommodes.analysis.correction import correct_prediction
from roommodes.analysis.explain import explain
from roommodes.analysis.fit import FitTarget, fit_room
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.maps import floor_level_map
from roommodes.analysis.predict import predict
from roommodes.analysis.search import _Scorer, area_offsets, check_weights
from roommodes.dsp.response import Response
from roommodes.solvers import DEFAULT_METHOD

DEMO = load_room(demo_room_path())
F = log_frequencies(30.0, 200.0, 12)


def _butterworth_db(f, fc, order):
    return -10 * np.log10(1 + (fc / np.asarray(f)) ** (2 * order))


def test_chain_is_the_room_transfer_times_the_speakers_own_roll_off():
    sp = DEMO.layout.speakers
    seat = [DEMO.layout.seat_m]
    lv = speaker_levels(DEMO, sp, seat, F)
    bare = transfer_function(DEMO, [s.position_m for s in sp], seat, F)
    assert lv.transfer.shape == (2, 1, F.size)
    for i, s in enumerate(sp):
        want = 20 * np.log10(np.abs(bare[i, 0]))
        if s.lowcut_hz:
            want = want + _butterworth_db(F, s.lowcut_hz, s.lowcut_order)
        np.testing.assert_allclose(lv.level_db[i, 0], want, atol=1e-9)
    raw = speaker_levels(DEMO, sp, seat, F, include_speaker=False)
    np.testing.assert_allclose(raw.transfer, bare, rtol=1e-12)
    assert lv.names == ("left", "right") and lv.method == DEFAULT_METHOD


def test_power_mean_is_the_mean_of_squared_magnitudes():
    pts = np.asarray(DEMO.layout.seat_m) + area_offsets((0.4, 0.4), (2, 2))
    lv = speaker_levels(DEMO, DEMO.layout.speakers, pts, F)
    want = 10 * np.log10(np.mean(np.abs(lv.transfer) ** 2, axis=1))
    np.testing.assert_allclose(lv.power_mean_db(), want, atol=1e-12)


def test_chain_refuses_no_speakers():
    with pytest.raises(ValueError, match="at least one speaker"):
        speaker_levels(DEMO, [], [DEMO.layout.seat_m], F)


def test_predict_and_compare_use_the_chain():
    pred = predict(DEMO, freq_hz=F)
    lv = speaker_levels(DEMO, DEMO.layout.speakers, [DEMO.layout.seat_m], F)
    for c, ch in enumerate(pred.channels):
        np.testing.assert_allclose(ch.level_db, lv.level_db[c, 0], atol=1e-12)
    np.testing.assert_allclose(predicted_level(DEMO, "right", None, F), lv.level_db[1, 0], atol=1e-9)


def test_the_search_scorer_agrees_with_the_chain():
    # The batched scorer keeps its own kernels for speed; it must give the chain's levels.
    speakers = DEMO.layout.speakers
    sc = _Scorer(DEMO, speakers, (48.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    vec = np.array([*speakers[0].position_m, *speakers[1].position_m, *DEMO.layout.seat_m])
    rec = vec[6:9] + area_offsets((0.6, 0.6), (3, 3))
    h = sc.transfer_layouts(vec[None])[0]  # (2, A, F), room transfer only
    lv = speaker_levels(DEMO, speakers, rec, sc.freq_hz, include_speaker=False, method="modal")
    np.testing.assert_allclose(h, lv.transfer, rtol=1e-6)


@pytest.fixture
def spy(monkeypatch):
    """Record the method of every solver call the chain makes; answer with the modal sum.

    The point is the threading of the choice, so the answer may stay modal (fast)."""
    calls = []

    def fake(room, sources_m, receivers_m, freq_hz, method="modal", **options):
        calls.append(method)
        return transfer_function(room, sources_m, receivers_m, freq_hz, method="modal")

    monkeypatch.setattr(levels_module, "transfer_function", fake)
    return calls


def _measured(room, channel="left"):
    lv = predict(room, freq_hz=log_frequencies(20.0, 200.0, 24))
    ch = next(c for c in lv.channels if c.name == channel)
    return lv.freq_hz, ch.level_db


@pytest.mark.parametrize("entry", ["predict", "explain", "eq", "compare", "fit", "map"])
def test_every_analysis_honours_the_solver_choice(spy, entry):
    room = DEMO
    if entry == "predict":
        predict(room, freq_hz=F, method="image")
    elif entry == "explain":
        explain(room, freq_hz=F, method="image", move_steps_m=(0.3,))
    elif entry == "eq":
        correct_prediction(room, freq_hz=log_frequencies(15.0, 300.0, 12), method="image")
    elif entry == "compare":
        f, level = _measured(room)
        spy.clear()
        compare_to_prediction(room, Response(f, level, "m"), "left", method="image")
    elif entry == "fit":
        f, level = _measured(room)
        spy.clear()
        fit_room(room, [FitTarget("left", room.layout.seat_m, f, level, "m")], max_iterations=1, method="image")
    elif entry == "map":
        floor_level_map(room, 50.0, step_m=0.5, method="image")
    assert spy, "no solver call went through the chain"
    assert set(spy) == {"image"}


def test_public_api_keeps_working():
    assert roommodes.predict is predict
    assert callable(roommodes.explain) and callable(roommodes.fit_room)
