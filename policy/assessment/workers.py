"""Worker processes on this machine: one pool per command, reused by every task, and a default
number of workers chosen from the measured size of the work.

- :class:`LocalProcesses` starts its processes on its first :meth:`~LocalProcesses.map` and keeps
  them until :meth:`~LocalProcesses.close` (or the end of a ``with`` block): a command that
  bootstraps, then sweeps, pays the start of its workers (each imports the numerical libraries,
  about 1.5 s of CPU) once. Each map's ``shared`` data is written once to a temporary file
  under a fresh token; a worker reads it when it first meets that token and keeps it for the
  map's other tasks (statistics keep warm solvers there), never for another map's.
- :class:`Adaptive` is the default: it runs the first tasks in this process and times them;
  the rest go to worker processes only when they would take clearly longer than starting the
  workers, and only as many workers as there are idle cores (``os.getloadavg``): on a busy
  machine the default is never slower than one worker.

Results do not depend on where tasks run (tasks are pure; see
:mod:`policy.assessment.uncertainty`).
"""

from __future__ import annotations

import os
import pickle
import shutil
import tempfile
import time
import uuid
from concurrent.futures import ProcessPoolExecutor, as_completed
from multiprocessing import get_context
from pathlib import Path
from typing import Any, Callable

__all__ = ["LocalProcesses", "Adaptive", "available_cores", "idle_cores", "START_SECONDS"]

#: seconds of work a worker process must save before starting one pays (its start imports the
#: numerical libraries: about 1.5 s of CPU, measured; docs/performance.md)
START_SECONDS = 2.0

_HELD: tuple[str, Any] | None = None


def _run(fn: Callable[[Any, Any], Any], path: str, token: str, task: Any) -> Any:
    """Run one task in a worker: read the map's shared data once per token, keep it for the next task."""
    global _HELD
    if _HELD is None or _HELD[0] != token:
        with open(path, "rb") as handle:
            _HELD = (token, pickle.load(handle))
    return fn(_HELD[1], task)


def available_cores() -> int:
    """Cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        return os.cpu_count() or 1


def idle_cores() -> int:
    """Cores not busy with other work: available cores minus the one-minute load average
    (which counts this process too, so one busy core is ours)."""
    cores = available_cores()
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # pragma: no cover - no load average on this system
        return cores
    return max(1, min(cores, int(cores - load + 1.0)))


class LocalProcesses:
    """Run tasks in worker processes on this machine (``spawn`` start method), kept between maps.

    Worker processes import the caller's main module again, so a script that runs a bootstrap
    with more than one worker must do so under ``if __name__ == "__main__":`` (notebooks and the
    command line need nothing). Use as a context manager, or call :meth:`close`, to stop them.

    Parameters
    ----------
    workers : int
        Number of processes.
    """

    def __init__(self, workers: int):
        self.workers = int(workers)
        self._pool: ProcessPoolExecutor | None = None
        self._folder: str | None = None

    def map(self, fn, shared, tasks, on_done=None):
        results: list = [None] * len(tasks)
        if not tasks:
            return results
        if self._pool is None:
            self._pool = ProcessPoolExecutor(self.workers, mp_context=get_context("spawn"))
            self._folder = tempfile.mkdtemp(prefix="policy-tasks-")
        token = uuid.uuid4().hex
        path = Path(self._folder) / token
        with open(path, "wb") as handle:
            pickle.dump(shared, handle, protocol=pickle.HIGHEST_PROTOCOL)
        try:
            futures = {self._pool.submit(_run, fn, str(path), token, task): i for i, task in enumerate(tasks)}
            for future in as_completed(futures):
                i = futures[future]
                results[i] = future.result()
                if on_done is not None:
                    on_done(i)
        except BaseException:
            self.close()
            raise
        finally:
            path.unlink(missing_ok=True)
        return results

    def close(self) -> None:
        """Stop the worker processes (a later map starts new ones)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        if self._folder is not None:
            shutil.rmtree(self._folder, ignore_errors=True)
            self._folder = None

    def __enter__(self) -> "LocalProcesses":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self) -> None:  # a pool nobody closed still ends with its owner
        try:
            self.close()
        except Exception:
            pass


class Adaptive:
    """The default runner: this process, or worker processes when the measured work pays for them.

    The first tasks run here, timed (the second one when there are three or more: a first task
    may be lighter, e.g. the bootstrap's point estimates); if the remaining ones would take
    at most 0.8 of their time here once ``START_SECONDS`` of start-up is added, they are spread over
    ``min(max_workers, idle cores, tasks left)`` processes (2 or more), which are then kept for
    the command's later maps; otherwise they run here too.

    Parameters
    ----------
    max_workers : int, optional
        Most processes to use (default: every available core).
    """

    def __init__(self, max_workers: int | None = None):
        self.max_workers = available_cores() if max_workers is None else int(max_workers)
        self.pool: LocalProcesses | None = None
        self.decisions: list[str] = []

    @property
    def workers(self) -> int:
        return self.pool.workers if self.pool is not None else 1

    def map(self, fn, shared, tasks, on_done=None):
        results: list = []
        probe = min(len(tasks), 2 if len(tasks) >= 3 else 1)
        seconds = 0.0
        for i in range(probe):
            start = time.perf_counter()
            results.append(fn(shared, tasks[i]))
            seconds = time.perf_counter() - start
            if on_done is not None:
                on_done(i)
        rest = list(range(probe, len(tasks)))
        if not rest:
            return results
        work = seconds * len(rest)
        n = min(self.max_workers, idle_cores(), len(rest))
        start_cost = 0.0 if self.pool is not None and self.pool.workers >= n else START_SECONDS
        if n >= 2 and work / n + start_cost < 0.8 * work:
            if self.pool is None or self.pool.workers < n:
                if self.pool is not None:
                    self.pool.close()
                self.pool = LocalProcesses(n)
            self.decisions.append(f"{len(rest)} tasks of {seconds:.2f} s on {n} worker processes")
            more = self.pool.map(fn, shared, [tasks[i] for i in rest],
                                 None if on_done is None else (lambda k: on_done(rest[k])))
            return results + more
        self.decisions.append(f"{len(rest)} tasks of {seconds:.2f} s in this process")
        for i in rest:
            results.append(fn(shared, tasks[i]))
            if on_done is not None:
                on_done(i)
        return results

    def close(self) -> None:
        if self.pool is not None:
            self.pool.close()
            self.pool = None

    def __enter__(self) -> "Adaptive":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
