"""NUTS chains that can be continued: warmed up once, then asked for more draws block by
block, each chain keeping its position, step size, mass matrix and random streams.

:class:`ChainsHere` runs the chains one after the other in this process;
:class:`ChainProcesses` runs each chain in its own forked worker process (the compiled step
method is inherited, not compiled again), so the chains of a block run at the same time on
a machine with the cores for them. Both give the same draws for the same start: a chain's
draws depend only on its own state and random streams. Used by :mod:`bayeszi.model.enough`.

Blocks are asked for (:meth:`ask`) and taken (:meth:`take`) separately, so that worker
processes can draw the next block while this process judges the last one; a block asked
for and not taken is dropped at :meth:`close` (here it is never drawn).

Both count every chain's iterations (warm-up included) and divergent draws as they go, for a
progress display (``on_progress(iterations, divergences)``, all chains together): here after
every iteration, with processes while waiting for them (the workers count in shared memory).

Example
-------
>>> chains = open_chains(step, points, rngs, warmup_steps=500, processes=False)  # doctest: +SKIP
>>> chains.ask(200)                                                              # doctest: +SKIP
>>> block = chains.take()            # per chain: 200 (point, stats) pairs     # doctest: +SKIP
>>> chains.close()                                                               # doctest: +SKIP
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, MutableSequence
from typing import Any

import numpy as np

Record = tuple[dict, list]
Progress = Callable[[int, int], None]

#: how often (seconds) the progress is passed on while waiting for worker processes
POLL_S = 0.25


class Tally:
    """Iterations and divergent draws per chain; each chain writes only its own two slots,
    so worker processes can share one array without a lock.

    >>> t = Tally(2)
    >>> t.tick(0, [{"diverging": False}]); t.tick(1, [{"diverging": True}], draw=True)
    >>> t.totals()
    (2, 1)
    """

    def __init__(self, chains: int, shared: bool = False) -> None:
        self.chains = chains
        self.counts: MutableSequence[int] = (
            multiprocessing.get_context("fork").Array("q", 2 * chains, lock=False)
            if shared else [0] * (2 * chains))

    def tick(self, chain: int, stats: list, draw: bool = False) -> None:
        """One iteration of ``chain``; a divergence counts only among the draws."""
        self.counts[chain] += 1
        if draw and stats and stats[0].get("diverging", False):
            self.counts[self.chains + chain] += 1

    def totals(self) -> tuple[int, int]:
        """(iterations, divergent draws) over all chains."""
        return sum(self.counts[:self.chains]), sum(self.counts[self.chains:])


def _warm(step, fresh, point: dict, rng: np.random.Generator, warmup_steps: int,
          tick: Callable[[list], None]) -> tuple[dict, Any]:
    """One chain's warm-up from the step's fresh state (as pm.sample: the random streams
    are set once per chain, tuning stops after the warm-up); returns (point, state)."""
    step.sampling_state = fresh
    step.set_rng(rng)
    step.tune = True
    step.reset_tuning()
    if hasattr(step, "iter_count"):
        step.iter_count = 0
    for _ in range(warmup_steps):
        point, stats = step.step(point)
        tick(stats)
    step.stop_tuning()
    return point, step.sampling_state


def _steps(step, point: dict, state, n: int, tick: Callable[[list], None]
           ) -> tuple[dict, Any, list[Record]]:
    """``n`` draws of one chain from its saved state (its random streams included)."""
    step.sampling_state = state
    out = []
    for _ in range(n):
        point, stats = step.step(point)
        out.append((point, stats))
        tick(stats)
    return point, step.sampling_state, out


def _ticker(tally: Tally, chain: int, draw: bool, report: Callable[[], None] | None
            ) -> Callable[[list], None]:
    def tick(stats: list) -> None:
        tally.tick(chain, stats, draw)
        if report is not None:
            report()
    return tick


class ChainsHere:
    """The chains, one after the other in this process."""

    def __init__(self, step, points: list[dict], rngs: list[np.random.Generator],
                 warmup_steps: int, on_progress: Progress | None = None) -> None:
        self.step = step
        self.pending = 0
        self.tally = Tally(len(points))
        self.report = None if on_progress is None else (
            lambda: on_progress(*self.tally.totals()))
        fresh = step.sampling_state
        self.chains = [_warm(step, fresh, p, r, warmup_steps,
                             _ticker(self.tally, i, False, self.report))
                       for i, (p, r) in enumerate(zip(points, rngs, strict=True))]

    def ask(self, n: int) -> None:
        """Ask for ``n`` more draws of every chain (made when :meth:`take` is called)."""
        self.pending = n

    def take(self) -> list[list[Record]]:
        """The draws last asked for, made now (the chains one after the other)."""
        n, self.pending = self.pending, 0
        out = []
        for i, (point, state) in enumerate(self.chains):
            point, state, records = _steps(self.step, point, state, n,
                                           _ticker(self.tally, i, True, self.report))
            self.chains[i] = (point, state)
            out.append(records)
        return out

    def close(self) -> None:
        """Nothing to release."""


def _worker(conn, step, fresh, point: dict, rng: np.random.Generator,
            warmup_steps: int, tally: Tally, chain: int) -> None:
    """A chain's process: warm up, then answer each block size with that many draws."""
    try:
        point, state = _warm(step, fresh, point, rng, warmup_steps,
                             _ticker(tally, chain, False, None))
        conn.send(("ready", None))
        draws = _ticker(tally, chain, True, None)
        while (n := conn.recv()) is not None:
            point, state, records = _steps(step, point, state, n, draws)
            conn.send(("block", records))
    except KeyboardInterrupt:
        return
    except BaseException as err:  # reported to the parent, which raises it
        conn.send(("error", f"{type(err).__name__}: {err}"))


class ChainProcesses:
    """Each chain in its own forked process; blocks run on all chains at once."""

    def __init__(self, step, points: list[dict], rngs: list[np.random.Generator],
                 warmup_steps: int, on_progress: Progress | None = None) -> None:
        ctx = multiprocessing.get_context("fork")
        fresh = step.sampling_state
        self.conns, self.procs = [], []
        self.pending = False
        self.tally = Tally(len(points), shared=True)
        self.on_progress = on_progress
        try:
            for i, (point, rng) in enumerate(zip(points, rngs, strict=True)):
                here, there = ctx.Pipe()
                proc = ctx.Process(target=_worker, daemon=True,
                                   args=(there, step, fresh, point, rng, warmup_steps,
                                         self.tally, i))
                proc.start()
                there.close()
                self.conns.append(here)
                self.procs.append(proc)
            self._answers()
        except BaseException:
            self.close()
            raise

    def _report(self) -> None:
        if self.on_progress is not None:
            self.on_progress(*self.tally.totals())

    def _answers(self) -> list[Any]:
        out = []
        for conn in self.conns:
            try:
                while self.on_progress is not None and not conn.poll(POLL_S):
                    self._report()
                kind, value = conn.recv()
            except EOFError:
                raise RuntimeError("a sampling process ended without answering") from None
            if kind == "error":
                raise RuntimeError(f"a chain's process failed: {value}")
            out.append(value)
        self._report()
        return out

    def ask(self, n: int) -> None:
        """Start ``n`` more draws of every chain, the chains running at the same time (while
        this process does something else, such as judging the draws before them)."""
        for conn in self.conns:
            conn.send(n)
        self.pending = True

    def take(self) -> list[list[Record]]:
        """The draws last asked for (waiting for them)."""
        out = self._answers()
        self.pending = False
        return out

    def close(self) -> None:
        """Stop the processes (at once when a block asked for is still being drawn: its
        draws are not wanted)."""
        for conn in self.conns:
            try:
                conn.send(None)
            except (OSError, ValueError):
                pass
        for proc in self.procs:
            if self.pending:
                proc.terminate()
            proc.join(timeout=2)
            if proc.is_alive():
                proc.terminate()
                proc.join()
        for conn in self.conns:
            conn.close()


def open_chains(step, points: list[dict], rngs: list[np.random.Generator], warmup_steps: int,
                processes: bool, on_progress: Progress | None = None
                ) -> ChainsHere | ChainProcesses:
    """Warmed-up chains, in worker processes or here; ``on_progress(iterations,
    divergences)`` hears how far they are (warm-up included)."""
    cls = ChainProcesses if processes else ChainsHere
    return cls(step, points, rngs, warmup_steps, on_progress)


__all__ = ["ChainProcesses", "ChainsHere", "Tally", "open_chains"]
