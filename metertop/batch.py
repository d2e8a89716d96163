"""Batch analysis of a corpus: find the inputs, analyse each in a worker, tally the results.

Conventions
-----------
- An input is one file. Its line in the results file (see
  :mod:`metertop.batchfile`) is the ``analyse --json`` object plus ``path``
  (as named on the command line or found in a folder), ``status`` (``"ok"``
  or ``"error"``), ``error`` (the message, or null), ``file`` (real path,
  ``size_bytes``, ``mtime_ns``) and ``options`` (every setting that changes
  a result, the metertop version included). An error line holds only those
  keys and ``metertop_version``.
- An input counts as done when the results file holds a line with its real
  path, size, modification time and the same options.
- Workers return finished JSON lines (str); the process that owns the
  results file only writes them, so it never becomes the bottleneck.
- Runners (:func:`run_local`, :class:`metertop.cluster.ClusterRunner`) are
  generators of lines in the order they finish; the caller writes them and
  shows progress. Nothing here prints; summaries are returned as text.
"""

from __future__ import annotations

import csv
import glob
import io
import json
import multiprocessing as mp
import os
import signal
import sys
import tempfile
from collections import Counter, deque
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Iterable, Iterator

from ._version import __version__
from .batchfile import FileKey, ResultsFile, line_key
from .errors import InputError, MetertopError, OutputError
from .load import MIDI_SUFFIXES

__all__ = [
    "Batch", "BatchOptions", "Task", "find_inputs", "make_task", "analyse_task", "error_line", "run_local",
    "Tally", "CSV_COLUMNS", "flat_row", "csv_text", "default_jobs", "DEFAULT_SUFFIXES",
]

#: File types taken from folders unless ``--suffix`` says otherwise.
DEFAULT_SUFFIXES: tuple[str, ...] = MIDI_SUFFIXES
# Tasks kept in flight per worker: enough to hide the round trip, few enough
# that an interrupted run has little to cancel.
_IN_FLIGHT_PER_WORKER = 2


@dataclass(frozen=True)
class BatchOptions:
    """Everything that changes a batch result; part of each line's identity.

    >>> BatchOptions(merge_ms=40).to_dict()["merge_ms"]
    40.0
    >>> BatchOptions(engine="abacus")
    Traceback (most recent call last):
    ...
    metertop.errors.InputError: unknown engine 'abacus'; choose one of: dionysus, unionfind
    """

    merge_ms: float = 35.0
    engine: str = "dionysus"
    tracks: tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        from .persistence import ENGINES

        if self.engine not in ENGINES:
            raise InputError(f"unknown engine '{self.engine}'; choose one of: {', '.join(ENGINES)}")
        if not 0 <= self.merge_ms <= 1000:
            raise InputError(f"--merge-ms must be between 0 and 1000, got {self.merge_ms}")
        if self.tracks is not None:
            object.__setattr__(self, "tracks", tuple(sorted(set(int(t) for t in self.tracks))) or None)

    def settings(self):
        from .pipeline import Settings

        return Settings(merge_window_s=self.merge_ms / 1000.0, engine=self.engine)

    def to_dict(self) -> dict:
        return {"metertop_version": __version__, "merge_ms": float(self.merge_ms), "engine": self.engine,
                "tracks": list(self.tracks) if self.tracks else None}

    def key(self) -> str:
        """The options as they appear in :func:`metertop.batchfile.line_key`."""
        return json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"))


@dataclass(frozen=True)
class Task:
    """One input file to analyse.

    Attributes
    ----------
    path : str
        As named on the command line or found in a folder; reported as ``path``.
    real_path : str
        Absolute, with links resolved: the file's identity.
    size_bytes, mtime_ns : int or None
        From ``os.stat`` when the batch was planned; None if that failed.
    payload : bytes or None
        The file's contents, for workers that cannot read this machine's disk.
    """

    path: str
    real_path: str
    size_bytes: int | None
    mtime_ns: int | None
    payload: bytes | None = None

    def file_dict(self) -> dict:
        return {"path": self.real_path, "size_bytes": self.size_bytes, "mtime_ns": self.mtime_ns}

    def key(self, options: BatchOptions) -> FileKey:
        return (self.real_path, self.size_bytes, self.mtime_ns, options.key())


# ---- finding the inputs ------------------------------------------------------------

def _normalise_suffix(suffix: str) -> str:
    suffix = suffix.strip().lower()
    return suffix if suffix.startswith(".") else "." + suffix


def _walk(folder: str, suffixes: tuple[str, ...]) -> Iterator[str]:
    """Files below ``folder`` with one of ``suffixes``, in sorted order, hidden entries left out."""
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        for name in sorted(files):
            if not name.startswith(".") and os.path.splitext(name)[1].lower() in suffixes:
                yield os.path.join(root, name)


def find_inputs(paths: Iterable[str], suffixes: Iterable[str] = DEFAULT_SUFFIXES,
                exclude: Iterable[str | os.PathLike] = ()) -> list[str]:
    """Expand files, folders and glob patterns into a list of input files.

    Parameters
    ----------
    paths : iterable of str
        A file is taken as it is, whatever its type. A folder is searched
        recursively for files with one of ``suffixes`` (hidden files and
        folders are skipped). A pattern with ``*``, ``?`` or ``[...]`` is
        expanded (``**`` crosses folders); the files it matches are taken,
        the folders searched.
    suffixes : iterable of str
        File types taken from folders, e.g. ``(".mid", ".csv")``.
    exclude : iterable of path
        Files never taken from folders and patterns (the batch's own
        outputs); naming one of them as an input is an error.

    Returns
    -------
    list of str
        In the order found; a file reached twice is listed once.

    Raises
    ------
    InputError
        If a path neither exists nor matches anything, or nothing is found.
    """
    suffixes = tuple(_normalise_suffix(s) for s in suffixes)
    skip = {os.path.realpath(p) for p in exclude}
    found: list[str] = []
    seen: set[str] = set()

    def take(path: str) -> None:
        real = os.path.realpath(path)
        if real not in seen and real not in skip:
            seen.add(real)
            found.append(path)

    for arg in paths:
        arg = os.fspath(arg)
        if os.path.isfile(arg):
            if os.path.realpath(arg) in skip:
                raise OutputError(f"{arg}: refusing to write over the input file")
            take(arg)
        elif os.path.isdir(arg):
            for path in _walk(arg, suffixes):
                take(path)
        elif glob.has_magic(arg):
            matches = sorted(glob.glob(arg, recursive=True))
            if not matches:
                raise InputError(f"{arg}: matches no files")
            for match in matches:
                if os.path.isdir(match):
                    for path in _walk(match, suffixes):
                        take(path)
                elif os.path.isfile(match):
                    take(match)
        else:
            raise InputError(f"{arg}: no such file or folder")
    if not found:
        raise InputError(f"no input files found (folders are searched for {' '.join(suffixes)}; --suffix chooses other types)")
    return found


def make_task(path: str) -> Task:
    """A :class:`Task` for ``path``, with its real path, size and modification time."""
    real = os.path.realpath(path)
    try:
        st = os.stat(real)
    except OSError:
        return Task(path, real, None, None)
    return Task(path, real, int(st.st_size), int(st.st_mtime_ns))


# ---- one file, in a worker -------------------------------------------------------------

def error_line(task: Task, options: BatchOptions, message: str) -> str:
    """The JSON line of an input that could not be analysed."""
    data = {"metertop_version": __version__, "path": task.path, "status": "error", "error": message,
            "file": task.file_dict(), "options": options.to_dict()}
    return json.dumps(data, separators=(",", ":"))


def _without_path(message: str, path: str) -> str:
    prefix = f"{path}: "
    return message[len(prefix):] if message.startswith(prefix) else message


def _analyse_payload(task: Task, options: BatchOptions):
    """Analyse file contents sent from elsewhere, under the file's own name (its suffix chooses the reader)."""
    from .pipeline import analyse_detailed

    with tempfile.TemporaryDirectory(prefix="metertop-") as folder:
        local = os.path.join(folder, os.path.basename(task.path) or "input")
        with open(local, "wb") as handle:
            handle.write(task.payload)
        try:
            return analyse_detailed(local, tracks=list(options.tracks) if options.tracks else None, settings=options.settings())
        except MetertopError as exc:
            raise type(exc)(str(exc).replace(local, task.path)) from None


def analyse_task(task: Task, options: BatchOptions) -> str:
    """Analyse one input; return its JSON line, ``"ok"`` or ``"error"``. Never raises for a bad file.

    Runs in worker processes (local or on a Dask cluster), so it takes and
    returns only plain, picklable values.
    """
    from .export import to_json_line
    from .pipeline import analyse_detailed

    try:
        if task.payload is not None:
            analysis = _analyse_payload(task, options)
        else:
            analysis = analyse_detailed(task.path, tracks=list(options.tracks) if options.tracks else None, settings=options.settings())
    except MetertopError as exc:
        return error_line(task, options, _without_path(str(exc), task.path))
    except Exception as exc:  # a bug must not stop a corpus run; the line says what happened
        return error_line(task, options, f"internal error ({type(exc).__name__}: {exc}); please report it")
    extra = {}
    if analysis.notes is not None and analysis.notes.source == "audio":
        from .audio import recording_summary

        extra["recording"] = recording_summary(analysis.notes)  # as 'metertop analyse --json' gives it
    return to_json_line(analysis.result, path=task.path, status="ok", error=None, file=task.file_dict(),
                        options=options.to_dict(), **extra)


# ---- local worker processes ----------------------------------------------------------------

def default_jobs() -> int:
    """One worker per core this process may use."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except AttributeError:  # not on Linux
        return max(os.cpu_count() or 1, 1)


def _context():
    # fork starts workers in milliseconds with every module already imported;
    # elsewhere (macOS, Windows) the platform's safe default spawns them.
    if sys.platform.startswith("linux"):
        return mp.get_context("fork")
    return mp.get_context()


def _warm_up() -> None:
    """Import what an analysis needs once, here, so that workers forked from this process start ready."""
    import dionysus  # noqa: F401  (for the forked workers)
    import pretty_midi  # noqa: F401

    from . import pipeline  # noqa: F401
    from .model import default_model

    default_model()


def _worker_init() -> None:
    # Ctrl-C is the parent's to handle: it stops the workers itself.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        # If the parent is killed outright (kill -9), its workers would wait
        # forever for work; ask the kernel to end them with it.
        try:
            import ctypes

            ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGKILL))  # 1 = PR_SET_PDEATHSIG
        except (OSError, AttributeError):
            pass


def _stop(pool: ProcessPoolExecutor, finished: bool) -> None:
    if not finished:  # interrupted: the workers' current files are abandoned, not awaited
        for process in list((getattr(pool, "_processes", None) or {}).values()):
            if process.is_alive():
                process.terminate()
    pool.shutdown(wait=True, cancel_futures=True)


def _pool_pass(pending: deque, options: BatchOptions, jobs: int, lost: list[Task]) -> Iterator[str]:
    """Run tasks from ``pending`` in a pool until it is empty or a worker dies; the files in flight then go to ``lost``."""
    pool = ProcessPoolExecutor(jobs, mp_context=_context(), initializer=_worker_init)
    in_flight: dict = {}
    finished = False
    try:
        while pending or in_flight:
            try:
                while pending and len(in_flight) < _IN_FLIGHT_PER_WORKER * jobs:
                    in_flight[pool.submit(analyse_task, pending[0], options)] = pending[0]
                    pending.popleft()
            except BrokenProcessPool:  # a worker died since the last wait
                lost.extend(in_flight.values())
                return
            done, _ = wait(in_flight, return_when=FIRST_COMPLETED)
            broken = False
            for future in done:
                task = in_flight.pop(future)
                try:
                    line = future.result()
                except BrokenProcessPool:
                    lost.append(task)
                    broken = True
                    continue
                yield line
            if broken:
                lost.extend(in_flight.values())
                in_flight.clear()
                return
        finished = True
    finally:
        _stop(pool, finished)


def run_local(tasks: Iterable[Task], options: BatchOptions, jobs: int) -> Iterator[str]:
    """Analyse ``tasks`` in ``jobs`` local worker processes; yield each JSON line as it is ready.

    If a worker process dies (a crash in native code, or the system killing
    it for memory), the files it may have held are run again one at a time,
    and the one that kills its worker alone gets an error line.
    """
    if jobs < 1:
        raise InputError(f"--jobs must be at least 1, got {jobs}")
    pending = deque(tasks)
    if not pending:
        return
    _warm_up()
    while pending:
        lost: list[Task] = []
        yield from _pool_pass(pending, options, jobs, lost)
        for task in lost:
            alone: list[Task] = []
            yield from _pool_pass(deque([task]), options, 1, alone)
            if alone:
                yield error_line(task, options, "the worker process died while analysing this file (a crash, or the system ran out of memory)")


# ---- tallies, summary and the flat table ----------------------------------------------

#: Columns of the ``--csv`` table, in order.
CSV_COLUMNS = ("path", "status", "error", "time_signature", "beats_per_bar", "beat_division", "grouping",
               "tempo_bpm", "beat_s", "bar_s", "first_downbeat_s", "confidence", "runner_up", "runner_up_probability",
               "notated_time_signature", "n_events", "duration_s")


def flat_row(data: dict) -> dict:
    """One row of the flat table from a parsed batch line.

    >>> flat_row({"path": "a.mid", "status": "error", "error": "file is empty"})["time_signature"]
    ''
    """
    row = {name: "" for name in CSV_COLUMNS}
    row.update(path=data["path"], status=data["status"], error=data.get("error") or "")
    if data["status"] != "ok":
        return row
    for name in ("time_signature", "beats_per_bar", "beat_division", "tempo_bpm", "beat_s", "bar_s", "confidence",
                 "notated_time_signature", "n_events", "duration_s"):
        value = data.get(name)
        row[name] = "" if value is None else value
    row["grouping"] = "+".join(str(g) for g in data["grouping"]) if data.get("grouping") else ""
    downbeats = data.get("downbeats_s") or []
    row["first_downbeat_s"] = downbeats[0] if downbeats else ""
    alternatives = data.get("alternatives") or []
    if len(alternatives) > 1:
        row["runner_up"] = alternatives[1]["time_signature"]
        row["runner_up_probability"] = alternatives[1]["probability"]
    return row


def csv_text(rows: Iterable[dict]) -> str:
    """The flat table as CSV text, with a header."""
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=CSV_COLUMNS, lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    return out.getvalue()


class Tally:
    """What a batch holds for each of its inputs: the rows of earlier runs and of this one.

    Parameters
    ----------
    tasks : list of Task
        Every input of the batch, in order.
    options : BatchOptions
    """

    def __init__(self, tasks: list[Task], options: BatchOptions):
        self._order = [t.key(options) for t in tasks]
        self._wanted = set(self._order)
        self._rows: dict[FileKey, dict] = {}
        self.earlier = 0     # inputs done in an earlier run
        self.new = 0         # lines written by this run
        self.other_lines = 0  # lines for other files, versions or options

    def add_existing(self, data: dict) -> None:
        """Count a line that was in the results file before this run."""
        key = line_key(data)
        if key not in self._wanted:
            self.other_lines += 1
            return
        if key not in self._rows:
            self.earlier += 1
        self._rows[key] = flat_row(data)  # of two lines for one input, the later wins

    def is_done(self, task: Task, options: BatchOptions) -> bool:
        return task.key(options) in self._rows

    def add_new(self, data: dict) -> dict:
        """Count a line written by this run; returns its flat row."""
        row = flat_row(data)
        self._rows[line_key(data)] = row
        self.new += 1
        return row

    def rows(self) -> list[dict]:
        """Rows of the inputs that are done, in input order."""
        return [self._rows[k] for k in self._order if k in self._rows]

    def summary(self, first_failures: int = 5) -> str:
        """Counts, the distribution of metres and the first failures, as text."""
        rows = self.rows()
        total = len(self._order)
        ok = [r for r in rows if r["status"] == "ok"]
        failed = [r for r in rows if r["status"] != "ok"]
        missing = total - len(rows)
        head = f"{total} file{'s' if total != 1 else ''}: {len(ok)} analysed, {len(failed)} failed"
        if missing:
            head += f", {missing} not yet done"
        if self.earlier:
            head += f" ({self.earlier} done in an earlier run)"
        lines = [head]
        if ok:
            lines.append("metres proposed:")
            counts = Counter(r["time_signature"] + (f" ({r['grouping']})" if r["grouping"] else "") for r in ok)
            for metre, n in counts.most_common():
                lines.append(f"  {metre:<14s} {n:7d}  {100.0 * n / len(ok):5.1f}%")
        if failed:
            shown = failed[:first_failures]
            noun = "failure" if len(failed) == 1 else "failures"
            lines.append(f"{len(failed)} {noun}" + (f", the first {len(shown)}:" if len(failed) > len(shown) else ":"))
            lines += [f"  {r['path']}: {r['error']}" for r in shown]
        if self.other_lines:
            one = self.other_lines == 1
            lines.append(f"{self.other_lines} earlier line{'' if one else 's'} in the results file "
                         f"belong{'s' if one else ''} to other files, versions or options; kept, and left out of these counts")
        return "\n".join(lines)


class Batch:
    """A batch and its results file: what is done already, what is left, and the writer of new lines.

    Opening it locks the results file and repairs a torn last line (see
    :mod:`metertop.batchfile`); use it as a context manager.

    Parameters
    ----------
    files : list of str
        The inputs, as from :func:`find_inputs`.
    output : path
        The results file; created when missing, appended to otherwise.
    options : BatchOptions
    retry_errors : bool
        Remove the error lines of these inputs (with these options) and
        analyse those inputs again.

    Attributes
    ----------
    tasks, todo : list of Task
        Every input, and those not yet done.
    tally : Tally
    failed : int
        Error lines written by this run.
    """

    def __init__(self, files: list[str], output: str | os.PathLike, options: BatchOptions, *, retry_errors: bool = False):
        self.options = options
        self.tasks = [make_task(f) for f in files]
        self.tally = Tally(self.tasks, options)
        wanted = {t.key(options) for t in self.tasks}
        self.results = ResultsFile(output)
        self.results.open(drop=lambda line: retry_errors and line["status"] == "error" and line_key(line) in wanted)
        for line in self.results.existing():
            self.tally.add_existing(line)
        self.todo = [t for t in self.tasks if not self.tally.is_done(t, options)]
        self.failed = 0

    def record(self, line: str) -> None:
        """Append a worker's line to the results file (durably) and count it."""
        self.results.append(line)
        self.failed += self.tally.add_new(json.loads(line))["status"] != "ok"

    def close(self) -> None:
        self.results.close()

    def __enter__(self) -> "Batch":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
