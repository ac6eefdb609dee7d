"""Draws until enough with nutpie: one run up to the limit, judged at block boundaries.

Big fits sample with nutpie (:func:`bayeszi.model.sample.choose_sampler`). nutpie cannot
continue a finished run, so :func:`nutpie_until_enough` starts one run of ``plan.limit``
draws per chain in the background and watches it: each time every chain has passed the next
block boundary (``plan.block`` draws per chain), the draws up to that boundary are judged;
once they are enough the run is stopped and exactly those draws are kept.

Exact and reproducible: nutpie's chains each have their own seeded random stream and do not
depend on how far the run goes, and a judgement is only ever made on whole blocks, in order,
so a seeded run that stops after 600 draws holds the same draws as a fixed nutpie run of 600
draws (tests/test_until_enough.py). When the run is judged does not matter; what is judged
does not depend on timing.

What it costs: a look at the draws so far (nutpie's ``inspect``, a copy) and the judge at
each block boundary; with thousands of group effects the copy is the larger part.

Example
-------
>>> run = nutpie_until_enough(model, settings, BlockPlan(200, 4000), judge)  # doctest: +SKIP
>>> run.stop, run.draws                                                     # doctest: +SKIP
('enough', 1400)
"""

from __future__ import annotations

import dataclasses
import threading
import time
import warnings
from collections.abc import Callable

import arviz as az
import numpy as np
import pymc as pm

from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import SamplerSettings
from bayeszi.model.enough import STOP_ENOUGH, STOP_FIXED, STOP_LIMIT, BlockPlan, BlockRun
from bayeszi.model.progress import SamplingProgress
from bayeszi.model.sample import (
    _nutpie_settings,
    _quiet_pymc,
    as_pymc_idata,
    chain_cores,
    compile_nutpie,
    nutpie_version,
    progress_display,
    start_nutpie,
)

#: what nutpie's progress callback renders for us: per chain, draws done (warm-up included)
#: and divergences
_CHAIN_TEMPLATE = "{% for chain in chains %} {{ chain.finished_draws }} {{ chain.divergences }}" \
                  "{% endfor %}"
#: seconds between looks at the chains' progress
POLL_S = 0.5


class _Watch:
    """The chains' progress as nutpie's callback reports it (warm-up included)."""

    def __init__(self, chains: int, display: SamplingProgress | None) -> None:
        self.done = [0] * chains
        self.lock = threading.Lock()
        self.display = display

    def feed(self, text: str) -> None:
        values = [int(float(v)) for v in text.split()]
        with self.lock:
            self.done = values[0::2] or self.done
        if self.display is not None:
            self.display.update(sum(values[0::2]), sum(values[1::2]))

    def least(self) -> int:
        with self.lock:
            return min(self.done) if self.done else 0


def _first(idata: az.InferenceData, n: int) -> az.InferenceData:
    """The first ``n`` draws of every chain (posterior and sampler statistics)."""
    return idata.isel(draw=slice(0, n))


def _drawn_per_chain(idata: az.InferenceData) -> int:
    """Draws every chain has in an inspected (NaN-padded) run."""
    if "posterior" not in idata.groups() or "energy" not in idata.sample_stats:
        return 0
    energy = np.asarray(idata.sample_stats["energy"])
    return int(np.isfinite(energy).sum(axis=1).min()) if energy.size else 0


def _judge_from(idata: az.InferenceData, have: int, plan: BlockPlan, judged: int, judge,
                seconds: dict[str, float]) -> tuple[int, az.InferenceData | None]:
    """Judge, in order, every whole block after the first ``judged`` draws per chain of
    ``idata`` that all chains have (``have`` draws each), short of the limit; the draws per
    chain judged so far and, once enough, the draws kept."""
    while judged + plan.block <= have and judged + plan.block < plan.limit:
        judged += plan.block
        t1 = time.perf_counter()
        ok = judge(_first(idata, judged))
        seconds["judge_s"] += time.perf_counter() - t1
        if ok:
            return judged, _first(idata, judged)
    return judged, None


def _judge_blocks(sampler, plan: BlockPlan, judged: int, judge, seconds: dict[str, float]
                  ) -> tuple[int, az.InferenceData | None]:
    """:func:`_judge_from` on a copy of the draws the running sampler holds."""
    t0 = time.perf_counter()
    idata = sampler.inspect()
    seconds["inspect_s"] += time.perf_counter() - t0
    return _judge_from(idata, _drawn_per_chain(idata), plan, judged, judge, seconds)


def _finished(sampler) -> bool:
    """Whether the run has ended (nutpie 0.16 answers a busy sampler with a TimeoutError)."""
    try:
        return bool(sampler.is_finished)
    except TimeoutError:
        return False


def _watch_run(sampler, watch: _Watch, settings: SamplerSettings, plan: BlockPlan, judge,
               seconds: dict[str, float]) -> tuple[az.InferenceData | None, int]:
    """Follow the run until a judged block is enough or the run ends; the kept draws (None:
    not enough yet) and the draws per chain judged."""
    judged = 0
    while not _finished(sampler):
        time.sleep(POLL_S)
        ready = watch.least() - settings.warmup_steps
        if judge is None or ready < judged + plan.block or judged + plan.block >= plan.limit:
            continue
        judged, kept = _judge_blocks(sampler, plan, judged, judge, seconds)
        if kept is not None:
            return kept, judged
    return None, judged


def nutpie_until_enough(model: pm.Model, settings: SamplerSettings, plan: BlockPlan,
                        judge: Callable[[az.InferenceData], bool] | None,
                        progress: bool = False, compiled=None) -> BlockRun:
    """Sample ``model`` with nutpie until ``judge`` (given the first whole blocks of draws)
    says they are enough, or ``plan.limit`` draws per chain are drawn. ``judge=None`` draws
    exactly ``plan.limit``. The result reads as PyMC's (:func:`as_pymc_idata`).
    ``compiled``: the model already compiled for nutpie (:func:`compile_nutpie`), if it is.

    Example
    -------
    >>> run = nutpie_until_enough(model, settings, BlockPlan(200, 1000),
    ...                           judge=lambda idata: True)                # doctest: +SKIP
    >>> run.draws, run.stop                                                # doctest: +SKIP
    (200, 'enough')
    """
    seconds = {"sampling_s": 0.0, "inspect_s": 0.0, "judge_s": 0.0}
    compiled = compile_nutpie(model) if compiled is None else compiled
    watch = _Watch(settings.chains, progress_display(
        dataclasses.replace(settings, until_enough=True, block_draws=plan.block,
                            draws_limit=plan.limit), progress, "nutpie, until enough"))
    nuts = _nutpie_settings(dataclasses.replace(settings, draws=plan.limit))
    sampler = start_nutpie(compiled, nuts, chain_cores(settings), watch.feed, _CHAIN_TEMPLATE)
    if sampler is None:
        raise BayesziError(
            f"draws until enough with nutpie needs nutpie 0.16.x, but nutpie "
            f"{nutpie_version()} is installed; reinstall it with "
            "'pip install \"nutpie[pymc]>=0.16.8,<0.17\"', or set until_enough=False "
            "(a fixed number of draws) or sampler='pymc'")
    t0, stop = time.perf_counter(), STOP_LIMIT
    try:
        with _quiet_pymc(), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            kept, drawn = _watch_run(sampler, watch, settings, plan, judge, seconds)
            if kept is not None:
                sampler.cancel()
                stop = STOP_ENOUGH
            else:  # the run ended first: the blocks not yet judged, in order, then the limit
                final = sampler.wait()
                if judge is not None:
                    drawn, kept = _judge_from(final, plan.limit, plan, drawn, judge, seconds)
                stop = STOP_ENOUGH if kept is not None else \
                    STOP_FIXED if judge is None else \
                    STOP_ENOUGH if judge(final) else STOP_LIMIT  # enough exactly at the limit
                if kept is None:
                    kept, drawn = final, plan.limit
    except BaseException:  # Ctrl-C or a failure: stop the chains, keep nothing
        sampler.cancel()
        raise
    finally:
        seconds["sampling_s"] = time.perf_counter() - t0
        if watch.display is not None:
            watch.display.close("enough draws" if stop == STOP_ENOUGH else None)
    if int(kept.posterior.sizes.get("draw", 0)) < drawn:
        raise KeyboardInterrupt("nutpie stopped before all draws were taken")
    return BlockRun(as_pymc_idata(model, kept), drawn, stop, -(-drawn // plan.block), seconds)


__all__ = ["POLL_S", "nutpie_until_enough"]
