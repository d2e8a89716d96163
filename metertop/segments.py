"""Metre changes: readings of windows along the piece, linked into segments.

Conventions
-----------
- Works in pulse time (:mod:`metertop.tempo`), on the events and weights of
  the whole piece and the metric tree of the whole piece (its best reading is
  the *main* reading).
- A *state* is a reading with its downbeat phase: the shape (beats, division
  or grouping, beat length, bar length, in pulses) and the position of a
  downbeat modulo the bar.
- Evidence is in log-odds: model scores divided by the model's temperature
  (:mod:`metertop.model`), as in :mod:`metertop.check`.

Method
------
1. **Windows** of ``window_bars`` bars of the main reading, one bar apart.
   Each window's events are wrapped at the main bar length; the margin of
   the main downbeat in the merge tree (its relative persistence minus the
   largest other: the ``bar`` evidence of :mod:`metertop.tree`, on the
   window alone) is the local support of the main reading; so is, for bars
   of several beats, the persistence at the other beats against the other
   tatums. Where the smaller falls to ``gate_margin`` or below, and
   ``gate_drop`` below its median over the piece, in most of ``min_bars``
   windows in a row, the main reading may not hold; elsewhere the piece
   keeps it (and no more is computed).
2. **Proposal.** The reading model scores the flagged stretch (without its
   outer bars) over a small lattice: bars of one to five beats of the main
   beat, of the beat with the other division on the same tatum (6/8 against
   3/4), and additive bars of the tatum. Its best reading other than the
   main one is the proposal.
3. **Boundaries.** The proposal starts on one of its downbeats and ends on
   one of the main reading's, each chosen to maximise the accent weight on
   the downbeats of the reading in force, before and after the change,
   counted against the mean weight on the finer grid: a bar line belongs to
   the reading whose downbeats carry the accents.
4. **Validation.** The proposal's segment must span ``min_bars`` of its bars
   and beat the main reading over its own span by ``min_log_odds``, both
   scored by the model on that span alone; otherwise the main reading stays.

The main reading is assumed to resume at its own phase after a change; a
piece that returns to it a beat early or late keeps the changed segment to
its end.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .tempo import viterbi_path
from .repetition import BarRepetition
from .tree import ADDITIVE, Candidate, Lattice, MetricTree, TreeSettings, _margin, _Scanner, _scored

__all__ = ["SegmentSettings", "SegmentReading", "find_segments"]


@dataclass(frozen=True)
class SegmentSettings:
    """Parameters of the metre-change search (bars are bars of the reading in question)."""

    window_bars: int = 4
    min_window_s: float = 6.0
    gate_margin: float = 0.0
    gate_drop: float = 0.0
    min_bars: int = 3
    min_log_odds: float = 1.0
    switch_cost: float = 4.0
    window_phases: int = 2
    enabled: bool = True


@dataclass(frozen=True)
class SegmentReading:
    """A stretch of the piece in pulse time, with its reading and its evidence against the main reading."""

    start_pulses: float
    end_pulses: float
    reading: Candidate
    log_odds: float


def _key(c: Candidate) -> tuple:
    return (c.beats_per_bar, c.division, c.grouping, c.beat, c.tatum, c.bar)


def _same_phase(a: float, b: float, bar: float, tol: float) -> bool:
    d = (a - b) % bar
    return min(d, bar - d) <= tol


def _unit(c: Candidate) -> float:
    return float(c.tatum if c.grouping else c.beat / c.division)


def _window_lattice(main: Candidate) -> Lattice:
    """The readings a window is scored on: bars of one to five main beats (in the main division), bars of the beat
    with the other division on the same tatum (3/4 against 6/8), and additive bars of the tatum."""
    tatum = main.tatum if main.grouping else main.beat / main.division
    g = Lattice()
    for beat, div in ((tatum * 2, 2), (tatum * 3, 3)):
        g.add_edge(beat / div, beat, key=("division", div), kind="division", ratio=div)
        for n in range(1, 6):
            g.add_edge(beat, beat * n, key=("bar", n), kind="bar", ratio=n)
    for grouping in ADDITIVE:
        g.add_edge(tatum, tatum * sum(grouping), key=("additive", grouping), kind="additive", ratio=sum(grouping), grouping=grouping)
    return g


def _score_of(cands: list[Candidate], state: Candidate, tol: float) -> float | None:
    """Best score among ``cands`` of the state's shape at the state's phase, or None."""
    key, bar = _key(state), float(state.bar)
    best = None
    for c in cands:
        if _key(c) == key and _same_phase(c.downbeat_pulses, state.downbeat_pulses, bar, tol):
            best = c.score if best is None else max(best, c.score)
    return best


def _span_tree(x, w, lo, hi, pulse_s, tree_settings, engine, drums, lattice, period_salience=None,
               repetition: BarRepetition | None = None) -> list[Candidate] | None:
    """The readings of the events in [lo, hi), scored and best first (as :func:`metertop.tree.build_tree` scores
    them; the tree and hypermeasure of the span are not needed), or None for a span too short or too sparse."""
    sel = (x >= lo) & (x < hi)
    if sel.sum() < 6:
        return None
    try:
        return _scored(x[sel], w[sel], pulse_s, tree_settings, engine, drums, period_salience, lattice,
                       None if repetition is None else repetition.window(lo, hi))[1]
    except ValueError:
        return None  # no reading fits so short a span


def _window_width(state: Candidate, pulse_s: float, s: "SegmentSettings") -> float:
    """Window length in pulses: ``window_bars`` bars, and at least ``min_window_s`` seconds, in whole bars."""
    bar = float(state.bar)
    return bar * max(s.window_bars, int(np.ceil(s.min_window_s / (bar * pulse_s))))


def _margins(x, w, state: Candidate, starts: np.ndarray, width: float, pulse_s, tree_settings, engine) -> np.ndarray:
    """The local support of a reading, window by window (NaN for near-empty windows).

    Both read off the merge tree of the window's events wrapped at the bar
    length: the margin of the downbeat (its relative persistence minus the
    largest other), and, for bars of more than one beat, the mean relative
    persistence at the other beats minus that at the remaining tatums (6/8
    and 3/4 agree on the downbeat and differ here). The smaller counts.
    """
    bar = float(state.bar)
    unit = _unit(state)
    phase = (state.downbeat_pulses % bar) / bar
    tol = min(0.25 * unit / bar, 0.12)
    tatums = np.arange(int(round(bar / unit))) * unit
    beats = state.beat_offsets()[1:]
    is_beat = np.array([np.min(np.abs(beats - t)) < 1e-6 if len(beats) else False for t in tatums])
    beat_ph = ((state.downbeat_pulses + tatums[is_beat]) % bar) / bar
    rest_ph = ((state.downbeat_pulses + tatums[~is_beat][1:]) % bar) / bar
    out = np.full(len(starts), np.nan)
    for i, lo in enumerate(starts):
        sel = (x >= lo) & (x < lo + width)
        if sel.sum() >= 4:
            cyc = _Scanner(x[sel], w[sel], tree_settings, engine, pulse_s)(state.bar)
            support = _margin(cyc, phase, tol)
            if len(beat_ph) and len(rest_ph):
                support = min(support, float(cyc.persistence_at(beat_ph, tol).mean() - cyc.persistence_at(rest_ph, tol).mean()))
            out[i] = support
    return out


def _downbeats(state: Candidate, lo: float, hi: float) -> np.ndarray:
    """The reading's bar lines in [lo, hi)."""
    bar = float(state.bar)
    first = state.downbeat_pulses + np.ceil((lo - state.downbeat_pulses) / bar - 1e-9) * bar
    return np.arange(first, hi - 1e-9, bar)


def _nearest_weights(x, w, pts, tol) -> np.ndarray:
    """Weight of the event nearest each position, 0 where none lies within ``tol``."""
    pts = np.asarray(pts, dtype=np.float64)
    if len(pts) == 0:
        return pts
    idx = np.clip(np.searchsorted(x, pts), 1, len(x) - 1)
    nearest = np.where(np.abs(x[idx - 1] - pts) <= np.abs(x[idx] - pts), idx - 1, idx)
    return np.where(np.abs(x[nearest] - pts) <= tol, w[nearest], 0.0)


def _levels(state: Candidate, pts: np.ndarray) -> np.ndarray:
    """Metrical level of each position under a reading: 2 on its downbeats, 1 on its other beats, 0 elsewhere."""
    bar = float(state.bar)
    tol = 0.25 * _unit(state)
    rel = (pts - state.downbeat_pulses) % bar
    beat = np.zeros(len(pts), dtype=bool)
    for off in state.beat_offsets():
        d = np.abs(rel - off)
        beat |= np.minimum(d, bar - d) <= tol
    down = np.minimum(rel, bar - rel) <= tol
    return np.where(down, 2.0, np.where(beat, 1.0, 0.0))


def _boundary(x, w, old: Candidate, new: Candidate, lo: float, hi: float) -> float:
    """Where ``new`` takes over from ``old``: a bar line of both in [lo, hi] (any bar line of ``new`` when they share none).

    A metre changes at a bar line: the old reading's last bar is complete
    and the new reading's first bar starts there. Each candidate gives every
    position of the finer tatum grid over the stretch a metrical level (2 on
    a downbeat, 1 on another beat, 0 elsewhere), from ``old`` before it and
    ``new`` after it; the candidate whose levels correlate best with the
    accent weight found there wins (the earliest on a tie).
    """
    unit = min(_unit(old), _unit(new))
    span = max(float(old.bar), float(new.bar))
    zone_lo, zone_hi = lo - span, hi + span
    pts = np.arange(zone_lo, zone_hi, unit)
    d_new = _downbeats(new, lo, hi + 1e-6)
    if len(pts) < 4 or len(d_new) == 0:
        return float(lo)
    d_old = _downbeats(old, lo - span, hi + span)
    shared = [c for c in d_new if len(d_old) and np.min(np.abs(d_old - c)) <= 0.25 * unit]
    candidates = shared or list(d_new)
    weight = _nearest_weights(x, w, pts, 0.25 * unit)
    l_old, l_new = _levels(old, pts), _levels(new, pts)
    best, best_score = float(candidates[0]), -np.inf
    for c in candidates:
        levels = np.where(pts < c - 1e-6, l_old, l_new)
        if np.std(levels) == 0 or np.std(weight) == 0:
            continue
        score = float(np.corrcoef(levels, weight)[0, 1])
        if score > best_score + 1e-9:
            best, best_score = float(c), score
    return best


def _is_main(state: Candidate, main: Candidate) -> bool:
    return _key(state) == _key(main) and _same_phase(state.downbeat_pulses, main.downbeat_pulses, float(main.bar), 0.25 * _unit(main))


def _compatible(a: Candidate, b: Candidate) -> bool:
    """Do two readings share beats and bar lines, one bar a multiple of the other (2/4 and 4/4 on the same downbeats)?"""
    if (a.grouping, a.division, a.beat, a.tatum) != (b.grouping, b.division, b.beat, b.tatum):
        return False
    short, long_ = (a, b) if a.bar <= b.bar else (b, a)
    if (long_.bar / short.bar).denominator != 1:
        return False
    return _same_phase(long_.downbeat_pulses, short.downbeat_pulses, float(short.bar), 0.25 * _unit(short))


def find_segments(positions, weights, pulse_s: float, tree: MetricTree, tree_settings: TreeSettings = TreeSettings(),
                  engine: str = "dionysus", drums: bool = False, settings: SegmentSettings = SegmentSettings(),
                  period_salience: tuple[np.ndarray, np.ndarray] | None = None,
                  repetition: BarRepetition | None = None) -> list[SegmentReading]:
    """Split the piece where its metre changes (see the module notes).

    Parameters
    ----------
    positions, weights : array_like
        Event positions in pulse time (sorted) and their weights, as the
        tree was built from.
    pulse_s : float
    tree : MetricTree
        The whole piece's tree; its best reading is the main reading.
    tree_settings, engine, drums
        As for :func:`metertop.tree.build_tree`.
    settings : SegmentSettings
    period_salience : optional
        The pulse scan's salience profile, as given to the whole piece's
        tree (:func:`metertop.tree.build_tree`), so that windows are scored
        with the same features.
    repetition : BarRepetition, optional
        The notes' bar-lag repetition, as given to the whole piece's tree;
        each window sees its own notes' share.

    Returns
    -------
    list of SegmentReading
        In order, covering the events; one segment with the main reading
        when the metre does not change.
    """
    x = np.asarray(positions, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    main = tree.best
    x0, x1 = float(x[0]), float(x[-1])
    whole = [SegmentReading(x0, x1, main, 0.0)]
    bar = float(main.bar)
    width = _window_width(main, pulse_s, settings)
    if not settings.enabled or len(x) < 8 or x1 - x0 < width + 2 * settings.min_bars * bar:
        return whole
    first = x0 - bar + (main.downbeat_pulses - x0) % bar
    # 1. The gate: does the main reading lose its local support anywhere?
    starts = np.arange(first, x1 - width + bar, bar)
    margins = _margins(x, w, main, starts, width, pulse_s, tree_settings, engine)
    if not np.isfinite(margins).any():
        return whole  # no window has enough onsets to measure the main reading's support
    # Low in absolute terms and against the piece's own typical support (drum kits often give every window a low margin).
    m = np.nan_to_num(margins, nan=np.inf)
    low = (m <= settings.gate_margin) & (m <= np.median(margins[np.isfinite(margins)]) - settings.gate_drop)
    if not np.any(np.convolve(low.astype(int), np.ones(settings.min_bars, int), mode="valid") >= settings.min_bars):
        return whole
    # 2. Local readings, half a window apart.
    temperature = tree_settings.model.temperature
    lattice = _window_lattice(main)
    local = dataclasses.replace(tree_settings, phase_candidates=min(tree_settings.phase_candidates, settings.window_phases))
    hop = bar * max(1, int(round(width / bar / 2)))
    wstarts = np.arange(first, x1 - width / 2, hop)
    windows = []
    for lo in wstarts:
        cands = _span_tree(x, w, lo, lo + width, pulse_s, local, engine, drums, lattice, period_salience, repetition)
        windows.append(cands if cands is not None else [])
    states = [main]
    for cands in windows:
        if cands and not any(_compatible(cands[0], st) for st in states):
            states.append(cands[0])
    if len(states) == 1:
        return whole
    # 3. Viterbi over the windows.
    emit = np.zeros((len(windows), len(states)))
    for i, cands in enumerate(windows):
        floor = min((c.score for c in cands), default=0.0)
        for j, st in enumerate(states):
            support = [c.score for c in cands if _compatible(c, st)]
            emit[i, j] = (max(support) if support else floor) / temperature
    path = viterbi_path(emit, -settings.switch_cost * (1 - np.eye(len(states))))
    # 4. Boundaries at the bar lines where the path changes state.
    segs = [[x0, int(path[0])]]
    for i in range(1, len(path)):
        if path[i] != segs[-1][1]:
            old, new = states[segs[-1][1]], states[int(path[i])]
            c = _boundary(x, w, old, new, max(segs[-1][0] + settings.min_bars * float(old.bar), float(wstarts[i - 1])),
                          min(float(wstarts[i]) + width, x1))
            if c <= segs[-1][0]:
                segs[-1][1] = int(path[i])
                continue
            segs.append([c, int(path[i])])
    # 5. Validation: a segment must beat the main reading on its own span.
    out = []
    for k, (start, j) in enumerate(segs):
        end = segs[k + 1][0] if k + 1 < len(segs) else x1
        st = states[j]
        evidence = 0.0
        if st is not main:
            long_enough = end - start >= settings.min_bars * float(st.bar) - 0.5 * _unit(st)
            odds = _log_odds(x, w, start, end + 0.5 * _unit(st), st, main, pulse_s, tree_settings, engine, drums, lattice, temperature,
                                period_salience, repetition) \
                if long_enough else None
            if odds is None or odds < settings.min_log_odds:
                st = out[-1].reading if out else main
            else:
                evidence = float(odds)
        if out and out[-1].reading is st:
            out[-1] = SegmentReading(out[-1].start_pulses, end, st, out[-1].log_odds)
        else:
            out.append(SegmentReading(start, end, st, evidence))
    return out if len(out) > 1 else whole


def _log_odds(x, w, lo, hi, state, other, pulse_s, tree_settings, engine, drums, lattice, temperature,
              period_salience=None, repetition=None) -> float | None:
    """How much better ``state`` explains [lo, hi) than ``other``, scored by the model on that span alone."""
    cands = _span_tree(x, w, lo, hi, pulse_s, tree_settings, engine, drums, lattice, period_salience, repetition)
    if cands is None:
        return None
    own = _score_of(cands, state, 0.25 * _unit(state))
    if own is None:
        return None
    theirs = _score_of(cands, other, 0.25 * _unit(other))
    floor = min(c.score for c in cands)
    return (own - (theirs if theirs is not None else floor)) / temperature


