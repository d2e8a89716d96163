"""Classical baseline: autocorrelation metre induction with accent weighting.

The benchmark runs this beside metertop on the same notes. It follows the
method of Brown (1993) as extended with accent models by Toiviainen & Eerola
(2006): an accent-weighted onset function, its autocorrelation, and a metre
read from the autocorrelation at metrically relevant lags. Nothing here uses
topology, and nothing here is fitted to evaluation data.

Method
------
1. **Events and accents.** Notes are merged into events with
   :func:`metertop.events.merge_events` (35 ms). Each event gets the accents
   Toiviainen & Eerola (2006) used: durational accent (Parncutt 1994,
   ``(1 - exp(-IOI / 0.5 s)) ** 2``) and melodic accent (Thomassen 1982), both
   from :mod:`metertop.accents`. Performances add a dynamic accent from the
   velocity (:func:`metertop.accents.dynamic_accent`, a squashed robust
   z-score in (0, 1)), centred at 0.5 so that flat velocities add nothing.
   No drum-role, chord or bass accent: the paper had none. The weight of an
   event is::

       w = max(durational + melodic + (dynamic - 0.5), 0.05)

   The impulse height is the accent itself, with no constant for the bare
   onset: T&E weighted each onset impulse by its accent value (from memory).
   On the synthetic checks a constant of 1 under the accents left the bar
   lags almost indistinguishable, since the autocorrelation then measures
   mostly which onsets coincide. A sum rather than a product, because
   Thomassen's model gives many notes (repeated pitches) an accent of zero,
   and a product would wipe out their durational accent too. The floor keeps
   every onset in the function.
2. **Onset functions and autocorrelation.** Each event is a Gaussian bump
   (SD 25 ms) on a 10 ms grid: of height ``w`` for the metre (T&E's accent
   weighting), and of height ``1 + w`` for the pulse (Brown's onsets plus
   the accents; accents alone made the bar outweigh the beat, and plain
   onsets leave a steady hi-hat stream without any preferred multiple). Each
   autocorrelation is taken with the FFT, divided by its value at lag 0,
   and corrected for the shrinking overlap at long lags (the unbiased
   estimate, on the span plus one median inter-onset interval, overlap
   floored at a quarter of it). ``A(lag)`` is read as the mass within a
   window around the lag relative to the mass of one sharp peak there, so
   that a sharp peak reads as its height and a peak that drift has smeared
   reads as its mass. The window is the same for every bar lag of a piece,
   +/- beat/8 (half-way to a sixteenth note), so that the background
   between peaks weighs the same at every lag; around beat/2 and beat/3 it
   is +/- beat/24, since beat/3 lies only beat/12 from a sixteenth note.
3. **Beat period.** The lag between 0.25 s and 1.5 s that maximises the
   pulse autocorrelation times a resonance curve: a Gaussian in log period
   centred at 0.6 s with an SD of one octave (preferred tempo near 100 bpm;
   Parncutt 1994, van Noorden & Moelants 1999; centre and width from memory,
   not tuned). The peak is refined by a parabola; where nothing repeats in
   that range (autocorrelation below 0.05) the median inter-onset interval
   stands in. The beat grid has one global period, as in the classical
   method: its phase maximises the accent-weighted onset function summed at
   the grid points (a comb), and period and phase are then refitted by
   weighted least squares to the events within 15% of a period of a grid
   point. A drifting performance therefore slips off the grid; that is this
   baseline's known weakness.
4. **Metre.** Nine readings are scored, each a bar lag and a beat division
   (tatum lag = beat / division)::

       simple (tatum = beat/2):   2/4 at 2 beats, 3/4 at 3, 4/4 at 4, 5/4 at 5,
                                  7/8 at 3.5 beats = 7 eighths (2+2+3)
       compound (tatum = beat/3): 3/8 at 1 beat, 6/8 at 2, 9/8 at 3, 12/8 at 4

   As in Brown (1993) and T&E (2006), the evidence is the accent-weighted
   autocorrelation at these metrically relevant lags::

       score = (A(bar) - trend(bar)) / spread - 0.25 * log2(bar / beat)
               +/- 3.0 * (A(beat/2) - A(beat/3)) / (A(beat/2) + A(beat/3))

   ``trend`` is a straight line fitted to ``A`` at 1..8 beats and
   ``spread`` the SD of the residuals (at least 0.02): drift and finite
   length make ``A`` fall with the lag, and the bar shows as a rise above
   that trend. Only lags up to three quarters of the piece are read; a
   longer bar gets no evidence, only its penalty. The second term is a
   small preference for shorter bars, since a bar's double repeats whenever
   the bar does. The division term is added for simple readings and
   subtracted for compound ones (plus 0.01 on the simple side, so that a
   beat with no audible subdivision counts as simple). T&E fed
   autocorrelation values at such lags to a discriminant analysis trained on
   their corpus; this baseline uses the fixed rule instead, so that nothing
   is fitted to data. The constants 0.25, 3.0 and 0.02 were set by hand on
   seeded synthetic melodies made for the purpose (random rhythms in the
   nine metres, deadpan and with drift and jitter; not shipped), never on
   evaluation data; the results were flat within a factor of two of each.
5. **Downbeats.** Each grid point (a beat; for 7/8 an eighth) gets the
   summed weight of the events within 20% of a grid step of it (at most
   0.1 s). The downbeat phase is the offset, 0 .. n-1 grid steps, with the
   largest mean weight at downbeats.
6. **Confidence.** A softmax over the nine scores with temperature 1 (set
   on the same synthetic melodies, not calibrated on evaluation data);
   the alternatives are the nine readings ranked by score.

Conventions
-----------
- Times are seconds; the onset grid step is 10 ms.
- Time signatures, beat counts, divisions and groupings follow
  ``bench/common.py`` ``METRES`` (DESIGN.md section 6): a simple beat gives
  ``n/4``, a compound beat ``3n/8``, and 7/8 is grouped 2+2+3 eighths with
  ``beat_division`` None and uneven beats.
- ``beat_s`` is the median beat, so for 7/8 it is two eighths; ``bar_s`` is
  the bar lag.
- ``hypermeasure_bars`` is always None: the classical method stops at the
  bar.
- Fewer than 8 events raise :class:`metertop.InputError`.

References
----------
- Brown, J. C. (1993). Determination of the meter of musical scores by
  autocorrelation. *JASA* 94(4), 1953-1957.
- Toiviainen, P. & Eerola, T. (2006). Autocorrelation in meter induction: the
  role of accent structure. *JASA* 119(2), 1164-1170.
- Parncutt, R. (1994). A perceptual model of pulse salience and metrical
  accent in musical rhythms. *Music Perception* 11(4), 409-464.
- Thomassen, J. M. (1982). Melodic accent: experiments and a tentative model.
  *JASA* 71(6), 1596-1605.
- van Noorden, L. & Moelants, D. (1999). Resonance in the perception of
  musical pulse. *Journal of New Music Research* 28(1), 43-66.
"""

from __future__ import annotations

import numpy as np

from metertop.accents import dynamic_accent, durational_accent, melodic_accent
from metertop.errors import InputError
from metertop.events import EventStream, merge_events
from metertop.load import NoteTable

__all__ = ["analyse_baseline", "accent_weights", "READINGS"]

MIN_EVENTS = 8
MERGE_WINDOW_S = 0.035
BIN_S = 0.010
BUMP_SD_S = 0.025
LAG_WINDOW = 1 / 8  # half-width of the window read around each bar lag, in beats
TATUM_WINDOW = 1 / 24  # the same around beat/2 and beat/3
TACTUS_RANGE_S = (0.25, 1.5)
RESONANCE_CENTRE_S = 0.6
RESONANCE_SD_OCTAVES = 1.0
BAR_SPREAD_FLOOR = 0.02
MAX_LAG_FRACTION = 0.75  # longest bar lag read, as a fraction of the span
SHORT_BAR_PREFERENCE = 0.25  # penalty per doubling of the bar, in standardised units
DIVISION_WEIGHT = 3.0  # standardised units for a clear division
SOFTMAX_TEMPERATURE = 1.0
SIMPLE_TIE_BONUS = 0.01  # simple division wins when neither subdivision is heard
FIT_WINDOW = 0.15  # events within this fraction of a period refit the grid
DOWNBEAT_WINDOW = 0.2  # fraction of a grid step; capped at DOWNBEAT_WINDOW_MAX_S
DOWNBEAT_WINDOW_MAX_S = 0.1
WEIGHT_FLOOR = 0.05
NO_PULSE = 0.05  # below this the tactus range holds no pulse; the median IOI stands in

# time signature -> (bar in beats, beat division, beats per bar, grouping in tatums)
READINGS: dict[str, tuple[float, int, int, tuple[int, ...] | None]] = {
    "2/4": (2.0, 2, 2, None),
    "3/4": (3.0, 2, 3, None),
    "4/4": (4.0, 2, 4, None),
    "5/4": (5.0, 2, 5, None),
    "7/8": (3.5, 2, 3, (2, 2, 3)),
    "3/8": (1.0, 3, 1, None),
    "6/8": (2.0, 3, 2, None),
    "9/8": (3.0, 3, 3, None),
    "12/8": (4.0, 3, 4, None),
}


def accent_weights(events: EventStream) -> np.ndarray:
    """Accent weight of each event: durational plus melodic plus centred dynamic accent.

    Parameters
    ----------
    events : EventStream
        Merged events.

    Returns
    -------
    np.ndarray
        ``max(durational + melodic + (dynamic - 0.5), 0.05)``, one per
        event. Constant velocities (or none) leave the dynamic term at 0.

    Examples
    --------
    >>> from metertop.load import notes_from_onsets
    >>> ev = merge_events(notes_from_onsets([0.0, 1.0, 1.25, 1.5]))
    >>> w = accent_weights(ev)
    >>> bool(w[0] > w[1] > 0)  # the long note outweighs the short one
    True
    """
    dyn = dynamic_accent(events) - 0.5
    w = durational_accent(events) + melodic_accent(events) + dyn
    return np.maximum(w, WEIGHT_FLOOR)


def _onset_function(times_s: np.ndarray, weights: np.ndarray, origin_s: float, n_bins: int) -> np.ndarray:
    """Accent-weighted onset function: Gaussian bumps on the grid, by linear binning and a short convolution."""
    pos = (times_s - origin_s) / BIN_S
    lo = np.floor(pos).astype(np.int64)
    frac = pos - lo
    f = np.zeros(n_bins)
    np.add.at(f, np.clip(lo, 0, n_bins - 1), weights * (1.0 - frac))
    np.add.at(f, np.clip(lo + 1, 0, n_bins - 1), weights * frac)
    sd = BUMP_SD_S / BIN_S
    half = int(np.ceil(4 * sd))
    x = np.arange(-half, half + 1)
    kernel = np.exp(-0.5 * (x / sd) ** 2)
    return np.convolve(f, kernel, mode="same")


def _autocorrelation(f: np.ndarray, length_bins: float) -> np.ndarray:
    """Autocorrelation by FFT, 1 at lag 0, corrected for the shrinking overlap.

    A lag of ``L`` bins pairs events over ``length_bins - L`` of the piece
    (``length_bins`` is the span plus one typical inter-onset interval, the
    length a steady stream of events covers); the overlap is floored at a
    quarter of that length, so that the longest lags do not explode.
    """
    n = len(f)
    nfft = 1 << int(np.ceil(np.log2(2 * n)))
    spec = np.fft.rfft(f, nfft)
    r = np.fft.irfft(spec.real**2 + spec.imag**2, nfft)[:n]
    if r[0] <= 0:
        return np.zeros(n)
    overlap = np.maximum(length_bins - np.arange(n), 0.25 * length_bins)
    return np.maximum((r / r[0]) * (length_bins / overlap), 0.0)


def _acf_at(acf: np.ndarray, lag_s: float, half_s: float) -> float:
    """Autocorrelation at ``lag_s``, read as the mass within ``lag_s +/- half_s``.

    The sum of the autocorrelation over the window is divided by the sum of
    the shape one sharp peak would have there (a Gaussian with the SD of a
    bump's autocorrelation, sqrt(2) * ``BUMP_SD_S``). A sharp peak at the lag
    reads as its height; a peak that a drifting tempo has smeared across the
    window reads as its mass, not as its lowered top. The caller uses one
    window width for every lag of a piece, so that the background between
    peaks weighs the same at every lag. 0 where the window leaves the signal.
    """
    centre, half = lag_s / BIN_S, half_s / BIN_S
    if centre - half < 1 or centre + half > len(acf) - 1:
        return 0.0
    # Sampled at the same offsets from the lag whatever its fraction of a
    # bin, so that the reading does not depend on where the grid falls.
    offsets = np.linspace(-half, half, 2 * int(np.ceil(half)) + 1)
    values = np.interp(centre + offsets, np.arange(len(acf)), acf)
    peak_sd = np.sqrt(2.0) * BUMP_SD_S / BIN_S
    shape = np.exp(-0.5 * (offsets / peak_sd) ** 2)
    return float(values.sum() / shape.sum())


def _resonance(period_s: np.ndarray) -> np.ndarray:
    """Tempo preference: a Gaussian in log2 period around the preferred beat."""
    return np.exp(-0.5 * (np.log2(period_s / RESONANCE_CENTRE_S) / RESONANCE_SD_OCTAVES) ** 2)


def _beat_period(acf: np.ndarray, span_s: float) -> float | None:
    """The tactus lag maximising autocorrelation times resonance, refined by a parabola.

    None when the autocorrelation stays below ``NO_PULSE`` throughout the
    tactus range (onsets too sparse or too irregular to repeat there).
    """
    lo_s, hi_s = TACTUS_RANGE_S
    hi_s = max(min(hi_s, 0.5 * span_s), lo_s + 5 * BIN_S)
    lo, hi = int(round(lo_s / BIN_S)), min(int(round(hi_s / BIN_S)), len(acf) - 2)
    if hi <= lo:
        raise InputError("the onsets span too little time to find a beat")
    lags = np.arange(lo, hi + 1)
    salience = acf[lags] * _resonance(lags * BIN_S)
    k = int(np.argmax(salience))
    if acf[lags[k]] < NO_PULSE:
        return None  # nothing repeats within the tactus range
    shift = 0.0
    if 0 < k < len(lags) - 1:
        a, b, c = salience[k - 1], salience[k], salience[k + 1]
        denom = a - 2 * b + c
        if denom < 0:
            shift = float(np.clip(0.5 * (a - c) / denom, -0.5, 0.5))
    return (lags[k] + shift) * BIN_S


def _comb_phase(f: np.ndarray, period_s: float) -> float:
    """Offset in seconds from the grid origin, in [0, period), maximising the onset function summed on a comb."""
    p = period_s / BIN_S
    n_phase = max(int(np.ceil(p)), 1)
    teeth = np.arange(int(len(f) / p) + 1) * p
    idx = np.rint(np.arange(n_phase)[:, None] + teeth[None, :]).astype(np.int64)
    valid = idx < len(f)
    sums = np.where(valid, f[np.minimum(idx, len(f) - 1)], 0.0).sum(axis=1)
    return float(np.argmax(sums)) * BIN_S


def _refit_grid(times_s: np.ndarray, weights: np.ndarray, anchor_s: float, period_s: float) -> tuple[float, float]:
    """Weighted least-squares refit of one global grid ``anchor + k * period`` to the events near its points."""
    for _ in range(2):
        k = np.rint((times_s - anchor_s) / period_s)
        resid = times_s - (anchor_s + k * period_s)
        near = np.abs(resid) < FIT_WINDOW * period_s
        if len(np.unique(k[near])) < 4:
            break
        x, y, w = k[near], times_s[near], weights[near]
        xm, ym = np.average(x, weights=w), np.average(y, weights=w)
        sxx = np.average((x - xm) ** 2, weights=w)
        if sxx <= 0:
            break
        slope = np.average((x - xm) * (y - ym), weights=w) / sxx
        if not (0.8 * period_s < slope < 1.25 * period_s):
            break
        period_s, anchor_s = float(slope), float(ym - slope * xm)
    return anchor_s, period_s


def _grid_strength(times_s: np.ndarray, weights: np.ndarray, grid_s: np.ndarray, step_s: float) -> np.ndarray:
    """Summed weight of the events within the downbeat window of each grid point."""
    half = min(DOWNBEAT_WINDOW * step_s, DOWNBEAT_WINDOW_MAX_S)
    lo = np.searchsorted(times_s, grid_s - half, side="left")
    hi = np.searchsorted(times_s, grid_s + half, side="right")
    cum = np.concatenate([[0.0], np.cumsum(weights)])
    return cum[hi] - cum[lo]


def _metre_scores(acf: np.ndarray, beat_s: float, span_s: float) -> dict[str, float]:
    """Score of each reading: standardised bar evidence, minus a long-bar penalty, plus division evidence.

    The autocorrelation at 1..8 beats (those within ``MAX_LAG_FRACTION`` of
    the span) is fitted by a straight line in the lag, since drift and a
    finite length make it fall; a reading's bar evidence is its bar lag's
    residual from that line, in units of the residuals' SD (floored). A bar
    too long for the piece to show gets no evidence, only its penalty. The
    division evidence ``(A(beat/2) - A(beat/3)) / (A(beat/2) + A(beat/3))``
    is added to simple readings and taken from compound ones.
    """
    half = LAG_WINDOW * beat_s
    max_lag = MAX_LAG_FRACTION * span_s
    j = np.arange(1, 9, dtype=float)
    j = j[j * beat_s <= max_lag] if np.sum(j * beat_s <= max_lag) >= 3 else j[:3]
    whole = np.array([_acf_at(acf, k * beat_s, half) for k in j])
    slope, intercept = np.polyfit(j, whole, 1)
    spread = max(float(np.std(whole - (intercept + slope * j))), BAR_SPREAD_FLOOR)
    # Narrower for the subdivisions: beat/3 lies only beat/12 from a sixteenth.
    a2, a3 = (_acf_at(acf, beat_s / d, TATUM_WINDOW * beat_s) for d in (2, 3))
    division = (a2 - a3 + SIMPLE_TIE_BONUS) / (a2 + a3 + SIMPLE_TIE_BONUS)
    scores = {}
    for sig, (bar_beats, d, _, _) in READINGS.items():
        evidence = 0.0
        if bar_beats * beat_s <= max_lag:
            evidence = (_acf_at(acf, bar_beats * beat_s, half) - (intercept + slope * bar_beats)) / spread
        bar = evidence - SHORT_BAR_PREFERENCE * np.log2(bar_beats)
        scores[sig] = float(bar + DIVISION_WEIGHT * (division if d == 2 else -division))
    return scores


def analyse_baseline(notes: NoteTable) -> dict:
    """Propose a metre by accent-weighted autocorrelation (Brown 1993; Toiviainen & Eerola 2006).

    Parameters
    ----------
    notes : NoteTable
        The notes of one piece, in seconds.

    Returns
    -------
    dict
        ``time_signature`` (str), ``beats_per_bar`` (int), ``beat_division``
        (2, 3 or None), ``grouping`` (None or list of tatums),
        ``bar_s``, ``beat_s`` (float), ``downbeats_s``, ``beats_s``
        (np.ndarray), ``confidence`` (0..1), ``alternatives`` (all nine time
        signatures, best first), ``hypermeasure_bars`` (always None), and
        ``scores`` (time signature -> score, for inspection).

    Raises
    ------
    InputError
        Fewer than 8 events after merging, or too short a span.

    Examples
    --------
    >>> from metertop.load import notes_from_onsets
    >>> t = np.arange(48) * 0.5
    >>> w = np.where(np.arange(48) % 3 == 0, 3.0, 1.0)
    >>> r = analyse_baseline(notes_from_onsets(t, weights=w))
    >>> r["time_signature"], round(r["beat_s"], 2)
    ('3/4', 0.5)
    """
    events = merge_events(notes, MERGE_WINDOW_S)
    if len(events) < MIN_EVENTS:
        raise InputError(f"the baseline needs at least {MIN_EVENTS} events, got {len(events)}")
    times = events.times_s
    weights = accent_weights(events)

    pad = 4 * BUMP_SD_S
    origin = times[0] - pad
    span = times[-1] - times[0]
    n_bins = int(np.ceil((span + 2 * pad) / BIN_S)) + 1
    f = _onset_function(times, weights, origin, n_bins)
    length = (span + np.median(np.diff(times))) / BIN_S
    acf = _autocorrelation(f, length)
    pulse = _autocorrelation(_onset_function(times, 1.0 + weights, origin, n_bins), length)

    beat = _beat_period(pulse, span)
    if beat is None:
        beat = float(np.median(np.diff(times)))
    anchor = origin + _comb_phase(f, beat)
    anchor, beat = _refit_grid(times, weights, anchor, beat)

    scores = _metre_scores(acf, beat, span)
    ranked = sorted(scores, key=lambda s: (-scores[s], list(READINGS).index(s)))
    best = ranked[0]
    bar_beats, division, beats_per_bar, grouping = READINGS[best]
    vals = np.array([scores[s] for s in ranked])
    soft = np.exp((vals - vals.max()) / SOFTMAX_TEMPERATURE)
    confidence = float(soft[0] / soft.sum())

    # The grid: beats, or eighths for the uneven 7/8 bar; it spans the events
    # and any beat that falls while the last note still sounds.
    step = beat / division if grouping is not None else beat
    per_bar = sum(grouping) if grouping is not None else beats_per_bar
    last_dur = events.duration_s[-1]
    end = times[-1] + 0.2 * step
    if np.isfinite(last_dur):
        end = max(end, times[-1] + last_dur - 0.25 * step)
    k0 = int(np.ceil((times[0] - anchor) / step - 0.2))
    k1 = int(np.floor((end - anchor) / step))
    k = np.arange(k0, max(k1, k0) + 1)
    grid = anchor + k * step
    strength = _grid_strength(times, weights, grid, step)
    means = [strength[(k - k0) % per_bar == o].mean() if np.any((k - k0) % per_bar == o) else -1.0 for o in range(per_bar)]
    offset = int(np.argmax(means))
    pos = (k - k0 - offset) % per_bar
    downbeats = grid[pos == 0]
    if grouping is not None:
        starts = np.concatenate([[0], np.cumsum(grouping)[:-1]])
        beats = grid[np.isin(pos, starts)]
    else:
        beats = grid

    return {
        "time_signature": best,
        "beats_per_bar": beats_per_bar,
        "beat_division": None if grouping is not None else division,
        "grouping": list(grouping) if grouping is not None else None,
        "bar_s": float(bar_beats * beat),
        "beat_s": float(beat),
        "downbeats_s": downbeats,
        "beats_s": beats,
        "confidence": confidence,
        "alternatives": ranked,
        "hypermeasure_bars": None,
        "scores": {s: float(scores[s]) for s in ranked},
    }
