"""Human-readable summaries of a result.

Conventions
-----------
Functions here return strings; they never print.
"""

from __future__ import annotations

from .result import MetreResult

__all__ = ["summary", "score_summary"]


def _label(time_signature: str, grouping) -> str:
    return f"{time_signature} ({'+'.join(map(str, grouping))})" if grouping else time_signature


def _tree_line(result: MetreResult) -> str:
    names = [lv.name for lv in result.levels]
    return " > ".join(names)


def summary(result: MetreResult, name: str | None = None) -> str:
    """A short text report: metre, tempo, the metric tree, first downbeat, alternatives.

    Examples
    --------
    >>> import numpy as np
    >>> from metertop import analyse, notes_from_onsets
    >>> t = np.arange(32) * 0.5
    >>> w = np.tile([3.0, 1.0, 1.0, 1.0], 8)
    >>> print(summary(analyse(notes_from_onsets(t, w))).splitlines()[0])
    time signature 4/4 at 120.0 bpm, confidence ...
    """
    lines = []
    head = f"time signature {result.time_signature} at {result.tempo_bpm:.1f} bpm, confidence {result.confidence:.2f}"
    if name:
        lines.append(name)
        head = "  " + head
    lines.append(head)
    indent = "  " if name else ""
    if result.grouping:
        lines.append(f"{indent}beats grouped {'+'.join(str(g) for g in result.grouping)} (in tatums)")
    lines.append(f"{indent}metric tree ({_tree_line(result)}):")
    for lv in result.levels:
        lines.append(f"{indent}  {lv.name:<13s} every {lv.period_s * 1000:8.1f} ms   first at {lv.phase_s:7.3f} s   "
                     f"score {lv.score:5.2f}   confidence {lv.confidence:.2f}")
    first = f"{result.downbeats_s[0]:.3f} s" if len(result.downbeats_s) else "none"
    lines.append(f"{indent}first downbeat {first}; {len(result.downbeats_s)} bars, {len(result.beats_s)} beats "
                 f"over {result.duration_s:.1f} s ({result.n_events} events)")
    notated = result.notated_time_signature
    chosen = result.extra.get("chosen")
    if chosen:
        lines.append(f"{indent}chosen: {chosen}" + (f" (the file says {notated})" if notated else ""))
    elif notated == result.time_signature:
        lines.append(f"{indent}the file's own time signature {notated} matches the proposal")
    elif notated == "4/4" and result.source == "midi":
        lines.append(f"{indent}the file says 4/4, but the playing points to {result.time_signature}; "
                     f"sequencers write 4/4 when nobody sets a time signature")
    elif notated:
        heard = "the notes point" if result.source == "score" else "the playing points"
        lines.append(f"{indent}the file says {notated}, but {heard} to {result.time_signature}")
    if len(result.segments) > 1:
        lines.append(f"{indent}the metre changes: " + "; ".join(
            f"{_label(s.time_signature, s.grouping)} from {s.start_s:.2f} s" for s in result.segments))
    alts = [f"{_label(a.time_signature, a.grouping)} ({a.probability:.2f}, downbeat {a.phase_s:.2f} s)" for a in result.alternatives[1:4]]
    if alts:
        lines.append(f"{indent}alternatives: " + "; ".join(alts))
    return "\n".join(lines)


def _quarters(x: float) -> str:
    return f"{x:g} quarter{'' if x == 1 else 's'}"


def score_summary(result: MetreResult, name: str | None = None) -> str:
    """:func:`summary` of a tune read from a score, with its bar, beat and pickup in quarters.

    ``result`` carries the score keys of :func:`metertop.scores.analyse_tune`.
    """
    extra = result.extra
    tempo = (f"seconds at the score's tempo (quarter = {extra['quarter_bpm']:g})" if extra["tempo_stated"]
             else f"the score states no tempo; seconds at quarter = {extra['quarter_bpm']:g}")
    tune = f"tune {extra['tune']}" + (f": {extra['title']}" if extra["title"] else "")
    lines = summary(result, name=f"{name} - {tune}" if name else tune).splitlines()
    indent = "  "
    pickup = extra["pickup_quarters"]
    lines.insert(2, f"{indent}in score time: bar {_quarters(extra['bar_quarters'])}, beat {_quarters(extra['beat_quarters'])}, "
                    + (f"first downbeat {_quarters(pickup)} after the first note" if pickup else "first note on a downbeat")
                    + f"; {tempo}")
    return "\n".join(lines)
