"""``metertop plot``: the four-panel figure of one file (see :mod:`metertop.plot`)."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from ..errors import MetertopError
from .app import _fail, _settings, app


def prepare_plot(out: Path, source: Path, force: bool) -> None:
    """Fail early, before any analysis: matplotlib missing, or an output that may not be written."""
    from ..plot import plot_target, require_matplotlib

    try:
        require_matplotlib()
        plot_target(out, inputs=[source], force=force)
    except MetertopError as exc:
        _fail(str(exc))


def save_analysis_figure(analysis, source: Path, out: Path, *, force: bool, notated=None) -> None:
    """Draw the figure of an analysis of ``source`` (with a notated grid, if given) to ``out``."""
    from ..plot import analysis_figure, save_figure

    fig = analysis_figure(analysis, title=Path(source).name, notated=notated)
    save_figure(fig, out, inputs=[source], force=force)


def draw_and_save(source: Path, out: Path, *, force: bool, tracks, settings):
    """Analyse ``source``, draw its figure to ``out``, and return the analysis."""
    from ..pipeline import analyse_detailed

    analysis = analyse_detailed(source, tracks=list(tracks) if tracks else None, settings=settings)
    save_analysis_figure(analysis, source, out, force=force)
    return analysis


@app.command("plot")
def plot_cmd(
    file: Path = typer.Argument(..., help="A MIDI file (.mid), an onset list (.csv, .tsv, .txt, .json) or a recording (.wav, .flac, .ogg)."),
    out: Path = typer.Option(..., "--out", "-o", help="The figure to write: .png, .svg or .pdf."),
    force: bool = typer.Option(False, "--force", help="Replace OUT if it exists."),
    track: Optional[List[int]] = typer.Option(None, "--track", "-t", help="MIDI track index to use (repeatable); see 'metertop tracks'. Default: all."),
    merge_ms: float = typer.Option(35.0, "--merge-ms", help="Merge onsets closer than this many milliseconds into one event (chords, flams)."),
    engine: str = typer.Option("dionysus", "--engine", help="Persistence engine: dionysus, or unionfind (the exact fast path; same results)."),
    kit: Optional[bool] = typer.Option(None, "--kit/--no-kit", help="Recordings: read the onsets as a drum kit (kick, snare and cymbals told apart by their bands), or as unpitched onsets. Default: decided from the sound."),
) -> None:
    """Draw FILE's analysis as one figure: the cycle scan, the persistence at bar length, the phase circles and the onset strip."""
    settings = _settings(merge_ms, engine, kit=kit)
    prepare_plot(out, file, force)
    try:
        analysis = draw_and_save(file, out, force=force, tracks=track, settings=settings)
    except MetertopError as exc:
        message = str(exc)
        _fail(message if str(file) in message or str(out) in message else f"{file}: {message}")
    r = analysis.result
    typer.echo(f"{out}: {r.time_signature} at {r.tempo_bpm:.1f} bpm, confidence {r.confidence:.2f}")
