"""Measurement commands: sweep, ir, noise, bands, decay, compare, fit.

Each command parses its options, calls the library (:mod:`roommodes.measure`,
:mod:`roommodes.compare`, :mod:`roommodes.fit`), prints a table or one JSON object on
stdout, and writes its files atomically. Messages, guidance and cautions go to stderr.
Bad input (a missing or unreadable file, a file that is not a WAV, a wrong sample rate, a
channel that does not exist) gives one line naming the file and exit code 2; nothing is
written then. Inputs are never overwritten, and an existing output only with --force.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..analysis.compare import (
    average_measurements,
    compare_measurements,
    compare_to_prediction,
    is_wav_file,
    model_band,
    share_inside,
    speaker_by_name,
)
from ..analysis.fit import DEFAULT_POINTS_PER_OCTAVE as FIT_POINTS_PER_OCTAVE
from ..analysis.fit import after_band, before_band, effective_size, fit_room
from ..dsp.bands import band_centres
from ..dsp.response import log_frequencies
from ..io.files import JSON_FILE_BYTES, InputFileError, read_regular
from ..io.roomfile import room_to_toml, write_text_atomic
from ..io.wavio import read_wav, write_wav_atomic
from ..measure.decay import cumulative_spectral_decay, modal_decay_times, reverberation_times
from ..measure.deconvolve import RecordingError, deconvolve
from ..measure.signals import band_levels, crest_factor_db, pink_noise
from ..measure.sweep import SweepSpec, exponential_sweep
from ..present.plots_measure import plot_comparison, plot_fit, plot_impulse_response, plot_waterfall
from ._measured import (
    load_fit_targets,
    load_measurements,
    measured_files_options,
    measurement_specs,
    mic_cal_option,
    positions,
    read_spl_ref,
    read_wav_or_fail,
    require_file,
    smoothing_option,
    spl_ref_input,
    spl_ref_option,
    wav_channel_option,
    window_option,
)
from ._progress import Progress
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_output,
    check_plot,
    dump_json,
    echo_err,
    fail,
    guard,
    json_option,
    load_or_fail,
    method_option,
    protect_inputs,
    room_inputs,
    uncertainty_options,
    uncertainty_text,
)

COMPARE_SAMPLES = 100  # see the --samples help of `compare`

__all__ = ["CAUTIONS", "COMMANDS", "GUIDANCE", "bands", "compare", "decay", "fit", "ir", "noise", "sweep"]

#: Printed (to stderr) by the commands that make a signal to play.
CAUTIONS = (
    ("Hearing: aim for 75-85 dB SPL at the seat; it is enough. NIOSH recommends at most 85 dBA for 8 hours, "
     "halving the time for every 3 dB more (94 dBA: 1 hour; 100 dBA: 15 minutes). Wear hearing protection if "
     "you stay in the room at higher levels."),
    ("Start quiet: turn the playback volume down before you press play, then raise it in small steps to the "
     "level you need."),
    ("Equipment: a test signal drives the speakers and amplifier steadily; stay well within the makers' limits, "
     "and stop at any distortion, rattle, buzzing or smell of heat. Bass below a vented speaker's tuning can "
     "overdrive its woofer."),
    ("Tweeters: a sweep carries full level to high frequencies; keep the level conservative, or end the sweep "
     "lower (--f2 1000) when only the low frequencies matter."),
    "Where these notes and the makers' limits for your equipment differ, follow the makers' limits.",
)
#: One-line reminder printed by the commands that read recordings.
SHORT_CAUTION = ("Reminder: measure at 75-85 dB SPL at the seat, start quiet, and stay within your equipment's "
                 "limits (see docs/measurement.md).")
#: How to take the measurement (stderr, with the sweep and the noise).
GUIDANCE = (
    ("Microphone: at the seat, at ear height, pointing at the ceiling (for a measurement microphone with a "
     "random-incidence or 90-degree calibration); keep it away from the seat back and your body."),
    ("Positions: measure one speaker at a time, at the seat and at several positions around it (within about "
     "30 cm), and average them; low-frequency levels change quickly from place to place."),
    ("Recording: start the recorder before playback and stop it after the trailing silence; same sample rate "
     "as the signal; input gain so the peaks stay below -6 dBFS."),
)
_SWEEP_JSON_SUFFIX = ".sweep.json"
_WAV_FORMATS = ("pcm16", "pcm24", "float32")


# ---------------------------------------------------------------------------- helpers


def _echo_lines(title, lines):
    echo_err(title)
    for line in lines:
        echo_err(f"  - {line}")


def _cautions():
    _echo_lines("Cautions:", CAUTIONS)


def _wav_output(path, force, *inputs):
    p = Path(path)
    if p.suffix.lower() != ".wav":
        fail(f"{p}: the output must be a .wav file")
    protect_inputs(p, *inputs)
    return check_output(p, force)


def _sweep_json_path(wav_path):
    p = Path(wav_path)
    return p.with_name(p.stem + _SWEEP_JSON_SUFFIX)


def _fmt_time(t):
    return f"{t:6.2f}" if np.isfinite(t) else f"{'-':>6}"


def _smoothing_label(b):
    return f"1/{b:g} octave" if b else "none"


# ---------------------------------------------------------------------------- sweep


@click.command(context_settings=CONTEXT)
@click.argument("out", type=click.Path(path_type=Path))
@click.option("--rate", "fs_hz", type=click.IntRange(8000, 384000), default=48000, show_default=True,
              help="Sample rate, Hz (8000..384000).")
@click.option("--length", "duration_s", type=float, default=10.0, show_default=True,
              help="Sweep length, s (a longer sweep gains about 3 dB of signal-to-noise per doubling).")
@click.option("--f1", "f1_hz", type=float, default=15.0, show_default=True, help="Start frequency, Hz.")
@click.option("--f2", "f2_hz", type=float, help="End frequency, Hz  [default: 20000, or 0.45 x the rate below 44.4 kHz]")
@click.option("--level", "level_dbfs", type=float, default=-12.0, show_default=True,
              help="Peak level, dBFS (-60 to -1); keep it low and set the loudness with the volume control.")
@click.option("--fade-in", "fade_in_s", type=float, default=0.1, show_default=True, help="Fade-in, s.")
@click.option("--fade-out", "fade_out_s", type=float, default=0.01, show_default=True, help="Fade-out, s.")
@click.option("--silence-before", type=float, default=0.5, show_default=True, help="Leading silence, s.")
@click.option("--silence-after", type=float, default=3.0, show_default=True,
              help="Trailing silence, s: longer than the room's decay.")
@click.option("--format", "subtype", type=click.Choice(_WAV_FORMATS), default="pcm24", show_default=True,
              help="Sample format of the WAV file.")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
@json_option
@guard
def sweep(out, fs_hz, duration_s, f1_hz, f2_hz, level_dbfs, fade_in_s, fade_out_s, silence_before,
          silence_after, subtype, force, as_json):
    """Write an exponential sine sweep to play through one speaker while recording at the seat.

    Beside OUT.wav it writes OUT.sweep.json, the sweep's description, which `roommodes ir`
    needs to turn a recording of the sweep into an impulse response. The default level is
    -12 dBFS peak: set the loudness with the playback volume, starting low.
    """

    if f2_hz is None:
        f2_hz = min(20000.0, 0.45 * fs_hz)
    elif not f2_hz < fs_hz / 2:
        fail(f"--f2 {f2_hz:g} Hz lies at or above half the sample rate (--rate {fs_hz}: {fs_hz / 2:g} Hz); "
             f"give --f2 below {fs_hz / 2:g} Hz or raise --rate")
    wav = _wav_output(out, force)
    desc = _sweep_json_path(wav)
    check_output(desc, force)
    x, spec = exponential_sweep(fs_hz, duration_s, f1_hz, f2_hz, level_dbfs, fade_in_s, fade_out_s,
                                silence_before, silence_after)
    d = spec.to_dict()
    d["wav_file"] = wav.name
    d["wav_format"] = subtype
    write_wav_atomic(wav, x, spec.fs_hz, subtype, overwrite=force)
    write_text_atomic(desc, json.dumps(d, indent=1) + "\n", overwrite=force)
    if as_json:
        dump_json({"wav": str(wav), "description": str(desc), "sweep": d})
    else:
        click.echo(f"Wrote {wav}: exponential sweep {spec.f1_hz:g}-{spec.f2_hz:g} Hz, {spec.duration_s:.2f} s "
                   f"(+{spec.silence_before_s:g} s silence before, {spec.silence_after_s:g} s after), "
                   f"{spec.fs_hz} Hz, peak {spec.level_dbfs:g} dBFS, {subtype}.")
        click.echo(f"Wrote {desc}: the sweep's description (keep it beside {wav.name}).")
        click.echo("")
        click.echo(f"Next: play {wav.name} through ONE speaker while recording the microphone at the seat, then")
        click.echo(f"  roommodes ir RECORDING.wav --sweep {wav.name} -o ir-left-seat.wav")
    _echo_lines("How to measure:", GUIDANCE)
    _cautions()


# ---------------------------------------------------------------------------- ir


def _load_sweep_spec(path):

    p = require_file(path, "sweep file from `roommodes sweep`")
    if p.name.endswith(".json"):
        desc, wav = p, None
    else:
        desc, wav = _sweep_json_path(p), p
        if not desc.exists():
            fail(f"{p}: no sweep description {desc.name} beside it; `roommodes sweep` writes one next to the "
                 "sweep (give --sweep the .sweep.json file if it was moved)")
    try:
        data = json.loads(read_regular(desc, "sweep description (.sweep.json)", JSON_FILE_BYTES).decode("utf-8"))
        if not isinstance(data, dict):
            fail(f"{desc}: not a sweep description (a JSON object from `roommodes sweep` was expected)")
        spec = SweepSpec.from_dict(data)
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        fail(f"{desc}: not a sweep description (not JSON: {exc})")
    except RecursionError:
        fail(f"{desc}: not a sweep description (nested too deeply)")
    except InputFileError as exc:
        fail(str(exc))
    except ValueError as exc:
        fail(f"{desc}: {exc}")
    if wav is not None:

        if not is_wav_file(wav):
            fail(f"{wav}: not a WAV file (no RIFF/WAVE header); give --sweep the sweep's WAV or its .sweep.json")
        try:
            sx, sfs, _ = read_wav(wav, 0)
        except ValueError as exc:
            fail(str(exc))
        if sfs != spec.fs_hz or sx.size != spec.n_total:
            fail(f"{wav}: does not match its description {desc.name} ({sfs} Hz, {sx.size} samples; expected "
                 f"{spec.fs_hz} Hz, {spec.n_total} samples)")
    return spec, desc


@click.command(context_settings=CONTEXT)
@click.argument("recording", type=click.Path(path_type=Path))
@click.option("--sweep", "sweep_path", type=click.Path(path_type=Path), required=True,
              help="The sweep that was played (its WAV, with the .sweep.json beside it, or the .sweep.json).")
@click.option("-o", "--out", "out", type=click.Path(path_type=Path), required=True,
              help="Impulse-response WAV to write (32-bit float).")
@wav_channel_option
@click.option("--loopback", type=click.IntRange(1, 65535),
              help="Channel of the same recording holding the playback signal wired back (absolute timing).")
@click.option("--length", "ir_length_s", type=float,
              help="Impulse-response length, s (default: the sweep's trailing silence, at least 0.5 s).")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write a figure of the response (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
@json_option
@guard
def ir(recording, sweep_path, out, wav_channel, loopback, ir_length_s, plot_path, force, as_json):
    """Turn a recording of the sweep into an impulse response, with distortion, noise and delay.

    Checks the recording for a wrong sample rate, clipping, silence, a late start and a
    recording that is too short, and says what to do. Reports the delay, the
    signal-to-noise ratio and the harmonic distortion at low frequency per octave band.
    """

    spec, desc = _load_sweep_spec(sweep_path)
    y, fs, _ = read_wav_or_fail(recording, wav_channel)
    lb = None
    if loopback is not None:
        if loopback == wav_channel:
            fail(f"{recording}: --loopback and --wav-channel name the same channel ({loopback})")
        lb, _, _ = read_wav_or_fail(recording, loopback)
    wav = _wav_output(out, force, recording, sweep_path, desc)
    check_plot(plot_path, force, recording, sweep_path, desc, wav)
    try:
        res = deconvolve(y, spec, loopback=lb, fs_hz=fs, ir_length_s=ir_length_s)
    except RecordingError as exc:
        fail(f"{recording}: " + "; ".join(f"{p.message} ({p.action})" for p in exc.problems if p.fatal))
    except ValueError as exc:
        fail(f"{recording}: {exc}")
    write_wav_atomic(wav, res.ir, res.fs_hz, "float32", overwrite=force)
    dist = res.distortion
    if as_json:
        dump_json({
            "recording": str(recording), "output": str(wav),
            "fs_hz": res.fs_hz, "delay_s": res.delay_s, "onset_s": res.onset_s,
            "peak_to_noise_db": res.peak_to_noise_db, "loopback_delay_s": res.loopback_delay_s,
            "distortion": None if dist is None else {
                "center_hz": dist.center_hz, "nominal_hz": dist.nominal_hz, "thd_percent": dist.thd_percent, "thd_db": dist.thd_db,
                "noise_db": dist.noise_db, "detected": dist.detected, "orders": list(dist.orders),
                "harmonic_db": dist.harmonic_db},
            "problems": [{"code": p.code, "message": p.message, "action": p.action} for p in res.problems],
        })
    else:
        click.echo(f"Wrote {wav}: impulse response, {res.ir.size / res.fs_hz:.2f} s at {res.fs_hz} Hz.")
        delay_kind = "absolute (loopback)" if res.chain_removed else "includes playback and recording latency"
        click.echo(f"Delay to the peak {res.delay_s * 1000:.1f} ms, onset {res.onset_s * 1000:.1f} ms ({delay_kind}).")
        pnr = res.peak_to_noise_db
        click.echo("Peak-to-noise ratio " + (f"{pnr:.0f} dB" if np.isfinite(pnr) else "unknown (no noise-only tail)"))
        if dist is not None:
            click.echo("Harmonic distortion (orders " + ", ".join(str(o) for o in dist.orders) + ") per octave:")
            for c, t, _nd, det in zip(dist.nominal_hz, dist.thd_percent, dist.noise_db, dist.detected):
                note = "" if det else "  (not above the noise: an upper bound)"
                click.echo(f"  {c:>7g} Hz  THD {t:6.2f} %{note}")
        for p in res.problems:
            click.echo(f"Warning: {p.message}. {p.action[:1].upper() + p.action[1:]}.")
        click.echo("")
        click.echo(f"Next: roommodes compare ROOM.toml {wav.name} --channel NAME   (or roommodes decay {wav.name})")
    if plot_path:

        plot_impulse_response(res.ir, res.fs_hz, title=f"Impulse response: {Path(recording).name}", path=plot_path)
        echo_err(f"wrote {plot_path}")
    echo_err(SHORT_CAUTION)


# ---------------------------------------------------------------------------- noise


@click.command(context_settings=CONTEXT)
@click.argument("out", type=click.Path(path_type=Path))
@click.option("--rate", "fs_hz", type=click.IntRange(8000, 384000), default=48000, show_default=True,
              help="Sample rate, Hz (8000..384000).")
@click.option("--length", "duration_s", type=float, default=30.0, show_default=True, help="Length, s.")
@click.option("--level", "level_dbfs", type=float, default=-20.0, show_default=True,
              help="Rms level, dBFS (a full-scale sine is 0 dBFS); peaks stay 12 dB above it at most.")
@click.option("--band", "band", metavar="LOW,HIGH",
              help="Pass band, Hz  [default: 20 Hz to 20 kHz, or 0.45 times the sample rate if lower].")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the random phases.")
@click.option("--format", "subtype", type=click.Choice(_WAV_FORMATS), default="pcm24", show_default=True,
              help="Sample format of the WAV file.")
@click.option("--force", is_flag=True, help="Overwrite an existing output file.")
@json_option
@guard
def noise(out, fs_hz, duration_s, level_dbfs, band, seed, subtype, force, as_json):
    """Write band-limited pink noise for a sound-level meter or a real-time analyser.

    Pink noise has equal power in every fractional-octave band, so the band levels of a
    recording of it at the seat (`roommodes bands`) are the room's response. Default
    -20 dBFS rms; set the loudness with the playback volume, starting low.
    """

    lo, hi = _parse_band(band) if band else (20.0, min(20000.0, 0.45 * fs_hz))
    if band and not hi < fs_hz / 2:
        fail(f"--band {band}: the top lies at or above half the sample rate (--rate {fs_hz}: {fs_hz / 2:g} Hz); "
             f"give HIGH below {fs_hz / 2:g} Hz or raise --rate")
    wav = _wav_output(out, force)
    x = pink_noise(fs_hz, duration_s, level_dbfs, lo, hi, seed=seed)
    write_wav_atomic(wav, x, fs_hz, subtype, overwrite=force)
    crest = crest_factor_db(x)
    if as_json:
        dump_json({"output": str(wav), "fs_hz": fs_hz, "duration_s": duration_s,
                   "level_dbfs_rms": level_dbfs, "band_hz": [lo, hi], "crest_factor_db": crest, "seed": seed})
    else:
        click.echo(f"Wrote {wav}: pink noise {lo:g}-{hi:g} Hz, {duration_s:g} s at {fs_hz} Hz, {level_dbfs:g} dBFS "
                   f"rms, crest factor {crest:.1f} dB, {subtype}.")
        click.echo("Next: play it through ONE speaker, record at the seat, then "
                   "`roommodes bands RECORDING.wav -o bands.txt`; or read a meter in 1/3-octave bands.")
        band = "noise" if (lo, hi) == (20.0, 20000.0) else f"{lo:g}-{hi:g}"
        click.echo("To make the measurement chain absolute: read a sound-level meter (C or Z, slow) beside "
                   f"the microphone while recording this noise, then give `--spl-ref 80C@{band}:RECORDING.wav` "
                   "(your reading) to compare, fit, eq --measured or report (docs/measurement.md).")
    _echo_lines("How to measure:", GUIDANCE)
    _cautions()


def _parse_band(text):
    try:
        lo, hi = (float(v) for v in text.replace(":", ",").split(","))
    except ValueError:
        fail(f"--band must be LOW,HIGH in Hz, e.g. 20,20000; got '{text}'")
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
        fail(f"--band must satisfy 0 < LOW < HIGH, got '{text}'")
    return lo, hi


# ---------------------------------------------------------------------------- bands


@click.command(context_settings=CONTEXT)
@click.argument("recording", type=click.Path(path_type=Path))
@wav_channel_option
@click.option("--fraction", type=click.Choice(["1", "3"]), default="3", show_default=True,
              help="Octave (1) or one-third-octave (3) bands.")
@click.option("--band", "band", default="20,20000", show_default=True, metavar="LOW,HIGH",
              help="Range of band centres, Hz.")
@click.option("-o", "--out", "out", type=click.Path(path_type=Path),
              help="Write the band levels as a text curve (frequency, level) the other commands read.")
@click.option("--force", is_flag=True, help="Overwrite an existing output file.")
@json_option
@guard
def bands(recording, wav_channel, fraction, band, out, force, as_json):
    """Band levels of a recording of pink noise at the seat (IEC 61260-1 base-10 bands).

    Levels are in dBFS (a full-scale sine reads 0 dB), energy-averaged over the recording.
    Because pink noise has equal power per band, the band levels are the response at the
    seat up to a constant; `-o` writes them as a curve `compare`, `fit` and `eq` accept.
    """

    lo, hi = _parse_band(band)
    x, fs, _ = read_wav_or_fail(recording, wav_channel)
    if out:
        protect_inputs(out, recording)
        check_output(out, force, what="-o")
    if x.size < fs:
        fail(f"{recording}: only {x.size / fs:.2f} s long; record at least 10 s of the noise")
    if not np.any(x):
        fail(f"{recording}: is silent; check the microphone input and its gain")
    if np.std(x) <= 1e-3 * np.abs(np.mean(x)):
        fail(f"{recording}: holds only a constant (DC) level, no sound; check the microphone input and its gain")
    _, nominal, _, upper = band_centres(int(fraction), lo, hi)
    fits = nominal[upper < fs / 2]
    if fits.size == 0:
        fail(f"--band {band}: no band of it fits below half the sample rate of {recording} ({fs / 2:g} Hz); "
             f"give LOW below {fs / 2:g} Hz")
    if fits.size < nominal.size and band != "20,20000":
        echo_err(f"note: --band {band}: bands above {fits[-1]:g} Hz reach past half the sample rate of {recording} "
                 f"({fs / 2:g} Hz) and are left out")
    bl = band_levels(x, fs, int(fraction), lo, hi)
    label = "octave" if fraction == "1" else "1/3-octave"
    if out:
        lines = [(f"# roommodes {__version__}: {label} band levels of {Path(recording).name} "
                  "(IEC 61260-1 base-10 bands)"),
                 "# frequency_hz (exact band centre), level_db (dBFS)"]
        lines += [f"{c:.4f}, {v:.3f}" for c, v in zip(bl.center_hz, bl.level_db)]
        write_text_atomic(out, "\n".join(lines) + "\n", overwrite=force)
    if as_json:
        dump_json({"recording": str(recording), "fraction": int(fraction),
                   "center_hz": bl.center_hz, "nominal_hz": bl.nominal_hz, "level_db": bl.level_db,
                   "frequencies_hz": bl.center_hz, "averaging_s": bl.averaging_s,
                   "output": None if out is None else str(out)})
    else:
        click.echo(f"{label} band levels of {recording} ({x.size / fs:.1f} s at {fs} Hz), dBFS:")
        click.echo(f"  {'band Hz':>8}  {'centre Hz':>9}  {'level dB':>8}")
        for n, c, v in zip(bl.nominal_hz, bl.center_hz, bl.level_db):
            click.echo(f"  {n:8g}  {c:9.2f}  {v:8.1f}")
        if out:
            click.echo(f"Wrote {out}")
    echo_err(SHORT_CAUTION)


# ---------------------------------------------------------------------------- decay


@click.command(context_settings=CONTEXT)
@click.argument("ir_file", type=click.Path(path_type=Path))
@wav_channel_option
@click.option("--bands", "band_set", type=click.Choice(["octave", "third"]), default="octave", show_default=True,
              help="Band set for EDT, T20 and T30.")
@click.option("--freq-range", metavar="LOW,HIGH",
              help="Range of band centres for the reverberation times, Hz  [default: 63,4000, lowered to the "
                   "highest band below half the sample rate]")
@click.option("--modes", "n_modes", type=click.IntRange(0, 30), default=6, show_default=True,
              help="How many of the strongest low-frequency peaks get a modal decay time (0: none).")
@click.option("--modal-range", default="15,200", show_default=True, metavar="LOW,HIGH",
              help="Search range for the modal peaks, Hz.")
@click.option("--waterfall", "waterfall_path", type=click.Path(path_type=Path),
              help="Write a cumulative-spectral-decay (waterfall) figure (PNG/SVG).")
@click.option("--window", "window_s", type=float, default=0.3, show_default=True,
              help="Waterfall slice length, s (frequency resolution about 1/window).")
@click.option("--filtering", type=click.Choice(["forward", "reverse"]), default="forward", show_default=True,
              help="Band filters run forward in time, or on the time-reversed response (less smearing of short "
                   "decays in narrow bands).")
@click.option("--force", is_flag=True, help="Overwrite an existing figure.")
@json_option
@guard
def decay(ir_file, wav_channel, band_set, freq_range, n_modes, modal_range, waterfall_path, window_s, force,
          as_json, filtering):
    """Reverberation times (EDT, T20, T30) and decay times of the strongest low modes.

    Reads an impulse response (from `roommodes ir`). Per band it gives EDT, T20 and T30 from
    the Schroeder curve (ISO 3382 ranges) with noise handling after Lundeby et al., and
    flags bands whose decay range is too small; then the decay time (T60) and Q of the
    strongest low-frequency peaks; optionally a waterfall figure.
    """

    lo, hi = _parse_band(freq_range or "63,4000")
    mlo, mhi = _parse_band(modal_range)
    h, fs, _ = read_wav_or_fail(ir_file, wav_channel, "impulse response")
    _, nominal, _, upper = band_centres(1 if band_set == "octave" else 3, lo, hi)
    fits = nominal[upper < fs / 2]
    if fits.size < nominal.size:
        top = f"{ir_file} is sampled at {fs} Hz: its bands must end below {fs / 2:g} Hz"
        if fits.size == 0:
            fail(f"--freq-range {lo:g},{hi:g}: no {band_set} band of it fits; {top}")
        if freq_range:
            fail(f"--freq-range {freq_range}: the {band_set} band at {nominal[fits.size]:g} Hz is too high; {top}. "
                 f"Give --freq-range {lo:g},{fits[-1]:g} or lower")
        hi = float(fits[-1])
    if not mlo < 0.45 * fs:
        fail(f"--modal-range {modal_range}: starts above 0.45 x the sample rate of {ir_file} ({0.45 * fs:g} Hz)")
    check_plot(waterfall_path, force, ir_file, what="--waterfall")
    if h.size < 64 or not np.any(h):
        fail(f"{ir_file}: too short or silent to be an impulse response")
    if np.std(h) <= 1e-3 * np.abs(np.mean(h)):
        fail(f"{ir_file}: holds only a constant (DC) level, not an impulse response; give the output of `roommodes ir`")
    # the range warnings are in the results' flags too; they are printed from there
    rt = reverberation_times(h, fs, bands=band_set, freq_range_hz=(lo, hi), filtering=filtering, warn=False)
    md = modal_decay_times(h, fs, freq_range_hz=(mlo, min(mhi, 0.45 * fs)), count=n_modes) if n_modes else None
    notes = [m for flags in rt.flags for m in flags]
    if md is not None:
        notes += [m for flags in md.flags for m in flags]
    if as_json:
        dump_json({
            "ir": str(ir_file), "fs_hz": fs, "bands": band_set,
            "reverberation": [{"center_hz": c, "nominal_hz": n, "edt_s": e, "t20_s": t2, "t30_s": t3,
                               "decay_range_db": r, "edt_ok": eo, "t20_ok": t2o, "t30_ok": t3o}
                              for c, n, e, t2, t3, r, eo, t2o, t3o in zip(
                                  rt.center_hz, rt.nominal_hz, rt.edt_s, rt.t20_s, rt.t30_s, rt.decay_range_db,
                                  rt.edt_ok, rt.t20_ok, rt.t30_ok)],
            "modes": [] if md is None else [
                {"freq_hz": f, "t60_s": t, "q": q, "decay_range_db": r, "ok": ok}
                for f, t, q, r, ok in zip(md.freq_hz, md.t60_s, md.q, md.decay_range_db, md.ok)],
            "notes": notes,
        })
    else:
        click.echo(f"Decay of {ir_file} ({h.size / fs:.2f} s at {fs} Hz); times in s, '*' = decay range too "
                   "small (indicative only)")
        click.echo(f"  {'band Hz':>8}  {'EDT':>6}  {'T20':>6}  {'T30':>6}  {'range dB':>8}")
        for n, e, t2, t3, r, eo, t2o, t3o in zip(rt.nominal_hz, rt.edt_s, rt.t20_s, rt.t30_s, rt.decay_range_db,
                                                 rt.edt_ok, rt.t20_ok, rt.t30_ok):
            cells = [_fmt_time(v) + (" " if ok or not np.isfinite(v) else "*") for v, ok in
                     ((e, eo), (t2, t2o), (t3, t3o))]
            click.echo(f"  {n:8g}  " + " ".join(cells) + f"  {r:8.1f}")
        if md is not None:
            click.echo("Strongest low-frequency peaks (narrow-band decay):")
            if md.freq_hz.size == 0:
                click.echo("  none found")
            for f, t, q, ok in zip(md.freq_hz, md.t60_s, md.q, md.ok):
                click.echo(f"  {f:7.1f} Hz  T60 {_fmt_time(t)} s  Q {q:5.1f}" + ("" if ok else "  (*)"))
        for m in notes:
            click.echo(f"Note: {m}")
    if waterfall_path:

        sd = cumulative_spectral_decay(h, fs, window_s=window_s)
        plot_waterfall(sd, title=f"Cumulative spectral decay: {Path(ir_file).name}", path=waterfall_path)
        echo_err(f"wrote {waterfall_path}")
    echo_err(SHORT_CAUTION)


# ---------------------------------------------------------------------------- compare


def _print_features(matches, names):
    if not matches:
        click.echo("No peaks or dips of 3 dB or more in the band.")
        return
    a_name, b_name = names
    click.echo(f"Peaks and dips ({a_name} against {b_name}; ratio = {a_name} / {b_name} frequency):")
    click.echo(f"  {'kind':<4}  {a_name[:10]:>10}  {b_name[:10]:>10}  {'ratio':>6}  cause")
    for m in matches:
        fa = f"{m.measured.freq_hz:7.1f} Hz" if m.measured else f"{'-':>10}"
        fb = f"{m.reference.freq_hz:7.1f} Hz" if m.reference else f"{'-':>10}"
        r = f"{m.ratio:6.3f}" if np.isfinite(m.ratio) else f"{'-':>6}"
        missing = (f"not in the {b_name} curve" if m.reference is None else
                   f"not in the {a_name} curve" if m.measured is None else "")
        cause = "; ".join(t for t in (missing, m.cause) if t)
        click.echo(f"  {m.kind:<4}  {fa}  {fb}  {r}  {cause}")


@click.command(context_settings=CONTEXT)
@click.argument("files", nargs=-1, type=click.Path(path_type=Path))
@click.option("--against", multiple=True, type=click.Path(path_type=Path), metavar="MEASUREMENT",
              help="Compare with this measurement instead of a prediction (repeat to average several).")
@click.option("--channel", help="The speaker that was measured (a name in the room file).")
@click.option("--at", multiple=True, metavar="X,Y,Z",
              help="Microphone position: metres or lengths with units (185 cm, 145 cm, 120 cm); default the "
                   "seat; once for all files or once per file.")
@wav_channel_option
@window_option
@click.option("--band", default="20,200", show_default=True, metavar="LOW,HIGH",
              help="Band of the error figures and the level alignment, Hz.")
@click.option("--align-band", metavar="LOW,HIGH", help="Align the levels over this band instead, Hz.")
@click.option("--absolute", is_flag=True, help="Do not align the levels (a calibrated chain).")
@smoothing_option
@method_option
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write the overlay and residual (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite an existing figure.")
@mic_cal_option
@spl_ref_option
@uncertainty_options(samples=COMPARE_SAMPLES, samples_note=(
    "100 keeps the 10th and 90th percentiles steady to a fraction of a dB while one exact solve per drawn "
    "room stays quick at the comparison's grid."))
@json_option
@guard
def compare(files, against, channel, at, wav_channel, window_s, band, align_band, absolute, smoothing, method,
            plot_path, force, as_json, mic_cal, spl_ref, uncertainty, samples, seed):
    """Compare measurements with the prediction, or two measurements with each other.

    \b
    roommodes compare ROOM.toml MEASUREMENT... --channel left [--at X,Y,Z]
    roommodes compare MEASUREMENT... --against MEASUREMENT...

    A measurement is an impulse-response WAV or a frequency-response text file; several
    are power-averaged and their spread shown. Both curves get the same smoothing and
    are aligned in level over the band (unless --absolute). Prints the error figures, a
    table pairing measured peaks and dips with predicted ones (and the mode or boundary
    behind them) with their frequency ratios, and what a consistent difference suggests.
    """

    files = list(files)
    room_file = files.pop(0) if files and files[0].suffix.lower() == ".toml" else None
    if room_file is None and not against:
        fail("give a room file and measurements (compare ROOM.toml MEAS... --channel NAME), or measurements "
             "and --against MEAS to compare two measurements")
    if uncertainty and room_file is None:
        fail("--uncertainty draws rooms from a room file's [uncertainty]; give a room file (compare ROOM.toml MEAS...)")
    if room_file is not None and against:
        fail("--against compares two measurements without a room file; leave out either the room file or --against")
    if not files:
        fail("no measurement files given")
    lo, hi = _parse_band(band)
    abd = _parse_band(align_band) if align_band else None
    if not (0.01 <= window_s <= 60):
        fail(f"--window must be 0.01..60 s, got {window_s:g}")
    grid = log_frequencies(max(5.0, lo / 2 ** 0.5), min(2000.0, hi * 2 ** 0.5), 48)
    room = load_or_fail(room_file) if room_file else None
    check_plot(plot_path, force, *files, *against, *(room_inputs(room_file, room) if room_file else []),
               *([mic_cal] if mic_cal else []), *spl_ref_input(spl_ref))
    if spl_ref and absolute and room is not None:
        fail("--spl-ref and --absolute: the prediction's levels are relative to the speaker's free-field level at "
             "1 m, not dB SPL for a full-scale input; leave out --absolute (the levels are aligned and the offset "
             "printed)")
    pos = positions(room, at, len(files)) if room is not None else None
    ref = read_spl_ref(spl_ref, wav_channel)
    meas = load_measurements(files, wav_channel, window_s, grid, mic_cal, ref)
    first = average_measurements(meas, label=files[0].name if len(files) == 1 else f"mean of {len(files)}")
    kw = {"band_hz": (lo, hi), "smoothing": smoothing, "align_band_hz": abd, "absolute": absolute}
    mband = None
    if room is not None:
        # the prediction is averaged over the files' positions with the same weights; the effective
        # dimensions come from each file at its own position, fitted as `fit` does
        targets = None
        if not first.band_fraction:
            name = speaker_by_name(room, channel).name
            targets, _ = load_fit_targets([(name, p, fp) for fp, p in zip(files, pos)], wav_channel, window_s,
                                          (lo, hi), FIT_POINTS_PER_OCTAVE, mic_cal, ref)
        rep = compare_to_prediction(room, first, channel, pos, method=method, fit_targets=targets, **kw)
        if uncertainty:
            if first.band_fraction:
                fail("--uncertainty needs fine-resolution measurements (impulse responses or frequency-response "
                     "files), not band levels; leave out --uncertainty")
            mband = model_band(room, rep, n_samples=samples, seed=seed, method=method)
    else:
        second_list = load_measurements(against, wav_channel, window_s, grid, mic_cal, ref)
        second = average_measurements(second_list, label=against[0].name if len(against) == 1
                                      else f"mean of {len(against)}")
        rep = compare_measurements(first, second, **kw)
    c = rep.comparison
    spread = None
    if first.std_db is not None:
        spread = np.interp(np.log(c.freq_hz), np.log(first.freq_hz), first.std_db)
    names = rep.names
    if as_json:
        obj = {"mode": "prediction" if room else "measurements", **rep.to_dict(), "absolute": absolute,
               "smoothing_octave_fraction": smoothing, "spl_reference": ref.to_dict() if ref else None,
               "measured_level_unit": "dB SPL" if ref else "dB (relative)"}
        if room is not None:
            obj.update({"room": room.name, "channel": rep.channel, "positions_m": rep.positions_m,
                        "predicted_db": c.reference_db, "method": method})
            if mband is not None:
                obj.update(mband.to_dict())
        else:
            obj["against"] = [str(a) for a in against]
        dump_json(obj)
    else:
        if room is not None:
            where = ("the seat" if at == () else
                     ", ".join("(" + ", ".join(f"{v:.2f}" for v in p) + ")"
                               for p in dict.fromkeys(map(tuple, rep.positions_m))))
            click.echo(f"Measured against predicted ({method} solver): '{room.name}', speaker {rep.channel}, "
                       f"microphone at {where}")
        else:
            click.echo(f"{names[0]} against {names[1]} (difference = first minus second)")
        click.echo(f"Smoothing {_smoothing_label(smoothing)} on both; " +
                   ("levels as measured (absolute)" if absolute else
                    f"levels aligned over {c.align_band_hz[0]:g}-{c.align_band_hz[1]:g} Hz "
                    f"(offset {c.offset_db:+.1f} dB)"))
        if ref is not None:
            inb = c.in_band
            mean_spl = 10 * np.log10(np.mean(10 ** (c.measured_db[inb] / 10))) - (0.0 if absolute else c.offset_db)
            click.echo(f"Measured levels in dB SPL ({ref.describe()}); power mean over the band {mean_spl:.1f} dB "
                       "SPL (for impulse responses: a full-scale input at the playback volume used)")
        else:
            click.echo("Measured levels are relative (no --spl-ref): only their shape is compared")
        if first.resolution_hz:
            click.echo(f"Impulse-response window {1 / first.resolution_hz:.2f} s: resolution about "
                       f"{first.resolution_hz:.1f} Hz")
        if spread is not None:
            s = spread[c.in_band]
            click.echo(f"{first.count} measurements averaged in power; spread (standard deviation) in the band: "
                       f"median {np.median(s):.1f} dB, largest {s.max():.1f} dB")
        click.echo(f"Error over {lo:g}-{hi:g} Hz: median |difference| {c.median_abs_diff_db:.2f} dB, "
                   f"90th percentile {c.p90_abs_diff_db:.2f} dB, rms {c.rms_diff_db:.2f} dB, "
                   f"correlation {c.correlation:.2f}")
        if mband is not None:
            click.echo(f"Model over {mband.n_samples} drawn rooms (seed {mband.seed}; {uncertainty_text(room)}): "
                       f"the measurement lies inside the model's 10-90 % band at {mband.inside_share:.0%} of the "
                       f"frequencies in {lo:g}-{hi:g} Hz")
        click.echo("")
        _print_features(rep.matches, ("measured", "predicted") if room is not None else ("first", "second"))
        click.echo("")
        for line in rep.interpretation:
            click.echo(f"* {line}")
    if plot_path:

        title = (f"{room.name}: {rep.channel}, measured against predicted" if room is not None
                 else f"{names[0]} against {names[1]}")
        plot_comparison(rep, spread_db=spread, title=title, path=plot_path, model_band=mband)
        echo_err(f"wrote {plot_path}")
    if room is not None:
        echo_err(MODEL_CAUTION)


# ---------------------------------------------------------------------------- fit


@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.argument("files", nargs=-1, type=click.Path(path_type=Path))
@click.option("-o", "--out", "out", type=click.Path(path_type=Path), required=True,
              help="Calibrated room file to write (never the input).")
@measured_files_options
@wav_channel_option
@window_option
@click.option("--band", default="20,200", show_default=True, metavar="LOW,HIGH", help="Fit band, Hz.")
@smoothing_option
@click.option("--points-per-octave", type=click.IntRange(6, 96), default=FIT_POINTS_PER_OCTAVE, show_default=True,
              help="Density of the fit's frequency grid.")
@click.option("--absorption", type=click.Choice(["axes", "each", "all", "none"]), default="axes", show_default=True,
              help="Absorption factors: per pair of opposite surfaces, per surface, one for all, or none.")
@click.option("--size-tolerance", type=float, default=0.05, show_default=True,
              help="Largest relative change of each dimension (0 fixes them).")
@click.option("--position-tolerance", type=float, default=0.05, show_default=True,
              help="Largest offset of each speaker and microphone coordinate, m (0 fixes them).")
@click.option("--no-lowcut", is_flag=True, help="Keep the speakers' roll-off frequencies.")
@click.option("--absolute", is_flag=True, help="Measured levels are calibrated (dB re free field at 1 m).")
@click.option("--regularization", type=float, default=0.5, show_default=True,
              help="Pull toward the file's values, dB per tolerance step.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write measured, before and after (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
@method_option
@mic_cal_option
@spl_ref_option
@uncertainty_options(samples=COMPARE_SAMPLES, samples_note=(
    "100 keeps the 10th and 90th percentiles of the 'before' curve steady to a fraction of a dB for one exact "
    "solve per drawn room."))
@json_option
@guard
def fit(room_file, files, out, channel, at, measure, wav_channel, window_s, band, smoothing, points_per_octave, method,
        absorption, size_tolerance, position_tolerance, no_lowcut, absolute, regularization, plot_path, force,
        as_json, mic_cal, spl_ref, uncertainty, samples, seed):
    """Calibrate the room file to measurements and write the calibrated room file.

    \b
    roommodes fit ROOM.toml MEAS... --channel left [--at X,Y,Z]... -o CALIBRATED.toml
    roommodes fit ROOM.toml --measure left seat a.wav --measure right 1.7,1.3,1.2 b.txt -o CAL.toml

    Adjusts, within bounds and pulled toward the file's values, the absorption of the
    surfaces (by pairs of opposite surfaces by default), the effective dimensions
    (within 5 %), the speaker and microphone positions (within 5 cm) and the speakers'
    roll-off, so that the modal prediction matches the smoothed measurements. Reports each
    value, how far it moved, an approximate standard error, and the error before and after.
    Then `predict` and `place` on the calibrated file.
    """

    room = load_or_fail(room_file)
    if room.layout is None:
        fail(f"{room_file}: the room file has no [speakers] and [seat]; the fit needs the measured speakers")
    if not files and not measure:
        fail("no measurements given: list files (with --channel) or use --measure CHANNEL X,Y,Z FILE")
    lo, hi = _parse_band(band)
    if not (0.01 <= window_s <= 60):
        fail(f"--window must be 0.01..60 s, got {window_s:g}")
    outp = Path(out)
    inputs = [*room_inputs(room_file, room), *files, *(Path(m[2]) for m in measure), *([Path(mic_cal)] if mic_cal else []),
              *spl_ref_input(spl_ref)]
    if spl_ref and absolute:
        fail("--spl-ref and --absolute: --absolute takes levels relative to the speaker's free-field level at 1 m, "
             "not dB SPL for a full-scale input; leave out --absolute (each measurement's level is then aligned)")
    protect_inputs(outp, *inputs)
    if outp.suffix.lower() != ".toml":
        fail(f"{outp}: the calibrated room file must be a .toml file")
    check_output(outp, force, what="-o")
    check_plot(plot_path, force, *inputs, outp)
    specs = measurement_specs(room, files, channel, at, measure)
    ref = read_spl_ref(spl_ref, wav_channel)
    targets, _ = load_fit_targets(specs, wav_channel, window_s, (lo, hi), points_per_octave, mic_cal, ref)
    t0 = time.perf_counter()
    with Progress("roommodes fit") as prog:
        prog.step("fitting")

        def progress(i, n, cost):
            prog.step(f"fitting, iteration {i} of at most {n}")

        res = fit_room(room, targets, band_hz=(lo, hi), points_per_octave=points_per_octave, smoothing=smoothing,
                       absorption=absorption, size_tolerance=size_tolerance,
                       position_tolerance_m=position_tolerance, fit_lowcut=not no_lowcut, absolute=absolute,
                       regularization_db=regularization, method=method, progress=progress)
    elapsed = time.perf_counter() - t0
    bband = None
    if uncertainty:
        if any(t.band_fraction for t in targets):
            fail("--uncertainty needs fine-resolution measurements (impulse responses or frequency-response files), "
                 "not band levels; leave out --uncertainty")
        bband = before_band(room, res, targets, smoothing=smoothing, absolute=absolute, method=method,
                            band_hz=(lo, hi), n_samples=samples, seed=seed)
    aband = None
    if bband is not None and plot_path:
        # the calibrated room over its own (narrowed) uncertainty, same count and seed
        aband = after_band(res, targets, smoothing=smoothing, absolute=absolute, method=method, band_hz=(lo, hi),
                           n_samples=samples, seed=seed)
    eff = effective_size(res, room)
    comment = (f"Calibrated by roommodes {__version__} fit from {Path(room_file).name} and "
               f"{len(targets)} measurement(s): " + ", ".join(t.label for t in targets) + "\n"
               f"Error {lo:g}-{hi:g} Hz (1/{smoothing} octave): median |difference| "
               f"{res.error_before['median_abs_db']:.2f} -> {res.error_after['median_abs_db']:.2f} dB\n"
               "Fitted: " + "; ".join(f"{p.name} {p.initial:.4g} -> {p.value:.4g}{(' ' + p.unit) if p.unit else ''}"
                                      for p in res.parameters if p.kind in ("absorption", "size", "lowcut")))
    text = room_to_toml(res.room, comment=comment, original_text=Path(room_file).read_text(encoding="utf-8"),
                        written_to=outp)
    write_text_atomic(outp, text, overwrite=force)
    if as_json:
        d = res.to_dict()
        d["effective_size"] = eff.to_dict()
        d["spl_reference"] = ref.to_dict() if ref else None
        d["targets"] = [{"label": t.label, "channel": t.channel, "position_m": t.position_m, "level_offset_db": o}
                        for t, o in zip(targets, res.level_offsets_db)]
        if bband is not None:
            d.update({"measured_inside_before_band_share": share_inside(res.measured_db, bband[0], bband[2]),
                      "before_db_p10": bband[0], "before_db_p50": bband[1], "before_db_p90": bband[2],
                      "before_band_samples": samples, "before_band_seed": seed})
        dump_json({"room": room.name, "output": str(outp), "elapsed_s": elapsed, "band_hz": [lo, hi],
                   "smoothing_octave_fraction": smoothing, **d})
    else:
        click.echo(f"Fitted '{room.name}' to {len(targets)} measurement(s), {lo:g}-{hi:g} Hz, "
                   f"{_smoothing_label(smoothing)} smoothing: {res.iterations} iterations, {res.evaluations} model "
                   f"evaluations, {elapsed:.1f} s")
        if ref is not None:
            click.echo(f"Measured levels in dB SPL ({ref.describe()}); the fit aligns each measurement's level, so "
                       "only the figure's and the JSON's levels are absolute")
        elif not absolute:
            click.echo("Measured levels are relative (no --spl-ref): each measurement's level is aligned with the "
                       "model's, so only their shapes are fitted")
        click.echo(f"Absorption is given as the area-weighted coefficient at {res.reference_hz:.0f} Hz; "
                   "'+-' is an approximate standard error; '|' marks a value stopped at its bound.")
        click.echo(f"  {'parameter':<26} {'file':>9} {'fitted':>9} {'change':>9} {'+-':>8}")
        for p in res.parameters:
            unit = f" {p.unit}" if p.unit else ""
            fmt = ".3f" if p.unit != "Hz" else ".1f"
            click.echo(f"  {p.name:<26} {p.initial:9{fmt}} {p.value:9{fmt}} {p.change:+9{fmt}} "
                       f"{p.std_error:8{fmt}}{unit}{'  |' if p.at_bound else ''}")
        if eff.fitted:
            click.echo("Effective dimensions (the same estimate `compare` prints): " + ", ".join(
                f"{nm} {v:.3f} m" for nm, v in zip(("length", "width", "height"), eff.size_m)))
        else:
            click.echo(f"Dimensions kept from the file: {eff.note}.")
        if bband is not None:
            click.echo(f"Model before the fit over {samples} drawn rooms (seed {seed}; {uncertainty_text(room)}): "
                       f"the measurements lie inside its 10-90 % band at "
                       f"{share_inside(res.measured_db, bband[0], bband[2]):.0%} of the fit's frequencies")
        eb, ea = res.error_before, res.error_after
        click.echo(f"Error over the fitted measurements: median |difference| {eb['median_abs_db']:.2f} -> "
                   f"{ea['median_abs_db']:.2f} dB, 90th percentile {eb['p90_abs_db']:.2f} -> {ea['p90_abs_db']:.2f} dB")
        if not res.success:
            click.echo(f"Note: the fit stopped before converging ({res.message}).")
        bounded = [p.name for p in res.parameters if p.at_bound]
        if bounded:
            click.echo("Note: " + ", ".join(bounded) + " stopped at a bound: the measurements pull further than "
                       "allowed; check the room file (dimensions, positions) before widening the tolerance.")
        un = res.uncertainty
        if un:
            g, n = un["given"], un["narrowed"]
            parts = [f"size {g['size_m'] * 100:.2g} -> {n['size_m'] * 100:.2g} cm"]
            parts += [f"{w} absorption {v['absorption_rel_given']:.0%} -> {v['absorption_rel']:.0%}"
                      for w, v in un["surfaces"].items()]
            click.echo("Uncertainty the fit can justify (standard deviations written to [uncertainty] and [surfaces]; "
                       "positions and temperature unchanged): " + "; ".join(parts) + ".")
        click.echo(f"Wrote {outp} (the seat is unchanged; microphone offsets are reported, not written).")
        click.echo(f"Next: roommodes predict {outp.name}   and   roommodes compare {outp.name} MEAS... --channel NAME")
    if plot_path:

        plot_fit(res, title=f"{room.name}: fit to measurements", path=plot_path, before_band_db=bband,
                 n_rooms=samples if bband is not None else None, after_band_db=aband)
        echo_err(f"wrote {plot_path}")
    echo_err(MODEL_CAUTION)


#: The commands of this module, for ``main.add_command``.
COMMANDS = (sweep, ir, noise, bands, decay, compare, fit)
