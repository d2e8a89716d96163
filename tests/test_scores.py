"""Score input (metertop.scores) and barred output (metertop.score_writer), read and written with music21.

Outside references: the published tunes of conftest.py (their notated
metres), the Essen folksongs that music21 ships (training files of the
development split only, bench/split.md), music21 as the reference reader of
what metertop writes, and pretty_midi for the MIDI rendering.
"""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

import numpy as np
import pretty_midi
import pytest
from typer.testing import CliRunner

import metertop
from metertop import InputError
from metertop.cli import app
from metertop.scores import (TempoMap, analyse_score, analyse_tune, is_score_path, read_abc_text, read_score,
                             score_time_signature, tune_from_notes)
from metertop.score_writer import bar_boundaries, barred_score, musicxml_bytes, write_score

from conftest import AMAZING_GRACE, ODE_TO_JOY, ROW_YOUR_BOAT, TUNES

music21 = pytest.importorskip("music21")

BENCH = Path(__file__).resolve().parents[1] / "bench"
sys.path.insert(0, str(BENCH))

runner = CliRunner()
SCORE_KEYS = {"tune", "title", "bar_quarters", "beat_quarters", "pickup_quarters", "notated_time_signature"}
FAMILY = {"2/4": "duple", "4/4": "duple", "2/2": "duple", "6/8": "duple", "3/4": "triple", "3/8": "single"}


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


# ---- writing test inputs -----------------------------------------------------------------

_NAMES = ["C", "^C", "D", "^D", "E", "F", "^F", "G", "^G", "A", "^A", "B"]


def abc_note(midi: int, eighths: float) -> str:
    """One ABC note at L:1/8 (C4 is ``C``, C5 is ``c``)."""
    name = _NAMES[midi % 12]
    octave = midi // 12 - 1
    if octave >= 5:
        name = name[:-1] + name[-1].lower() + "'" * (octave - 5)
    else:
        name = name + "," * (4 - octave)
    length = "" if eighths == 1 else (f"/{int(round(1 / eighths))}" if eighths < 1 else f"{eighths:g}")
    return name + length


def barless_abc_of(tune, *, index: int = 1, tempo: str | None = None, key: bool = True, repeats: int = 1) -> str:
    """A published tune of conftest.py as barless ABC: no barlines, ``M:none``; ``repeats`` verses."""
    body = " ".join(abc_note(p, d * 2) for d, p in tune.notes * repeats)
    head = [f"X:{index}", f"T:{tune.name}", "M:none", "L:1/8"] + ([f"Q:1/4={tempo}"] if tempo else []) + (["K:C"] if key else [])
    return "\n".join(head + [body]) + "\n"


def barless_musicxml_of(tune, path: Path, *, tempo_changes=(), repeats: int = 1) -> Path:
    """A published tune as MusicXML in one measure, without a time signature (how notation programs keep unbarred music)."""
    m21 = music21
    part = m21.stream.Part()
    measure = m21.stream.Measure(number=1)
    q = 0.0
    for d, p in tune.notes * repeats:
        measure.insert(q, m21.note.Note(p, quarterLength=d))
        q += d
    for offset, bpm in tempo_changes:
        measure.insert(offset, m21.tempo.MetronomeMark(number=bpm))
    part.append(measure)
    score = m21.stream.Score([part])
    score.insert(0, m21.metadata.Metadata(title=tune.name))
    path.write_bytes(musicxml_bytes(score, make_notation=False))
    return path


def midi_rendering(tune, path: Path, quarter_bpm: float = 100.0) -> Path:
    """The notes played deadpan at a constant tempo, with pretty_midi."""
    pm = pretty_midi.PrettyMIDI(initial_tempo=quarter_bpm)
    inst = pretty_midi.Instrument(program=0)
    spq = 60.0 / quarter_bpm
    for on, du, p in zip(tune.onsets_q, tune.durations_q, tune.pitches):
        inst.notes.append(pretty_midi.Note(velocity=80, pitch=int(p), start=float(on) * spq, end=float(on + du) * spq * 0.999))
    pm.instruments.append(inst)
    pm.write(str(path))
    return path


# ---- reading -------------------------------------------------------------------------------

MULTI_ABC = """%abc-2.1
X:1
T:First
M:none
L:1/8
K:G
GABc d2B2 | c2A2 G4-G2 {A}G2 [DB]2
X:2
T:Second
L:1/8
Q:1/4=120
K:D
M:3/4
D2FA d2fd c2ec A2cA
"""


def test_abc_file_with_several_tunes(tmp_path):
    """Each X: tune is read on its own with its title and index; ties merge, grace notes give no onset, chords give a note per pitch."""
    path = tmp_path / "two.abc"
    path.write_text(MULTI_ABC)
    first, second = read_score(path)
    assert (first.index, first.title, second.index, second.title) == (1, "First", 2, "Second")
    # G A B c d2 B2 c2 A2 G4-G2 {A} G2 [DB]2, in quarters
    assert first.onsets_q.tolist() == [0, 0.5, 1, 1.5, 2, 3, 4, 5, 6, 9, 10, 10]
    assert first.durations_q[first.onsets_q == 6].tolist() == [3.0]
    assert sorted(first.pitches[first.onsets_q == 10].tolist()) == [62, 71]
    assert not first.tempo.stated and first.tempo.quarter_bpm == (100.0,)
    assert second.tempo.stated and second.tempo.quarter_bpm == (120.0,)
    assert first.notated_time_signature is None and second.notated_time_signature == "3/4"
    assert [t.index for t in read_score(path, tunes=[2])] == [2]
    with pytest.raises(InputError, match="no tune 3"):
        read_score(path, tunes=[3])


KERN = """!!!OTL: Kern waltz
**kern
*M3/4
*MM90
4c
4d
4e
2f
4g
4a
4b
4cc
2.dd
*-
"""


def test_kern_file(tmp_path):
    """Humdrum kern: notes, the notated time signature and the tempo (*MM) are read."""
    path = tmp_path / "waltz.krn"
    path.write_text(KERN)
    (tune,) = read_score(path)
    assert tune.title == "Kern waltz"
    assert tune.onsets_q.tolist() == [0, 1, 2, 3, 5, 6, 7, 8, 9]
    assert tune.notated_time_signature == "3/4"
    assert tune.tempo.quarter_bpm == (90.0,) and tune.tempo.stated


def test_kern_file_with_two_pieces(tmp_path):
    """A kern file holding two pieces gives two tunes."""
    path = tmp_path / "two.krn"
    path.write_text("!!!OTL: A\n**kern\n4c\n4d\n*-\n!!!OTL: B\n**kern\n4e\n2f\n*-\n")
    tunes = read_score(path)
    assert [(t.index, t.title, len(t.onsets_q)) for t in tunes] == [(1, "A", 2), (2, "B", 2)]


@pytest.mark.parametrize("suffix", [".musicxml", ".xml", ".mxl"])
def test_musicxml_suffixes(tmp_path, suffix):
    """Plain and compressed MusicXML read the same notes."""
    plain = barless_musicxml_of(AMAZING_GRACE, tmp_path / "grace.musicxml")
    target = tmp_path / f"copy{suffix}"
    score = music21.converter.parse(plain, forceSource=True)
    target.write_bytes(musicxml_bytes(score, compressed=suffix == ".mxl"))
    (tune,) = read_score(target)
    assert tune.durations_q.tolist() == [d for d, _ in AMAZING_GRACE.notes]
    assert tune.pitches.tolist() == [p for _, p in AMAZING_GRACE.notes]


def test_tempo_map_closed_form():
    """Seconds are quarters times 60 / quarter bpm, piece by piece; the median tempo is the one that lasts longest."""
    m = TempoMap((0.0, 4.0, 6.0), (60.0, 120.0, 240.0), True)
    assert m.seconds([0.0, 4.0, 5.0, 6.0, 10.0]).tolist() == [0.0, 4.0, 4.5, 5.0, 6.0]
    assert m.median_seconds_per_quarter(0.0, 7.0) == 1.0
    assert m.median_seconds_per_quarter(4.0, 20.0) == 0.25


# The notated classes of DESIGN.md section 6 (common practice): beats, division, grouping and bar in quarters.
@pytest.mark.parametrize("notated, beats, division, grouping, bar_q", [
    ("2/4", 2, 2, None, 2.0), ("2/2", 2, 2, None, 4.0), ("4/4", 4, 2, None, 4.0), ("4/2", 4, 2, None, 8.0),
    ("3/4", 3, 2, None, 3.0), ("3/2", 3, 2, None, 6.0), ("3/8", 1, 3, None, 1.5), ("6/8", 2, 3, None, 3.0),
    ("6/4", 2, 3, None, 6.0), ("9/8", 3, 3, None, 4.5), ("12/8", 4, 3, None, 6.0), ("5/4", 5, 2, None, 5.0),
    ("7/8", 3, None, (2, 2, 3), 3.5),
])
def test_time_signature_in_note_values(notated, beats, division, grouping, bar_q):
    """A reading's bar in quarters names its time signature as DESIGN.md section 6 does (common practice)."""
    assert score_time_signature(beats, division, grouping, bar_q) == notated


def test_score_suffixes():
    assert all(is_score_path(f"x{s}") for s in (".musicxml", ".xml", ".mxl", ".abc", ".krn"))
    assert not is_score_path("x.mid")


# ---- analysis in score time -------------------------------------------------------------------------

def _reading(result) -> tuple:
    d = result.to_dict()
    return (d["beats_per_bar"], d["beat_division"], d["grouping"], d["bar_quarters"], d["pickup_quarters"])


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_published_tunes_as_barless_scores(tmp_path, tune):
    """A published melody (two verses, as the MIDI tests play it) as a barless ABC score: the duple/triple family
    is right and the notated metre, with its bar in quarters, is among the first two readings."""
    path = tmp_path / f"{tune.name}.abc"
    path.write_text(barless_abc_of(tune, repeats=2))
    (analysis,) = analyse_score(path)
    r = analysis.result
    assert FAMILY[r.time_signature] == FAMILY[tune.time_signature]
    top2 = [(a.time_signature, a.bar_quarters) for a in r.alternatives[:2]]
    assert (tune.time_signature, tune.bar_quarters) in top2


def test_amazing_grace_pickup_and_quarters():
    """Amazing Grace in 3/4 with a one-beat pickup (Walker 1835): bar 3 quarters, beat 1, pickup 1; downbeats every bar."""
    tune = tune_from_notes(np.cumsum([0.0] + [d for d, _ in AMAZING_GRACE.notes])[:-1], [d for d, _ in AMAZING_GRACE.notes],
                           [p for _, p in AMAZING_GRACE.notes])
    r = analyse_tune(tune).result
    d = r.to_dict()
    assert (r.time_signature, d["bar_quarters"], d["beat_quarters"], d["pickup_quarters"]) == ("3/4", 3.0, 1.0, 1.0)
    # No tempo stated: 100 quarters a minute, so a bar lasts 1.8 s and the first downbeat is at 0.6 s.
    assert d["bar_s"] == pytest.approx(1.8) and r.downbeats_s[0] == pytest.approx(0.6)
    assert np.allclose(np.diff(r.downbeats_s), 1.8)
    assert d["tempo_stated"] is False and d["quarter_bpm"] == 100.0


def test_tempo_change_does_not_move_the_reading(tmp_path):
    """A tempo change in the score changes the seconds but not the reading, which lives in quarters."""
    plain = barless_musicxml_of(AMAZING_GRACE, tmp_path / "plain.musicxml", tempo_changes=[(0.0, 90)])
    half = len(AMAZING_GRACE.notes) // 2
    change_q = float(sum(d for d, _ in AMAZING_GRACE.notes[:half]))
    changed = barless_musicxml_of(AMAZING_GRACE, tmp_path / "changed.musicxml", tempo_changes=[(0.0, 90), (change_q, 45)])
    (a,), (b,) = analyse_score(plain), analyse_score(changed)
    assert _reading(a.result) == _reading(b.result)
    assert a.result.to_dict()["bar_quarters"] == 3.0
    # Seconds follow each section's tempo: 3 quarters at 90 per minute, then at 45.
    steps = np.diff(b.result.downbeats_s)
    assert steps[0] == pytest.approx(2.0) and steps[-1] == pytest.approx(4.0)
    assert b.tune.tempo.quarter_bpm == (90.0, 45.0)


def test_same_reading_from_musicxml_abc_and_midi(tmp_path):
    """The same melody from MusicXML, from ABC and from a MIDI rendering at 100 quarters a minute gives the same reading."""
    for published in TUNES:
        xml = barless_musicxml_of(published, tmp_path / f"{published.name}.musicxml", repeats=2)
        abc = tmp_path / f"{published.name}.abc"
        abc.write_text(barless_abc_of(published, repeats=2))
        (from_xml,), (from_abc,) = analyse_score(xml), analyse_score(abc)
        assert _reading(from_xml.result) == _reading(from_abc.result)
        midi = metertop.analyse(midi_rendering(from_abc.tune, tmp_path / f"{published.name}.mid"))
        d = from_abc.result.to_dict()
        assert (midi.beats_per_bar, midi.beat_division, midi.grouping) == (d["beats_per_bar"], d["beat_division"], d["grouping"])
        assert midi.bar_s == pytest.approx(d["bar_quarters"] * 0.6, rel=0.02)
        assert midi.downbeats_s[0] == pytest.approx(d["pickup_quarters"] * 0.6, abs=0.03)


# ---- writing back ----------------------------------------------------------------------------------

def test_bar_boundaries():
    """Boundaries hold both ends and every downbeat between them; a pickup makes the first measure short."""
    assert bar_boundaries(0.0, 10.0, 1.0, 3.0).tolist() == [0.0, 1.0, 4.0, 7.0, 10.0]
    assert bar_boundaries(0.0, 9.0, 3.0, 3.0).tolist() == [0.0, 3.0, 6.0, 9.0]


def _measures(path):
    score = music21.converter.parse(str(path), forceSource=True)
    part = score.parts[0]
    return score, list(part.getElementsByClass(music21.stream.Measure))


def _tied_notes(score):
    """(onset, duration, pitch) with tie chains merged, read back by music21's own tie handling."""
    merged = score.parts[0].stripTies()
    return [(round(float(n.offset), 6), round(float(n.quarterLength), 6), n.pitch.midi) for n in merged.flatten().notes]


def _notes(tune):
    return [(round(float(o), 6), round(float(d), 6), int(p)) for o, d, p in zip(tune.onsets_q, tune.durations_q, tune.pitches)]


def test_written_score_is_barred_with_ties_and_pickup(tmp_path):
    """Amazing Grace written in 3/4: a one-beat pickup bar, then a barline every 3 quarters; notes unchanged."""
    abc = tmp_path / "grace.abc"
    abc.write_text(barless_abc_of(AMAZING_GRACE))
    (analysis,) = analyse_score(abc)
    reading = analysis.reading(1)
    assert (reading.time_signature, reading.pickup_quarters) == ("3/4", 1.0)
    out = write_score(analysis.tune, reading, tmp_path / "grace.musicxml")
    score, measures = _measures(out)
    assert measures[0].timeSignature.ratioString == "3/4"
    assert measures[0].number == 0 and float(measures[0].duration.quarterLength) == 1.0
    # Full bars, and a last bar that completes the pickup.
    assert [float(m.duration.quarterLength) for m in measures[1:]] == [3.0] * (len(measures) - 2) + [2.0]
    assert _tied_notes(score) == _notes(analysis.tune)


def test_notes_across_a_barline_are_tied(tmp_path):
    """Written in 2/4 (a reading chosen by hand), the half notes that start off the beat are split at the barline and tied."""
    abc = tmp_path / "grace.abc"
    abc.write_text(barless_abc_of(AMAZING_GRACE))
    (analysis,) = analyse_score(abc)
    tune = analysis.tune
    reading = dataclasses.replace(analysis.reading(1), time_signature="2/4", beats_per_bar=2, bar_quarters=2.0,
                                  beat_quarters=1.0, pickup_quarters=0.0)
    crossing = int(np.sum(np.floor(tune.onsets_q / 2.0 + 1e-9) != np.ceil((tune.onsets_q + tune.durations_q) / 2.0 - 1e-9) - 1))
    assert crossing > 0
    score, measures = _measures(write_score(tune, reading, tmp_path / "grace-2-4.musicxml"))
    starts = sum(1 for m in measures for n in m.notes if n.tie is not None and n.tie.type == "start")
    assert starts == crossing
    assert all(float(m.duration.quarterLength) == 2.0 for m in measures[:-1])
    assert _tied_notes(score) == _notes(tune)


def test_input_barlines_and_time_signature_are_ignored(tmp_path):
    """The same tune barred in a wrong 4/4 gives the barless tune's reading, and reports the 4/4 it says."""
    abc = tmp_path / "grace.abc"
    abc.write_text(barless_abc_of(AMAZING_GRACE, repeats=2))
    (plain,) = analyse_score(abc)
    wrong = dataclasses.replace(plain.reading(1), time_signature="4/4", beats_per_bar=4, bar_quarters=4.0,
                                beat_quarters=1.0, pickup_quarters=0.0)
    barred = write_score(plain.tune, wrong, tmp_path / "grace-4-4.musicxml")
    (again,) = analyse_score(barred)
    assert again.tune.notated_time_signature == "4/4" and again.result.notated_time_signature == "4/4"
    assert _reading(again.result) == _reading(plain.result)
    assert again.result.time_signature == "3/4"


def _essen_barless(n_per_class: int = 2) -> list[tuple[str, str]]:
    """Barless ABC texts of Essen tunes from one training file (kinder0), a few per notated metre, in file order."""
    import essen
    from score_bench import barless_abc

    assert "kinder0" in essen.TRAIN_FILES
    texts = essen.split_abc_text((essen.essen_dir() / "kinder0.abc").read_text(encoding="utf-8"))
    picked, count = [], {}
    for text in texts:
        header, metres = essen.tune_header(text)
        metre, reason = essen.classify_metre(metres)
        if reason is not None or count.get(metre, 0) >= n_per_class:
            continue
        count[metre] = count.get(metre, 0) + 1
        picked.append((metre, barless_abc(text)))
    return picked


@pytest.fixture(scope="module")
def essen_barless():
    return _essen_barless()


def test_round_trip_on_essen_training_tunes(tmp_path, essen_barless):
    """Barless Essen tunes: analyse, write MusicXML, read back with music21: the time signature is the proposal's,
    there is a measure for each downbeat (and a pickup bar before the first), and the notes are unchanged."""
    assert len(essen_barless) >= 6
    for k, (_, text) in enumerate(essen_barless):
        (tune,) = read_abc_text(text)
        assert tune.notated_time_signature is None
        analysis = analyse_tune(tune)
        for rank in (1, 2):
            reading = analysis.reading(rank)
            out = write_score(tune, reading, tmp_path / f"tune{k}-{rank}.musicxml")
            score, measures = _measures(out)
            assert measures[0].timeSignature.ratioString == reading.time_signature
            downbeats_q = tune.first_q + reading.pickup_quarters + reading.bar_quarters * np.arange(len(measures) + 1)
            n_downbeats = int(np.sum(downbeats_q < tune.end_q - 1e-9))
            assert len(measures) == n_downbeats + (1 if reading.pickup_quarters > 0 else 0)
            starts = [float(m.offset) for m in measures]
            first_full = 1 if reading.pickup_quarters > 0 else 0
            assert np.allclose(starts[first_full:], downbeats_q[:n_downbeats])
            assert _tied_notes(score) == _notes(tune)
        if k == 0:
            assert analysis.result.to_dict()["time_signature"] == analysis.reading(1).time_signature


# ---- command line ---------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def two_tunes(tmp_path_factory):
    d = tmp_path_factory.mktemp("scores")
    path = d / "two.abc"
    path.write_text(barless_abc_of(ROW_YOUR_BOAT, index=1) + "\n" + barless_abc_of(AMAZING_GRACE, index=2, tempo="80"))
    return path


def test_cli_json_one_line_per_tune(two_tunes):
    """--json gives one line per tune with tune, title and the score keys."""
    res = _run("analyse", two_tunes, "--json")
    assert res.exit_code == 0, res.output
    lines = [json.loads(line) for line in res.stdout.strip().splitlines()]
    assert [(d["tune"], d["title"]) for d in lines] == [(1, "row_your_boat"), (2, "amazing_grace")]
    for d in lines:
        assert SCORE_KEYS <= set(d)
        assert d["bar_s"] == pytest.approx(d["bar_quarters"] * 60 / d["quarter_bpm"])
    assert lines[1]["quarter_bpm"] == 80.0 and lines[1]["tempo_stated"] is True


def test_cli_summary_and_tune_option(two_tunes):
    res = _run("analyse", two_tunes, "--tune", 2)
    assert res.exit_code == 0, res.output
    assert "tune 2: amazing_grace" in res.stdout and "in score time: bar" in res.stdout
    assert "tune 1" not in res.stdout


def test_cli_write_score_refuses_then_forces(two_tunes, tmp_path):
    """--write-score writes MusicXML, refuses to overwrite without --force, and --reading 2 writes the second reading."""
    out = tmp_path / "boat.musicxml"
    res = _run("analyse", two_tunes, "--tune", 1, "--write-score", out)
    assert res.exit_code == 0, res.output
    first = _measures(out)[1][0].timeSignature.ratioString
    before = out.read_bytes()
    res = _run("analyse", two_tunes, "--tune", 1, "--write-score", out, "--reading", 2)
    assert res.exit_code == 2 and "--force" in res.stderr
    assert out.read_bytes() == before
    res = _run("analyse", two_tunes, "--tune", 1, "--write-score", out, "--reading", 2, "--force", "--json")
    assert res.exit_code == 0, res.output
    line = json.loads(res.stdout.strip().splitlines()[0])
    assert _measures(out)[1][0].timeSignature.ratioString == line["alternatives"][1]["time_signature"]
    assert [f for f in tmp_path.iterdir() if f.name.startswith(".")] == []
    assert first == line["time_signature"]


@pytest.mark.parametrize("args, message", [
    (["--write-score", "{d}/x.musicxml"], "--tune N"),
    (["--tune", 1, "--write-score", "{d}/x.txt"], "MusicXML"),
    (["--tune", 1, "--reading", 2], "--write-score"),
    (["--tune", 1, "--reading", 0, "--write-score", "{d}/x.musicxml"], "counts from 1"),
    (["--tune", 1, "--reading", 99, "--write-score", "{d}/y.musicxml"], "no reading 99"),
])
def test_cli_write_score_bad_options(two_tunes, tmp_path, args, message):
    """Write options that cannot work give one line and exit code 2, and write nothing."""
    res = _run("analyse", two_tunes, *[str(a).format(d=tmp_path) for a in args])
    assert res.exit_code == 2
    assert message in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "x.musicxml").exists() and not (tmp_path / "y.musicxml").exists()


def test_cli_write_score_never_over_its_input(tmp_path):
    """The input score is never replaced, --force or not."""
    source = barless_musicxml_of(ROW_YOUR_BOAT, tmp_path / "in.musicxml")
    before = source.read_bytes()
    res = _run("analyse", source, "--write-score", source, "--force")
    assert res.exit_code == 2 and "input" in res.stderr
    assert source.read_bytes() == before


def test_cli_write_score_needs_a_score_input(tmp_path):
    midi = midi_rendering(tune_from_notes(np.arange(16.0), np.ones(16), np.full(16, 60)), tmp_path / "x.mid")
    res = _run("analyse", midi, "--write-score", tmp_path / "x.musicxml")
    assert res.exit_code == 2 and "MusicXML, ABC or kern" in res.stderr


BAD_INPUTS = {
    "malformed MusicXML": ("bad.musicxml", '<?xml version="1.0"?>\n<score-partwise><part id="P1"><measure number="1"><note>'),
    "not XML": ("bad.xml", "hello"),
    "ABC without a key line": ("nokey.abc", "X:1\nT:No key\nL:1/8\nGABc dedB\n"),
    "empty MusicXML score": ("empty.musicxml", '<?xml version="1.0"?><score-partwise version="4.0"><part-list/></score-partwise>'),
    "empty ABC tune": ("empty.abc", "X:1\nT:Nothing\nK:C\n"),
    "empty file": ("zero.krn", ""),
    "too few notes": ("short.abc", "X:1\nK:C\nCDE\n"),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_cli_bad_score_input(tmp_path, case):
    """Malformed MusicXML, ABC without a key line, an empty score: one line on stderr and exit code 2."""
    name, text = BAD_INPUTS[case]
    path = tmp_path / name
    path.write_text(text)
    res = _run("analyse", path)
    assert res.exit_code == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("metertop: error: ") and name in lines[0]
    assert "Traceback" not in res.output


def test_bad_tune_does_not_stop_the_others(tmp_path):
    """In a file of several tunes, a tune too short for a metre is reported and the others are analysed; exit code 2."""
    path = tmp_path / "mixed.abc"
    path.write_text(barless_abc_of(ROW_YOUR_BOAT, index=1) + "\nX:2\nT:Short\nK:C\nCDE\n")
    res = _run("analyse", path, "--json")
    assert res.exit_code == 2
    assert len(res.stdout.strip().splitlines()) == 1
    assert "tune 2" in res.stderr


def test_analyse_score_goes_on_after_a_bad_tune(tmp_path):
    """From Python, on_error receives the tune that fails and the others are analysed."""
    path = tmp_path / "mixed.abc"
    path.write_text("X:1\nT:Short\nK:C\nCDE\n\n" + barless_abc_of(ROW_YOUR_BOAT, index=2, repeats=2) + "\nX:3\nT:No key\nCDEF\n")
    errors = []
    analyses = analyse_score(path, on_error=lambda index, error: errors.append((index, str(error))))
    assert [a.tune.index for a in analyses] == [2]
    errors = dict(errors)
    assert sorted(errors) == [1, 3]
    assert "too few onsets" in errors[1] and "K:" in errors[3]
    with pytest.raises(InputError, match="tune 3 .No key.: no K:"):  # without on_error, the first failure raises
        analyse_score(path)


def test_missing_music21_says_how_to_install(tmp_path, monkeypatch):
    """Without the scores extra, reading a score is one line that names the extra."""
    path = tmp_path / "x.abc"
    path.write_text(barless_abc_of(ROW_YOUR_BOAT))
    monkeypatch.setitem(sys.modules, "music21", None)
    with pytest.raises(InputError, match=r"pip install 'metertop\[scores\]'"):
        read_score(path)
    res = _run("analyse", path)
    assert res.exit_code == 2 and "metertop[scores]" in res.stderr


def test_load_notes_points_score_files_elsewhere(tmp_path):
    path = tmp_path / "x.abc"
    path.write_text(barless_abc_of(ROW_YOUR_BOAT))
    with pytest.raises(InputError, match="analyse_score"):
        metertop.load_notes(path)


def test_barred_score_needs_a_parsed_score():
    tune = tune_from_notes(np.arange(16.0), np.ones(16))
    analysis = analyse_tune(tune)
    with pytest.raises(InputError, match="no score to write back"):
        barred_score(tune, analysis.reading(1))


def test_a_score_with_its_own_metre_is_checked_as_check_does():
    """A barred Essen training tune (kinder0, tune 1, notated 2/4; music21's corpus) carries `notated_check`, the verdict of metertop.check on its own time signature."""
    import os

    import music21

    from metertop.check import check_notated
    from metertop.scores import analyse_score

    path = os.path.join(os.path.dirname(music21.__file__), "corpus", "essenFolksong", "kinder0.abc")
    (sa,) = analyse_score(path, tunes=[1])
    d = sa.result.to_dict()
    assert d["notated_time_signature"] == "2/4"
    check = d["notated_check"]
    assert check["time_signature"] == "2/4"
    assert check["verdict"] in ("consistent", "ambiguous", "inconsistent")
    assert check == check_notated(sa.analysis, "2/4").to_dict()
