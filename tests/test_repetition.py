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


def _reference_share(grid_rows: dict, lag: int) -> float:
    """Mean over keys of autocorrelation(lag) / eligible onsets, from numpy.correlate on binary sequences."""
    shares = []
    length = max(len(r) for r in grid_rows.values())
    last = max(int(np.flatnonzero(r).max()) for r in grid_rows.values())
    for row in grid_rows.values():
        seq = np.zeros(length, int)
        seq[: len(row)] = row
        ac = np.correlate(seq, seq, mode="full")[length - 1:]  # ac[L] = sum_t seq[t] * seq[t + L]
        eligible = int(seq[: max(last - lag + 1, 0)].sum())
        if eligible >= 2:
            shares.append(ac[lag] / eligible)
    return float(np.mean(shares))


@pytest.mark.parametrize("seed", range(5))
def test_share_equals_autocorrelation_on_a_grid(seed):
    rng = np.random.default_rng(seed)
    rows = {key: (rng.random(96) < p).astype(int) for key, p in ((36, 0.2), (38, 0.3), (42, 0.8))}
    for r in rows.values():
        r[0] = 1
    pos = np.concatenate([np.flatnonzero(r).astype(float) for r in rows.values()])
    keys = np.concatenate([np.full(int(r.sum()), k) for k, r in rows.items()])
    # Small timing noise, well inside the tolerance, must not change a count.
    rep = BarRepetition(pos + rng.uniform(-0.04, 0.04, len(pos)), keys, tolerance=0.15)
    for lag in (1, 2, 3, 4, 6, 8, 12):
        assert rep.share(lag) == pytest.approx(_reference_share(rows, lag), abs=1e-12)


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
