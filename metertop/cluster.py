"""Run a batch on an existing Dask distributed cluster (the ``cluster`` extra).

Conventions
-----------
- Dask is imported here and only here, when a batch names a scheduler.
- Each file is read on this machine and its bytes are sent with the task,
  so the workers need metertop (the same version) but no access to this
  machine's disk.
- At most a few tasks per worker thread are in flight; each JSON line comes
  back as soon as it is ready, so the results file grows while the cluster
  works and an interrupted run loses nothing finished.
- A task that kills its workers repeatedly (Dask's ``KilledWorker``) gives
  its file an error line; any other failure (the scheduler lost, say) stops
  the batch, so that a broken cluster never writes error lines for files
  that are fine.
"""

from __future__ import annotations

from typing import Iterable, Iterator

from ._version import __version__
from .batch import BatchOptions, Task, analyse_task, error_line
from .errors import InputError

__all__ = ["require_dask", "ClusterRunner"]

_INSTALL = "pip install 'metertop[cluster]'"
# Tasks in flight per worker thread.
_IN_FLIGHT_PER_THREAD = 4
#: Seconds to wait for the scheduler to answer.
CONNECT_TIMEOUT_S = 10.0
#: Seconds to wait for a cluster's first worker.
WORKER_WAIT_S = 60.0


def require_dask() -> None:
    """Raise a one-line :class:`InputError` when Dask's distributed scheduler is not installed."""
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise InputError(f"--scheduler needs Dask's distributed scheduler, which is not installed: {_INSTALL}") from None


def _quiet_dask_logs() -> None:
    import logging

    import distributed  # noqa: F401  (its loggers exist once it is imported)

    for name in ["distributed"] + [n for n in logging.root.manager.loggerDict if n.startswith("distributed.")]:
        logging.getLogger(name).setLevel(logging.CRITICAL)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _installed_version() -> str:
    """Runs on each worker: the metertop version it imports."""
    from metertop import __version__ as version

    return version


def _connect(address: str, timeout_s: float):
    from distributed import Client

    try:
        return Client(address, timeout=timeout_s, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {address} ({_first_line(exc)})") from None


def _check_workers(client, address: str, wait_s: float) -> int:
    """Wait for a worker, check that every worker runs this metertop version; return the worker threads."""
    try:
        client.wait_for_workers(1, timeout=wait_s)
    except TimeoutError:
        raise InputError(f"the Dask cluster at {address} has no workers (waited {wait_s:g} s)") from None
    try:
        versions = client.run(_installed_version)
    except Exception as exc:  # deserialising on a worker without metertop fails in many ways
        raise InputError(f"the workers of {address} cannot run metertop ({type(exc).__name__}); "
                         f"install metertop {__version__} on them") from None
    other = sorted({v for v in versions.values() if v != __version__})
    if other:
        raise InputError(f"the workers of {address} run metertop {', '.join(other)}, this machine {__version__}; "
                         f"install the same version everywhere")
    return max(sum(client.nthreads().values()), 1)


def _with_payload(task: Task) -> Task | str:
    """The task with the file's bytes, or the error message when the file cannot be read here."""
    try:
        with open(task.path, "rb") as handle:
            data = handle.read()
    except OSError as exc:
        return f"cannot be read ({exc.strerror or exc})"
    return Task(task.path, task.real_path, task.size_bytes, task.mtime_ns, data)


class ClusterRunner:
    """A connection to a Dask cluster that analyses batch tasks; close it when done.

    Parameters
    ----------
    address : str
        The scheduler's address, e.g. ``tcp://10.0.0.5:8786``.
    connect_timeout_s, worker_wait_s : float, optional
        How long to wait for the scheduler, and for its first worker
        (``CONNECT_TIMEOUT_S``, ``WORKER_WAIT_S`` by default).
    quiet : bool
        Silence the Dask client's own log messages in this process; the
        failures that matter are raised as one-line errors instead.

    Raises
    ------
    InputError
        If Dask is missing, the scheduler cannot be reached, it has no
        workers, or the workers run another metertop version.
    """

    def __init__(self, address: str, *, connect_timeout_s: float | None = None, worker_wait_s: float | None = None,
                 quiet: bool = True):
        require_dask()
        if quiet:
            _quiet_dask_logs()
        self.address = address
        self.client = _connect(address, CONNECT_TIMEOUT_S if connect_timeout_s is None else connect_timeout_s)
        try:
            self.threads = _check_workers(self.client, address, WORKER_WAIT_S if worker_wait_s is None else worker_wait_s)
        except BaseException:
            self.client.close()
            raise

    def run(self, tasks: Iterable[Task], options: BatchOptions) -> Iterator[str]:
        """Analyse ``tasks`` on the cluster; yield each JSON line as it is ready."""
        from distributed import as_completed

        client = self.client
        window = _IN_FLIGHT_PER_THREAD * self.threads
        todo = iter(tasks)
        queue = as_completed(loop=client.loop)
        futures: dict = {}
        ready: list[str] = []  # lines made here, for files that could not be read

        def submit_next() -> bool:
            for task in todo:
                shipped = _with_payload(task)
                if isinstance(shipped, str):
                    ready.append(error_line(task, options, shipped))
                    continue
                future = client.submit(analyse_task, shipped, options, pure=False)
                futures[future] = task
                queue.add(future)
                return True
            return False

        try:
            while len(futures) < window and submit_next():
                pass
            yield from ready
            ready.clear()
            for future in queue:
                task = futures.pop(future)
                try:
                    line = future.result()
                except Exception as exc:
                    if type(exc).__name__ != "KilledWorker":  # the cluster itself failed: stop, write no false errors
                        raise InputError(f"the Dask cluster at {self.address} failed ({type(exc).__name__}: {_first_line(exc)}); "
                                         f"every finished file is kept: rerun to continue") from None
                    # this file's task took its workers down again and again
                    line = error_line(task, options, f"the cluster's workers died while analysing this file ({_first_line(exc)})")
                future.release()
                yield line
                submit_next()
                yield from ready
                ready.clear()
        finally:
            for future in futures:
                future.cancel()

    def close(self) -> None:
        self.client.close()

    def __enter__(self) -> "ClusterRunner":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
