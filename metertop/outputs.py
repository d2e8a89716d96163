"""Writing output files without losing anything.

Conventions
-----------
Every file metertop writes goes through :func:`check_target` and then
:func:`atomic_write`:

* an output that names one of the inputs is refused, ``--force`` or not;
* an existing output is refused unless ``force`` is true;
* the bytes go to a temporary file in the target's folder, which is flushed,
  synced and then renamed over the target, so a reader never sees half a
  file and a failure (disk full, no permission) leaves no partial file.

Problems are :class:`~metertop.errors.OutputError` (a kind of InputError), so
the command line reports them as one line with exit code 2.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterable, Iterator

from .errors import OutputError

__all__ = ["check_target", "atomic_write", "atomic_path"]


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def check_target(target: str | os.PathLike, *, inputs: Iterable[str | os.PathLike] = (), force: bool = False) -> Path:
    """Check that ``target`` may be written; return it as a Path.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> check_target(d / "new.mid").name
    'new.mid'
    >>> (d / "old.mid").write_bytes(b"x")
    1
    >>> check_target(d / "old.mid")
    Traceback (most recent call last):
    ...
    metertop.errors.OutputError: ...old.mid exists; give --force to replace it
    """
    path = Path(target)
    for source in inputs:
        src = Path(source)
        if _same_file(path, src) or path.resolve() == src.resolve():
            raise OutputError(f"{path}: refusing to write over the input file")
    if path.is_dir():
        raise OutputError(f"{path} is a folder, not a file name")
    if path.exists() and not force:
        raise OutputError(f"{path} exists; give --force to replace it")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise OutputError(f"{path}: folder {parent} does not exist")
    return path


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success.

    For writers that want a file name (matplotlib, music21, pretty_midi). On
    any exception the temporary file is removed and ``target`` is untouched.
    """
    path = Path(target)
    parent = path.parent if str(path.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part" + path.suffix, dir=parent)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write here ({exc.strerror or exc})") from None
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        _give_usual_mode(tmp_path, path)
        yield tmp_path
        with open(tmp_path, "rb+") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp_path, path)
    except OSError as exc:
        tmp_path.unlink(missing_ok=True)
        raise OutputError(f"{path}: could not write ({exc.strerror or exc}); nothing was written") from None
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise


def _give_usual_mode(tmp: Path, target: Path) -> None:
    """mkstemp makes a private file (0600); give it the target's mode, or what a new file would get."""
    try:
        mode = target.stat().st_mode & 0o7777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    os.chmod(tmp, mode)


def atomic_write(target: str | os.PathLike, data: bytes | str) -> Path:
    """Write ``data`` to ``target`` atomically (see the module notes); return the path."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    with atomic_path(target) as tmp:
        try:
            with open(tmp, "wb") as handle:
                handle.write(payload)
                handle.flush()
        except OSError as exc:
            raise OutputError(f"{target}: could not write ({exc.strerror or exc}); nothing was written") from None
    return Path(target)
