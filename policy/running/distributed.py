"""Where independent tasks run: this process, worker processes on this machine, or a cluster.

Bootstrap replicates (in fixed chunks), constrained sweep points (in fixed blocks) and the
scenarios of a batch are independent tasks, each a pure function of data sent once and a small
task description. :class:`policy.assessment.uncertainty.TaskRunner` is the one interface that runs them;
this module adds the runner on **Dask distributed** (:class:`DaskRunner`) and the one option
that picks a runner, ``--run-on``:

``here`` (the default)
    In this process, one task after the other. Needs nothing beyond the tool itself.
``local`` or ``local:N``
    A Dask cluster of N worker processes (default: every core) started on this machine for the
    command and stopped after it.
``tcp://HOST:PORT`` (or any address a Dask client accepts)
    A running Dask cluster, given by its scheduler's address.

Dask is an optional extra (``pip install "policy-release-rules[distributed]"``); asking for
``local`` or an address without it says how to install it.

Results are the same bits wherever tasks run: every task is a pure function of its inputs,
random numbers come from per-replicate seed streams, tasks are fixed chunks that do not depend
on the number of workers, each task that solves linear programs starts from a cold solver
(never from whatever its worker solved before), and a worker runs its numerical libraries on
one thread (a matrix product split over threads may add in another order).

If a worker dies, Dask runs its tasks again elsewhere (a task is retried up to
:data:`RETRIES` times); if a task cannot be completed, the run stops with
:class:`policy.errors.RunError` and nothing is written.
"""

from __future__ import annotations

import os
import pickle
import sys
import threading
from contextlib import contextmanager
from typing import Any, Callable, Iterator, Sequence

from policy.errors import InputError, RunError
from policy.assessment.uncertainty import InProcess, TaskRunner, available_cores

__all__ = ["INSTALL_HINT", "RETRIES", "DaskRunner", "run_on", "describe_where"]

INSTALL_HINT = ('pip install "policy-release-rules[distributed]" (from a checkout of the tool: '
                'pip install ".[distributed]")')
#: times a failed task is run again (a worker that dies is handled by the scheduler itself)
RETRIES = 2
#: seconds to wait for a cluster's scheduler to answer
CONNECT_TIMEOUT = 20


def _import_distributed(where: str):
    try:
        import distributed
    except ImportError:
        raise InputError(f"--run-on {where!r} runs tasks on Dask distributed, an optional extra that is not installed; "
                         f"install it with: {INSTALL_HINT}. Without it, --run-on here (the default) runs everything "
                         "in this process.") from None
    return distributed


# ----------------------------------------------------------------------------------------------
# On a worker
# ----------------------------------------------------------------------------------------------
_LOCAL = threading.local()
_BLAS_LIMITED = []


def _usual_malloc() -> None:
    """Undo Dask's low glibc trim threshold on a worker (set through ``MALLOC_TRIM_THRESHOLD_``
    by its nanny). With it every large numpy temporary is a fresh ``mmap`` whose pages fault in
    again: the bootstrap's statistic ran 2.3x slower on such a worker (measured). Linux only;
    elsewhere, or if glibc is not there, nothing changes."""
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ or not sys.platform.startswith("linux"):
        return
    import ctypes

    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(-3, 32 << 20)  # M_MMAP_THRESHOLD: blocks below 32 MiB come from the heap
        libc.mallopt(-1, 64 << 20)  # M_TRIM_THRESHOLD
    except (OSError, AttributeError):
        pass


def _run_task(fn: Callable[[Any, Any], Any], shared: Any, task: Any, token: str) -> Any:
    """Run one task on a worker.

    Each worker thread works on its own copy of ``shared`` (statistics keep warm solvers between
    calls, which must not be shared by two threads), and the worker process keeps its BLAS on
    one thread for good: a per-call limit would be undone by a neighbouring thread's exit.
    """
    if not _BLAS_LIMITED:
        from threadpoolctl import threadpool_limits

        _BLAS_LIMITED.append(threadpool_limits(limits=1, user_api="blas"))
        _usual_malloc()
    own = getattr(_LOCAL, "shared", None)
    if own is None or own[0] != token:
        own = (token, pickle.loads(pickle.dumps(shared, protocol=pickle.HIGHEST_PROTOCOL)))
        _LOCAL.shared = own
    return fn(own[1], task)


# ----------------------------------------------------------------------------------------------
# The runner
# ----------------------------------------------------------------------------------------------
class DaskRunner:
    """Run tasks on a Dask distributed cluster (the :class:`~policy.assessment.uncertainty.TaskRunner` interface).

    Parameters
    ----------
    client : distributed.Client
        A client connected to the cluster's scheduler.
    retries : int
        Times a task that raised is run again before the run stops.

    Notes
    -----
    ``shared`` is scattered to every worker once per :meth:`map` and released after it; the
    tasks are submitted at once and their results gathered as they finish (``on_done`` is
    called for each, in this process). A task whose worker died is rescheduled by Dask itself.
    """

    def __init__(self, client, retries: int = RETRIES, label: str | None = None):
        self.client = client
        self.retries = int(retries)
        self.label = label or f"the Dask cluster at {client.scheduler.address}"

    @property
    def workers(self) -> int:
        """Worker threads in the cluster now."""
        info = self.client.scheduler_info()
        return max(1, sum(w.get("nthreads", 1) for w in info.get("workers", {}).values()))

    def map(self, fn: Callable[[Any, Any], Any], shared: Any, tasks: Sequence[Any],
            on_done: Callable[[int], None] | None = None) -> list:
        distributed = _import_distributed(self.label)
        from dask.base import tokenize

        if not tasks:
            return []
        token = tokenize(os.getpid(), id(shared), threading.get_ident(), os.urandom(8))
        try:
            shared_future = self.client.scatter([shared], broadcast=True, hash=False)[0]
        except Exception as exc:  # lost connection, no workers, ...
            raise RunError(f"could not send the tasks' data to {self.label}: {type(exc).__name__}: {exc}") from None
        name = getattr(fn, "__name__", "task")
        futures = [self.client.submit(_run_task, fn, shared_future, task, token, key=f"policy-{name}-{token}-{i}",
                                      retries=self.retries, pure=False) for i, task in enumerate(tasks)]
        position = {f.key: i for i, f in enumerate(futures)}
        results: list = [None] * len(tasks)
        try:
            for future in distributed.as_completed(futures):
                i = position[future.key]
                try:
                    results[i] = future.result()
                except Exception as exc:
                    raise self._failed(exc, i, len(tasks)) from None
                if on_done is not None:
                    on_done(i)
        finally:
            for f in futures:
                f.release()
            shared_future.release()
        return results

    def _failed(self, exc: BaseException, i: int, n: int) -> BaseException:
        from policy.errors import PolicyError

        if isinstance(exc, PolicyError):  # the task's own error (bad data, infeasible, ...): as in-process
            return exc
        kind = type(exc).__name__
        if kind == "KilledWorker":
            why = ("its worker process died each time it ran it (out of memory, killed, or a crash in a "
                   "numerical library)")
        elif kind in ("CancelledError", "FutureCancelledError"):
            why = "the cluster cancelled it (its scheduler or client lost the connection)"
        else:
            why = f"it raised {kind}: {exc}"
        return RunError(f"task {i + 1} of {n} could not be completed on {self.label}: {why}. The run was stopped "
                        "and nothing was written; run again, or with --run-on here.")


# ----------------------------------------------------------------------------------------------
# The option
# ----------------------------------------------------------------------------------------------
def describe_where(where: str | None) -> str:
    """Words for where tasks run, for messages and outputs."""
    where = (where or "here").strip()
    if where == "here":
        return "in this process"
    if where.startswith("local"):
        n = where.partition(":")[2] or str(available_cores())
        return f"on a local Dask cluster of {n} worker processes"
    return f"on the Dask cluster at {where}"


def _local_workers(where: str) -> int:
    _, sep, count = where.partition(":")
    if not sep:
        return available_cores()
    try:
        n = int(count)
    except ValueError:
        n = 0
    if n < 1:
        raise InputError(f"--run-on {where!r}: the number of local workers must be a positive integer, e.g. local:2.")
    most = MAX_LOCAL_WORKERS_PER_CORE * available_cores()
    if n > most:
        raise InputError(f"--run-on {where!r}: {n:,} local worker processes is more than this machine can run "
                         f"({available_cores()} cores; at most {most}). Use local (one per core) or a smaller N.")
    from policy.inputs.limits import require_memory

    require_memory(n * WORKER_BYTES, f"--run-on {where!r} ({n:,} worker processes)", "Use fewer workers.")
    return n


#: most local worker processes per core (more only add waiting and memory)
MAX_LOCAL_WORKERS_PER_CORE = 4
#: memory a worker process takes before it gets any task (Python, numpy, pandas, Dask; measured
#: about 150 MB, a lower bound)
WORKER_BYTES = 150 << 20


@contextmanager
def run_on(where: str | None = None) -> Iterator[TaskRunner]:
    """The runner for ``--run-on`` (see the module notes); a local cluster lives as long as the context.

    Raises
    ------
    InputError
        An unknown value, or Dask asked for but not installed (the message says how to install it).
    RunError
        The cluster's scheduler cannot be reached.
    """
    where = (where or "here").strip()
    if where == "here":
        yield InProcess()
        return
    if where == "local" or where.startswith("local:"):
        n = _local_workers(where)
        distributed = _import_distributed(where)
        import dask

        # one thread per worker process: the tool's tasks hold the GIL between numerical calls
        with dask.config.set({"distributed.worker.daemon": False}), \
                distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                                         host="127.0.0.1") as cluster, \
                distributed.Client(cluster) as client:
            yield DaskRunner(client, label=f"a local Dask cluster of {n} workers")
        return
    if "://" not in where and ":" not in where:
        raise InputError(f"--run-on {where!r} is not a place to run tasks; expected here, local, local:N or a Dask "
                         "scheduler address such as tcp://10.0.0.5:8786.")
    distributed = _import_distributed(where)
    try:
        client = distributed.Client(where, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError) as exc:
        raise RunError(f"could not reach a Dask scheduler at {where!r} ({type(exc).__name__}: {exc}); start one with "
                       "`dask scheduler` and workers with `dask worker ADDRESS --nthreads 1`, or use --run-on local.") from None
    except (ValueError, TypeError) as exc:
        raise InputError(f"--run-on {where!r}: no Dask scheduler answered there ({exc}); expected the address of a running "
                         "scheduler such as tcp://10.0.0.5:8786 (tls:// addresses also need Dask's TLS settings: "
                         "distributed.comm.tls in Dask's configuration).") from None
    except MemoryError:
        raise RunError(f"--run-on {where!r}: what answers there is not a Dask scheduler (it sent a reply no scheduler "
                       "sends); check the address and port.") from None
    try:
        yield DaskRunner(client, label=f"the Dask cluster at {where}")
    finally:
        client.close()
