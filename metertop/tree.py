"""Metric tree: nest the scanned cycles into subdivision, beat, bar and hypermeasure.

Conventions
-----------
- Works in pulse time (:mod:`metertop.tempo`): the tracked pulse has length 1.
- Cycle lengths are exact fractions of the pulse (:class:`fractions.Fraction`).
- A *reading* is a path in the cycle lattice, a directed multigraph (:class:`Lattice`;
  :func:`cycle_lattice` gives it as a networkx MultiDiGraph) whose nodes
  are cycle lengths and whose edges say "is divided into": subdivision ->
  beat (by 2 or 3), beat -> bar (2 to 5 beats, or one compound beat), and
  tatum -> bar for additive bars (5 or 7 tatums grouped in 2s and 3s).
- Each reading has a downbeat position: one of the most persistent peaks of
  the wrapped density at its bar length.

Evidence
--------
Every reading is measured on the merge trees of the wrapped densities
(:mod:`metertop.scan`), so the topology decides. The *margin* of a position
in a cycle is its relative persistence minus the largest relative
persistence of any other peak: 1 when it is the essential peak and nothing
else persists.

``bar``
    margin of the downbeat at bar length, times the share of the other beats
    that carry an onset (a cycle shorter than the pulse folds every onset
    onto one phase and so has a perfect margin, but its other beats are
    empty), times its reliability: a paired t statistic of the downbeat
    against its strongest rival position of the subdivision grid over the
    bars (:func:`_reliability`). Bars of one beat earn 0.
``half_bar``
    for four-beat bars, the same evidence for the half bar: a true bar nests
    its half.
``double_bar``
    the same evidence for a downbeat every other bar: a true bar's double
    adds little, so this is high when the reading's bar is too short.
``beat``
    margin of the beat at beat length, against its own subdivisions, times
    ``(1 + share of subdivision positions played) / 2`` (a subdivision level
    with no notes cannot be told from none) and the share of beats played;
    for additive bars, the mean relative persistence at group starts minus
    that at the other tatums.
``division``
    at beat length: persistence at the halves against the thirds of the beat,
    times the beat's own margin and the share of beats played.
``unexplained``
    the share of persistence in peaks off the reading's finest grid (two
    levels below the beat).
``support``
    the log share of downbeats that carry an onset.

With the reading's tempo and shape these are the features of
:mod:`metertop.model`, whose linear score and softmax give the ranking and
the probabilities; the confidence of a level is the total probability of
the readings that agree on it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property, lru_cache

import numpy as np

from .model import ReadingModel, default_model
from .repetition import BarRepetition
from .scan import WrappedCycle, wrap_cycle, wrap_cycles

__all__ = ["TreeSettings", "Candidate", "MetricTree", "Lattice", "cycle_lattice", "build_tree", "promote", "time_signature_of"]

F = Fraction
# Additive groupings of an irregular bar, in tatums (common practice).
ADDITIVE = ((3, 2), (2, 3), (2, 2, 3), (2, 3, 2), (3, 2, 2))


@dataclass(frozen=True)
class TreeSettings:
    """How readings are measured, and the model that scores them."""

    beat_reference_s: float = 0.6  # tempo features count octaves from here
    # Where compound beats count octaves from, if not from beat_reference_s:
    # score input sets it to a dotted quarter, the notated compound beat
    # (common practice), while beat_reference_s is a quarter.
    compound_beat_reference_s: float | None = None
    min_beat_s: float = 0.2
    max_beat_s: float = 2.0
    max_bar_s: float = 8.0
    width_s: float = 0.025  # bump width: jitter left after the warp
    min_width_pulses: float = 0.03
    phase_candidates: int = 3
    hyper_min_evidence: float = 0.15
    # Drum kits (_kit_hypermeasure): the least phrase gain, and the share of
    # the best gain at which a shorter hypermeasure still wins (a phrase of
    # four bars comes back after eight too). Chosen on a grid over 200
    # training grooves (seed 777): 0.87 right, flat for 0.05-0.1 and 0.3-0.4.
    hyper_min_gain: float = 0.05
    hyper_near_best: float = 0.4
    model: ReadingModel = field(default_factory=default_model)


@dataclass(frozen=True)
class Candidate:
    """A scored reading in pulse units."""

    beat: Fraction
    division: int | None
    beats_per_bar: int
    grouping: tuple[int, ...] | None
    tatum: Fraction
    bar: Fraction
    downbeat_pulses: float
    terms: dict
    score: float

    @property
    def time_signature(self) -> str:
        return time_signature_of(self.beats_per_bar, self.division, self.grouping)

    @property
    def family(self) -> str:
        return _family(self.beats_per_bar, self.division, self.grouping)

    def beat_offsets(self) -> np.ndarray:
        """Beat positions within the bar, in pulses from the downbeat."""
        return _beat_starts(self.beats_per_bar, self.beat, self.grouping, self.tatum)


def _group_starts(grouping) -> np.ndarray:
    """Index of the first tatum of each group of an additive bar."""
    return np.concatenate([[0], np.cumsum(grouping)[:-1]])


def _beat_starts(n: int, beat: Fraction, grouping, tatum: Fraction) -> np.ndarray:
    """Beat positions within the bar, in pulses from the downbeat."""
    if grouping is not None:
        return _group_starts(grouping).astype(float) * float(tatum)
    return np.arange(n) * float(beat)


def time_signature_of(beats_per_bar: int, division: int | None, grouping) -> str:
    """Conventional notation: simple beats are quarters, compound beats dotted quarters, tatums of irregular bars eighths.

    >>> time_signature_of(3, 2, None), time_signature_of(2, 3, None), time_signature_of(3, None, (2, 2, 3))
    ('3/4', '6/8', '7/8')
    """
    if grouping is not None:
        return f"{sum(grouping)}/8"
    if division == 3:
        return f"{3 * beats_per_bar}/8"
    return f"{beats_per_bar}/4"


class Lattice:
    """A directed multigraph of cycle lengths in plain dicts, walked as networkx walks a MultiDiGraph.

    Scoring only walks the edges, so it needs no networkx, which takes a
    quarter of a second to import; :meth:`to_networkx` gives the same graph
    as a ``networkx.MultiDiGraph``. ``add_edge``, ``edges(data=True)`` and
    ``in_edges(v, data=True)`` behave as networkx's, in the same order.
    """

    def __init__(self) -> None:
        self._succ: dict = {}
        self._pred: dict = {}
        self._added: list = []  # the add_edge calls, for to_networkx

    def add_edge(self, u, v, key, **data) -> None:
        self._added.append((u, v, key, data))
        for node in (u, v):
            if node not in self._succ:
                self._succ[node], self._pred[node] = {}, {}
        keyed = self._succ[u].get(v)
        if keyed is None:
            keyed = self._succ[u][v] = self._pred[v][u] = {}
        keyed.setdefault(key, {}).update(data)

    def edges(self, data: bool = False):
        for u, nbrs in self._succ.items():
            for v, keyed in nbrs.items():
                for d in keyed.values():
                    yield (u, v, d) if data else (u, v)

    def in_edges(self, v, data: bool = False):
        for u, keyed in self._pred[v].items():
            for d in keyed.values():
                yield (u, v, d) if data else (u, v)

    def to_networkx(self):
        """The same graph as a ``networkx.MultiDiGraph`` (networkx imported here)."""
        import networkx as nx

        g = nx.MultiDiGraph()
        for u, v, key, data in self._added:
            g.add_edge(u, v, key=key, **data)
        return g


_BEATS = (F(1, 3), F(1, 2), F(2, 3), F(1), F(3, 2), F(2), F(3), F(4))
_TATUMS = (F(1, 2), F(1))


def _lattice(beats=_BEATS, tatums=_TATUMS) -> Lattice:
    g = Lattice()
    for beat in beats:
        for div in (2, 3):
            g.add_edge(beat / div, beat, key=("division", div), kind="division", ratio=div)
        for n in range(1, 6):
            g.add_edge(beat, beat * n, key=("bar", n), kind="bar", ratio=n)  # up to 5/4; 12/8 at most for compound beats
    for tatum in tatums:
        for grouping in ADDITIVE:
            g.add_edge(tatum, tatum * sum(grouping), key=("additive", grouping), kind="additive", ratio=sum(grouping), grouping=grouping)
    return g


_DEFAULT_LATTICE = _lattice()


def cycle_lattice(beats=_BEATS, tatums=_TATUMS):
    """The lattice of candidate cycle lengths, in pulses, as a ``networkx.MultiDiGraph``.

    Edges carry ``kind`` (``division``, ``bar`` or ``additive``) and the
    integer ``ratio`` of the lengths (and ``grouping`` for additive edges);
    two lengths can be linked in more than one way, hence a multigraph.

    Examples
    --------
    >>> g = cycle_lattice()
    >>> g.edges[F(1, 3), F(1), ("division", 3)]["ratio"], g.edges[F(1), F(3), ("bar", 3)]["kind"]
    (3, 'bar')
    >>> sorted(k[1] for _, _, k in g.out_edges(F(1, 2), keys=True) if k[0] == "additive")
    [(2, 2, 3), (2, 3), (2, 3, 2), (3, 2), (3, 2, 2)]
    """
    return _lattice(beats, tatums).to_networkx()


def _offsets_key(offsets) -> bytes:
    """The offsets' part of a grid's cache key: rounded, so that grids equal but for rounding share."""
    return np.asarray(offsets, dtype=float).round(9).tobytes()


@dataclass
class _Scanner:
    """Wrapped cycles cached by length, with bumps of a fixed width in seconds."""

    positions: np.ndarray
    weights: np.ndarray
    settings: TreeSettings
    engine: str
    pulse_s: float
    period_salience: tuple[np.ndarray, np.ndarray] | None = None
    cache: dict = field(default_factory=dict)
    grids: dict = field(default_factory=dict)
    repetition: BarRepetition | None = None

    def __post_init__(self) -> None:
        self.lo, self.hi = float(self.positions.min()), float(self.positions.max())
        self.span = self.hi - self.lo
        # searchsorted on the inner positions, plus one, is searchsorted on
        # all of them clipped to [1, n - 1]: the left and right neighbours.
        self._inner = self.positions[1:-1]

    @property
    def width_pulses(self) -> float:
        return max(self.settings.width_s / self.pulse_s, self.settings.min_width_pulses)

    def _grid(self, start: float, period: float, offsets: np.ndarray, tol: float) -> np.ndarray:
        """Grid points ``start + offsets + k * period`` within the onsets' span, one row per cycle."""
        lo, hi = self.lo, self.hi
        k = np.arange(np.floor((lo - start) / period), np.ceil((hi - start) / period) + 1)
        pts = start + k[:, None] * period + np.asarray(offsets, dtype=float)[None, :]
        inside = ((pts >= lo - tol) & (pts <= hi + tol)).all(axis=1)
        return pts[inside]

    def grid_weights(self, start: float, period: float, offsets: np.ndarray, tol: float) -> np.ndarray:
        """Weight of the onset nearest each grid point (0 if none within ``tol``); shape (cycles, len(offsets)).

        Readings share grids (a 4/4 bar's half is a 2/4 bar), so results are
        cached by their arguments; callers must not modify the array.
        """
        offsets = np.asarray(offsets, dtype=float)
        key = (round(start, 9), round(period, 9), _offsets_key(offsets), round(tol, 9))
        if key not in self.grids:
            self.grids[key] = self._grid_weights(start, period, offsets, tol)
        return self.grids[key]

    def grid_block(self, start: float, period: float, tol: float, offsets_list, offset_keys=None) -> list[np.ndarray]:
        """:meth:`grid_weights` of several offset arrays at one start and period, looked up together.

        The same arrays as one call each, in order, through the same cache:
        a grid point's weight depends only on its position, so every missing
        grid is cut from one lookup of all their columns over the rows.
        ``offset_keys``, if given, are :func:`_offsets_key` of the arrays.
        """
        if offset_keys is None:
            offset_keys = [_offsets_key(o) for o in offsets_list]
        head, rtol = (round(start, 9), round(period, 9)), round(tol, 9)
        keys = [head + (ok, rtol) for ok in offset_keys]
        grids = self.grids
        todo = [i for i, key in enumerate(keys) if key not in grids]
        if len(todo) > 1 and len(self.positions) >= 2 and all(len(offsets_list[i]) for i in todo):
            lo, hi = self.lo, self.hi
            k = np.arange(np.floor((lo - start) / period), np.ceil((hi - start) / period) + 1)
            base = start + k * period
            cols = np.concatenate([offsets_list[i] for i in todo])
            block = self._lookup(base[:, None] + cols[None, :], tol)
            c0 = 0
            for i in todo:
                o = offsets_list[i]
                if keys[i] not in grids:  # a repeated key keeps its first result
                    inside = (base + o.min() >= lo - tol) & (base + o.max() <= hi + tol)
                    grids[keys[i]] = block[inside, c0:c0 + len(o)]
                c0 += len(o)
        else:
            for i in todo:
                if keys[i] not in grids:
                    grids[keys[i]] = self._grid_weights(start, period, np.asarray(offsets_list[i], dtype=float), tol)
        return [grids[key] for key in keys]

    def _lookup(self, pts: np.ndarray, tol: float) -> np.ndarray:
        """Weight of the onset nearest each point (the left one on a tie), 0 where none lies within ``tol``."""
        flat = pts.ravel()
        x, w = self.positions, self.weights
        right = np.searchsorted(self._inner, flat) + 1
        left = right - 1
        d_left, d_right = np.abs(x[left] - flat), np.abs(x[right] - flat)
        take_left = d_left <= d_right
        nearest_w = np.where(take_left, w[left], w[right])
        return np.where(np.where(take_left, d_left, d_right) <= tol, nearest_w, 0.0).reshape(pts.shape)

    def _grid_weights(self, start: float, period: float, offsets: np.ndarray, tol: float) -> np.ndarray:
        lo, hi = self.lo, self.hi
        if len(offsets) == 0 or len(self.positions) < 2:
            return self._grid_weights_plain(start, period, offsets, tol)
        k = np.arange(np.floor((lo - start) / period), np.ceil((hi - start) / period) + 1)
        base = start + k * period
        # Float addition is monotone, so a row's extreme points are its
        # extreme offsets: rows wholly inside the span are found on the rows.
        inside = (base + offsets.min() >= lo - tol) & (base + offsets.max() <= hi + tol)
        pts = base[inside][:, None] + offsets[None, :]
        if pts.size == 0:
            return np.zeros((0, len(offsets)))
        return self._lookup(pts, tol)

    def _grid_weights_plain(self, start: float, period: float, offsets: np.ndarray, tol: float) -> np.ndarray:
        pts = self._grid(start, period, offsets, tol)
        x, w = self.positions, self.weights
        if pts.size == 0:
            return np.zeros((0, len(offsets)))
        flat = pts.ravel()
        idx = np.clip(np.searchsorted(x, flat), 1, len(x) - 1)
        left, right = idx - 1, idx
        nearest = np.where(np.abs(x[left] - flat) <= np.abs(x[right] - flat), left, right)
        hit = np.abs(x[nearest] - flat) <= tol
        return np.where(hit, w[nearest], 0.0).reshape(pts.shape)

    def occupancy(self, start: float, period: float, offsets: np.ndarray, tol: float) -> float:
        """Share of the grid points ``start + offsets + k * period`` that have an onset within ``tol``."""
        return _occupied(self.grid_weights(start, period, offsets, tol))

    def salience_at(self, period_s: float) -> float:
        """The pulse scan's relative salience at ``period_s`` (log-period interpolation; 0 outside the scanned range)."""
        if self.period_salience is None:
            return 0.0
        periods, profile = self.period_salience
        lp = np.log(period_s)
        if not np.log(periods[0]) - 1e-9 <= lp <= np.log(periods[-1]) + 1e-9:
            return 0.0
        return float(np.interp(lp, np.log(periods), profile))

    def repeat(self, length: float) -> float:
        """Share of the notes that recur one ``length`` later (:mod:`metertop.repetition`); 0 without notes."""
        return 0.0 if self.repetition is None else self.repetition.share(length)

    def __call__(self, length: Fraction) -> WrappedCycle:
        if length not in self.cache:
            span = self.span + float(length)
            width = self.width_pulses
            self.cache[length] = wrap_cycle(self.positions, self.weights, float(length), bins_per_unit=int(np.clip(np.ceil(2.5 / width), 12, 48)),
                                            width_units=width, span=span, engine=self.engine)
        return self.cache[length]

    def wrap_all(self, lengths) -> None:
        """Wrap every length not yet cached, those of equal bin count together (the same cycles as one call each)."""
        todo = list(dict.fromkeys(L for L in lengths if L not in self.cache))
        if not todo:
            return
        width = self.width_pulses
        cycles = wrap_cycles(self.positions, self.weights, todo, bins_per_unit=int(np.clip(np.ceil(2.5 / width), 12, 48)),
                             width_units=width, spans=[self.span + float(L) for L in todo], engine=self.engine)
        self.cache.update(zip(todo, cycles))


def _snap_unit(*lengths: Fraction) -> Fraction:
    """Largest unit in {1, 1/2, 1/3, 1/4, 1/6} that divides every length."""
    for d in (1, 2, 3, 4, 6):
        if all((x * d).denominator == 1 for x in lengths):
            return F(1, d)
    return F(1, 12)


def _margin(cyc: WrappedCycle, phase: float, tol: float) -> float:
    """Relative persistence of the peak at ``phase`` minus the largest elsewhere.

    1 when the position is the essential peak and nothing else persists; 0
    or below when another position persists as long.
    """
    pp, rel = cyc.peak_phases, cyc.relative_persistence
    if len(rel) == 0:
        return 0.0
    d = np.abs(((pp - phase) + 0.5) % 1.0 - 0.5)
    near = d <= tol
    at = float(np.where(near, rel, 0.0).max())
    others = rel[~near]
    return at - (float(others.max()) if len(others) else 0.0)


def _occupied(grid_weights: np.ndarray) -> float:
    """Share of the grid points that carry an onset."""
    return np.count_nonzero(grid_weights > 0) / grid_weights.size if grid_weights.size else 0.0


def _bar_evidence(cyc: WrappedCycle, x0: float, L: float, others: np.ndarray, grid: np.ndarray, tol: float) -> float:
    """Margin of the downbeat at bar length, weighted by how many other beats carry onsets and by its reliability.

    ``others`` are the grid weights (:meth:`_Scanner.grid_weights`) of the
    other beats and ``grid`` those of the subdivision grid of the bar. The
    margin compares the downbeat with every other peak, so the reliability
    compares it with every other position of the subdivision grid, not
    only with the beats.
    """
    return _margin(cyc, x0 / L, tol) * _occupied(others) * _reliability(grid)


def _reliability(cycle_weights: np.ndarray) -> float:
    """How reliably the first position outweighs the strongest other one, cycle by cycle.

    A paired t statistic over the cycles, ``t = mean(d) / (sd(d) / sqrt(n))``
    with ``d`` the downbeat's weight minus the strongest other position's,
    mapped to ``t**2 / (t**2 + 4)`` (0.5 at t = 2) and 0 for t <= 0. It keeps
    a margin that a handful of loud cycles produce by chance from counting
    as a bar.
    """
    if cycle_weights.shape[0] < 3 or cycle_weights.shape[1] < 2:
        return 0.0
    n = cycle_weights.shape[0]
    rival = int(np.argmax(cycle_weights[:, 1:].sum(axis=0) / n)) + 1
    d = cycle_weights[:, 0] - cycle_weights[:, rival]
    # mean and std(ddof=1) as numpy computes them, without its wrappers.
    mean = d.sum() / n
    dev = d - mean
    sd = math.sqrt((dev * dev).sum() / (n - 1))
    scale = float(np.abs(cycle_weights).max()) or 1.0
    if mean <= 1e-9 * scale:
        return 0.0
    if sd <= 1e-9 * scale:
        return 1.0  # the same difference in every bar
    t = mean / (sd / math.sqrt(n))
    return float(t * t / (t * t + 4.0))


def _division_term(beat_cycle: WrappedCycle, phase: float, division: int) -> float:
    """At beat length: persistence at the halves against the thirds of the beat (or the reverse for 3)."""
    tol = min(0.25 / division, 0.12)
    half, third, two_thirds = beat_cycle.persistence_at([(phase + 0.5) % 1, (phase + 1 / 3) % 1, (phase + 2 / 3) % 1], tol)
    thirds = (third + two_thirds) / 2
    return float(half - thirds) if division == 2 else float(thirds - half)


def _unexplained(cyc: WrappedCycle, grid_phases: np.ndarray, tol: float) -> float:
    """Share of the total relative persistence in peaks off the reading's grid."""
    pp, rel = cyc.peak_phases, cyc.relative_persistence
    total = rel.sum()
    if total <= 0:
        return 0.0
    d = np.abs(((pp[:, None] - grid_phases[None, :]) + 0.5) % 1.0 - 0.5).min(axis=1)
    return float(rel[d > tol].sum() / total)


@dataclass(frozen=True)
class _Shape:
    """What a reading's measures need of its shape, in floats and arrays, worked out once per shape."""

    L: float
    sub: float
    tol: float
    unit: float
    fine: float
    fine_grid: np.ndarray
    offsets: np.ndarray
    otol: float
    bar_grid: np.ndarray
    half: Fraction | None
    half_L: float
    half_grid: np.ndarray | None
    double: Fraction
    double_grid: np.ndarray
    beat_f: float
    subs: np.ndarray | None
    family: str
    keys: dict = field(default_factory=dict)  # _offsets_key of the arrays above, by name


_ZERO = np.zeros(1)
_ZERO_KEY = _offsets_key(_ZERO)


@lru_cache(maxsize=4096)
def _shape(beat, division, n, grouping, tatum, bar) -> _Shape:
    L = float(bar)
    sub = tatum if grouping else beat / division
    sub_f = float(sub)
    # The finest grid a reading accounts for: two levels below the beat.
    fine = float(tatum / 2 if grouping else beat / (2 * division))
    offsets = _beat_starts(n, beat, grouping, tatum)
    half = bar / 2 if grouping is None and n == 4 else None
    half_L = float(half) if half is not None else 0.0
    double_sub = float(beat) if grouping is None else L
    shape = _Shape(
        L=L, sub=sub_f, tol=min(0.25 * sub_f / L, 0.12), unit=float(_snap_unit(bar, tatum if grouping else beat)),
        fine=fine, fine_grid=np.arange(int(round(L / fine))) * fine, offsets=offsets, otol=sub_f * 0.25,
        bar_grid=np.arange(int(round(L / sub_f))) * sub_f, half=half, half_L=half_L,
        half_grid=np.arange(int(round(half_L / sub_f))) * sub_f if half is not None else None,
        double=2 * bar, double_grid=np.arange(int(round(2 * L / double_sub))) * double_sub, beat_f=float(beat),
        subs=(np.arange(1, division) * float(beat) / division) if grouping is None else None,
        family=_family(n, division, grouping))
    for name in ("fine_grid", "offsets", "bar_grid", "half_grid", "double_grid", "subs"):
        arr = getattr(shape, name)
        if arr is not None:
            arr.flags.writeable = False  # shared by every tree
            shape.keys[name] = _offsets_key(arr)
    shape.keys["others"] = _offsets_key(offsets[1:])
    shape.keys["half_others"] = _offsets_key(offsets[1:2])
    shape.keys["double_others"] = _offsets_key([L])
    return shape


def _score_reading(scan: _Scanner, beat, division, n, grouping, tatum, bar, pulse_s, s: TreeSettings, drums: bool) -> list[Candidate]:
    sh = _shape(beat, division, n, grouping, tatum, bar)
    cyc = scan(bar)
    L, tol, unit, otol, offsets = sh.L, sh.tol, sh.unit, sh.otol, sh.offsets
    seen, out = set(), []
    rel = cyc.relative_persistence
    # The cycles a phase's measures read (cached by the scanner).
    half_cyc = scan(sh.half) if sh.half is not None else None
    has_double = 2 * L <= scan.span / 1.5
    double_cyc = scan(sh.double) if has_double else None
    beat_cyc = scan(beat) if grouping is None else None
    if grouping is not None:
        starts = _group_starts(grouping)
        inner = np.setdiff1d(np.arange(sum(grouping)), starts)
        t = float(tatum)
        group_cycles = [(scan(tatum * k), k, start) for k, start in zip(grouping, starts)]
    keys = sh.keys
    bar_keys = (_ZERO_KEY, keys["others"], keys["bar_grid"], keys["offsets"])
    double_others = np.array([L])
    # The reading's tempo and shape features do not depend on the phase.
    beat_s = (L / len(grouping) if grouping else sh.beat_f) * pulse_s  # uneven beats: their mean
    family = sh.family
    reference_s = s.beat_reference_s
    if division == 3 and s.compound_beat_reference_s is not None:
        reference_s = s.compound_beat_reference_s
    log_beat = float(np.log2(beat_s / reference_s))
    beat_salience = scan.salience_at(beat_s)
    repeat = scan.repeat(L) if drums else 0.0
    repeat_double = (scan.repeat(2 * L) - repeat) if drums else 0.0
    repeat_half = (repeat - scan.repeat(L / 2)) if drums and grouping is None and n in (2, 4) else 0.0
    # Downbeat candidates: the most persistent peaks, snapped to the grid.
    for ph, r in zip(cyc.peak_phases[: s.phase_candidates], rel[: s.phase_candidates]):
        if r < 0.2 and out:
            break
        x0 = (round(ph * L / unit) * unit) % L
        if round(x0, 6) in seen:
            continue
        seen.add(round(x0, 6))
        # Evidence needs onsets to compare: a cycle shorter than the pulse
        # folds every onset onto one phase and has a perfect margin, but its
        # other beats are empty. Margins are weighted by the share of the
        # compared positions that carry an onset.
        # The grids at bar length, looked up together (in the order they are used).
        if n > 1:
            at_bar = scan.grid_block(x0, L, otol, [_ZERO, offsets[1:], sh.bar_grid, offsets], bar_keys)
        else:
            at_bar = scan.grid_block(x0, L, otol, [_ZERO, offsets], (_ZERO_KEY, keys["offsets"]))
        support = np.log(max(_occupied(at_bar[0]), 0.05))
        bar_term = _bar_evidence(cyc, x0, L, at_bar[1], at_bar[2], tol) if n > 1 else 0.0
        # Nesting: a bar of four beats also shows its half bar.
        half_term = 0.0
        if half_cyc is not None:
            hx = x0 % sh.half_L
            others, grid = scan.grid_block(hx, sh.half_L, otol, [offsets[1:2], sh.half_grid], (keys["half_others"], keys["half_grid"]))
            half_term = _bar_evidence(half_cyc, hx, sh.half_L, others, grid, 2 * tol)
        # A true bar explains more than its half, and its double adds little:
        # the evidence for a downbeat every other bar.
        double_term = 0.0
        if has_double:
            others, grid = scan.grid_block(x0, 2 * L, otol, [double_others, sh.double_grid], (keys["double_others"], keys["double_grid"]))
            double_term = _bar_evidence(double_cyc, x0, 2 * L, others, grid, tol / 2)
        beats_played = _occupied(at_bar[-1])
        if grouping is None:
            # The beat against its own subdivisions, at beat length.
            beat_f = sh.beat_f
            bphase = (x0 % beat_f) / beat_f
            beat_margin = _margin(beat_cyc, bphase, min(0.25 / division, 0.12))
            # As for the bar: a beat stands out only against subdivisions that
            # are played; with none, the beat level is undecided here.
            subs_played = _occupied(scan.grid_block(x0, beat_f, otol, [sh.subs], (keys["subs"],))[0])
            beat_term = beat_margin * (0.5 + 0.5 * subs_played) * beats_played
            # A division only counts for a beat that stands out and is played: a
            # length that smears two beat positions together fills its
            # "halves" trivially.
            division_term = _division_term(beat_cyc, bphase, division) * max(beat_margin, 0.0) * beats_played
        else:
            # Additive bars, at bar length: group starts against the other
            # tatums (the beat level).
            pb = cyc.persistence_at(((x0 + starts[1:] * t) % L) / L, tol).mean()
            po = cyc.persistence_at(((x0 + inner * t) % L) / L, tol).mean()
            beat_term = float(pb - po) * beats_played
            # Each group is a beat divided into its own number of tatums; as
            # for equal beats, the division counts only for beats that stand out.
            division_term = float(np.mean([_division_term(gc, ((x0 + start * t) % (k * t)) / (k * t), k)
                                           for gc, k, start in group_cycles])) * max(float(pb - po), 0.0)
        unexplained = _unexplained(cyc, ((x0 + sh.fine_grid) % L) / L, min(tol, 0.25 * sh.fine / L))
        features = {
            "bar": float(bar_term), "half_bar": float(half_term), "double_bar": float(double_term),
            "beat": float(beat_term), "division": float(division_term),
            "unexplained": float(unexplained), "support": float(support),
            "beat_salience": beat_salience,
            "log_beat": log_beat, "log_beat_sq": log_beat ** 2,
            "compound": float(family == "compound"), "single": float(family == "single"),
            "irregular": float(family == "irregular"),
            "beats2": float(grouping is None and n == 2), "beats3": float(grouping is None and n == 3),
            "beats4": float(grouping is None and n == 4), "beats5": float(grouping is None and n == 5),
            # A compound beat must show its division in three.
            "compound_unheard": (1.0 - float(np.clip(division_term / 0.1, 0.0, 1.0))) if division == 3 else 0.0,
            # Drum kits mark metre differently from melodies: the evidence
            # terms get their own weights there.
            "drums_bar": float(bar_term) * drums, "drums_half_bar": float(half_term) * drums,
            "drums_double_bar": float(double_term) * drums, "drums_beat": float(beat_term) * drums,
            "drums_division": float(division_term) * drums,
            "drums_beats2": float(drums and family == "simple" and n == 2),
            "drums_beats4": float(drums and family == "simple" and n == 4),
            "drums_compound": float(drums and family == "compound"),
            # A kit's pattern comes back one bar later, and a true bar's
            # double adds little to that (metertop.repetition).
            "drums_repeat": repeat,
            "drums_repeat_double": repeat_double,
            # ... and a bar of two or four beats recurs more than its half.
            "drums_repeat_half": repeat_half,
        }
        out.append(Candidate(beat, division, n, grouping, tatum, bar, float(x0), features, s.model.score(features)))
    return out


def _family(n: int, division: int | None, grouping) -> str:
    if grouping is not None:
        return "irregular"
    if division == 3:
        return "single" if n == 1 else "compound"
    return "simple"


@dataclass(frozen=True)
class MetricTree:
    """Scored readings, best first, and the lattice they came from.

    Attributes
    ----------
    candidates : list of Candidate
        Every scored reading, best first.
    probabilities : ndarray
        Softmax of the scores (same order).
    levels : dict
        The chosen reading's tree, fastest level first: level name to its
        ``length`` (pulses), ``score`` and ``confidence`` (and ``start``
        for the hypermeasure), plus ``ratio`` to the level below.
    cycles : dict
        The wrapped cycles by length (pulses), for reports and plots.
    hyper_bars : int or None
        Bars per hypermeasure, if one stands out.
    """

    candidates: list
    probabilities: np.ndarray
    levels: dict
    cycles: dict
    hyper_bars: int | None
    # The notes' bar-lag repetition the readings were scored with (drum kits), for promote().
    repetition: BarRepetition | None = None

    @property
    def best(self) -> Candidate:
        return self.candidates[0]

    @cached_property
    def graph(self):
        """The chosen reading's tree as a ``networkx.DiGraph``: nodes are the level names with ``length``,
        ``score`` and ``confidence``; edges carry the ``ratio``."""
        import networkx as nx

        g = nx.DiGraph()
        below = None
        for name, attrs in self.levels.items():
            g.add_node(name, **{k: v for k, v in attrs.items() if k != "ratio"})
            if below is not None:
                g.add_edge(below, name, ratio=attrs["ratio"])
            below = name
        return g


def _agree(a: Candidate, b: Candidate, level: str) -> bool:
    """Do two readings share the given level (same length and phase)?"""
    if level == "bar":
        length_a, length_b = a.bar, b.bar
    elif level == "beat":
        if a.grouping is not None or b.grouping is not None:
            return a.grouping == b.grouping and a.tatum == b.tatum and abs(a.downbeat_pulses - b.downbeat_pulses) < 1e-6
        length_a, length_b = a.beat, b.beat
    else:
        length_a = a.tatum if a.grouping else a.beat / a.division
        length_b = b.tatum if b.grouping else b.beat / b.division
    if length_a != length_b:
        return False
    diff = (a.downbeat_pulses - b.downbeat_pulses) % float(length_a)
    return min(diff, float(length_a) - diff) < 1e-6


def build_tree(positions, weights, pulse_s: float, settings: TreeSettings = TreeSettings(), engine: str = "dionysus",
               drums: bool = False, period_salience: tuple[np.ndarray, np.ndarray] | None = None,
               lattice=None, repetition: BarRepetition | None = None) -> MetricTree:
    """Score every reading of the cycle lattice and assemble the best metric tree.

    Parameters
    ----------
    positions, weights : array_like
        Event positions in pulse time, and their weights.
    pulse_s : float
        Median pulse period in seconds, for the tempo preference and range.
    settings : TreeSettings
    engine : {"dionysus", "unionfind"}
        Persistence engine.
    drums : bool
        The events come from a drum kit (General MIDI drums).
    period_salience : (periods_s, salience), optional
        The pulse scan's salience profile over candidate periods in seconds
        (:meth:`metertop.tempo.PulseTrack.salience_profile`), for the
        ``beat_salience`` feature; without it the feature is 0.
    lattice : Lattice or networkx.MultiDiGraph, optional
        The readings to score (:func:`cycle_lattice`); all by default.
    repetition : BarRepetition, optional
        The notes' bar-lag repetition in the same pulse time, for the
        ``drums_repeat`` features of a drum kit; without it they are 0.
    """
    s = settings
    scan, cands, p = _scored(positions, weights, pulse_s, s, engine, drums, period_salience, lattice, repetition)
    best = cands[0]
    hyper, hyper_score, hyper_start = _hypermeasure(scan, best, s)
    graph = _tree_graph(best, cands, p, scan, hyper, hyper_score, hyper_start)
    return MetricTree(cands, p, graph, scan.cache, hyper, repetition)


def _scored(positions, weights, pulse_s: float, s: TreeSettings, engine: str, drums: bool, period_salience, lattice,
            repetition: BarRepetition | None = None):
    """The scanner, the scored readings (best first) and their probabilities: :func:`build_tree` without the tree.

    Raises ValueError when no reading fits the tempo range.
    """
    x = np.asarray(positions, dtype=np.float64)
    scan = _Scanner(x, np.asarray(weights, dtype=np.float64), s, engine, pulse_s, period_salience, repetition=repetition)
    lattice = _DEFAULT_LATTICE if lattice is None else lattice
    readings = list(_readings(lattice, s, pulse_s, scan.span))
    # The cycles the readings measure, wrapped together (_score_reading reads them from the cache).
    lengths = []
    for beat, div, n, grouping, tatum, bar in readings:
        lengths.append(bar)
        if grouping is None and n == 4:
            lengths.append(bar / 2)
        if 2 * float(bar) <= scan.span / 1.5:
            lengths.append(2 * bar)
        lengths += [beat] if grouping is None else [tatum * k for k in grouping]
    scan.wrap_all(lengths)
    cands: list[Candidate] = []
    for beat, div, n, grouping, tatum, bar in readings:
        cands += _score_reading(scan, beat, div, n, grouping, tatum, bar, pulse_s, s, drums)
    if not cands:
        raise ValueError("no reading fits the tempo range")
    cands.sort(key=lambda c: -c.score)
    return scan, cands, s.model.probabilities([c.score for c in cands])


def _readings(lattice, s: TreeSettings, pulse_s: float, span_pulses: float):
    """The readings of the lattice within the tempo range and the piece: (beat, division, beats, grouping, tatum, bar)."""
    for lo, hi, data in lattice.edges(data=True):
        bar_s = float(hi) * pulse_s
        if bar_s > s.max_bar_s or float(hi) > span_pulses / 1.5:
            continue
        if data["kind"] == "bar":
            beat, n = lo, data["ratio"]
            if not s.min_beat_s <= float(beat) * pulse_s <= s.max_beat_s:
                continue
            for sub, _, d2 in lattice.in_edges(beat, data=True):
                if d2["kind"] != "division":
                    continue
                div = d2["ratio"]
                if (n == 1 and div == 2) or (n == 5 and div == 3):
                    continue  # a bar of one simple beat is the beat itself; 15/8 is too rare to propose
                yield beat, div, n, None, sub, hi
        elif data["kind"] == "additive":
            tatum = lo
            if not 0.12 <= float(tatum) * pulse_s <= 0.5:
                continue
            grouping = data["grouping"]
            yield F(int(np.median(grouping))) * tatum, None, len(grouping), grouping, tatum, hi


def promote(tree: MetricTree, index: int, positions, weights, pulse_s: float, settings: TreeSettings = TreeSettings(),
            engine: str = "dionysus") -> MetricTree:
    """The same scored readings with the reading at ``index`` chosen (first), and its metric tree.

    The scores and probabilities stay those of the model, so a level's
    confidence still says how much of the probability agrees with it; only
    the chosen reading, and with it the tree and the hypermeasure, change.
    ``positions``, ``weights`` and ``pulse_s`` must be those the tree was
    built from.
    """
    if not 0 <= index < len(tree.candidates):
        raise IndexError(f"no reading {index}")
    order = [index] + [k for k in range(len(tree.candidates)) if k != index]
    cands = [tree.candidates[k] for k in order]
    p = np.asarray(tree.probabilities)[order]
    scan = _Scanner(np.asarray(positions, dtype=np.float64), np.asarray(weights, dtype=np.float64), settings, engine, pulse_s,
                    cache=dict(tree.cycles), repetition=tree.repetition)
    hyper, hyper_score, hyper_start = _hypermeasure(scan, cands[0], settings)
    graph = _tree_graph(cands[0], cands, p, scan, hyper, hyper_score, hyper_start)
    return MetricTree(cands, p, graph, scan.cache, hyper, tree.repetition)


def _hypermeasure(scan: _Scanner, best: Candidate, s: TreeSettings) -> tuple[int | None, float, float]:
    """Bars per hypermeasure, its score, and the position (pulses) of its first downbeat.

    For each multiple of the bar, the hypermeasure starts on the bar downbeat
    that weighs most, bar by bar; its evidence is that position's persistence
    margin times the reliability of its weight against the other downbeats,
    bar by bar (as for the bar itself). The multiple with the most evidence
    wins if it reaches ``hyper_min_evidence``. A drum kit's hypermeasure comes
    from its phrase marks instead (:func:`_kit_hypermeasure`).
    """
    if scan.repetition is not None:
        return _kit_hypermeasure(scan, best, s)
    span = scan.span
    bar = float(best.bar)
    tol = min(0.25 * float(best.beat) / bar, 0.12)
    otol = _hyper_otol(best)
    best_k, best_ev, best_start = None, 0.0, best.downbeat_pulses
    for k in (2, 3, 4, 8):
        length = bar * k
        if 3 * length > span:
            break
        cyc = scan(best.bar * k)
        offsets = np.arange(k) * bar
        start = _hyper_start(scan, best, k, otol)
        ev = _margin(cyc, start / length, tol / k) * _reliability(scan.grid_weights(start, length, offsets, otol))
        if ev > best_ev:
            best_k, best_ev, best_start = k, ev, start
    if best_ev < s.hyper_min_evidence:
        return None, best_ev, best_start
    return best_k, best_ev, best_start


def _hyper_otol(best: Candidate) -> float:
    """How far (pulses) an onset may lie from a bar downbeat and still count for it: a quarter of the subdivision."""
    return 0.25 * float(best.tatum if best.grouping else best.beat / best.division)


def _hyper_start(scan: _Scanner, best: Candidate, k: int, otol: float) -> float:
    """Start (pulses, modulo ``k`` bars) of a hypermeasure of ``k`` bars: the bar downbeat that weighs most, cycle by cycle."""
    bar = float(best.bar)
    length = bar * k
    j = int(np.argmax(scan.grid_weights(best.downbeat_pulses, length, np.arange(k) * bar, otol).mean(axis=0)))
    return float((best.downbeat_pulses + j * bar) % length)


def _kit_hypermeasure(scan: _Scanner, best: Candidate, s: TreeSettings) -> tuple[int | None, float, float]:
    """For a drum kit: the fewest bars at which the kit's phrase marks (a crash, a fill) come back.

    Evidence for ``k`` bars is :meth:`~metertop.repetition.BarRepetition.phrase_gain`,
    what recurs ``k`` bars later beyond what recurs every bar; ``k`` needs
    two whole cycles in the piece. The smallest ``k`` whose evidence reaches
    ``hyper_near_best`` times the best wins (a phrase of four bars also
    comes back after eight), if the best reaches ``hyper_min_gain``. The
    start is the bar downbeat that weighs most, cycle by cycle.
    """
    bar = float(best.bar)
    gains = {k: scan.repetition.phrase_gain(bar, k) for k in (2, 3, 4, 8) if 2 * k * bar <= scan.span + bar}
    top = max(gains.values(), default=0.0)
    if top < s.hyper_min_gain:
        return None, top, best.downbeat_pulses
    k = min(k for k, g in gains.items() if g >= max(s.hyper_min_gain, s.hyper_near_best * top))
    return k, gains[k], _hyper_start(scan, best, k, _hyper_otol(best))


def _tree_graph(best: Candidate, cands, p, scan: _Scanner, hyper, hyper_score, hyper_start) -> dict:
    sub_len = best.tatum if best.grouping else best.beat / best.division
    conf = {lv: float(sum(pi for c, pi in zip(cands, p) if _agree(best, c, lv))) for lv in ("subdivision", "beat", "bar")}
    sub_cyc = scan(sub_len)
    levels = {
        "subdivision": {"length": sub_len, "score": float(sub_cyc.contrast), "confidence": conf["subdivision"]},
        "beat": {"length": best.beat, "score": float(best.terms["beat"]), "confidence": conf["beat"],
                 "ratio": best.grouping if best.grouping else best.division},
        "bar": {"length": best.bar, "score": float(best.terms["bar"]), "confidence": conf["bar"], "ratio": best.beats_per_bar},
    }
    if hyper is not None:
        levels["hypermeasure"] = {"length": best.bar * hyper, "score": float(hyper_score),
                                  "confidence": float(min(max(hyper_score, 0.0), 1.0)), "start": hyper_start, "ratio": hyper}
    return levels
