"""Result objects: frozen dataclasses whose ``to_dict()`` is the JSON output.

Conventions
-----------
Times and periods are seconds; ``phase_s`` is the time of a level's first
event (the first downbeat for the bar). Lists of times are sorted. The keys
and their meaning are the output contract of DESIGN.md section 5.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

from ._version import __version__

__all__ = ["Level", "Reading", "Segment", "MetreResult", "LEVEL_NAMES"]

LEVEL_NAMES = ("subdivision", "beat", "bar", "hypermeasure")


def _plain(value):
    """Turn numpy scalars and arrays into JSON-ready Python values."""
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return round(v, 6) if np.isfinite(v) else None
    if hasattr(value, "to_dict"):
        return value.to_dict()
    return value


class _AsDict:
    def to_dict(self) -> dict:
        return {f.name: _plain(getattr(self, f.name)) for f in fields(self) if not f.name.startswith("_")}


@dataclass(frozen=True)
class Level(_AsDict):
    """One level of the metric tree.

    Attributes
    ----------
    name : str
        One of ``subdivision``, ``beat``, ``bar``, ``hypermeasure``.
    period_s : float
        Median period in seconds.
    phase_s : float
        Time of the level's first event in seconds.
    score : float
        The topological score behind the level (see DEVELOPERS.md).
    confidence : float
        0..1, the share of the readings' probability that agrees on this level.
    """

    name: str
    period_s: float
    phase_s: float
    score: float
    confidence: float


@dataclass(frozen=True)
class Reading(_AsDict):
    """A ranked metrical reading (an entry of ``alternatives``)."""

    rank: int
    time_signature: str
    beats_per_bar: int
    beat_division: int | None
    grouping: list[int] | None
    bar_s: float
    phase_s: float
    score: float
    probability: float


@dataclass(frozen=True)
class Segment(_AsDict):
    """A stretch of the piece with one reading.

    Attributes
    ----------
    start_s, end_s : float
        The stretch, in seconds; a segment after a metre change starts on its
        first downbeat.
    time_signature : str
    beats_per_bar, beat_division, grouping
        The segment's reading, as in :class:`MetreResult`.
    bar_s : float or None
        Median bar duration in the segment.
    first_downbeat_s : float or None
        The segment's first downbeat.
    evidence : float or None
        Log-odds of the segment's reading against the piece's main reading,
        over the segment (0 for the main reading's own segments).
    """

    start_s: float
    end_s: float
    time_signature: str
    beats_per_bar: int | None = None
    beat_division: int | None = None
    grouping: list[int] | None = None
    bar_s: float | None = None
    first_downbeat_s: float | None = None
    evidence: float | None = None


@dataclass(frozen=True)
class MetreResult(_AsDict):
    """The proposed metre of one tune; ``to_dict()`` is its JSON line."""

    metertop_version: str
    source: str
    time_signature: str
    beats_per_bar: int
    beat_division: int | None
    grouping: list[int] | None
    bar_s: float
    beat_s: float
    tempo_bpm: float
    confidence: float
    levels: list[Level]
    downbeats_s: np.ndarray
    beats_s: np.ndarray
    alternatives: list[Reading]
    segments: list[Segment]
    n_events: int
    duration_s: float
    notated_time_signature: str | None = None
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        out = super().to_dict()
        extra = out.pop("extra")
        out.update(extra)
        return out

    def level(self, name: str) -> Level | None:
        """The level called ``name``, or None."""
        return next((lv for lv in self.levels if lv.name == name), None)


def make_result(**kwargs) -> MetreResult:
    """Build a :class:`MetreResult`, filling in the version."""
    return MetreResult(metertop_version=__version__, **kwargs)
