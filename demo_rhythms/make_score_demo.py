"""Write the two score transcriptions of the demo, without barlines, and their ground truth.

The Tidewater Band of Kestrel Quay (an invented harbour town; see README.md)
keeps two tunes as a transcriber would have taken them down, with note
values but no barlines and no time signature:

- ``tidewater_harbour_lights_air_3-4.abc``: an air in 3/4 with a one-beat
  pickup, as ABC (``M:none``), at quarter = 84;
- ``tidewater_lantern_tide_song_6-8.musicxml``: a song in 6/8 with a
  one-eighth pickup and words, as MusicXML in one unbarred measure, at
  dotted quarter = 56, slowing to 46 for the last verse (a tempo change the
  analysis must not be confused by).

Both are composed here, note by note; nothing is random. Each gets
``<stem>.truth.json``: the metre as the composer barred it, the bar, beat
and pickup in quarters, every downbeat in quarters and in seconds at the
score's tempo.

Run ``python demo_rhythms/make_score_demo.py [--out DIR] [--check]``; it
needs music21 (``pip install 'metertop[scores]'``) and only (re)writes its
own output files.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

HERE = Path(__file__).resolve().parent

# ---- the air, in ABC (L:1/8), one bar per string; the pickup comes first --------------------

AIR_TITLE = "Harbour Lights (air)"
AIR_BARS = [
    "A2",  # pickup: one quarter
    "d4 cB", "A4 FA", "d4 ef", "e4 dB",
    "A4 FG", "A2 B2 c2", "d6", "z4 A2",
    "f4 ed", "c4 BA", "B4 cd", "e4 A2",
    "f4 ed", "c4 BA", "B3c d2", "d6",
    "f4 ag", "f4 ed", "e4 fg", "a4 A2",
    "d4 cB", "A4 FA", "B3c d2", "d4",  # the last bar completes the pickup
]
AIR_QUARTER_BPM = 84.0
AIR_BAR_Q = 3.0

# ---- the song: (pitch, eighths, syllable) per note, one list per bar ------------------------------

SONG_TITLE = "Lantern Tide"
SONG_BARS = [
    [("D4", 1, "When")],  # pickup: one eighth
    [("G4", 3, "lan"), ("B4", 2, "terns"), ("C5", 1, "are")],
    [("D5", 3, "lit"), ("B4", 2, "on the"), ("G4", 1, "quay")],
    [("C5", 2, "and"), ("E5", 1, "the"), ("D5", 2, "tide"), ("B4", 1, "is")],
    [("A4", 3, "high,"), ("R", 2, None), ("D4", 1, "the")],
    [("G4", 3, "boats"), ("B4", 2, "come"), ("C5", 1, "home")],
    [("D5", 3, "still"), ("G5", 2, "on the"), ("E5", 1, "black")],
    [("D5", 2, "wa"), ("B4", 1, "ter,"), ("A4", 2, "one by"), ("F#4", 1, "one")],
    [("G4", 3, "home."), ("R", 2, None), ("D5", 1, "Sing")],
    [("E5", 3, "for"), ("E5", 2, "the"), ("F#5", 1, "nets")],
    [("G5", 3, "and"), ("D5", 2, "the"), ("B4", 1, "oars")],
    [("C5", 2, "pull"), ("C5", 1, "ing"), ("B4", 2, "to"), ("A4", 1, "the")],
    [("B4", 3, "shore;"), ("R", 2, None), ("D5", 1, "light")],
    [("E5", 3, "the"), ("E5", 2, "last"), ("F#5", 1, "lamp")],
    [("G5", 3, "high"), ("D5", 2, "on the"), ("B4", 1, "hill")],
    [("C5", 2, "while"), ("A4", 1, "the"), ("F#4", 2, "band"), ("A4", 1, "plays")],
    [("G4", 3, "on."), ("G4~", 2, None)],  # the last bar completes the pickup; ~ is tied to the note before
]
SONG_BAR_Q = 3.0
SONG_TEMPI = [(0, 56.0), (12, 46.0)]  # (bar index where it starts, dotted quarters per minute)


def air_abc() -> str:
    """The air as barless ABC text."""
    words, lines, line = " ".join(AIR_BARS).split(), [], ""
    for word in words:
        if len(line) + len(word) > 48:
            lines.append(line)
            line = ""
        line = f"{line} {word}".strip()
    lines.append(line)
    head = ["X:1", f"T:{AIR_TITLE}", "C:the Tidewater Band of Kestrel Quay (invented)", "M:none", "L:1/8",
            f"Q:1/4={AIR_QUARTER_BPM:g}", "K:D"]
    return "\n".join(head + lines) + "\n"


def _song_score():
    from music21 import metadata, note, stream, tempo, tie

    part = stream.Part()
    part.partName = "Voice"
    measure = stream.Measure(number=1)
    q = 0.0
    bar_starts = []
    for k, bar in enumerate(SONG_BARS):
        bar_starts.append(q)
        previous = None
        for pitch, eighths, syllable in bar:
            length = eighths / 2
            n = note.Rest(quarterLength=length) if pitch == "R" else note.Note(pitch.rstrip("~"), quarterLength=length)
            if pitch.endswith("~"):
                previous.tie, n.tie = tie.Tie("start"), tie.Tie("stop")
            previous = n
            if syllable:
                n.lyric = syllable
            measure.insert(q, n)
            q += length
    for bar_index, dotted_bpm in SONG_TEMPI:
        mark = tempo.MetronomeMark(number=dotted_bpm, referent=note.Note(type="quarter", dots=1))
        measure.insert(bar_starts[bar_index], mark)
    part.append(measure)
    score = stream.Score([part])
    score.insert(0, metadata.Metadata(title=SONG_TITLE, composer="the Tidewater Band of Kestrel Quay (invented)"))
    return score


def _downbeats(pickup_q: float, bar_q: float, n_bars: int) -> list[float]:
    return [pickup_q + k * bar_q for k in range(n_bars)]


def _seconds(q: float, tempo_q: list[tuple[float, float]]) -> float:
    """Seconds at a position in quarters, through (start_q, quarter_bpm) pieces."""
    total, prev_q, prev_bpm = 0.0, 0.0, tempo_q[0][1]
    for start, bpm in tempo_q[1:]:
        if q <= start:
            break
        total += (start - prev_q) * 60.0 / prev_bpm
        prev_q, prev_bpm = start, bpm
    return total + (q - prev_q) * 60.0 / prev_bpm


def truths() -> dict[str, dict]:
    """The ground truth of both files, keyed by file name."""
    air_pickup = 1.0
    air_full_bars = len(AIR_BARS) - 1  # the last, short bar starts on a downbeat too
    air_down_q = _downbeats(air_pickup, AIR_BAR_Q, air_full_bars)
    air_tempo = [(0.0, AIR_QUARTER_BPM)]
    song_pickup = 0.5
    song_down_q = _downbeats(song_pickup, SONG_BAR_Q, len(SONG_BARS) - 1)
    song_tempo = [(0.0 if i == 0 else song_pickup + (b - 1) * SONG_BAR_Q, bpm * 1.5) for i, (b, bpm) in enumerate(SONG_TEMPI)]
    return dict([
        _truth("tidewater_harbour_lights_air_3-4.abc", AIR_TITLE, "3/4", 3, 2, AIR_BAR_Q, 1.0, air_pickup, air_tempo, air_down_q,
               "The band's fiddler took this air down at the harbour-lights ceremony, note values only: "
               "no barlines, no time signature. Long notes fall on the downbeats; a one-beat pickup."),
        _truth("tidewater_lantern_tide_song_6-8.musicxml", SONG_TITLE, "6/8", 2, 3, SONG_BAR_Q, 1.5, song_pickup, song_tempo,
               song_down_q, "The song the band sings when the lantern boats come home, kept in a notation program as one "
               "unbarred measure with its words. It slows down for the last verse (dotted quarter 56, then 46)."),
    ])


def _truth(file, title, time_signature, beats, division, bar_q, beat_q, pickup_q, tempo_q, downbeats_q, description):
    return file, {
        "file": file, "title": title, "time_signature": time_signature, "notated_time_signature": None,
        "beats_per_bar": beats, "beat_division": division, "grouping": None,
        "bar_quarters": bar_q, "beat_quarters": beat_q, "pickup_quarters": pickup_q,
        "tempo": [{"start_quarters": q, "quarter_bpm": bpm} for q, bpm in tempo_q],
        "downbeats_quarters": downbeats_q, "downbeats_s": [round(_seconds(q, tempo_q), 4) for q in downbeats_q],
        "description": description,
    }


def write(out: Path) -> list[Path]:
    from music21.musicxml.m21ToXml import GeneralObjectExporter

    out.mkdir(parents=True, exist_ok=True)
    written = []
    air = out / "tidewater_harbour_lights_air_3-4.abc"
    air.write_text(air_abc(), encoding="utf-8")
    song = out / "tidewater_lantern_tide_song_6-8.musicxml"
    exporter = GeneralObjectExporter(_song_score())
    exporter.makeNotation = False  # one unbarred measure, as it is (music21 would re-bar it in 4/4)
    song.write_bytes(exporter.parse())
    written += [air, song]
    for name, truth in truths().items():
        path = out / (Path(name).stem + ".truth.json")
        path.write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
        written.append(path)
    return written


def check(out: Path) -> None:
    """Read both files back with metertop's reader: the notes fill the bars the truth says."""
    from metertop.scores import read_score

    for name, truth in truths().items():
        (tune,) = read_score(out / name)
        assert tune.notated_time_signature is None, name
        end = tune.end_q
        assert abs(truth["downbeats_quarters"][-1] + truth["bar_quarters"] - truth["pickup_quarters"] - end) < 1e-9, name
        print(f"{name}: {len(tune.onsets_q)} notes, {len(truth['downbeats_quarters'])} downbeats, ends at {end:g} quarters")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE)
    parser.add_argument("--check", action="store_true", help="read the files back and check them against the truth")
    args = parser.parse_args()
    for path in write(args.out):
        print(f"wrote {path}")
    if args.check:
        check(args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
