"""The structural check of MIDI bytes before parsing (metertop.smf).

Outside references: the variable-length quantities of the Standard MIDI File
1.0 specification (MIDI Manufacturers Association), and mido and pretty_midi
(general MIDI libraries) reading the same bytes.
"""

from __future__ import annotations

import struct
import sys
from pathlib import Path

import mido
import pretty_midi
import pytest

from metertop import InputError, load_notes
from metertop.limits import MAX_NOTES, LimitError
from metertop.smf import MAX_TICKS, _vlq, survey_smf

from conftest import write_midi

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
from hostile import chunk, hostile_input, meta, vlq  # noqa: E402


# The specification's table of variable-length quantities (SMF 1.0, "Variable
# Length Quantities"); from memory of the table.
SPEC_VLQ = [
    (0x00000000, "00"), (0x00000040, "40"), (0x0000007F, "7F"), (0x00000080, "81 00"), (0x00002000, "C0 00"),
    (0x00003FFF, "FF 7F"), (0x00004000, "81 80 00"), (0x00100000, "C0 80 00"), (0x001FFFFF, "FF FF 7F"),
    (0x00200000, "81 80 80 00"), (0x08000000, "C0 80 80 00"), (0x0FFFFFFF, "FF FF FF 7F"),
]


@pytest.mark.parametrize("value, text", SPEC_VLQ)
def test_variable_length_quantities_of_the_specification(value, text):
    """The walker decodes, and the test encoder writes, every example of the specification's table."""
    raw = bytes.fromhex(text)
    assert _vlq(raw, 0, len(raw)) == (value, len(raw))
    assert vlq(value) == raw


def _file(*tracks: bytes, fmt: int = 1, division: int = 96) -> bytes:
    return chunk(b"MThd", struct.pack(">HHH", fmt, len(tracks), division)) + b"".join(chunk(b"MTrk", t) for t in tracks)


END = b"\x00\xff\x2f\x00"
NOTE = b"\x00\x90\x3c\x64\x30\x3c\x00"  # a note on middle C, ended 48 ticks later by running status


def test_survey_agrees_with_mido_and_pretty_midi(tmp_path):
    """On a file written by pretty_midi, the survey's format, tracks, division and last tick are mido's, and its note-ons are pretty_midi's notes."""
    notes = [(k * 0.25, k * 0.25 + 0.2, 60 + k % 12, 80) for k in range(40)]
    drums = [(k * 0.5, k * 0.5 + 0.1, 36, 100) for k in range(20)]
    path = write_midi(tmp_path / "two.mid", [("keys", 0, False, notes), ("kit", 0, True, drums)])
    survey = survey_smf(path.read_bytes())
    mid = mido.MidiFile(str(path))
    assert (survey.format, survey.n_tracks, survey.ticks_per_quarter) == (mid.type, len(mid.tracks), mid.ticks_per_beat)
    assert survey.last_tick == max(sum(msg.time for msg in track) for track in mid.tracks)
    assert survey.n_note_ons == sum(len(i.notes) for i in pretty_midi.PrettyMIDI(str(path)).instruments) == 60


def _tempo_track(tempo: bytes) -> bytes:
    return b"\x00" + meta(0x51, tempo) + NOTE + END


DAMAGED = {
    "not-midi": (b"RIFF" + bytes(20), "does not start with a MIDI file header"),
    "short-header": (b"MThd" + struct.pack(">I", 6) + b"\x00\x01", "cut short"),
    "header-length-4": (b"MThd" + struct.pack(">IHH", 4, 0, 1) + bytes(8), "declares 4 bytes"),
    "format-3": (_file(NOTE + END, fmt=3), "unknown MIDI file format 3"),
    "division-0": (_file(NOTE + END, division=0), "0 ticks per quarter note"),
    "smpte-division": (_file(NOTE + END, division=0xE728), "SMPTE frames"),
    "no-tracks": (chunk(b"MThd", struct.pack(">HHH", 1, 0, 96)), "declares 0 tracks"),
    "missing-track": (chunk(b"MThd", struct.pack(">HHH", 1, 2, 96)) + chunk(b"MTrk", NOTE + END), "ends after 1"),
    "truncated-track": (_file(NOTE * 4 + END)[:-9], "a truncated file?"),
    "not-a-track-chunk": (chunk(b"MThd", struct.pack(">HHH", 0, 1, 96)) + chunk(b"XTrk", NOTE + END), "with 'MTrk'"),
    "event-past-chunk": (chunk(b"MThd", struct.pack(">HHH", 0, 1, 96)) + b"MTrk" + struct.pack(">I", 5) + NOTE + END,
                         "runs past the end of the track"),
    "empty-track": (_file(b""), "is empty"),
    "running-status-first": (_file(b"\x00\x3c\x64" + END), "without a status byte"),
    "data-byte-high": (_file(b"\x00\x90\x3c\xe4" + END), "data byte 0xE4 out of range"),
    "undefined-status": (_file(b"\x00\xf4" + END), "undefined status byte 0xF4"),
    "tempo-zero": (_file(_tempo_track(b"\x00\x00\x00")), "tempo of 0 microseconds"),
    "tempo-two-bytes": (_file(_tempo_track(b"\x07\xa1")), "tempo event of 2 bytes"),
    "key-signature-99-sharps": (_file(b"\x00" + meta(0x59, b"\x63\x00") + NOTE + END), "99 sharps"),
    "time-signature-numerator-0": (_file(b"\x00" + meta(0x58, b"\x00\x02\x18\x08") + NOTE + END), "numerator 0"),
    "smpte-offset-frame-rate": (_file(b"\x00" + meta(0x54, b"\xe0\x00\x00\x00\x00") + NOTE + END), "frame rate"),
    "meta-length-lies": (_file(b"\x00\xff\x01\x7f" + b"abc" + END), "runs past the end"),
    "sysex-high-byte": (_file(b"\x00\xf0\x03\x7e\x90\xf7" + NOTE + END), "system-exclusive"),
    "huge-delta": (_file(vlq(0x0FFFFFFF) + b"\x90\x3c\x64" + NOTE + END), f"beyond the {MAX_TICKS:,} ticks"),
}


@pytest.mark.parametrize("case", sorted(DAMAGED))
def test_damage_is_named(tmp_path, case):
    """Each kind of damage is an InputError whose message names it; load_notes says the file is unreadable and names the file."""
    data, expected = DAMAGED[case]
    with pytest.raises(InputError, match=expected.replace("?", r"\?").replace("(", r"\(")):
        survey_smf(data)
    path = tmp_path / f"{case}.mid"
    path.write_bytes(data)
    with pytest.raises(InputError, match=f"{case}.mid: not a readable Standard MIDI File"):
        load_notes(path)


def test_what_the_survey_passes_the_parser_reads():
    """Over 600 hostile inputs (about 300 MIDI files), every file the survey passes is parsed by pretty_midi without an exception,
    into no more notes than the survey counted note-ons."""
    passed = 0
    for i in range(600):
        h = hostile_input(20261202, i)
        if h.family != "midi":
            continue
        try:
            survey = survey_smf(h.data)
        except InputError:
            continue
        passed += 1
        import io
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pm = pretty_midi.PrettyMIDI(io.BytesIO(h.data))
        assert sum(len(inst.notes) for inst in pm.instruments) <= survey.n_note_ons, h.case
    assert passed >= 50  # the stream keeps enough files intact to mean something


def test_too_many_notes_refused_before_parsing(tmp_path, monkeypatch):
    """A file of MAX_NOTES + 1 notes is refused with a message stating the limit, without pretty_midi ever parsing it."""
    path = tmp_path / "crowded.mid"
    path.write_bytes(_file(NOTE * (MAX_NOTES + 1) + END, fmt=0))

    def no_parse(*args, **kwargs):
        raise AssertionError("pretty_midi was asked to parse a file over the limit")

    monkeypatch.setattr(pretty_midi, "PrettyMIDI", no_parse)
    with pytest.raises(LimitError, match=f"more than {MAX_NOTES:,} notes.*at most {MAX_NOTES:,} notes"):
        load_notes(path)


def test_tempo_zero_off_the_first_track_is_harmless(tmp_path):
    """pretty_midi reads tempo from the first track only, so a tempo of 0 on another track does not stop the file being read."""
    data = _file(b"\x00" + meta(0x51, b"\x07\xa1\x20") + END, b"\x00" + meta(0x51, b"\x00\x00\x00") + NOTE * 3 + END)
    assert survey_smf(data).n_note_ons == 3
    path = tmp_path / "tempo0.mid"
    path.write_bytes(data)
    assert len(load_notes(path)) >= 1
