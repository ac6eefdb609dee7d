"""Draws until enough with nutpie: one run asked for the limit of draws, looked at block by
block while it goes, stopped once the draws so far are enough.

nutpie fixes its number of draws when it starts and cannot be continued, so the chains are
started for ``plan.limit`` draws per chain in the background, and whenever every chain has
passed the next block boundary (200, 400, ... draws) the first that many draws of each chain
are handed to the caller's ``judge``. Once it says enough, the run is cancelled and those
draws are kept; draws the chains made beyond the boundary meanwhile are dropped. A chain's
draws depend only on its seed, not on when it is looked at, so a run that stops after 400
draws holds the same draws as a fixed nutpie run of 400 with the same seed and warm-up
(tests/test_enough_nutpie.py). Same plan and outcome as :func:`~bayeszi.model.enough.
sample_until_enough` (PyMC's NUTS in blocks), whose :class:`~bayeszi.model.enough.BlockRun`
it returns.

Example
-------
>>> run = nutpie_until_enough(model, compiled, chains=2, cores=2, warmup_steps=500,
...                           plan=BlockPlan(200, 4000), acceptance_target=0.9, seed=1,
...                           judge=lambda idata: True)                   # doctest: +SKIP
>>> run.draws, run.stop                                                  # doctest: +SKIP
(200, 'enough')
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable

import arviz as az
import numpy as np
import pymc as pm

from bayeszi.model.enough import STOP_ENOUGH, STOP_FIXED, STOP_LIMIT, BlockPlan, BlockRun
from bayeszi.model.sample import nutpie_idata

#: seconds between looks at the running chains while a block is not yet complete
POLL_S = 0.25


def chain_lengths(idata: az.InferenceData) -> list[int]:
    """Draws each chain holds in a (possibly partial) nutpie trace: nutpie pads the shorter
    chains with NaN in its float statistics.

    Example
    -------
    >>> import numpy as np, arviz as az
    >>> energy = np.array([[1.0, 2.0, 3.0], [1.0, np.nan, np.nan]])
    >>> chain_lengths(az.from_dict(posterior={"a": energy},
    ...                            sample_stats={"energy": energy}))
    [3, 1]
    """
    if "posterior" not in idata.groups() or idata.posterior.sizes.get("draw", 0) == 0:
        return []
    energy = idata.sample_stats["energy"].values
    return [int(n) for n in np.isfinite(energy).sum(axis=1)]


def first_draws(idata: az.InferenceData, n: int) -> az.InferenceData:
    """The first ``n`` draws of every chain (posterior and sample statistics only)."""
    keep = {"draw": slice(0, n)}
    return az.InferenceData(posterior=idata.posterior.isel(keep),
                            sample_stats=idata.sample_stats.isel(keep))


def _finished(sampler) -> bool:
    """Whether the run is over (nutpie 0.16 raises TimeoutError while it is not)."""
    try:
        return bool(sampler.is_finished)
    except TimeoutError:
        return False


def _wait_for(sampler, n: int, chains: int) -> az.InferenceData:
    """The trace once every chain has ``n`` draws."""
    while True:
        done = _finished(sampler)
        with warnings.catch_warnings():  # ArviZ's note on a trace still in its warm-up
            warnings.simplefilter("ignore")
            trace = sampler.inspect()  # a copy of the draws so far (all, once finished)
        lengths = chain_lengths(trace)
        if len(lengths) == chains and min(lengths) >= n:
            return trace
        if done:
            raise RuntimeError(f"nutpie ended with {lengths} draws per chain, short of {n}")
        time.sleep(POLL_S)


def nutpie_until_enough(model: pm.Model, compiled, *, chains: int, cores: int,
                        warmup_steps: int, plan: BlockPlan, acceptance_target: float,
                        seed: int | None,
                        judge: Callable[[az.InferenceData], bool] | None,
                        on_block: Callable[[int, int], None] | None = None) -> BlockRun:
    """Warm up and draw with nutpie (``compiled``: :func:`~bayeszi.model.sample.
    compile_nutpie` of ``model``) until ``judge`` says the draws so far are enough, at block
    boundaries of ``plan``, or ``plan.limit`` draws per chain are drawn. ``judge=None`` draws
    exactly ``plan.limit``. ``seconds["warmup_s"]`` is the time to the first block."""
    import nutpie

    seconds = {"warmup_s": 0.0, "draws_s": 0.0, "judge_s": 0.0}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sampler = nutpie.sample(compiled, draws=plan.limit, tune=warmup_steps, chains=chains,
                                cores=cores, seed=seed, progress_bar=False, save_warmup=False,
                                target_accept=acceptance_target, blocking=False)
    drawn, blocks, stop = 0, 0, STOP_LIMIT if judge is not None else STOP_FIXED
    try:
        for size in plan.sizes():
            t1 = time.perf_counter()
            trace = _wait_for(sampler, drawn + size, chains)
            drawn, blocks = drawn + size, blocks + 1
            seconds["warmup_s" if blocks == 1 else "draws_s"] += time.perf_counter() - t1
            if on_block is not None:
                on_block(drawn, plan.limit)
            if judge is not None and drawn < plan.limit:
                t2 = time.perf_counter()
                ok = judge(nutpie_idata(model, first_draws(trace, drawn)))
                seconds["judge_s"] += time.perf_counter() - t2
                if ok:
                    stop = STOP_ENOUGH
                    break
    finally:
        if not _finished(sampler):
            sampler.cancel()
    idata = nutpie_idata(model, first_draws(trace, drawn))
    if judge is not None and stop == STOP_LIMIT and judge(idata):
        stop = STOP_ENOUGH  # enough exactly at the limit
    return BlockRun(idata, drawn, stop, blocks, seconds)


__all__ = ["chain_lengths", "first_draws", "nutpie_until_enough"]
