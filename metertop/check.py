"""Check a notated time signature against the playing.

Conventions
-----------
- The notated metre's *reading* is the best-scored reading of its shape
  (:mod:`metertop.notation`) among the readings the metric tree scored
  (:mod:`metertop.tree`): the same persistence features and the same model
  (:mod:`metertop.model`) as the proposal, at the phase and tempo level that
  fit the playing best. Its score is set beside the best reading's.
- Evidence is counted in *log-odds*: ``(best score - notated score) / T``
  with ``T`` the model's softmax temperature, so it is the natural log of how
  many times more probable the model finds the best reading. It does not
  depend on the scale of the model's weights.
- Verdicts:

  ``consistent``
      the notated reading is the best one, or within ``tie`` log-odds of it;
  ``ambiguous``
      the best reading is a close relative of the notated one (the bar
      doubled or halved, as 2/4 and 4/4; or the same bar grouped otherwise,
      as 3/4 and 6/8) and ahead by at most ``close``, or another reading is
      ahead by at most ``other``: the evidence cannot tell them apart;
  ``inconsistent``
      another reading is ahead by more.

  ``close`` and ``other`` were set on the training files of the development
  corpus and on training grooves (``bench/check_bench.py --calibrate``: the
  pair with the best worst case of accepting true metres and rejecting wrong
  ones over deadpan tunes, played tunes and grooves, on a grid of ``close``
  4-16 and ``other`` 0.25-1). ``other`` came out at ``tie``: only close
  relatives are ever ambiguous. ``close`` came out at 6 (about 400 times as
  likely; it was 4, set by hand, until the kit-repetition features made the
  model surer of grooves): strong evidence makes even a close relative
  inconsistent.
- A notated bar *disagrees* when its bar line falls where the playing has no
  downbeat (none within ``tolerance_s``): the playing's downbeats are the
  result's, which follow its segments when the metre changes.
- Bars are numbered from the first full notated bar (bar 1); a pickup before
  it is bar 0.
- Exit codes of ``metertop check``: 0 consistent, 1 inconsistent,
  3 ambiguous (2 is bad input).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import InputError
from .notation import NotatedMetre, notated_metre, parse_time_signature, relation
from .result import _AsDict

__all__ = ["Verdict", "ReadingScore", "Bar", "CheckLimits", "LIMITS", "CheckReport", "check_notated", "check_file", "file_grid_share",
           "parse_time_signature", "EXIT_CODES"]

EXIT_CODES = {"consistent": 0, "inconsistent": 1, "ambiguous": 3}


@dataclass(frozen=True)
class CheckLimits:
    """Log-odds limits of the verdicts (see the module notes)."""

    tie: float = 0.25
    close: float = 6.0
    other: float = 0.25
    tolerance_s: float = 0.07


LIMITS = CheckLimits()


@dataclass(frozen=True)
class ReadingScore(_AsDict):
    """A reading as the check reports it.

    ``score`` is the model's score, ``probability`` its softmax probability
    among every reading scored, ``log_odds`` how far it trails the best
    reading (0 for the best).
    """

    time_signature: str
    grouping: list[int] | None
    bar_s: float
    first_downbeat_s: float
    score: float
    probability: float
    log_odds: float


@dataclass(frozen=True)
class Bar(_AsDict):
    """A notated bar: its number and span in seconds."""

    bar: int
    start_s: float
    end_s: float


@dataclass(frozen=True)
class Verdict(_AsDict):
    """The outcome of checking a notated time signature.

    Attributes
    ----------
    verdict : str
        ``consistent``, ``inconsistent`` or ``ambiguous``.
    exit_code : int
        0, 1 or 3 (see the module notes).
    time_signature : str
        The notated time signature, normalised.
    notated_from : str
        ``given`` or ``file`` (the file's own time-signature events).
    notated, best : ReadingScore
        The notated metre's best reading, and the best reading of all.
    relation : str
        How the best reading relates to the notated one: ``same``,
        ``nested``, ``regrouped`` or ``other`` (:func:`metertop.notation.relation`).
    n_bars : int
        Notated bars over the piece.
    disagreeing_bars : list of Bar
        Notated bars whose bar line falls where the playing has no downbeat.
    suggestion : str or None
        A correction in words, or None when consistent.
    message : str
        The verdict in one line of plain words.
    notes : list of str
        Further remarks in plain words (the sequencer's default 4/4, metre
        changes).
    """

    verdict: str
    exit_code: int
    time_signature: str
    notated_from: str
    notated: ReadingScore
    best: ReadingScore
    relation: str
    n_bars: int
    disagreeing_bars: list[Bar]
    suggestion: str | None
    message: str
    notes: list[str] = field(default_factory=list)


def _label(time_signature: str, grouping) -> str:
    return f"{time_signature} ({'+'.join(map(str, grouping))})" if grouping else time_signature


def _reading_score(analysis, index: int, best_score: float, temperature: float) -> ReadingScore:
    from .pipeline import _first_at

    tree, pulse = analysis.tree, analysis.pulse
    cand = tree.candidates[index]
    from_pulses = float(pulse.warp([analysis.times_s[0] - 0.05])[0])
    return ReadingScore(
        time_signature=cand.time_signature,
        grouping=list(cand.grouping) if cand.grouping else None,
        bar_s=float(cand.bar) * pulse.median_period_s,
        first_downbeat_s=_first_at(pulse, cand.downbeat_pulses, float(cand.bar), from_pulses),
        score=float(cand.score),
        probability=float(tree.probabilities[index]),
        log_odds=float((best_score - cand.score) / temperature),
    )


def _decide(log_odds: float, rel: str, limits: CheckLimits) -> str:
    if rel == "same" or log_odds <= limits.tie:
        return "consistent"
    if log_odds <= (limits.close if rel in ("nested", "regrouped") else limits.other):
        return "ambiguous"
    return "inconsistent"


def _notated_bars(analysis, index: int) -> np.ndarray:
    """Bar lines (s) of the notated reading over the piece, one before the first onset if it has a pickup."""
    from .pipeline import _grid_times

    cand = analysis.tree.candidates[index]
    t0, t1 = float(analysis.times_s[0]), float(analysis.times_s[-1])
    bar_p = float(cand.bar)
    lines = _grid_times(analysis.pulse, cand.downbeat_pulses, np.array([0.0]), bar_p, t0 - 2 * bar_p * analysis.pulse.median_period_s,
                        t1 + 2 * bar_p * analysis.pulse.median_period_s, 0.0)
    return lines


def _disagreeing(lines: np.ndarray, downbeats: np.ndarray, t0: float, t1: float, tol: float) -> tuple[list[Bar], int]:
    """Notated bars over the piece whose bar line has no detected downbeat within ``tol``; and the number of bars."""
    first = int(np.searchsorted(lines, t0 - tol))  # bar 1: the first bar line at or after the first onset
    bars, n = [], 0
    for k in range(max(first - 1, 0), len(lines) - 1):
        start, end = float(lines[k]), float(lines[k + 1])
        if end <= t0 + tol or start > t1 + tol:
            continue
        n += 1
        number = k - first + 1
        if start < t0 - tol:
            continue  # a pickup's bar line lies before the playing: nothing to compare
        near = np.min(np.abs(downbeats - start)) if len(downbeats) else np.inf
        if near > tol:
            bars.append(Bar(number, start, end))
    return bars, n


def check_notated(analysis, time_signature: str, *, notated_from: str = "given", limits: CheckLimits = LIMITS) -> "Verdict":
    """Check a notated time signature against the analysed playing.

    Parameters
    ----------
    analysis : metertop.pipeline.Analysis
        What :func:`metertop.pipeline.analyse_detailed` returns.
    time_signature : str
        The notated metre, e.g. ``"3/4"``, ``"7/8"`` or ``"2+2+3/8"``.
    notated_from : {"given", "file"}
        Where the time signature comes from (for the wording).
    limits : CheckLimits

    Returns
    -------
    Verdict

    Raises
    ------
    InputError
        For a time signature that is not one, or one metertop cannot read.

    Examples
    --------
    >>> import numpy as np
    >>> from metertop import analyse_detailed, notes_from_onsets
    >>> t = 0.5 + np.arange(48) * 0.5                      # a quarter every 0.5 s
    >>> w = np.tile([3.0, 1.0, 1.0], 16)                   # the first of every three is loud
    >>> a = analyse_detailed(notes_from_onsets(t, w))
    >>> check_notated(a, "3/4").verdict, check_notated(a, "4/4").verdict
    ('consistent', 'inconsistent')
    >>> check_notated(a, "4/4").exit_code
    1
    """
    metre = notated_metre(time_signature)
    tree = analysis.tree
    temperature = _temperature(analysis)
    index = next((k for k, c in enumerate(tree.candidates) if metre.matches(c.beats_per_bar, c.division, c.grouping)), None)
    best = tree.candidates[0]
    best_rs = _reading_score(analysis, 0, best.score, temperature)
    if index is None:
        raise InputError(f"no reading in {metre.text} fits this piece: its bars would fall outside the tempo range or be too long for it")
    notated = _reading_score(analysis, index, best.score, temperature)
    rel = relation(metre, best.beats_per_bar, best.division, best.grouping)
    verdict = _decide(notated.log_odds, rel, limits)
    result = analysis.result
    t0, t1 = float(analysis.times_s[0]), float(analysis.times_s[-1])
    lines = _notated_bars(analysis, index)
    disagreeing, n_bars = _disagreeing(lines, np.asarray(result.downbeats_s), t0, t1, limits.tolerance_s)
    # Segments of the playing in another metre than the notated one (2/4 within 4/4 is the same metre).
    foreign = [seg for seg in result.segments
               if relation(metre, seg.beats_per_bar or 0, seg.beat_division, seg.grouping) not in ("same", "nested")] \
        if len(result.segments) > 1 else []
    if foreign and verdict == "consistent":
        verdict = "inconsistent"  # one notated metre, but the playing changes metre
    message, suggestion = _words(metre, verdict, rel, notated, best_rs, disagreeing, n_bars, result, foreign, lines, t0)
    return Verdict(verdict, EXIT_CODES[verdict], metre.text, notated_from, notated, best_rs, rel, n_bars, disagreeing, suggestion,
                   message, [])


def _temperature(analysis) -> float:
    settings = getattr(analysis, "settings", None)
    model = settings.tree.model if settings is not None else None
    if model is None:
        from .model import default_model

        model = default_model()
    return float(model.temperature)


def _bar_number(lines: np.ndarray, t: float, t0: float) -> int:
    """Number of the notated bar that holds time ``t`` (bar 1 starts on the first bar line at or after the first onset)."""
    first = int(np.searchsorted(lines, t0 - LIMITS.tolerance_s))
    return int(np.searchsorted(lines, t + LIMITS.tolerance_s, side="right")) - 1 - first + 1


def _segments_words(segments, lines: np.ndarray, t0: float) -> str:
    return "; ".join(f"{_label(s.time_signature, s.grouping)} from {s.start_s:.2f} s (bar {_bar_number(lines, s.start_s, t0)})"
                     for s in segments)


def _words(metre: NotatedMetre, verdict: str, rel: str, notated: ReadingScore, best: ReadingScore, disagreeing, n_bars, result,
           foreign, lines, t0):
    ts = metre.text
    best_label = _label(best.time_signature, best.grouping)
    scores = f"{ts} scores {notated.score:.2f}, the best reading {best_label} {best.score:.2f}"
    off = f"; {len(disagreeing)} of {n_bars} notated bar lines fall where the playing has no downbeat" if disagreeing else ""
    if verdict == "consistent":
        return f"the playing fits {ts} ({scores}){off}", None
    suggestion = f"{best_label}, first downbeat at {best.first_downbeat_s:.2f} s"
    if len(result.segments) > 1:
        suggestion = _segments_words(result.segments, lines, t0)
    if foreign and (rel in ("same", "nested") or notated.log_odds <= LIMITS.tie):
        where = "; ".join(f"{_label(f.time_signature, f.grouping)} from {f.start_s:.2f} s to {f.end_s:.2f} s "
                          f"(bars {_bar_number(lines, f.start_s, t0)}-{_bar_number(lines, f.end_s - 1e-3, t0)})" for f in foreign)
        return f"{ts} fits the playing except where it changes metre: {where}{off}", suggestion
    if verdict == "ambiguous":
        kind = {"nested": "the same beats with the bar doubled or halved", "regrouped": "the same bar grouped into other beats"}.get(
            rel, "the evidence is weak")
        return (f"{ts} and {best_label} are both plausible ({kind}): {scores}, {best_label} only {np.exp(notated.log_odds):.1f} times "
                f"as likely{off}"), suggestion
    return (f"the playing does not fit {ts}: {scores}; the model finds {best_label} {_times(notated.log_odds)} as likely{off}"), suggestion


def _times(log_odds: float) -> str:
    if log_odds >= np.log(1e6):
        return "over a million times"
    return f"{np.exp(log_odds):.1f} times" if log_odds < np.log(10) else f"{np.exp(log_odds):.0f} times"


@dataclass(frozen=True)
class CheckReport:
    """What :func:`check_file` found: the verdict, and the analysis it rests on."""

    verdict: Verdict
    result: object
    analysis: object


def file_grid_share(path, onsets_s) -> float | None:
    """Share of onsets on the file's own sixteenth-note grid (its tempo map), or None for a file that is no MIDI file.

    A note counts when it lies within an eighth of a sixteenth of a grid
    line, which a quarter of randomly placed notes would do by chance; notes
    recorded against the sequencer's click land there far more often.
    """
    import os

    from .load import MIDI_SUFFIXES, _open_midi

    path = os.fspath(path)
    with open(path, "rb") as fh:
        if fh.read(4) != b"MThd" and not path.lower().endswith(MIDI_SUFFIXES):
            return None
    pm = _open_midi(path)
    beats = np.asarray(pm.get_beats(), dtype=np.float64)
    t = np.asarray(onsets_s, dtype=np.float64)
    if len(beats) < 2 or len(t) == 0:
        return None
    # Position of each onset in sixteenths of the file's beat grid.
    idx = np.clip(np.searchsorted(beats, t, side="right") - 1, 0, len(beats) - 2)
    frac = (t - beats[idx]) / (beats[idx + 1] - beats[idx]) * 4.0
    off = np.abs(frac - np.round(frac))
    return float(np.mean(off <= 0.125))


def check_file(path, time_signature: str | None = None, *, tracks: list[int] | None = None, settings=None) -> CheckReport:
    """Analyse a file and check a time signature against it: the given one, or the file's own.

    Parameters
    ----------
    path : str or os.PathLike
        A MIDI file or an onset list.
    time_signature : str, optional
        The notated metre to check; by default the file's own
        time-signature events (MIDI files only).
    tracks : list of int, optional
        MIDI tracks to analyse; all by default.
    settings : metertop.pipeline.Settings, optional

    Raises
    ------
    InputError
        For bad input, a bad time signature, or neither a given time
        signature nor one in the file.
    """
    from .pipeline import Settings, analyse_detailed

    if time_signature is not None:
        notated_metre(time_signature)  # a bad time signature fails before the analysis
    analysis = analyse_detailed(path, tracks=tracks, settings=settings or Settings())
    notes = analysis.notes
    events = tuple(notes.time_signatures) if notes is not None else ()
    if time_signature is None:
        if not events:
            kind = "MIDI file" if notes is not None and notes.source == "midi" else "onset list"
            raise InputError(f"{path}: the {kind} carries no time signature of its own; give one to check, "
                             "e.g. --time-signature 3/4")
        names = [str(e) for e in events]
        if len(set(names)) > 1:
            verdict = _check_spans(analysis, events)
        else:
            verdict = check_notated(analysis, names[0], notated_from="file")
    else:
        verdict = check_notated(analysis, time_signature, notated_from="given")
    extra = _sequencer_notes(path, analysis, verdict, events, given=time_signature is not None)
    if extra:
        from dataclasses import replace

        verdict = replace(verdict, notes=list(verdict.notes) + extra)
    return CheckReport(verdict, analysis.result, analysis)


def _sequencer_notes(path, analysis, verdict: Verdict, events, given: bool) -> list[str]:
    """Plain words for a file whose 4/4 is only what a sequencer writes when nobody sets a time signature."""
    if given or not events or verdict.time_signature != "4/4" or len(events) != 1 or events[0].time_s > 1e-6:
        return []
    share = file_grid_share(path, analysis.notes.onsets_s) if analysis.notes is not None else None
    free = share is not None and share < 0.5
    if free:
        return [f"the notes do not follow the file's own beat grid (only {100 * share:.0f}% of them sit on its sixteenths, "
                f"about 25% would by chance): the playing was recorded freely, so the file's 4/4 and its tempo are most "
                f"likely the sequencer's defaults, written when nobody sets a time signature, and say nothing about the music"]
    if verdict.verdict != "consistent":
        return ["the file says 4/4, which is what sequencers write when nobody sets a time signature; it may not be meant"]
    return []


def _check_spans(analysis, events) -> Verdict:
    """A file whose time signature changes: each notated span against the segments of the playing it overlaps.

    The scores are those of the metre notated over most of the notes; the
    verdict is consistent when every segment of the playing agrees (same or
    nested metre) with the time signature notated over it, else
    inconsistent.
    """
    from dataclasses import replace

    t = analysis.times_s
    ends = [e.time_s for e in events[1:]] + [float(t[-1]) + 1.0]
    covered = {}
    for e, end in zip(events, ends):
        covered[str(e)] = covered.get(str(e), 0.0) + float(np.sum((t >= e.time_s) & (t < end)))
    main = max(covered, key=covered.get)
    verdict = check_notated(analysis, main, notated_from="file")
    wrong = []
    for e, end in zip(events, ends):
        metre = notated_metre(str(e))
        for seg in analysis.result.segments:
            overlap = min(seg.end_s, end) - max(seg.start_s, e.time_s)
            if overlap > 0.5 * (seg.bar_s or 0.0) and relation(metre, seg.beats_per_bar or 0, seg.beat_division, seg.grouping) \
                    not in ("same", "nested"):
                wrong.append(f"{e} from {max(seg.start_s, e.time_s):.2f} s to {min(seg.end_s, end):.2f} s, where the playing is in "
                             f"{_label(seg.time_signature, seg.grouping)}")
    listed = "; ".join(f"{e} from {e.time_s:.2f} s" for e in events)
    if wrong:
        return replace(verdict, verdict="inconsistent", exit_code=EXIT_CODES["inconsistent"],
                       message=f"the file's time signatures ({listed}) do not fit the playing: " + "; ".join(wrong),
                       suggestion=_segments_words(analysis.result.segments, _notated_bars(analysis, 0), float(t[0])))
    return replace(verdict, verdict="consistent", exit_code=0, suggestion=None,
                   message=f"the playing follows the file's time signatures ({listed})")
