"""The analysis pipeline, one straight line from input to result.

``load -> events -> accents -> pulse & tempo curve -> warp to pulse time ->
cycle scan -> metric tree -> result``

Conventions
-----------
:func:`analyse` accepts a path, a :class:`~metertop.load.NoteTable`, or an
array of onset times in seconds, and returns a frozen
:class:`~metertop.result.MetreResult`.
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass, field

import numpy as np

from .accents import AccentMix, event_weights
from .errors import InputError
from .events import merge_events
from .flux import FluxSettings
from .limits import check_note_count, check_span
from .load import NoteTable, load_notes, notes_from_onsets
from .repetition import BarRepetition, note_keys
from .result import Level, MetreResult, Reading, Segment, make_result
from .segments import SegmentReading, SegmentSettings, find_segments
from .tempo import PulseTrack, TempoSettings, track_pulse
from .tree import MetricTree, TreeSettings, build_tree, promote

__all__ = ["Settings", "Analysis", "analyse", "analyse_detailed", "choose_reading", "MIN_EVENTS"]

# Two bars of the slowest common metre need at least this many events.
MIN_EVENTS = 8
MIN_SPAN_S = 1.5


@dataclass(frozen=True)
class Settings:
    """Every tunable of the pipeline, grouped by stage."""

    merge_window_s: float = 0.035
    engine: str = "dionysus"
    accents: AccentMix = field(default_factory=AccentMix)
    tempo: TempoSettings = field(default_factory=TempoSettings)
    tree: TreeSettings = field(default_factory=TreeSettings)
    n_alternatives: int = 5
    segments: SegmentSettings = field(default_factory=SegmentSettings)
    audio: FluxSettings = field(default_factory=FluxSettings)


@dataclass(frozen=True)
class Analysis:
    """The result together with the intermediate stages (for plots and checks).

    ``times_s`` and ``weights`` are the merged events and their accents;
    ``notes`` are the notes they came from and ``settings`` the settings
    used (the reading model among them).
    """

    result: MetreResult
    times_s: np.ndarray
    weights: np.ndarray
    pulse: PulseTrack
    tree: MetricTree
    notes: NoteTable | None = None
    settings: Settings | None = None


def _as_notes(source, tracks, audio: FluxSettings | None = None) -> NoteTable:
    if isinstance(source, NoteTable):
        return source
    if isinstance(source, (str, os.PathLike)):
        return load_notes(source, tracks=tracks, audio=audio)
    try:
        arr = np.asarray(source, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError("expected a file path, a NoteTable or an array of onset times in seconds") from None
    return notes_from_onsets(arr.ravel())


def analyse(source, *, tracks: list[int] | None = None, settings: Settings = Settings()) -> MetreResult:
    """Propose the metric tree of a piece.

    Parameters
    ----------
    source : str, os.PathLike, NoteTable or array_like of float
        A MIDI file, onset list or recording, notes already loaded, or onset times in
        seconds.
    tracks : list of int, optional
        MIDI track indices to keep; all by default.
    settings : Settings

    Returns
    -------
    MetreResult

    Raises
    ------
    InputError
        For unreadable input or too few onsets.

    Examples
    --------
    >>> import numpy as np
    >>> bars = np.arange(16) * 1.5               # a bar every 1.5 s
    >>> onsets = np.sort(np.concatenate([bars, bars + 0.5, bars + 1.0]))
    >>> weights = np.tile([3.0, 1.0, 1.0], 16)   # the first of three beats is loud
    >>> from metertop.load import notes_from_onsets
    >>> analyse(notes_from_onsets(onsets, weights)).time_signature
    '3/4'
    """
    return analyse_detailed(source, tracks=tracks, settings=settings).result


def analyse_detailed(source, *, tracks: list[int] | None = None, settings: Settings = Settings(), pulse_grid=None) -> Analysis:
    """Like :func:`analyse`, but also return the intermediate stages.

    ``pulse_grid``, if given, is called as ``pulse_grid(tracked, times_s,
    weights)`` and returns the :class:`~metertop.tempo.PulseTrack` to use
    instead of the tracked one: score input makes the pulse exact in note
    values this way (:mod:`metertop.scores`).
    """
    notes = _as_notes(source, tracks, settings.audio)
    check_note_count(len(notes))
    events = merge_events(notes, settings.merge_window_s)
    t = events.times_s
    if len(t) < MIN_EVENTS or t[-1] - t[0] < MIN_SPAN_S:
        raise InputError(f"too few onsets for any metre: {len(t)} events over {t[-1] - t[0]:.2f} s "
                         f"(need at least {MIN_EVENTS} events over {MIN_SPAN_S} s)")
    check_span(float(t[0]), float(t[-1]))
    w = event_weights(events, settings.accents)
    pulse = track_pulse(t, w, settings.tempo)
    if pulse_grid is not None:
        pulse = pulse_grid(pulse, t, w)
    tau = pulse.warp(t)
    pulse_s = pulse.median_period_s
    salience = pulse.salience_profile()
    repetition = _kit_repetition(notes, pulse) if events.has_drums else None
    tree = build_tree(tau, w, pulse_s, settings.tree, engine=settings.engine, drums=events.has_drums, period_salience=salience,
                      repetition=repetition)
    segments = find_segments(tau, w, pulse_s, tree, settings.tree, settings.engine, events.has_drums, settings.segments,
                             period_salience=salience, repetition=repetition)
    result = _assemble(notes, t, pulse, tree, settings, segments)
    return Analysis(result, t, w, pulse, tree, notes, settings)


def _kit_repetition(notes: NoteTable, pulse: PulseTrack) -> BarRepetition:
    """The bar-lag repetition of the drum kit's notes, in pulse time (the kit carries the pattern; a melody's pitches rarely recur a bar later)."""
    kit = np.asarray(notes.is_drum, dtype=bool)
    return BarRepetition(pulse.warp(notes.onsets_s[kit]), note_keys(notes.pitches[kit], notes.is_drum[kit]))


def choose_reading(analysis: Analysis, *, rank: int | None = None, time_signature: str | None = None) -> Analysis:
    """The analysis again, with another reading chosen.

    Parameters
    ----------
    analysis : Analysis
        From :func:`analyse_detailed`.
    rank : int, optional
        The reading ranked ``rank`` among the result's ``alternatives``
        (1 is the proposal itself).
    time_signature : str, optional
        The best-scored reading of this notated metre (see
        :mod:`metertop.notation`): its phase and bars are fitted to the
        playing, along the same tempo curve.

    Returns
    -------
    Analysis
        Its result describes the chosen reading; ``alternatives`` rank it
        first and keep the others in their order; ``confidence`` is the
        chosen reading's probability under the model.

    Raises
    ------
    InputError
        For a rank beyond the alternatives, a time signature metertop cannot
        read, or one no reading of which fits the piece's tempo and length.
    """
    from .notation import notated_metre

    if (rank is None) == (time_signature is None):
        raise ValueError("give exactly one of rank and time_signature")
    tree, pulse = analysis.tree, analysis.pulse
    settings = analysis.settings or Settings()
    if rank is not None:
        from_pulses = float(pulse.warp([analysis.times_s[0] - 0.05])[0])
        indices = _reading_indices(tree, pulse, from_pulses, settings.n_alternatives)
        if not 1 <= rank <= len(indices):
            raise InputError(f"there is no reading {rank}: this piece has {len(indices)} (see 'alternatives')")
        index = indices[rank - 1]
    else:
        metre = notated_metre(time_signature)
        index = next((k for k, c in enumerate(tree.candidates) if metre.matches(c.beats_per_bar, c.division, c.grouping)), None)
        if index is None:
            raise InputError(f"no reading in {metre.text} fits this piece: its bars would fall outside the tempo range "
                             f"(beats of {settings.tree.min_beat_s:g}-{settings.tree.max_beat_s:g} s, bars up to {settings.tree.max_bar_s:g} s) "
                             "or be too long for the piece")
    tau = pulse.warp(analysis.times_s)
    chosen = promote(tree, index, tau, analysis.weights, pulse.median_period_s, settings.tree, engine=settings.engine)
    notes = analysis.notes if analysis.notes is not None else notes_from_onsets(analysis.times_s)
    result = _assemble(notes, analysis.times_s, pulse, chosen, settings)
    how = f"reading {rank}" if rank is not None else f"time signature {time_signature}"
    result = dataclasses.replace(result, extra={**result.extra, "chosen": how})
    return Analysis(result, analysis.times_s, analysis.weights, pulse, chosen, analysis.notes, settings)


def _grid_times(pulse: PulseTrack, start_pulses: float, step_pulses: np.ndarray, bar_pulses: float, t0: float, t1: float, tol_s: float) -> np.ndarray:
    """Times of a repeating pattern of offsets (in pulses) that fall within the piece."""
    lo, hi = pulse.warp([t0 - tol_s, t1 + tol_s])
    first_bar = np.floor((lo - start_pulses) / bar_pulses) - 1
    last_bar = np.ceil((hi - start_pulses) / bar_pulses) + 1
    bars = start_pulses + np.arange(first_bar, last_bar + 1) * bar_pulses
    pos = (bars[:, None] + step_pulses[None, :]).ravel()
    times = pulse.unwarp(pos)
    return np.sort(times[(times >= t0 - tol_s) & (times <= t1 + tol_s)])


def _first_at(pulse: PulseTrack, start_pulses: float, length_pulses: float, from_pulses: float) -> float:
    """Time (s) of the first point of the grid ``start + k * length`` at or after ``from_pulses``."""
    k = np.ceil((from_pulses - start_pulses) / length_pulses)
    return float(pulse.unwarp([start_pulses + k * length_pulses])[0])


def _segment_grids(pulse: PulseTrack, segments: list[SegmentReading], t0: float, t1: float, tol: float) -> tuple[np.ndarray, np.ndarray, list[Segment]]:
    """Downbeats and beats of each segment's reading within its span, and the segments as results."""
    downbeats, beats, out = [], [], []
    for k, seg in enumerate(segments):
        c = seg.reading
        lo = t0 if k == 0 else float(pulse.unwarp([seg.start_pulses])[0])
        hi = t1 if k == len(segments) - 1 else float(pulse.unwarp([seg.end_pulses])[0])
        d = _grid_times(pulse, c.downbeat_pulses, np.array([0.0]), float(c.bar), t0, t1, tol)
        b = _grid_times(pulse, c.downbeat_pulses, c.beat_offsets(), float(c.bar), t0, t1, tol)
        a = lo - (tol if k == 0 else tol / 10)
        z = hi + tol if k == len(segments) - 1 else hi - tol / 10
        d, b = d[(d >= a) & (d < z)], b[(b >= a) & (b < z)]
        downbeats.append(d), beats.append(b)
        bar_s = float(np.median(np.diff(d))) if len(d) > 1 else float(c.bar) * pulse.median_period_s
        out.append(Segment(lo, hi, c.time_signature, c.beats_per_bar, c.division if c.grouping is None else None,
                           list(c.grouping) if c.grouping else None, bar_s, float(d[0]) if len(d) else None, float(seg.log_odds)))
    return np.concatenate(downbeats), np.concatenate(beats), out


def _assemble(notes: NoteTable, t: np.ndarray, pulse: PulseTrack, tree: MetricTree, settings: Settings,
              segments: list[SegmentReading] | None = None) -> MetreResult:
    best = tree.best
    t0, t1 = float(t[0]), float(t[-1])
    tol = 0.05
    bar_p = float(best.bar)
    if segments is None or len(segments) < 2:
        segments = [SegmentReading(float(pulse.warp([t0])[0]), float(pulse.warp([t1])[0]), best, 0.0)]
    downbeats, beats, segment_results = _segment_grids(pulse, segments, t0, t1, tol)
    pulse_s = pulse.median_period_s
    # The main reading's own grid gives its bar and beat, also where other segments interrupt it.
    main_d = _grid_times(pulse, best.downbeat_pulses, np.array([0.0]), bar_p, t0, t1, tol)
    main_b = _grid_times(pulse, best.downbeat_pulses, best.beat_offsets(), bar_p, t0, t1, tol)
    bar_s = float(np.median(np.diff(main_d))) if len(main_d) > 1 else bar_p * pulse_s
    beat_s = float(np.median(np.diff(main_b))) if len(main_b) > 1 else float(best.beat) * pulse_s
    from_pulses = float(pulse.warp([t0 - tol])[0])
    levels = []
    for name in ("subdivision", "beat", "bar", "hypermeasure"):
        if name not in tree.levels:
            continue
        node = tree.levels[name]
        length = float(node["length"])
        first = _first_at(pulse, node.get("start", best.downbeat_pulses), length, from_pulses)
        levels.append(Level(name, length * pulse_s, first, node["score"], node["confidence"]))
    alternatives = _alternatives(tree, pulse, from_pulses, settings.n_alternatives)
    notated = f"{notes.time_signatures[0]}" if notes.time_signatures else None
    return make_result(
        source=notes.source,
        time_signature=best.time_signature,
        beats_per_bar=best.beats_per_bar,
        beat_division=best.division if best.grouping is None else None,
        grouping=list(best.grouping) if best.grouping else None,
        bar_s=bar_s,
        beat_s=beat_s,
        tempo_bpm=60.0 / beat_s,
        confidence=float(tree.probabilities[0]),
        levels=levels,
        downbeats_s=downbeats,
        beats_s=beats,
        alternatives=alternatives,
        segments=segment_results,
        n_events=len(t),
        duration_s=t1 - t0,
        notated_time_signature=notated,
        extra={"pulse_s": pulse_s, "score_terms": best.terms},
    )


def _reading_indices(tree: MetricTree, pulse: PulseTrack, from_pulses: float, limit: int) -> list[int]:
    """Candidates that are distinct readings (notation and first downbeat at or after ``from_pulses``), best first."""
    out, seen = [], set()
    for k, cand in enumerate(tree.candidates):
        phase_s = _first_at(pulse, cand.downbeat_pulses, float(cand.bar), from_pulses)
        key = (cand.time_signature, cand.grouping, round(phase_s, 2))
        if key in seen:
            continue
        seen.add(key)
        out.append(k)
        if len(out) >= limit:
            break
    return out


def _alternatives(tree: MetricTree, pulse: PulseTrack, from_pulses: float, limit: int) -> list[Reading]:
    """Distinct readings (notation and first downbeat at or after ``from_pulses``), best first."""
    out = []
    for k in _reading_indices(tree, pulse, from_pulses, limit):
        cand, prob = tree.candidates[k], tree.probabilities[k]
        bar = float(cand.bar)
        phase_s = _first_at(pulse, cand.downbeat_pulses, bar, from_pulses)
        out.append(Reading(
            rank=len(out) + 1,
            time_signature=cand.time_signature,
            beats_per_bar=cand.beats_per_bar,
            beat_division=cand.division if cand.grouping is None else None,
            grouping=list(cand.grouping) if cand.grouping else None,
            bar_s=bar * pulse.median_period_s,
            phase_s=phase_s,
            score=cand.score,
            probability=float(prob),
        ))
    return out
