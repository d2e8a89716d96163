"""Bar-lag repetition (metertop.repetition) against the autocorrelation of onset sequences.

Reference: the autocorrelation of a binary onset sequence at lag L counts the
onsets that have an onset L steps later (J. C. Brown, "Determination of the
meter of musical scores by autocorrelation", J. Acoust. Soc. Am. 94(4),
1993); numpy.correlate computes it. On an integer grid, with a tolerance
below half a step, BarRepetition's share for one key is that count over the
eligible onsets.
"""

from __future__ import annotations

import numpy as np
import pytest

from metertop.repetition import BarRepetition, note_keys


def _reference_share(grid_rows: dict, lag: int, span: float) -> float:
    """Mean over keys of autocorrelation(lag) / eligible onsets, from numpy.correlate on binary sequences; each key's
    vote weighs its onsets per cycle of ``lag`` over ``span``, at most 1 (the definition in BarRepetition.share)."""
    shares, weights = [], []
    length = max(len(r) for r in grid_rows.values())
    last = max(int(np.flatnonzero(r).max()) for r in grid_rows.values())
    for row in grid_rows.values():
        seq = np.zeros(length, int)
        seq[: len(row)] = row
        ac = np.correlate(seq, seq, mode="full")[length - 1:]  # ac[L] = sum_t seq[t] * seq[t + L]
        eligible = int(seq[: max(last - lag + 1, 0)].sum())
        if eligible >= 2:
            shares.append(ac[lag] / eligible)
            weights.append(min(seq.sum() / max(span / lag, 1.0), 1.0))
    return float(np.dot(shares, weights) / np.sum(weights))


@pytest.mark.parametrize("seed", range(5))
def test_share_equals_autocorrelation_on_a_grid(seed):
    rng = np.random.default_rng(seed)
    rows = {key: (rng.random(96) < p).astype(int) for key, p in ((36, 0.2), (38, 0.3), (42, 0.8))}
    for r in rows.values():
        r[0] = 1
    pos = np.concatenate([np.flatnonzero(r).astype(float) for r in rows.values()])
    keys = np.concatenate([np.full(int(r.sum()), k) for k, r in rows.items()])
    # Small timing noise, well inside the tolerance, must not change a count.
    noisy = pos + rng.uniform(-0.04, 0.04, len(pos))
    rep = BarRepetition(noisy, keys, tolerance=0.15)
    for lag in (1, 2, 3, 4, 6, 8, 12):
        assert rep.share(lag) == pytest.approx(_reference_share(rows, lag, np.ptp(noisy)), abs=1e-12)


def test_a_pattern_recurs_at_its_bar_and_not_between():
    """A three-beat kick and snare pattern under an even hi-hat: full recurrence at 3 and 6 beats, less at 2, 4 and 5."""
    bars = np.arange(16) * 3.0
    pos = np.concatenate([bars, bars + 1, bars + 2, np.arange(0, 48, 0.5)])
    keys = np.concatenate([np.full(16, 36), np.full(32, 38), np.full(96, 42)])
    rep = BarRepetition(pos, keys)
    assert rep.share(3) == pytest.approx(1.0) and rep.share(6) == pytest.approx(1.0)
    assert max(rep.share(2), rep.share(4), rep.share(5)) < 0.9


def test_windows_and_empty_input():
    rep = BarRepetition(np.arange(20.0), np.zeros(20, int))
    assert rep.window(0, 10).share(1) == pytest.approx(1.0)
    assert rep.window(100, 200).share(1) == 0.0
    assert BarRepetition([], []).share(3) == 0.0
    assert note_keys([42], [True])[0] != note_keys([42], [False])[0]
    with pytest.raises(ValueError):
        BarRepetition([0.0, 1.0], [1])


def test_phrase_gain_closed_form():
    """Kick on every downbeat, crash on every fourth: the crash's share rises from 0 (one bar) to 1 (four or eight
    bars), the kick's stays 1, so the mean rise over the two keys is exactly 1/2 at 4 and 8 bars and 0 at 2 and 3."""
    bar = 4.0
    kicks = np.arange(32) * bar
    crashes = np.arange(0, 32, 4) * bar
    rep = BarRepetition(np.concatenate([kicks, crashes]), np.concatenate([np.full(32, 36), np.full(8, 49)]))
    assert rep.phrase_gain(bar, 4) == pytest.approx(0.5) and rep.phrase_gain(bar, 8) == pytest.approx(0.5)
    assert rep.phrase_gain(bar, 2) == 0.0 and rep.phrase_gain(bar, 3) == 0.0


def test_a_kit_marking_every_fourth_bar_gets_a_four_bar_hypermeasure():
    """A 4/4 kit pattern (common practice: kick on 1 and 3, snare on 2 and 4, eighth-note hi-hat) at 120 bpm, with a
    crash on the first downbeat of every four bars: the hypermeasure is four bars long and starts on a crash."""
    import dataclasses

    import metertop
    from metertop.load import notes_from_onsets

    beat = 0.5
    rows = []
    for b in range(32):
        t0 = b * 4 * beat
        rows += [(t0, 36), (t0 + 2 * beat, 36), (t0 + beat, 38), (t0 + 3 * beat, 38)]
        rows += [(t0 + k * beat / 2, 42) for k in range(8)]
        if b % 4 == 0:
            rows.append((t0, 49))
    rows.sort()
    on = np.array([r[0] for r in rows])
    pitch = np.array([r[1] for r in rows])
    notes = dataclasses.replace(notes_from_onsets(on, pitches=pitch), is_drum=np.ones(len(on), bool))
    r = metertop.analyse(notes)
    assert r.time_signature == "4/4"
    h = r.level("hypermeasure")
    assert h is not None and h.period_s == pytest.approx(4 * 4 * beat, rel=0.02)
    assert (h.phase_s / (4 * 4 * beat)) == pytest.approx(round(h.phase_s / (4 * 4 * beat)), abs=0.02)
