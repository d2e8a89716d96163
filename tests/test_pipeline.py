"""The whole analysis (metertop.pipeline): the main job against notated tunes, invariances, and the output contract.

The tunes are published melodies rendered from their notation (see
conftest.py); their notated metre, bar lines and beats are the reference.
Beat and downbeat accuracy use mir_eval's F-measure at +-70 ms, the
reference implementation (Dixon 2006; Davies, Degara & Plumbley 2009).
"""

from __future__ import annotations

import dataclasses
import json

import mir_eval
import numpy as np
import pretty_midi
import pytest

import metertop
from metertop import InputError, MetreResult, analyse, load_notes, notes_from_onsets
from metertop.events import merge_events

from conftest import AMAZING_GRACE, ODE_TO_JOY, ROW_YOUR_BOAT, TUNES, render_tune, rendering_to_midi

TEMPI = {ODE_TO_JOY.name: 0.5, AMAZING_GRACE.name: 0.45, ROW_YOUR_BOAT.name: 0.3}

# DESIGN.md section 5: the keys every JSON object must carry.
TOP_KEYS = {"metertop_version", "time_signature", "beats_per_bar", "beat_division", "grouping", "bar_s", "beat_s",
            "tempo_bpm", "downbeats_s", "beats_s", "levels", "confidence", "alternatives", "segments"}
LEVEL_KEYS = {"name", "period_s", "phase_s", "score", "confidence"}
READING_KEYS = {"rank", "time_signature", "beats_per_bar", "beat_division", "grouping", "bar_s", "phase_s", "score"}
SEGMENT_KEYS = {"start_s", "end_s", "time_signature"}

FAMILY = {"2/4": "duple", "4/4": "duple", "6/8": "duple", "12/8": "duple", "3/4": "triple", "9/8": "triple"}


def _f(ref, est) -> float:
    return mir_eval.onset.f_measure(np.asarray(ref), np.asarray(est), window=0.07)[0]


def _moved(notes, scale=1.0, offset=0.0):
    return dataclasses.replace(notes, onsets_s=notes.onsets_s * scale + offset, durations_s=notes.durations_s * scale)


# ---- the main job, against the notation ----

@pytest.mark.parametrize("seed", [1, 2])
@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_played_tune_metre_matches_notation(tune, seed):
    """A tune played with 4% tempo drift and 12 ms jitter: notated time signature, bar within 5%, downbeat and beat F >= 0.8 (mir_eval)."""
    played = render_tune(tune, TEMPI[tune.name], seed=seed, drift_sd=0.04)
    r = analyse(played.notes)
    assert r.time_signature == tune.time_signature
    assert (r.beats_per_bar, r.beat_division, r.grouping) == (tune.beats_per_bar, tune.beat_division, None)
    true_bar = float(np.median(np.diff(played.downbeats_s)))
    assert r.bar_s == pytest.approx(true_bar, rel=0.05)
    assert _f(played.downbeats_s, r.downbeats_s) >= 0.8
    assert _f(played.beats_s, r.beats_s) >= 0.8


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_melody_alone_family_and_top2(tune):
    """The melody alone (no bass): the duple/triple family is right and the notated metre is among the first two readings."""
    played = render_tune(tune, TEMPI[tune.name], seed=4, bass=False)
    r = analyse(played.notes)
    assert FAMILY.get(r.time_signature) == FAMILY[tune.time_signature]
    assert tune.time_signature in [a.time_signature for a in r.alternatives[:2]]


# A metronome that accents every n-th click is heard in n/4 (common practice).
@pytest.mark.parametrize("closing", [True, False], ids=["closing-click", "no-closing-click"])
@pytest.mark.parametrize("n, bpm", [(2, 100), (2, 132), (3, 80), (3, 120), (3, 150), (4, 90), (4, 120)])
def test_accented_click_track(n, bpm, closing):
    """Ten bars of clicks with every n-th click accented (with or without a closing click) read as n/4 on the accents (common practice)."""
    k = 10 * n + (1 if closing else 0)
    t = 0.5 + np.arange(k) * 60.0 / bpm
    w = np.where(np.arange(k) % n == 0, 1.0, 0.5)
    r = analyse(notes_from_onsets(t, w))
    assert r.time_signature == f"{n}/4"
    assert r.bar_s == pytest.approx(n * 60.0 / bpm, rel=0.05)
    assert _f(t[::n], r.downbeats_s) >= 0.8
    assert 0.0 <= r.confidence <= 1.0


def test_analyse_reads_a_midi_file(tmp_path, grace_rendering):
    """A rendered tune written as MIDI and analysed from the path gives the notated metre and its time signature event."""
    path = rendering_to_midi(tmp_path / "grace.mid", grace_rendering, time_signature=(3, 4))
    r = analyse(path)
    assert r.source == "midi"
    assert r.notated_time_signature == "3/4"
    assert r.time_signature == "3/4"


# ---- invariances (STYLE.md, "Tests come in four kinds") ----

@pytest.mark.parametrize("offset", [0.37, 7.0])
@pytest.mark.parametrize("fixture", ["ode_rendering", "grace_rendering", "boat_rendering"])
def test_shift_moves_only_phases_and_times(fixture, offset, request):
    """Shifting every onset by a constant shifts every beat, downbeat and phase by it (1 ms) and changes nothing else."""
    rendering = request.getfixturevalue(fixture)
    a = analyse(rendering.notes)
    b = analyse(_moved(rendering.notes, offset=offset))
    assert b.time_signature == a.time_signature
    assert (b.beats_per_bar, b.beat_division, b.grouping) == (a.beats_per_bar, a.beat_division, a.grouping)
    assert len(b.beats_s) == len(a.beats_s) and len(b.downbeats_s) == len(a.downbeats_s)
    np.testing.assert_allclose(b.beats_s, a.beats_s + offset, atol=1e-3)
    np.testing.assert_allclose(b.downbeats_s, a.downbeats_s + offset, atol=1e-3)
    assert b.bar_s == pytest.approx(a.bar_s, abs=1e-3)
    assert b.beat_s == pytest.approx(a.beat_s, abs=1e-3)
    assert b.confidence == pytest.approx(a.confidence, abs=1e-6)
    assert [lv.name for lv in b.levels] == [lv.name for lv in a.levels]
    for la, lb in zip(a.levels, b.levels):
        assert lb.phase_s == pytest.approx(la.phase_s + offset, abs=1e-3)
        assert lb.period_s == pytest.approx(la.period_s, abs=1e-3)
    # The same readings with the same scores; readings tied in score may swap places.
    def readings(r, shift):
        return sorted((round(x.score, 6), x.time_signature, round(x.phase_s - shift, 3)) for x in r.alternatives)

    assert readings(b, offset) == readings(a, 0.0)


@pytest.mark.parametrize("k", [0.8, 0.9, 1.1, 1.25])
@pytest.mark.parametrize("fixture", ["ode_rendering", "grace_rendering", "boat_rendering"])
def test_scaling_time_scales_periods(fixture, k, request):
    """Scaling every time by k scales bar_s, beat_s and every level period by k (3%) and keeps the metre."""
    rendering = request.getfixturevalue(fixture)
    a = analyse(rendering.notes)
    b = analyse(_moved(rendering.notes, scale=k))
    assert b.time_signature == a.time_signature
    assert b.bar_s == pytest.approx(k * a.bar_s, rel=0.03)
    assert b.beat_s == pytest.approx(k * a.beat_s, rel=0.03)
    assert [lv.name for lv in b.levels if lv.name != "hypermeasure"] == [lv.name for lv in a.levels if lv.name != "hypermeasure"]
    for la, lb in zip(a.levels, b.levels):
        if la.name == lb.name:
            assert lb.period_s == pytest.approx(k * la.period_s, rel=0.03), la.name


def _same(a: MetreResult, b: MetreResult) -> None:
    assert b.time_signature == a.time_signature
    np.testing.assert_array_equal(b.beats_s, a.beats_s)
    np.testing.assert_array_equal(b.downbeats_s, a.downbeats_s)
    assert b.confidence == a.confidence
    assert b.n_events == a.n_events


def test_exact_duplicates_in_midi_change_nothing(tmp_path, ode_rendering):
    """A MIDI file whose melody is doubled note for note by a second track gives exactly the same result."""
    plain = rendering_to_midi(tmp_path / "plain.mid", ode_rendering)
    pm = pretty_midi.PrettyMIDI(str(plain))
    copy = pretty_midi.Instrument(program=40, name="doubling")
    copy.notes = [pretty_midi.Note(n.velocity, n.pitch, n.start, n.end) for n in pm.instruments[0].notes]
    pm.instruments.append(copy)
    doubled = tmp_path / "doubled.mid"
    pm.write(str(doubled))
    assert len(load_notes(doubled)) == len(load_notes(plain)) == len(ode_rendering.notes)
    _same(analyse(plain), analyse(doubled))


def test_exact_duplicates_in_onsets_change_nothing(grace_rendering):
    """Repeating some onset times in an array changes nothing."""
    t = np.unique(grace_rendering.notes.onsets_s)
    extra = np.concatenate([t, t[::3], t[5:9]])
    _same(analyse(t), analyse(extra))


def test_row_order_of_onset_list_does_not_matter(tmp_path, grace_rendering):
    """A CSV onset list read in shuffled row order gives exactly the result of the sorted list."""
    nt = grace_rendering.notes
    rows = [f"{float(t)!r},{1.0 + 0.5 * (tr == 1)},{int(p)}" for t, tr, p in zip(nt.onsets_s, nt.track, nt.pitches)]
    header = "time_s,weight,pitch\n"
    ordered = tmp_path / "ordered.csv"
    ordered.write_text(header + "\n".join(rows) + "\n")
    rng = np.random.default_rng(17)
    shuffled = tmp_path / "shuffled.csv"
    shuffled.write_text(header + "\n".join(rows[i] for i in rng.permutation(len(rows))) + "\n")
    _same(analyse(ordered), analyse(shuffled))


def test_same_result_from_path_table_and_array(tmp_path):
    """An onset list given as a path, as a NoteTable or as an array of seconds gives the same result."""
    played = render_tune(ODE_TO_JOY, 0.5, seed=8)
    t = np.unique(played.notes.onsets_s)
    path = tmp_path / "onsets.txt"
    path.write_text("\n".join(repr(float(x)) for x in t) + "\n")
    a, b, c = analyse(path), analyse(notes_from_onsets(t)), analyse(list(t))
    _same(a, b)
    _same(a, c)


# ---- the output contract ----

def test_to_dict_carries_every_key_and_is_json(ode_rendering):
    """``to_dict()`` has every key of DESIGN.md section 5 with the right types, and survives strict JSON."""
    r = analyse(ode_rendering.notes)
    d = r.to_dict()
    assert TOP_KEYS <= d.keys()
    assert d["metertop_version"] == metertop.__version__
    assert isinstance(d["beats_per_bar"], int)
    assert d["beat_division"] in (2, 3, None)
    assert d["grouping"] is None or all(isinstance(g, int) for g in d["grouping"])
    assert isinstance(d["downbeats_s"], list) and isinstance(d["beats_s"], list)
    assert d["levels"] and all(LEVEL_KEYS <= lv.keys() for lv in d["levels"])
    names = [lv["name"] for lv in d["levels"]]
    order = ["subdivision", "beat", "bar", "hypermeasure"]
    assert names == [n for n in order if n in names] and {"beat", "bar"} <= set(names)
    periods = [lv["period_s"] for lv in d["levels"]]
    assert periods == sorted(periods)  # fastest to slowest
    assert d["alternatives"] and all(READING_KEYS <= a.keys() for a in d["alternatives"])
    assert [a["rank"] for a in d["alternatives"]] == list(range(1, len(d["alternatives"]) + 1))
    assert d["alternatives"][0]["time_signature"] == d["time_signature"]
    assert d["segments"] and all(SEGMENT_KEYS <= s.keys() for s in d["segments"])
    assert 0.0 <= d["confidence"] <= 1.0
    text = json.dumps(d, allow_nan=False)
    assert json.loads(text)["time_signature"] == r.time_signature


@pytest.mark.parametrize("fixture", ["ode_rendering", "grace_rendering", "boat_rendering"])
def test_tempo_is_sixty_over_beat(fixture, request):
    """tempo_bpm is 60 / beat_s, and beat and bar medians agree with the beat and downbeat lists."""
    r = analyse(request.getfixturevalue(fixture).notes)
    assert r.tempo_bpm == pytest.approx(60.0 / r.beat_s)
    assert r.beat_s == pytest.approx(float(np.median(np.diff(r.beats_s))))
    assert r.bar_s == pytest.approx(float(np.median(np.diff(r.downbeats_s))))
    assert np.all(np.diff(r.beats_s) > 0) and np.all(np.diff(r.downbeats_s) > 0)
    assert np.all(np.isin(np.round(r.downbeats_s, 9), np.round(r.beats_s, 9)))  # every downbeat is a beat


def test_levels_and_segment_agree_with_beats(grace_rendering):
    """The bar and beat levels start at the first downbeat and beat; one segment spans the events with the chosen metre."""
    r = analyse(grace_rendering.notes)
    assert r.level("bar").phase_s == pytest.approx(r.downbeats_s[0], abs=1e-6)
    assert r.level("beat").phase_s == pytest.approx(r.beats_s[0], abs=1e-6)
    assert r.level("bar").period_s == pytest.approx(r.bar_s, rel=0.01)
    assert r.level("beat").period_s == pytest.approx(r.beat_s, rel=0.01)
    assert len(r.segments) == 1
    seg = r.segments[0]
    assert seg.time_signature == r.time_signature
    events = merge_events(grace_rendering.notes)
    assert seg.start_s == pytest.approx(events.times_s[0])
    assert seg.end_s == pytest.approx(events.times_s[-1])
    assert r.n_events == len(events)
    for lv in r.levels:
        assert 0.0 <= lv.confidence <= 1.0 + 1e-12


@pytest.mark.parametrize(
    "onsets",
    [np.arange(7) * 0.5, np.arange(8) * 0.1, [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 3.0]],
    ids=["seven-onsets", "eight-in-0.7s", "two-distinct"],
)
def test_too_few_onsets(onsets):
    """Too few onsets, or too short a stretch, is an InputError."""
    with pytest.raises(InputError):
        analyse(np.asarray(onsets, dtype=float))


def test_unusable_source_is_an_input_error():
    """A source that is neither a path, a NoteTable nor numbers is an InputError."""
    with pytest.raises(InputError):
        analyse({"not": "onsets"})
