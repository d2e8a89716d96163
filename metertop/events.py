"""Merge notes that sound together into events.

Conventions
-----------
- An *event* is one perceived onset: a chord, a flam, or a kick struck with a
  cymbal. Its time is the earliest onset of its notes, in seconds.
- Notes whose onsets lie within ``window_s`` of the first note of the group
  join it. About 30-40 ms is common practice; 35 ms is the default.
- Drum roles follow the General MIDI percussion key map (an open standard):
  bit 0 kick, bit 1 snare or clap, bit 2 hi-hat or ride, bit 3 crash,
  bit 4 tom, bit 5 other percussion.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .load import NoteTable

__all__ = ["EventStream", "merge_events", "drum_role", "ROLE_KICK", "ROLE_SNARE", "ROLE_TIMEKEEPER", "ROLE_CRASH", "ROLE_TOM", "ROLE_OTHER"]

ROLE_KICK, ROLE_SNARE, ROLE_TIMEKEEPER, ROLE_CRASH, ROLE_TOM, ROLE_OTHER = (1 << k for k in range(6))

# General MIDI percussion key map (GM 1 Level 1 specification).
_GM_ROLES = {
    35: ROLE_KICK, 36: ROLE_KICK,
    37: ROLE_SNARE, 38: ROLE_SNARE, 39: ROLE_SNARE, 40: ROLE_SNARE,
    42: ROLE_TIMEKEEPER, 44: ROLE_TIMEKEEPER, 46: ROLE_TIMEKEEPER, 51: ROLE_TIMEKEEPER, 53: ROLE_TIMEKEEPER, 59: ROLE_TIMEKEEPER,
    49: ROLE_CRASH, 52: ROLE_CRASH, 55: ROLE_CRASH, 57: ROLE_CRASH,
    41: ROLE_TOM, 43: ROLE_TOM, 45: ROLE_TOM, 47: ROLE_TOM, 48: ROLE_TOM, 50: ROLE_TOM,
}


def drum_role(pitch: int) -> int:
    """Role bit of a General MIDI drum note number.

    >>> drum_role(36) == ROLE_KICK, drum_role(42) == ROLE_TIMEKEEPER
    (True, True)
    """
    return _GM_ROLES.get(int(pitch), ROLE_OTHER)


@dataclass(frozen=True)
class EventStream:
    """Events as parallel arrays, sorted by time.

    Attributes
    ----------
    times_s : float64 array
        Event times in seconds (earliest note of each group).
    n_notes : int array
        Notes merged into each event.
    velocity : float array
        Loudest velocity in the event, 0..127, NaN if unknown.
    weight : float array
        Largest user-supplied weight, NaN if none.
    top_pitch, bass_pitch : int arrays
        Highest and lowest pitched (non-drum) note, -1 if none.
    duration_s : float array
        Longest note duration, NaN if unknown.
    roles : int array
        Bitwise OR of drum roles (see module conventions); 0 if no drums.
    """

    times_s: np.ndarray
    n_notes: np.ndarray
    velocity: np.ndarray
    weight: np.ndarray
    top_pitch: np.ndarray
    bass_pitch: np.ndarray
    duration_s: np.ndarray
    roles: np.ndarray

    def __len__(self) -> int:
        return len(self.times_s)

    @property
    def has_drums(self) -> bool:
        return bool(np.any(self.roles))

    def shifted(self, offset_s: float) -> "EventStream":
        """The same events, all moved by ``offset_s`` seconds."""
        return _replace_times(self, self.times_s + offset_s)


def _replace_times(ev: EventStream, times_s: np.ndarray) -> EventStream:
    return EventStream(times_s, ev.n_notes, ev.velocity, ev.weight, ev.top_pitch, ev.bass_pitch, ev.duration_s, ev.roles)


def merge_events(notes: NoteTable, window_s: float = 0.035) -> EventStream:
    """Group notes whose onsets lie within ``window_s`` of a group's first note.

    Parameters
    ----------
    notes : NoteTable
    window_s : float
        Merge window in seconds, >= 0.

    Examples
    --------
    >>> from metertop.load import notes_from_onsets
    >>> ev = merge_events(notes_from_onsets([0.0, 0.01, 0.5, 1.0]), window_s=0.035)
    >>> ev.times_s.tolist(), ev.n_notes.tolist()
    ([0.0, 0.5, 1.0], [2, 1, 1])
    """
    if not np.isfinite(window_s) or window_s < 0:
        raise InputError(f"merge window must be a non-negative number of seconds, got {window_s}")
    t = notes.onsets_s
    n = len(t)
    if n == 0:
        raise InputError("no onsets to analyse")
    # Group starts: greedy left-to-right, each group anchored at its first onset.
    group = np.empty(n, dtype=np.int64)
    g, start = 0, t[0]
    for i in range(n):
        if t[i] - start > window_s:
            g += 1
            start = t[i]
        group[i] = g
    m = g + 1
    first = np.searchsorted(group, np.arange(m))
    times = t[first]
    n_notes = np.bincount(group, minlength=m)

    def group_max(values: np.ndarray, fill: float) -> np.ndarray:
        out = np.full(m, -np.inf)
        vals = np.where(np.isnan(values), -np.inf, values)
        np.maximum.at(out, group, vals)
        out[np.isneginf(out)] = fill
        return out

    pitched = ~notes.is_drum & (notes.pitches >= 0)
    top = group_max(np.where(pitched, notes.pitches, np.nan).astype(float), -1).astype(np.int64)
    bass = (-group_max(np.where(pitched, -notes.pitches, np.nan).astype(float), 1)).astype(np.int64)
    roles = np.zeros(m, dtype=np.int64)
    drum_idx = np.flatnonzero(notes.is_drum)
    if len(drum_idx):
        role_bits = np.array([drum_role(p) for p in notes.pitches[drum_idx]], dtype=np.int64)
        np.bitwise_or.at(roles, group[drum_idx], role_bits)
    return EventStream(
        times_s=times.astype(np.float64),
        n_notes=n_notes.astype(np.int64),
        velocity=group_max(notes.velocities, np.nan),
        weight=group_max(notes.weights, np.nan),
        top_pitch=top,
        bass_pitch=bass,
        duration_s=group_max(notes.durations_s, np.nan),
        roles=roles,
    )
