"""``metertop check``: does a notated time signature fit the playing?

Exit codes: 0 consistent, 1 inconsistent, 3 ambiguous, 2 bad input.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import List, Optional

import typer

from ..errors import MetertopError
from .app import _fail, _settings, app

_SHOW_BARS = 12


@app.command("check")
def check_cmd(
    file: Path = typer.Argument(..., help="A MIDI file (.mid), an onset list (.csv, .tsv, .txt, .json) or a recording (.wav, .flac, .ogg)."),
    time_signature: Optional[str] = typer.Option(
        None, "--time-signature", "-s",
        help="The notated time signature to check, e.g. 3/4, 6/8, 7/8 or 2+2+3/8. Default: the file's own time-signature events."),
    json_out: bool = typer.Option(False, "--json", help="Print the verdict and its evidence as one JSON line."),
    track: Optional[List[int]] = typer.Option(None, "--track", "-t", help="MIDI track index to use (repeatable). Default: all."),
    merge_ms: float = typer.Option(35.0, "--merge-ms", help="Merge onsets closer than this many milliseconds into one event."),
    plot: Optional[Path] = typer.Option(None, "--plot", help="Also draw the four-panel figure, with the notated grid beside the proposed one (.png, .svg or .pdf)."),
    force: bool = typer.Option(False, "--force", help="Replace the --plot file if it exists."),
    kit: Optional[bool] = typer.Option(None, "--kit/--no-kit", help="Recordings: read the onsets as a drum kit (kick, snare and cymbals told apart by their bands), or as unpitched onsets. Default: decided from the sound."),
) -> None:
    """Check a notated time signature against the playing: consistent (exit 0), inconsistent (1) or ambiguous (3)."""
    from .._version import __version__
    from ..check import check_file
    from ..pipeline import Settings

    settings = _settings(merge_ms, Settings.engine, kit=kit)  # check has no --engine: the default one
    if plot is not None:
        from .plot import prepare_plot

        prepare_plot(plot, file, force)
    try:
        report = check_file(file, time_signature, tracks=list(track) if track else None,
                            settings=settings)
    except MetertopError as exc:
        message = str(exc)
        _fail(message if str(file) in message else f"{file}: {message}")
    verdict = report.verdict
    if plot is not None:
        try:
            _draw_with_notated_grid(file, report, plot, force)
        except MetertopError as exc:
            _fail(str(exc))
        typer.echo(f"figure written to {plot}", err=True)
    if json_out:
        data = {"metertop_version": __version__, "path": str(file), **verdict.to_dict(),
                "segments": [s.to_dict() for s in report.result.segments]}
        typer.echo(json.dumps(data, separators=(",", ":"), allow_nan=False))
    else:
        typer.echo(_text(verdict))
    raise typer.Exit(verdict.exit_code)


def _draw_with_notated_grid(file: Path, report, out: Path, force: bool) -> None:
    """The figure of the analysis, with the notated grid in panel 4.

    The notated grid is the file's own bars and beats (its tempo map and
    time signatures) when the time signature came from the file, and the
    given metre fitted to the playing otherwise.
    """
    from ..pipeline import choose_reading
    from ..plot import NotatedGrid
    from .plot import save_analysis_figure

    verdict = report.verdict
    label = f"notated {verdict.time_signature}"
    if verdict.notated_from == "file":
        import pretty_midi

        pm = pretty_midi.PrettyMIDI(str(file))
        grid = NotatedGrid(pm.get_downbeats(), pm.get_beats(), label=f"{label} (the file's grid)")
    else:
        chosen = choose_reading(report.analysis, time_signature=verdict.time_signature).result
        grid = NotatedGrid(chosen.downbeats_s, chosen.beats_s, label=f"{label} (fitted)")
    save_analysis_figure(report.analysis, file, out, force=force, notated=grid)


def _text(v) -> str:
    src = "from the file" if v.notated_from == "file" else "given"
    lines = [f"{v.verdict}: {v.message}"]

    def row(name, r):
        label = f"{r.time_signature} ({'+'.join(map(str, r.grouping))})" if r.grouping else r.time_signature
        return (f"  {name:<8s}{label:<14s} score {r.score:6.2f}   probability {r.probability:.3f}   "
                f"bar {r.bar_s:.3f} s   first downbeat {r.first_downbeat_s:.2f} s")

    lines.append(row(f"notated", v.notated) + f"   ({src})")
    lines.append(row("best", v.best))
    if v.disagreeing_bars:
        shown = ", ".join(f"{b.bar} ({b.start_s:.2f} s)" for b in v.disagreeing_bars[:_SHOW_BARS])
        more = f" and {len(v.disagreeing_bars) - _SHOW_BARS} more" if len(v.disagreeing_bars) > _SHOW_BARS else ""
        lines.append(f"  bars whose bar line has no downbeat in the playing ({len(v.disagreeing_bars)} of {v.n_bars}): {shown}{more}")
    else:
        lines.append(f"  every one of the {v.n_bars} notated bar lines falls on a downbeat of the playing")
    if v.suggestion:
        lines.append(f"  suggestion: {v.suggestion}")
    for note in v.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)
