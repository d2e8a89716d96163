"""Shared records and metre conventions of the benchmark.

Conventions
-----------
- Score time is in quarter notes (``*_q``), performance time in seconds (``*_s``).
- Metre classes follow DESIGN.md section 6 (common practice): a notated time
  signature maps to (beats per bar, beat division, bar in quarters, family).
  2/2 and 4/4 are the same class: same bar, family and division.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

# notated -> (beats per bar, division or None, bar in quarters, family, grouping in eighths or None)
METRES: dict[str, tuple[int, int | None, float, str, tuple[int, ...] | None]] = {
    "2/4": (2, 2, 2.0, "duple", None),
    "2/2": (2, 2, 4.0, "duple", None),
    "4/4": (4, 2, 4.0, "duple", None),
    "4/2": (4, 2, 8.0, "duple", None),
    "3/4": (3, 2, 3.0, "triple", None),
    "3/2": (3, 2, 6.0, "triple", None),
    "3/8": (1, 3, 1.5, "single", None),
    "6/8": (2, 3, 3.0, "duple", None),
    "6/4": (2, 3, 6.0, "duple", None),
    "9/8": (3, 3, 4.5, "triple", None),
    "12/8": (4, 3, 6.0, "duple", None),
    "5/4": (5, 2, 5.0, "irregular", None),
    "7/8": (3, None, 3.5, "irregular", (2, 2, 3)),
}


def class_key(time_signature: str) -> str:
    """The evaluation class of a notated metre: 2/2 counts as 4/4 (same bar, family and division)."""
    return "4/4" if time_signature == "2/2" else time_signature


def family_of(beats_per_bar: int, division: int | None, grouping) -> str:
    """Family of a reading, as in DESIGN.md section 6."""
    if grouping is not None or beats_per_bar in (5, 7):
        return "irregular"
    if beats_per_bar == 1:
        return "single"
    return "triple" if beats_per_bar == 3 else "duple"


@dataclass
class ScoreTune:
    """One tune of the development corpus, in score time.

    ``onsets_q`` are note starts (ties merged, rests and grace notes left
    out) from the first note at 0; ``downbeats_q`` are the bar starts in the
    same time (the first one after a pickup is ``pickup_q``).
    """

    tune_id: str
    source_file: str
    index: int
    title: str
    time_signature: str
    onsets_q: np.ndarray
    durations_q: np.ndarray
    pitches: np.ndarray
    downbeats_q: np.ndarray
    pickup_q: float

    @property
    def bar_q(self) -> float:
        return METRES[self.time_signature][2]


@dataclass
class Performance:
    """A rendered piece with exact ground truth, ready for both detectors."""

    piece_id: str
    kind: str  # "deadpan", "played", "played-flat", "groove"
    time_signature: str
    onsets_s: np.ndarray
    durations_s: np.ndarray
    pitches: np.ndarray
    velocities: np.ndarray
    is_drum: np.ndarray
    downbeats_s: np.ndarray
    beats_s: np.ndarray
    bar_s: float
    beat_s: float
    hypermeasure_bars: int | None = None
    extra: dict = field(default_factory=dict)

    def note_table(self):
        """The notes as a :class:`metertop.NoteTable`."""
        from metertop.load import NoteTable

        order = np.argsort(self.onsets_s, kind="stable")
        n = len(order)
        return NoteTable(
            onsets_s=np.asarray(self.onsets_s, float)[order],
            durations_s=np.asarray(self.durations_s, float)[order],
            pitches=np.asarray(self.pitches, np.int64)[order],
            velocities=np.asarray(self.velocities, float)[order],
            weights=np.full(n, np.nan),
            is_drum=np.asarray(self.is_drum, bool)[order],
            track=np.zeros(n, np.int64),
            source="bench",
        )
