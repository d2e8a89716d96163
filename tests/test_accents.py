"""Accent models (metertop.accents)."""

from __future__ import annotations

import numpy as np
import pytest

from metertop import NoteTable, notes_from_onsets
from metertop.accents import durational_accent, dynamic_accent, event_weights, melodic_accent, role_accent
from metertop.events import EventStream, merge_events

from conftest import TUNES, render_tune


def _melody(pitches, ioi=0.5) -> EventStream:
    n = len(pitches)
    return EventStream(np.arange(n) * ioi, np.ones(n, dtype=np.int64), np.full(n, np.nan), np.full(n, np.nan),
                       np.asarray(pitches, dtype=np.int64), np.asarray(pitches, dtype=np.int64), np.full(n, np.nan),
                       np.zeros(n, dtype=np.int64))


def test_durational_accent_closed_form():
    """Durational accent is (1 - exp(-IOI / 0.5 s))**2 (Parncutt 1994, Music Perception 11(4), saturation 0.5 s, index 2)."""
    iois = np.array([0.1, 0.25, 0.5, 1.0, 2.0])
    times = np.concatenate([[0.0], np.cumsum(iois)])
    acc = durational_accent(merge_events(notes_from_onsets(times), window_s=0.0))
    expected = (1.0 - np.exp(-iois / 0.5)) ** 2
    np.testing.assert_allclose(acc[:-1], expected, rtol=1e-12)
    # Worked values of the closed form.
    assert acc[2] == pytest.approx((1 - np.exp(-1.0)) ** 2) == pytest.approx(0.399576, abs=1e-6)
    assert acc[3] == pytest.approx(0.747645, abs=1e-6)


def test_durational_accent_grows_with_ioi_and_stays_in_unit_interval():
    """A longer inter-onset interval after an event gives a larger accent, within [0, 1] (Parncutt 1994)."""
    times = np.cumsum([0.0, 0.1, 0.2, 0.4, 0.8, 1.6, 3.2])
    acc = durational_accent(merge_events(notes_from_onsets(times), window_s=0.0))
    assert np.all(np.diff(acc[:-1]) > 0)
    assert np.all((acc >= 0) & (acc <= 1))


def test_durational_accent_of_last_event_uses_its_duration():
    """The last event has no following onset; its own note duration stands in for the IOI."""
    n = 4
    notes = NoteTable(np.arange(n) * 0.25, np.array([0.2, 0.2, 0.2, 1.0]), np.full(n, 60), np.full(n, 80.0),
                      np.full(n, np.nan), np.zeros(n, bool), np.zeros(n, np.int64))
    acc = durational_accent(merge_events(notes))
    assert acc[-1] == pytest.approx((1 - np.exp(-1.0 / 0.5)) ** 2)


def test_melodic_accent_peak_outweighs_its_neighbours():
    """The turning note of a contour peak carries more melodic accent than the notes on either side (Thomassen 1982, JASA 71(6))."""
    acc = melodic_accent(_melody([60, 62, 67, 62, 60, 59]))
    assert acc[2] > acc[1] and acc[2] > acc[3]
    assert np.all((acc >= 0) & (acc <= 1))


def test_melodic_accent_peak_outweighs_valley():
    """A pivot at a contour peak is accented more than one at a valley of the same size (Thomassen 1982; his 0.83 vs 0.71, from memory)."""
    up_down = melodic_accent(_melody([60, 60, 64, 60, 60]))
    down_up = melodic_accent(_melody([64, 64, 60, 64, 64]))
    assert up_down[2] > down_up[2]


def test_melodic_accent_neutral_without_pitch():
    """Events without a pitched note get the neutral accent 0.5."""
    ev = merge_events(notes_from_onsets([0.0, 0.5, 1.0, 1.5]))
    assert melodic_accent(ev).tolist() == [0.5] * 4


def test_dynamic_accent_follows_velocity():
    """Louder events get a larger dynamic accent, within [0, 1]."""
    n = 6
    vel = np.array([100.0, 60, 60, 90, 60, 70])
    notes = NoteTable(np.arange(n) * 0.5, np.full(n, 0.3), np.full(n, 60), vel, np.full(n, np.nan), np.zeros(n, bool),
                      np.zeros(n, np.int64))
    acc = dynamic_accent(merge_events(notes))
    assert np.all((acc >= 0) & (acc <= 1))
    assert acc[0] > acc[3] > acc[5] > acc[1]
    assert acc[1] == pytest.approx(acc[2])


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_event_weights_have_mean_one(tune):
    """The mixed weights of a rendered tune are positive with a mean of 1."""
    ev = merge_events(render_tune(tune, 0.5, seed=3).notes)
    w = event_weights(ev)
    assert len(w) == len(ev)
    assert np.all(w > 0)
    assert w.mean() == pytest.approx(1.0, abs=1e-12)


def test_event_weights_scale_free_in_user_weights():
    """Multiplying every user weight by a constant leaves the mixed weights unchanged (only ratios matter)."""
    t = np.arange(16) * 0.5
    w = np.tile([1.0, 0.4, 0.6, 0.4], 4)
    a = event_weights(merge_events(notes_from_onsets(t, w)))
    b = event_weights(merge_events(notes_from_onsets(t, 7.0 * w)))
    np.testing.assert_allclose(a, b, rtol=1e-12)
    assert a.mean() == pytest.approx(1.0)


def _drum_events(keys, ioi=0.25) -> EventStream:
    n = len(keys)
    notes = NoteTable(np.arange(n) * ioi, np.full(n, 0.1), np.asarray(keys), np.full(n, 90.0), np.full(n, np.nan),
                      np.ones(n, bool), np.zeros(n, np.int64))
    return merge_events(notes)


def test_kick_weighs_more_than_hihat():
    """At equal spacing and velocity, kick events weigh more than hi-hat events (common practice: kick anchors, hi-hat keeps time)."""
    keys = [36, 42, 42, 42, 38, 42, 42, 42] * 4 + [36]
    ev = _drum_events(keys)
    w = event_weights(ev)
    kick = np.array(keys) == 36
    hat = np.array(keys) == 42
    snare = np.array(keys) == 38
    assert w[kick][:-1].min() > w[hat].max()
    assert w[snare].min() > w[hat].max()
    role = role_accent(ev)
    assert role[kick].min() > role[hat].max()
