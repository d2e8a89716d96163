"""Pictures of an analysis: the cycle scan, the persistence at bar length, the phase circles and the onset strip.

Conventions
-----------
- matplotlib is the optional extra ``metertop[plot]``. It is imported only
  inside the functions here, when a picture is asked for; importing this
  module, or :mod:`metertop`, does not load it. Without it,
  :func:`require_matplotlib` raises a :class:`~metertop.errors.MetertopError`
  that says how to install it.
- Figures are :class:`matplotlib.figure.Figure` objects on an Agg canvas,
  never pyplot: no display is needed and the caller's pyplot backend is left
  alone.
- Times and cycle lengths are seconds. Phases on the circles are measured in
  pulse time (:mod:`metertop.tempo`), where the drift is removed, from the
  proposed first downbeat.
- Colours are the Okabe-Ito palette, distinguishable with the common forms
  of colour blindness (Okabe & Ito, "Color Universal Design", 2008,
  https://jfly.uni-koeln.de/color/). Each level of the metric tree keeps one
  colour in every panel.
- The artists that carry data have a ``gid`` (``scan-pulse``,
  ``scan-lattice``, ``bar-density``, ``bar-persistence``, ``circle-beat``,
  ``circle-bar``, ``strip-notes``, ``strip-drums``, ``strip-onsets``,
  ``grid-beats``, ``grid-downbeats``, ``notated-beats``,
  ``notated-downbeats``), so that tests and scripts can find them.

The four panels of :func:`analysis_figure`:

1. **Cycle-length scan**: the pulse salience in seconds (mean over the
   tempo windows) and the dominance of the top peak at every length of the
   cycle lattice, against cycle length on a log axis; the chosen levels are
   marked.
2. **Persistence at bar length**: the wrapped density over one bar, from
   the proposed downbeat, with each peak's persistence bar (birth to death
   in its merge tree); the downbeat and its strongest rival, whose
   difference is the bar's margin, are highlighted, and the reading's
   largest model terms are written out.
3. **Onsets wrapped onto circles** at beat length (inner ring) and bar
   length (outer ring); time runs outward, marker size is the accent, the
   downbeat points up.
4. **Onset strip**: a drum grid (one row per General MIDI instrument), a
   piano roll, or a row of onsets, with the proposed beat and bar lines,
   and a notated grid beside them when one is given (:class:`NotatedGrid`).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

import numpy as np

from .errors import MetertopError, OutputError
from .outputs import atomic_path, check_target

__all__ = [
    "PALETTE", "LEVEL_COLOURS", "FORMATS", "NotatedGrid", "require_matplotlib", "plot_target",
    "analysis_figure", "draw_scan", "draw_bar_persistence", "draw_phase_circles", "draw_onset_strip", "save_figure",
]

INSTALL_HINT = "plots need matplotlib: pip install 'metertop[plot]'"

# Okabe & Ito (2008), the eight colours of "Color Universal Design".
PALETTE = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
LEVEL_COLOURS = {
    "subdivision": PALETTE["sky_blue"], "beat": PALETTE["blue"], "bar": PALETTE["vermillion"],
    "hypermeasure": PALETTE["reddish_purple"],
}
NOTATED_COLOUR = PALETTE["bluish_green"]
DATA_COLOUR = "#333333"
FORMATS = (".png", ".svg", ".pdf")

# 8 x 9 inches at 150 dpi: 1200 x 1350 pixels, legible at a page's width.
FIGSIZE_IN = (8.0, 9.0)
DPI = 150
_RC = {"font.size": 8.5, "axes.titlesize": 9.0, "axes.labelsize": 8.5, "legend.fontsize": 7.5,
       "xtick.labelsize": 7.5, "ytick.labelsize": 7.5, "axes.titlelocation": "left"}


@dataclass(frozen=True)
class NotatedGrid:
    """A notated bar grid to draw beside the proposed one (panel 4).

    Attributes
    ----------
    downbeats_s, beats_s : array_like of float
        Notated downbeat and beat times in seconds.
    label : str
        How the legend names it, e.g. ``"notated 4/4"``.
    """

    downbeats_s: np.ndarray
    beats_s: np.ndarray = ()
    label: str = "notated"


def require_matplotlib():
    """Import matplotlib and return it, or raise a one-line error that says how to install it."""
    try:
        import matplotlib
        import matplotlib.figure  # noqa: F401
        from matplotlib.backends import backend_agg  # noqa: F401
    except ImportError:
        raise MetertopError(INSTALL_HINT) from None
    return matplotlib


def plot_target(path: str | os.PathLike, *, inputs: Iterable[str | os.PathLike] = (), force: bool = False) -> Path:
    """Check that a figure may be written to ``path`` (a known format, not an input, not existing unless ``force``).

    >>> plot_target("figure.gif")
    Traceback (most recent call last):
    ...
    metertop.errors.OutputError: figure.gif: unknown figure format '.gif'; use .png, .svg or .pdf
    """
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise OutputError(f"{path}: unknown figure format '{suffix}'; use .png, .svg or .pdf")
    return check_target(path, inputs=inputs, force=force)


def save_figure(fig, path: str | os.PathLike, *, inputs: Iterable[str | os.PathLike] = (), force: bool = False) -> Path:
    """Write ``fig`` to ``path`` (format from the suffix), refusing to overwrite unless ``force``; atomic."""
    target = plot_target(path, inputs=inputs, force=force)
    with atomic_path(target) as tmp:
        fig.savefig(tmp, format=target.suffix.lower()[1:], dpi=fig.dpi, facecolor="white")
    return target


def analysis_figure(analysis, *, title: str | None = None, notated: NotatedGrid | None = None, max_bars: int = 8):
    """The four-panel figure of an :class:`~metertop.pipeline.Analysis`.

    Parameters
    ----------
    analysis : metertop.pipeline.Analysis
        From :func:`metertop.analyse_detailed`.
    title : str, optional
        Usually the file name; the proposed metre and tempo are appended.
    notated : NotatedGrid, optional
        A notated grid to draw beside the proposed lines in the onset strip.
    max_bars : int
        The onset strip shows the first ``max_bars`` bars, so that its notes
        stay legible.

    Returns
    -------
    matplotlib.figure.Figure
        With an Agg canvas; ``fig.axes`` are the four panels in order.
    """
    matplotlib = require_matplotlib()
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=FIGSIZE_IN, dpi=DPI, layout="constrained", facecolor="white")
        FigureCanvasAgg(fig)
        gs = fig.add_gridspec(3, 2, height_ratios=[0.9, 1.3, 1.0], width_ratios=[1.2, 1.0])
        draw_scan(fig.add_subplot(gs[0, :]), analysis)
        draw_bar_persistence(fig.add_subplot(gs[1, 0]), analysis)
        draw_phase_circles(fig.add_subplot(gs[1, 1], projection="polar"), analysis)
        draw_onset_strip(fig.add_subplot(gs[2, :]), analysis, notated=notated, max_bars=max_bars)
        fig.suptitle(_headline(analysis.result, title), fontsize=10.5, fontweight="bold", x=0.01, ha="left")
    return fig


def _metre_label(result) -> str:
    ts = result.time_signature
    return f"{ts} ({'+'.join(map(str, result.grouping))})" if result.grouping else ts


def _headline(result, title: str | None) -> str:
    head = f"{_metre_label(result)} at {result.tempo_bpm:.1f} bpm (confidence {result.confidence:.2f})"
    if result.notated_time_signature and result.notated_time_signature != result.time_signature:
        head += f"; the file says {result.notated_time_signature}"
    return f"{title}: {head}" if title else head


def _seconds_ticks(ax, lo: float, hi: float) -> None:
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

    ticks = [v for v in (0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50) if lo <= v <= hi]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())


def draw_scan(ax, analysis) -> None:
    """Panel 1: score against cycle length (log axis, seconds), chosen levels marked."""
    pulse, tree, result = analysis.pulse, analysis.tree, analysis.result
    pulse_s = pulse.median_period_s
    sal = np.asarray(pulse.salience, dtype=float)
    curve = sal.mean(axis=0) if sal.size else np.zeros(len(pulse.candidates_s))
    top = float(curve.max()) if curve.size and curve.max() > 0 else 1.0
    ax.plot(pulse.candidates_s, curve / top, color=DATA_COLOUR, lw=1.2, gid="scan-pulse",
            label="pulse search, in seconds: salience, mean over the tempo windows (1 = highest)")
    lengths = np.array(sorted(float(k) for k in tree.cycles)) * pulse_s
    dominance = np.array([tree.cycles[k].dominance for k in sorted(tree.cycles)])
    ax.vlines(lengths, 0, dominance, color=PALETTE["orange"], lw=1.5, gid="scan-lattice")
    ax.plot(lengths, dominance, "o", color=PALETTE["orange"], ms=4,
            label="bar search, in pulse time: dominance of the top peak, (p1 - p2) / p1")
    lo = min(float(pulse.candidates_s[0]), float(lengths.min()) if lengths.size else 1.0) / 1.15
    hi = max(float(pulse.candidates_s[-1]), float(lengths.max()) if lengths.size else 1.0) * 1.15
    for i, level in enumerate(result.levels):
        colour = LEVEL_COLOURS.get(level.name, DATA_COLOUR)
        ax.axvline(level.period_s, color=colour, ls="--", lw=1.3)
        # Labels in the right quarter of the axis go left of their line, to stay inside it.
        right = np.log(level.period_s / lo) > 0.75 * np.log(hi / lo)
        ax.text(level.period_s, 1.05 + 0.11 * (i % 2), f" {level.name} {level.period_s:.2f} s ", color=colour, fontsize=7,
                ha="right" if right else "left", va="bottom", fontweight="bold")
    ax.set_xscale("log")
    ax.set_xlim(lo, hi)
    _seconds_ticks(ax, lo, hi)
    ax.set_ylim(0, 1.8)
    ax.set_yticks([0, 0.25, 0.5, 0.75, 1.0])
    ax.set_xlabel("cycle length (s, log scale)")
    ax.set_ylabel("score (0-1)")
    ax.set_title("1. Cycle-length scan: how strongly the onsets repeat at each length")
    ax.legend(loc="upper right", frameon=True, framealpha=0.9, edgecolor="none", borderaxespad=0.2, fontsize=7)


def _bar_unit(best) -> tuple[float, float, str]:
    """The bar axis: its unit and its subdivision in pulses, and the subdivision's name.

    The unit is the beat, or the tatum (eighth) for additive bars, whose beats differ in length.
    """
    if best.grouping:
        return float(best.tatum), float(best.tatum), "eighths"
    return float(best.beat), float(best.beat) / best.division, "subdivisions"


def _model_terms(analysis, limit: int = 3) -> str:
    """The reading's largest weighted model terms, as text."""
    best = analysis.tree.best
    model = analysis.settings.tree.model if analysis.settings is not None else None
    if model is None:
        from .model import default_model

        model = default_model()
    contrib = {k: model.weights.get(k, 0.0) * v for k, v in best.terms.items()}
    shown = sorted((k for k, v in contrib.items() if v != 0.0), key=lambda k: -abs(contrib[k]))[:limit]
    parts = ", ".join(f"{k} {contrib[k]:+.2f}" for k in shown)
    return f"reading score {best.score:.2f}\n" + parts.replace(", ", "\n")


def draw_bar_persistence(ax, analysis) -> None:
    """Panel 2: the wrapped density at bar length and its merge tree, the deciding peaks highlighted."""
    best = analysis.tree.best
    cyc = analysis.tree.cycles[best.bar]
    L = float(best.bar)
    unit, sub, sub_name = _bar_unit(best)
    n_units = L / unit
    phase0 = (best.downbeat_pulses / L) % 1.0

    def to_x(phases):
        # One bar from half a unit before the downbeat, so the downbeat sits at 0.
        return ((np.asarray(phases) - phase0 + 0.5 / n_units) % 1.0) * n_units - 0.5

    f = cyc.density
    xs = to_x(np.arange(len(f)) / len(f))
    order = np.argsort(xs)
    xs, fs = xs[order], f[order]
    xs = np.concatenate([[xs[-1] - n_units], xs, [xs[0] + n_units]])
    fs = np.concatenate([[fs[-1]], fs, [fs[0]]])
    ax.fill_between(xs, 0, fs, color=PALETTE["sky_blue"], alpha=0.25, lw=0)
    ax.plot(xs, fs, color=DATA_COLOUR, lw=1.0, gid="bar-density")

    diag = cyc.diagram
    rel = cyc.relative_persistence
    px = to_x(cyc.peak_phases)
    # The same tolerance and margin as the bar evidence (metertop.tree): the
    # downbeat is the most persistent peak near it, the rival the most
    # persistent one anywhere else.
    tol = min(0.25 * sub / L, 0.12) * n_units
    near = np.abs(px) <= tol
    down = int(np.flatnonzero(near)[np.argmax(rel[near])]) if near.any() else None
    rival = int(np.flatnonzero(~near)[np.argmax(rel[~near])]) if (~near).any() else None
    beat_x = best.beat_offsets() / unit
    on_beat = np.array([np.min(np.abs(x - beat_x)) <= tol for x in px], dtype=bool)
    colours = np.where(on_beat, PALETTE["blue"], "#999999").astype(object)
    from matplotlib.lines import Line2D

    handles, margin = [], 0.0
    if down is not None:
        colours[down] = LEVEL_COLOURS["bar"]
        handles.append(Line2D([], [], color=LEVEL_COLOURS["bar"], lw=3.5, label=f"downbeat ({rel[down]:.2f})"))
        margin = float(rel[down])
    if rival is not None:
        colours[rival] = PALETTE["orange"]
        handles.append(Line2D([], [], color=PALETTE["orange"], lw=3.5, label=f"strongest rival ({rel[rival]:.2f})"))
        margin -= float(rel[rival])
    handles += [Line2D([], [], color=PALETTE["blue"], lw=3.5, label="other peaks on a beat"),
                Line2D([], [], color="#999999", lw=3.5, label="peaks between beats"),
                Line2D([], [], color=DATA_COLOUR, ls=":", lw=1, label="floor: the circle closes (H1)")]
    ax.vlines(px, diag.deaths, diag.births, colors=list(colours), lw=3.5, gid="bar-persistence")
    ax.axhline(diag.floor, color=DATA_COLOUR, ls=":", lw=1)
    top = float(f.max()) if f.size and f.max() > 0 else 1.0
    ax.set_ylim(0, top * 1.6)
    ax.set_xlim(-0.5, n_units - 0.5)
    ax.set_xticks(beat_x)
    ax.set_xticklabels([f"{k + 1}" for k in range(len(beat_x))])
    ax.set_xticks(np.arange(int(round(L / sub))) * sub / unit, minor=True)
    ax.set_xlabel(f"beat of the bar (minor ticks: {sub_name})")
    ax.set_ylabel("wrapped density (accent per bar)")
    ax.set_title(f"2. Persistence at bar length ({L * analysis.pulse.median_period_s:.2f} s)")
    ax.legend(handles=handles, loc="upper right", title="persistence (÷ top)", title_fontsize=7)
    ax.text(0.015, 0.98, f"downbeat margin {margin:.2f}\n{_model_terms(analysis)}", transform=ax.transAxes, fontsize=7,
            va="top", ha="left", linespacing=1.3)


def draw_phase_circles(ax, analysis) -> None:
    """Panel 3 (a polar axes): onsets wrapped at beat length (inner ring) and bar length (outer ring)."""
    best = analysis.tree.best
    t = np.asarray(analysis.times_s, dtype=float)
    w = np.asarray(analysis.weights, dtype=float)
    tau = analysis.pulse.warp(t)
    d0 = best.downbeat_pulses
    u = (t - t[0]) / max(t[-1] - t[0], 1e-9)  # time runs outward
    size = 4.0 + 36.0 * (w / max(float(w.max()), 1e-9))
    pulse_s = analysis.pulse.median_period_s
    rings = (("beat", float(best.beat), 1.0, "circle-beat"), ("bar", float(best.bar), 2.4, "circle-bar"))
    for name, length, base, gid in rings:
        theta = 2 * np.pi * (((tau - d0) / length) % 1.0)
        ax.scatter(theta, base + 0.8 * u, s=size, color=LEVEL_COLOURS[name], alpha=0.55, lw=0, gid=gid,
                   label=f"{'inner' if base < 2 else 'outer'} ring: wrapped at {name} length ({length * pulse_s:.2f} s)")
    for off in best.beat_offsets()[1:]:
        th = 2 * np.pi * off / float(best.bar)
        ax.plot([th, th], [3.25, 3.6], color=LEVEL_COLOURS["beat"], lw=2.0)
    ax.plot([0, 0], [0.9, 3.6], color=LEVEL_COLOURS["bar"], lw=2.0, label="the proposed downbeat (up)")
    ax.plot([], [], color=LEVEL_COLOURS["beat"], lw=2.0, label="the other beats of the bar (outer ticks)")
    ax.set_theta_zero_location("N")
    ax.set_theta_direction(-1)
    ax.set_ylim(0, 3.6)
    ax.set_yticks([])
    ax.set_xticks([])
    ax.grid(False)
    ax.set_title("3. Onsets wrapped onto circles\n(time runs outward, size = accent)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.02), ncol=1, frameon=False)


def _drum_rows(pitches: np.ndarray) -> list[int]:
    """Drum note numbers bottom-up: kick, snare, toms, hi-hat and ride, cymbals, the rest (common practice)."""
    from .events import ROLE_CRASH, ROLE_KICK, ROLE_SNARE, ROLE_TIMEKEEPER, ROLE_TOM, drum_role

    rank = {ROLE_KICK: 0, ROLE_SNARE: 1, ROLE_TOM: 2, ROLE_TIMEKEEPER: 3, ROLE_CRASH: 4}
    return sorted({int(p) for p in pitches}, key=lambda p: (rank.get(drum_role(p), 5), p))


def draw_onset_strip(ax, analysis, *, notated: NotatedGrid | None = None, max_bars: int = 8) -> None:
    """Panel 4: a drum grid, a piano roll or a row of onsets, with the proposed (and notated) beat and bar lines."""
    import pretty_midi

    result = analysis.result
    down = np.asarray(result.downbeats_s, dtype=float)
    beats = np.asarray(result.beats_s, dtype=float)
    t = np.asarray(analysis.times_s, dtype=float)
    start = min(float(t[0]), float(down[0]) if down.size else float(t[0])) - 0.25 * result.beat_s
    end = float(down[max_bars]) + 0.25 * result.beat_s if down.size > max_bars else float(t[-1]) + 0.5 * result.beat_s
    notes = analysis.notes
    if notes is None:
        from .load import notes_from_onsets

        notes = notes_from_onsets(t, analysis.weights)
    inside = (notes.onsets_s >= start) & (notes.onsets_s <= end)
    drum = inside & notes.is_drum
    loose = inside & ~notes.is_drum & (notes.pitches < 0)
    pitched = inside & ~notes.is_drum & (notes.pitches >= 0)
    vel = np.where(np.isfinite(notes.velocities), notes.velocities, 80.0) / 127.0
    ticks, labels, y = [], [], 0.0
    if drum.any():
        rows = _drum_rows(notes.pitches[notes.is_drum])
        row_of = {p: k for k, p in enumerate(rows)}
        ys = np.array([row_of[int(p)] for p in notes.pitches[drum]], dtype=float)
        ax.scatter(notes.onsets_s[drum], ys, s=6 + 30 * vel[drum], marker="s", color=DATA_COLOUR, lw=0, gid="strip-drums",
                   zorder=3)
        ticks += list(range(len(rows)))
        labels += [pretty_midi.note_number_to_drum_name(p) or f"drum {p}" for p in rows]
        y = float(len(rows))
    if loose.any():
        # Onsets without pitch: one row, marker size by the analysis accent.
        ev_w = np.interp(notes.onsets_s[loose], t, analysis.weights)
        ax.scatter(notes.onsets_s[loose], np.full(loose.sum(), y), s=8 + 40 * ev_w / max(float(ev_w.max()), 1e-9),
                   color=DATA_COLOUR, lw=0, gid="strip-onsets", zorder=3)
        ticks.append(y)
        labels.append("onsets (size = accent)")
        y += 1.0
    if pitched.any():
        p = notes.pitches[pitched]
        lo, hi = int(p.min()), int(p.max())
        # The pitched notes share a band of at least 6 rows, however wide their range.
        scale = max(6.0, 1.5 * y) / max(hi - lo + 1, 1)
        base = y + (0.5 if y else 0.0)
        dur = np.where(np.isfinite(notes.durations_s[pitched]), notes.durations_s[pitched], 0.1)
        from matplotlib.collections import PolyCollection
        from matplotlib.colors import to_rgba

        x0 = notes.onsets_s[pitched]
        x1 = x0 + np.maximum(dur, 0.02)
        yc, half = base + (p - lo) * scale, max(scale, 0.25) * 0.45
        boxes = np.stack([np.column_stack([x0, yc - half]), np.column_stack([x1, yc - half]),
                          np.column_stack([x1, yc + half]), np.column_stack([x0, yc + half])], axis=1)
        rgba = np.tile(to_rgba(DATA_COLOUR), (len(x0), 1))
        rgba[:, 3] = 0.35 + 0.5 * vel[pitched]  # louder notes darker
        ax.add_collection(PolyCollection(boxes, facecolors=rgba, edgecolors="none", gid="strip-notes", zorder=3))
        for q in sorted({lo, hi} | {c for c in range(lo, hi + 1) if c % 12 == 0}):
            ticks.append(base + (q - lo) * scale)
            labels.append(pretty_midi.note_number_to_name(q))
        y = base + (hi - lo) * scale + 0.5
    ax.set_yticks(ticks)
    ax.set_yticklabels(labels)
    ax.set_ylim(-0.8, max(y, 1.0) - 0.2)
    xf = ax.get_xaxis_transform()
    sel_b = beats[(beats >= start) & (beats <= end)]
    sel_d = down[(down >= start) & (down <= end)]
    ax.vlines(sel_b, 0, 1, transform=xf, color=LEVEL_COLOURS["beat"], lw=0.8, alpha=0.8, gid="grid-beats",
              label="proposed beats")
    ax.vlines(sel_d, 0, 1, transform=xf, color=LEVEL_COLOURS["bar"], lw=1.8, gid="grid-downbeats", label="proposed bar lines")
    if notated is not None:
        nb = np.asarray(notated.beats_s, dtype=float)
        nd = np.asarray(notated.downbeats_s, dtype=float)
        ax.vlines(nb[(nb >= start) & (nb <= end)], 0, 1, transform=xf, color=NOTATED_COLOUR, lw=0.9, ls=":",
                  gid="notated-beats", label=f"{notated.label} beats")
        ax.vlines(nd[(nd >= start) & (nd <= end)], 0, 1, transform=xf, color=NOTATED_COLOUR, lw=1.8, ls=(0, (4, 3)),
                  gid="notated-downbeats", label=f"{notated.label} bar lines")
    ax.set_xlim(start, end)
    ax.set_xlabel("time (s)")
    shown = int(((down >= start) & (down < end - 0.3 * result.beat_s)).sum())
    span = f"first {shown} of {len(down)} bars" if down.size > max_bars else f"all {len(down)} bars"
    ax.set_title(f"4. Onsets with the proposed grid ({span})")
    ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), ncol=4 if notated is not None else 2, frameon=False,
              borderaxespad=0.2)
