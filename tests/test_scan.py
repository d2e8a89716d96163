"""Wrapping onsets onto circles and scoring the persistence (metertop.scan)."""

from __future__ import annotations

import numpy as np
import pytest

from metertop.scan import WrappedCycle, scan_lengths, wrap_cycle, wrapped_density


@pytest.mark.parametrize("length, phase", [(0.8, 0.375), (1.0, 0.0), (2.5, 0.9), (3.0, 0.5)])
def test_wrapped_density_peaks_at_the_onsets_phase(length, phase):
    """Onsets at the same phase of every cycle give a density whose top bin is that phase."""
    x = (np.arange(10) + phase) * length
    m = 120
    f = wrapped_density(x, np.ones(10), length, n_bins=m, width=0.03)
    assert f.shape == (m,)
    d = abs(((np.argmax(f) / m - phase) + 0.5) % 1 - 0.5)
    assert d <= 0.5 / m + 1e-12


def test_peak_phase_is_refined_between_bins():
    """The parabola through the top bin locates a phase between bins to well under a bin."""
    length, phase, m = 1.0, 0.3137, 24
    x = np.arange(20) + phase
    c = wrap_cycle(x, np.ones(20), length, bins_per_unit=m)
    assert c.n_bins == m
    assert abs(c.peak_phases[0] - phase) < 0.25 / m


@pytest.mark.parametrize("n_cycles", [4, 9, 30])
def test_occupancy_scale(n_cycles):
    """One onset of weight 1 in every cycle gives a peak of about 1, whatever the number of cycles."""
    length = 0.7
    x = 0.2 + np.arange(n_cycles) * length
    f = wrapped_density(x, np.ones(n_cycles), length, n_bins=200, width=0.02)
    assert f.max() == pytest.approx(1.0, abs=0.02)


def test_occupancy_scale_is_linear_in_weight_and_count():
    """Two onsets of weight 1.5 at the same phase of each cycle give a peak of about 3."""
    length = 1.0
    x = np.repeat(np.arange(12) + 0.5, 2)
    f = wrapped_density(x, np.full(len(x), 1.5), length, n_bins=100, width=0.02)
    assert f.max() == pytest.approx(3.0, abs=0.05)


def test_half_filled_cycles_give_half_occupancy():
    """Onsets in only every other cycle reach about half the height."""
    x = np.arange(0, 20, 2) + 0.25
    f = wrapped_density(x, np.ones(len(x)), 1.0, n_bins=100, width=0.02, span=20.0)
    assert f.max() == pytest.approx(0.5, abs=0.02)


def _period3():
    """A stream of 48 even onsets, every third (phase 1 of 3) accented 3:1."""
    x = np.arange(48.0)
    w = np.where(x % 3 == 1, 3.0, 1.0)
    return x, w


def test_period3_essential_peak_on_the_accented_phase():
    """Wrapped at its period 3, the accented position is the essential (most persistent) peak."""
    x, w = _period3()
    c = wrap_cycle(x, w, 3.0)
    assert isinstance(c, WrappedCycle)
    assert c.peak_phases[0] * 3.0 == pytest.approx(1.0, abs=0.05)
    assert c.relative_persistence[0] == pytest.approx(1.0)
    # The two weak positions are the next bars, equal and well below.
    assert len(c.relative_persistence) == 3
    assert c.relative_persistence[1] == pytest.approx(c.relative_persistence[2], rel=1e-5)
    assert c.relative_persistence[1] < 0.5


@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_period3_dominance_beats_smearing_and_doubled_lengths(engine):
    """Dominance at length 3 exceeds that at 4 (smears the accents) and at 6 (two equal downbeats per cycle)."""
    x, w = _period3()
    d3, d4, d6 = (c.dominance for c in scan_lengths(x, w, [3.0, 4.0, 6.0], engine=engine))
    assert d3 > 0.5
    assert d3 > d4 + 0.3
    assert d3 > d6 + 0.3
    assert d6 == pytest.approx(0.0, abs=1e-5)  # two downbeats of equal persistence


def test_scan_engines_agree():
    """The wrapped cycles computed with dionysus and with union-find have the same diagrams."""
    rng = np.random.default_rng(9)
    x = np.sort(rng.uniform(0, 30, 80))
    w = rng.uniform(0.5, 2.0, 80)
    lengths = [0.5, 1.0, 1.5, 2.0, 3.0, 4.0]
    for a, b in zip(scan_lengths(x, w, lengths, engine="dionysus"), scan_lengths(x, w, lengths, engine="unionfind")):
        assert a.length == b.length
        np.testing.assert_allclose(a.density, b.density)
        np.testing.assert_allclose(a.diagram.pairs(), b.diagram.pairs(), rtol=1e-6, atol=1e-6)


def test_shift_rotates_phases_only():
    """Shifting every onset by a quarter cycle moves the peak phase by a quarter and keeps the dominance."""
    x, w = _period3()
    a = wrap_cycle(x, w, 3.0, bins_per_unit=16)
    b = wrap_cycle(x + 0.75, w, 3.0, bins_per_unit=16)
    assert (b.peak_phases[0] - a.peak_phases[0]) % 1.0 == pytest.approx(0.25, abs=1e-6)
    assert b.dominance == pytest.approx(a.dominance, abs=1e-6)


def test_contrast_and_persistence_at():
    """Contrast is (top - floor) / top; ``persistence_at`` finds the accented phase and reports 0 far from any peak."""
    x, w = _period3()
    c = wrap_cycle(x, w, 3.0)
    top = c.diagram.births[0]
    assert c.contrast == pytest.approx((top - c.diagram.floor) / top)
    at = c.persistence_at([1 / 3, 0.0, 2 / 3, 1 / 6], tolerance=0.05)
    assert at[0] == pytest.approx(1.0)
    assert 0 < at[1] < 0.5 and 0 < at[2] < 0.5
    assert at[3] == 0.0


def test_wrap_cycles_equals_wrap_cycle_one_by_one():
    """Lengths wrapped together (rows of one transform per bin count) give exactly the cycles of one call each."""
    from metertop.scan import wrap_cycles

    rng = np.random.default_rng(4)
    x = np.sort(rng.uniform(0, 40, 90))
    w = rng.uniform(0.2, 2.0, 90)
    lengths = [0.5, 1.0, 4 / 3, 2.0, 3.0, 3.0, 6.0, 8.0, 12.0, 16.0]
    spans = [40.0 + L for L in lengths]
    together = wrap_cycles(x, w, lengths, bins_per_unit=24, width_units=0.04, spans=spans)
    for c, L, sp in zip(together, lengths, spans):
        alone = wrap_cycle(x, w, L, bins_per_unit=24, width_units=0.04, span=sp)
        assert c.length == alone.length
        assert np.array_equal(c.density, alone.density)
        assert np.array_equal(c.diagram.peaks, alone.diagram.peaks)
        assert np.array_equal(c.diagram.births, alone.diagram.births) and np.array_equal(c.diagram.deaths, alone.diagram.deaths)
