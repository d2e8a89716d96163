"""Score files on the command line: `metertop analyse tune.abc`, `--tune`, `--write-score`, `--reading`.

The analyse command hands every MusicXML, ABC or kern file to
:func:`analyse_score_file`; each tune of the file gets its own summary or
JSON line, and an error in one tune does not stop the others.
"""

from __future__ import annotations

from pathlib import Path

import typer

from ..errors import MetertopError

__all__ = ["analyse_score_file", "check_score_options"]


def _error(path: Path, message: str) -> None:
    typer.echo(f"metertop: error: {message if str(path) in message else f'{path}: {message}'}", err=True)


def check_score_options(files: list[Path], write_score: Path | None, reading: int, tune: list[int] | None) -> str | None:
    """The reason the score options cannot be used with these files, or None."""
    from ..scores import is_score_path

    if reading < 1:
        return f"--reading counts from 1 (1 is the proposal), got {reading}"
    if tune and any(n < 1 for n in tune):
        return "--tune counts from 1"
    if write_score is None:
        if reading != 1:
            return "--reading selects the reading to write; give --write-score as well"
        return None
    if len(files) != 1:
        return "--write-score takes one input file"
    if not is_score_path(files[0]):
        return f"--write-score writes a score back, so the input must be MusicXML, ABC or kern, not {files[0]}"
    if tune and len(tune) > 1:
        return "--write-score writes one tune; give one --tune"
    return None


def analyse_score_file(path: Path, *, json_out: bool, settings, tunes: list[int] | None, write_score: Path | None,
                       reading: int, force: bool, label: bool, first: bool) -> int:
    """Analyse every tune of one score file, print the results, and write the barred score if asked.

    Returns the number of failures (a file that cannot be read counts once).
    """
    from ..export import to_json_line
    from ..report import score_summary
    from ..score_writer import check_score_target, write_score as write_barred
    from ..scores import analyse_tune, read_score

    bad_tunes: list[int] = []

    def tune_error(index: int, error: MetertopError) -> None:
        bad_tunes.append(index)
        _error(path, str(error))

    try:
        if write_score is not None:
            check_score_target(write_score, inputs=[path], force=force)
        score_tunes = read_score(path, tunes=tunes, on_error=tune_error)
    except MetertopError as exc:
        _error(path, str(exc))
        return 1
    if bad_tunes and write_score is not None:
        return len(bad_tunes)
    if write_score is not None and len(score_tunes) + len(bad_tunes) > 1:
        _error(path, f"the file holds {len(score_tunes)} tunes; choose the one to write with --tune N")
        return 1
    failed = len(bad_tunes)
    for k, tune in enumerate(score_tunes):
        try:
            analysis = analyse_tune(tune, settings=settings)
        except MetertopError as exc:
            _error(path, f"tune {tune.index}: {exc}")
            failed += 1
            continue
        result = analysis.result
        if json_out:
            typer.echo(to_json_line(result))
        else:
            if not (first and k == 0):
                typer.echo("")
            typer.echo(score_summary(result, name=str(path) if label else None))
        if write_score is not None:
            try:
                chosen = analysis.reading(reading)
                write_barred(tune, chosen, write_score, force=force, inputs=[path])
            except MetertopError as exc:
                _error(path, str(exc))
                failed += 1
                continue
            if tune.has_repeats:
                typer.echo(f"metertop: note: {path} has repeat signs; they are not carried into {write_score}", err=True)
            typer.echo(f"wrote {write_score} in {chosen.time_signature} (reading {reading}), "
                       f"first downbeat {chosen.pickup_quarters:g} quarters after the first note", err=True)
    return failed
