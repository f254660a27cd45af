"""One small execution layer: run independent pieces of work in this process, in local processes, or on Dask.

``learn`` and ``simulate`` cut their work into pieces (chunks of sessions or
of simulated units) whose boundaries depend only on the input, never on how
many workers there are, and combine the pieces' results in the order of the
pieces. So the numbers are the same, bit for bit, whichever runs them:

``InProcess``
    The default: one command, no set-up.
``LocalProcesses``
    ``--workers K`` processes on this machine (``concurrent.futures``).
``DaskCluster``
    ``--scheduler tcp://HOST:PORT``: a running Dask distributed scheduler
    and its workers (``pip install '.[cluster]'``).

A worker that dies mid-run loses only the pieces it held: they are run again
(Dask reschedules them itself; the local pool is restarted for the pieces
not yet returned), and each piece's result is taken exactly once, so nothing
is counted twice.

References
----------
M. Rocklin, "Dask: parallel computation with blocked algorithms and task
scheduling", Proceedings of the 14th Python in Science Conference, 2015.
"""

from __future__ import annotations

import multiprocessing
import os
import sys
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from typing import Any

from troubleshoot.errors import TroubleshootError

#: How often a local pool is restarted after a worker process died before giving up.
LOCAL_RESTARTS = 3
#: Seconds to wait for a Dask scheduler to answer.
CONNECT_TIMEOUT = 20


class ExecutionError(TroubleshootError):
    """The work could not be run where it was asked to run (no scheduler, Dask missing, workers lost)."""


Progress = Callable[[int, int], None]


class InProcess:
    """Runs every piece in this process, in order."""

    workers = 1
    where = "this process"

    def map(self, fn: Callable, items: Sequence, shared: Any = None, progress: Progress | None = None,
            on_result: Callable[[int, Any], Any] | None = None) -> list:
        """``[fn(item, shared) for item in items]``, in the order of ``items``.

        ``progress(done, total)`` is called as pieces finish; ``on_result(index, result)``, when
        given, sees each piece's result once as it arrives (any order) and what it returns is kept
        in its place (so a large result can be written out and dropped).
        """
        out = []
        for i, item in enumerate(items):
            result = fn(item, shared)
            out.append(on_result(i, result) if on_result is not None else result)
            if progress is not None:
                progress(i + 1, len(items))
        return out

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class LocalProcesses(InProcess):
    """Runs the pieces on ``workers`` processes of this machine; results in the order of the pieces.

    Piece i always goes to process i mod ``workers`` (each process has its own queue), so a
    process meets the same pieces in every round of an iterative job (each EM iteration) and
    reuses what it built for them (compiled join trees); the results do not depend on it.
    """

    def __init__(self, workers: int):
        self.workers = int(workers)
        self.where = f"{self.workers} local processes"
        self._pools: list[ProcessPoolExecutor | None] = [None] * self.workers

    def _new_pool(self) -> ProcessPoolExecutor:
        method = "spawn" if sys.platform == "win32" else "fork"
        return ProcessPoolExecutor(1, mp_context=multiprocessing.get_context(method))

    def map(self, fn: Callable, items: Sequence, shared: Any = None, progress: Progress | None = None,
            on_result: Callable[[int, Any], Any] | None = None) -> list:
        results: dict[int, Any] = {}
        restarts = 0
        while len(results) < len(items):
            pending = {}
            for i, item in enumerate(items):
                if i not in results:
                    w = i % self.workers
                    pool = self._pools[w]
                    if pool is None:
                        pool = self._pools[w] = self._new_pool()
                    pending[pool.submit(fn, item, shared)] = i
            broken: set[int] = set()
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for future in done:
                    i = pending.pop(future)
                    try:
                        result = future.result()  # a piece is taken once, when it returns
                    except BrokenProcessPool:
                        broken.add(i % self.workers)  # the process died: its pieces are run again
                        continue
                    results[i] = on_result(i, result) if on_result is not None else result
                    if progress is not None:
                        progress(len(results), len(items))
            if broken:
                for w in broken:
                    pool = self._pools[w]
                    if pool is not None:
                        pool.shutdown(wait=False, cancel_futures=True)
                    self._pools[w] = None
                restarts += 1
                if restarts > LOCAL_RESTARTS:
                    raise ExecutionError(f"worker processes died {restarts} times; {len(items) - len(results)} "
                                         "pieces of work could not be run (out of memory? try fewer --workers)")
        return [results[i] for i in range(len(items))]

    def close(self) -> None:
        for w, pool in enumerate(self._pools):
            if pool is not None:
                pool.shutdown(wait=True, cancel_futures=True)
            self._pools[w] = None


class DaskCluster(InProcess):
    """Runs the pieces on a Dask distributed cluster; results in the order of the pieces.

    Parameters
    ----------
    address : str
        The scheduler, ``tcp://HOST:PORT``.

    Notes
    -----
    Each piece is one task (not pure: it is run even if an equal one ran
    before). When a worker dies, the scheduler gives its tasks to the other
    workers; a task's result is gathered once, in the order of the pieces.
    The workers need this package installed (the same version) and, for
    ``learn``, the session logs at the same paths.
    """

    def __init__(self, address: str):
        try:
            from distributed import Client
        except ImportError:
            raise ExecutionError("--scheduler needs Dask distributed, which is not installed; install it with "
                                 "pip install 'troubleshoot[cluster]' (or pip install '.[cluster]'), or leave "
                                 "out --scheduler") from None
        self.address = address
        try:
            self._client = Client(address, timeout=CONNECT_TIMEOUT, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise ExecutionError(f"cannot reach the Dask scheduler at {address} ({exc}); start it with "
                                 "'dask scheduler' and give the address it prints, e.g. tcp://127.0.0.1:8786") \
                from None
        self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))
        self.where = f"the Dask cluster at {address} ({self.workers} workers)"

    def map(self, fn: Callable, items: Sequence, shared: Any = None, progress: Progress | None = None,
            on_result: Callable[[int, Any], Any] | None = None) -> list:
        from distributed import as_completed

        futures = self._client.map(fn, list(items), [shared] * len(items), pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        results: dict[int, Any] = {}
        try:
            with self._client.as_current():
                for future in as_completed(futures):
                    i = index[future.key]
                    if i not in results:
                        result = self._client.gather(future)
                        results[i] = on_result(i, result) if on_result is not None else result
                        if progress is not None:
                            progress(len(results), len(items))
        except Exception as exc:  # a task failed on every worker it was given to
            if isinstance(exc, TroubleshootError):
                raise
            raise ExecutionError(f"the Dask cluster at {self.address} could not finish the work: "
                                 f"{type(exc).__name__}: {exc}") from None
        finally:
            for f in futures:
                f.release()
        return [results[i] for i in range(len(items))]

    def close(self) -> None:
        self._client.close()


def executor_for(workers: int | None = None, scheduler: str | None = None) -> InProcess:
    """The executor for the command-line options ``--workers K`` and ``--scheduler ADDRESS``.

    Parameters
    ----------
    workers : int, optional
        Local processes; None or 1 runs in this process.
    scheduler : str, optional
        A Dask scheduler address; it wins over ``workers``.

    Raises
    ------
    ExecutionError
        Bad ``workers``, Dask not installed, or the scheduler does not answer.
    """
    if scheduler:
        if "://" not in scheduler:
            raise ExecutionError(f"--scheduler wants an address such as tcp://127.0.0.1:8786, not {scheduler!r}")
        return DaskCluster(scheduler)
    if workers is not None and workers < 1:
        raise ExecutionError(f"--workers must be at least 1, not {workers}")
    if workers is None or workers == 1:
        return InProcess()
    return LocalProcesses(workers)


def chunks(items: Sequence, size: int) -> list:
    """``items`` cut into consecutive pieces of ``size`` (the last may be shorter); independent of workers."""
    size = max(1, int(size))
    return [items[i:i + size] for i in range(0, len(items), size)]


def cores() -> int:
    """The cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not every platform has it
        return max(1, os.cpu_count() or 1)
