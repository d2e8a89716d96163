"""The results file of a batch: JSON Lines that survive a crash and resume.

Conventions
-----------
- One JSON object per line, each ending in a newline. Every line carries
  ``path``, ``status`` (``"ok"`` or ``"error"``), ``error``, ``file`` (the
  input's real path, ``size_bytes`` and ``mtime_ns`` when it was analysed) and
  ``options`` (everything that changes a result, the version included).
- A line is appended with a single write, then flushed and synced to disk,
  so that a killed run loses at most the line being written.
- On opening, a last line without its newline is the remnant of a killed
  run: the file is rewritten without it (atomically, through
  :mod:`metertop.outputs`) and that input is analysed again.
- A file whose complete lines are not all batch results is never changed:
  it is somebody else's data, and opening it is an
  :class:`~metertop.errors.OutputError`.
- While a batch writes the file it holds an exclusive lock on it, so that a
  second batch on the same file stops with a clear message instead of
  writing duplicates.
"""

from __future__ import annotations

import json
import os
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from .errors import OutputError
from .outputs import atomic_path

try:  # POSIX only; elsewhere a second writer is not detected
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None

__all__ = ["ResultsFile", "FileKey", "line_key", "REQUIRED_KEYS"]

#: Keys without which a line is not a batch result.
REQUIRED_KEYS = ("path", "status", "error", "file", "options")
# Every line starts with this (the first key of the analyse object and of an
# error line), so a truncated remnant of our own can be told from foreign data.
_LINE_START = b'{"metertop_version":'

#: Identity of an analysed input: real path, size, modification time and options.
FileKey = tuple


def line_key(data: dict) -> FileKey:
    """The identity under which a parsed line counts as done.

    Examples
    --------
    >>> line_key({"file": {"path": "/a.mid", "size_bytes": 3, "mtime_ns": 7}, "options": {"engine": "x"}})
    ('/a.mid', 3, 7, '{"engine":"x"}')
    """
    f = data["file"]
    return (f["path"], f["size_bytes"], f["mtime_ns"], json.dumps(data["options"], sort_keys=True, separators=(",", ":")))


@dataclass(frozen=True)
class _Scan:
    lines: list[tuple[int, dict]]  # (byte offset of the line's start, parsed line)
    complete_bytes: int            # length of the file up to the last newline
    total_bytes: int


class ResultsFile:
    """An append-only, crash-safe results file; use as a context manager.

    Parameters
    ----------
    path : str or os.PathLike
        The results file; created when missing.

    Examples
    --------
    >>> import tempfile, pathlib, json
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "r.jsonl"
    >>> line = json.dumps({"metertop_version": "0", "path": "a.mid", "status": "error", "error": "bad",
    ...                    "file": {"path": "/a.mid", "size_bytes": 1, "mtime_ns": 2}, "options": {}})
    >>> with ResultsFile(p) as results:
    ...     results.append(line)
    >>> with ResultsFile(p) as results:
    ...     [d["path"] for d in results.existing()]
    ['a.mid']
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        self._fd: int | None = None
        self._lines: list[dict] = []
        self.dropped_tail = False
        self.dropped_lines = 0

    # -- opening -----------------------------------------------------------------

    def __enter__(self) -> "ResultsFile":
        if self._fd is None:
            self.open()
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def open(self, drop: Callable[[dict], bool] | None = None) -> None:
        """Lock the file, read what is there, repair a torn last line.

        Parameters
        ----------
        drop : callable, optional
            Complete lines for which ``drop(line)`` is true are removed too
            (``--retry-errors``), in the same atomic rewrite.
        """
        created = not self.path.exists()
        self._fd = self._open_locked()
        try:
            self._read(drop, created)
        except BaseException:
            self.close()
            raise

    def _read(self, drop, created: bool) -> None:
        if created:
            _sync_folder(self.path)
        scan = self._scan()
        dropped = [d for _, d in scan.lines if drop is not None and drop(d)]
        self.dropped_tail = scan.complete_bytes < scan.total_bytes
        if self.dropped_tail or dropped:
            keep = [(offset, d) for offset, d in scan.lines if not (drop is not None and drop(d))]
            self._rewrite([offset for offset, _ in keep], scan.complete_bytes)
            scan = _Scan(keep, scan.complete_bytes, scan.complete_bytes)
        self._lines = [d for _, d in scan.lines]
        self.dropped_lines = len(dropped)

    def _open_locked(self) -> int:
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o666)
        except OSError as exc:
            raise OutputError(f"{self.path}: cannot be opened for writing ({exc.strerror or exc})") from None
        if fcntl is not None:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(fd)
                raise OutputError(f"{self.path}: another metertop batch is writing to it; wait for it or choose another -o") from None
        return fd

    def _scan(self) -> _Scan:
        lines: list[tuple[int, dict]] = []
        offset = 0
        complete = 0
        try:
            handle = open(self.path, "rb")
        except OSError as exc:
            raise OutputError(f"{self.path}: cannot be read ({exc.strerror or exc})") from None
        with handle:
            for number, raw in enumerate(handle, 1):
                start, offset = offset, offset + len(raw)
                if not raw.endswith(b"\n"):
                    self._check_tail(raw, number)
                    break
                complete = offset
                if not raw.strip():
                    continue
                data = _parse(raw)
                if data is None:
                    raise OutputError(f"{self.path}: line {number} is not a metertop batch result; "
                                      f"choose another -o (the file was left as it is)")
                lines.append((start, data))
        return _Scan(lines, complete, offset)

    def _check_tail(self, raw: bytes, number: int) -> None:
        """A last line without a newline must be a torn line of ours, else the file is foreign."""
        if _parse(raw) is not None or raw.startswith(_LINE_START) or _LINE_START.startswith(raw):
            return
        raise OutputError(f"{self.path}: line {number} is not a metertop batch result; "
                          f"choose another -o (the file was left as it is)")

    def _rewrite(self, keep_offsets: list[int], complete_bytes: int) -> None:
        """Rewrite the file with only the kept lines, atomically, and move the lock to the new file."""
        with atomic_path(self.path) as tmp, open(self.path, "rb") as src, open(tmp, "wb") as dst:
            shutil.copymode(self.path, tmp)
            keep = set(keep_offsets)
            position = 0
            for raw in src:
                if position >= complete_bytes:
                    break
                if position in keep:
                    dst.write(raw)
                position += len(raw)
            dst.flush()
        os.close(self._fd)
        self._fd = self._open_locked()

    # -- reading and writing -------------------------------------------------------

    def existing(self) -> Iterator[dict]:
        """The complete lines that were in the file when it was opened, parsed."""
        return iter(self._lines)

    def append(self, line: str) -> None:
        """Append one JSON line (without its newline) and make it durable."""
        if self._fd is None:
            raise RuntimeError("ResultsFile is not open")
        payload = (line.rstrip("\n") + "\n").encode("utf-8")
        try:
            written = os.write(self._fd, payload)
            while written < len(payload):  # a short write (full disk, signal): finish or fail
                written += os.write(self._fd, payload[written:])
            (os.fdatasync if hasattr(os, "fdatasync") else os.fsync)(self._fd)
        except OSError as exc:
            raise OutputError(f"{self.path}: could not write ({exc.strerror or exc}); "
                              f"the lines written so far are kept, and a rerun continues from them") from None

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)  # closing releases the lock
            self._fd = None


def _parse(raw: bytes) -> dict | None:
    """A parsed batch line, or None when ``raw`` is not one."""
    try:
        data = json.loads(raw)
    except (ValueError, UnicodeDecodeError):
        return None
    if not isinstance(data, dict) or any(k not in data for k in REQUIRED_KEYS):
        return None
    f = data["file"]
    if not isinstance(f, dict) or any(k not in f for k in ("path", "size_bytes", "mtime_ns")):
        return None
    return data


def _sync_folder(path: Path) -> None:
    """Make a newly created file's folder entry durable (POSIX); best effort elsewhere."""
    try:
        fd = os.open(path.parent if str(path.parent) else ".", os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
