"""The cycle lattice and the metric tree (metertop.tree)."""

from __future__ import annotations

from fractions import Fraction as F

import networkx as nx
import numpy as np
import pytest

from metertop.accents import event_weights
from metertop.events import merge_events
from metertop.tree import Lattice, build_tree, cycle_lattice, time_signature_of

from conftest import TUNES, render_tune

ADDITIVE_GROUPINGS = {(3, 2), (2, 3), (2, 2, 3), (2, 3, 2), (3, 2, 2)}


def test_lattice_is_a_multidigraph_of_fractions():
    """The lattice is a networkx MultiDiGraph whose nodes are exact fractions of the pulse."""
    g = cycle_lattice()
    assert isinstance(g, nx.MultiDiGraph)
    assert all(isinstance(n, F) for n in g.nodes)


def test_plain_lattice_walks_as_networkx_does():
    """Scoring walks a plain-dict Lattice; networkx, the reference, walks the same edges with the same data in the
    same order (out-edges, and in-edges of every node), so readings are scored in the same order."""
    from metertop.tree import _lattice

    plain, g = _lattice(), cycle_lattice()
    assert isinstance(plain, Lattice)
    assert list(plain.edges(data=True)) == list(g.edges(data=True))
    for node in g.nodes:
        assert list(plain.in_edges(node, data=True)) == list(g.in_edges(node, data=True))
    # The walk order and the node objects themselves (first inserted wins) agree too.
    assert [tuple(map(id, e[:2])) for e in plain.edges()] == [tuple(map(id, e[:2])) for e in plain.to_networkx().edges()]


def test_analysis_does_not_import_networkx():
    """networkx takes a quarter of a second to import; an analysis needs none of it, only MetricTree.graph does."""
    import subprocess
    import sys

    code = ("import sys, numpy as np, metertop; import metertop.cli.app\n"
            "on = np.arange(24) * 0.5\n"
            "from metertop.pipeline import analyse_detailed\n"
            "a = analyse_detailed(on)\n"
            "assert 'networkx' not in sys.modules, 'networkx imported'\n"
            "g = a.tree.graph\n"
            "assert 'networkx' in sys.modules and list(g.nodes)[:3] == ['subdivision', 'beat', 'bar']\n")
    subprocess.run([sys.executable, "-c", code], check=True)


def test_lattice_division_edges():
    """Every beat is divided by 2 and by 3: an edge beat/d -> beat with ratio d."""
    beats = (F(1, 3), F(1, 2), F(2, 3), F(1), F(3, 2), F(2), F(3), F(4))
    g = cycle_lattice(beats=beats)
    for beat in beats:
        for d in (2, 3):
            data = g.get_edge_data(beat / d, beat, key=("division", d))
            assert data == {"kind": "division", "ratio": d}
    division = [(u, v, k) for u, v, k, kind in g.edges(keys=True, data="kind") if kind == "division"]
    assert len(division) == 2 * len(beats)
    assert all(v / u == g.edges[u, v, k]["ratio"] for u, v, k in division)


def test_lattice_bar_edges():
    """Every beat makes bars of 1 to 5 beats: an edge beat -> n * beat with ratio n."""
    g = cycle_lattice()
    bar = [(u, v, d) for u, v, d in g.edges(data=True) if d["kind"] == "bar"]
    assert {d["ratio"] for _, _, d in bar} == {1, 2, 3, 4, 5}
    assert all(v == u * d["ratio"] for u, v, d in bar)
    assert g.has_edge(F(1), F(3), key=("bar", 3))
    assert g.has_edge(F(3, 2), F(6), key=("bar", 4))  # 12/8: four dotted beats


def test_lattice_additive_edges():
    """Tatums make additive bars of 5 and 7 with every common grouping of 2s and 3s."""
    g = cycle_lattice()
    add = [(u, v, d) for u, v, d in g.edges(data=True) if d["kind"] == "additive"]
    for tatum in (F(1, 2), F(1)):
        groupings = {d["grouping"] for u, _, d in add if u == tatum}
        assert groupings == ADDITIVE_GROUPINGS
    assert all(d["ratio"] == sum(d["grouping"]) and v == u * d["ratio"] for u, v, d in add)
    assert {d["ratio"] for _, _, d in add} == {5, 7}


# Metre conventions, common practice (DESIGN.md section 6): beats per bar,
# division (2 simple, 3 compound) and additive grouping give the notation.
@pytest.mark.parametrize(
    "beats, division, grouping, notation",
    [(2, 2, None, "2/4"), (3, 2, None, "3/4"), (4, 2, None, "4/4"), (5, 2, None, "5/4"), (1, 3, None, "3/8"),
     (2, 3, None, "6/8"), (3, 3, None, "9/8"), (4, 3, None, "12/8"), (3, None, (2, 2, 3), "7/8"), (2, None, (3, 2), "5/8")],
)
def test_time_signature_conventions(beats, division, grouping, notation):
    """Common practice: simple beats are quarters, compound beats dotted quarters (6/8 = 2 beats), 7/8 = 2+2+3 eighths."""
    assert time_signature_of(beats, division, grouping) == notation


def _tree_of(tune, quarter_s=0.5, seed=31, jitter_s=0.012):
    """The metric tree of a rendered tune in its own notated time (pulse = one quarter note)."""
    r = render_tune(tune, quarter_s, seed=seed, jitter_s=jitter_s)
    ev = merge_events(r.notes)
    positions = (ev.times_s - 0.5) / quarter_s  # deadpan: seconds map linearly to quarters
    return build_tree(positions, event_weights(ev), quarter_s)


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_readings_probabilities_sum_to_one_and_are_sorted(tune):
    """Reading probabilities are finite, sum to 1, and follow the scores best first."""
    tree = _tree_of(tune)
    p = np.asarray(tree.probabilities)
    scores = np.array([c.score for c in tree.candidates])
    assert len(p) == len(tree.candidates) > 1
    assert np.all(np.isfinite(scores))
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    assert p.sum() == pytest.approx(1.0)
    assert np.all(np.diff(scores) <= 0)
    assert np.all(np.diff(p) <= 1e-15)
    assert tree.best is tree.candidates[0]


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_best_reading_of_notated_tunes(tune):
    """In notated time the best reading is the published metre: its notation and its bar length in quarters."""
    best = _tree_of(tune).best
    assert best.time_signature == tune.time_signature
    assert float(best.bar) == pytest.approx(tune.bar_quarters)
    # The downbeat falls on a bar line of the notation (pickup included).
    off = (best.downbeat_pulses - tune.pickup_quarters) % tune.bar_quarters
    assert min(off, tune.bar_quarters - off) < 0.15


@pytest.mark.parametrize("tune", TUNES, ids=lambda t: t.name)
def test_tree_graph_nests_its_levels(tune):
    """The chosen tree links subdivision -> beat -> bar by the reading's ratios, with confidences in [0, 1]."""
    tree = _tree_of(tune)
    g, best = tree.graph, tree.best
    assert list(nx.topological_sort(g))[:3] == ["subdivision", "beat", "bar"]
    assert g.nodes["bar"]["length"] == best.bar
    assert g.nodes["beat"]["length"] == best.beat
    assert g.nodes["bar"]["length"] == g.nodes["beat"]["length"] * g.edges["beat", "bar"]["ratio"]
    for name in g.nodes:
        assert 0.0 <= g.nodes[name]["confidence"] <= 1.0 + 1e-12


def test_exactly_regular_input_gives_finite_probabilities():
    """A quantised accented pattern (every bar identical) still gives finite scores and probabilities summing to 1."""
    positions = np.arange(48, dtype=float)  # 12 bars of four pulses
    weights = np.tile([2.0, 1.0, 1.0, 1.0], 12)
    tree = build_tree(positions, weights / weights.mean(), 0.5)
    scores = np.array([c.score for c in tree.candidates])
    assert np.all(np.isfinite(scores))
    assert np.asarray(tree.probabilities).sum() == pytest.approx(1.0)


def _rock_groove(bars: int, phrase_bars: int, seed: int, beat_s: float = 0.55) -> "NoteTable":
    """The common rock beat (common practice): closed hi-hat eighths, kick on 1 and 3, snare on 2 and 4, a crash on each phrase's first downbeat."""
    from metertop.load import NoteTable

    rng = np.random.default_rng(seed)
    rows = []  # (time, pitch, velocity)
    for b in range(bars):
        start = b * 4 * beat_s
        for e in range(8):
            t = start + e * beat_s / 2
            rows.append((t, 42, 80 if e % 2 == 0 else 64))
            if e in (0, 4):
                rows.append((t, 36, 100))
            if e in (2, 6):
                rows.append((t, 38, 96))
        if b % phrase_bars == 0:
            rows.append((start, 49, 110))
    rows.sort()
    t = np.array([r[0] for r in rows]) + rng.normal(0, 0.008, len(rows)) + 0.5
    t = np.maximum(t, 0)
    n = len(rows)
    order = np.argsort(t, kind="stable")
    return NoteTable(t[order], np.full(n, 0.1), np.array([r[1] for r in rows])[order], np.array([r[2] for r in rows], float)[order],
                     np.full(n, np.nan), np.ones(n, bool), np.zeros(n, int))


@pytest.mark.parametrize("phrase_bars", [4, 8])
def test_crash_on_phrase_starts_gives_the_hypermeasure(phrase_bars):
    """A groove with a crash every 4 (or 8) bars has a hypermeasure of that many bars, starting on a crash."""
    from metertop import analyse_detailed

    notes = _rock_groove(bars=4 * phrase_bars, phrase_bars=phrase_bars, seed=phrase_bars)
    a = analyse_detailed(notes)
    assert a.result.time_signature == "4/4"
    assert a.tree.hyper_bars == phrase_bars
    hyper = a.result.level("hypermeasure")
    crashes = notes.onsets_s[notes.pitches == 49]
    assert np.min(np.abs(crashes - hyper.phase_s)) < 0.05


def test_groove_without_phrase_marks_has_no_hypermeasure():
    """The same groove without crashes shows no hypermeasure: every bar is alike."""
    from metertop import analyse_detailed

    notes = _rock_groove(bars=16, phrase_bars=10**6, seed=3)
    keep = notes.pitches != 49
    from metertop.load import NoteTable
    bare = NoteTable(*(getattr(notes, f)[keep] for f in ("onsets_s", "durations_s", "pitches", "velocities", "weights", "is_drum", "track")))
    assert analyse_detailed(bare).tree.hyper_bars is None
