"""Recordings as input: read WAV, FLAC or OGG with soundfile, detect the onsets, write them out.

Conventions
-----------
- soundfile (the ``audio`` extra: ``pip install 'metertop[audio]'``) is
  imported only when a recording is read, so MIDI and onset-list commands
  never pay for it.
- Several channels are mixed down to mono (their mean); any sample rate is
  accepted. The samples are float32.
- The onsets (:mod:`metertop.flux`) become a :class:`~metertop.load.NoteTable`
  with ``source="audio"``: no velocity, and each onset's flux strength as
  its ``weight``. A recording that reads as a drum kit
  (:func:`metertop.flux.is_kit`) gives a drum hit (General MIDI key) per drum
  an onset sounds (:func:`metertop.flux.kit_strokes`), so the kit's roles
  and its bar-lag repetition count as for drum MIDI; any other recording
  gives notes without pitch. Times are rounded to microseconds and weights
  to six significant digits, so that the onset list written by
  :func:`onsets_csv` reads back as exactly the same table.
- Every problem with the file is an :class:`~metertop.errors.InputError`.
"""

from __future__ import annotations

import os
from collections import Counter
from dataclasses import replace

import numpy as np

from .errors import InputError
from .flux import FluxSettings, detect_onsets, is_kit, kit_strokes
from .limits import LimitError

__all__ = ["AUDIO_SUFFIXES", "AUDIO_MAGIC", "MAX_AUDIO_BYTES", "MAX_AUDIO_S", "MIN_AUDIO_RATE", "MAX_AUDIO_RATE", "read_audio",
           "audio_notes", "onsets_csv", "is_audio_file", "require_soundfile", "recording_summary", "recording_line"]

AUDIO_SUFFIXES = (".wav", ".wave", ".flac", ".ogg", ".oga")
# The first four bytes of the containers soundfile reads for us.
AUDIO_MAGIC = (b"RIFF", b"RF64", b"fLaC", b"OggS")
MAX_AUDIO_BYTES = 1024 * 1024 * 1024
MAX_AUDIO_S = 30 * 60.0
# Sample rates read: below 100 Hz the detector's 10 ms hop is less than a sample; 768 kHz is twice 384 kHz, the highest
# rate of common studio converters (from memory), and far above it the 46 ms frames need FFTs of millions of points (a
# header overwritten with 2**31 Hz took 20 s on a 12 ms file). Outside, the header is taken for damaged.
MIN_AUDIO_RATE = 100.0
MAX_AUDIO_RATE = 768_000.0
_BLOCK_FRAMES = 1 << 18


def is_audio_file(path: str, head: bytes) -> bool:
    """Whether ``path`` (whose first bytes are ``head``) is a recording, by its suffix or its container's magic bytes."""
    return os.path.splitext(path)[1].lower() in AUDIO_SUFFIXES or head[:4] in AUDIO_MAGIC


def require_soundfile():
    """The soundfile module, or an InputError that says how to install it."""
    try:
        import soundfile
    except ImportError:
        raise InputError("reading recordings needs soundfile: pip install 'metertop[audio]'") from None
    except OSError as exc:  # the package is there but its libsndfile is not
        raise InputError(f"soundfile cannot load libsndfile ({exc}); reinstall it: pip install 'metertop[audio]'") from None
    return soundfile


def read_audio(path: str | os.PathLike) -> tuple[np.ndarray, float]:
    """The samples of a recording mixed down to mono (float32), and its sample rate.

    Raises
    ------
    InputError
        If soundfile is missing, the file is not a readable WAV, FLAC or OGG
        file, holds no samples or samples that are not finite, has a sample
        rate outside :data:`MIN_AUDIO_RATE` to :data:`MAX_AUDIO_RATE`, or is
        longer than :data:`MAX_AUDIO_S`.
    """
    sf = require_soundfile()
    path = os.fspath(path)
    try:
        with sf.SoundFile(path) as f:
            rate, channels, frames = float(f.samplerate), int(f.channels), int(f.frames)
            if rate <= 0 or channels <= 0:
                raise InputError(f"{path}: not a readable recording (sample rate {rate:g}, {channels} channels)")
            if not MIN_AUDIO_RATE <= rate <= MAX_AUDIO_RATE:
                raise InputError(f"{path}: a sample rate of {rate:,.0f} Hz; metertop reads recordings at "
                                 f"{MIN_AUDIO_RATE:g} Hz to {MAX_AUDIO_RATE / 1000:g} kHz (is the header damaged?)")
            if frames > MAX_AUDIO_S * rate:
                raise LimitError(f"{path}: a recording of {frames / rate / 60:.1f} minutes; metertop analyses at most "
                                 f"{MAX_AUDIO_S / 60:g} minutes of audio at once: split it")
            mono = np.empty(frames, dtype=np.float32)
            done = 0
            while done < frames:
                block = f.read(min(_BLOCK_FRAMES, frames - done), dtype="float32", always_2d=True)
                if len(block) == 0:
                    break
                if not np.isfinite(block).all():  # NaN or inf in a float file, or a double beyond float32's range
                    raise InputError(f"{path}: the recording holds samples that are not finite numbers "
                                     "(NaN or infinity, or beyond the range of 32-bit floats)")
                # The mean in float64: summing channels near float32's largest value would overflow.
                mono[done:done + len(block)] = block.mean(axis=1, dtype=np.float64) if channels > 1 else block[:, 0]
                done += len(block)
    except InputError:
        raise
    except (RuntimeError, ValueError, TypeError, OSError, EOFError) as exc:  # LibsndfileError is a RuntimeError
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"{path}: not a readable recording (WAV, FLAC or OGG): {msg}") from None
    if done == 0:
        raise InputError(f"{path}: the recording holds no samples")
    return mono[:done], rate


def audio_notes(path: str | os.PathLike, settings: FluxSettings | None = None):
    """The onsets of a recording as a :class:`~metertop.load.NoteTable` (``source="audio"``, flux strength as weight).

    Raises
    ------
    InputError
        For an unreadable file (:func:`read_audio`), a silent recording or
        one without a clear onset ("no onsets found").
    """
    from .load import notes_from_onsets

    settings = settings or FluxSettings()
    samples, rate = read_audio(path)
    try:
        onsets = detect_onsets(samples, rate, settings)
    except InputError as exc:
        raise InputError(f"{os.fspath(path)}: {exc}") from None
    times = _decimal(onsets.times_s, "{:.6f}")
    weights = _decimal(np.maximum(onsets.strengths, 1e-6), "{:.6g}")
    if not is_kit(onsets.bands, settings):
        return replace(notes_from_onsets(times, weights), source="audio")
    idx, keys, levels = kit_strokes(onsets.bands, settings)
    levels = _decimal(np.maximum(levels, 1e-6), "{:.6g}")
    return replace(notes_from_onsets(times[idx], levels, keys, np.ones(len(idx), bool)), source="audio")


def recording_summary(notes) -> dict:
    """How a recording was read: its onsets, whether as a drum kit, and the hits of each drum.

    >>> from metertop.load import notes_from_onsets
    >>> kit = notes_from_onsets([0.0, 0.0, 0.5], [1, 1, 1], [36, 42, 38], [True, True, True])
    >>> recording_summary(kit)
    {'onsets': 2, 'kit': True, 'hits': {'kick': 1, 'snare': 1, 'hi-hat': 1}}
    """
    from .flux import KIT_KEYS

    onsets = int(len(np.unique(np.asarray(notes.onsets_s))))
    drums = np.asarray(notes.is_drum, dtype=bool)
    if not drums.any():
        return {"onsets": onsets, "kit": False}
    names = {KIT_KEYS["kick"]: "kick", KIT_KEYS["snare"]: "snare", KIT_KEYS["hat"]: "hi-hat", KIT_KEYS["crash"]: "crash"}
    counts = Counter(names.get(k, "other") for k in np.asarray(notes.pitches)[drums].tolist())
    return {"onsets": onsets, "kit": True, "hits": {name: counts[name] for name in [*names.values(), "other"] if counts[name]}}


def recording_line(summary: dict) -> str:
    """The summary's line for a recording."""
    if not summary["kit"]:
        return f"recording: {summary['onsets']} onsets, read as plain onsets (--kit reads them as a drum kit)"
    hits = ", ".join(f"{name} {n}" for name, n in summary["hits"].items())
    return f"recording: {summary['onsets']} onsets, read as a drum kit: {hits} (--no-kit reads them as plain onsets)"


def _decimal(values: np.ndarray, fmt: str) -> np.ndarray:
    """``values`` as they read back from their text form (so a written onset list reproduces them exactly)."""
    return np.array([float(fmt.format(v)) for v in np.asarray(values, dtype=np.float64).tolist()], dtype=np.float64)


def onsets_csv(notes) -> str:
    """An onset list (CSV with ``time_s``, ``weight``, and ``drum`` for drum hits) that :func:`metertop.load.load_notes` reads back.

    Examples
    --------
    >>> from metertop.load import notes_from_onsets
    >>> print(onsets_csv(notes_from_onsets([0.5, 1.25], [2.0, 0.75])), end="")
    time_s,weight
    0.500000,2
    1.250000,0.75
    """
    w = np.asarray(notes.weights, dtype=np.float64)
    drums = np.asarray(notes.is_drum, dtype=bool)
    kit = bool(drums.any())
    rows = ["time_s,weight,drum" if kit else "time_s,weight"]
    for t, wi, d, p in zip(np.asarray(notes.onsets_s, dtype=np.float64).tolist(), w.tolist(), drums.tolist(),
                           np.asarray(notes.pitches).tolist()):
        row = f"{t:.6f}," + ("" if not np.isfinite(wi) else f"{wi:.6g}")
        if kit:
            row += f",{p}" if d else ","
        rows.append(row)
    return "\n".join(rows) + "\n"
