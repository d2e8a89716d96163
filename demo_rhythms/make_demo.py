"""Generate the bundled demo rhythms for metertop.

The demo set is an invented scenario: the *Tidewater Band* of Kestrel Quay,
a fictional harbour town, playing at its (equally fictional) Lantern Tide
festival.  Every piece is composed here from small rhythm cells, then
"performed" with a drifting tempo, onset jitter and velocity noise.  The
true metre of each file is written beside it as ``<stem>.truth.json``.

Run ``python demo_rhythms/make_demo.py [--out DIR] [--check]``.  All
randomness comes from fixed seeds, so the output is the same on every run
(for the phone recording, its decoded audio: the Ogg container gets a random
stream serial number); the script only (re)writes its own output files. The
recording needs soundfile (the ``audio`` extra) and ``bench/synth.py``.
"""

from __future__ import annotations

import argparse
import csv
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pretty_midi

# ---------------------------------------------------------------------------
# Performance settings shared by all pieces
# ---------------------------------------------------------------------------

LEAD_IN_S = 0.5  # silence before the first downbeat
TEMPO_SD = 0.025  # stationary SD of the log tempo deviation (about 2.5 %)
TEMPO_CORR_BEATS = 8.0  # correlation length of the tempo drift, in beats
JITTER_SD_S = 0.012  # onset jitter shared by notes struck together
JITTER_EXTRA_SD_S = 0.003  # small extra jitter for each note of a chord
DOWNBEAT_ACCENT = 8  # velocity boost on bar starts (kept below +10)
BEAT_ACCENT = 3  # velocity boost on the other beats
VELOCITY_NOISE_SD = 6.0
DRUM_NOTE_S = 0.12  # sounding length written for drum hits

# General MIDI drum keys used below.
KICK, SNARE, CLOSED_HAT, OPEN_HAT, CRASH = 36, 38, 42, 46, 49
LOW_TOM, MID_TOM, HIGH_TOM = 45, 47, 50
TAMBOURINE, HIGH_CONGA, LOW_CONGA, MARACAS = 54, 63, 64, 70


# ---------------------------------------------------------------------------
# Score representation
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Metre:
    """A bar layout in quarter-note units.

    Parameters
    ----------
    label : str
        Time signature as written, e.g. ``"7/8"``.
    beat_qn : tuple of float
        Length of each beat of the bar, in quarter notes.
    division : int or None
        Tatums per beat (2 simple, 3 compound, None if the beats are uneven).
    grouping : list of int or None
        Tatums per beat for uneven metres, e.g. ``[2, 2, 3]``.
    """

    label: str
    beat_qn: tuple[float, ...]
    division: int | None
    grouping: list[int] | None = None

    @property
    def bar_qn(self) -> float:
        """Bar length in quarter notes."""
        return float(sum(self.beat_qn))

    @property
    def beat_offsets(self) -> np.ndarray:
        """Start of each beat within the bar, in quarter notes."""
        return np.concatenate([[0.0], np.cumsum(self.beat_qn)[:-1]])

    def beat_positions(self, n_bars: int) -> np.ndarray:
        """Beat starts of ``n_bars`` bars, in quarter notes from the start."""
        starts = np.arange(n_bars)[:, None] * self.bar_qn
        return (starts + self.beat_offsets[None, :]).ravel()


METRES = {
    "2/4": Metre("2/4", (1.0, 1.0), 2),
    "3/4": Metre("3/4", (1.0, 1.0, 1.0), 2),
    "4/4": Metre("4/4", (1.0, 1.0, 1.0, 1.0), 2),
    "5/4": Metre("5/4", (1.0,) * 5, 2),
    "6/8": Metre("6/8", (1.5, 1.5), 3),
    "12/8": Metre("12/8", (1.5,) * 4, 3),
    "7/8": Metre("7/8", (1.0, 1.0, 1.5), None, [2, 2, 3]),
}


@dataclass(frozen=True)
class Part:
    """One instrument of a piece.

    Parameters
    ----------
    name : str
        Track name written to the MIDI file.
    program : int
        General MIDI program (ignored for drums).
    is_drum : bool
        Whether the part goes on the drum channel.
    legato : float
        Fraction of the written length that actually sounds.
    """

    name: str
    program: int = 0
    is_drum: bool = False
    legato: float = 0.9


@dataclass(frozen=True)
class ScoreNote:
    """A note in score time (quarter notes from the first downbeat)."""

    part: str
    onset_qn: float
    dur_qn: float
    pitch: int
    velocity: int


@dataclass
class Piece:
    """A composed piece plus everything needed to write its truth file.

    ``n_bars`` full bars are played; if ``landing`` is set the piece ends
    with a closing hit on the downbeat of bar ``n_bars + 1``, which is then
    the last beat and downbeat of the truth.
    """

    stem: str
    metre: Metre
    quarter_bpm: float
    n_bars: int
    seed: int
    description: str
    hypermeasure_bars: int | None
    parts: list[Part]
    notated_time_signature: str | None = None
    landing: bool = True
    as_onset_csv: bool = False
    notes: list[ScoreNote] = field(default_factory=list)

    def add(self, part: str, onset_qn: float, dur_qn: float, pitch: int, velocity: int) -> None:
        """Append one note in score time."""
        self.notes.append(ScoreNote(part, float(onset_qn), float(dur_qn), int(pitch), int(velocity)))


# ---------------------------------------------------------------------------
# Performance: tempo drift, jitter, accents
# ---------------------------------------------------------------------------


class TimeMap:
    """Map score time (quarter notes) to seconds along a drifting tempo.

    The log deviation of the quarter-note period follows an AR(1) process
    sampled at the beats (a mean-reverting random walk), interpolated
    linearly between beats and integrated on a fine grid.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of randomness.
    knots_qn : numpy.ndarray
        Beat positions in quarter notes, ascending, covering the piece.
    quarter_s : float
        Nominal quarter-note period in seconds.
    """

    GRID_QN = 1.0 / 96.0

    def __init__(self, rng: np.random.Generator, knots_qn: np.ndarray, quarter_s: float) -> None:
        phi = np.exp(-1.0 / TEMPO_CORR_BEATS)
        innovations = rng.normal(0.0, TEMPO_SD * np.sqrt(1.0 - phi**2), len(knots_qn))
        dev = np.empty(len(knots_qn))
        dev[0] = rng.normal(0.0, TEMPO_SD)
        for k in range(1, len(knots_qn)):
            dev[k] = phi * dev[k - 1] + innovations[k]
        self.grid_qn = np.arange(0.0, knots_qn[-1] + self.GRID_QN / 2, self.GRID_QN)
        period = quarter_s * np.exp(np.interp(self.grid_qn, knots_qn, dev))
        steps = 0.5 * (period[1:] + period[:-1]) * self.GRID_QN
        self.grid_s = LEAD_IN_S + np.concatenate([[0.0], np.cumsum(steps)])

    def __call__(self, qn):
        """Seconds at score position(s) ``qn``."""
        return np.interp(qn, self.grid_qn, self.grid_s)


def metric_accent(metre: Metre, onset_qn: float) -> int:
    """Velocity boost for a note at ``onset_qn``: bar start > beat > other."""
    in_bar = onset_qn % metre.bar_qn
    if np.isclose(in_bar, 0.0) or np.isclose(in_bar, metre.bar_qn):
        return DOWNBEAT_ACCENT
    if np.any(np.isclose(in_bar, metre.beat_offsets)):
        return BEAT_ACCENT
    return 0


@dataclass(frozen=True)
class PlayedNote:
    """A performed note in seconds."""

    part: str
    start_s: float
    end_s: float
    pitch: int
    velocity: int


def release_repeats(notes: list[PlayedNote], gap_s: float = 0.005) -> list[PlayedNote]:
    """Shorten notes that would still sound when the same key is struck again.

    Returns the notes sorted by start time.
    """
    notes = sorted(notes, key=lambda n: (n.start_s, n.part, n.pitch))
    next_start: dict[tuple[str, int], float] = {}
    out = []
    for n in reversed(notes):
        key = (n.part, n.pitch)
        end = min(n.end_s, next_start.get(key, np.inf) - gap_s)
        out.append(PlayedNote(n.part, n.start_s, max(end, n.start_s + 0.01), n.pitch, n.velocity))
        next_start[key] = n.start_s
    return out[::-1]


def perform(piece: Piece) -> tuple[list[PlayedNote], dict]:
    """Play a piece with human timing and return its notes and truth.

    Parameters
    ----------
    piece : Piece
        The composed piece.

    Returns
    -------
    notes : list of PlayedNote
        Performed notes sorted by start time.
    truth : dict
        Ground truth, with beat and downbeat times taken from the tempo
        curve before jitter.
    """
    rng = np.random.default_rng(piece.seed)
    metre = piece.metre
    knots = metre.beat_positions(piece.n_bars + 2)
    tmap = TimeMap(rng, knots, 60.0 / piece.quarter_bpm)
    parts = {p.name: p for p in piece.parts}

    shared_jitter: dict[tuple[str, float], float] = {}
    played = []
    for note in sorted(piece.notes, key=lambda n: (n.onset_qn, n.part, n.pitch)):
        key = (note.part, round(note.onset_qn, 6))
        if key not in shared_jitter:
            shared_jitter[key] = rng.normal(0.0, JITTER_SD_S)
        jitter = shared_jitter[key] + rng.normal(0.0, JITTER_EXTRA_SD_S)
        on_s = float(tmap(note.onset_qn))
        part = parts[note.part]
        if part.is_drum:
            length = DRUM_NOTE_S
        else:
            length = max(0.05, part.legato * (float(tmap(note.onset_qn + note.dur_qn)) - on_s))
        velocity = note.velocity + metric_accent(metre, note.onset_qn) + rng.normal(0.0, VELOCITY_NOISE_SD)
        start = max(0.0, on_s + jitter)
        velocity = int(np.clip(round(velocity), 1, 127))
        played.append(PlayedNote(note.part, start, start + length, note.pitch, velocity))
    played = release_repeats(played)

    n_truth_bars = piece.n_bars
    beats_qn = metre.beat_positions(n_truth_bars)
    downbeats_qn = np.arange(n_truth_bars) * metre.bar_qn
    if piece.landing:
        end_qn = n_truth_bars * metre.bar_qn
        beats_qn = np.append(beats_qn, end_qn)
        downbeats_qn = np.append(downbeats_qn, end_qn)
    beats_s = tmap(beats_qn)
    downbeats_s = tmap(downbeats_qn)
    beat_s = float(np.median(np.diff(beats_s)))
    truth = {
        "file": piece.stem + (".csv" if piece.as_onset_csv else ".mid"),
        "time_signature": metre.label,
        "notated_time_signature": piece.notated_time_signature,
        "beats_per_bar": len(metre.beat_qn),
        "beat_division": metre.division,
        "grouping": metre.grouping,
        "bar_s": round(float(np.median(np.diff(downbeats_s))), 4),
        "beat_s": round(beat_s, 4),
        "tempo_bpm": round(60.0 / beat_s, 2),
        "downbeats_s": [round(float(t), 4) for t in downbeats_s],
        "beats_s": [round(float(t), 4) for t in beats_s],
        "hypermeasure_bars": piece.hypermeasure_bars,
        "description": piece.description,
    }
    return played, truth


# ---------------------------------------------------------------------------
# Melody helpers
# ---------------------------------------------------------------------------


def scale_pitches(tonic: int, steps: tuple[int, ...], low: int, high: int) -> np.ndarray:
    """All pitches of a mode between ``low`` and ``high`` inclusive."""
    pcs = {(tonic + s) % 12 for s in steps}
    return np.array([p for p in range(low, high + 1) if p % 12 in pcs])


MAJOR = (0, 2, 4, 5, 7, 9, 11)
DORIAN = (0, 2, 3, 5, 7, 9, 10)
HARMONIC_MINOR = (0, 2, 3, 5, 7, 8, 11)


def triad(root: int, minor: bool = False) -> tuple[int, ...]:
    """Pitch classes of a triad on ``root``."""
    return tuple((root + i) % 12 for i in ((0, 3, 7) if minor else (0, 4, 7)))


def write_melody(
    rng: np.random.Generator,
    rhythm: list[tuple[float, float]],
    chord_at,
    strong_at,
    scale: np.ndarray,
    start_pitch: int,
    cadence_at=lambda q: False,
) -> list[tuple[float, float, int]]:
    """Give pitches to a rhythm: chord tones on strong beats, steps elsewhere.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of randomness.
    rhythm : list of (onset_qn, dur_qn)
        The melody's rhythm in score time.
    chord_at : callable
        ``chord_at(qn)`` returns the chord pitch classes, root first.
    strong_at : callable
        ``strong_at(qn)`` tells whether a note falls on a beat.
    scale : numpy.ndarray
        Allowed pitches, ascending.
    start_pitch : int
        Pitch to start near.
    cadence_at : callable, optional
        ``cadence_at(qn)`` marks phrase-final notes, which go to the root.

    Returns
    -------
    list of (onset_qn, dur_qn, pitch)
    """
    idx = int(np.argmin(np.abs(scale - start_pitch)))
    centre = len(scale) // 2
    out = []
    for onset, dur in rhythm:
        chord = chord_at(onset)
        if cadence_at(onset) or strong_at(onset):
            wanted = chord[:1] if cadence_at(onset) else chord
            candidates = [i for i, p in enumerate(scale) if p % 12 in wanted]
            # prefer chord tones near the current pitch, avoid repeating it,
            # and keep a small pull towards the middle of the range
            cost = [
                abs(i - idx) + 2.0 * (i == idx) + 0.15 * abs(i - centre) + rng.uniform(0, 1.5)
                for i in candidates
            ]
            idx = candidates[int(np.argmin(cost))]
        else:
            step = rng.choice([-2, -1, -1, 1, 1, 2])
            if abs(idx + step - centre) > len(scale) // 3:
                step = -step
            idx = int(np.clip(idx + step, 0, len(scale) - 1))
        out.append((onset, dur, int(scale[idx])))
    return out


def cells_to_rhythm(bar_cells: list[list[tuple[float, float]]], bar_qn: float) -> list[tuple[float, float]]:
    """Lay out one list of (offset, length) cells per bar into score time."""
    return [(b * bar_qn + off, dur) for b, cells in enumerate(bar_cells) for off, dur in cells]


def pick(rng: np.random.Generator, options: list, weights: list[float]):
    """Choose one of ``options`` with the given relative weights."""
    w = np.asarray(weights, dtype=float)
    return options[int(rng.choice(len(options), p=w / w.sum()))]


# ---------------------------------------------------------------------------
# The pieces
# ---------------------------------------------------------------------------


def deck_groove() -> Piece:
    """4/4 drum-kit groove with crashes every 4 bars and phrase-end fills."""
    piece = Piece(
        stem="tidewater_deck_groove_4-4",
        metre=METRES["4/4"],
        quarter_bpm=108.0,
        n_bars=16,
        seed=4101,
        description=(
            "The Tidewater Band's drummer warms up on the ferry deck with a backbeat "
            "groove in four-bar phrases, closing each phrase with a tom fill."
        ),
        hypermeasure_bars=4,
        parts=[Part("Deck drum kit", is_drum=True)],
        notated_time_signature="4/4",
    )
    rng = np.random.default_rng(piece.seed + 1)
    kit = "Deck drum kit"
    kick_patterns = [[0.0, 2.0, 2.5], [0.0, 1.5, 2.0], [0.0, 0.75, 2.0, 2.5]]
    fill_voices = [SNARE, SNARE, HIGH_TOM, HIGH_TOM, MID_TOM, MID_TOM, LOW_TOM, LOW_TOM]
    for bar in range(piece.n_bars):
        t0 = bar * 4.0
        phrase_bar = bar % 4
        fill_from = None
        if phrase_bar == 3:
            fill_from = 2.0 if bar % 8 == 7 else 3.0  # long fill every 8 bars
        kicks = kick_patterns[int(rng.integers(len(kick_patterns)))]
        for q in kicks:
            if fill_from is None or q < fill_from or q == 2.0:
                piece.add(kit, t0 + q, 0.25, KICK, 96 if q == 0.0 else 84)
        for q in (1.0, 3.0):
            if fill_from is None or q < fill_from:
                piece.add(kit, t0 + q, 0.25, SNARE, 94)
        for q in np.arange(0.0, 4.0, 0.5):
            if fill_from is not None and q >= fill_from:
                continue
            if q == 0.0 and phrase_bar == 0:
                piece.add(kit, t0, 1.0, CRASH, 92)
            elif q == 3.5 and phrase_bar == 1:
                piece.add(kit, t0 + q, 0.5, OPEN_HAT, 62)
            else:
                piece.add(kit, t0 + q, 0.5, CLOSED_HAT, 66 if q % 1.0 == 0 else 52)
        for q in (0.75, 1.75, 2.25, 3.25, 3.75):
            if (fill_from is None or q < fill_from) and rng.random() < 0.35:
                piece.add(kit, t0 + q, 0.25, SNARE, 28)
        if fill_from is not None:
            n_hits = int((4.0 - fill_from) / 0.25)
            voices = fill_voices[-n_hits:]
            for i, drum in enumerate(voices):
                piece.add(kit, t0 + fill_from + 0.25 * i, 0.25, drum, 70 + 3 * i)
    end = piece.n_bars * 4.0
    piece.add(kit, end, 2.0, CRASH, 100)
    piece.add(kit, end, 2.0, KICK, 100)
    return piece


def lamplighters_waltz() -> Piece:
    """3/4 waltz tune with a bass on every downbeat and soft after-beat chords."""
    piece = Piece(
        stem="tidewater_lamplighters_waltz_3-4",
        metre=METRES["3/4"],
        quarter_bpm=138.0,
        n_bars=24,
        seed=3202,
        description=(
            "The accordion player of the Tidewater Band leads the Lamplighters' Waltz "
            "while the lanterns are lit along the quay."
        ),
        hypermeasure_bars=4,
        parts=[
            Part("Accordion melody", program=21, legato=0.92),
            Part("Accordion chords", program=21, legato=0.6),
            Part("Tuba", program=58, legato=0.8),
        ],
        notated_time_signature="3/4",
    )
    rng = np.random.default_rng(piece.seed + 1)
    g, c, d, e = 7, 0, 2, 4
    phrase_chords = [
        [triad(g), triad(g), triad(d), triad(d)],
        [triad(d), triad(d), triad(g), triad(g)],
        [triad(c), triad(g), triad(e, minor=True), triad(d)],
        [triad(c), triad(d), triad(g), triad(g)],
    ]
    chords = [phrase_chords[(b // 4) % 4][b % 4] for b in range(piece.n_bars)]
    inner = [
        [(0, 2), (2, 1)],
        [(0, 1), (1, 1), (2, 1)],
        [(0, 1.5), (1.5, 0.5), (2, 1)],
        [(0, 1), (1, 0.5), (1.5, 0.5), (2, 1)],
        [(0, 2), (2, 0.5), (2.5, 0.5)],
    ]
    inner_w = [3, 2, 3, 2, 2]
    ending = [[(0, 3)], [(0, 2), (2, 1)]]
    cells = []
    for b in range(piece.n_bars):
        if b % 4 == 3:
            cells.append(ending[0] if b % 8 == 7 else pick(rng, ending, [1, 2]))
        else:
            cells.append(pick(rng, inner, inner_w))
    bar = piece.metre.bar_qn
    rhythm = cells_to_rhythm(cells, bar)
    scale = scale_pitches(g, MAJOR, 62, 86)
    melody = write_melody(
        rng, rhythm,
        chord_at=lambda q: chords[int(q // bar)],
        strong_at=lambda q: float(q).is_integer(),
        scale=scale, start_pitch=71,
        cadence_at=lambda q: int(q // bar) % 8 == 7 and q % bar == 0,
    )
    for onset, dur, pitch in melody:
        piece.add("Accordion melody", onset, dur, pitch, 72 if dur >= 1 else 64)
    for b, chord in enumerate(chords):
        root = 36 + (chord[0] - 36) % 12
        piece.add("Tuba", b * bar, 2.0, root, 80)
        if b >= 8:  # the chords join in for the second half
            voicing = [55 + (pc - 55) % 12 for pc in chord[1:]]
            for beat in (1, 2):
                for p in voicing:
                    piece.add("Accordion chords", b * bar + beat, 1.0, p, 48)
    end = piece.n_bars * bar
    piece.add("Tuba", end, 2.0, 43, 80)
    piece.add("Accordion melody", end, 2.0, 67, 70)
    return piece


def ferry_jig() -> Piece:
    """6/8 jig (dotted-quarter beat in three): bass on the downbeat, a guitar chord on the second beat.

    The file's time-signature event is left at the sequencer default 4/4.
    """
    piece = Piece(
        stem="tidewater_ferry_jig_6-8",
        metre=METRES["6/8"],
        quarter_bpm=1.5 * 108.0,  # 108 dotted quarters a minute
        n_bars=32,
        seed=6803,
        description=(
            "The fiddler and the bass player race the evening ferry across the harbour "
            "with a jig, recorded on a sequencer that was never told the time signature."
        ),
        hypermeasure_bars=4,
        parts=[
            Part("Fiddle", program=40, legato=0.85),
            Part("Double bass", program=32, legato=0.7),
            Part("Guitar", program=24, legato=0.5),
        ],
        notated_time_signature="4/4",
    )
    rng = np.random.default_rng(piece.seed + 1)
    d, g, a, b = 2, 7, 9, 11
    progression = [triad(d), triad(d), triad(g), triad(a), triad(d), triad(b, minor=True), triad(a), triad(d)]
    chords = [progression[i % 8] for i in range(piece.n_bars)]
    triplet = [(0, 0.5), (0.5, 0.5), (1.0, 0.5)]
    long_short = [(0, 1.0), (1.0, 0.5)]
    held = [(0, 1.5)]
    cells = []
    for bar in range(piece.n_bars):
        first = pick(rng, [triplet, long_short], [3, 1])
        if bar % 4 == 3:
            second = held
        else:
            second = pick(rng, [triplet, long_short, held], [4, 2, 0.5])
        cells.append(first + [(1.5 + o, l) for o, l in second])
    bar_qn = piece.metre.bar_qn
    rhythm = cells_to_rhythm(cells, bar_qn)
    scale = scale_pitches(d, MAJOR, 62, 86)
    melody = write_melody(
        rng, rhythm,
        chord_at=lambda q: chords[int(q // bar_qn)],
        strong_at=lambda q: np.isclose(q % 1.5, 0) or np.isclose(q % 1.5, 1.5),
        scale=scale, start_pitch=74,
        cadence_at=lambda q: int(q // bar_qn) % 8 == 7 and np.isclose(q % bar_qn, 1.5),
    )
    for onset, dur, pitch in melody:
        piece.add("Fiddle", onset, dur, pitch, 70 if dur >= 1 else 62)
    # The usual jig accompaniment: bass on the downbeat, chord on the second beat.
    for bar, chord in enumerate(chords):
        root = 38 + (chord[0] - 38) % 12
        piece.add("Double bass", bar * bar_qn, 1.5, root, 78)
        for p in [55 + (pc - 55) % 12 for pc in chord]:
            piece.add("Guitar", bar * bar_qn + 1.5, 0.75, p, 56)
    end = piece.n_bars * bar_qn
    piece.add("Double bass", end, 1.5, 38, 80)
    piece.add("Fiddle", end, 1.5, 74, 72)
    return piece


def lighthouse_steps() -> Piece:
    """7/8 (2+2+3) dance: hand drums plus clarinet."""
    piece = Piece(
        stem="tidewater_lighthouse_steps_7-8",
        metre=METRES["7/8"],
        quarter_bpm=150.0,  # 300 eighths a minute
        n_bars=24,
        seed=7804,
        description=(
            "Dancers circle the lighthouse steps to the clarinet and hand drums of the "
            "Tidewater Band in a quick seven, counted two-two-three."
        ),
        hypermeasure_bars=4,
        parts=[Part("Hand drums", is_drum=True), Part("Clarinet", program=71, legato=0.88)],
        notated_time_signature="7/8",
    )
    rng = np.random.default_rng(piece.seed + 1)
    drums, clar = "Hand drums", "Clarinet"
    # eighth-note slots: 0 1 | 2 3 | 4 5 6
    for bar in range(piece.n_bars):
        t0 = bar * 3.5
        piece.add(drums, t0, 0.5, KICK, 90)
        piece.add(drums, t0 + 1.0, 0.5, HIGH_CONGA, 76)
        piece.add(drums, t0 + 2.0, 0.5, LOW_CONGA, 84)
        tamb_slots = [1, 3, 5, 6] if bar % 4 != 3 else [1, 3]
        for s in tamb_slots:
            piece.add(drums, t0 + 0.5 * s, 0.5, TAMBOURINE, 50)
        if bar % 4 == 3:  # phrase-end roll on the long beat
            for s in (5, 6):
                piece.add(drums, t0 + 0.5 * s, 0.5, HIGH_CONGA, 70)
    a, dd, e = 9, 2, 4
    progression = [triad(a, minor=True), triad(a, minor=True), triad(dd, minor=True), triad(e)]
    chords = [progression[i % 4] for i in range(piece.n_bars)]
    two = [[(0, 1.0)], [(0, 0.5), (0.5, 0.5)]]
    three = [[(0, 1.5)], [(0, 1.0), (1.0, 0.5)], [(0, 0.5), (0.5, 0.5), (1.0, 0.5)]]
    cells = []
    for bar in range(piece.n_bars):
        if bar % 4 == 3:
            bar_cells = (
                pick(rng, two, [1, 2])
                + [(1.0 + o, l) for o, l in pick(rng, two, [2, 1])]
                + [(2.0, 1.5)]
            )
        else:
            bar_cells = (
                pick(rng, two, [1, 2])
                + [(1.0 + o, l) for o, l in pick(rng, two, [1, 2])]
                + [(2.0 + o, l) for o, l in pick(rng, three, [1, 3, 2])]
            )
        cells.append(bar_cells)
    rhythm = cells_to_rhythm(cells, 3.5)
    scale = scale_pitches(a, HARMONIC_MINOR, 60, 84)
    melody = write_melody(
        rng, rhythm,
        chord_at=lambda q: chords[int(q // 3.5)],
        strong_at=lambda q: any(np.isclose(q % 3.5, x) for x in (0.0, 1.0, 2.0)),
        scale=scale, start_pitch=69,
        cadence_at=lambda q: int(q // 3.5) % 4 == 3 and np.isclose(q % 3.5, 2.0),
    )
    for onset, dur, pitch in melody:
        piece.add(clar, onset, dur, pitch, 70 if dur >= 1 else 62)
    end = piece.n_bars * 3.5
    piece.add(drums, end, 1.0, KICK, 96)
    piece.add(drums, end, 1.0, LOW_CONGA, 90)
    piece.add(clar, end, 1.5, 69, 74)
    return piece


def net_menders_song() -> Piece:
    """5/4 song felt as 3+2, melody with bass on beats 1 and 4."""
    piece = Piece(
        stem="tidewater_net_menders_song_5-4",
        metre=METRES["5/4"],
        quarter_bpm=104.0,
        n_bars=12,
        seed=5405,
        description=(
            "An unhurried five-beat song the net menders of Kestrel Quay hum while they "
            "work, played by flute and bass with a maraca keeping time."
        ),
        hypermeasure_bars=None,
        parts=[
            Part("Flute", program=73, legato=0.9),
            Part("Fretless bass", program=35, legato=0.85),
            Part("Maraca", is_drum=True),
        ],
        notated_time_signature="5/4",
    )
    rng = np.random.default_rng(piece.seed + 1)
    e, c, dd, b = 4, 0, 2, 11
    em, bm = triad(e, minor=True), triad(b, minor=True)
    progression = [em, triad(dd), triad(c), bm, em, triad(c)]
    chords = [progression[i % 6] for i in range(piece.n_bars)]
    bar_cells = [
        [(0, 1.5), (1.5, 0.5), (2, 1), (3, 2)],
        [(0, 2), (2, 1), (3, 1), (4, 1)],
        [(0, 1), (1, 1), (2, 1), (3, 1.5), (4.5, 0.5)],
        [(0, 3), (3, 2)],
        [(0, 1), (1, 0.5), (1.5, 0.5), (2, 1), (3, 2)],
        [(0, 2), (2, 0.5), (2.5, 0.5), (3, 1), (4, 1)],
    ]
    cells = [pick(rng, bar_cells, [3, 2, 2, 1, 2, 2]) for _ in range(piece.n_bars)]
    rhythm = cells_to_rhythm(cells, 5.0)
    scale = scale_pitches(e, DORIAN, 64, 88)
    melody = write_melody(
        rng, rhythm,
        chord_at=lambda q: chords[int(q // 5.0)],
        strong_at=lambda q: float(q).is_integer(),
        scale=scale, start_pitch=76,
    )
    for onset, dur, pitch in melody:
        piece.add("Flute", onset, dur, pitch, 68 if dur >= 1 else 60)
    for bar, chord in enumerate(chords):
        root = 40 + (chord[0] - 40) % 12
        piece.add("Fretless bass", bar * 5.0, 3.0, root, 78)
        piece.add("Fretless bass", bar * 5.0 + 3.0, 2.0, root + 7 if root + 7 <= 52 else root - 5, 72)
        for beat in range(5):
            piece.add("Maraca", bar * 5.0 + beat, 0.5, MARACAS, 44)
            if rng.random() < 0.5:
                piece.add("Maraca", bar * 5.0 + beat + 0.5, 0.5, MARACAS, 34)
    end = piece.n_bars * 5.0
    piece.add("Fretless bass", end, 3.0, 40, 80)
    piece.add("Flute", end, 3.0, 76, 70)
    return piece


def capstan_shanty() -> Piece:
    """Slow 12/8 shanty in call-and-response lines of two bars."""
    piece = Piece(
        stem="tidewater_capstan_shanty_12-8",
        metre=METRES["12/8"],
        quarter_bpm=1.5 * 64.0,  # 64 dotted quarters a minute
        n_bars=12,
        seed=1206,
        description=(
            "The whole Tidewater Band sings a slow capstan shanty in lines of two bars, "
            "with a guitar strumming long-short and a bass on the strong beats."
        ),
        hypermeasure_bars=2,
        parts=[
            Part("Voice lead", program=52, legato=0.95),
            Part("Guitar", program=25, legato=0.5),
            Part("Bass", program=33, legato=0.85),
        ],
        notated_time_signature="12/8",
    )
    rng = np.random.default_rng(piece.seed + 1)
    f, bb, c, dd = 5, 10, 0, 2
    progression = [triad(f), triad(c), triad(f), triad(bb), triad(dd, minor=True), triad(c)]
    chords = [progression[i % 6] for i in range(piece.n_bars)]
    held = [(0, 1.5)]
    long_short = [(0, 1.0), (1.0, 0.5)]
    triplet = [(0, 0.5), (0.5, 0.5), (1.0, 0.5)]
    cells = []
    for bar in range(piece.n_bars):
        if bar % 2 == 1:  # end of a line: long note from beat 3
            beats = [pick(rng, [long_short, triplet], [2, 1]), pick(rng, [long_short, triplet], [2, 1])]
            bar_cells = [(1.5 * i + o, l) for i, cell in enumerate(beats) for o, l in cell] + [(3.0, 3.0)]
        else:
            first = pick(rng, [[(0, 3.0)], held + [(1.5 + o, l) for o, l in long_short]], [1, 2])
            second = [
                (3.0 + 1.5 * i + o, l)
                for i in range(2)
                for o, l in pick(rng, [held, long_short, triplet], [1, 3, 2])
            ]
            bar_cells = first + second
        cells.append(bar_cells)
    rhythm = cells_to_rhythm(cells, 6.0)
    scale = scale_pitches(f, MAJOR, 57, 79)
    melody = write_melody(
        rng, rhythm,
        chord_at=lambda q: chords[int(q // 6.0)],
        strong_at=lambda q: np.isclose(q % 1.5, 0) or np.isclose(q % 1.5, 1.5),
        scale=scale, start_pitch=65,
        cadence_at=lambda q: int(q // 6.0) % 2 == 1 and np.isclose(q % 6.0, 3.0),
    )
    for onset, dur, pitch in melody:
        piece.add("Voice lead", onset, dur, pitch, 72 if dur >= 1.5 else 64)
    for bar, chord in enumerate(chords):
        root = 41 + (chord[0] - 41) % 12
        piece.add("Bass", bar * 6.0, 3.0, root, 80)
        piece.add("Bass", bar * 6.0 + 3.0, 3.0, root + 7 if root + 7 <= 55 else root - 5, 74)
        voicing = [52 + (pc - 52) % 12 for pc in chord] + [64 + (chord[1] - 64) % 12]
        for beat in range(4):
            for p in voicing:
                piece.add("Guitar", bar * 6.0 + 1.5 * beat, 1.0, p, 56)
                piece.add("Guitar", bar * 6.0 + 1.5 * beat + 1.0, 0.5, p, 42)
    end = piece.n_bars * 6.0
    piece.add("Bass", end, 3.0, 41, 80)
    for p in (53, 57, 60, 65):
        piece.add("Guitar", end, 3.0, p, 60)
    piece.add("Voice lead", end, 3.0, 65, 74)
    return piece


def pier_clapping_game() -> Piece:
    """2/4 children's clapping game, written as a plain onset list."""
    piece = Piece(
        stem="tidewater_pier_clapping_game_2-4",
        metre=METRES["2/4"],
        quarter_bpm=112.0,
        n_bars=24,
        seed=2407,
        description=(
            "Children on the pier keep a two-beat clapping game going in four-bar rhymes "
            "while the band packs up; only the clap times were noted down."
        ),
        hypermeasure_bars=4,
        parts=[Part("Claps", is_drum=True)],
        notated_time_signature=None,
        as_onset_csv=True,
    )
    rng = np.random.default_rng(piece.seed + 1)
    inner = [[0.0, 1.0], [0.0, 0.5, 1.0], [0.0, 1.0, 1.5], [0.0, 0.5, 1.0, 1.5]]
    for bar in range(piece.n_bars):
        slots = [0.0] if bar % 4 == 3 else pick(rng, inner, [3, 2, 2, 1])
        for q in slots:
            piece.add("Claps", bar * 2.0 + q, 0.5, 39, 76 if float(q).is_integer() else 66)
    piece.add("Claps", piece.n_bars * 2.0, 0.5, 39, 84)
    return piece


PIECES = [
    deck_groove,
    lamplighters_waltz,
    ferry_jig,
    lighthouse_steps,
    net_menders_song,
    capstan_shanty,
    pier_clapping_game,
]


# ---------------------------------------------------------------------------
# Writing and checking
# ---------------------------------------------------------------------------


def write_midi(piece: Piece, notes: list[PlayedNote], path: Path) -> None:
    """Write a type-1 MIDI file with one tempo and one time-signature event."""
    pm = pretty_midi.PrettyMIDI(resolution=480, initial_tempo=piece.quarter_bpm)
    num, den = (int(x) for x in (piece.notated_time_signature or piece.metre.label).split("/"))
    pm.time_signature_changes.append(pretty_midi.TimeSignature(num, den, 0.0))
    for part in piece.parts:
        inst = pretty_midi.Instrument(program=part.program, is_drum=part.is_drum, name=part.name)
        inst.notes = [
            pretty_midi.Note(n.velocity, n.pitch, n.start_s, n.end_s) for n in notes if n.part == part.name
        ]
        pm.instruments.append(inst)
    pm.write(str(path))


def write_onset_csv(notes: list[PlayedNote], path: Path) -> None:
    """Write onsets as ``time_s,weight`` rows, weight = velocity / 127."""
    with open(path, "w", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["time_s", "weight"])
        for n in notes:
            writer.writerow([f"{n.start_s:.4f}", f"{n.velocity / 127:.3f}"])


def truth_to_json(truth: dict) -> str:
    """JSON text with one key per line and each list kept on its line."""
    lines = [f" {json.dumps(k)}: {json.dumps(v)}" for k, v in truth.items()]
    return "{\n" + ",\n".join(lines) + "\n}\n"


def generate(out_dir: Path) -> list[Path]:
    """Compose, perform and write every demo piece with its truth file.

    Parameters
    ----------
    out_dir : pathlib.Path
        Destination folder (created if missing).

    Returns
    -------
    list of pathlib.Path
        The data files written (truth files not included).
    """
    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for compose in PIECES:
        piece = compose()
        notes, truth = perform(piece)
        data_path = out_dir / truth["file"]
        if piece.as_onset_csv:
            write_onset_csv(notes, data_path)
        else:
            write_midi(piece, notes, data_path)
        truth_path = out_dir / f"{piece.stem}.truth.json"
        truth_path.write_text(truth_to_json(truth))
        print(f"wrote {data_path.name} and {truth_path.name}")
        written.append(data_path)
    written.append(write_recording(out_dir))
    return written


# The drummer's phone recording of the deck groove: its notes synthesised as a
# kit (bench/synth.py: decaying sines and filtered noise bursts) over the
# harbour's hiss (white noise at 30 dB SNR), saved as Ogg Vorbis at 22.05 kHz.
RECORDING_OF = "tidewater_deck_groove_4-4"
RECORDING = "tidewater_deck_groove_4-4_phone.ogg"
RECORDING_RATE = 22_050


def write_recording(out_dir: Path) -> Path:
    """Write the phone recording of the deck groove and its truth file (the groove's, as the notes are the same)."""
    import sys

    import soundfile as sf

    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "bench"))
    from synth import add_noise, synthesise

    pm = pretty_midi.PrettyMIDI(str(out_dir / f"{RECORDING_OF}.mid"))
    notes = sorted((n.start, n.end, n.pitch, n.velocity, inst.is_drum) for inst in pm.instruments for n in inst.notes)
    start, end, pitch, velocity, drum = (np.array(col) for col in zip(*notes))
    audio = synthesise(start, end - start, pitch, velocity, drum, sample_rate=RECORDING_RATE, seed=7)
    path = out_dir / RECORDING
    sf.write(str(path), add_noise(audio, 30.0, seed=8), RECORDING_RATE, format="OGG", subtype="VORBIS")
    truth = json.loads((out_dir / f"{RECORDING_OF}.truth.json").read_text())
    truth.update(file=RECORDING, notated_time_signature=None,
                 description="The same warm-up on the ferry deck, as the drummer's phone recorded it over the harbour's hiss.")
    (out_dir / f"{Path(RECORDING).stem}.truth.json").write_text(truth_to_json(truth))
    print(f"wrote {RECORDING} and {Path(RECORDING).stem}.truth.json")
    return path


def load_onsets(path: Path) -> tuple[np.ndarray, str]:
    """Onset times of a demo file and a one-line summary of its content."""
    if path.suffix == ".ogg":
        path = path.with_name(f"{RECORDING_OF}.mid")  # the recording's notes
    if path.suffix == ".csv":
        with open(path) as fh:
            times = np.array([float(row["time_s"]) for row in csv.DictReader(fh)])
        return times, f"{len(times)} onsets, {times.max():.1f} s"
    pm = pretty_midi.PrettyMIDI(str(path))
    times = np.sort(np.concatenate([[n.start for n in inst.notes] for inst in pm.instruments]))
    ts = ", ".join(f"{t.numerator}/{t.denominator}" for t in pm.time_signature_changes)
    tracks = ", ".join(f"{inst.name} {len(inst.notes)}" for inst in pm.instruments)
    _, tempi = pm.get_tempo_changes()
    return times, f"{pm.get_end_time():.1f} s, meta {ts} @ {tempi[0]:.0f} qpm; {tracks}"


def check(out_dir: Path, paths: list[Path], tol_s: float = 0.05) -> bool:
    """Reload each file and measure how well the truth matches the onsets.

    Prints, per file, the content summary, the share of true downbeats and
    beats that have an onset within ``tol_s`` seconds, and the largest such
    distance for downbeats.  Returns False if any downbeat lacks an onset.
    """
    ok = True
    for path in paths:
        truth = json.loads((out_dir / (path.stem + ".truth.json")).read_text())
        onsets, summary = load_onsets(path)

        def nearest(ts):
            ts = np.asarray(ts)
            i = np.clip(np.searchsorted(onsets, ts), 1, len(onsets) - 1)
            return np.minimum(np.abs(onsets[i] - ts), np.abs(onsets[i - 1] - ts))

        d_down, d_beat = nearest(truth["downbeats_s"]), nearest(truth["beats_s"])
        ok &= bool(np.all(d_down <= tol_s))
        print(f"{path.name}: {summary}")
        print(
            f"  truth {truth['time_signature']} (notated {truth['notated_time_signature']}), "
            f"{truth['tempo_bpm']} bpm, bar {truth['bar_s']} s; "
            f"downbeats with onset {np.mean(d_down <= tol_s):.0%} (max {1000 * d_down.max():.0f} ms), "
            f"beats with onset {np.mean(d_beat <= tol_s):.0%}"
        )
    return ok


def main(argv: list[str] | None = None) -> int:
    """Command-line entry point."""
    parser = argparse.ArgumentParser(description="Regenerate the Kestrel Quay demo rhythms and their truth files.")
    parser.add_argument(
        "--out", type=Path, default=Path(__file__).resolve().parent, help="output folder (default: this script's folder)"
    )
    parser.add_argument("--check", action="store_true", help="reload the files and compare them with their truth")
    args = parser.parse_args(argv)
    paths = generate(args.out)
    if args.check:
        return 0 if check(args.out, paths) else 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
