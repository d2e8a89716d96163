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


def _settings(merge_ms: float, engine: str):
    """Pipeline settings from the shared command-line options, or a one-line error."""
    from ..persistence import ENGINES
    from ..pipeline import Settings

    if engine not in ENGINES:
        _fail(f"unknown engine '{engine}'; choose one of: {', '.join(ENGINES)}")
    if not merge_ms >= 0 or merge_ms > 1000:
        _fail(f"--merge-ms must be between 0 and 1000, got {merge_ms}")
    return Settings(merge_window_s=merge_ms / 1000.0, engine=engine)


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
    files: List[Path] = typer.Argument(..., help="MIDI files (.mid), onset lists (.csv, .tsv, .txt, .json) or scores (.musicxml, .xml, .mxl, .abc, .krn)."),
    json_out: bool = typer.Option(False, "--json", help="Print one JSON line per file instead of a summary."),
    track: Optional[List[int]] = typer.Option(None, "--track", "-t", help="MIDI track index to use (repeatable); see 'metertop tracks'. Default: all."),
    merge_ms: float = typer.Option(35.0, "--merge-ms", help="Merge onsets closer than this many milliseconds into one event (chords, flams)."),
    engine: str = typer.Option("dionysus", "--engine", help="Persistence engine: dionysus, or unionfind (the exact fast path; same results)."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Also draw the four-panel figure to this file (.png, .svg or .pdf); one FILE only."),
    tune: Optional[List[int]] = typer.Option(None, "--tune", help="Score files: analyse only tune N of an ABC or kern file holding several (repeatable; from 1)."),
    write_score: Optional[Path] = typer.Option(None, "--write-score", help="Score input: write the transcription back as MusicXML (.musicxml, .xml, .mxl), barred in the proposed metre."),
    reading: int = typer.Option(1, "--reading", help="With --write-score: write the Nth reading of the alternatives (1 is the proposal)."),
    force: bool = typer.Option(False, "--force", help="Replace an existing output file."),
) -> None:
    """Propose the metric tree of each FILE: time signature, tempo, beats and downbeats."""
    from ..export import to_json_line
    from ..pipeline import analyse
    from ..report import summary

    settings = _settings(merge_ms, engine)
    if plot is not None:
        from .plot import draw_and_save, prepare_plot

        if len(files) != 1:
            _fail(f"--plot draws one file, got {len(files)}; use 'metertop plot FILE -o OUT' for each")
        prepare_plot(plot, files[0], force)
    from .score_files import analyse_score_file, check_score_options
    from ..scores import is_score_path

    problem = check_score_options(list(files), write_score, reading, tune)
    if problem:
        _fail(problem)
    failed = 0
    for i, path in enumerate(files):
        if is_score_path(path):
            failed += analyse_score_file(path, json_out=json_out, settings=settings, tunes=list(tune) if tune else None,
                                         write_score=write_score, reading=reading, force=force, label=len(files) > 1, first=i == 0)
            continue
        if tune:
            typer.echo(f"metertop: error: {path}: --tune applies to score files (ABC, kern, MusicXML)", err=True)
            failed += 1
            continue
        try:
            if plot is not None:
                result = draw_and_save(path, plot, force=force, tracks=track, settings=settings).result
            else:
                result = analyse(path, tracks=list(track) if track else None, settings=settings)
        except MetertopError as exc:
            message = str(exc)
            typer.echo(f"metertop: error: {message if str(path) in message else f'{path}: {message}'}", err=True)
            failed += 1
            continue
        if json_out:
            typer.echo(to_json_line(result))
        else:
            if i:
                typer.echo("")
            typer.echo(summary(result, name=str(path) if len(files) > 1 else None))
        if plot is not None:
            typer.echo(f"figure written to {plot}", err=json_out)
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
