"""Work done ahead, in forked worker processes, while the report goes on in this one.

The report's heaviest answers (the data sets replicated from each model, the rootograms'
expected frequencies, the residuals; at the end the figures' PNG files) are each computed
by one function with a fixed seed, independent of everything else the report does. On a
machine with two or more cores :class:`WorkAhead` starts them in forked worker processes
(*lanes*, each running its tasks in order) as soon as the report starts, and the report
takes each result when a section first needs it. The results are the same values the
section would compute itself (the same function, inputs and seed in a copy of this
process), and the warnings a task raised are handed over with it, so the report records
them exactly as if the section had computed the answer.

Where no worker can help or start (one core, no ``fork``, inside a worker process, not in
the main thread, or ``BAYESZI_REPORT_WORKERS=0``), or a worker fails or dies, the section
computes the answer itself: work ahead can only change how long a report takes.

Example
-------
>>> ahead = WorkAhead([[("double", lambda done: 2 * 21)]])
>>> ahead.take("double", lambda: 42).replay()
42
>>> ahead.close()
"""

from __future__ import annotations

import multiprocessing
import os
import pickle
import queue
import sys
import threading
import warnings
from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass, field
from typing import Any

#: environment variable: the number of worker processes a report may start (0: none)
WORKERS_ENV = "BAYESZI_REPORT_WORKERS"

#: one task: a key and a function of the results this lane has computed so far
Task = tuple[Hashable, Callable[[dict[Hashable, Any]], Any]]

# who runs a task: nobody yet, a worker, or the report itself (it asked first)
_FREE, _WORKER, _HERE = 0, 1, 2


@dataclass
class Outcome:
    """A task's value and the warnings it raised, as ``(category, message)`` pairs."""

    value: Any
    warned: list[tuple[type[Warning], str]] = field(default_factory=list)

    def replay(self) -> Any:
        """Raise the task's warnings again here (so a caller recording warnings sees them)
        and return its value."""
        for category, message in self.warned:
            warnings.warn(message, category, stacklevel=2)
        return self.value


def available_workers() -> int:
    """How many worker processes work ahead may start here: up to two, one per core this
    process may use beyond its own, and none where forking is unsafe or impossible.

    >>> available_workers() >= 0
    True
    """
    setting = os.environ.get(WORKERS_ENV)
    if setting:
        try:
            limit = max(0, int(setting))
        except ValueError:
            limit = 0
    else:
        limit = 2
    if (limit == 0 or sys.platform != "linux"
            or "fork" not in multiprocessing.get_all_start_methods()
            or threading.current_thread() is not threading.main_thread()
            or multiprocessing.current_process().daemon
            or multiprocessing.parent_process() is not None):
        return 0
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    # one core for the report itself, which also computes what no worker has begun
    return min(limit, cores - 1)


def _run_lane(results: Any, lane: Sequence[tuple[int, Task]], claims: Any) -> None:
    """In the worker: run the lane's tasks in order, each one the report has not claimed
    first, putting ``(key, pickled outcome)`` on the ``results`` queue after each (None
    when the task failed or its value cannot be pickled: the report then computes it). The
    queue's own thread sends them, so the next task starts while the report has not yet
    read the last."""
    done: dict[Hashable, Any] = {}
    for slot, (key, fn) in lane:
        with claims.get_lock():
            if claims[slot] != _FREE:
                continue
            claims[slot] = _WORKER
        try:
            with warnings.catch_warnings(record=True) as seen:
                warnings.simplefilter("always")
                value = fn(done)
            done[key] = value
            outcome: Outcome | None = Outcome(value, [(w.category, str(w.message))
                                                     for w in seen])
        except Exception:  # noqa: BLE001 - the report recomputes it and shows the error
            outcome = None
        blob = None
        if outcome is not None:
            try:  # pickled here, once, so that an unpicklable value is known at once
                blob = pickle.dumps(outcome, protocol=pickle.HIGHEST_PROTOCOL)
            except Exception:  # noqa: BLE001 - unpicklable: the report computes it itself
                blob = None
        results.put((key, blob))
    results.close()
    results.join_thread()


class WorkAhead:
    """Lanes of tasks run ahead in forked worker processes (see the module docstring).

    ``lanes``: each a list of tasks ``(key, fn)``; ``fn(done)`` gets this lane's earlier
    results by key. Keys are unique across lanes. With fewer workers available than lanes,
    the lanes are merged in turn into the workers there are; with none, nothing starts.
    A task the report asks for before a worker has begun it is the report's: it computes
    it itself and the worker skips it, so a report that catches up with its workers never
    waits for work nobody has started. Put what the report needs last first in a lane.
    """

    def __init__(self, lanes: Sequence[Sequence[Task]], workers: int | None = None) -> None:
        n = available_workers() if workers is None else workers
        lanes = [list(lane) for lane in lanes if lane]
        self._procs: list[Any] = []
        self._queues: list[Any] = []
        self._where: dict[Hashable, tuple[int, int]] = {}  # key -> (lane, claim slot)
        self._got: dict[Hashable, Outcome | None] = {}
        self._claims: Any = None
        if n <= 0 or not lanes:
            return
        merged: list[list[tuple[int, Task]]] = [[] for _ in range(min(n, len(lanes)))]
        slot = 0
        for i, lane in enumerate(lanes):
            for task in lane:
                merged[i % len(merged)].append((slot, task))
                slot += 1
        ctx = multiprocessing.get_context("fork")
        self._claims = ctx.Array("b", slot, lock=True)
        for lane in merged:
            results = ctx.Queue()
            try:
                proc = ctx.Process(target=_run_lane, args=(results, lane, self._claims),
                                   daemon=True)
                proc.start()
            except Exception:  # noqa: BLE001 - cannot start here: compute in the report
                results.close()
                continue
            for k, (key, _) in lane:
                self._where[key] = (len(self._queues), k)
            self._procs.append(proc)
            self._queues.append(results)

    @property
    def started(self) -> int:
        """How many worker processes were started."""
        return len(self._procs)

    def begun(self, key: Hashable) -> bool:
        """Whether a worker has begun (or finished) task ``key``."""
        where = self._where.get(key)
        return where is not None and self._claims[where[1]] == _WORKER

    def _claim(self, slot: int) -> bool:
        """Claim task ``slot`` for the report; False when a worker has begun it."""
        with self._claims.get_lock():
            if self._claims[slot] == _FREE:
                self._claims[slot] = _HERE
                return True
            return self._claims[slot] == _HERE

    def _wait_for(self, key: Hashable) -> Outcome | None:
        if key in self._got:
            return self._got.pop(key)
        where = self._where.get(key)
        if where is None:
            return None
        lane, slot = where
        if self._claim(slot):
            return None  # nobody began it: computed here
        results, proc = self._queues[lane], self._procs[lane]
        while key not in self._got:
            try:
                got_key, blob = results.get(timeout=0.25)
            except queue.Empty:
                if proc.is_alive() or not results.empty():
                    continue
                # the worker died: the rest of its lane is computed here
                for k, (i, _) in self._where.items():
                    if i == lane:
                        self._got.setdefault(k, None)
                break
            except (EOFError, OSError):
                self._got.setdefault(key, None)
                break
            self._got[got_key] = None if blob is None else pickle.loads(blob)
        return self._got.pop(key, None)

    def take(self, key: Hashable, compute: Callable[[], Any]) -> Outcome:
        """The outcome of task ``key`` (waiting for the worker that began it), else
        ``compute()`` run here, its warnings passing through as usual. Each key is taken
        once.

        >>> WorkAhead([], workers=0).take("x", lambda: 1).value is None   # computed on replay
        True
        """
        outcome = self._wait_for(key)
        self._where.pop(key, None)
        if outcome is None:
            return _Here(compute)
        return outcome

    def close(self) -> None:
        """Stop the workers (those still running have work nobody will read)."""
        for proc in self._procs:
            if proc.is_alive():
                proc.terminate()
            proc.join(timeout=5)
        for results in self._queues:
            results.cancel_join_thread()
            results.close()
        self._procs, self._queues, self._where = [], [], {}

    def __enter__(self) -> WorkAhead:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


class _Here(Outcome):
    """An outcome computed in this process when :meth:`Outcome.replay` is called."""

    def __init__(self, compute: Callable[[], Any]) -> None:
        super().__init__(None, [])
        self._compute = compute

    def replay(self) -> Any:
        return self._compute()


__all__ = ["Outcome", "WORKERS_ENV", "WorkAhead", "available_workers"]
