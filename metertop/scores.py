"""Scores: read MusicXML, ABC and Humdrum kern through music21, and analyse them in score time.

Conventions
-----------
- *Score time* is in quarter notes (``*_q`` inside, ``*_quarters`` in the
  output), from the start of the score (music21's offset 0).
- A tied chain of notes is one onset whose duration is the sum of the chain.
  Rests and grace notes give no onset. Every pitch of a chord is a note; the
  notes of all parts are read together.
- The analysis runs in score time: the quarters are laid out at one fixed
  pace (:func:`analysis_seconds_per_quarter`), so that a tempo change in the
  score cannot move a beat. Periods are reported in quarters and in seconds
  at the score's tempo: its metronome marks (explicit numbers only), or
  :data:`DEFAULT_QUARTER_BPM` quarter notes per minute where it states none.
- Barlines and time signatures in the input are never used for the
  proposal; the first notated time signature is kept as
  ``notated_time_signature`` for comparison.
- A file may hold several tunes (ABC, kern): each is analysed on its own and
  carries ``tune`` (from 1) and ``title``.

music21 is the optional ``scores`` extra; it is imported only here, and only
when a score is read or written.
"""

from __future__ import annotations

import math
import os
import re
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError
from . import load
from .load import NoteTable, check_input_file
from .pipeline import Analysis, Settings, analyse_detailed
from .result import MetreResult, Reading
from .tempo import PulseTrack
from .tree import time_signature_of

__all__ = [
    "SCORE_SUFFIXES", "DEFAULT_QUARTER_BPM", "ScoreTune", "ScoreReading", "ScoreAnalysis", "TempoMap",
    "is_score_path", "read_score", "read_abc_text", "abc_default_unit", "tune_from_notes", "analyse_tune", "analyse_score",
    "score_time_signature", "analysis_seconds_per_quarter", "beat_unit_quarters", "compound_beat_quarters",
    "notated_verdict",
]

#: File suffixes read as scores, and music21's name of their format.
SCORE_SUFFIXES = dict(zip(load.SCORE_SUFFIXES, ("musicxml", "musicxml", "musicxml", "abc", "humdrum")))
#: Tempo (quarter notes per minute) for seconds when the score states none.
DEFAULT_QUARTER_BPM = 100.0
#: Pulse lengths a score's grid can have, in quarters (note values, dotted, and triplets).
NOTE_VALUES_Q = (1 / 8, 1 / 6, 1 / 4, 1 / 3, 3 / 8, 1 / 2, 2 / 3, 3 / 4, 1.0, 4 / 3, 3 / 2, 2.0, 3.0, 4.0)
_FORMAT_NAMES = {"musicxml": "MusicXML", "abc": "ABC", "humdrum": "Humdrum kern"}
_EPS_Q = 1e-6


def _music21():
    """Import music21, or say how to install it."""
    try:
        import music21
    except ImportError:
        raise InputError("reading scores needs music21: pip install 'metertop[scores]'") from None
    return music21


def is_score_path(path: str | os.PathLike) -> bool:
    """True for a file name with a score suffix (:data:`SCORE_SUFFIXES`).

    >>> is_score_path("tune.abc"), is_score_path("song.MXL"), is_score_path("take.mid")
    (True, True, False)
    """
    return os.path.splitext(os.fspath(path))[1].lower() in SCORE_SUFFIXES


# ---- tempo -------------------------------------------------------------------------

@dataclass(frozen=True)
class TempoMap:
    """Quarter-note tempo over a score: piecewise constant, from its metronome marks.

    Attributes
    ----------
    starts_q : tuple of float
        Where each tempo starts, in quarters; the first is 0.
    quarter_bpm : tuple of float
        Quarter notes per minute from each start on.
    stated : bool
        False when the score states no tempo and the default is used.

    Examples
    --------
    >>> m = TempoMap((0.0, 8.0), (120.0, 60.0), True)
    >>> m.seconds([0, 8, 10]).tolist()
    [0.0, 4.0, 6.0]
    """

    starts_q: tuple[float, ...] = (0.0,)
    quarter_bpm: tuple[float, ...] = (DEFAULT_QUARTER_BPM,)
    stated: bool = False

    def seconds(self, quarters) -> np.ndarray:
        """Seconds from the start of the score at each position in quarters."""
        q = np.asarray(quarters, dtype=np.float64)
        starts = np.asarray(self.starts_q)
        spq = 60.0 / np.asarray(self.quarter_bpm)
        knots_s = np.concatenate([[0.0], np.cumsum(np.diff(starts) * spq[:-1])])
        k = np.clip(np.searchsorted(starts, q, side="right") - 1, 0, len(starts) - 1)
        return knots_s[k] + (q - starts[k]) * spq[k]

    def median_seconds_per_quarter(self, start_q: float, end_q: float) -> float:
        """The tempo that holds for most of the stretch, as seconds per quarter."""
        starts = np.asarray(self.starts_q)
        edges = np.clip(np.concatenate([starts, [np.inf]]), start_q, end_q)
        lengths = np.diff(edges)
        spq = 60.0 / np.asarray(self.quarter_bpm)
        if lengths.sum() <= 0:
            return float(spq[min(np.searchsorted(starts, start_q, side="right") - 1, len(spq) - 1)])
        order = np.argsort(spq)
        cum = np.cumsum(lengths[order])
        return float(spq[order][np.searchsorted(cum, cum[-1] / 2)])


# ---- reading -----------------------------------------------------------------------

@dataclass(frozen=True)
class ScoreTune:
    """One tune of a score file, in score time.

    Attributes
    ----------
    index : int
        Position in the file, from 1.
    title : str
        The tune's title, or ``""``.
    onsets_q, durations_q : ndarray
        Note starts (ties merged) and their lengths, in quarters from the
        start of the score, sorted.
    pitches : ndarray of int
        MIDI note numbers (-1 for unpitched notes).
    parts : ndarray of int
        The part each note comes from.
    notated_time_signatures : tuple of (float, str)
        Every time signature in the input, with its position in quarters.
    tempo : TempoMap
    has_repeats : bool
        The input has repeat barlines (these are not carried into a
        written score).
    stream : music21 Score or None
        The parsed score, kept for writing it back.
    """

    index: int
    title: str
    onsets_q: np.ndarray
    durations_q: np.ndarray
    pitches: np.ndarray
    parts: np.ndarray
    notated_time_signatures: tuple = ()
    tempo: TempoMap = field(default_factory=TempoMap)
    has_repeats: bool = False
    stream: Any = field(default=None, repr=False, compare=False)

    @property
    def notated_time_signature(self) -> str | None:
        """The first time signature of the input, or None."""
        return self.notated_time_signatures[0][1] if self.notated_time_signatures else None

    @property
    def first_q(self) -> float:
        return float(self.onsets_q[0])

    @property
    def end_q(self) -> float:
        """Where the last note ends."""
        return float(np.max(self.onsets_q + self.durations_q))


def tune_from_notes(onsets_q, durations_q, pitches=None, *, index: int = 1, title: str = "", tempo: TempoMap | None = None) -> ScoreTune:
    """A :class:`ScoreTune` from note positions in quarters (no file, nothing to write back).

    >>> t = tune_from_notes([1.0, 0.0], [1.0, 1.0])
    >>> t.onsets_q.tolist(), t.pitches.tolist()
    ([0.0, 1.0], [-1, -1])
    """
    on = np.asarray(onsets_q, dtype=np.float64).ravel()
    du = np.asarray(durations_q, dtype=np.float64).ravel()
    pi = np.full(len(on), -1, np.int64) if pitches is None else np.asarray(pitches, dtype=np.int64).ravel()
    if not (len(on) == len(du) == len(pi)):
        raise InputError(f"got {len(on)} onsets, {len(du)} durations and {len(pi)} pitches")
    if len(on) == 0:
        raise InputError("the score holds no notes")
    if not (np.all(np.isfinite(on)) and np.all(np.isfinite(du))) or np.any(on < 0) or np.any(du < 0):
        raise InputError("score positions and durations must be finite quarters, not negative")
    order = np.lexsort((pi, on))
    return ScoreTune(index, title, on[order], du[order], pi[order], np.zeros(len(on), np.int64), tempo=tempo or TempoMap())


def _quiet_parse(parse, what: str):
    """Run a music21 parser with its warnings silenced; its errors become one InputError."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return parse()
    except InputError:
        raise
    except Exception as exc:  # music21 and its XML/zip readers raise many kinds
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"not readable {what} ({msg[:160]})") from None


def _scores_of(parsed) -> list:
    """The scores inside what music21 returned: an Opus holds several."""
    m21 = _music21()
    if isinstance(parsed, m21.stream.Opus):
        return list(parsed.scores)
    return [parsed]


def _title_of(score, fallback: str = "") -> str:
    md = score.metadata
    if md is not None:
        for attr in ("title", "movementName"):
            value = getattr(md, attr, None)
            if value:
                return str(value)
    return fallback


def _tune_of(score, index: int, title: str | None = None) -> ScoreTune:
    """Notes, notated time signatures and tempo of one parsed score."""
    m21 = _music21()
    onsets: list[float] = []
    durations: list[float] = []
    pitches: list[int] = []
    parts: list[int] = []
    part_list = list(score.parts) or [score]
    for part_index, part in enumerate(part_list):
        open_ties: dict[int, int] = {}  # MIDI pitch -> index of the note its tie chain started on
        for el in part.flatten().notes:
            if el.duration.isGrace or el.quarterLength <= 0:
                continue
            offset = float(el.offset)
            members = list(el.notes) if isinstance(el, m21.chord.Chord) else [el]
            for member in members:
                pitch = int(member.pitch.midi) if hasattr(member, "pitch") else -1
                tie = member.tie if member.tie is not None else el.tie
                kind = tie.type if tie is not None else None
                if kind in ("stop", "continue") and pitch in open_ties:
                    start = open_ties.pop(pitch)
                    durations[start] = offset + float(el.quarterLength) - onsets[start]
                    if kind == "continue":
                        open_ties[pitch] = start
                    continue
                onsets.append(offset)
                durations.append(float(el.quarterLength))
                pitches.append(pitch)
                parts.append(part_index)
                if kind in ("start", "continue"):
                    open_ties[pitch] = len(onsets) - 1
    if not onsets:
        raise InputError("the score holds no notes")
    on = np.asarray(onsets)
    order = np.lexsort((np.asarray(pitches), on))
    signatures = []
    for ts in score.recurse().getElementsByClass(m21.meter.TimeSignature):
        item = (round(float(ts.getOffsetInHierarchy(score)), 6), ts.ratioString)
        if not signatures or signatures[-1][1] != item[1]:
            signatures.append(item)
    signatures.sort()
    marks: dict[float, float] = {}
    for mm in score.recurse().getElementsByClass(m21.tempo.MetronomeMark):
        if mm.number is None or getattr(mm, "numberImplicit", False):
            continue  # a tempo word alone states no number
        bpm = float(mm.getQuarterBPM())
        if bpm > 0 and math.isfinite(bpm):
            marks[round(float(mm.getOffsetInHierarchy(score)), 6)] = bpm
    if marks:
        starts = sorted(marks)
        bpms = [marks[s] for s in starts]
        if starts[0] > 0:
            starts, bpms = [0.0] + starts, [bpms[0]] + bpms  # the first mark holds from the start
        tempo = TempoMap(tuple(starts), tuple(bpms), True)
    else:
        tempo = TempoMap()
    has_repeats = bool(score.recurse().getElementsByClass(m21.bar.Repeat))
    return ScoreTune(
        index=index,
        title=title if title is not None else _title_of(score),
        onsets_q=on[order],
        durations_q=np.asarray(durations)[order],
        pitches=np.asarray(pitches, np.int64)[order],
        parts=np.asarray(parts, np.int64)[order],
        notated_time_signatures=tuple(signatures),
        tempo=tempo,
        has_repeats=has_repeats,
        stream=score,
    )


_ABC_FIELD = re.compile(r"^([A-Za-z]):\s*(.*?)\s*$")


def _abc_tunes(text: str) -> tuple[str, list[str]]:
    """The file header (before the first ``X:``) and the text of each tune."""
    lines = text.splitlines()
    starts = [i for i, line in enumerate(lines) if line.startswith("X:")]
    if not starts:
        return "", [text]
    header = "\n".join(lines[: starts[0]])
    bounds = starts + [len(lines)]
    return header, ["\n".join(lines[a:b]) + "\n" for a, b in zip(bounds[:-1], bounds[1:])]


def abc_default_unit(metre: str | None) -> str:
    """The unit note length of an ABC tune without an ``L:`` field (ABC 2.1, section 3.1.7).

    A metre below 3/4 gives 1/16, any other 1/8; so does a tune without a
    metre (``M:none`` or none at all).

    >>> abc_default_unit("2/4"), abc_default_unit("6/8"), abc_default_unit("C"), abc_default_unit(None)
    ('1/16', '1/8', '1/8', '1/8')
    """
    value = {"C": "4/4", "C|": "2/2"}.get((metre or "").strip(), (metre or "").strip())
    try:
        num, den = value.split("/")
        return "1/16" if int(num) / int(den) < 0.75 else "1/8"
    except (ValueError, ZeroDivisionError):
        return "1/8"


def _with_unit_length(header: str, tune_text: str) -> str:
    """The tune's text with an explicit ``L:`` before its ``K:`` line when neither it nor the file header has one.

    music21 needs the unit length; ABC 2.1 derives it from the metre.
    """
    fields = [(m.group(1), m.group(2)) for m in map(_ABC_FIELD.match, (header + "\n" + tune_text).splitlines()) if m]
    if any(k == "L" for k, _ in fields):
        return tune_text
    metre = next((v for k, v in fields if k == "M"), None)
    lines = tune_text.splitlines()
    at = next(i for i, line in enumerate(lines) if line.startswith("K:"))
    return "\n".join(lines[:at] + [f"L:{abc_default_unit(metre)}"] + lines[at:]) + "\n"


def read_abc_text(text: str, *, tunes: list[int] | None = None, on_error=None) -> list[ScoreTune]:
    """Read the tunes of an ABC file's text.

    Parameters
    ----------
    text : str
        The whole file. A header before the first ``X:`` line (such as the
        version line ``%abc-2.1``) applies to every tune.
    tunes : list of int, optional
        Read only these tunes (numbered from 1, in file order).
    on_error : callable, optional
        ``on_error(index, error)`` for a tune that cannot be read, and the
        other tunes are read; by default the first such error is raised.

    Raises
    ------
    InputError
        When a tune has no ``K:`` (key) line, which ends every ABC tune
        header, when music21 cannot read it, or when it holds no notes.
    """
    m21 = _music21()
    header, texts = _abc_tunes(text)
    if not any(line.strip() for line in text.splitlines()):
        raise InputError("the ABC file is empty")
    out = []
    for index, tune_text in enumerate(texts, 1):
        if tunes is not None and index not in tunes:
            continue
        fields = [m.groups() for m in map(_ABC_FIELD.match, tune_text.splitlines()) if m]
        title = next((v for k, v in fields if k == "T"), "")
        where = f"tune {index}" + (f" ({title})" if title else "")
        try:
            if not any(k == "K" for k, _ in fields):
                raise InputError("no K: (key) line; an ABC tune header ends with one")
            body = _with_unit_length(header, tune_text)
            source = (header + "\n" + body) if header.strip() else body
            score = _quiet_parse(lambda: m21.converter.parseData(source, format="abc"), "ABC")
            out.append(_tune_of(score, index, title))
        except InputError as exc:
            error = InputError(f"{where}: {exc}")
            if on_error is None:
                raise error from None
            on_error(index, error)
    if tunes is not None:
        missing = sorted(set(tunes) - set(range(1, len(texts) + 1)))
        if missing:
            raise InputError(f"no tune {missing[0]}; the file holds {len(texts)} tune{'s' if len(texts) != 1 else ''}")
    return out


def read_score(path: str | os.PathLike, *, tunes: list[int] | None = None, on_error=None) -> list[ScoreTune]:
    """Read every tune of a MusicXML (``.musicxml``, ``.xml``, ``.mxl``), ABC (``.abc``) or kern (``.krn``) file.

    Parameters
    ----------
    path : str or os.PathLike
    tunes : list of int, optional
        Read only these tunes (numbered from 1).
    on_error : callable, optional
        ``on_error(index, error)`` for a tune that cannot be read (no notes,
        no key line), and the other tunes are read; by default the first
        such error is raised. A file that cannot be read at all always raises.

    Returns
    -------
    list of ScoreTune
        In file order.

    Raises
    ------
    InputError
        For a missing, empty or malformed file, an ABC tune without a key
        line, a score without notes, or when music21 is not installed.
    """
    path = os.fspath(path)
    suffix = os.path.splitext(path)[1].lower()
    if suffix not in SCORE_SUFFIXES:
        raise InputError(f"{path}: not a score file; expected one of {', '.join(SCORE_SUFFIXES)}")
    check_input_file(path)
    fmt = SCORE_SUFFIXES[suffix]

    def tune_error(index: int, error: InputError) -> None:
        on_error(index, InputError(f"{path}: {error}"))

    try:
        m21 = _music21()
        if fmt == "abc":
            try:
                with open(path, encoding="utf-8") as fh:
                    text = fh.read()
            except UnicodeDecodeError:
                with open(path, encoding="latin-1") as fh:  # older ABC collections are Latin-1
                    text = fh.read()
            return read_abc_text(text, tunes=tunes, on_error=tune_error if on_error else None)

        def parse():
            conv = m21.converter.Converter()
            conv.parseFile(path, format=fmt, forceSource=True, storePickle=False)
            return conv.stream

        scores = _scores_of(_quiet_parse(parse, _FORMAT_NAMES[fmt]))
        if tunes is not None:
            missing = sorted(set(tunes) - set(range(1, len(scores) + 1)))
            if missing:
                raise InputError(f"no tune {missing[0]}; the file holds {len(scores)} tune{'s' if len(scores) != 1 else ''}")
        out = []
        for index, score in enumerate(scores, 1):
            if tunes is not None and index not in tunes:
                continue
            try:
                out.append(_tune_of(score, index))
            except InputError as exc:
                error = InputError(f"tune {index}: {exc}" if len(scores) > 1 else str(exc))
                if on_error is None:
                    raise error from None
                tune_error(index, error)
        return out
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    except InputError as exc:
        raise InputError(f"{path}: {exc}") from None


# ---- naming in note values ---------------------------------------------------------------

def _power_of_two_unit(length_q: float) -> int | None:
    """The time-signature denominator of a note value in quarters (1 -> 4, 0.5 -> 8), if it is one."""
    if length_q <= 0:
        return None
    denom = 4.0 / length_q
    k = round(math.log2(denom))
    return int(2 ** k) if 0 <= k <= 6 and abs(denom - 2 ** k) < 1e-6 else None


def score_time_signature(beats_per_bar: int, division: int | None, grouping, bar_q: float) -> str:
    """The time signature of a reading in the score's own note values.

    Simple beats give the beat's note value as denominator (2/2, 3/4, 4/2),
    compound beats count their thirds (6/8, 6/4, 3/8) and additive bars their
    tatums (7/8). A bar that fits no such unit is written in the smallest
    note value that fills it, or else as :func:`metertop.tree.time_signature_of`.

    Examples
    --------
    >>> score_time_signature(2, 2, None, 4.0), score_time_signature(2, 3, None, 6.0), score_time_signature(3, None, (2, 2, 3), 3.5)
    ('2/2', '6/4', '7/8')
    >>> score_time_signature(1, 3, None, 1.5), score_time_signature(4, 2, None, 8.0)
    ('3/8', '4/2')
    """
    if grouping is not None:
        n, unit = sum(grouping), bar_q / sum(grouping)
    elif division == 3:
        n, unit = 3 * beats_per_bar, bar_q / (3 * beats_per_bar)
    else:
        n, unit = beats_per_bar, bar_q / beats_per_bar
    denom = _power_of_two_unit(unit)
    if denom is not None:
        return f"{n}/{denom}"
    for denom in (1, 2, 4, 8, 16, 32, 64):
        count = bar_q * denom / 4.0
        if abs(count - round(count)) < 1e-6 and round(count) >= 1:
            return f"{int(round(count))}/{denom}"
    return time_signature_of(beats_per_bar, division, grouping)


# ---- analysis in score time ----------------------------------------------------------

#: Seconds the conventional beat unit lasts in the layout of score time for the analysis.
BEAT_UNIT_S = 0.6


def beat_unit_quarters(tune: ScoreTune) -> float:
    """The note value a simple beat is assumed to have, in quarters: the quarter, or the half in music written in halves.

    The pipeline's tempo features prefer beats near :data:`BEAT_UNIT_S`; in
    score time that becomes a preference for beats of this note value (and
    of its dotted value for compound beats), after the usual notation:
    simple beats in quarters, compound beats in dotted quarters. Music whose
    median distance between onsets is a half note or longer is written with
    the half as its beat unit (the older notation of 4/2 and 3/2; in the
    development corpus's training files, 4/2 tunes move in halves and 4/4
    tunes in quarters and eighths).

    Examples
    --------
    >>> beat_unit_quarters(tune_from_notes([0, 1, 1.5, 2, 3], [1, 0.5, 0.5, 1, 1]))
    1.0
    >>> beat_unit_quarters(tune_from_notes([0, 2, 4, 6, 7, 8], [2, 2, 2, 1, 1, 2]))
    2.0
    """
    onsets = np.unique(tune.onsets_q)
    if len(onsets) > 1 and float(np.median(np.diff(onsets))) >= 2.0 - _EPS_Q:
        return 2.0
    return 1.0


def compound_beat_quarters(tune: ScoreTune) -> float:
    """The note value a compound beat is assumed to have, in quarters: the dotted beat unit."""
    return 1.5 * beat_unit_quarters(tune)


def analysis_seconds_per_quarter(tune: ScoreTune) -> float:
    """The pace at which score time is laid out for the analysis, in seconds per quarter.

    Score time carries no tempo; this pace places the notes where the
    pipeline's time constants (merge window, bump widths, beat preference)
    expect played music: the beat unit of :func:`beat_unit_quarters` lasts
    :data:`BEAT_UNIT_S`. One pace holds for the whole score, so tempo marks
    cannot move a beat.
    """
    return BEAT_UNIT_S / beat_unit_quarters(tune)


def _snap_q(x):
    """Positions or lengths in quarters, rid of float noise: rounded to 1/960 of a quarter (exact for 1/64 notes and triplets).

    >>> float(_snap_q(1 / 3 + 1e-12) * 3), _snap_q(np.array([-1e-13, 2.0000000001])).tolist()
    (1.0, [0.0, 2.0])
    """
    snapped = np.round(np.asarray(x, dtype=np.float64) * 960.0) / 960.0 + 0.0
    return float(snapped) if np.ndim(snapped) == 0 else snapped


def _exact_grid(seconds_per_q: float):
    """A pulse hook for :func:`metertop.pipeline.analyse_detailed`: the tracked pulse made exact in score time.

    The tracker's median period is snapped to the nearest note value
    (:data:`NOTE_VALUES_Q`) and its phase to the nearest onset, and the warp
    becomes a straight line: in a score every pulse has the same length.
    """

    def grid(tracked: PulseTrack, times_s: np.ndarray, weights: np.ndarray) -> PulseTrack:
        period_q = tracked.median_period_s / seconds_per_q
        period_q = min(NOTE_VALUES_Q, key=lambda v: abs(math.log(v / period_q)))
        period_s = period_q * seconds_per_q
        angle = np.angle(np.mean(np.exp(2j * np.pi * tracked.times_s / period_s)))
        phase = (angle / (2 * np.pi)) % 1.0
        onset_phase = (times_s / period_s) % 1.0
        d = np.abs((onset_phase - phase + 0.5) % 1.0 - 0.5)
        start_s = float(times_s[int(np.argmin(d))])
        lo = float(times_s[0]) - 4 * period_s
        hi = float(times_s[-1]) + 4 * period_s
        grid_s = np.array([lo, hi])
        theta = (grid_s - start_s) / period_s
        k = np.arange(np.ceil(theta[0] + 3.5), np.floor(theta[1] - 3.5) + 1)
        return PulseTrack(start_s + k * period_s, grid_s, theta, tracked.centres_s, tracked.periods_s, tracked.candidates_s, tracked.salience)

    return grid


@dataclass(frozen=True)
class ScoreReading(Reading):
    """A ranked reading of a score, with its bar, beat and pickup in quarters."""

    bar_quarters: float
    beat_quarters: float
    pickup_quarters: float


@dataclass(frozen=True)
class ScoreAnalysis:
    """The analysis of one tune in score time.

    Attributes
    ----------
    tune : ScoreTune
    result : MetreResult
        Seconds at the score's tempo (:attr:`ScoreTune.tempo`), with the
        score keys ``tune``, ``title``, ``bar_quarters``, ``beat_quarters``
        and ``pickup_quarters``; ``alternatives`` are :class:`ScoreReading`.
    analysis : metertop.pipeline.Analysis
        The pipeline's own analysis, in score time laid out at
        ``seconds_per_quarter`` from the first note.
    seconds_per_quarter : float
        The pace of that layout.
    """

    tune: ScoreTune
    result: MetreResult
    analysis: Analysis
    seconds_per_quarter: float

    @property
    def readings(self) -> list[ScoreReading]:
        return list(self.result.alternatives)

    def reading(self, rank: int) -> ScoreReading:
        """The reading of the given rank (1 is the proposal)."""
        alts = self.result.alternatives
        if not 1 <= rank <= len(alts):
            raise InputError(f"no reading {rank}; this tune has readings 1 to {len(alts)}")
        return alts[rank - 1]


def _tune_notes(tune: ScoreTune, seconds_per_q: float) -> NoteTable:
    n = len(tune.onsets_q)
    t = (tune.onsets_q - tune.first_q) * seconds_per_q
    keep = np.ones(n, bool)
    keep[1:] = ~((np.abs(np.diff(t)) < 1e-12) & (tune.pitches[1:] == tune.pitches[:-1]))
    return NoteTable(
        onsets_s=t[keep], durations_s=(tune.durations_q * seconds_per_q)[keep], pitches=tune.pitches[keep],
        velocities=np.full(int(keep.sum()), np.nan), weights=np.full(int(keep.sum()), np.nan),
        is_drum=np.zeros(int(keep.sum()), bool), track=tune.parts[keep], source="score",
    )


def _beat_q(beats_per_bar: int, grouping, bar_q: float) -> float:
    if grouping is not None:
        tatum = bar_q / sum(grouping)
        return float(np.median(grouping)) * tatum
    return bar_q / beats_per_bar


def analyse_tune(tune: ScoreTune, *, settings: Settings = Settings()) -> ScoreAnalysis:
    """Propose the metre of one tune, in score time.

    Parameters
    ----------
    tune : ScoreTune
    settings : Settings

    Returns
    -------
    ScoreAnalysis

    Examples
    --------
    >>> bars = [2.0, 0.5, 0.5] + [1.5, 0.5, 1.0]      # two bars of a waltz: a long note on each downbeat
    >>> on = np.cumsum([0.0] + bars * 8)[:-1]
    >>> a = analyse_tune(tune_from_notes(on, bars * 8))
    >>> a.result.time_signature, a.result.to_dict()["bar_quarters"], a.result.to_dict()["pickup_quarters"]
    ('3/4', 3.0, 0.0)
    """
    spq = analysis_seconds_per_quarter(tune)
    # Beats are preferred near the beat unit, compound beats near its dotted value.
    tree = replace(settings.tree, beat_reference_s=BEAT_UNIT_S,
                   compound_beat_reference_s=compound_beat_quarters(tune) / beat_unit_quarters(tune) * BEAT_UNIT_S)
    analysis = analyse_detailed(_tune_notes(tune, spq), settings=replace(settings, tree=tree), pulse_grid=_exact_grid(spq))
    r = analysis.result
    q0, end_q = tune.first_q, tune.end_q
    tempo = tune.tempo

    def quarters(nominal_s) -> np.ndarray:
        return _snap_q(q0 + np.asarray(nominal_s, dtype=np.float64) / spq)

    def seconds(nominal_s) -> np.ndarray:
        return tempo.seconds(quarters(nominal_s))

    sec_per_q = tempo.median_seconds_per_quarter(q0, end_q)

    def reading_in_quarters(reading: Reading) -> ScoreReading:
        bar_q = _snap_q(reading.bar_s / spq)
        pickup = _snap_q((quarters(reading.phase_s) - q0) % bar_q)
        if bar_q - pickup < _EPS_Q:
            pickup = 0.0
        return ScoreReading(
            rank=reading.rank,
            time_signature=score_time_signature(reading.beats_per_bar, reading.beat_division, reading.grouping, bar_q),
            beats_per_bar=reading.beats_per_bar, beat_division=reading.beat_division, grouping=reading.grouping,
            bar_s=bar_q * sec_per_q, phase_s=float(tempo.seconds(q0 + pickup)), score=reading.score,
            probability=reading.probability, bar_quarters=bar_q,
            beat_quarters=_snap_q(_beat_q(reading.beats_per_bar, reading.grouping, bar_q)), pickup_quarters=pickup,
        )

    readings = [reading_in_quarters(a) for a in r.alternatives]
    best = readings[0]
    downbeats_s = seconds(r.downbeats_s)
    beats_s = seconds(r.beats_s)

    def median_step(times: np.ndarray, fallback: float) -> float:
        return float(np.median(np.diff(times))) if len(times) > 1 else fallback

    bar_s = median_step(downbeats_s, best.bar_quarters * sec_per_q)
    beat_s = median_step(beats_s, best.beat_quarters * sec_per_q)
    levels = [replace(lv, period_s=_snap_q(lv.period_s / spq) * sec_per_q, phase_s=float(seconds([lv.phase_s])[0])) for lv in r.levels]
    segments = [replace(sg, start_s=float(seconds([sg.start_s])[0]), end_s=float(seconds([sg.end_s])[0]),
                        time_signature=best.time_signature) for sg in r.segments]
    extra = dict(r.extra)
    extra["pulse_s"] = _snap_q(extra["pulse_s"] / spq) * sec_per_q
    extra.update({
        "tune": tune.index,
        "title": tune.title,
        "bar_quarters": best.bar_quarters,
        "beat_quarters": best.beat_quarters,
        "pickup_quarters": best.pickup_quarters,
        "quarter_bpm": 60.0 / sec_per_q,
        "tempo_stated": tempo.stated,
    })
    verdict = notated_verdict(tune, analysis)
    if verdict is not None:
        extra["notated_check"] = verdict.to_dict()
    result = replace(
        r,
        time_signature=best.time_signature,
        bar_s=bar_s,
        beat_s=beat_s,
        tempo_bpm=60.0 / beat_s,
        levels=levels,
        downbeats_s=downbeats_s,
        beats_s=beats_s,
        alternatives=readings,
        segments=segments,
        duration_s=float(tempo.seconds(tune.onsets_q[-1]) - tempo.seconds(q0)),
        notated_time_signature=tune.notated_time_signature,
        extra=extra,
    )
    return ScoreAnalysis(tune, result, analysis, spq)


def notated_verdict(tune: ScoreTune, analysis: Analysis):
    """The input's own time signature checked against the proposal, as ``metertop check`` does; None without one.

    ``analysis`` is the pipeline's analysis in score time laid out at
    :func:`analysis_seconds_per_quarter` seconds a quarter (from the first
    note); :func:`metertop.check.check_notated` reads time signatures by
    shape (beats and division), so the layout does not matter to it. The
    verdict goes to the output as ``notated_check``.
    """
    if tune.notated_time_signature is None:
        return None
    try:
        from .check import check_notated
    except ImportError:
        return None
    return check_notated(analysis, tune.notated_time_signature)


def analyse_score(path: str | os.PathLike, *, tunes: list[int] | None = None, settings: Settings = Settings(),
                  on_error=None) -> list[ScoreAnalysis]:
    """Read a score file and analyse each of its tunes (see :func:`read_score`, :func:`analyse_tune`).

    ``on_error(index, error)``, if given, receives each tune that cannot be
    read or analysed, and the others go on; by default the first raises.

    Raises
    ------
    InputError
        For unreadable input, or a tune too short for any metre.
    """
    out = []
    for tune in read_score(path, tunes=tunes, on_error=on_error):
        try:
            out.append(analyse_tune(tune, settings=settings))
        except InputError as exc:
            error = InputError(f"{os.fspath(path)}: tune {tune.index}: {exc}")
            if on_error is None:
                raise error from None
            on_error(tune.index, error)
    return out
