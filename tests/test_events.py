"""Merging notes into events, and drum roles (metertop.events)."""

from __future__ import annotations

import numpy as np
import pretty_midi
import pytest

from metertop import InputError, NoteTable, notes_from_onsets
from metertop.events import (ROLE_CRASH, ROLE_KICK, ROLE_OTHER, ROLE_SNARE, ROLE_TIMEKEEPER, ROLE_TOM, drum_role,
                             merge_events)


def _table(onsets, pitches, *, drums=False, velocities=None, durations=None) -> NoteTable:
    onsets = np.asarray(onsets, dtype=float)
    n = len(onsets)
    order = np.lexsort((np.asarray(pitches), onsets))
    vel = np.full(n, 80.0) if velocities is None else np.asarray(velocities, dtype=float)
    dur = np.full(n, 0.2) if durations is None else np.asarray(durations, dtype=float)
    return NoteTable(onsets[order], dur[order], np.asarray(pitches, dtype=np.int64)[order], vel[order], np.full(n, np.nan),
                     np.full(n, drums, dtype=bool), np.zeros(n, dtype=np.int64))


def test_chord_is_one_event():
    """Three notes struck together are one event, timed at the first, with top and bass pitch."""
    ev = merge_events(_table([0.0, 0.0, 0.0, 0.5], [60, 64, 67, 62]))
    assert ev.times_s.tolist() == [0.0, 0.5]
    assert ev.n_notes.tolist() == [3, 1]
    assert ev.top_pitch.tolist() == [67, 62]
    assert ev.bass_pitch.tolist() == [60, 62]


def test_flam_merges_at_earliest_onset():
    """A flam (grace note 20 ms before the main stroke) is one event at the earliest onset."""
    ev = merge_events(_table([1.00, 1.02, 1.5], [38, 38, 38], drums=True), window_s=0.035)
    np.testing.assert_allclose(ev.times_s, [1.00, 1.5])
    assert ev.n_notes.tolist() == [2, 1]


def test_notes_beyond_window_stay_apart():
    """Onsets 60 ms apart are two events at a 35 ms window."""
    ev = merge_events(_table([0.0, 0.06], [60, 62]), window_s=0.035)
    assert len(ev) == 2


def test_groups_are_anchored_at_their_first_note():
    """A chain of onsets 20 ms apart is cut when it runs past the window from the group's first note (no chaining)."""
    ev = merge_events(_table([0.0, 0.02, 0.04, 0.06], [60, 61, 62, 63]), window_s=0.035)
    np.testing.assert_allclose(ev.times_s, [0.0, 0.04])
    assert ev.n_notes.tolist() == [2, 2]


def test_window_zero_keeps_separate_onsets():
    """With a window of 0, onsets 1 ms apart stay separate; only simultaneous notes merge."""
    ev = merge_events(_table([0.0, 0.001, 0.002, 0.5, 0.5], [60, 62, 64, 60, 67]), window_s=0.0)
    np.testing.assert_allclose(ev.times_s, [0.0, 0.001, 0.002, 0.5])
    assert ev.n_notes.tolist() == [1, 1, 1, 2]


def test_event_keeps_loudest_velocity_and_longest_duration():
    """An event carries the loudest velocity and the longest duration of its notes."""
    ev = merge_events(_table([0.0, 0.01, 0.5], [60, 64, 62], velocities=[50, 90, 70], durations=[0.3, 0.1, 0.2]))
    assert ev.velocity.tolist() == [90.0, 70.0]
    np.testing.assert_allclose(ev.duration_s, [0.3, 0.2])


def test_negative_window_and_empty_input_are_input_errors():
    """A negative window, or no notes at all, is an InputError."""
    with pytest.raises(InputError):
        merge_events(notes_from_onsets([0.0, 1.0]), window_s=-0.01)
    empty = NoteTable(*(np.zeros(0) for _ in range(7)))
    with pytest.raises(InputError):
        merge_events(empty)


# General MIDI Level 1 percussion key map (MIDI Manufacturers Association,
# General MIDI System Level 1 specification, 1991): the named keys below.
@pytest.mark.parametrize(
    "key, role",
    [(35, ROLE_KICK), (36, ROLE_KICK), (38, ROLE_SNARE), (40, ROLE_SNARE), (42, ROLE_TIMEKEEPER), (46, ROLE_TIMEKEEPER),
     (51, ROLE_TIMEKEEPER), (49, ROLE_CRASH), (57, ROLE_CRASH), (41, ROLE_TOM), (50, ROLE_TOM), (56, ROLE_OTHER)],
)
def test_gm1_drum_roles(key, role):
    """GM1 keys: kick 35/36, snare 38/40, closed hi-hat 42, open hi-hat 46, ride 51, crash 49/57, toms, cowbell 56 (GM1 spec)."""
    assert drum_role(key) == role


def test_drum_roles_agree_with_pretty_midi_names():
    """Every GM1 percussion key 35-81 gets the role its name in pretty_midi's GM drum map implies (reference library)."""
    def role_from_name(name: str) -> int:
        n = name.lower()
        if "bass drum" in n:
            return ROLE_KICK
        if "snare" in n:
            return ROLE_SNARE
        if "hi hat" in n or "ride" in n:
            return ROLE_TIMEKEEPER
        if "crash" in n or "splash" in n or "chinese" in n:
            return ROLE_CRASH
        if "tom" in n:
            return ROLE_TOM
        return None

    checked = 0
    for key in range(35, 82):
        expected = role_from_name(pretty_midi.note_number_to_drum_name(key))
        if expected is not None:
            assert drum_role(key) == expected, (key, pretty_midi.note_number_to_drum_name(key))
            checked += 1
    assert checked >= 20


def test_event_roles_are_or_of_its_drum_notes():
    """A kick struck with a closed hi-hat is one event carrying both roles; pitched events carry none."""
    drums = _table([0.0, 0.005, 0.5], [36, 42, 42], drums=True)
    ev = merge_events(drums)
    assert ev.roles.tolist() == [ROLE_KICK | ROLE_TIMEKEEPER, ROLE_TIMEKEEPER]
    assert ev.has_drums
    assert ev.top_pitch.tolist() == [-1, -1]  # drum keys are no melody
    pitched = merge_events(_table([0.0, 0.5], [60, 62]))
    assert pitched.roles.tolist() == [0, 0] and not pitched.has_drums


def test_shifted_moves_only_times():
    """``EventStream.shifted`` moves the times and keeps everything else."""
    ev = merge_events(_table([0.0, 0.0, 0.5], [60, 64, 62]))
    moved = ev.shifted(2.5)
    np.testing.assert_allclose(moved.times_s, ev.times_s + 2.5)
    assert moved.n_notes.tolist() == ev.n_notes.tolist()
    assert moved.top_pitch.tolist() == ev.top_pitch.tolist()
