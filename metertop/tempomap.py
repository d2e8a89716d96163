"""Write a result back as a tempo map: a Standard MIDI File whose bar lines are the detected downbeats.

Conventions
-----------
- Times are seconds; positions in the written file are ticks, with
  ``ticks_per_quarter`` of 960 or more (doubled until one tick lasts at most
  1 ms wherever the piece has notes, so that every note keeps its time to
  within half a millisecond).
- The beat's note value follows the time signature (the conventions of
  :mod:`metertop.notation`): a quarter in n/4, a dotted quarter in 3/8, 6/8,
  9/8 and 12/8, and groups of eighths in 5/8 and 7/8.
- One tempo-change event sits on every beat line, so that each beat line
  falls on its beat; the tempi are rounded to whole microseconds per
  quarter with the rounding error carried forward, so that it never adds up.
- **Pickups and lead-in.** The written file starts with a full bar at 0 s.
  Bars before the first detected downbeat (a pickup, or silence before the
  first note) continue the detected grid back in time at the tempo of its
  first beat. Bar 1 is the bar that holds 0 s; the part of it that would
  lie before 0 s is squeezed, with its beat lines, into the time between
  0 s and its first beat line after 0 s. From the first note on, every bar
  line is a detected downbeat and every beat line a detected beat; after
  the last beat the grid goes on at the tempo of the last beat.
- Bar numbers (also in :func:`beats_table`) count the bars of the written
  file from 1.
"""

from __future__ import annotations

import io
import os
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .notation import beat_units, parse_time_signature
from .result import MetreResult

__all__ = ["BarGrid", "bar_grid", "midi_bytes", "write_tempo_map", "beats_table", "MIN_TICKS_PER_QUARTER"]

MIN_TICKS_PER_QUARTER = 960
MAX_TICK_S = 0.001
_MAX_TEMPO_US = 0xFFFFFF  # the largest tempo a set-tempo event can hold (24 bits)
_DRUM_CHANNEL = 9
_ONSET_PITCH = 76  # General MIDI percussion: hi wood block, for onset lists without pitches
_ONSET_LENGTH_S = 0.1


@dataclass(frozen=True)
class BarGrid:
    """Every beat line of a written file.

    Attributes
    ----------
    times_s : ndarray
        Time of each beat line, increasing; the first is 0.
    ticks : ndarray of int64
        Its position in ticks.
    bar, beat : ndarray of int64
        Bar number (from 1) and beat position in the bar (from 1).
    detected : ndarray of bool
        The beat line is a detected beat (not a continuation of the grid).
    signatures : tuple of (tick, time_s, time_signature)
        The time signature of each bar where it changes, from bar 1.
    ticks_per_quarter : int
    """

    times_s: np.ndarray
    ticks: np.ndarray
    bar: np.ndarray
    beat: np.ndarray
    detected: np.ndarray
    signatures: tuple
    ticks_per_quarter: int

    def tempi_us(self) -> np.ndarray:
        """Microseconds per quarter note from each beat line to the next (whole numbers, error carried forward)."""
        dticks = np.diff(self.ticks).astype(np.float64)
        out = np.empty(len(dticks), dtype=np.int64)
        realised = 0.0
        for k, dt in enumerate(dticks):
            want = (self.times_s[k + 1] - realised) * 1e6 * self.ticks_per_quarter / dt
            out[k] = int(np.clip(round(want), 1, _MAX_TEMPO_US))
            realised += out[k] * dt / self.ticks_per_quarter / 1e6
        return out

    def realised_times_s(self) -> np.ndarray:
        """Beat-line times as the written tempo map puts them (within microseconds of ``times_s``)."""
        tempi = self.tempi_us()
        steps = tempi * np.diff(self.ticks) / self.ticks_per_quarter / 1e6
        return np.concatenate([[0.0], np.cumsum(steps)])

    def to_ticks(self, times_s) -> np.ndarray:
        """Tick of each time (seconds), through the written tempo map; linear beyond the last beat line."""
        t = np.asarray(times_s, dtype=np.float64)
        real = self.realised_times_s()
        ticks = np.interp(t, real, self.ticks.astype(np.float64))
        last = t > real[-1]
        if np.any(last):
            slope = (self.ticks[-1] - self.ticks[-2]) / (real[-1] - real[-2])
            ticks[last] = self.ticks[-1] + (t[last] - real[-1]) * slope
        return np.round(ticks).astype(np.int64)

    def downbeats_s(self) -> np.ndarray:
        """Times of the bar lines."""
        return self.times_s[self.beat == 1]


def _bars_of(result: MetreResult) -> list[tuple[str, list | None]]:
    """The time signature and grouping of each detected bar, from the segment that holds its downbeat."""
    segs = list(result.segments)
    out = []
    for d in np.asarray(result.downbeats_s, dtype=np.float64):
        # A segment after a change starts on its first downbeat; earlier bar lines belong to the first segment.
        seg = next((s for s in reversed(segs) if s.start_s - 1e-3 <= d), segs[0] if segs else None)
        if seg is None or (seg.grouping is None and seg.time_signature == result.time_signature):
            out.append((result.time_signature, result.grouping))
        else:
            out.append((seg.time_signature, seg.grouping))
    return out


def _pattern(time_signature: str, grouping) -> np.ndarray:
    """Tick offsets of the beats of one bar, and the bar's length in ticks, in quarter-note units."""
    _, den = parse_time_signature(time_signature)
    units = np.asarray(beat_units(time_signature, grouping), dtype=np.float64) * 4.0 / den
    return np.concatenate([[0.0], np.cumsum(units)])


def bar_grid(result: MetreResult, end_s: float, ticks_per_quarter: int | None = None) -> BarGrid:
    """The beat lines of the written file for a result (see the module notes for the conventions).

    Parameters
    ----------
    result : MetreResult
        Its ``downbeats_s``, ``beats_s`` and ``segments`` (or its time
        signature) give the bars.
    end_s : float
        The grid runs past this time (the end of the last note).
    ticks_per_quarter : int, optional
        Default: 960, doubled until a tick lasts at most 1 ms.

    Examples
    --------
    >>> import numpy as np
    >>> from metertop import analyse, notes_from_onsets
    >>> r = analyse(notes_from_onsets(0.5 + np.arange(32) * 0.5, np.tile([3.0, 1, 1, 1], 8)))
    >>> g = bar_grid(r, end_s=16.5)
    >>> g.ticks_per_quarter, float(g.times_s[0]), g.bar[:6].tolist(), g.beat[:6].tolist()
    (960, 0.0, [1, 2, 2, 2, 2, 3], [1, 1, 2, 3, 4, 1])
    """
    bars = _bars_of(result)
    downbeats = np.asarray(result.downbeats_s, dtype=np.float64)
    beats = np.asarray(result.beats_s, dtype=np.float64)
    if len(downbeats) == 0:
        raise InputError("the result has no downbeats to write")
    # Known grid points: (position in quarters, time), bar index from 0 at the first downbeat.
    patterns = [_pattern(ts, g) for ts, g in bars]
    pos_q, times, bar_idx, beat_idx = [], [], [], []
    start_q = 0.0
    tol = 0.25 * float(np.median(np.diff(beats))) if len(beats) > 1 else 0.05
    for i, d in enumerate(downbeats):
        pat = patterns[i]
        nxt = downbeats[i + 1] if i + 1 < len(downbeats) else np.inf
        inside = beats[(beats >= d - tol) & (beats < nxt - tol)]
        if len(inside) == 0 or abs(inside[0] - d) > tol:
            inside = np.concatenate([[d], inside])
        inside[0] = d
        n_beats = len(pat) - 1
        if np.isfinite(nxt) and len(inside) != n_beats:
            # The beats of this bar do not follow its pattern: place them by the pattern.
            inside = d + (nxt - d) * pat[:-1] / pat[-1]
        for k, t in enumerate(inside[:n_beats]):
            pos_q.append(start_q + pat[k]), times.append(t), bar_idx.append(i), beat_idx.append(k)
        start_q += pat[-1]
    # A pickup: detected beats before the first downbeat fill the last beats of bar -1.
    pat0 = patterns[0]
    pickup = beats[beats < downbeats[0] - tol][::-1]
    for j, t in enumerate(pickup[: len(pat0) - 1]):
        k = len(pat0) - 2 - j
        pos_q.insert(0, pat0[k] - pat0[-1]), times.insert(0, t), bar_idx.insert(0, -1), beat_idx.insert(0, k)
    detected = [True] * len(pos_q)
    pos_q, times = list(map(float, pos_q)), list(map(float, times))

    # Continue the grid forward, with the last bar's pattern and its last beat's tempo, to a bar line past end_s.
    last = patterns[-1]
    n_last = len(last) - 1
    s_end = (times[-1] - times[-2]) / (pos_q[-1] - pos_q[-2]) if len(times) > 1 else 0.5
    while not (beat_idx[-1] == 0 and times[-1] > end_s):
        b, k = bar_idx[-1], beat_idx[-1]
        step = last[k + 1] - last[k] if k < n_last else last[-1] - last[-2]
        b, k = (b, k + 1) if k + 1 < n_last else (b + 1, 0)
        pos_q.append(pos_q[-1] + step), times.append(times[-1] + step * s_end), bar_idx.append(b), beat_idx.append(k)
        detected.append(False)
    # Continue it back, with the first bar's pattern and its first beat's tempo, to a bar line at or before 0 s.
    first = patterns[0]
    n_first = len(first) - 1
    s_start = (times[1] - times[0]) / (pos_q[1] - pos_q[0]) if len(times) > 1 else 0.5
    while not (beat_idx[0] == 0 and times[0] <= 0.0):
        b, k = bar_idx[0], beat_idx[0]
        b, k = (b, k - 1) if k > 0 else (b - 1, n_first - 1)
        step = first[k + 1] - first[k]
        pos_q.insert(0, pos_q[0] - step), times.insert(0, times[0] - step * s_start), bar_idx.insert(0, b), beat_idx.insert(0, k)
        detected.insert(0, False)
    pos_q, times = np.asarray(pos_q), np.asarray(times)
    bar_idx, beat_idx, detected = np.asarray(bar_idx), np.asarray(beat_idx), np.asarray(detected)
    # Bar 1 starts at 0 s: beat lines before 0 s are squeezed into the time before the first one after it.
    # Continued beat lines within a quarter beat of 0 s would squeeze the beats before them into nothing.
    beat_s = float(np.median(np.diff(times)))
    keep = (times > 1e-4) & (detected | (times >= 0.25 * beat_s))
    keep[0] = True
    times = np.where(np.arange(len(times)) == 0, 0.0, times)
    pos_q, times, bar_idx, beat_idx, detected = pos_q[keep], times[keep], bar_idx[keep], beat_idx[keep], detected[keep]
    pos_q = pos_q - pos_q[0]
    bar_no = bar_idx - bar_idx[0] + 1
    tpq = ticks_per_quarter or _resolution(pos_q, times)
    if tpq < MIN_TICKS_PER_QUARTER or tpq > 32767:
        raise InputError(f"ticks per quarter must be between {MIN_TICKS_PER_QUARTER} and 32767, got {tpq}")
    ticks = np.round(pos_q * tpq).astype(np.int64)
    sigs = []
    for bi in np.unique(bar_idx):
        ts_g = bars[min(max(bi, 0), len(bars) - 1)]
        first = int(np.flatnonzero(bar_idx == bi)[0])
        if not sigs or sigs[-1][2] != ts_g[0] or sigs[-1][3] != ts_g[1]:
            sigs.append((int(ticks[first]) if first else 0, float(times[first]), ts_g[0], ts_g[1]))
    signatures = tuple((tick, t, ts) for tick, t, ts, _ in sigs)
    return BarGrid(times, ticks, bar_no.astype(np.int64), (beat_idx + 1).astype(np.int64), detected, signatures, tpq)


def _resolution(pos_q: np.ndarray, times: np.ndarray) -> int:
    """960 ticks a quarter, doubled until the longest tick lasts at most 1 ms."""
    sec_per_q = float(np.max(np.diff(times) / np.diff(pos_q))) if len(times) > 1 else 0.5
    tpq = MIN_TICKS_PER_QUARTER
    while sec_per_q / tpq > MAX_TICK_S and tpq * 2 <= 32767:
        tpq *= 2
    return tpq


@dataclass(frozen=True)
class _Track:
    """Notes of one output track: ``notes`` rows are (start_s, end_s, pitch, velocity)."""

    name: str
    program: int
    is_drum: bool
    notes: np.ndarray
    controls: tuple = ()  # (time_s, number, value)
    bends: tuple = ()  # (time_s, pitch)


def _tracks_from_midi(path: str) -> list[_Track]:
    from .load import _open_midi

    pm = _open_midi(path)
    out = []
    for inst in pm.instruments:
        notes = np.array([(n.start, n.end, n.pitch, n.velocity) for n in inst.notes], dtype=np.float64).reshape(-1, 4)
        out.append(_Track(inst.name, int(inst.program), bool(inst.is_drum), notes,
                          tuple((c.time, c.number, c.value) for c in inst.control_changes),
                          tuple((b.time, b.pitch) for b in inst.pitch_bends)))
    return out


def _tracks_from_table(notes) -> list[_Track]:
    """Tracks for an onset list: pitched notes on one, drum hits and notes without a pitch (as wood-block hits) on the drum channel."""
    t = np.asarray(notes.onsets_s, dtype=np.float64)
    dur = np.where(np.isfinite(notes.durations_s), notes.durations_s, _ONSET_LENGTH_S)
    drum = np.asarray(notes.is_drum, dtype=bool)
    pitched = (np.asarray(notes.pitches) >= 0) & ~drum
    w = np.asarray(notes.weights, dtype=np.float64)
    vel = np.asarray(notes.velocities, dtype=np.float64)
    if np.all(np.isnan(vel)):
        vel = np.full(len(t), 80.0)
        if np.any(np.isfinite(w)):
            ww = np.where(np.isfinite(w), w, np.nanmedian(w))
            vel = 40.0 + 80.0 * ww / max(float(np.max(ww)), 1e-9)
    out = []
    for is_drum, sel in ((False, pitched), (True, ~pitched)):
        if np.any(sel):
            pitch = np.clip(np.where(pitched | drum, notes.pitches, _ONSET_PITCH), 0, 127)[sel]
            rows = np.column_stack([t[sel], t[sel] + np.maximum(dur[sel], 0.01), pitch, np.clip(np.round(vel[sel]), 1, 127)])
            out.append(_Track("onsets" if is_drum else "notes", 0, is_drum, rows))
    return out


def _clocks_per_click(time_signature: str, grouping) -> int:
    """MIDI clocks (24 a quarter) per metronome click: one click per beat, or per eighth in additive bars."""
    _, den = parse_time_signature(time_signature)
    unit = 96 // den if den <= 32 else 3
    units = beat_units(time_signature, grouping)
    return unit * (units[0] if len(set(units)) == 1 else 1)


def midi_bytes(grid: BarGrid, tracks: list[_Track], signatures_grouping: dict | None = None) -> bytes:
    """A type 1 Standard MIDI File: a tempo-map track (time signatures, a tempo change on every beat line), then the notes.

    ``signatures_grouping`` maps a time signature to its grouping, for the
    metronome clicks of additive bars.
    """
    import mido  # deferred: pretty_midi's MIDI layer

    tpq = grid.ticks_per_quarter
    mid = mido.MidiFile(type=1, ticks_per_beat=tpq)
    events = [(0, 0, mido.MetaMessage("track_name", name="metertop tempo map"))]
    for tick, _, ts in grid.signatures:
        num, den = parse_time_signature(ts)
        clocks = _clocks_per_click(ts, (signatures_grouping or {}).get(ts))
        events.append((int(tick), 1, mido.MetaMessage("time_signature", numerator=num, denominator=den, clocks_per_click=clocks,
                                                     notated_32nd_notes_per_beat=8)))
    previous = None
    for tick, tempo in zip(grid.ticks[:-1], grid.tempi_us()):
        if tempo != previous:
            events.append((int(tick), 2, mido.MetaMessage("set_tempo", tempo=int(tempo))))
            previous = tempo
    mid.tracks.append(_as_track(events))
    channels = iter([c for c in range(16) if c != _DRUM_CHANNEL] * 8)
    for tr in tracks:
        ch = _DRUM_CHANNEL if tr.is_drum else next(channels)
        ev = [(0, 0, mido.MetaMessage("track_name", name=tr.name or "notes")), (0, 1, mido.Message("program_change", channel=ch, program=tr.program))]
        if len(tr.notes):
            starts = grid.to_ticks(tr.notes[:, 0])
            ends = np.maximum(grid.to_ticks(tr.notes[:, 1]), starts + 1)
            for s, e, (_, _, pitch, vel) in zip(starts, ends, tr.notes):
                p, v = int(pitch), int(np.clip(vel, 1, 127))
                ev.append((int(s), 4, mido.Message("note_on", channel=ch, note=p, velocity=v)))
                ev.append((int(e), 3, mido.Message("note_off", channel=ch, note=p, velocity=0)))
        if tr.controls:
            for tick, (_, number, value) in zip(grid.to_ticks([c[0] for c in tr.controls]), tr.controls):
                ev.append((int(tick), 2, mido.Message("control_change", channel=ch, control=int(number), value=int(value))))
        if tr.bends:
            for tick, (_, pitch) in zip(grid.to_ticks([b[0] for b in tr.bends]), tr.bends):
                ev.append((int(tick), 2, mido.Message("pitchwheel", channel=ch, pitch=int(pitch))))
        mid.tracks.append(_as_track(ev))
    buf = io.BytesIO()
    mid.save(file=buf)
    return buf.getvalue()


def _as_track(events):
    import mido

    track = mido.MidiTrack()
    now = 0
    for tick, _, msg in sorted(events, key=lambda e: (e[0], e[1])):
        track.append(msg.copy(time=int(tick - now)))
        now = tick
    track.append(mido.MetaMessage("end_of_track", time=0))
    return track


def _groupings(result: MetreResult) -> dict:
    out = {seg.time_signature: seg.grouping for seg in result.segments if seg.grouping is not None}
    if result.grouping is not None:
        out.setdefault(result.time_signature, result.grouping)
    return out


def write_tempo_map(result: MetreResult, source, target, *, force: bool = False, notes=None) -> BarGrid:
    """Write the performance with its tempo map and time signatures as a Standard MIDI File.

    Parameters
    ----------
    result : MetreResult
        The reading to write (see :func:`bar_grid` for the conventions).
    source : str, os.PathLike or NoteTable
        The analysed file: a MIDI file's tracks are copied whole (notes,
        programs, controllers, pitch bends, at their original times); an
        onset list's notes are written on a track of pitched notes and one
        on the drum channel for drum hits and onsets without a pitch (as
        wood-block hits).
    target : str or os.PathLike
        The file to write. It may not be the source, and an existing file is
        replaced only with ``force``; the write is atomic.
    notes : NoteTable, optional
        The notes already read from ``source`` (not a MIDI file): written
        instead of reading the file again. A recording's detected onsets
        come this way, as wood-block hits (or, from a drum kit, its drum
        hits) whose velocity follows their strength.

    Returns
    -------
    BarGrid
        The beat lines written.
    """
    from .load import MIDI_SUFFIXES, load_notes
    from .outputs import atomic_write, check_target

    inputs = [source] if isinstance(source, (str, os.PathLike)) else []
    path = check_target(target, inputs=inputs, force=force)
    if inputs:
        src = os.fspath(source)
        with open(src, "rb") as fh:
            is_midi = fh.read(4) == b"MThd" or src.lower().endswith(MIDI_SUFFIXES)
        tracks = _tracks_from_midi(src) if is_midi else _tracks_from_table(notes if notes is not None else load_notes(src))
    else:
        tracks = _tracks_from_table(source)
    ends = [float(np.max(tr.notes[:, 1])) for tr in tracks if len(tr.notes)]
    grid = bar_grid(result, end_s=max(ends) if ends else float(result.duration_s))
    atomic_write(path, midi_bytes(grid, tracks, _groupings(result)))
    return grid


def beats_table(grid: BarGrid) -> str:
    """Tab-separated ``time_s``, ``bar``, ``beat`` and ``time_signature`` of every detected beat, with a header.

    Bars are numbered as in the written file (see the module notes).
    """
    sig_ticks = np.array([s[0] for s in grid.signatures])
    lines = ["time_s\tbar\tbeat\ttime_signature"]
    for t, tick, bar, beat, det in zip(grid.times_s, grid.ticks, grid.bar, grid.beat, grid.detected):
        if det:
            ts = grid.signatures[int(np.searchsorted(sig_ticks, tick, side="right")) - 1][2]
            lines.append(f"{t:.6f}\t{bar}\t{beat}\t{ts}")
    return "\n".join(lines) + "\n"
