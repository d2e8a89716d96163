"""Render score tunes as performances: deadpan, and played with drift, jitter and accents.

Conventions
-----------
- Score time in quarter notes, performance time in seconds.
- The *beat* of each metre follows DESIGN.md section 6: quarters in 2/4, 3/4,
  4/4 and 5/4; halves in 2/2, 3/2 and 4/2; dotted quarters in 3/8, 6/8, 9/8
  and 12/8; dotted halves in 6/4; 2+2+3 eighths in 7/8.
- Deadpan: the beat at 100 bpm, velocity 72, no timing noise.
- Played (DESIGN.md, Evaluation): a nominal beat tempo drawn from 80-120 bpm;
  a smooth tempo drift with a standard deviation of 4% and a correlation
  length of about 8 beats; onset jitter of 15 ms SD (skilled players sit at
  about 10-15 ms, from memory: Madison 2001; Repp 2005); velocity 72 plus at
  most 10 on downbeats, under noise of SD 8.
- Played-flat: the same timing with every velocity 72, so that loudness alone
  cannot give the answer.
- Ground-truth beats and downbeats are the score positions through the tempo
  curve, before jitter.
"""

from __future__ import annotations

import numpy as np

from common import METRES, Performance, ScoreTune

DEADPAN_BPM = 100.0
BASE_VELOCITY = 72


def beat_offsets_q(time_signature: str) -> np.ndarray:
    """Beat starts within one bar, in quarters from the downbeat.

    >>> beat_offsets_q("6/8").tolist(), beat_offsets_q("7/8").tolist()
    ([0.0, 1.5], [0.0, 1.0, 2.0])
    """
    beats, _, bar_q, _, grouping = METRES[time_signature]
    if grouping is not None:
        return np.concatenate([[0.0], np.cumsum(grouping)[:-1] * 0.5])
    return np.arange(beats) * bar_q / beats


def beat_q(time_signature: str) -> float:
    """Length of the (median) beat in quarters."""
    offs = beat_offsets_q(time_signature)
    lengths = np.diff(np.concatenate([offs, [METRES[time_signature][2]]]))
    return float(np.median(lengths))


def _grid_q(tune: ScoreTune) -> tuple[np.ndarray, np.ndarray]:
    """Every downbeat and beat position (quarters) from the first note to the last onset."""
    bar_q = tune.bar_q
    last = float(tune.onsets_q[-1])
    first_bar = tune.downbeats_q[0] if len(tune.downbeats_q) else tune.pickup_q
    starts = first_bar + bar_q * np.arange(-int(np.ceil(first_bar / bar_q)) - 1, int(np.ceil((last - first_bar) / bar_q)) + 2)
    eps = 1e-6
    downbeats = starts[(starts >= -eps) & (starts <= last + eps)]
    beats = (starts[:, None] + beat_offsets_q(tune.time_signature)[None, :]).ravel()
    beats = np.sort(beats[(beats >= -eps) & (beats <= last + eps)])
    return downbeats, beats


def _tempo_curve(rng: np.random.Generator, n_beats: int, sd: float = 0.04, corr_beats: float = 8.0) -> np.ndarray:
    """Log-tempo deviation per beat: a random walk smoothed over ``corr_beats``, scaled to SD ``sd``."""
    n = n_beats + 64
    walk = np.cumsum(rng.normal(0, 1, n))
    x = np.arange(-int(3 * corr_beats), int(3 * corr_beats) + 1)
    kernel = np.exp(-0.5 * (x / corr_beats) ** 2)
    smooth = np.convolve(walk, kernel / kernel.sum(), mode="same")[32:32 + n_beats]
    smooth -= smooth.mean()
    s = smooth.std()
    return smooth * (sd / s) if s > 0 else smooth


def render(tune: ScoreTune, kind: str, seed: int) -> Performance:
    """Render a tune as ``deadpan``, ``played`` or ``played-flat`` (same timing as ``played``)."""
    rng = np.random.default_rng(seed)
    bq = beat_q(tune.time_signature)
    downbeats_q, beats_q = _grid_q(tune)
    if kind == "deadpan":
        sec_per_q = 60.0 / DEADPAN_BPM / bq
        to_s = lambda q: np.asarray(q, float) * sec_per_q  # noqa: E731
        jitter = np.zeros(len(tune.onsets_q))
        velocities = np.full(len(tune.onsets_q), float(BASE_VELOCITY))
    elif kind in ("played", "played-flat"):
        bpm = rng.uniform(80.0, 120.0)
        total_q = float(tune.onsets_q[-1] + tune.durations_q[-1]) + tune.bar_q
        n_beats = int(np.ceil(total_q / bq)) + 2
        dev = _tempo_curve(rng, n_beats)
        beat_len = 60.0 / bpm * np.exp(dev)  # seconds per beat, per beat index
        knots_s = np.concatenate([[0.0], np.cumsum(beat_len)])
        knots_q = np.arange(len(knots_s)) * bq
        to_s = lambda q: np.interp(np.asarray(q, float), knots_q, knots_s)  # noqa: E731
        jitter = rng.normal(0, 0.015, len(tune.onsets_q))
        on_downbeat = np.isin(np.round(tune.onsets_q, 6), np.round(downbeats_q, 6))
        accent = np.where(on_downbeat, rng.uniform(0, 10, len(tune.onsets_q)), 0.0)
        velocities = np.clip(BASE_VELOCITY + accent + rng.normal(0, 8, len(tune.onsets_q)), 1, 127)
        if kind == "played-flat":
            velocities = np.full(len(tune.onsets_q), float(BASE_VELOCITY))
    else:
        raise ValueError(f"unknown rendering {kind!r}")
    lead = 0.5  # seconds before the first note, so that jitter stays positive
    onsets = to_s(tune.onsets_q) + jitter + lead
    ends = to_s(tune.onsets_q + tune.durations_q) + lead
    durations = np.maximum((ends - onsets) * 0.9, 0.02)
    db_s, beats_s = to_s(downbeats_q) + lead, to_s(beats_q) + lead
    bar_s = float(np.median(np.diff(db_s))) if len(db_s) > 1 else float(to_s(tune.bar_q))
    beat_s = float(np.median(np.diff(beats_s))) if len(beats_s) > 1 else float(to_s(bq))
    return Performance(
        piece_id=tune.tune_id, kind=kind, time_signature=tune.time_signature,
        onsets_s=onsets, durations_s=durations, pitches=np.asarray(tune.pitches, np.int64),
        velocities=velocities, is_drum=np.zeros(len(onsets), bool),
        downbeats_s=db_s, beats_s=beats_s, bar_s=bar_s, beat_s=beat_s,
        extra={"split": "eval", "source_file": tune.source_file},
    )
