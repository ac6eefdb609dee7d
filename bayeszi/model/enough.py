"""Draws until enough: NUTS in blocks, stopping once the draws pass the warning thresholds.

:func:`sample_until_enough` runs PyMC's NUTS step method on every chain, keeping each
chain's position, step size, mass matrix and random streams between blocks, so
that the next block continues the chains exactly where they stopped (true continuation, no
second warm-up). After every block the caller's ``judge`` looks at all the draws so far and
says whether they are enough (in bayeszi: every reported parameter's R-hat, bulk ESS and tail
ESS pass :class:`~bayeszi.model.diagnostics.Thresholds`); sampling stops then, or when the
stated limit of draws per chain is reached.

Exact and reproducible: the initial points and per-chain random streams come from the seed
as in ``pm.sample`` (one generator spawned per chain), and a chain's draws do not depend on
where the blocks fall, so a seeded run that stops after 600 draws holds the same draws as a
fixed run of 600 draws through this function (see tests/test_until_enough.py).

What it costs: the judge runs once per block (an ArviZ summary, well under a second for the
models here), and every block is a round trip to the chains. With the chains in worker
processes the next block is already being drawn while the judge looks at the last one (and
is dropped when the judge says enough), so judging costs no sampling time there. The chains
run in worker processes (one per chain, forked after the compile) or one after the other in
this process; :mod:`bayeszi.model.chains`.

Example
-------
>>> from bayeszi.model.enough import BlockPlan
>>> BlockPlan(block=200, limit=1000).sizes()
[200, 200, 200, 200, 200]
"""

from __future__ import annotations

import contextlib
import logging
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import arviz as az
import numpy as np
import pymc as pm
from pymc.backends.base import MultiTrace
from pymc.backends.ndarray import NDArray

from bayeszi.model.chains import open_chains

#: why a run stopped, as the report says it
STOP_ENOUGH = "enough"
STOP_LIMIT = "limit reached"
STOP_FIXED = "fixed number"


@dataclass(frozen=True)
class BlockPlan:
    """Draws per chain added per block, and the most draws per chain in all.

    Example
    -------
    >>> BlockPlan(block=300, limit=1000).sizes()   # the last block fills up to the limit
    [300, 300, 300, 100]
    """

    block: int
    limit: int

    def sizes(self) -> list[int]:
        """The block sizes, in order, that add up to the limit."""
        out, left = [], self.limit
        while left > 0:
            out.append(min(self.block, left))
            left -= out[-1]
        return out


@dataclass
class BlockRun:
    """The outcome of :func:`sample_until_enough`: the draws, how many per chain, why it
    stopped, and the seconds spent in warm-up, drawing and judging."""

    idata: az.InferenceData
    draws: int
    stop: str
    blocks: int
    seconds: dict[str, float]


def _start(model: pm.Model, chains: int, seed: int | None, acceptance_target: float,
           warmup_steps: int) -> tuple[list[dict], object, list[np.random.Generator]]:
    """Initial points, the NUTS step and one random stream per chain, as pm.sample makes
    them (jitter around the initial point, diagonal mass matrix adapted during warm-up)."""
    rngs = np.random.default_rng(seed).spawn(chains)
    seeds = [int(r.integers(2**30)) for r in rngs]
    points, step = pm.init_nuts(init="jitter+adapt_diag", chains=chains, model=model,
                                random_seed=seeds, progressbar=False,
                                target_accept=acceptance_target, tune=warmup_steps)
    return points, step, list(rngs)


def _record(traces: list[NDArray], step, block: list[list]) -> None:
    """Append one block of (point, stats) pairs per chain to the chains' traces."""
    for i, (trace, records) in enumerate(zip(traces, block, strict=True)):
        trace.setup(len(records), i, step.stats_dtypes)
        for point, stats in records:
            trace.record(point, stats, in_warmup=False)


def _as_idata(model: pm.Model, traces: list[NDArray]) -> az.InferenceData:
    for trace in traces:
        trace.close()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        idata = pm.to_inference_data(MultiTrace(traces), model=model, log_likelihood=False)
    # as pm.sample does unless asked: the per-draw warning objects are not kept
    idata.sample_stats = idata.sample_stats.drop_vars("warning", errors="ignore")
    return idata


@contextlib.contextmanager
def _quiet():
    log = logging.getLogger("pymc")
    level = log.level
    log.setLevel(logging.ERROR)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            yield
    finally:
        log.setLevel(level)


def sample_until_enough(model: pm.Model, *, chains: int, warmup_steps: int, plan: BlockPlan,
                        acceptance_target: float, seed: int | None,
                        judge: Callable[[az.InferenceData], bool] | None,
                        on_progress: Callable[[int, int], None] | None = None,
                        processes: bool = False) -> BlockRun:
    """Warm up every chain, then draw blocks of ``plan.block`` per chain until ``judge``
    (given all draws so far) says they are enough or ``plan.limit`` draws per chain are
    drawn. ``judge=None`` draws exactly ``plan.limit`` (a fixed run through the same path).
    ``on_progress(iterations, divergences)`` hears how far the chains are (all chains,
    warm-up included; divergences among the draws), for a progress display.
    ``processes=True`` runs each chain in its own worker process (same draws, chains at the
    same time; :mod:`bayeszi.model.chains`).

    Example
    -------
    >>> run = sample_until_enough(model, chains=2, warmup_steps=500,
    ...                           plan=BlockPlan(200, 4000), acceptance_target=0.9, seed=1,
    ...                           judge=lambda idata: True)                  # doctest: +SKIP
    >>> run.draws, run.stop                                                 # doctest: +SKIP
    (200, 'enough')
    """
    seconds = {"warmup_s": 0.0, "draws_s": 0.0, "judge_s": 0.0}
    t0 = time.perf_counter()
    with model, _quiet():
        points, step, rngs = _start(model, chains, seed, acceptance_target, warmup_steps)
        runner = open_chains(step, points, rngs, warmup_steps, processes, on_progress)
        try:
            traces = [NDArray(model=model, test_point=points[0]) for _ in points]
            seconds["warmup_s"] = time.perf_counter() - t0
            drawn, stop, blocks = 0, STOP_LIMIT if judge is not None else STOP_FIXED, 0
            sizes = plan.sizes()
            runner.ask(sizes[0])
            for i, size in enumerate(sizes):
                t1 = time.perf_counter()
                block = runner.take()
                if i + 1 < len(sizes):  # drawn while this block is judged; dropped if enough
                    runner.ask(sizes[i + 1])
                _record(traces, step, block)
                drawn, blocks = drawn + size, blocks + 1
                seconds["draws_s"] += time.perf_counter() - t1
                if judge is not None and drawn < plan.limit:
                    t2 = time.perf_counter()
                    ok = judge(_as_idata(model, traces))
                    seconds["judge_s"] += time.perf_counter() - t2
                    if ok:
                        stop = STOP_ENOUGH
                        break
        finally:
            runner.close()
        idata = _as_idata(model, traces)
    if judge is not None and stop == STOP_LIMIT and judge(idata):
        stop = STOP_ENOUGH  # enough exactly at the limit
    return BlockRun(idata, drawn, stop, blocks, seconds)


def stop_reason(idata: az.InferenceData) -> str:
    """Why a fit's sampling stopped, in words, from the attrs the fit stored (fits made or
    saved before draws until enough existed read as a fixed number).

    Example
    -------
    >>> import arviz as az, numpy as np
    >>> idata = az.from_dict(posterior={"a": np.zeros((2, 600))},
    ...                      sample_stats={"diverging": np.zeros((2, 600), bool)})
    >>> idata.sample_stats.attrs["bayeszi_stop"] = STOP_ENOUGH
    >>> stop_reason(idata)
    'enough: R-hat and ESS passed after 600 draws per chain'
    """
    attrs = idata.sample_stats.attrs if "sample_stats" in idata.groups() else {}
    stop = str(attrs.get("bayeszi_stop", STOP_FIXED))
    n = int(idata.posterior.sizes.get("draw", 0))
    if stop == STOP_ENOUGH:
        return f"enough: R-hat and ESS passed after {n} draws per chain"
    if stop == STOP_LIMIT:
        return f"limit of {n} draws per chain reached before R-hat and ESS passed"
    return "fixed number of draws asked for"


__all__ = ["BlockPlan", "BlockRun", "STOP_ENOUGH", "STOP_FIXED", "STOP_LIMIT",
           "sample_until_enough", "stop_reason"]
