"""The options of ``metertop analyse`` that choose a reading or write it back.

``--time-signature`` fits a given metre, ``--reading N`` takes the Nth
alternative, ``--write-midi`` and ``--beats`` write the chosen reading out
(see :mod:`metertop.tempomap`), and ``--onsets-out`` writes the notes' onsets
(a recording's detected onsets) as an onset list that metertop reads back.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError

__all__ = ["check_options", "analyse_one"]


def check_options(files: list[Path], time_signature: str | None, reading: int | None, write_midi: Path | None,
                  beats: Path | None, force: bool, onsets_out: Path | None = None) -> None:
    """Reject option combinations that cannot work, before any analysis (raises InputError)."""
    from ..notation import notated_metre
    from ..outputs import check_target

    if time_signature is not None and reading is not None:
        raise InputError("give either --time-signature or --reading, not both")
    if reading is not None and reading < 1:
        raise InputError(f"--reading counts from 1, got {reading}")
    if time_signature is not None:
        notated_metre(time_signature)
    outputs = [p for p in (write_midi, beats, onsets_out) if p is not None]
    if outputs and len(files) != 1:
        raise InputError("--write-midi, --beats and --onsets-out write one file's results: give exactly one FILE")
    if len({Path(p).resolve() for p in outputs}) < len(outputs):
        raise InputError("--write-midi, --beats and --onsets-out must name different files")
    for out in outputs:
        check_target(out, inputs=files, force=force)


def analyse_one(path: Path, tracks, settings, time_signature: str | None, reading: int | None, write_midi: Path | None,
                beats: Path | None, force: bool, onsets_out: Path | None = None):
    """Analyse one file with the chosen reading and write its outputs.

    Returns
    -------
    analysis : Analysis
        With the chosen reading; ``analysis.result`` is what is reported.
    extra : dict
        Keys added to the JSON line: ``check`` (the verdict on a given time
        signature), ``recording`` (how a recording was read) and
        ``written`` (the files written).
    lines : list of str
        Warnings and notes for the text summary.
    """
    import numpy as np

    from ..check import check_notated
    from ..outputs import atomic_write, check_target
    from ..pipeline import analyse_detailed, choose_reading
    from ..tempomap import bar_grid, beats_table, write_tempo_map

    analysis = analyse_detailed(path, tracks=tracks, settings=settings)
    extra, lines = {}, []
    written = []
    from_audio = analysis.notes is not None and analysis.notes.source == "audio"
    if from_audio:
        from ..audio import recording_line, recording_summary

        extra["recording"] = recording_summary(analysis.notes)
        lines.append(recording_line(extra["recording"]))
    if onsets_out is not None:
        from ..audio import onsets_csv

        target = check_target(onsets_out, inputs=[path], force=force)
        atomic_write(target, onsets_csv(analysis.notes))
        written.append(str(onsets_out))
        n_onsets = len(np.unique(analysis.notes.onsets_s))
        rows = f"{len(analysis.notes)} rows, " if len(analysis.notes) != n_onsets else ""
        lines.append(f"wrote {onsets_out}: {rows}{n_onsets} onsets")
    if time_signature is not None:
        verdict = check_notated(analysis, time_signature)
        analysis = choose_reading(analysis, time_signature=time_signature)
        extra["check"] = verdict.to_dict()
        if verdict.verdict == "inconsistent":
            lines.append(f"warning: the playing contradicts {verdict.time_signature}: {verdict.message}")
        elif verdict.verdict == "ambiguous":
            lines.append(f"note: {verdict.message}")
    elif reading is not None:
        analysis = choose_reading(analysis, rank=reading)
    result = analysis.result
    grid = None
    if write_midi is not None:
        grid = write_tempo_map(result, path, write_midi, force=force, notes=analysis.notes if from_audio else None)
        written.append(str(write_midi))
        lines.append(f"wrote {write_midi}: {int(grid.bar[-1])} bars, {len(grid.times_s)} beat lines, "
                     f"{grid.ticks_per_quarter} ticks per quarter")
    if beats is not None:
        if grid is None:
            notes = analysis.notes
            end = float(np.nanmax(notes.onsets_s + np.nan_to_num(notes.durations_s))) if notes is not None else result.duration_s
            grid = bar_grid(result, end_s=end)
        target = check_target(beats, inputs=[path], force=force)
        atomic_write(target, beats_table(grid))
        written.append(str(beats))
        lines.append(f"wrote {beats}: {int(np.sum(grid.detected))} beats")
    if written:
        extra["written"] = written
    return analysis, extra, lines
