"""Pulse tracking and the warp to pulse time (metertop.tempo).

Beat accuracy is measured with mir_eval, the reference implementation of
the beat F-measure with a +-70 ms window (Dixon 2006; Davies, Degara &
Plumbley 2009, QMUL C4DM-TR-09-06): ``mir_eval.onset.f_measure(ref, est,
window=0.07)`` returns (F, precision, recall).
"""

from __future__ import annotations

import mir_eval
import numpy as np
import pytest

from metertop import InputError
from metertop.accents import event_weights
from metertop.events import merge_events
from metertop.tempo import PulseTrack, track_pulse

from conftest import AMAZING_GRACE, ODE_TO_JOY, render_tune


def _track(rendering) -> PulseTrack:
    ev = merge_events(rendering.notes)
    return track_pulse(ev.times_s, event_weights(ev))


@pytest.mark.parametrize("tune, quarter_s", [(ODE_TO_JOY, 0.5), (ODE_TO_JOY, 0.62), (AMAZING_GRACE, 0.45)],
                         ids=["ode-0.50", "ode-0.62", "grace-0.45"])
def test_steady_pulse_median_period(tune, quarter_s):
    """A steadily played tune is tracked at its quarter-note pulse: median period within 2%."""
    track = _track(render_tune(tune, quarter_s, seed=21))
    assert track.median_period_s == pytest.approx(quarter_s, rel=0.02)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_drifting_tempo_is_followed(seed):
    """Under a smooth 4% SD tempo drift (8-beat correlation), tracked pulses fall within 70 ms of >= 90% of the true beats (mir_eval)."""
    played = render_tune(ODE_TO_JOY, 0.5, seed=seed, drift_sd=0.04, drift_beats=8)
    # The drift is real: a constant grid fitted to the beats misses by far more than the window.
    k = np.arange(len(played.beats_s))
    fit = np.polyval(np.polyfit(k, played.beats_s, 1), k)
    assert np.abs(played.beats_s - fit).max() > 0.14
    track = _track(played)
    f, precision, recall = mir_eval.onset.f_measure(played.beats_s, track.times_s, window=0.07)
    assert recall >= 0.9
    assert precision >= 0.9


def test_warp_puts_tracked_pulses_on_integers_and_is_increasing():
    """Pulse time counts pulses: the tracked pulses warp to consecutive integers, and the warp increases."""
    track = _track(render_tune(ODE_TO_JOY, 0.5, seed=5, drift_sd=0.04))
    theta = track.warp(track.times_s)
    np.testing.assert_allclose(theta, np.round(theta), atol=1e-6)
    assert np.all(np.diff(np.round(theta)) == 1)
    assert np.all(np.diff(track.theta) > 0)


def test_warp_and_unwarp_are_inverse():
    """``unwarp(warp(t)) == t`` and ``warp(unwarp(x)) == x``, inside the piece and beyond both ends."""
    track = _track(render_tune(AMAZING_GRACE, 0.45, seed=6, drift_sd=0.04))
    rng = np.random.default_rng(0)
    t = np.sort(rng.uniform(track.grid_s[0] - 5.0, track.grid_s[-1] + 5.0, 500))
    np.testing.assert_allclose(track.unwarp(track.warp(t)), t, atol=1e-6)
    x = np.sort(rng.uniform(track.theta[0] - 5.0, track.theta[-1] + 5.0, 500))
    np.testing.assert_allclose(track.warp(track.unwarp(x)), x, atol=1e-6)


def test_track_shapes():
    """Window centres, chosen periods and the salience matrix have matching shapes."""
    track = _track(render_tune(ODE_TO_JOY, 0.5, seed=7))
    assert track.salience.shape == (len(track.centres_s), len(track.candidates_s))
    assert len(track.periods_s) == len(track.centres_s)
    assert np.all(np.isin(track.periods_s, track.candidates_s))
    assert np.all(np.diff(track.times_s) > 0)


def test_too_few_onsets_is_an_input_error():
    """Fewer than two distinct onset times cannot carry a pulse."""
    with pytest.raises(InputError):
        track_pulse([1.0], [1.0])
    with pytest.raises(InputError):
        track_pulse([1.0, 1.0], [1.0, 1.0])


def test_anchor_phase_is_the_essential_peak_of_the_diagram():
    """The phase anchoring each window is the peak of the essential class.

    For a function on a circle, the superlevel-set class that never dies is
    born at the global maximum (the elder rule; Edelsbrunner & Harer,
    "Computational Topology", AMS 2010, sec. VII.1), so the anchor skips the
    diagram and takes the argmax. Here it must agree with the union-find
    diagram's first (most persistent) peak on random windows.
    """
    from metertop.persistence import circle_diagram_unionfind
    from metertop.scan import WrappedCycle, circular_bumps
    from metertop.tempo import _anchor_phase

    rng = np.random.default_rng(12)
    for _ in range(50):
        t = np.sort(rng.uniform(0, 6, rng.integers(3, 40)))
        w = rng.uniform(0.2, 2.0, len(t))
        period = rng.uniform(0.15, 1.5)
        got = _anchor_phase(t, w, 3.0, 3.0, period)
        x = t - 3.0
        dens = circular_bumps(x / period, (0.5 + 0.5 * np.cos(np.pi * x / 3.0)) * w, 48, max(0.03 / period, 0.02))
        want = WrappedCycle(period, dens, circle_diagram_unionfind(dens)).peak_phases[0]
        assert got == pytest.approx(want, abs=1e-12)
