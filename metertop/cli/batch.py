"""``metertop batch``: a whole corpus into one results file, resumable, locally or on a Dask cluster."""

from __future__ import annotations

import contextlib
import signal
import sys
from pathlib import Path
from typing import List, Optional

import typer

from ..errors import MetertopError
from .app import _fail, app


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Treat SIGTERM (a job scheduler's stop) like Ctrl-C: stop the workers, keep every finished line."""
    def interrupt(signum, frame):
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, interrupt)
    except ValueError:  # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@app.command("batch")
def batch_cmd(
    paths: List[str] = typer.Argument(..., help="Files, folders (searched recursively) and glob patterns such as 'corpus/**/*.mid'."),
    output: Path = typer.Option(..., "--output", "-o", help="Results: one JSON line per file. Rerun with the same -o to continue where a run stopped."),
    csv_out: Optional[Path] = typer.Option(None, "--csv", help="Also write a flat summary table (one row per file) when the batch is complete."),
    force: bool = typer.Option(False, "--force", help="Replace an existing --csv table."),
    jobs: Optional[int] = typer.Option(None, "--jobs", "-j", help="Local worker processes. Default: one per core."),
    scheduler: Optional[str] = typer.Option(None, "--scheduler", help="Run on the Dask cluster whose scheduler is at this address (e.g. tcp://10.0.0.5:8786); needs metertop[cluster]."),
    suffix: Optional[List[str]] = typer.Option(None, "--suffix", help="File type to take from folders (repeatable). Default: .mid .midi .smf .kar"),
    retry_errors: bool = typer.Option(False, "--retry-errors", help="Analyse again the files whose earlier line is an error (after fixing permissions, say)."),
    track: Optional[List[int]] = typer.Option(None, "--track", "-t", help="MIDI track index to use (repeatable). Default: all."),
    merge_ms: float = typer.Option(35.0, "--merge-ms", help="Merge onsets closer than this many milliseconds into one event."),
    engine: str = typer.Option("dionysus", "--engine", help="Persistence engine: dionysus, or unionfind."),
) -> None:
    """Analyse every file of a corpus into one results file, one JSON line each.

    A file counts as done when the results file holds a line for it with the
    same size, modification time and options, so a run that was stopped
    continues where it left off. Exit code 0 once every file has a line,
    "ok" or "error"; 2 for bad usage; 130 when interrupted.
    """
    from ..batch import DEFAULT_SUFFIXES, Batch, BatchOptions, csv_text, default_jobs, find_inputs, run_local
    from ..outputs import atomic_write, check_target
    from ..progress import ProgressBar

    cluster = None
    try:
        options = BatchOptions(merge_ms=merge_ms, engine=engine, tracks=tuple(track) if track else None)
        if scheduler is not None and jobs is not None:
            _fail("--jobs sets local processes; with --scheduler the cluster's workers do the work")
        if jobs is not None and jobs < 1:
            _fail(f"--jobs must be at least 1, got {jobs}")
        if csv_out is not None:
            if csv_out.resolve() == output.resolve():
                _fail("--csv and -o name the same file")
            check_target(csv_out, force=force)
        files = find_inputs(paths, suffix or DEFAULT_SUFFIXES, exclude=[output] + ([csv_out] if csv_out else []))
        check_target(output, inputs=files, force=True)
        if scheduler is not None:
            from ..cluster import ClusterRunner

            cluster = ClusterRunner(scheduler)
        batch = Batch(files, output, options, retry_errors=retry_errors)
    except KeyboardInterrupt:
        if cluster is not None:
            cluster.close()
        _fail("interrupted before the batch started; nothing was analysed", 130)
    except MetertopError as exc:
        if cluster is not None:
            cluster.close()
        _fail(str(exc))

    interrupted = False
    with batch, (cluster or contextlib.nullcontext()), _terminate_as_interrupt():
        if batch.results.dropped_tail:
            typer.echo(f"metertop: {output}: dropped an incomplete last line left by a stopped run; that file is analysed again", err=True)
        lines = cluster.run(batch.todo, options) if cluster else run_local(batch.todo, options, jobs or default_jobs())
        bar = ProgressBar(len(batch.todo), sys.stderr)
        try:
            with contextlib.closing(lines):
                for k, line in enumerate(lines, 1):
                    batch.record(line)
                    bar.update(k, batch.failed)
        except KeyboardInterrupt:
            interrupted = True
        except MetertopError as exc:  # the disk refused a line, or the cluster failed
            bar.close()
            _fail(str(exc))
        finally:
            bar.close()

    typer.echo(batch.tally.summary())
    if interrupted:
        typer.echo(f"metertop: interrupted; every finished file is in {output}: rerun the same command to continue", err=True)
        raise typer.Exit(130)
    typer.echo(f"results: {output}")
    if csv_out is not None:
        try:
            atomic_write(check_target(csv_out, force=force), csv_text(batch.tally.rows()))
        except MetertopError as exc:
            _fail(str(exc))
        typer.echo(f"table: {csv_out}")
