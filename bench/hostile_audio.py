"""Hostile recordings: seeded WAV, FLAC and OGG files, odd in their content, their format or their bytes.

Usage: imported by ``tests/test_robust.py`` (a few dozen inputs in ``make
test``) and ``bench/robust.py`` (``--recordings``, 1,000 in ``make
bench-robust``); ``python bench/hostile_audio.py SEED INDEX OUT_STEM``
writes one input to a file and prints the command that replays it.

Conventions
-----------
- A stream of its own, apart from ``bench/hostile.py``'s (whose fixed
  indices tests replay): input ``i`` of ``hostile_recordings(n, seed)``
  draws only from ``np.random.default_rng([seed, i])`` and
  :func:`hostile_recording` rebuilds it alone.
- Each input is a :class:`HostileRecording`, a :class:`hostile.Hostile`
  with the command to run it under (``analyse``, ``analyse --json``, with
  ``--kit``, ``--no-kit`` or ``--band-weights``, or ``check -s 4/4``).
  ``case`` is ``audio/<content>/<format>/<damage steps>``: the content with
  its length, sample rate and channels (``kit-2.50s-44100hz-2ch``), the
  container and sample format as written (``wav-pcm16``; ``ogg-opus>wav-float``
  when soundfile refused the combination asked for and a WAV was written
  instead) and what was done to the bytes (``intact`` when nothing).
- Files are built in memory with soundfile. They stay small (at most about
  1.2 million sample values, ten seconds), so that a thousand run in a few
  minutes a core.
- The WAV header fields (RIFF and data chunk lengths, the ``fmt`` chunk's
  sample rate, channels, block size and bits) follow Microsoft's RIFF WAVE
  layout, and FLAC's STREAMINFO block the FLAC format specification
  (xiph.org), both open formats. Ogg pages carry a checksum, so OGG files
  are damaged as bytes only.
- The content carries the damage; no metre is checked on it.
"""

from __future__ import annotations

import io
import struct
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

from hostile import Hostile, Outcome, run_cli  # noqa: E402
from hostile import main as write_one  # noqa: E402

__all__ = ["HostileRecording", "hostile_recording", "hostile_recordings", "CONTENTS", "FORMATS", "DAMAGES", "RATES"]

RATES = (400, 1000, 8000, 11025, 22050, 44100, 48000, 96000, 192000)
CHANNELS = (1, 1, 1, 2, 2, 6)
# Most sample values a file holds (frames times channels): 1 s of 6 channels at 192 kHz, 10 s of stereo 48 kHz; at most
# 9.6 MB as doubles.
MAX_VALUES = 1_200_000


@dataclass(frozen=True)
class HostileRecording(Hostile):
    """A hostile recording and the command (without the file) to run it under."""

    command: tuple[str, ...] = ("analyse",)

    def args(self, path) -> list[str]:
        """The command-line arguments that run this input from ``path``."""
        return [*self.command, str(path)]

    def run(self, path) -> Outcome:
        """Run this input from ``path`` through the command line and judge it (:func:`hostile.run_cli`); ``check``'s
        verdicts inconsistent (exit 1) and ambiguous (exit 3) are results."""
        return run_cli(self.args(path), results=(0, 1, 3) if self.command[0] == "check" else (0,))


# ---- content: float64 arrays of shape (frames, channels) ----------------------------------

def _pattern(rng, duration_s: float) -> np.ndarray:
    """Onset times of a steady pattern: a random step from 0.18 to 0.6 s, from a random start."""
    step = float(rng.uniform(0.18, 0.6))
    return np.arange(float(rng.uniform(0.0, 0.2)), duration_s, step)


def _sos(kind: str, cut_hz, rate: int):
    """A 4th-order Butterworth filter, its edges kept below 0.45 of the sample rate (so any rate works)."""
    from scipy.signal import butter

    top = 0.45 * rate
    if kind == "bandpass":
        hi = min(cut_hz[1], top)
        lo = min(cut_hz[0], 0.5 * hi)
        return butter(4, [lo, hi], btype="bandpass", fs=rate, output="sos")
    return butter(4, min(cut_hz, 0.6 * top), btype=kind, fs=rate, output="sos")


def _place(out: np.ndarray, times_s, sound: np.ndarray, rate: int, gain=1.0) -> None:
    for t in np.asarray(times_s).tolist():
        a = int(round(t * rate))
        if a >= len(out):
            continue
        piece = sound[: len(out) - a]
        out[a:a + len(piece)] += gain * piece


def _c_clicks(rng, n, rate):
    x = np.zeros(n)
    idx = (_pattern(rng, n / rate) * rate).astype(np.int64)
    x[idx[idx < n]] = rng.uniform(0.3, 1.0, np.count_nonzero(idx < n))
    return x


def _c_kit(rng, n, rate):
    """A kick (decaying low sine), a snare (band-passed noise) and a hi-hat (high-passed noise) in a steady 8-step bar."""
    from scipy.signal import sosfilt

    x = np.zeros(n)
    t = np.arange(int(0.25 * rate) + 1) / rate
    kick = np.sin(2 * np.pi * float(rng.uniform(45, 80)) * t) * np.exp(-t / 0.08)
    noise = rng.standard_normal(len(t))
    snare = sosfilt(_sos("bandpass", (200.0, 3000.0), rate), noise) * np.exp(-t / 0.06)
    hat = sosfilt(_sos("highpass", 7000.0, rate), noise) * np.exp(-t / 0.02)
    times = _pattern(rng, n / rate)
    for k, at in enumerate(times.tolist()):
        step = k % 8
        _place(x, [at], hat, rate, 0.4)
        if step in (0, 5):
            _place(x, [at], kick, rate, 0.9)
        if step in (2, 6):
            _place(x, [at], snare, rate, 0.7)
    return x


def _c_tones(rng, n, rate):
    """Harmonic tones (a few partials below the Nyquist frequency), one per step, with a fast attack and a decay."""
    x = np.zeros(n)
    times = _pattern(rng, n / rate)
    length = int(0.3 * rate) + 1
    t = np.arange(length) / rate
    env = np.minimum(t / 0.005, 1.0) * np.exp(-t / 0.15)
    for at in times.tolist():
        f0 = float(rng.choice([110.0, 196.0, 262.0, 330.0, 440.0, 880.0]))
        tone = sum(np.sin(2 * np.pi * k * f0 * t) / k for k in range(1, 6) if k * f0 < 0.45 * rate)
        _place(x, [at], env * (tone if np.ndim(tone) else np.zeros(length)), rate, 0.3)
    return x


def _c_silence(rng, n, rate):
    return np.zeros(n)


def _c_noise(rng, n, rate):
    return float(rng.choice([0.01, 0.3, 1.0])) * rng.uniform(-1, 1, n)


def _c_dc(rng, n, rate):
    """A constant offset, with a few clicks on it half the time."""
    x = np.full(n, float(rng.choice([-1.0, -0.5, 0.25, 0.99])))
    if rng.random() < 0.5:
        x += 0.5 * _c_clicks(rng, n, rate) * np.sign(-x[0])
    return x


def _c_square(rng, n, rate):
    f = float(rng.choice([1.0, 2.0, 55.0, 1000.0, 0.3 * rate]))
    return np.where(np.sin(2 * np.pi * f * np.arange(n) / rate) >= 0, 1.0, -1.0)


def _c_alternating(rng, n, rate):
    return np.where(np.arange(n) % 2, -1.0, 1.0)


def _c_impulse(rng, n, rate):
    x = np.zeros(n)
    x[int(rng.integers(n))] = float(rng.choice([1.0, -1.0, 0.5]))
    return x


def _c_denormal(rng, n, rate):
    """Subnormal values only (float32 and float64 ones): a silent file to any ear."""
    return float(rng.choice([1e-40, 1e-310])) * rng.uniform(-1, 1, n)


def _c_denormal_floor(rng, n, rate):
    """Clicks over a floor of subnormal noise."""
    return _c_clicks(rng, n, rate) + 1e-40 * rng.uniform(-1, 1, n)


def _c_huge(rng, n, rate):
    """Float values far beyond full scale, as a float WAV holds them unchecked."""
    return float(rng.choice([3.0, 1e6, 1e30, 3e38, 1e300])) * _c_clicks(rng, n, rate) + float(rng.choice([0.0, 1e4])) * rng.uniform(-1, 1, n)


def _c_nonfinite(rng, n, rate):
    """Clicks with NaN, inf or -inf at a few samples (or all of them)."""
    x = _c_clicks(rng, n, rate)
    bad = float(rng.choice([np.nan, np.inf, -np.inf]))
    if rng.random() < 0.2:
        x[:] = bad
    else:
        x[rng.integers(0, n, int(rng.integers(1, 4)))] = bad
    return x


CONTENTS = {
    "clicks": _c_clicks, "kit": _c_kit, "tones": _c_tones, "silence": _c_silence, "noise": _c_noise, "dc": _c_dc,
    "square": _c_square, "alternating": _c_alternating, "impulse": _c_impulse, "denormal": _c_denormal,
    "denormal-floor": _c_denormal_floor, "huge": _c_huge, "nonfinite": _c_nonfinite,
}
# Content that only a float file holds as it is.
FLOAT_ONLY = ("huge", "nonfinite", "denormal", "denormal-floor")


def _duration(rng) -> float:
    roll = rng.random()
    if roll < 0.1:
        return float(rng.uniform(0.001, 0.03))  # a few milliseconds
    if roll < 0.35:
        return float(rng.uniform(0.3, 2.5))
    if roll < 0.85:
        return float(rng.uniform(2.5, 6.0))  # long enough for a metre
    return float(rng.uniform(6.0, 10.0))


def _content(rng) -> tuple[str, str, np.ndarray, int]:
    name = str(rng.choice(list(CONTENTS)))
    rate = int(rng.choice(RATES))
    channels = int(rng.choice(CHANNELS))
    duration = min(_duration(rng), MAX_VALUES / (rate * channels))
    n = max(int(duration * rate), 1)
    mono = CONTENTS[name](rng, n, rate)
    if channels == 1:
        x = mono[:, None]
    else:  # each channel its own gain, and the last one sometimes silent or inverted (a stereo pair then cancels)
        gains = rng.uniform(0.2, 1.0, channels)
        gains[-1] = float(rng.choice([gains[-1], 0.0, -gains[0]], p=[0.8, 0.1, 0.1]))
        x = mono[:, None] * gains[None, :]
        if name in ("huge", "nonfinite", "alternating", "square"):
            x = np.repeat(mono[:, None], channels, axis=1)  # keep the extreme values extreme
    return name, f"{name}-{n / rate:.3f}s-{rate}hz-{channels}ch", x, rate


# ---- formats --------------------------------------------------------------------------------

FORMATS = {
    "wav-u8": ("WAV", "PCM_U8", ".wav"), "wav-pcm16": ("WAV", "PCM_16", ".wav"), "wav-pcm24": ("WAV", "PCM_24", ".wav"),
    "wav-float": ("WAV", "FLOAT", ".wav"), "wav-double": ("WAV", "DOUBLE", ".wav"), "wav-ulaw": ("WAV", "ULAW", ".wav"),
    "wav-ima-adpcm": ("WAV", "IMA_ADPCM", ".wav"),
    "rf64-pcm16": ("RF64", "PCM_16", ".wav"), "flac-16": ("FLAC", "PCM_16", ".flac"), "flac-24": ("FLAC", "PCM_24", ".flac"),
    "ogg-vorbis": ("OGG", "VORBIS", ".ogg"), "ogg-opus": ("OGG", "OPUS", ".ogg"),
}


def _encode(x: np.ndarray, rate: int, fmt: str) -> tuple[str, bytes]:
    """The file's bytes in ``fmt``; if soundfile refuses (Opus at 44.1 kHz, FLAC at 192 kHz in 6 channels), a float WAV,
    named ``fmt>wav-float``."""
    import soundfile as sf

    container, subtype, _ = FORMATS[fmt]
    if subtype not in ("FLOAT", "DOUBLE"):
        # Only a float file holds values beyond full scale, NaN or inf; and libsndfile's u-law encoder reads past its
        # table on them (a segfault while writing, found when bench/robust.py's workers died).
        x = np.clip(np.nan_to_num(x, nan=0.0, posinf=1.0, neginf=-1.0), -1.0, 1.0)
    buf = io.BytesIO()
    try:
        sf.write(buf, x, rate, format=container, subtype=subtype)
        return fmt, buf.getvalue()
    except (RuntimeError, ValueError, TypeError, AssertionError) as exc:  # LibsndfileError is a RuntimeError; a short write asserts
        if container == "WAV" and subtype in ("FLOAT", "DOUBLE"):
            raise RuntimeError(f"soundfile cannot write even a float WAV: {exc}") from None
        buf = io.BytesIO()
        sf.write(buf, x, rate, format="WAV", subtype="FLOAT")
        return f"{fmt}>wav-float", buf.getvalue()


# ---- damage -----------------------------------------------------------------------------------

def _riff_chunks(data: bytes) -> dict[bytes, int]:
    """Offsets of the chunks of a RIFF WAVE file, by tag (the first of each), walking the declared lengths."""
    out, pos = {}, 12
    while pos + 8 <= len(data):
        tag = data[pos:pos + 4]
        out.setdefault(tag, pos)
        pos += 8 + struct.unpack("<I", data[pos + 4:pos + 8])[0] + (struct.unpack("<I", data[pos + 4:pos + 8])[0] & 1)
    return out


def _put(data: bytes, at: int, fmt: str, value: int) -> bytes:
    size = struct.calcsize(fmt)
    if at + size > len(data):
        return data
    return data[:at] + struct.pack(fmt, value) + data[at + size:]


def _d_header_field(data: bytes, rng, container: str) -> tuple[str, bytes]:
    """One header field set to an absurd value: WAV's lengths and fmt fields, FLAC's STREAMINFO; else header bytes."""
    if container == "WAV" and data[:4] == b"RIFF":
        chunks = _riff_chunks(data)
        fmt_at, data_at = chunks.get(b"fmt "), chunks.get(b"data")
        options = ["riff-length"]
        if fmt_at is not None:
            options += ["rate", "channels", "block-align", "bits", "byte-rate", "format-tag"]
        if data_at is not None:
            options += ["data-length"]
        field = str(rng.choice(options))
        if field == "riff-length":
            return field, _put(data, 4, "<I", int(rng.choice([0, 4, len(data) * 3, 0xFFFFFFFF])))
        if field == "data-length":
            return field, _put(data, data_at + 4, "<I", int(rng.choice([0, 1, 3, len(data) * 7, 0x7FFFFFFF, 0xFFFFFFFF])))
        body = fmt_at + 8
        if field == "rate":
            return field, _put(data, body + 4, "<I", int(rng.choice([0, 1, 7, 0x7FFFFFFF, 0xFFFFFFFF])))
        if field == "channels":
            return field, _put(data, body + 2, "<H", int(rng.choice([0, 3, 255, 1024, 0xFFFF])))
        if field == "block-align":
            return field, _put(data, body + 12, "<H", int(rng.choice([0, 1, 0xFFFF])))
        if field == "bits":
            return field, _put(data, body + 14, "<H", int(rng.choice([0, 1, 7, 64, 0xFFFF])))
        if field == "byte-rate":
            return field, _put(data, body + 8, "<I", int(rng.choice([0, 0xFFFFFFFF])))
        return field, _put(data, body, "<H", int(rng.choice([0, 2, 0x55, 0xFFFE, 0x1234])))
    if container == "FLAC" and data[:4] == b"fLaC" and len(data) >= 42:
        field = str(rng.choice(["flac-rate", "flac-total", "flac-blocksize", "flac-bits"]))
        b = bytearray(data)
        if field == "flac-rate":  # 20 bits from byte 18: 0 is invalid, 0xFFFFF is 1,048,575 Hz
            v = int(rng.choice([0, 1, 0xFFFFF]))
            b[18], b[19] = v >> 12, (v >> 4) & 0xFF
            b[20] = (b[20] & 0x0F) | ((v & 0x0F) << 4)
        elif field == "flac-total":  # 36 bits of total samples from the low nibble of byte 21
            b[21] = (b[21] & 0xF0) | 0x0F
            b[22:26] = b"\xff\xff\xff\xff"
        elif field == "flac-blocksize":
            b[8:12] = bytes(4) if rng.random() < 0.5 else b"\xff\xff\x00\x01"
        else:  # bits per sample minus one: 5 bits across bytes 20 and 21
            b[20] = (b[20] & 0xFE) | 1
            b[21] = (b[21] & 0x0F) | 0xF0
        return field, bytes(b)
    return "header-bytes", _d_overwrite(data, rng, header=True)


def _d_overwrite(data: bytes, rng, header: bool) -> bytes:
    if not data:
        return data
    b = bytearray(data)
    span = min(len(b), 64) if header else len(b)
    lo = 0 if header else min(64, len(b) - 1)
    for _ in range(int(rng.integers(1, 9))):
        at = int(rng.integers(lo, max(span, lo + 1)))
        b[at] = int(rng.choice([0x00, 0x7F, 0x80, 0xFF, int(rng.integers(256))]))
    return bytes(b)


def _damage(data: bytes, rng, container: str) -> tuple[list[str], bytes]:
    steps = []
    names = ["truncate", "header-bytes", "body-bytes", "header-field", "junk"]
    for name in rng.choice(names, size=int(rng.integers(1, 3)), replace=False, p=[0.2, 0.15, 0.15, 0.35, 0.15]):
        name = str(name)
        if name == "truncate":
            # Half the cuts fall inside the first 64 bytes: the header.
            end = len(data) if rng.random() < 0.5 else min(len(data), 64)
            data = data[: int(rng.integers(0, max(end, 1)))]
        elif name == "header-bytes":
            data = _d_overwrite(data, rng, header=True)
        elif name == "body-bytes":
            data = _d_overwrite(data, rng, header=False)
        elif name == "header-field":
            name, data = _d_header_field(data, rng, container)
        else:
            junk = [b"\x00" * int(rng.integers(1, 200)), bytes(rng.integers(0, 256, int(rng.integers(1, 4000))).astype(np.uint8)),
                    b"LIST\x04\x00\x00\x00INFO", b"ID3\x03\x00\x00\x00\x00\x00\x00", b"fLaC", b"OggS" + bytes(30)]
            data = data + junk[int(rng.integers(len(junk)))]
        steps.append(name)
    return steps, data


# What a file of another kind holds under a recording's name.
_TEXT = ["time_s,weight\n0.5,1\n1.0,1\n", "Tidewater harbour log: no sound here\n", "", "RIFF", "\x00" * 44]


def _renamed(data: bytes, container: str, rng) -> tuple[str, str]:
    """The wrong suffix for these bytes: another container's, or a MIDI file's or an onset list's."""
    other = {"WAV": [".ogg", ".flac"], "RF64": [".ogg", ".flac"], "FLAC": [".wav", ".ogg"], "OGG": [".wav", ".flac"]}[container]
    suffix = str(rng.choice(other + [".mid", ".csv", ".txt", ""]))
    return f"as-{suffix.lstrip('.') or 'no-suffix'}", suffix


# ---- the command ---------------------------------------------------------------------------

_BAND_WEIGHTS = ["1,1,1", "4,2,1", "0,0,1", "10,0,0", "1e-9,1,1e9", "nan,1,1"]


def _command(rng) -> tuple[str, ...]:
    roll = rng.random()
    if roll < 0.15:
        return ("check", "-s", "4/4") + (("--json",) if rng.random() < 0.5 else ()) + (("--kit",) if rng.random() < 0.3 else ())
    cmd = ["analyse"] + (["--json"] if rng.random() < 0.5 else [])
    extra = rng.random()
    if extra < 0.15:
        cmd.append("--kit")
    elif extra < 0.3:
        cmd.append("--no-kit")
    elif extra < 0.4:
        cmd += ["--band-weights", str(rng.choice(_BAND_WEIGHTS))]
    return tuple(cmd)


# ---- the stream ------------------------------------------------------------------------------

def hostile_recording(seed: int, index: int) -> HostileRecording:
    """Input ``index`` of the recordings stream with base ``seed`` (see the module conventions)."""
    rng = np.random.default_rng([seed, index])
    command = _command(rng)
    roll = rng.random()
    if roll < 0.03:
        return HostileRecording("audio/empty/none/zero-length", ".wav", b"", command)
    if roll < 0.06:
        text = _TEXT[int(rng.integers(len(_TEXT)))]
        return HostileRecording("audio/text/none/text-as-wav", ".wav", text.encode("utf-8"), command)
    with np.errstate(all="ignore"):  # inf times a gain of 0 is meant to be NaN here
        name, content, x, rate = _content(rng)
    fmt = str(rng.choice(list(FORMATS)))
    if name in FLOAT_ONLY and rng.random() < 0.8:
        fmt = str(rng.choice(["wav-float", "wav-double"]))
    written, data = _encode(x, rate, fmt)
    container, _, suffix = FORMATS["wav-float" if ">" in written else fmt]
    steps: list[str] = []
    if rng.random() < 0.55:
        more, data = _damage(data, rng, container)
        steps += more
    if rng.random() < 0.1:
        step, suffix = _renamed(data, container, rng)
        steps.append(step)
    return HostileRecording(f"audio/{content}/{written}/{'+'.join(steps) or 'intact'}", suffix, data, command)


def hostile_recordings(n: int, seed: int) -> Iterator[HostileRecording]:
    """The first ``n`` inputs of the recordings stream with base ``seed``.

    >>> a = [h.case for h in hostile_recordings(8, seed=3)]
    >>> a == [hostile_recording(3, i).case for i in range(8)]
    True
    >>> all(c.startswith("audio/") for c in a)
    True
    """
    for i in range(n):
        yield hostile_recording(seed, i)


def main(argv=None) -> int:
    return write_one(argv, build=hostile_recording, script="bench/hostile_audio.py")


if __name__ == "__main__":
    sys.exit(main())
