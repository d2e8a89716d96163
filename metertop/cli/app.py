"""The ``metertop`` commands."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from ..errors import MetertopError

app = typer.Typer(
    name="metertop",
    help="Propose the metre (subdivision, beat, bar, hypermeasure) that note onsets imply.",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


def _fail(message: str, code: int = 2) -> None:
    typer.echo(f"metertop: error: {message}", err=True)
    raise typer.Exit(code)


def _settings(merge_ms: float, engine: str, band_weights: str | None = None, kit: bool | None = None):
    """Pipeline settings from the shared command-line options, or a one-line error."""
    from dataclasses import replace

    from ..flux import FluxSettings
    from ..persistence import ENGINES
    from ..pipeline import Settings

    if engine not in ENGINES:
        _fail(f"unknown engine '{engine}'; choose one of: {', '.join(ENGINES)}")
    if not merge_ms >= 0 or merge_ms > 1000:
        _fail(f"--merge-ms must be between 0 and 1000, got {merge_ms}")
    audio = FluxSettings(kit=kit)
    if band_weights is not None:
        try:  # replace() validates the new weights as the constructor does
            audio = replace(audio, band_weights=tuple(float(v) for v in band_weights.split(",")))
        except ValueError:
            _fail(f"--band-weights takes three numbers LOW,MID,HIGH, not negative and not all 0 (e.g. 2,1.5,1); got '{band_weights}'")
    return Settings(merge_window_s=merge_ms / 1000.0, engine=engine, audio=audio)


def _version(value: bool) -> None:
    if value:
        from .._version import __version__

        typer.echo(f"metertop {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version and exit."),
) -> None:
    """metertop: the metre of music from its note onsets, found with persistent homology."""


@app.command("analyse")
def analyse_cmd(
    files: List[Path] = typer.Argument(..., help="MIDI files (.mid), onset lists (.csv, .tsv, .txt, .json), recordings (.wav, .flac, .ogg) or scores (.musicxml, .xml, .mxl, .abc, .krn)."),
    json_out: bool = typer.Option(False, "--json", help="Print one JSON line per file (per tune for scores) instead of a summary."),
    track: Optional[List[int]] = typer.Option(None, "--track", "-t", help="MIDI track index to use (repeatable); see 'metertop tracks'. Default: all."),
    merge_ms: float = typer.Option(35.0, "--merge-ms", help="Merge onsets closer than this many milliseconds into one event (chords, flams)."),
    engine: str = typer.Option("dionysus", "--engine", help="Persistence engine: dionysus, or unionfind (the exact fast path; same results)."),
    time_signature: Optional[str] = typer.Option(None, "--time-signature", "-s", help="Fit this time signature (e.g. 7/8) instead of proposing one; warns when the playing contradicts it."),
    reading: Optional[int] = typer.Option(None, "--reading", help="Report and write the Nth of the alternative readings (1 is the proposal)."),
    write_midi: Optional[Path] = typer.Option(None, "--write-midi", help="Write the notes with the reading's tempo map and time signatures as a Standard MIDI File."),
    beats: Optional[Path] = typer.Option(None, "--beats", help="Write every beat's time, bar and beat position as a TSV file."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Also draw the four-panel figure of the proposal to this file (.png, .svg or .pdf); one FILE only."),
    tune: Optional[List[int]] = typer.Option(None, "--tune", help="Score files: analyse only tune N of an ABC or kern file holding several (repeatable; from 1)."),
    write_score: Optional[Path] = typer.Option(None, "--write-score", help="Score input: write the transcription back as MusicXML (.musicxml, .xml, .mxl), barred in the chosen reading."),
    onsets_out: Optional[Path] = typer.Option(None, "--onsets-out", help="Write the onsets analysed (a recording's detected onsets) as a CSV onset list, to inspect, correct and analyse again."),
    band_weights: Optional[str] = typer.Option(None, "--band-weights", help="Recordings: weight of the low (kick-like), mid (snare-like) and high bands in each onset's strength, as LOW,MID,HIGH (default 4,2,1)."),
    kit: Optional[bool] = typer.Option(None, "--kit/--no-kit", help="Recordings: read the onsets as a drum kit (kick, snare and cymbals told apart by their bands), or as unpitched onsets. Default: decided from the sound."),
    force: bool = typer.Option(False, "--force", help="Replace output files that exist."),
) -> None:
    """Propose the metric tree of each FILE: time signature, tempo, beats and downbeats."""
    from ..export import to_json_line
    from ..report import summary
    from ..scores import is_score_path
    from .score_files import analyse_score_file, check_score_options
    from .writeback import analyse_one, check_options

    settings = _settings(merge_ms, engine, band_weights, kit)
    scores = [is_score_path(f) for f in files]
    if any(scores) or write_score is not None or tune:
        problem = check_score_options(list(files), write_score, reading if reading is not None else 1, tune)
        if problem:
            _fail(problem)
    if plot is not None:
        from .plot import prepare_plot, save_analysis_figure

        if len(files) != 1:
            _fail(f"--plot draws one file, got {len(files)}; use 'metertop plot FILE -o OUT' for each")
        if reading is not None or time_signature is not None:
            _fail("--plot draws the proposal; it does not combine with --reading or --time-signature")
        prepare_plot(plot, files[0], force)
    try:
        check_options([f for f, sc in zip(files, scores) if not sc], time_signature, reading if not all(scores) else None,
                      write_midi, beats, force, onsets_out)
    except MetertopError as exc:
        _fail(str(exc))
    failed = 0
    for i, path in enumerate(files):
        if scores[i]:
            failed += analyse_score_file(path, json_out=json_out, settings=settings, tunes=list(tune) if tune else None,
                                         write_score=write_score, reading=reading if reading is not None else 1, force=force,
                                         label=len(files) > 1, first=i == 0)
            continue
        if tune:
            typer.echo(f"metertop: error: {path}: --tune applies to score files (ABC, kern, MusicXML)", err=True)
            failed += 1
            continue
        try:
            analysis, extra, lines = analyse_one(path, list(track) if track else None, settings, time_signature, reading, write_midi,
                                                 beats, force, onsets_out)
            result = analysis.result
            if plot is not None:
                save_analysis_figure(analysis, path, plot, force=force)
                lines.append(f"figure written to {plot}")
        except MetertopError as exc:
            message = str(exc)
            typer.echo(f"metertop: error: {message if str(path) in message else f'{path}: {message}'}", err=True)
            failed += 1
            continue
        if json_out:
            typer.echo(to_json_line(result, **extra))
            for line in lines:
                if line.startswith(("figure written", "wrote ")):
                    typer.echo(line, err=True)
        else:
            if i:
                typer.echo("")
            typer.echo("\n".join([summary(result, name=str(path) if len(files) > 1 else None)] + lines))
    if failed:
        raise typer.Exit(2)


@app.command("tracks")
def tracks_cmd(file: Path = typer.Argument(..., help="A MIDI file.")) -> None:
    """List the note-bearing tracks of a MIDI file, with the indices that --track takes."""
    from ..load import list_tracks

    try:
        rows = list_tracks(file) if file.exists() else _fail(f"{file}: no such file")
    except MetertopError as exc:
        _fail(str(exc))
    for index, name, is_drum, n_notes in rows:
        typer.echo(f"{index:3d}  {'drums ' if is_drum else 'pitched'}  {n_notes:6d} notes  {name}")


from . import plot as _plot  # noqa: E402,F401
from . import batch as _batch  # noqa: E402,F401
from . import check as _check  # noqa: E402,F401
