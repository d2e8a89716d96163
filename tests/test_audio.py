"""Recordings: the onset detector (metertop/flux.py), the reader (metertop/audio.py) and audio through every command.

Outside references, each named beside its check:

- closed forms: a sine through the STFT (its bin's magnitude, and Parseval's
  theorem, common practice in any DSP text, e.g. Oppenheim & Schafer,
  *Discrete-Time Signal Processing*, section 8.5 (from memory)); clicks at
  known times;
- mir_eval's onset evaluation (Raffel et al., "mir_eval", ISMIR 2014), against
  the note onsets of synthesised performances: grooves of bench/grooves.py
  (development seed 777) and an Essen tune from a training file (music21's
  copy of the collection, an open dataset on PyPI);
- scipy.signal's Butterworth filters (``butter``, ``sosfilt``) for band-limited
  test sounds.

Clips are short (a few seconds to 40 s) and at 22.05 kHz, so the file stays fast.
"""

from __future__ import annotations

import json
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from metertop.cli import app
from metertop.audio import read_audio
from metertop.errors import InputError
from metertop.flux import FluxSettings, detect_onsets, onset_strength, stft_magnitude

from conftest import AMAZING_GRACE, REPO, SEVEN_EIGHT, essen_training_tune, render_tune

sf = pytest.importorskip("soundfile")
mir_eval = pytest.importorskip("mir_eval")

BENCH = str(REPO / "bench")
if BENCH not in sys.path:
    sys.path.insert(0, BENCH)

from hostile import run_cli  # noqa: E402
from synth import add_noise, reference_onsets, synthesise  # noqa: E402

SR = 22_050
runner = CliRunner()


def _clicks(times_s, sr=SR, length_s=None, amplitude=1.0):
    n = int(((length_s or max(times_s) + 1.0)) * sr)
    x = np.zeros(n, dtype=np.float32)
    x[np.round(np.asarray(times_s) * sr).astype(int)] = amplitude
    return x


@pytest.fixture(scope="module")
def grooves():
    """Two development grooves (seed 777, never the benchmark's) cut to their first 12 s."""
    from grooves import make_groove

    out = []
    for ts, seed in (("4/4", 1), ("6/8", 2)):
        perf = make_groove(ts, np.random.default_rng([777, seed]), piece_id=f"test-{ts}")
        keep = perf.onsets_s < 12.0
        out.append((perf.onsets_s[keep], perf.durations_s[keep], perf.pitches[keep], perf.velocities[keep], perf.is_drum[keep]))
    return out


@pytest.fixture(scope="module")
def grace_wav(tmp_path_factory):
    """Amazing Grace (3/4) rendered from its notation and synthesised as harmonic tones, as a WAV file."""
    played = render_tune(AMAZING_GRACE, 0.45, seed=81)
    nt = played.notes
    audio = synthesise(nt.onsets_s, nt.durations_s, nt.pitches, nt.velocities, nt.is_drum, sample_rate=SR, seed=1)
    path = tmp_path_factory.mktemp("grace") / "grace.wav"
    sf.write(str(path), audio, SR)
    return path, played


# ---- closed forms ----

def test_sine_on_a_bin_has_its_amplitude():
    """A sine of amplitude A centred on bin k: magnitude A at bin k (Hann coherent gain 1/2, scaled by 2 / sum(w))."""
    n_fft, _ = FluxSettings().frame_samples(SR)
    t = np.arange(SR) / SR
    for k, amp in ((12, 0.8), (100, 0.25)):
        mag = stft_magnitude(amp * np.sin(2 * np.pi * (k * SR / n_fft) * t), SR, frames=[40, 60])
        assert np.allclose(mag[:, k], amp, rtol=1e-4)
        assert np.argmax(mag[0]) == k


def test_parseval_on_one_frame():
    """Parseval's theorem for the real FFT: sum (w x)^2 = (|X_0|^2 + 2 sum |X_k|^2 + |X_N/2|^2) / N, on a windowed frame."""
    settings = FluxSettings()
    n_fft, hop = settings.frame_samples(SR)
    rng = np.random.default_rng(3)
    x = rng.normal(0, 0.3, SR).astype(np.float32)
    frame = 30
    mag = stft_magnitude(x, SR, settings, frames=[frame])[0].astype(np.float64)
    w = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n_fft) / n_fft)
    raw = mag / (2.0 / w.sum())  # undo the amplitude scaling
    start = frame * hop - n_fft // 2
    segment = x[start:start + n_fft].astype(np.float64) * w
    energy_time = np.sum(segment ** 2)
    energy_freq = (raw[0] ** 2 + 2 * np.sum(raw[1:-1] ** 2) + raw[-1] ** 2) / n_fft
    assert energy_freq == pytest.approx(energy_time, rel=1e-4)


def test_clicks_at_known_times_are_found_within_a_frame():
    """Clicks at known times (a closed form: each is an onset, and nothing else is): all found, within one hop (10 ms)."""
    times = np.array([0.3, 0.8, 1.05, 1.6, 2.2, 2.45, 3.0])
    on = detect_onsets(_clicks(times, length_s=3.5), SR)
    assert len(on) == len(times)
    assert np.max(np.abs(on.times_s - times)) <= 0.011
    assert mir_eval.onset.f_measure(times, on.times_s, window=0.05)[0] == 1.0  # mir_eval (Raffel et al. 2014)


def test_band_split_follows_the_sound():
    """A low sine burst lands in the low band, a noise burst high-passed at 7 kHz by a scipy.signal Butterworth in the high band."""
    from scipy.signal import butter, sosfilt

    t = np.arange(int(0.3 * SR)) / SR
    kick = np.sin(2 * np.pi * 60 * t) * np.exp(-t / 0.1)
    rng = np.random.default_rng(5)
    hat = sosfilt(butter(6, 7000, btype="highpass", fs=SR, output="sos"), rng.normal(0, 1, len(t))) * np.exp(-t / 0.02)
    x = np.zeros(3 * SR)
    x[int(0.5 * SR):int(0.5 * SR) + len(t)] += kick
    x[int(1.5 * SR):int(1.5 * SR) + len(t)] += 0.5 * hat / np.max(np.abs(hat))
    on = detect_onsets(x, SR)
    first = np.argmin(np.abs(on.times_s - 0.5))
    second = np.argmin(np.abs(on.times_s - 1.5))
    assert np.argmax(on.bands[first]) == 0  # low
    assert np.argmax(on.bands[second]) == 2  # high
    equal = detect_onsets(x, SR, FluxSettings(band_weights=(1.0, 1.0, 1.0)))
    heavy = detect_onsets(x, SR, FluxSettings(band_weights=(10.0, 1.0, 1.0)))
    assert np.array_equal(equal.times_s, heavy.times_s)  # the weights change strengths, never the onsets
    assert heavy.strengths[first] / heavy.strengths[second] > 5 * equal.strengths[first] / equal.strengths[second]


# ---- synthesised performances against mir_eval ----

def test_grooves_onset_f_measure(grooves):
    """Development grooves synthesised with simple drums: mir_eval.onset.evaluate (+-50 ms) F >= 0.9 clean, >= 0.8 at 20 dB SNR."""
    for k, (t, d, p, v, drum) in enumerate(grooves):
        clean = synthesise(t, d, p, v, drum, sample_rate=SR, seed=k)
        ref = reference_onsets(t)
        for audio, floor in ((clean, 0.9), (add_noise(clean, 20.0, seed=k), 0.8)):
            est = detect_onsets(audio, SR).times_s
            assert mir_eval.onset.evaluate(ref, est)["F-measure"] >= floor


def test_essen_tune_onset_f_measure():
    """An Essen tune from a training file ("Die Todesbraut", ballad20 no. 100, in 7/8), played (bench/render.py) as harmonic tones: F >= 0.95 clean and at 20 dB SNR."""
    from render import render

    perf = render(essen_training_tune(*SEVEN_EIGHT), "played", seed=4)
    clean = synthesise(perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities, perf.is_drum, sample_rate=SR, seed=2)
    ref = reference_onsets(perf.onsets_s)
    for audio in (clean, add_noise(clean, 20.0, seed=3)):
        scores = mir_eval.onset.evaluate(ref, detect_onsets(audio, SR).times_s)
        assert scores["F-measure"] >= 0.95


# ---- invariances ----

def test_gain_and_shift_invariance(grooves):
    """Scaling the signal changes nothing; leading silence of a whole number of hops moves every onset by exactly that."""
    t, d, p, v, drum = grooves[0]
    x = synthesise(t, d, p, v, drum, sample_rate=SR, seed=0)
    base = detect_onsets(x, SR)
    quiet = detect_onsets(0.01 * x, SR)
    assert np.allclose(quiet.times_s, base.times_s)
    assert np.allclose(quiet.strengths, base.strengths, rtol=1e-3)
    _, hop = FluxSettings().frame_samples(SR)
    lead = 37 * hop
    shifted = detect_onsets(np.concatenate([np.zeros(lead, np.float32), x]), SR)
    assert len(shifted) == len(base)
    assert np.allclose(shifted.times_s - lead / SR, base.times_s, atol=1e-6)


def test_sample_rates_agree():
    """The same clicks at 8 kHz, 22.05 kHz and 48 kHz: the same onsets, within one hop."""
    times = np.array([0.25, 0.75, 1.1, 1.5, 2.0])
    found = [detect_onsets(_clicks(times, sr=sr, length_s=2.5), sr).times_s for sr in (8000, 22050, 48000)]
    for f in found:
        assert len(f) == len(times)
        assert np.max(np.abs(f - found[0])) <= 0.011


def test_stereo_is_mixed_down(tmp_path):
    """A stereo file with the clicks in one channel gives the onsets of the mono file."""
    from metertop.load import load_notes

    times = np.array([0.3, 0.7, 1.2, 1.5, 2.1, 2.4, 2.9, 3.3, 3.6])
    mono = _clicks(times, length_s=4.0, amplitude=0.5)
    sf.write(str(tmp_path / "mono.wav"), mono, SR)
    sf.write(str(tmp_path / "stereo.flac"), np.column_stack([mono, np.zeros_like(mono)]), SR)
    a = load_notes(tmp_path / "mono.wav")
    b = load_notes(tmp_path / "stereo.flac")
    assert a.source == b.source == "audio"
    assert np.allclose(a.onsets_s, b.onsets_s, atol=1e-4)
    assert np.array_equal(a.pitches, b.pitches) and np.array_equal(a.is_drum, b.is_drum)
    assert np.allclose(np.unique(a.onsets_s), times, atol=0.011)


# ---- the kit reading ----

def _drum_sounds(sr=SR):
    """A kick (a decaying 60 Hz sine), a snare-like burst (noise band-passed 300 Hz-6 kHz) and a hi-hat-like one (noise
    high-passed at 7 kHz), the filters scipy.signal Butterworths."""
    from scipy.signal import butter, sosfilt

    t = np.arange(int(0.25 * sr)) / sr
    rng = np.random.default_rng(11)
    kick = np.sin(2 * np.pi * 60 * t) * np.exp(-t / 0.08)
    snare = sosfilt(butter(4, (300, 6000), btype="bandpass", fs=sr, output="sos"), rng.normal(0, 1, len(t))) * np.exp(-t / 0.05)
    hat = sosfilt(butter(6, 7000, btype="highpass", fs=sr, output="sos"), rng.normal(0, 1, len(t))) * np.exp(-t / 0.02)
    return {36: kick, 38: 0.8 * snare / np.max(np.abs(snare)), 42: 0.4 * hat / np.max(np.abs(hat))}


def test_kit_strokes_name_each_drum():
    """Kick, snare and hi-hat sounds alone and together are read as General MIDI keys 36, 38 and 42 (the GM percussion
    key map, an open standard), each at the time it was struck. A hi-hat under a snare is not told apart: the snare's
    noise covers its band."""
    sounds = _drum_sounds()
    bar = [({36}, {36}), ({42}, {42}), ({38}, {38}), ({36, 42}, {36, 42}), ({38, 42}, {38}), ({36}, {36}), ({42}, {42}),
           ({38}, {38})]
    plan = [(0.5 + 0.5 * i, struck, heard) for i, (struck, heard) in enumerate(bar * 2)]
    x = np.zeros(int(9.5 * SR))
    for t, struck, _ in plan:
        i = int(t * SR)
        for key in struck:
            x[i:i + len(sounds[key])] += sounds[key]
    notes = _notes_of(x)
    assert notes.is_drum.all() and notes.source == "audio"
    for t, _, heard in plan:
        near = np.abs(notes.onsets_s - t) < 0.03
        assert set(notes.pitches[near].tolist()) == heard, t


def _notes_of(x, settings=None):
    import tempfile

    from metertop.load import load_notes

    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "take.wav"
        sf.write(str(path), np.asarray(x, np.float32), SR)
        return load_notes(path, audio=settings)


def test_kit_reading_of_development_grooves(grooves):
    """On two development grooves (clean and at 20 dB SNR), the kicks and snares read from the bands match the notes'
    General MIDI roles: mir_eval onset F-measure at +-30 ms of 0.85 or more for each (0.92-1.0 measured)."""
    from metertop.events import ROLE_KICK, ROLE_SNARE, drum_role

    for onsets, durations, pitches, velocities, is_drum in grooves:
        clean = synthesise(onsets, durations, pitches, velocities, is_drum, sample_rate=SR, seed=1)
        for audio in (clean, add_noise(clean, 20.0, seed=3)):
            notes = _notes_of(audio)
            assert notes.is_drum.all()
            for role, key in ((ROLE_KICK, 36), (ROLE_SNARE, 38)):
                truth = np.unique(onsets[[drum_role(int(p)) == role for p in pitches]])
                found = np.unique(notes.onsets_s[notes.pitches == key])
                assert mir_eval.onset.f_measure(truth, found, window=0.03)[0] >= 0.85, key


def test_melody_is_not_a_kit_unless_asked(grace_wav, grooves):
    """Harmonic tones read as unpitched onsets, a groove as a kit; --kit and --no-kit override the choice."""
    from metertop.load import load_notes

    path, _ = grace_wav
    tune = load_notes(path)
    assert not tune.is_drum.any() and np.all(tune.pitches == -1)
    forced = load_notes(path, audio=FluxSettings(kit=True))
    assert forced.is_drum.all() and np.array_equal(np.unique(forced.onsets_s), tune.onsets_s)
    onsets, durations, pitches, velocities, is_drum = grooves[0]
    groove = synthesise(onsets, durations, pitches, velocities, is_drum, sample_rate=SR, seed=1)
    assert _notes_of(groove).is_drum.all()
    assert not _notes_of(groove, FluxSettings(kit=False)).is_drum.any()
    for option, kit in (("--no-kit", False), ("--kit", True)):
        res = runner.invoke(app, ["analyse", "--json", option, str(path)])
        assert res.exit_code == 0, res.stderr
        assert json.loads(res.stdout)["recording"]["kit"] is kit
    res = runner.invoke(app, ["analyse", str(path)])
    assert "read as plain onsets (--kit reads them as a drum kit)" in res.stdout


def test_kit_onsets_read_back_and_write_as_drums(grooves, tmp_path):
    """A groove's recording: --onsets-out writes a drum column that reads back to the same analysis, and --write-midi
    puts the kit's hits on the drum channel under their keys (read back with pretty_midi)."""
    import pretty_midi

    onsets, durations, pitches, velocities, is_drum = grooves[0]
    path = tmp_path / "groove.wav"
    sf.write(str(path), synthesise(onsets, durations, pitches, velocities, is_drum, sample_rate=SR, seed=1), SR)
    csv_out, mid_out = tmp_path / "hits.csv", tmp_path / "groove.mid"
    res = runner.invoke(app, ["analyse", "--json", str(path), "--onsets-out", str(csv_out), "--write-midi", str(mid_out)])
    assert res.exit_code == 0, res.stderr
    line = json.loads(res.stdout.strip().splitlines()[0])
    assert csv_out.read_text().splitlines()[0] == "time_s,weight,drum"
    again = runner.invoke(app, ["analyse", "--json", str(csv_out)])
    back = json.loads(again.stdout)
    assert (line.pop("source"), back.pop("source")) == ("audio", "onsets")
    recording = line.pop("recording")
    assert line.pop("written") and back == line
    from metertop.load import load_notes

    notes = load_notes(path)
    pm = pretty_midi.PrettyMIDI(str(mid_out))
    drums = [inst for inst in pm.instruments if inst.is_drum]
    assert len(drums) == 1 and not [inst for inst in pm.instruments if not inst.is_drum]
    assert recording["kit"] and recording["onsets"] == len(np.unique(notes.onsets_s))
    assert sum(recording["hits"].values()) == len(notes) and {"kick", "snare", "hi-hat"} <= set(recording["hits"])
    written = sorted((n.pitch, n.start) for n in drums[0].notes)
    detected = sorted(zip(notes.pitches.tolist(), notes.onsets_s.tolist()))
    assert [k for k, _ in written] == [k for k, _ in detected]
    assert np.max(np.abs(np.array([t for _, t in written]) - [t for _, t in detected])) < 0.001


# ---- the commands ----

def test_analyse_a_recording_and_read_its_onsets_back(grace_wav, tmp_path):
    """analyse take.wav gives the tune's 3/4 (notation: Amazing Grace) and its beats (mir_eval beat F >= 0.8 at +-70 ms);
    the onsets written by --onsets-out read back to the same analysis."""
    path, played = grace_wav
    out = tmp_path / "onsets.csv"
    res = runner.invoke(app, ["analyse", "--json", str(path), "--onsets-out", str(out)])
    assert res.exit_code == 0, res.stderr
    line = json.loads(res.stdout.strip().splitlines()[0])
    assert line["time_signature"] == "3/4"
    assert mir_eval.onset.f_measure(played.beats_s, np.array(line["beats_s"]), window=0.07)[0] >= 0.8
    again = runner.invoke(app, ["analyse", "--json", str(out)])
    assert again.exit_code == 0, again.stderr
    line.pop("written")
    assert line.pop("recording") == {"onsets": len(out.read_text().splitlines()) - 1, "kit": False}
    back = json.loads(again.stdout)
    assert (line.pop("source"), back.pop("source")) == ("audio", "onsets")
    assert back == line
    first = out.read_text().splitlines()[:2]
    assert first[0] == "time_s,weight" and len(first[1].split(",")) == 2


def test_write_midi_of_a_recording_holds_its_onsets(grace_wav, tmp_path):
    """--write-midi of a recording: the detected onsets as notes (within 1 ms, read back with pretty_midi), on the tempo map."""
    import pretty_midi

    from metertop.load import load_notes

    path, _ = grace_wav
    out = tmp_path / "grace.mid"
    res = runner.invoke(app, ["analyse", str(path), "--write-midi", str(out)])
    assert res.exit_code == 0, res.stderr
    pm = pretty_midi.PrettyMIDI(str(out))
    starts = np.sort([n.start for inst in pm.instruments for n in inst.notes])
    onsets = load_notes(path).onsets_s
    assert len(starts) == len(onsets)
    assert np.max(np.abs(starts - onsets)) < 0.001
    assert [f"{ts.numerator}/{ts.denominator}" for ts in pm.time_signature_changes][:1] == ["3/4"]


def test_check_and_plot_take_a_recording(grace_wav, tmp_path):
    path, _ = grace_wav
    res = runner.invoke(app, ["check", "-s", "3/4", str(path)])
    assert res.exit_code in (0, 3), res.stdout  # consistent or ambiguous, never an error
    res = runner.invoke(app, ["check", "-s", "7/8", str(path)])
    assert res.exit_code == 1, res.stdout
    pytest.importorskip("matplotlib")
    res = runner.invoke(app, ["plot", str(path), "-o", str(tmp_path / "f.png")])
    assert res.exit_code == 0, res.stderr
    assert (tmp_path / "f.png").stat().st_size > 0


@pytest.mark.parametrize("name, content, message", [
    ("noise.wav", b"RIFF" + bytes(range(256)) * 4, "not a readable recording"),
    ("cut.flac", b"fLaC\x00\x00\x00\x22" + b"\x00" * 10, "not a readable recording"),
    ("text.ogg", b"hello, this is not audio\n" * 10, "not a readable recording"),
])
def test_corrupt_recordings_get_one_line_and_exit_2(tmp_path, name, content, message):
    path = tmp_path / name
    path.write_bytes(content)
    res = runner.invoke(app, ["analyse", str(path)])
    assert res.exit_code == 2
    err = res.stderr.strip().splitlines()
    assert len(err) == 1 and message in err[0] and str(path) in err[0]


def test_truncated_wav_and_silence(tmp_path):
    """A WAV cut to its header, and silence (digital and at -80 dBFS): one line each, exit 2, "no onsets found" for silence."""
    sf.write(str(tmp_path / "full.wav"), np.zeros(SR, np.float32), SR, subtype="PCM_16")
    (tmp_path / "cut.wav").write_bytes((tmp_path / "full.wav").read_bytes()[:44])
    sf.write(str(tmp_path / "quiet.wav"), (1e-4 * np.random.default_rng(1).normal(0, 1, 3 * SR)).astype(np.float32), SR,
             subtype="FLOAT")
    for name, message in (("cut.wav", "holds no samples"), ("full.wav", "no onsets found"), ("quiet.wav", "no onsets found")):
        res = runner.invoke(app, ["analyse", str(tmp_path / name)])
        assert res.exit_code == 2, name
        err = res.stderr.strip().splitlines()
        assert len(err) == 1 and message in err[0], (name, err)


def test_missing_soundfile_names_the_extra(tmp_path, monkeypatch):
    path = tmp_path / "take.wav"
    sf.write(str(path), _clicks([0.2, 0.5]), SR)
    monkeypatch.setitem(sys.modules, "soundfile", None)
    with pytest.raises(InputError, match=r"pip install 'metertop\[audio\]'"):
        from metertop.load import load_notes

        load_notes(path)
    res = runner.invoke(app, ["analyse", str(path)])
    assert res.exit_code == 2 and "pip install 'metertop[audio]'" in res.stderr


def test_band_weights_option(grace_wav):
    path, _ = grace_wav
    res = runner.invoke(app, ["analyse", str(path), "--band-weights", "2,1"])
    assert res.exit_code == 2 and "--band-weights" in res.stderr
    res = runner.invoke(app, ["analyse", str(path), "--band-weights", "2,1.5,1"])
    assert res.exit_code == 0, res.stderr


def test_midi_commands_do_not_import_soundfile():
    """soundfile is imported only when a recording is read."""
    code = ("import sys, metertop\n"
            "metertop.analyse(str(sys.argv[1]))\n"
            "print('soundfile' in sys.modules)\n")
    midi = next((REPO / "demo_rhythms").glob("*.mid"))
    out = subprocess.run([sys.executable, "-c", code, str(midi)], capture_output=True, text=True, cwd=REPO)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"


def test_strength_trace_is_zero_for_silence():
    """A silent signal has no flux at all (nothing rises), and detect_onsets says so."""
    s = onset_strength(np.zeros(SR), SR)
    assert not np.any(s.bands)
    with pytest.raises(InputError, match="no onsets found"):
        detect_onsets(np.zeros(SR), SR)


def test_damaged_recordings_never_crash(tmp_path):
    """WAV, FLAC and OGG files cut short or with bytes overwritten (seeded), and a float WAV holding NaN: every run ends
    with a result (exit 0) or one error line (exit 2), never a traceback."""
    rng = np.random.default_rng(2026)
    times = np.arange(0.2, 3.8, 0.25)
    clip = _clicks(times, length_s=4.0, amplitude=0.5)
    cases = []
    for fmt, kw in (("wav", {"subtype": "PCM_16"}), ("flac", {}), ("ogg", {"subtype": "VORBIS"})):
        good = tmp_path / f"good.{fmt}"
        sf.write(str(good), clip, SR, **kw)
        data = good.read_bytes()
        for k in range(6):
            cut = tmp_path / f"cut{k}.{fmt}"
            cut.write_bytes(data[: int(rng.integers(1, len(data)))])
            flipped = bytearray(data)
            at = rng.integers(0, min(len(data), 400), 8)  # mostly the header
            flipped[at[0]:at[0] + 1] = b"\xff"
            for a in at[1:]:
                flipped[a] = int(rng.integers(0, 256))
            bad = tmp_path / f"flip{k}.{fmt}"
            bad.write_bytes(bytes(flipped))
            cases += [cut, bad]
    nan = clip.copy()
    nan[1000] = np.nan
    sf.write(str(tmp_path / "nan.wav"), nan, SR, subtype="FLOAT")
    cases.append(tmp_path / "nan.wav")
    for path in cases:
        res = runner.invoke(app, ["analyse", str(path)])
        assert res.exit_code in (0, 2), (path.name, res.exception)
        assert res.exception is None or isinstance(res.exception, SystemExit), (path.name, repr(res.exception))
        if res.exit_code == 2:
            assert len(res.stderr.strip().splitlines()) == 1, (path.name, res.stderr)
    res = runner.invoke(app, ["analyse", str(tmp_path / "nan.wav")])
    assert res.exit_code == 2 and "not finite" in res.stderr


# ---- hostile recordings that bench/robust.py --recordings turned up, kept as named cases ----

def _wav_bytes(x, sr, subtype):
    import io

    buf = io.BytesIO()
    sf.write(buf, x, sr, format="WAV", subtype=subtype)
    return buf.getvalue()


def test_channels_near_the_float32_limit_mix_down_without_overflow(tmp_path):
    """Found by the recordings fuzzer: a stereo float WAV whose clicks peak at 3e38 (legal float32 samples) overflowed
    while the channels were averaged (a RuntimeWarning). It now reads as the same clicks at -6 dBFS do: the detector
    normalises to the peak, so the gain changes nothing (the invariance of test_gain_and_shift_invariance)."""
    from metertop.load import load_notes

    times = np.array([0.3, 0.7, 1.2, 1.5, 2.1, 2.4, 2.9, 3.3, 3.6])
    clip = _clicks(times, length_s=4.0, amplitude=0.5)
    (tmp_path / "quiet.wav").write_bytes(_wav_bytes(np.column_stack([clip, clip]), SR, "FLOAT"))
    (tmp_path / "huge.wav").write_bytes(_wav_bytes(np.column_stack([clip, clip]).astype(np.float64) * 6e38, SR, "FLOAT"))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        huge = load_notes(tmp_path / "huge.wav")
    quiet = load_notes(tmp_path / "quiet.wav")
    np.testing.assert_array_equal(huge.onsets_s, quiet.onsets_s)
    assert run_cli(["analyse", "--json", str(tmp_path / "huge.wav")]).verdict == "analysed"


@pytest.mark.parametrize("case", ["inf-and-minus-inf", "double-beyond-float32"])
def test_samples_that_are_not_finite_in_any_channel_are_refused(tmp_path, case):
    """Found by the recordings fuzzer: +inf in one channel and -inf in the other averaged to NaN with a RuntimeWarning,
    and a double WAV holding 1e300 (beyond float32, which the reader asks for) overflowed. Both are one error line now,
    raised as the samples are read."""
    clip = _clicks([0.3, 0.7, 1.2, 1.5], length_s=2.0, amplitude=0.5).astype(np.float64)
    stereo = np.column_stack([clip, clip])
    if case == "inf-and-minus-inf":
        stereo[SR, :] = [np.inf, -np.inf]
        data = _wav_bytes(stereo, SR, "FLOAT")
    else:
        data = _wav_bytes(stereo * 2e299, SR, "DOUBLE")
    path = tmp_path / f"{case}.wav"
    path.write_bytes(data)
    with pytest.raises(InputError, match="not finite numbers"):
        read_audio(path)
    outcome = run_cli(["analyse", str(path)])
    assert outcome.verdict == "refused" and str(path) in outcome.detail and "not finite" in outcome.detail, outcome


@pytest.mark.parametrize("sr", [100, 150, 300, 1000])
def test_onsets_at_very_low_sample_rates(sr):
    """Found by the recordings fuzzer: below about 300 Hz both band edges lie above the Nyquist frequency, the high band
    had no bins and the flux sum indexed past the spectrum (IndexError). Every band now keeps at least one bin, and
    clicks at known times are found, each at most half an FFT frame early (the frame that first holds the click)."""
    from metertop.flux import _band_slices

    n_fft, _ = FluxSettings().frame_samples(sr)
    bands = _band_slices(n_fft, sr, FluxSettings().band_edges_hz)
    assert bands[0].start == 1 and bands[-1].stop == n_fft // 2 + 1
    assert all(b.stop > b.start for b in bands) and all(a.stop == b.start for a, b in zip(bands, bands[1:]))
    times = np.array([0.5, 1.0, 1.5, 2.25, 2.75, 3.5])
    found = detect_onsets(_clicks(times, sr=sr, length_s=4.0), sr).times_s
    assert len(found) == len(times)
    assert np.all(times - found >= 0) and np.all(times - found <= n_fft / 2 / sr)


@pytest.mark.parametrize("rate", [7, 0x7FFFFFFF])
def test_damaged_sample_rate_is_refused_before_the_onset_detector(tmp_path, monkeypatch, rate):
    """Found by the recordings fuzzer: a WAV header whose sample rate was overwritten with 7 Hz crashed the detector,
    and with 2**31 - 1 Hz took 20 s on a 12 ms file (46 ms frames of a hundred million samples). Rates outside
    100 Hz to 768 kHz are refused, naming the rate, before the detector runs."""
    import metertop.audio as audio

    def no_detector(*args, **kwargs):
        raise AssertionError("the onset detector ran on a damaged sample rate")

    monkeypatch.setattr(audio, "detect_onsets", no_detector)
    data = bytearray(_wav_bytes(_clicks([0.1, 0.3, 0.5], length_s=1.0), SR, "PCM_16"))
    assert data[12:16] == b"fmt "  # the plain 44-byte header: the rate is at byte 24 (RIFF WAVE, Microsoft)
    data[24:28] = rate.to_bytes(4, "little")
    path = tmp_path / "rate.wav"
    path.write_bytes(bytes(data))
    with pytest.raises(InputError, match=f"a sample rate of {rate:,} Hz"):
        audio.audio_notes(path)
    outcome = run_cli(["analyse", str(path)])
    assert outcome.verdict == "refused" and "sample rate" in outcome.detail, outcome
