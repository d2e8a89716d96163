"""Accent models: how much each event marks its place in the metre.

Conventions
-----------
Every accent function takes an :class:`~metertop.events.EventStream` and
returns a float64 array with one value per event in ``[0, 1]``.
:func:`event_weights` mixes them into the weights that the cycle scan wraps;
the weights are normalised to a mean of 1, so that only their ratios matter.

References
----------
- Parncutt, R. (1994). A perceptual model of pulse salience and metrical
  accent in musical rhythms. *Music Perception* 11(4), 409-464.
- Thomassen, J. M. (1982). Melodic accent: experiments and a tentative model.
  *JASA* 71(6), 1596-1605.
- Toiviainen, P. & Eerola, T. (2006). Autocorrelation in meter induction: the
  role of accent structure. *JASA* 119(2), 1164-1170.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .events import ROLE_CRASH, ROLE_KICK, ROLE_OTHER, ROLE_SNARE, ROLE_TIMEKEEPER, ROLE_TOM, EventStream

__all__ = ["AccentMix", "durational_accent", "melodic_accent", "dynamic_accent", "bass_accent", "role_accent", "event_weights"]


def durational_accent(events: EventStream, saturation_s: float = 0.5, index: float = 2.0) -> np.ndarray:
    """Durational accent of each event from the inter-onset interval after it.

    ``A = (1 - exp(-IOI / saturation_s)) ** index`` (Parncutt 1994, eq. for
    durational accent; saturation 0.5 s and accent index 2 are his values,
    from memory). The last event uses its note duration, or the median IOI.

    Examples
    --------
    >>> from metertop.events import merge_events
    >>> from metertop.load import notes_from_onsets
    >>> a = durational_accent(merge_events(notes_from_onsets([0, 1.0, 1.25, 1.5])))
    >>> bool(a[0] > a[1])
    True
    """
    t = events.times_s
    if len(t) == 0:
        return np.zeros(0)
    ioi = np.empty(len(t))
    ioi[:-1] = np.diff(t)
    last = events.duration_s[-1]
    ioi[-1] = last if np.isfinite(last) and last > 0 else (np.median(ioi[:-1]) if len(t) > 1 else saturation_s)
    return (1.0 - np.exp(-ioi / saturation_s)) ** index


# Thomassen's (1982) accent pair for the middle and last note of a
# three-note group, by the directions of its two intervals. The values are
# those of the MIDI Toolbox implementation used by Toiviainen & Eerola (2006),
# from memory.
_THOMASSEN = {
    (0, 0): (0.00001, 0.0),
    (1, 0): (1.0, 0.0),  # a leap then a repeat: accent on the pivot
    (-1, 0): (1.0, 0.0),
    (0, 1): (0.00001, 1.0),
    (0, -1): (0.00001, 1.0),
    (1, -1): (0.83, 0.17),  # a peak
    (-1, 1): (0.71, 0.29),  # a valley
    (1, 1): (0.33, 0.67),
    (-1, -1): (0.5, 0.5),
}


def melodic_accent(events: EventStream) -> np.ndarray:
    """Melodic accent of each event from the contour of its top voice.

    Each three-note window gives an accent to its middle and last notes
    (Thomassen 1982); a note's accent is the product of what it receives,
    scaled to a maximum of 1. Events without pitch get 0.5, as do
    melodies shorter than three notes.

    Examples
    --------
    >>> from metertop.events import EventStream
    >>> import numpy as np
    >>> n = 5
    >>> ev = EventStream(np.arange(n, dtype=float), np.ones(n, int), np.full(n, np.nan), np.full(n, np.nan),
    ...                  np.array([60, 64, 60, 62, 64]), np.full(n, -1), np.full(n, np.nan), np.zeros(n, int))
    >>> acc = melodic_accent(ev)
    >>> bool(acc[1] > acc[2])  # the peak of the contour outweighs the valley after it
    True
    """
    p = events.top_pitch.astype(np.float64)
    out = np.full(len(p), 0.5)
    voiced = np.flatnonzero(p >= 0)
    if len(voiced) < 3:
        return out
    q = p[voiced]
    direction = np.sign(np.diff(q)).astype(int)
    mid = np.ones(len(q))
    last = np.ones(len(q))
    for k in range(len(q) - 2):
        a_mid, a_last = _THOMASSEN[(direction[k], direction[k + 1])]
        mid[k + 1] *= a_mid
        last[k + 2] *= a_last
    # Each note receives up to two values, combined by product.
    acc = np.clip(mid, 0, None) * np.clip(last, 0, None)
    acc[0] = 1.0
    acc = acc / acc.max() if acc.max() > 0 else acc
    out[voiced] = acc
    return out


def dynamic_accent(events: EventStream) -> np.ndarray:
    """Loudness relative to the piece: a robust z-score of the velocity (or user weight), squashed to (0, 1).

    Players accent by a few velocity steps against a spread of similar size,
    so the velocity is compared with the piece's median and median absolute
    deviation rather than with the maximum. 0.5 where unknown.

    Examples
    --------
    >>> from metertop.events import merge_events
    >>> from metertop.load import NoteTable
    >>> import numpy as np
    >>> n = 6
    >>> notes = NoteTable(np.arange(n) * 0.5, np.full(n, 0.4), np.full(n, 60), np.array([90., 80, 80, 90, 80, 80]),
    ...                   np.full(n, np.nan), np.zeros(n, bool), np.zeros(n, int))
    >>> a = dynamic_accent(merge_events(notes))
    >>> bool(a[0] > a[1]), float(a[1])
    (True, 0.5)
    """
    v = np.where(np.isfinite(events.weight), events.weight, events.velocity)
    known = np.isfinite(v)
    if known.sum() < 2:
        return np.full(len(v), 0.5)
    top = np.max(np.abs(v[known]))
    if top > 0:
        v = v / top  # the z-score ignores scale; this keeps huge user weights from overflowing
    med = np.median(v[known])
    # The standard deviation stands in where most values are equal (MAD 0).
    scale = max(1.4826 * np.median(np.abs(v[known] - med)), np.std(v[known]), 1e-9)
    z = (v - med) / scale
    return np.where(known, 0.5 + 0.5 * np.tanh(z / 2), 0.5)


def bass_accent(events: EventStream) -> np.ndarray:
    """1 for events that sound a note in the lowest fifth of the piece's pitched range, else 0.

    A bass note tends to mark the beat and the downbeat (common practice).
    Events without pitched notes, and pieces with one voice, get 0.
    """
    out = np.zeros(len(events))
    pitched = events.bass_pitch >= 0
    if pitched.sum() < 2:
        return out
    lows, highs = events.bass_pitch[pitched], events.top_pitch[pitched]
    if np.all(lows == highs) and np.ptp(highs) < 12:
        return out  # a single melodic line has no separate bass
    cut = np.percentile(lows, 20)
    if cut >= np.median(highs) - 7:
        return out
    out[pitched] = (lows <= cut).astype(float)
    return out


# How strongly each drum role anchors the bar: kick and backbeat snare anchor
# it, cymbal crashes open phrases, hi-hat and ride keep time (common practice).
_ROLE_WEIGHT = {ROLE_KICK: 1.0, ROLE_SNARE: 0.7, ROLE_CRASH: 0.9, ROLE_TOM: 0.45, ROLE_TIMEKEEPER: 0.15, ROLE_OTHER: 0.3}


def role_accent(events: EventStream) -> np.ndarray:
    """Drum-role accent: half the sum of the role weights of an event's drum notes, at most 1; 0.5 for pitched-only events.

    Summing lets a crash on a kick (a phrase start) outweigh a kick alone.
    """
    out = np.zeros(len(events))
    for bit, w in _ROLE_WEIGHT.items():
        out += np.where(events.roles & bit, w, 0.0)
    return np.where(events.roles == 0, 0.5, np.minimum(0.5 * out, 1.0))


@dataclass(frozen=True)
class AccentMix:
    """Coefficients of the accent mix; the weight is ``base + sum(coef * accent)``."""

    base: float = 0.3
    durational: float = 1.0
    melodic: float = 0.4
    dynamic: float = 0.8
    role: float = 1.0
    chord: float = 0.15
    bass: float = 0.4


def event_weights(events: EventStream, mix: AccentMix = AccentMix()) -> np.ndarray:
    """Mix the accent models into one weight per event, mean 1.

    Examples
    --------
    >>> from metertop.events import merge_events
    >>> from metertop.load import notes_from_onsets
    >>> w = event_weights(merge_events(notes_from_onsets([0.0, 0.5, 1.0, 2.0])))
    >>> round(float(w.mean()), 6)
    1.0
    """
    if len(events) == 0:
        return np.zeros(0)
    chord = np.minimum(events.n_notes - 1, 3) / 3.0
    w = (
        mix.base
        + mix.durational * durational_accent(events)
        + mix.melodic * melodic_accent(events)
        + mix.dynamic * dynamic_accent(events)
        + (mix.role * role_accent(events) if events.has_drums else 0.0)
        + mix.chord * chord
        + mix.bass * bass_accent(events)
    )
    return w / w.mean()
