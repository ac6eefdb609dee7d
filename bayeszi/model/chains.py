"""NUTS chains that can be continued: warmed up once, then asked for more draws block by
block, each chain keeping its position, step size, mass matrix and random streams.

:class:`ChainsHere` runs the chains one after the other in this process;
:class:`ChainProcesses` runs each chain in its own forked worker process (the compiled step
method is inherited, not compiled again), so the chains of a block run at the same time on
a machine with the cores for them. Both give the same draws for the same start: a chain's
draws depend only on its own state and random streams. Used by :mod:`bayeszi.model.enough`.

Example
-------
>>> chains = open_chains(step, points, rngs, warmup_steps=500, processes=False)  # doctest: +SKIP
>>> block = chains.draw(200)          # per chain: 200 (point, stats) pairs     # doctest: +SKIP
>>> chains.close()                                                               # doctest: +SKIP
"""

from __future__ import annotations

import multiprocessing
from typing import Any

import numpy as np

Record = tuple[dict, list]


def _warm(step, fresh, point: dict, rng: np.random.Generator, warmup_steps: int
          ) -> tuple[dict, Any]:
    """One chain's warm-up from the step's fresh state (as pm.sample: the random streams
    are set once per chain, tuning stops after the warm-up); returns (point, state)."""
    step.sampling_state = fresh
    step.set_rng(rng)
    step.tune = True
    step.reset_tuning()
    if hasattr(step, "iter_count"):
        step.iter_count = 0
    for _ in range(warmup_steps):
        point, _stats = step.step(point)
    step.stop_tuning()
    return point, step.sampling_state


def _steps(step, point: dict, state, n: int) -> tuple[dict, Any, list[Record]]:
    """``n`` draws of one chain from its saved state (its random streams included)."""
    step.sampling_state = state
    out = []
    for _ in range(n):
        point, stats = step.step(point)
        out.append((point, stats))
    return point, step.sampling_state, out


class ChainsHere:
    """The chains, one after the other in this process."""

    def __init__(self, step, points: list[dict], rngs: list[np.random.Generator],
                 warmup_steps: int) -> None:
        self.step = step
        fresh = step.sampling_state
        self.chains = [_warm(step, fresh, p, r, warmup_steps)
                       for p, r in zip(points, rngs, strict=True)]

    def draw(self, n: int) -> list[list[Record]]:
        """``n`` more draws of every chain."""
        out = []
        for i, (point, state) in enumerate(self.chains):
            point, state, records = _steps(self.step, point, state, n)
            self.chains[i] = (point, state)
            out.append(records)
        return out

    def close(self) -> None:
        """Nothing to release."""


def _worker(conn, step, fresh, point: dict, rng: np.random.Generator,
            warmup_steps: int) -> None:
    """A chain's process: warm up, then answer each block size with that many draws."""
    try:
        point, state = _warm(step, fresh, point, rng, warmup_steps)
        conn.send(("ready", None))
        while (n := conn.recv()) is not None:
            point, state, records = _steps(step, point, state, n)
            conn.send(("block", records))
    except KeyboardInterrupt:
        return
    except BaseException as err:  # reported to the parent, which raises it
        conn.send(("error", f"{type(err).__name__}: {err}"))


class ChainProcesses:
    """Each chain in its own forked process; blocks run on all chains at once."""

    def __init__(self, step, points: list[dict], rngs: list[np.random.Generator],
                 warmup_steps: int) -> None:
        ctx = multiprocessing.get_context("fork")
        fresh = step.sampling_state
        self.conns, self.procs = [], []
        try:
            for point, rng in zip(points, rngs, strict=True):
                here, there = ctx.Pipe()
                proc = ctx.Process(target=_worker, daemon=True,
                                   args=(there, step, fresh, point, rng, warmup_steps))
                proc.start()
                there.close()
                self.conns.append(here)
                self.procs.append(proc)
            self._answers()
        except BaseException:
            self.close()
            raise

    def _answers(self) -> list[Any]:
        out = []
        for conn in self.conns:
            try:
                kind, value = conn.recv()
            except EOFError:
                raise RuntimeError("a sampling process ended without answering") from None
            if kind == "error":
                raise RuntimeError(f"a chain's process failed: {value}")
            out.append(value)
        return out

    def draw(self, n: int) -> list[list[Record]]:
        """``n`` more draws of every chain, the chains running at the same time."""
        for conn in self.conns:
            conn.send(n)
        return self._answers()

    def close(self) -> None:
        """Stop the processes."""
        for conn in self.conns:
            try:
                conn.send(None)
            except (OSError, ValueError):
                pass
        for proc in self.procs:
            proc.join(timeout=2)
            if proc.is_alive():
                proc.terminate()
                proc.join()
        for conn in self.conns:
            conn.close()


def open_chains(step, points: list[dict], rngs: list[np.random.Generator], warmup_steps: int,
                processes: bool) -> ChainsHere | ChainProcesses:
    """Warmed-up chains, in worker processes or here."""
    cls = ChainProcesses if processes else ChainsHere
    return cls(step, points, rngs, warmup_steps)


__all__ = ["ChainProcesses", "ChainsHere", "open_chains"]
