"""Invariances through the file formats: empty tracks, the tempo map, leading silence, and dropped notes.

tests/test_pipeline.py checks the invariances on note tables and arrays
(a shift moves only phases and times, scaling time scales periods, exact
duplicates and row order change nothing); these check the same promises
where a user meets them, in the MIDI file, and the stability of the reading
when a few notes go missing. The tunes are published melodies rendered from
their notation (conftest.py); the grooves are the accuracy benchmark's
(bench/grooves.py).
"""

from __future__ import annotations

import sys
from pathlib import Path

import mido
import mir_eval
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import metertop

from conftest import rendering_to_midi

BENCH = Path(__file__).resolve().parents[1] / "bench"
sys.path.insert(0, str(BENCH))


def _rewrite(source: Path, target: Path, change) -> Path:
    """Apply ``change(mido.MidiFile)`` to a copy of ``source`` saved as ``target``."""
    mid = mido.MidiFile(str(source))
    change(mid)
    mid.save(str(target))
    return target


@pytest.fixture(scope="module")
def grace_midi(tmp_path_factory, request):
    rendering = request.getfixturevalue("grace_rendering")
    return rendering_to_midi(tmp_path_factory.mktemp("inv") / "grace.mid", rendering, time_signature=(3, 4))


@pytest.fixture(scope="module")
def grace_result(grace_midi):
    return metertop.analyse(grace_midi)


def test_empty_tracks_change_nothing(grace_midi, grace_result, tmp_path):
    """Adding a track with no events, a track of controllers and a program change, and a named track of meta events
    only, gives exactly the same result, key for key."""
    def add_tracks(mid):
        mid.tracks.append(mido.MidiTrack())
        mid.tracks.insert(1, mido.MidiTrack([mido.Message("program_change", channel=5, program=20, time=0),
                                             mido.Message("control_change", channel=5, control=7, value=90, time=480)]))
        mid.tracks.append(mido.MidiTrack([mido.MetaMessage("track_name", name="spare", time=0),
                                          mido.MetaMessage("marker", text="chorus", time=960)]))

    padded = _rewrite(grace_midi, tmp_path / "padded.mid", add_tracks)
    assert len(mido.MidiFile(str(padded)).tracks) == len(mido.MidiFile(str(grace_midi)).tracks) + 3
    assert metertop.analyse(padded).to_dict() == grace_result.to_dict()


@settings(max_examples=3, derandomize=True, deadline=None)
@given(k=st.floats(0.8, 1.25))
def test_stretching_the_tempo_map_scales_every_period(grace_midi, grace_result, tmp_path_factory, k):
    """Multiplying every tempo event of the file by k (k in 0.8..1.25) keeps the metre, scales bar, beat and every level's
    period by k (3%), and puts the downbeats on k times the old ones (mir_eval F-measure >= 0.9 at +-70 ms)."""
    def stretch(mid):
        for track in mid.tracks:
            for msg in track:
                if msg.type == "set_tempo":
                    msg.tempo = int(round(msg.tempo * k))

    stretched = _rewrite(grace_midi, tmp_path_factory.mktemp("stretch") / "stretched.mid", stretch)
    a, b = grace_result, metertop.analyse(stretched)
    assert b.time_signature == a.time_signature
    assert b.bar_s == pytest.approx(k * a.bar_s, rel=0.03)
    assert b.beat_s == pytest.approx(k * a.beat_s, rel=0.03)
    for la, lb in zip(a.levels, b.levels):
        if la.name == lb.name:
            assert lb.period_s == pytest.approx(k * la.period_s, rel=0.03), la.name
    assert mir_eval.onset.f_measure(k * np.asarray(a.downbeats_s), np.asarray(b.downbeats_s), window=0.07)[0] >= 0.9


def test_leading_silence_in_the_file_moves_only_times(grace_midi, grace_result, tmp_path):
    """Silence added at the start of every track (ticks added to each track's first delta) moves every beat and downbeat
    by its length (1 ms) and changes neither the metre nor the confidence."""
    ticks = 1000

    def delay(mid):
        for track in mid.tracks:
            if track:
                track[0].time += ticks

    delayed = _rewrite(grace_midi, tmp_path / "delayed.mid", delay)
    offset = mido.tick2second(ticks, mido.MidiFile(str(grace_midi)).ticks_per_beat, 500000)
    a, b = grace_result, metertop.analyse(delayed)
    assert b.time_signature == a.time_signature
    np.testing.assert_allclose(b.beats_s, np.asarray(a.beats_s) + offset, atol=1e-3)
    np.testing.assert_allclose(b.downbeats_s, np.asarray(a.downbeats_s) + offset, atol=1e-3)
    assert b.confidence == pytest.approx(a.confidence, abs=1e-6)


# Share of grooves whose reading survives 5% dropped notes. The target is 95%;
# `make bench-robust` measures 100 grooves (see the README). This is a
# regression floor below the measured figure (20 of 20 since the kit-repetition
# features; 95 of 100 in bench/robust.py), not the target.
DROP_FLOOR = 0.85
N_DROP_GROOVES = 20


def test_dropping_five_percent_of_notes_rarely_changes_the_reading():
    """The first 20 of the benchmark's grooves, each analysed whole and with 5% of its notes dropped (seeded): the reading
    (time signature and grouping) stays the same for at least DROP_FLOOR of them, and the bar length within 5% as often."""
    from grooves import make_grooves
    from robust import GROOVE_SEED, drop_stability

    records = drop_stability(make_grooves(N_DROP_GROOVES, GROOVE_SEED))
    same = np.mean([r["whole"] == r["dropped"] for r in records])
    bar_kept = np.mean([abs(r["bar_ratio"] - 1) <= 0.05 for r in records])
    assert same >= DROP_FLOOR, [(r["piece_id"], r["whole"], r["dropped"]) for r in records if r["whole"] != r["dropped"]]
    assert bar_kept >= DROP_FLOOR
