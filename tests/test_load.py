"""Loading notes from MIDI files and onset lists (metertop.load)."""

from __future__ import annotations

import json

import mido
import numpy as np
import pytest

from metertop import InputError, NoteTable, load_notes, notes_from_onsets
from metertop.load import list_tracks

from conftest import write_midi

# Ticks per quarter that pretty_midi writes (220) at 120 bpm: about 2.3 ms a tick.
TICK_S = 0.5 / 220


def _piano_and_drums(tmp_path, name="two_tracks.mid", time_signature=(3, 4)):
    piano = [(k * 0.5, k * 0.5 + 0.4, 60 + k % 5, 70 + k) for k in range(12)]
    drums = [(k * 1.5, k * 1.5 + 0.1, 36, 100) for k in range(4)] + [(k * 1.5 + 0.5, k * 1.5 + 0.6, 42, 60) for k in range(4)]
    path = write_midi(tmp_path / name, [("piano", 0, False, piano), ("kit", 0, True, drums)], time_signature=time_signature)
    return path, piano, drums


def _type0_file(path):
    """A type-0 file built from raw messages: piano on channel 1, drums on channel 10, one time signature 3/4."""
    mid = mido.MidiFile(type=0, ticks_per_beat=480)
    track = mido.MidiTrack()
    mid.tracks.append(track)
    track.append(mido.MetaMessage("set_tempo", tempo=500000, time=0))  # 120 bpm: a quarter is 0.5 s
    track.append(mido.MetaMessage("time_signature", numerator=3, denominator=4, time=0))
    events = []
    for k in range(9):
        events += [(k * 480, 1, "note_on", 0, 60 + k % 3, 80), (k * 480 + 240, 0, "note_off", 0, 60 + k % 3, 0)]
        if k % 3 == 0:
            events += [(k * 480, 1, "note_on", 9, 36, 100), (k * 480 + 60, 0, "note_off", 9, 36, 0)]
    events.sort(key=lambda e: (e[0], e[1]))  # offs before ons at the same tick
    now = 0
    for tick, _, kind, channel, note, velocity in events:
        track.append(mido.Message(kind, channel=channel, note=note, velocity=velocity, time=tick - now))
        now = tick
    track.append(mido.MetaMessage("end_of_track", time=0))
    mid.save(str(path))
    return path


def test_type1_midi_roundtrip_reads_every_note_in_seconds(tmp_path):
    """A type-1 file written by pretty_midi reads back with every note, in seconds, sorted, drums flagged."""
    path, piano, drums = _piano_and_drums(tmp_path)
    assert mido.MidiFile(str(path)).type == 1
    notes = load_notes(path)
    assert isinstance(notes, NoteTable)
    assert notes.source == "midi"
    assert len(notes) == len(piano) + len(drums)
    assert np.all(np.diff(notes.onsets_s) >= 0)
    expected = np.sort([n[0] for n in piano + drums])
    np.testing.assert_allclose(notes.onsets_s, expected, atol=TICK_S)
    assert notes.is_drum.sum() == len(drums)
    assert set(notes.pitches[notes.is_drum].tolist()) == {36, 42}
    assert set(notes.pitches[~notes.is_drum].tolist()) == {p for _, _, p, _ in piano}
    # Durations and velocities come through.
    piano_sel = ~notes.is_drum
    np.testing.assert_allclose(notes.durations_s[piano_sel], 0.4, atol=2 * TICK_S)
    assert sorted(notes.velocities[piano_sel].tolist()) == sorted(float(v) for *_, v in piano)
    assert np.all(np.isnan(notes.weights))


def test_type1_time_signature_meta_event_is_read(tmp_path):
    """The time-signature meta event of a MIDI file is kept on the table."""
    path, _, _ = _piano_and_drums(tmp_path, time_signature=(6, 8))
    sigs = load_notes(path).time_signatures
    assert len(sigs) == 1
    assert (sigs[0].numerator, sigs[0].denominator) == (6, 8)
    assert sigs[0].time_s == pytest.approx(0.0)
    assert str(sigs[0]) == "6/8"


def test_type0_midi_with_drum_channel(tmp_path):
    """A type-0 file (one track, piano and drum channels mixed) gives both parts, with channel 10 as drums."""
    path = _type0_file(tmp_path / "type0.mid")
    assert mido.MidiFile(str(path)).type == 0
    notes = load_notes(path)
    assert len(notes) == 9 + 3
    drums = notes.is_drum
    assert drums.sum() == 3
    np.testing.assert_allclose(notes.onsets_s[drums], [0.0, 1.5, 3.0], atol=1e-9)
    np.testing.assert_allclose(np.sort(notes.onsets_s[~drums]), np.arange(9) * 0.5, atol=1e-9)
    np.testing.assert_allclose(notes.durations_s[~drums], 0.25, atol=1e-9)
    assert [(s.numerator, s.denominator) for s in notes.time_signatures] == [(3, 4)]


def test_track_selection_keeps_only_chosen_tracks(tmp_path):
    """``load_notes(path, tracks=[i])`` keeps the notes of track i only; indices match ``list_tracks``."""
    path, piano, drums = _piano_and_drums(tmp_path)
    listed = list_tracks(path)
    assert [(i, is_drum, n) for i, _, is_drum, n in listed] == [(0, False, len(piano)), (1, True, len(drums))]
    assert listed[0][1] == "piano" and listed[1][1] == "kit"
    only_drums = load_notes(path, tracks=[1])
    assert len(only_drums) == len(drums) and only_drums.is_drum.all()
    assert set(only_drums.track.tolist()) == {1}
    only_piano = load_notes(path, tracks=[0])
    assert len(only_piano) == len(piano) and not only_piano.is_drum.any()
    both = load_notes(path, tracks=[1, 0])
    assert len(both) == len(piano) + len(drums)


def test_track_selection_out_of_range_is_an_input_error(tmp_path):
    """Asking for a track the file does not have is an InputError."""
    path, _, _ = _piano_and_drums(tmp_path)
    with pytest.raises(InputError):
        load_notes(path, tracks=[5])


def test_exact_duplicates_dropped_chords_kept(tmp_path):
    """A note doubled in two tracks (same time and pitch) counts once; a chord (same time, other pitches) stays."""
    chord = [(0.0, 1.0, 60, 80), (0.0, 1.0, 64, 80), (0.0, 1.0, 67, 80), (1.0, 2.0, 62, 80)]
    doubled = [(0.0, 1.0, 60, 70), (1.0, 2.0, 62, 70)]  # exact duplicates of two notes above
    path = write_midi(tmp_path / "dup.mid", [("a", 0, False, chord), ("b", 40, False, doubled)])
    notes = load_notes(path)
    assert len(notes) == 4
    assert notes.pitches[notes.onsets_s == 0.0].tolist() == [60, 64, 67]
    assert notes.pitches[np.isclose(notes.onsets_s, 1.0)].tolist() == [62]


@pytest.mark.parametrize("kick_first", [False, True], ids=["bass-track-first", "drum-track-first"])
def test_drum_key_and_pitched_note_of_same_number_are_not_duplicates(tmp_path, kick_first):
    """A bass C2 (MIDI 36) and a kick (GM key 36) struck together are two different notes: both are kept, in either track order."""
    bass = [(k * 0.5, k * 0.5 + 0.4, 36, 80) for k in range(4)]
    kick = [(k * 0.5, k * 0.5 + 0.1, 36, 100) for k in range(4)]
    tracks = [("bass", 32, False, bass), ("kit", 0, True, kick)]
    path = write_midi(tmp_path / "groove.mid", tracks[::-1] if kick_first else tracks)
    notes = load_notes(path)
    assert len(notes) == 8
    assert notes.is_drum.sum() == 4


def test_onset_list_duplicates_dropped():
    """Repeated onset times without pitch are exact duplicates and are dropped; chords given by pitch stay."""
    notes = notes_from_onsets([0.5, 0.0, 0.5, 1.0])
    assert notes.onsets_s.tolist() == [0.0, 0.5, 1.0]
    chord = notes_from_onsets([0.0, 0.0, 0.0, 1.0], pitches=[60, 64, 60, 62])
    assert chord.onsets_s.tolist() == [0.0, 0.0, 1.0]
    assert chord.pitches.tolist() == [60, 64, 62]


def test_csv_with_header_time_and_weight(tmp_path):
    """CSV with header ``time_s,weight``: times sorted in seconds, weights kept with their onsets."""
    path = tmp_path / "claps.csv"
    path.write_text("time_s,weight\n1.0,0.5\n0.5,1.0\n1.5,0.25\n")
    notes = load_notes(path)
    assert notes.source == "onsets"
    assert notes.onsets_s.tolist() == [0.5, 1.0, 1.5]
    assert notes.weights.tolist() == [1.0, 0.5, 0.25]
    assert notes.pitches.tolist() == [-1, -1, -1]
    assert not notes.is_drum.any()


def test_tsv_with_header(tmp_path):
    """Tab-separated values with a header are read like CSV."""
    path = tmp_path / "onsets.tsv"
    path.write_text("weight\ttime_s\n2\t0.25\n1\t0.75\n")
    notes = load_notes(path)
    assert notes.onsets_s.tolist() == [0.25, 0.75]
    assert notes.weights.tolist() == [2.0, 1.0]


def test_single_column_without_header(tmp_path):
    """One column of seconds with no header is a plain onset list without weights."""
    path = tmp_path / "onsets.txt"
    path.write_text("0.0\n0.5\n1.25\n")
    notes = load_notes(path)
    assert notes.onsets_s.tolist() == [0.0, 0.5, 1.25]
    assert np.all(np.isnan(notes.weights))


def test_json_array_of_numbers(tmp_path):
    """A JSON array of numbers is a list of onset times in seconds."""
    path = tmp_path / "onsets.json"
    path.write_text(json.dumps([1.5, 0.5, 1.0]))
    assert load_notes(path).onsets_s.tolist() == [0.5, 1.0, 1.5]


def test_json_array_of_objects(tmp_path):
    """A JSON array of objects gives time_s with optional weight and pitch."""
    path = tmp_path / "onsets.json"
    path.write_text(json.dumps([{"time_s": 0.5, "weight": 2.0, "pitch": 64}, {"time_s": 0.0}, {"time_s": 1.0, "weight": 1.0}]))
    notes = load_notes(path)
    assert notes.onsets_s.tolist() == [0.0, 0.5, 1.0]
    assert np.isnan(notes.weights[0]) and notes.weights[1:].tolist() == [2.0, 1.0]
    assert notes.pitches.tolist() == [-1, 64, -1]


def test_drum_column_marks_drum_hits(tmp_path):
    """A ``drum`` column (General MIDI percussion key, an open standard) makes a row a drum hit; a kick and a bass C2 on 36 stay two notes."""
    path = tmp_path / "kit.csv"
    path.write_text("time_s,weight,pitch,drum\n0.0,1,,36\n0.0,0.5,,42\n0.0,1,36,\n0.5,0.8,,38\n")
    notes = load_notes(path)
    assert notes.onsets_s.tolist() == [0.0, 0.0, 0.0, 0.5]
    assert list(zip(notes.pitches.tolist(), notes.is_drum.tolist())) == [(36, False), (36, True), (42, True), (38, True)]
    js = tmp_path / "kit.json"
    js.write_text(json.dumps([{"time_s": 0.0, "drum": 36}, {"time_s": 0.5, "drum": 38, "weight": 0.8}, {"time_s": 0.5, "pitch": 60}]))
    notes = load_notes(js)
    assert list(zip(notes.pitches.tolist(), notes.is_drum.tolist())) == [(36, True), (38, True), (60, False)]


@pytest.mark.parametrize("body, message", [
    ("time_s,pitch,drum\n0.0,36,36\n", "both a pitch and a drum"),
    ("time_s,drum\n0.0,200\n", "drum 200 is not a MIDI note number"),
    ("time_s,drum\n0.0,kick\n", "drum"),
])
def test_bad_drum_values(tmp_path, body, message):
    path = tmp_path / "bad.csv"
    path.write_text(body)
    with pytest.raises(InputError, match=message):
        load_notes(path)


# ---- errors: every bad input is an InputError ----

def test_missing_file(tmp_path):
    """A path that does not exist is an InputError."""
    with pytest.raises(InputError, match="no such file"):
        load_notes(tmp_path / "nothing_here.mid")


@pytest.mark.parametrize("name", ["empty.mid", "empty.csv", "empty.json"])
def test_empty_file(tmp_path, name):
    """A file of zero bytes is an InputError, whatever its suffix."""
    path = tmp_path / name
    path.write_bytes(b"")
    with pytest.raises(InputError, match="empty"):
        load_notes(path)


def test_midi_without_notes(tmp_path):
    """A valid MIDI file whose tracks hold no notes is an InputError."""
    path = write_midi(tmp_path / "silent.mid", [("empty", 0, False, [])])
    with pytest.raises(InputError, match="no notes"):
        load_notes(path)


def test_track_indices_follow_note_bearing_tracks(tmp_path):
    """Tracks without notes are not listed, and ``tracks=[i]`` uses the listed indices."""
    path = write_midi(tmp_path / "half.mid", [("empty", 0, False, []), ("full", 0, False, [(0.0, 0.5, 60, 80)])])
    listed = list_tracks(path)
    assert [(i, name, n) for i, name, _, n in listed] == [(0, "full", 1)]
    assert len(load_notes(path, tracks=[0])) == 1
    with pytest.raises(InputError):
        load_notes(path, tracks=[1])


def test_truncated_midi(tmp_path):
    """A MIDI file cut off in the middle of a track is an InputError."""
    good, _, _ = _piano_and_drums(tmp_path)
    data = good.read_bytes()
    bad = tmp_path / "truncated.mid"
    bad.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError):
        load_notes(bad)


@pytest.mark.parametrize("payload", [b"MThd\x00\x00\x00\x06\x00\x01", b"MThd" + bytes(range(40)), b"this is not a MIDI file at all"])
def test_corrupt_midi_bytes(tmp_path, payload):
    """Garbage or a bare header in a .mid file is an InputError."""
    path = tmp_path / "corrupt.mid"
    path.write_bytes(payload)
    with pytest.raises(InputError):
        load_notes(path)


@pytest.mark.parametrize(
    "body",
    [
        "time_s,weight\n0.5,1\nabc,1\n",  # text in time_s
        "time_s,weight\n0.5,1\n-0.25,1\n",  # negative time
        "time_s,weight\n0.5,1\nnan,1\n",  # NaN
        "time_s,weight\n0.5,1\nNaN,1\n",
        "time_s,weight\n0.5,1\ninf,1\n",  # not finite
        "onset,weight\n0.5,1\n1.0,1\n",  # header without time_s
        "time_s,weight\n",  # header only
        "0.5,1\n1.0,1\n",  # two columns and no header
    ],
    ids=["text", "negative", "nan", "NaN", "inf", "no-time_s", "header-only", "no-header-two-columns"],
)
def test_bad_csv_values(tmp_path, body):
    """Text, negative, NaN or infinite times, a header without time_s, or no rows: each an InputError."""
    path = tmp_path / "bad.csv"
    path.write_text(body)
    with pytest.raises(InputError):
        load_notes(path)


@pytest.mark.parametrize(
    "payload",
    ['[0.5, "x"]', "[]", '{"a": 1}', '[{"weight": 1}]', "[0.5, -1]", "[0.5, true]", "[0.5, 1.0"],
    ids=["text", "empty", "object", "no-time_s", "negative", "bool", "invalid"],
)
def test_bad_json(tmp_path, payload):
    """Malformed or meaningless JSON onset lists are InputErrors."""
    path = tmp_path / "bad.json"
    path.write_text(payload)
    with pytest.raises(InputError):
        load_notes(path)


def test_folder_and_track_selection_on_onset_list(tmp_path):
    """A folder is no input, and track selection on an onset list is refused."""
    with pytest.raises(InputError):
        load_notes(tmp_path)
    path = tmp_path / "onsets.csv"
    path.write_text("time_s\n0\n1\n")
    with pytest.raises(InputError):
        load_notes(path, tracks=[0])


def test_input_error_is_a_value_error():
    """InputError belongs to the library's error tree under ValueError (STYLE.md)."""
    from metertop import MetertopError

    assert issubclass(InputError, MetertopError) and issubclass(MetertopError, ValueError)
    with pytest.raises(ValueError):
        notes_from_onsets([0.0, float("nan")])
