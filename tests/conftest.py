"""Shared helpers for the metertop tests.

Test inputs for the whole pipeline are published tunes in the public domain,
rendered from their notation: the notated metre, the bar lines and the beats
are then the ground truth, from outside the project. The notes below are
written down from memory of the standard notation (pitches and rhythm), and
each tune names where it was first published.

Rendering follows common practice for a plain performance:

- a bass note on every downbeat (the usual accompaniment of a folk tune or
  hymn); it can be switched off;
- flat velocities, so that loudness cannot give the answer away;
- onset jitter shared by the notes struck together (skilled players sit at
  about 10-15 ms SD; from memory: Madison 2001, Repp 2005);
- optional smooth tempo drift: a random walk in log tempo, smoothed over
  about 8 beats and scaled to a given SD (DESIGN.md, "Played versions").

All randomness comes from ``np.random.default_rng(seed)``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from metertop.load import NoteTable

REPO = Path(__file__).resolve().parent.parent
DEMO_DIR = REPO / "demo_rhythms"

# MIDI note numbers.
G2, G3 = 43, 55
C3 = 48
C4, D4, E4, F4, G4, A4, B4, C5, D5 = 60, 62, 64, 65, 67, 69, 71, 72, 74


@dataclass(frozen=True)
class Tune:
    """A notated melody: ``notes`` are ``(duration_quarters, midi_pitch)`` in order."""

    name: str
    source: str
    time_signature: str
    beats_per_bar: int
    beat_division: int
    bar_quarters: float
    beat_quarters: float
    pickup_quarters: float
    bass_pitch: int
    notes: tuple

    @property
    def length_quarters(self) -> float:
        return float(sum(d for d, _ in self.notes))


# Beethoven, Symphony No. 9 in D minor, op. 125 (1824), finale: the "Ode to
# Joy" theme, 4/4, transposed to C. From memory.
ODE_TO_JOY = Tune(
    "ode_to_joy", "Beethoven, Symphony No. 9, op. 125 (1824), finale theme; from memory", "4/4", 4, 2, 4.0, 1.0, 0.0, C3,
    (
        (1, E4), (1, E4), (1, F4), (1, G4), (1, G4), (1, F4), (1, E4), (1, D4),
        (1, C4), (1, C4), (1, D4), (1, E4), (1.5, E4), (0.5, D4), (2, D4),
        (1, E4), (1, E4), (1, F4), (1, G4), (1, G4), (1, F4), (1, E4), (1, D4),
        (1, C4), (1, C4), (1, D4), (1, E4), (1.5, D4), (0.5, C4), (2, C4),
        (1, D4), (1, D4), (1, E4), (1, C4), (1, D4), (0.5, E4), (0.5, F4), (1, E4), (1, C4),
        (1, D4), (0.5, E4), (0.5, F4), (1, E4), (1, D4), (1, C4), (1, D4), (2, G3),
        (1, E4), (1, E4), (1, F4), (1, G4), (1, G4), (1, F4), (1, E4), (1, D4),
        (1, C4), (1, C4), (1, D4), (1, E4), (1.5, D4), (0.5, C4), (2, C4),
    ),
)

# "Amazing Grace" to the hymn tune New Britain (as printed in Walker's
# Southern Harmony, 1835), 3/4 with a one-beat pickup, in G. Long notes fall
# on the downbeats. From memory.
AMAZING_GRACE = Tune(
    "amazing_grace", "hymn tune New Britain (Walker, Southern Harmony, 1835); from memory", "3/4", 3, 2, 3.0, 1.0, 1.0, G2,
    (
        (1, D4),
        (2, G4), (0.5, B4), (0.5, G4), (2, B4), (1, A4), (2, G4), (1, E4), (2, D4), (1, D4),
        (2, G4), (0.5, B4), (0.5, G4), (2, B4), (0.5, A4), (0.5, B4), (3, D5), (2, D5), (1, B4),
        (2, D5), (0.5, B4), (0.5, G4), (2, B4), (1, A4), (2, G4), (1, E4), (2, D4), (1, D4),
        (2, G4), (0.5, B4), (0.5, G4), (2, B4), (1, A4), (3, G4), (2, G4),
    ),
)

# "Row, Row, Row Your Boat" (Eliphalet Oram Lyte, The Franklin Square Song
# Collection, 1881), 6/8: two dotted-quarter beats a bar. From memory.
ROW_YOUR_BOAT = Tune(
    "row_your_boat", "E. O. Lyte, Franklin Square Song Collection (1881); from memory", "6/8", 2, 3, 3.0, 1.5, 0.0, C3,
    (
        (1.5, C4), (1.5, C4), (1, C4), (0.5, D4), (1.5, E4), (1, E4), (0.5, D4), (1, E4), (0.5, F4), (3, G4),
        (0.5, C5), (0.5, C5), (0.5, C5), (0.5, G4), (0.5, G4), (0.5, G4),
        (0.5, E4), (0.5, E4), (0.5, E4), (0.5, C4), (0.5, C4), (0.5, C4),
        (1, G4), (0.5, F4), (1, E4), (0.5, D4), (3, C4),
    ),
)

TUNES = (ODE_TO_JOY, AMAZING_GRACE, ROW_YOUR_BOAT)


@dataclass(frozen=True)
class Rendering:
    """A performed tune: its notes and the true beats and downbeats in seconds."""

    tune: Tune
    notes: NoteTable
    beats_s: np.ndarray
    downbeats_s: np.ndarray
    bar_s: float
    beat_s: float


def drift_curve(n_beats: int, sd: float, corr_beats: float, rng: np.random.Generator) -> np.ndarray:
    """Log-tempo deviation per beat: a random walk smoothed over ``corr_beats`` and scaled to SD ``sd``."""
    if sd == 0:
        return np.zeros(n_beats)
    half = max(int(round(corr_beats)), 1)
    walk = np.cumsum(rng.normal(size=n_beats + 2 * half))
    kernel = np.hanning(2 * half + 3)[1:-1]
    smooth = np.convolve(walk, kernel / kernel.sum(), mode="valid")[:n_beats]
    dev = smooth - smooth.mean()
    return dev * (sd / dev.std())


def render_tune(tune: Tune, quarter_s: float = 0.5, *, repeats: int = 2, seed: int = 0, jitter_s: float = 0.012,
                drift_sd: float = 0.0, drift_beats: float = 8.0, bass: bool = True, start_s: float = 0.5) -> Rendering:
    """Play ``tune`` ``repeats`` times at ``quarter_s`` seconds a quarter note (see the module notes)."""
    rng = np.random.default_rng(seed)
    # Note positions in quarters.
    pos, dur, pitch, track = [], [], [], []
    q = 0.0
    for _ in range(repeats):
        for d, p in tune.notes:
            pos.append(q), dur.append(d), pitch.append(p), track.append(0)
            q += d
    total_q = q
    last_q = pos[-1]
    if bass:
        b = tune.pickup_quarters
        while b <= last_q + 1e-9:
            pos.append(b), dur.append(tune.bar_quarters), pitch.append(tune.bass_pitch), track.append(1)
            b += tune.bar_quarters
    notes, to_s = _perform(pos, dur, pitch, track, total_q, tune.beat_quarters, quarter_s, rng, jitter_s, drift_sd, drift_beats, start_s)
    beat_q = np.arange(tune.pickup_quarters % tune.beat_quarters, last_q + 1e-9, tune.beat_quarters)
    down_q = np.arange(tune.pickup_quarters, last_q + 1e-9, tune.bar_quarters)
    return Rendering(tune, notes, to_s(beat_q), to_s(down_q), tune.bar_quarters * quarter_s, tune.beat_quarters * quarter_s)


def _perform(pos, dur, pitch, track, total_q, beat_q, quarter_s, rng, jitter_s, drift_sd, drift_beats, start_s):
    """Notes at score positions (quarters) played on a drifting clock with jitter; and the clock (quarters to seconds)."""
    pos = np.asarray(pos, dtype=float)
    dur = np.asarray(dur, dtype=float)

    # The time map: seconds at each beat boundary, linear within a beat.
    n_beats = int(np.ceil(total_q / beat_q)) + 2
    dev = drift_curve(n_beats, drift_sd, drift_beats, rng)
    knots_q = np.arange(n_beats + 1) * beat_q
    knots_s = start_s + np.concatenate([[0.0], np.cumsum(beat_q * quarter_s * np.exp(dev))])

    def to_s(x):
        return np.interp(x, knots_q, knots_s)

    # Jitter shared by notes at the same notated position, plus a little of their own.
    uniq, inv = np.unique(np.round(pos, 6), return_inverse=True)
    shared = rng.normal(0.0, jitter_s, len(uniq)) if jitter_s else np.zeros(len(uniq))
    own = rng.normal(0.0, jitter_s / 4, len(pos)) if jitter_s else np.zeros(len(pos))
    onsets = to_s(pos) + shared[inv] + own
    ends = to_s(pos + dur)
    durations = np.maximum(ends - onsets, 0.01)

    order = np.lexsort((np.asarray(pitch), onsets))
    n = len(onsets)
    notes = NoteTable(
        onsets_s=onsets[order],
        durations_s=durations[order],
        pitches=np.asarray(pitch, dtype=np.int64)[order],
        velocities=np.full(n, 80.0),
        weights=np.full(n, np.nan),
        is_drum=np.zeros(n, dtype=bool),
        track=np.asarray(track, dtype=np.int64)[order],
        source="midi",
    )
    return notes, to_s


# Amazing Grace in whole bars, for pieces that change metre: the pickup is
# left out and the last note held for a full bar.
AMAZING_GRACE_BARS = Tune(
    "amazing_grace_bars", AMAZING_GRACE.source + "; pickup left out, last note held a full bar", "3/4", 3, 2, 3.0, 1.0, 0.0, G2,
    AMAZING_GRACE.notes[1:-1] + ((3, G4),),
)


@dataclass(frozen=True)
class SectionRendering:
    """Tunes played one after the other at one quarter-note tempo: a piece whose metre changes at each new tune."""

    notes: NoteTable
    time_signatures: tuple
    starts_s: np.ndarray  # the first downbeat of each section
    downbeats_s: np.ndarray


def render_sections(tunes, quarter_s: float = 0.5, *, seed: int = 0, jitter_s: float = 0.012, drift_sd: float = 0.0,
                    drift_beats: float = 8.0, start_s: float = 0.5) -> SectionRendering:
    """Play whole-bar tunes (no pickups) back to back, each with its bass on its own downbeats (see render_tune)."""
    rng = np.random.default_rng(seed)
    pos, dur, pitch, track, down_q, starts_q = [], [], [], [], [], []
    q = 0.0
    for tune in tunes:
        assert tune.pickup_quarters == 0 and tune.length_quarters % tune.bar_quarters == 0, tune.name
        starts_q.append(q)
        for d, p in tune.notes:
            pos.append(q), dur.append(d), pitch.append(p), track.append(0)
            q += d
        for b in np.arange(starts_q[-1], q - 1e-9, tune.bar_quarters):
            pos.append(b), dur.append(tune.bar_quarters), pitch.append(tune.bass_pitch), track.append(1)
            down_q.append(b)
    notes, to_s = _perform(pos, dur, pitch, track, q, 0.5, quarter_s, rng, jitter_s, drift_sd, drift_beats, start_s)
    return SectionRendering(notes, tuple(t.time_signature for t in tunes), to_s(np.asarray(starts_q)), to_s(np.asarray(down_q)))


def write_midi(path, tracks, *, time_signature=(4, 4), tempo_bpm: float = 120.0) -> Path:
    """Write a type-1 MIDI file with pretty_midi.

    ``tracks`` is a list of ``(name, program, is_drum, notes)`` with notes as
    ``(start_s, end_s, pitch, velocity)``.
    """
    import pretty_midi

    pm = pretty_midi.PrettyMIDI(initial_tempo=tempo_bpm)
    if time_signature is not None:
        pm.time_signature_changes.append(pretty_midi.TimeSignature(time_signature[0], time_signature[1], 0.0))
    for name, program, is_drum, notes in tracks:
        inst = pretty_midi.Instrument(program=program, is_drum=is_drum, name=name)
        for start, end, p, v in notes:
            inst.notes.append(pretty_midi.Note(velocity=int(v), pitch=int(p), start=float(start), end=float(end)))
        pm.instruments.append(inst)
    path = Path(path)
    pm.write(str(path))
    return path


def rendering_to_midi(path, rendering: Rendering, *, time_signature=None) -> Path:
    """Write a rendered tune as a MIDI file: melody (track 0) and bass (track 1)."""
    nt = rendering.notes
    tracks = []
    for k, (name, program) in enumerate((("melody", 73), ("bass", 32))):
        sel = nt.track == k
        if np.any(sel):
            notes = [(s, s + d, p, v) for s, d, p, v in zip(nt.onsets_s[sel], nt.durations_s[sel], nt.pitches[sel], nt.velocities[sel])]
            tracks.append((name, program, False, notes))
    return write_midi(path, tracks, time_signature=time_signature)


@pytest.fixture(scope="session")
def ode_rendering() -> Rendering:
    return render_tune(ODE_TO_JOY, 0.5, seed=11)


@pytest.fixture(scope="session")
def grace_rendering() -> Rendering:
    return render_tune(AMAZING_GRACE, 0.45, seed=12)


@pytest.fixture(scope="session")
def boat_rendering() -> Rendering:
    return render_tune(ROW_YOUR_BOAT, 0.3, seed=13)


def essen_training_tune(source_file: str, index: int):
    """One tune of the Essen folksong collection as music21 ships it (an open dataset on PyPI), read with the
    benchmark's corpus reader (bench/essen.py); only tunes from training files of the fixed split."""
    import sys

    bench = str(REPO / "bench")
    if bench not in sys.path:
        sys.path.insert(0, bench)
    import essen  # needs music21: the bench extra, which make test installs
    from common import ScoreTune

    assert source_file in essen.TRAIN_FILES
    text = (essen.essen_dir() / f"{source_file}.abc").read_text(encoding="utf-8")
    record = essen.tune_record(essen.split_abc_text(text)[index - 1], source_file, index)
    record.pop("restored_bars", None)
    return ScoreTune(**record)


def played_essen_tune(source_file: str, index: int, seed: int = 1):
    """An Essen training tune rendered as the benchmark plays it (bench/render.py: drift, jitter, downbeat accents)."""
    tune = essen_training_tune(source_file, index)
    from render import render  # bench/ is on the path now

    return render(tune, "played", seed=seed)


# "Die Todesbraut" (Essen collection, ballad20, tune 100): a 7/8 ballad from a training file.
SEVEN_EIGHT = ("ballad20", 100)


@pytest.fixture(scope="session")
def seven_eight_played():
    return played_essen_tune(*SEVEN_EIGHT, seed=1)
