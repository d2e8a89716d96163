"""Load note onsets from Standard MIDI Files and plain onset lists.

Conventions
-----------
- Times are seconds, float64, sorted ascending.
- ``pitch`` is a MIDI note number, or -1 where the input has none.
- ``velocity`` is 1..127, or NaN where the input has none.
- ``weight`` is a user-supplied accent (onset lists only), NaN elsewhere.
- ``is_drum`` marks notes from a General MIDI drum channel (channel 10).

Onset lists may be:

- CSV or TSV with a header naming ``time_s`` (required) and optionally
  ``weight``, ``pitch`` and ``drum`` (a General MIDI percussion key: the
  onset is a drum hit; a row gives a pitch or a drum, not both);
- a single column of seconds, no header;
- JSON: an array of numbers, or of objects with ``time_s`` and optionally
  ``weight``, ``pitch`` and ``drum``.

Recordings (WAV, FLAC, OGG; the ``audio`` extra) go through the onset
detector of :mod:`metertop.flux` (:func:`metertop.audio.audio_notes`): each
onset becomes a note without pitch whose ``weight`` is its flux strength, or,
in a recording that reads as a drum kit, a drum hit per drum it sounds
(:func:`metertop.flux.kit_strokes`).

Exact duplicates (same time and pitch) are dropped on loading.

Every problem with the input is an :class:`~metertop.errors.InputError`
whose message names the file and what is wrong; the size limits of
:mod:`metertop.limits` are checked before parsing, and a MIDI file's
structure is checked by :func:`metertop.smf.survey_smf` before pretty_midi
reads it.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import warnings
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError
from .limits import MAX_TIME_S as _MAX_TIME_S
from .limits import MAX_FILE_BYTES, LimitError, check_file_size, check_note_count
from .smf import survey_smf

__all__ = ["NoteTable", "TimeSignatureEvent", "load_notes", "check_input_file", "list_tracks", "notes_from_onsets", "MIDI_SUFFIXES", "ONSET_SUFFIXES"]

MIDI_SUFFIXES = (".mid", ".midi", ".smf", ".kar")
ONSET_SUFFIXES = (".csv", ".tsv", ".txt", ".json")
# Scores are read by metertop.scores, one analysis per tune.
SCORE_SUFFIXES = (".musicxml", ".xml", ".mxl", ".abc", ".krn")


@dataclass(frozen=True)
class TimeSignatureEvent:
    """A time-signature meta event found in the input."""

    time_s: float
    numerator: int
    denominator: int

    def __str__(self) -> str:
        return f"{self.numerator}/{self.denominator}"


@dataclass(frozen=True)
class NoteTable:
    """Notes as parallel arrays, sorted by onset.

    Parameters
    ----------
    onsets_s, durations_s, pitches, velocities, weights, is_drum, track
        Parallel arrays of equal length (see module conventions).
    time_signatures
        Time-signature meta events of a MIDI file, in order.
    source
        ``"midi"`` or ``"onsets"``.
    track_names
        Name of each track index used in ``track``.
    """

    onsets_s: np.ndarray
    durations_s: np.ndarray
    pitches: np.ndarray
    velocities: np.ndarray
    weights: np.ndarray
    is_drum: np.ndarray
    track: np.ndarray
    time_signatures: tuple[TimeSignatureEvent, ...] = ()
    source: str = "onsets"
    track_names: tuple[str, ...] = field(default_factory=tuple)

    def __post_init__(self) -> None:
        n = len(self.onsets_s)
        for name in ("durations_s", "pitches", "velocities", "weights", "is_drum", "track"):
            if len(getattr(self, name)) != n:
                raise ValueError(f"NoteTable.{name} has {len(getattr(self, name))} entries, expected {n}")
        if n and np.any(np.diff(self.onsets_s) < 0):
            raise ValueError("NoteTable.onsets_s must be sorted")

    def __len__(self) -> int:
        return len(self.onsets_s)


def _finish(onsets_s, durations_s, pitches, velocities, weights, is_drum, track, **meta) -> NoteTable:
    """Sort, drop exact duplicates (same time and pitch) and build the table.

    A drum hit and a pitched note with the same number (a kick on 36 and a
    bass C2) are different notes, so the drum flag is part of the key.
    """
    onsets_s = np.asarray(onsets_s, dtype=np.float64)
    pitches = np.asarray(pitches, dtype=np.int64)
    is_drum = np.asarray(is_drum, dtype=bool)
    order = np.lexsort((is_drum, pitches, onsets_s))
    arrays = [np.asarray(a)[order] for a in (onsets_s, durations_s, pitches, velocities, weights, is_drum, track)]
    t, p, d = arrays[0], arrays[2], arrays[5]
    keep = np.ones(len(t), dtype=bool)
    keep[1:] = ~((t[1:] == t[:-1]) & (p[1:] == p[:-1]) & (d[1:] == d[:-1]))
    arrays = [a[keep] for a in arrays]
    return NoteTable(
        onsets_s=arrays[0].astype(np.float64),
        durations_s=arrays[1].astype(np.float64),
        pitches=arrays[2].astype(np.int64),
        velocities=arrays[3].astype(np.float64),
        weights=arrays[4].astype(np.float64),
        is_drum=arrays[5].astype(bool),
        track=arrays[6].astype(np.int64),
        **meta,
    )


def notes_from_onsets(onsets_s, weights=None, pitches=None, drums=None) -> NoteTable:
    """Build a :class:`NoteTable` from onset times in seconds.

    Parameters
    ----------
    onsets_s : array_like of float
        Onset times in seconds, any order, all finite and >= 0.
    weights : array_like of float, optional
        Accent of each onset (any positive scale).
    pitches : array_like of int, optional
        MIDI note number (0-127) of each onset, used to tell duplicates
        from chords; -1 where unknown.
    drums : array_like of bool, optional
        Whether each onset is a drum hit, its pitch then a General MIDI
        percussion key (which needs a pitch).

    Examples
    --------
    >>> notes = notes_from_onsets([0.5, 0.0, 0.5])
    >>> notes.onsets_s.tolist()
    [0.0, 0.5]
    """
    t = np.asarray(onsets_s, dtype=np.float64).ravel()
    n = len(t)
    _check_times(t, "onset")
    w = np.full(n, np.nan) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if len(w) != n:
        raise InputError(f"got {n} onsets but {len(w)} weights")
    if np.any(~np.isfinite(w) & ~np.isnan(w)) or np.any(w < 0):
        raise InputError("weights must be finite and not negative")
    p = np.full(n, -1, dtype=np.int64) if pitches is None else _check_pitches(pitches)
    if len(p) != n:
        raise InputError(f"got {n} onsets but {len(p)} pitches")
    d = np.zeros(n, bool) if drums is None else np.asarray(drums, dtype=bool).ravel()
    if len(d) != n:
        raise InputError(f"got {n} onsets but {len(d)} drum flags")
    if np.any(d & (p < 0)):
        raise InputError("a drum hit needs its General MIDI percussion key as its pitch")
    return _finish(t, np.full(n, np.nan), p, np.full(n, np.nan), w, d, np.zeros(n, np.int64))


def _check_pitches(pitches) -> np.ndarray:
    try:
        p = np.asarray(pitches, dtype=np.float64).ravel()
    except (TypeError, ValueError, OverflowError):
        raise InputError("pitches must be MIDI note numbers (0-127)") from None
    bad = ~(np.isfinite(p) & (p == np.round(p)) & (p >= -1) & (p <= 127))
    if np.any(bad):
        raise InputError(f"pitch {p[bad][0]:g} is not a MIDI note number (0-127)")
    return p.astype(np.int64)


def _check_times(t: np.ndarray, what: str) -> None:
    if np.any(np.isnan(t)):
        raise InputError(f"{what} times contain NaN")
    if np.any(~np.isfinite(t)) or np.any(np.abs(t) > _MAX_TIME_S):
        raise InputError(f"{what} times must be finite seconds below {_MAX_TIME_S:g}; did you supply ticks or milliseconds?")
    if np.any(t < 0):
        raise InputError(f"{what} times must not be negative (found {t.min():g} s)")


def check_input_file(path: str | os.PathLike, max_bytes: int = MAX_FILE_BYTES) -> str:
    """The path as a string, if it names an existing, non-empty file of at most ``max_bytes``; else an InputError."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputError(f"{path}: no such file")
    if os.path.isdir(path):
        raise InputError(f"{path}: is a folder, not a file")
    size = os.path.getsize(path)
    if size == 0:
        raise InputError(f"{path}: file is empty")
    try:
        check_file_size(size, max_bytes)
    except LimitError as exc:
        raise LimitError(f"{path}: {exc}") from None
    return path


def load_notes(path: str | os.PathLike, tracks: list[int] | None = None, audio=None) -> NoteTable:
    """Read notes from a Standard MIDI File, an onset list or a recording.

    Parameters
    ----------
    path
        A ``.mid``/``.midi`` file, a ``.csv``/``.tsv``/``.txt``/``.json``
        onset list, or a ``.wav``/``.flac``/``.ogg`` recording.
    tracks
        MIDI only: indices of the tracks to keep (as listed by
        :func:`list_tracks`); all tracks by default.
    audio : metertop.flux.FluxSettings, optional
        Recordings only: the onset detector's settings.

    Raises
    ------
    InputError
        If the file is missing, empty, unreadable or holds no notes.
    """
    from .audio import AUDIO_SUFFIXES, MAX_AUDIO_BYTES, audio_notes, is_audio_file

    suffix = os.path.splitext(os.fspath(path))[1].lower()
    path = check_input_file(path, MAX_AUDIO_BYTES if suffix in AUDIO_SUFFIXES else MAX_FILE_BYTES)
    try:
        with open(path, "rb") as fh:
            head = fh.read(4)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    if head == b"MThd" or suffix in MIDI_SUFFIXES:
        return _load_midi(path, tracks)
    if tracks:
        raise InputError(f"{path}: track selection applies to MIDI files only")
    if suffix in AUDIO_SUFFIXES or (suffix not in ONSET_SUFFIXES + SCORE_SUFFIXES and is_audio_file(path, head)):
        return audio_notes(path, audio)
    if suffix in ONSET_SUFFIXES or suffix == "":
        return _load_onset_list(path)
    if suffix in SCORE_SUFFIXES:
        raise InputError(f"{path}: a score file; scores are read per tune by metertop.scores.analyse_score")
    raise InputError(f"{path}: unsupported file type '{suffix}'; expected MIDI ({', '.join(MIDI_SUFFIXES)}), an onset list ({', '.join(ONSET_SUFFIXES)}), "
                     f"a recording ({', '.join(AUDIO_SUFFIXES)}) or a score ({', '.join(SCORE_SUFFIXES)})")


def _open_midi(path: str):
    """Check the file's structure and size, then parse it with pretty_midi."""
    import pretty_midi  # deferred: pulls in mido, costs start-up time
    from mido.midifiles.meta import KeySignatureError

    data = _read_bytes(path)
    try:
        survey_smf(data)
    except LimitError as exc:
        raise LimitError(f"{path}: {exc}") from None
    except InputError as exc:
        raise InputError(f"{path}: not a readable Standard MIDI File: {exc}") from None
    try:
        with warnings.catch_warnings():
            # Tempo or metre events off the first track: pretty_midi warns and
            # reads the first track's; metertop only compares the metre.
            warnings.simplefilter("ignore", RuntimeWarning)
            return pretty_midi.PrettyMIDI(io.BytesIO(data))
    # What mido and pretty_midi raise on damage that survey_smf lets through.
    except (EOFError, OSError, ValueError, IndexError, KeyError, ZeroDivisionError, OverflowError, KeySignatureError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"{path}: not a readable Standard MIDI File ({msg})") from None


def _read_bytes(path: str) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read()
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})") from None


def list_tracks(path: str | os.PathLike) -> list[tuple[int, str, bool, int]]:
    """List the note-bearing tracks of a MIDI file: ``(index, name, is_drum, n_notes)``."""
    pm = _open_midi(os.fspath(path))
    return [(i, inst.name or f"program {inst.program}", bool(inst.is_drum), len(inst.notes)) for i, inst in enumerate(pm.instruments)]


def _load_midi(path: str, tracks: list[int] | None) -> NoteTable:
    pm = _open_midi(path)
    insts = pm.instruments
    if tracks:
        bad = [i for i in tracks if not 0 <= i < len(insts)]
        if bad:
            raise InputError(f"{path}: no track {bad[0]}; the file has tracks 0..{len(insts) - 1}")
        chosen = [(i, insts[i]) for i in sorted(set(tracks))]
    else:
        chosen = list(enumerate(insts))
    cols: list[list] = [[] for _ in range(7)]
    for idx, inst in chosen:
        for note in inst.notes:
            cols[0].append(note.start)
            cols[1].append(max(note.end - note.start, 0.0))
            cols[2].append(note.pitch)
            cols[3].append(note.velocity)
            cols[4].append(np.nan)
            cols[5].append(inst.is_drum)
            cols[6].append(idx)
    if not cols[0]:
        raise InputError(f"{path}: the MIDI file holds no notes" + (" in the chosen tracks" if tracks else ""))
    t = np.asarray(cols[0], dtype=np.float64)
    if np.any(~np.isfinite(t)) or np.any(t > _MAX_TIME_S):
        raise InputError(f"{path}: note times out of range (tempo events may be corrupt)")
    # A denominator beyond 64 is no notation anyone uses: a damaged event, left out.
    sigs = tuple(TimeSignatureEvent(float(ts.time), int(ts.numerator), int(ts.denominator))
                 for ts in pm.time_signature_changes if ts.denominator <= 64)
    names = tuple(inst.name or f"program {inst.program}" for inst in insts)
    return _finish(*cols, time_signatures=sigs, source="midi", track_names=names)


def _parse_float(text: str, where: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{where}: '{_short(text)}' is not a number") from None
    if math.isnan(value):
        raise InputError(f"{where}: value is NaN")
    return value


def _load_onset_list(path: str) -> NoteTable:
    raw = _read_bytes(path)
    # Spreadsheets save "Unicode text" as UTF-16 with a byte-order mark.
    encoding = "UTF-16" if raw[:2] in (b"\xff\xfe", b"\xfe\xff") else "UTF-8"
    try:
        text = raw.decode("utf-16" if encoding == "UTF-16" else "utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not {encoding} text (byte {exc.start}); onset lists must be UTF-8 "
                         "(or UTF-16 with a byte-order mark) CSV, TSV or JSON") from None
    if "\x00" in text:
        raise InputError(f"{path}: holds NUL characters (UTF-16 text without a byte-order mark?); save it as UTF-8")
    stripped = text.strip()
    if not stripped:
        raise InputError(f"{path}: file holds no onsets")
    if stripped[0] in "[{" or path.lower().endswith(".json"):
        return _parse_json(path, stripped)
    return _parse_table(path, stripped)


def _parse_json(path: str, text: str) -> NoteTable:
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: invalid JSON ({exc.msg} at line {exc.lineno})") from None
    except ValueError:  # an integer of thousands of digits
        raise InputError(f"{path}: invalid JSON (a number too long to read)") from None
    except RecursionError:
        raise InputError(f"{path}: invalid JSON (nested too deeply)") from None
    if isinstance(data, dict) and "onsets" in data:
        data = data["onsets"]
    if not isinstance(data, list) or not data:
        raise InputError(f"{path}: expected a non-empty JSON array of onset times or of objects with 'time_s'")
    _check_rows(path, len(data))
    times, weights, pitches, drums = [], [], [], []
    for i, item in enumerate(data):
        where = f"{path}: item {i}"
        if isinstance(item, dict):
            if "time_s" not in item:
                raise InputError(f"{where}: object has no 'time_s'")
            times.append(_json_number(item["time_s"], where))
            weights.append(_json_number(item["weight"], where) if item.get("weight") is not None else np.nan)
            pitch = _pitch(_json_number(item["pitch"], where), where) if item.get("pitch") is not None else None
            drum = _pitch(_json_number(item["drum"], where), where, "drum") if item.get("drum") is not None else None
            _key(pitch, drum, where, pitches, drums)
        else:
            times.append(_json_number(item, where))
            weights.append(np.nan)
            _key(None, None, where, pitches, drums)
    return _onsets_or_error(path, times, weights, pitches, drums)


def _key(pitch: int | None, drum: int | None, where: str, pitches: list, drums: list) -> None:
    """Append an onset's pitch (or drum key, or -1) and drum flag; a pitch and a drum key on one onset is an error."""
    if pitch is not None and drum is not None:
        raise InputError(f"{where}: gives both a pitch and a drum; an onset is one or the other")
    pitches.append(drum if drum is not None else (-1 if pitch is None else pitch))
    drums.append(drum is not None)


def _json_number(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where}: {_short(repr(value))} is not a number")
    if isinstance(value, float) and math.isnan(value):
        raise InputError(f"{where}: value is NaN")
    try:
        return float(value)
    except OverflowError:
        raise InputError(f"{where}: a number too large to read") from None


def _pitch(value: float, where: str, what: str = "pitch") -> int:
    if not (math.isfinite(value) and value == round(value) and 0 <= value <= 127):
        raise InputError(f"{where}: {what} {_short(f'{value:g}')} is not a MIDI note number (0-127)")
    return int(value)


def _short(text: str, limit: int = 40) -> str:
    """``text`` cut to ``limit`` characters, control characters shown as '?'."""
    text = "".join(c if c.isprintable() else "?" for c in text)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _check_rows(path: str, n_rows: int) -> None:
    try:
        check_note_count(n_rows)
    except LimitError as exc:
        raise LimitError(f"{path}: {exc}") from None


def _parse_table(path: str, text: str) -> NoteTable:
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{path}: file holds no onsets")
    _check_rows(path, len(lines) - 1)
    first = lines[0]
    delimiter = "\t" if "\t" in first else ("," if "," in first else (";" if ";" in first else None))
    try:
        rows = list(csv.reader(io.StringIO("\n".join(lines)), delimiter=delimiter)) if delimiter else [ln.split() for ln in lines]
    except csv.Error as exc:
        raise InputError(f"{path}: not a readable table ({exc})") from None
    rows = [[c.strip() for c in r] for r in rows]
    header = rows[0]
    has_header = any(c and not _looks_numeric(c) for c in header)
    if has_header:
        names = [c.lower() for c in header]
        if "time_s" not in names:
            raise InputError(f"{path}: header has no 'time_s' column (found: {_short(', '.join(header), 80)})")
        ti = names.index("time_s")
        wi = names.index("weight") if "weight" in names else None
        pi = names.index("pitch") if "pitch" in names else None
        di = names.index("drum") if "drum" in names else None
        body, first_line = rows[1:], 2
    else:
        if len(header) != 1:
            raise InputError(f"{path}: a file without a header must hold one column of seconds; add a header with 'time_s'")
        ti, wi, pi, di = 0, None, None, None
        body, first_line = rows, 1
    if not body:
        raise InputError(f"{path}: file holds no onsets")
    times, weights, pitches, drums = [], [], [], []
    for k, row in enumerate(body):
        where = f"{path}: line {k + first_line}"
        if len(row) == 1 and len(header) > 1 and any(sep in row[0] for sep in ",;\t|"):
            raise InputError(f"{where}: '{_short(row[0])}' uses another separator than the header line")
        if len(row) <= ti or row[ti] == "":
            raise InputError(f"{where}: missing time_s value")
        times.append(_parse_float(row[ti], f"{where}, time_s"))
        weights.append(_parse_float(row[wi], f"{where}, weight") if wi is not None and len(row) > wi and row[wi] != "" else np.nan)
        pitch = _pitch(_parse_float(row[pi], f"{where}, pitch"), where) if pi is not None and len(row) > pi and row[pi] != "" else None
        drum = _pitch(_parse_float(row[di], f"{where}, drum"), where, "drum") if di is not None and len(row) > di and row[di] != "" else None
        _key(pitch, drum, where, pitches, drums)
    return _onsets_or_error(path, times, weights, pitches, drums)


def _looks_numeric(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _onsets_or_error(path: str, times, weights, pitches, drums) -> NoteTable:
    try:
        return notes_from_onsets(times, weights, pitches, drums)
    except InputError as exc:
        raise InputError(f"{path}: {exc}") from None
