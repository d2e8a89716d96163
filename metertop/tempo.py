"""Pulse and tempo curve: windowed cycle scans in seconds, then a warp to pulse time.

Conventions
-----------
- Input: event times in seconds (sorted) and their weights.
- The *pulse* is the regular level that the tracker follows; the metric tree
  later says whether it is the subdivision, the beat or a multiple of it.
- *Pulse time* ``theta(t)`` counts pulses: tracked pulses fall on the
  integers, and it grows with the local tempo, so that bars and
  hypermeasures can be wrapped at whole numbers of pulses although the
  playing drifts (DESIGN.md section 4).

Method
------
1. Windows of ``2 * half_width_s`` seconds, one every ``hop_s``. In each,
   the tapered onsets are wrapped at every candidate period; the
   salience of a period is the persistence of the essential class of the
   wrapped density (its top-to-floor range), on an occupancy scale, so a
   period that leaves cycles empty scores low.
2. A Viterbi path over periods links the windows into a tempo curve, with a
   Gaussian cost on the log-period change between windows and a broad
   log-normal preference for pulses near ``prior_period_s``.
3. In each window the most persistent phase at the chosen period anchors a
   pulse. The anchors' phases, unwrapped along the piece, correct the
   integral of ``1 / period``; the result is ``theta(t)``. This is the
   one-dimensional case of circular coordinates (de Silva, Morozov &
   Vejdemo-Johansson, DCG 45 (2011) 737-759): a phase per window, lifted
   to the integers and smoothed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .scan import circular_bumps, refined_phases

__all__ = ["PulseTrack", "TempoSettings", "track_pulse", "pulse_salience", "viterbi_path"]


@dataclass(frozen=True)
class TempoSettings:
    """Parameters of the pulse search (seconds unless named otherwise)."""

    min_period_s: float = 0.12
    max_period_s: float = 1.6
    period_step: float = 0.02  # relative spacing of the candidate periods
    half_width_s: float = 3.0
    hop_s: float = 1.0
    jitter_s: float = 0.02  # bump width: onset jitter plus drift within a window
    n_bins: int = 24
    prior_period_s: float = 0.5
    prior_octaves: float = 1.2
    change_per_hop: float = 0.04  # SD of the log-period change between windows


@dataclass(frozen=True)
class PulseTrack:
    """A tracked pulse and the warp from seconds to pulse time.

    Attributes
    ----------
    times_s : ndarray
        Every tracked pulse, covering the events.
    grid_s, theta : ndarray
        Samples of the warp ``theta(t)`` (increasing).
    centres_s, periods_s : ndarray
        Window centres and the period chosen in each window.
    candidates_s : ndarray
        Candidate periods of the scan.
    salience : ndarray, shape (n_windows, n_candidates)
        Window-by-period salience.
    """

    times_s: np.ndarray
    grid_s: np.ndarray
    theta: np.ndarray
    centres_s: np.ndarray
    periods_s: np.ndarray
    candidates_s: np.ndarray
    salience: np.ndarray

    def warp(self, times_s) -> np.ndarray:
        """Pulse time of each time in seconds (linear beyond the ends)."""
        return _interp_extrap(np.asarray(times_s, dtype=np.float64), self.grid_s, self.theta)

    def unwarp(self, theta) -> np.ndarray:
        """Seconds of each pulse-time value (inverse of :meth:`warp`)."""
        return _interp_extrap(np.asarray(theta, dtype=np.float64), self.theta, self.grid_s)

    def salience_profile(self) -> tuple[np.ndarray, np.ndarray]:
        """Candidate periods and their salience over the piece, relative to the best period's.

        The median over windows of each period's salience, divided by the
        median over windows of the largest salience: 1 for a period that is
        as salient as the best one throughout, near 0 for one that is never
        periodic. The salience is essential persistence times the share
        near the top peak (see :func:`pulse_salience`).
        """
        top = float(np.median(self.salience.max(axis=1))) if self.salience.size else 0.0
        profile = np.median(self.salience, axis=0) / top if top > 0 else np.zeros(len(self.candidates_s))
        return self.candidates_s, profile

    @property
    def median_period_s(self) -> float:
        return float(np.median(np.diff(self.times_s))) if len(self.times_s) > 1 else float(np.median(self.periods_s))


def _interp_extrap(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    y = np.interp(x, xp, fp)
    lo, hi = x < xp[0], x > xp[-1]
    if np.any(lo):
        slope = (fp[1] - fp[0]) / (xp[1] - xp[0])
        y[lo] = fp[0] + (x[lo] - xp[0]) * slope
    if np.any(hi):
        slope = (fp[-1] - fp[-2]) / (xp[-1] - xp[-2])
        y[hi] = fp[-1] + (x[hi] - xp[-1]) * slope
    return y


def _windows(times_s: np.ndarray, s: TempoSettings) -> tuple[np.ndarray, float]:
    first, last = float(times_s[0]), float(times_s[-1])
    dur = last - first
    half = min(s.half_width_s, max(dur / 2 + s.hop_s, 1.0))
    n = max(int(np.ceil(dur / s.hop_s)) + 1, 1)
    return first + np.arange(n) * (dur / max(n - 1, 1) if n > 1 else 0.0) + (dur / 2 if n == 1 else 0.0), half


def pulse_salience(times_s, weights, centres_s, half_width_s: float, periods_s, settings: TempoSettings = TempoSettings()) -> np.ndarray:
    """Salience of each candidate period in each window.

    The salience is the persistence of the essential H0 class of the
    wrapped, tapered density (its range from top to floor, where the
    one-cycle is born), times the share of the density within a fifth of
    a cycle of the top peak. On the occupancy scale, 1 means one onset of
    average weight at the same phase in every cycle and none elsewhere.

    Returns
    -------
    ndarray, shape (len(centres_s), len(periods_s))
    """
    t = np.asarray(times_s, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    periods = np.asarray(periods_s, dtype=np.float64)
    width = np.maximum(settings.jitter_s / periods, 0.5 / settings.n_bins)  # (J,)
    out = np.zeros((len(centres_s), len(periods)))
    for k, c in enumerate(centres_s):
        lo, hi = np.searchsorted(t, [c - half_width_s, c + half_width_s])
        if hi - lo < 2:
            continue
        x = t[lo:hi] - c
        taper = 0.5 + 0.5 * np.cos(np.pi * x / half_width_s)
        dens = circular_bumps(x[:, None] / periods[None, :], taper * w[lo:hi], settings.n_bins, width)
        dens /= half_width_s / periods[:, None]  # cycles covered by the taper
        # Essential-class persistence of a circle function is its range.
        essential = dens.max(axis=1) - dens.min(axis=1)
        # Share of the density near the top peak: a pulse that leaves most
        # onsets between its cycles' peaks explains the rhythm poorly.
        top = np.argmax(dens, axis=1)
        near = np.abs(((np.arange(settings.n_bins)[None, :] - top[:, None]) + settings.n_bins // 2) % settings.n_bins - settings.n_bins // 2)
        mask = near <= settings.n_bins // 5
        share = (dens * mask).sum(axis=1) / np.maximum(dens.sum(axis=1), 1e-12)
        out[k] = essential * share ** 2
    return out


def _viterbi(log_emit: np.ndarray, log_periods: np.ndarray, sd: float) -> np.ndarray:
    trans = -0.5 * ((log_periods[:, None] - log_periods[None, :]) / sd) ** 2  # (from, to)
    return viterbi_path(log_emit, trans)


def viterbi_path(log_emit: np.ndarray, trans: np.ndarray) -> np.ndarray:
    """The most likely state path: ``log_emit`` (steps, states), ``trans`` (from, to) log-weights of moving between states."""
    n, j = log_emit.shape
    score = log_emit[0].copy()
    back = np.zeros((n, j), dtype=np.int64)
    for k in range(1, n):
        cand = score[:, None] + trans
        back[k] = np.argmax(cand, axis=0)
        score = cand[back[k], np.arange(j)] + log_emit[k]
    path = np.empty(n, dtype=np.int64)
    path[-1] = int(np.argmax(score))
    for k in range(n - 1, 0, -1):
        path[k - 1] = back[k, path[k]]
    return path


def _anchor_phase(t, w, c, half, period) -> float | None:
    """Phase (cycle fraction, relative to ``c``) of the most persistent position.

    The most persistent class of a circle function's superlevel sets is the
    essential one, born at the global maximum, so its peak is the argmax: no
    diagram is needed (tests check this against the union-find diagram).
    """
    lo, hi = np.searchsorted(t, [c - half, c + half])
    if hi - lo < 2:
        return None
    x = t[lo:hi] - c
    g = (0.5 + 0.5 * np.cos(np.pi * x / half)) * w[lo:hi]
    dens = circular_bumps(x / period, g, 48, max(0.03 / period, 0.02))
    return float(refined_phases(dens, [int(np.argmax(dens))])[0])


def track_pulse(times_s, weights, settings: TempoSettings = TempoSettings(), period_hint_s: float | None = None) -> PulseTrack:
    """Track the pulse through the piece and build the warp to pulse time.

    Parameters
    ----------
    times_s, weights : array_like
        Event times (sorted, seconds) and weights.
    settings : TempoSettings
    period_hint_s : float, optional
        Restrict the search to within 15% of this period (used when the
        pulse is already known, e.g. for score input).

    Returns
    -------
    PulseTrack
    """
    t = np.asarray(times_s, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    if len(t) < 2 or t[-1] - t[0] <= 0:
        raise InputError("need at least two distinct onset times")
    s = settings
    if period_hint_s is not None:
        lo, hi = period_hint_s / 1.15, period_hint_s * 1.15
    else:
        lo, hi = s.min_period_s, min(s.max_period_s, max((t[-1] - t[0]) / 2, s.min_period_s * 2))
    n_cand = max(int(np.ceil(np.log(hi / lo) / np.log1p(s.period_step))) + 1, 2)
    periods = lo * (1 + s.period_step) ** np.arange(n_cand)
    centres, half = _windows(t, s)
    sal = pulse_salience(t, w, centres, half, periods, s)
    log_p = np.log(periods)
    prior = -0.5 * (np.log2(periods / s.prior_period_s) / s.prior_octaves) ** 2
    log_emit = np.log(sal + 1e-3) + prior[None, :]
    path = _viterbi(log_emit, log_p, s.change_per_hop * max(s.hop_s, 1e-3))
    chosen = periods[path]

    # Integral of 1/period on a fine grid: the uncorrected pulse count.
    step = 0.005
    grid = np.arange(t[0] - 2 * chosen[0], t[-1] + 2 * chosen[-1] + step, step)
    inv_p = 1.0 / np.interp(grid, centres, chosen)
    theta0 = np.concatenate([[0.0], np.cumsum(0.5 * (inv_p[1:] + inv_p[:-1]) * step)])

    # Phase corrections at the anchors, lifted to the reals and smoothed.
    anchors, corr = [], []
    for c, p in zip(centres, chosen):
        ph = _anchor_phase(t, w, c, half, p)
        if ph is None:
            continue
        a = c + ph * p
        anchors.append(a)
        corr.append(-np.interp(a, grid, theta0))
    if not anchors:
        raise InputError("no regular pulse found")
    anchors = np.asarray(anchors)
    corr = np.unwrap(np.asarray(corr) * 2 * np.pi) / (2 * np.pi)
    # Integer lift: keep the correction near zero on average.
    corr -= np.round(np.median(corr))
    if len(corr) >= 3:
        padded = np.concatenate([[corr[0]], corr, [corr[-1]]])
        corr = np.median(np.stack([padded[:-2], padded[1:-1], padded[2:]]), axis=0)
    theta = theta0 + np.interp(grid, anchors, corr)
    theta = np.maximum.accumulate(theta)  # a warp never runs backwards
    # Strictly increasing for inversion.
    theta = theta + np.arange(len(theta)) * 1e-12
    first, last = int(np.ceil(np.interp(t[0], grid, theta) - 0.5)), int(np.floor(np.interp(t[-1], grid, theta) + 0.5))
    pulses = np.interp(np.arange(first, last + 1, dtype=float), theta, grid)
    return PulseTrack(pulses, grid, theta, centres, chosen, periods, sal)
