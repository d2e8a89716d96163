"""Synthesised recordings of benchmark performances, with the note onsets as exact ground truth.

Usage: python bench/synth.py [--kind groove|played|deadpan] [--snr-db 20] OUT.wav

Conventions
-----------
- Audio is float32 mono in [-1, 1] at ``sample_rate`` (44,100 by default),
  peak-normalised to 0.9; a note's sound starts exactly at its onset sample.
- Drum sounds (General MIDI percussion key map, an open standard) are simple
  synthesised ones: the kick and toms are decaying sines with a falling pitch;
  the snare, claps, hi-hats and cymbals are noise bursts through Butterworth
  filters (scipy.signal) with exponential decays. Each drum has a few
  seeded variants, so that repeated hits are not bit-identical.
- ``kit="other"`` voices the drums differently, to see how far the kit
  reading's fixed levels (chosen on the first kit) carry: a longer, higher
  kick with a beater click (a 3 ms noise burst above 2 kHz), a brighter
  snare with a lower body (noise 1-9 kHz), hi-hats above 5 kHz, a ride
  band-passed 3-12 kHz with a bell tone, a crash above 3 kHz, toms lower
  and longer.
- Pitched notes are plain harmonic tones: 6 partials at amplitudes 1/k, a
  10 ms attack, an exponential decay over the note and a 30 ms release.
- Loudness follows the MIDI velocity: amplitude ``(velocity / 127) ** 2``
  (a common practice mapping, from memory).
- Noise: white Gaussian noise scaled to the given signal-to-noise ratio over
  the whole clip, ``10 log10(P_signal / P_noise)`` in dB.
- Random numbers come only from ``np.random.default_rng(seed)``.
"""

from __future__ import annotations

import argparse
import sys
from functools import lru_cache
from pathlib import Path

import numpy as np

__all__ = ["synthesise", "add_noise", "reference_onsets", "SAMPLE_RATE"]

SAMPLE_RATE = 44_100
_VARIANTS = 4
_PARTIALS = 6


def _sos(kind: str, freqs, sample_rate: int):
    from scipy.signal import butter

    return butter(4, freqs, btype=kind, fs=sample_rate, output="sos")


def _noise_burst(rng, sample_rate: int, length_s: float, decay_s: float, kind: str, freqs) -> np.ndarray:
    from scipy.signal import sosfilt

    n = int(length_s * sample_rate)
    noise = sosfilt(_sos(kind, freqs, sample_rate), rng.normal(0, 1, n))
    env = np.exp(-np.arange(n) / (decay_s * sample_rate))
    out = noise * env
    return out / np.max(np.abs(out))


def _falling_sine(sample_rate: int, length_s: float, f_start: float, f_end: float, sweep_s: float, decay_s: float) -> np.ndarray:
    n = int(length_s * sample_rate)
    t = np.arange(n) / sample_rate
    # Instantaneous frequency falls exponentially from f_start to f_end.
    f = f_end + (f_start - f_end) * np.exp(-t / sweep_s)
    phase = 2 * np.pi * np.cumsum(f) / sample_rate
    return np.sin(phase) * np.exp(-t / decay_s)


def _other_drum(kind: str, pitch: int, rng, sr: int) -> np.ndarray:
    """The drums of ``kit="other"`` (see the module notes)."""
    top = 0.45 * sr
    if kind == "kick":
        click = np.zeros(int(0.45 * sr))
        burst = _noise_burst(rng, sr, 0.003, 0.001, "highpass", min(2000.0, 0.4 * sr))
        click[:len(burst)] = 0.3 * burst
        return _falling_sine(sr, 0.45, 160.0, 60.0, 0.02, 0.2) + click
    if kind == "tom":
        base = 70.0 + 10.0 * (pitch - 41)
        return 0.8 * _falling_sine(sr, 0.5, base * 1.6, base, 0.05, 0.22)
    if kind == "snare":
        body = 0.6 * _falling_sine(sr, 0.25, 190.0, 150.0, 0.02, 0.06)
        return 0.7 * _noise_burst(rng, sr, 0.25, 0.08, "bandpass", (1000.0, min(9000.0, top))) + body
    if kind in ("closed_hat", "open_hat"):
        decay = 0.03 if kind == "closed_hat" else 0.2
        return 0.3 * _noise_burst(rng, sr, 8 * decay, decay, "highpass", min(5000.0, 0.4 * sr))
    if kind == "ride":
        t = np.arange(int(0.8 * sr)) / sr
        bell = 0.15 * np.sin(2 * np.pi * 1150.0 * t) * np.exp(-t / 0.3)
        return 0.3 * _noise_burst(rng, sr, 0.8, 0.35, "bandpass", (3000.0, min(12000.0, top))) + bell
    if kind == "crash":
        return 0.5 * _noise_burst(rng, sr, 2.0, 0.8, "highpass", min(3000.0, 0.4 * sr))
    return 0.4 * _noise_burst(rng, sr, 0.1, 0.03, "bandpass", (600.0, min(3000.0, top)))


def _drum_kind(pitch: int) -> str:
    if pitch in (35, 36):
        return "kick"
    if pitch in (41, 43, 45, 47, 48, 50):
        return "tom"
    if pitch in (37, 38, 39, 40):
        return "snare"
    if pitch in (42, 44):
        return "closed_hat"
    if pitch in (46,):
        return "open_hat"
    if pitch in (51, 53, 59):
        return "ride"
    if pitch in (49, 52, 55, 57):
        return "crash"
    return "perc"


@lru_cache(maxsize=512)
def _drum(kind: str, pitch: int, variant: int, sample_rate: int, kit: str = "standard") -> np.ndarray:
    rng = np.random.default_rng([pitch, variant, sample_rate])
    sr = sample_rate
    if kit == "other":
        return _other_drum(kind, pitch, rng, sr)
    if kit != "standard":
        raise ValueError(f"unknown kit {kit!r}: standard or other")
    if kind == "kick":
        return _falling_sine(sr, 0.35, 110.0, 50.0, 0.03, 0.12)
    if kind == "tom":
        base = 90.0 + 12.0 * (pitch - 41)
        return 0.8 * _falling_sine(sr, 0.4, base * 1.4, base, 0.04, 0.15)
    if kind == "snare":
        body = 0.5 * _falling_sine(sr, 0.2, 220.0, 180.0, 0.02, 0.04)
        return 0.8 * _noise_burst(rng, sr, 0.2, 0.05, "bandpass", (300.0, min(6000.0, 0.45 * sr))) + body
    if kind == "closed_hat":
        return 0.35 * _noise_burst(rng, sr, 0.08, 0.015, "highpass", min(7000.0, 0.4 * sr))
    if kind == "open_hat":
        return 0.35 * _noise_burst(rng, sr, 0.4, 0.12, "highpass", min(7000.0, 0.4 * sr))
    if kind == "ride":
        return 0.3 * _noise_burst(rng, sr, 0.6, 0.25, "highpass", min(5000.0, 0.4 * sr))
    if kind == "crash":
        return 0.5 * _noise_burst(rng, sr, 1.5, 0.6, "highpass", min(4000.0, 0.4 * sr))
    return 0.4 * _noise_burst(rng, sr, 0.1, 0.03, "bandpass", (800.0, min(4000.0, 0.45 * sr)))


def _tone(pitch: int, duration_s: float, sample_rate: int) -> np.ndarray:
    """A harmonic tone: partials k*f0 (below Nyquist) at 1/k, attack 10 ms, decay over the note, release 30 ms."""
    f0 = 440.0 * 2.0 ** ((pitch - 69) / 12.0)
    sr = sample_rate
    n_on = max(int(duration_s * sr), 1)
    n = n_on + int(0.03 * sr)
    t = np.arange(n) / sr
    wave = np.zeros(n)
    for k in range(1, _PARTIALS + 1):
        if k * f0 < 0.45 * sr:
            wave += np.sin(2 * np.pi * k * f0 * t) / k
    env = np.minimum(t / 0.01, 1.0) * np.exp(-t / max(duration_s, 0.05))
    release = np.ones(n)
    release[n_on:] = np.linspace(1.0, 0.0, n - n_on)
    return wave * env * release / 1.5


def synthesise(onsets_s, durations_s, pitches, velocities, is_drum, *, sample_rate: int = SAMPLE_RATE,
               seed: int = 0, tail_s: float = 1.0, kit: str = "standard") -> np.ndarray:
    """Render notes as audio: drums for ``is_drum`` notes, harmonic tones for the rest.

    Parameters
    ----------
    onsets_s, durations_s, pitches, velocities, is_drum : array_like
        Parallel arrays, one entry per note (velocities 1-127; NaN counts as 80).
    sample_rate : int
    seed : int
        Chooses each drum hit's variant.
    tail_s : float
        Silence after the last note's end.
    kit : str
        ``"standard"``, or ``"other"`` for the differently voiced kit.
    """
    t = np.asarray(onsets_s, float)
    d = np.nan_to_num(np.asarray(durations_s, float), nan=0.2)
    p = np.asarray(pitches, np.int64)
    v = np.nan_to_num(np.asarray(velocities, float), nan=80.0)
    drum = np.asarray(is_drum, bool)
    rng = np.random.default_rng(seed)
    variants = rng.integers(0, _VARIANTS, len(t))
    lengths = [len(_drum(_drum_kind(int(pi)), int(pi), 0, sample_rate, kit)) if dr else int((di + 0.03) * sample_rate) + 1
               for pi, di, dr in zip(p, d, drum)]
    end = max((int(round(ti * sample_rate)) + n for ti, n in zip(t, lengths)), default=0)
    out = np.zeros(end + int(tail_s * sample_rate), dtype=np.float64)
    for ti, di, pi, vi, dr, var in zip(t, d, p, v, drum, variants):
        start = int(round(ti * sample_rate))
        sound = _drum(_drum_kind(int(pi)), int(pi), int(var), sample_rate, kit) if dr else _tone(int(pi), float(di), sample_rate)
        out[start:start + len(sound)] += (vi / 127.0) ** 2 * sound
    top = np.max(np.abs(out))
    return (out * (0.9 / top) if top > 0 else out).astype(np.float32)


def add_noise(audio: np.ndarray, snr_db: float, seed: int = 0) -> np.ndarray:
    """``audio`` plus white Gaussian noise at ``snr_db`` over the whole clip, peak-normalised to 0.9 again."""
    rng = np.random.default_rng(seed)
    x = np.asarray(audio, np.float64)
    p_signal = np.mean(x ** 2)
    noise = rng.normal(0, 1, len(x)) * np.sqrt(p_signal / 10 ** (snr_db / 10))
    y = x + noise
    return (y * (0.9 / np.max(np.abs(y)))).astype(np.float32)


def reference_onsets(onsets_s, window_s: float = 0.03) -> np.ndarray:
    """The truth for onset evaluation: note onsets, with notes within ``window_s`` of the last kept onset merged into it.

    A chord, a flam or a kick struck with a cymbal is one onset to a listener
    and to an onset detector (common practice; 30 ms is below what
    mir_eval's +-50 ms window can split anyway).

    >>> reference_onsets([0.0, 0.01, 0.5, 0.52, 0.6]).tolist()
    [0.0, 0.5, 0.6]
    """
    t = np.sort(np.asarray(onsets_s, float))
    keep = []
    for x in t.tolist():
        if not keep or x - keep[-1] > window_s:
            keep.append(x)
    return np.asarray(keep)


def performance_audio(perf, *, sample_rate: int = SAMPLE_RATE, snr_db: float | None = None, seed: int = 0) -> np.ndarray:
    """A benchmark :class:`common.Performance` as audio, with noise at ``snr_db`` if given."""
    audio = synthesise(perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities, perf.is_drum,
                       sample_rate=sample_rate, seed=seed)
    return audio if snr_db is None else add_noise(audio, snr_db, seed=seed + 1)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Write one synthesised benchmark performance as a WAV file.")
    parser.add_argument("out", type=Path)
    parser.add_argument("--kind", choices=("groove", "deadpan", "played"), default="groove")
    parser.add_argument("--metre", default="4/4", help="groove metre (grooves only)")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--snr-db", type=float, default=None)
    parser.add_argument("--sample-rate", type=int, default=SAMPLE_RATE)
    args = parser.parse_args(argv)
    import soundfile as sf

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    if args.kind == "groove":
        from grooves import make_groove

        perf = make_groove(args.metre, np.random.default_rng(args.seed), piece_id="synth")
    else:
        from essen import TRAIN_FILES, load_corpus, split_of
        from render import render

        tunes = [t for t in load_corpus() if split_of(t) == "train"]
        perf = render(tunes[args.seed % len(tunes)], args.kind, seed=args.seed)
        assert perf.extra.get("source_file", "") in TRAIN_FILES
    audio = performance_audio(perf, sample_rate=args.sample_rate, snr_db=args.snr_db, seed=args.seed)
    sf.write(str(args.out), audio, args.sample_rate)
    print(f"wrote {args.out}: {perf.time_signature}, {len(audio) / args.sample_rate:.1f} s, {len(perf.onsets_s)} notes")
    return 0


if __name__ == "__main__":
    sys.exit(main())
