"""From data and a spec to a finished :class:`~bayeszi.engine.record.FitRecord`.

:func:`fit_record` builds the design and priors, builds and samples the model, adds the
user-scale coefficients, computes the pointwise log-likelihood for LOO and the log prior of
every draw (for prior sensitivity, :mod:`bayeszi.engine.logprior`) and diagnoses the draws,
in that order, and returns a record with every field filled. :func:`rebuild_record` is the
same record from saved parts (spec, data, draws), without sampling; a saved fit without the
log prior (written before it was kept) gets it computed there. Neither warns:
the fitting layer decides what to tell the user.

Example
-------
>>> rec = fit_record(df, spec)                  # doctest: +SKIP
>>> rec.timing["sample_s"] > 0                  # doctest: +SKIP
True
"""

from __future__ import annotations

import contextlib
import dataclasses
import signal
import threading
import time
import warnings
from typing import Any

import arviz as az
import pandas as pd
import pymc as pm

from bayeszi.base import names
from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import ModelSpec, SamplerSettings
from bayeszi.engine import loglik, logprior
from bayeszi.engine.pointwise import pattern_log_likelihood
from bayeszi.engine.record import FitRecord, Posterior
from bayeszi.model.build import build_model
from bayeszi.model.design import Design, build_design
from bayeszi.model.diagnostics import Diagnostics, diagnose, passes
from bayeszi.model.enough import STOP_ENOUGH, STOP_FIXED, STOP_LIMIT, BlockPlan, sample_until_enough
from bayeszi.model.enough_nutpie import nutpie_until_enough
from bayeszi.model.priors import resolve
from bayeszi.model.reuse import attach_active
from bayeszi.model.sample import (
    chain_cores,
    choose_sampler,
    fit_work,
    nutpie_version,
    progress_display,
    run_nuts,
    show_progress,
)

INTERRUPTED = "sampling interrupted: nothing was kept or written; rerun fit() to start again"


def add_user_scale(idata: az.InferenceData, design: Design) -> None:
    """Add ``counts_coef`` / ``zeros_coef`` on the user's scale to the posterior."""
    post = idata.posterior
    for part, pdes in (("counts", design.counts), ("zeros", design.zeros)):
        if pdes is None:
            continue
        std = post[names.std_coef(part)]
        post[names.coef(part)] = std.copy(data=pdes.to_user_scale(std.values))


def fit_record(data: pd.DataFrame, spec: ModelSpec, prior_draws: int = 0,
               design: Design | None = None) -> FitRecord:
    """Sample ``spec`` on ``data`` and return the finished record (no warnings issued).

    ``design``: the design of ``spec`` on ``data`` when the caller built it already.
    """
    t0 = time.perf_counter()
    design = build_design(data, spec) if design is None else design
    priors = resolve(design, spec.priors)
    built = build_model(design, priors)
    t1 = time.perf_counter()
    attach_active(built.model)  # a compiled density reused across strata, when one is active
    idata = _sample_or_interrupt(built.model, spec.sampler, built.n_rows,
                                 _enough_judge(design))
    t2 = time.perf_counter()
    add_user_scale(idata, design)
    if prior_draws:
        with built.model, warnings.catch_warnings():
            warnings.simplefilter("ignore")
            idata.extend(pm.sample_prior_predictive(prior_draws,
                                                    random_seed=spec.sampler.seed))
    # the pointwise log-likelihood for LOO, per pattern in NumPy (nothing to compile)
    t3 = time.perf_counter()
    pats = built.likelihood.patterns
    ll = pattern_log_likelihood(Posterior(spec, design, idata), pats)
    loglik.store(idata, ll, obs=list(built.model.coords["obs"]), inverse=pats.inverse)
    t4 = time.perf_counter()
    logprior.store_log_prior(idata, built.model)
    timing = {"build_s": t1 - t0, "sample_s": t2 - t1, "log_likelihood_s": t4 - t3,
              "log_prior_s": time.perf_counter() - t4}
    return FitRecord(spec, design, idata, priors, data[design.used_columns].copy(),
                     _diagnosed(idata, design), timing)


def _enough_judge(design: Design):
    """Whether draws so far are enough: every reported parameter (user-scale coefficients
    included, as the diagnostics table shows them) passes the R-hat and ESS thresholds."""
    def judge(idata: az.InferenceData) -> bool:
        add_user_scale(idata, design)
        return passes(idata)
    return judge


def _draw(model: pm.Model, settings: SamplerSettings, rows: int, judge) -> az.InferenceData:
    """Fixed draws through :func:`run_nuts`, or blocks until enough; the sample_stats attrs
    say how many draws per chain were taken and why sampling stopped."""
    if not settings.until_enough:
        idata = run_nuts(model, settings, rows)
        stop = STOP_FIXED
    elif choose_sampler(settings.sampler, fit_work(rows, settings)) == "nutpie":
        run = nutpie_until_enough(model, settings, BlockPlan(settings.block_draws,
                                                             settings.draws_limit),
                                  judge, show_progress(settings))
        idata, stop = run.idata, run.stop
        idata.sample_stats.attrs["bayeszi_sampler"] = f"nutpie-{nutpie_version()}-blocks"
    else:
        display = progress_display(settings, show_progress(settings),
                                   "PyMC's NUTS, until enough")
        run = sample_until_enough(
            model, chains=settings.chains, warmup_steps=settings.warmup_steps,
            plan=BlockPlan(settings.block_draws, settings.draws_limit),
            acceptance_target=settings.acceptance_target, seed=settings.seed, judge=judge,
            on_progress=None if display is None else display.update,
            processes=settings.chains > 1 and chain_cores(settings) > 1)
        if display is not None:
            display.close("enough draws" if run.stop == STOP_ENOUGH else None)
        idata, stop = run.idata, run.stop
        idata.sample_stats.attrs["bayeszi_sampler"] = "pymc-nuts-blocks"
    attrs = idata.sample_stats.attrs
    attrs["bayeszi_draws"] = int(idata.posterior.sizes.get("draw", 0))
    attrs["bayeszi_stop"] = stop
    return idata


def _diagnosed(idata: az.InferenceData, design: Design) -> Diagnostics:
    """The sampler diagnostics, with coefficients named by their terms' labels (what the
    warnings and tables show) instead of the formula's term names."""
    diag = diagnose(idata)
    if idata.sample_stats.attrs.get("bayeszi_stop") == STOP_LIMIT:
        diag = dataclasses.replace(diag, more_draws=(
            f"The limit of {idata.posterior.sizes['draw']} draws per chain was reached; raise "
            "draws_limit (--draws-limit) or run more chains"))
    keys = design.parameter_labels()
    if not keys:
        return diag
    return dataclasses.replace(diag, table=diag.table.rename(index=keys),
                               bad_rhat=[keys.get(k, k) for k in diag.bad_rhat],
                               bad_ess=[keys.get(k, k) for k in diag.bad_ess])


def rebuild_record(spec: ModelSpec, data: pd.DataFrame, idata: az.InferenceData,
                   timing: dict[str, float] | None = None) -> FitRecord:
    """The record of a fit from its saved parts: the design is rebuilt from the data."""
    design = build_design(data, spec)
    priors = resolve(design, spec.priors)
    if logprior.GROUP not in idata.groups():  # saved before the log prior was kept
        try:
            logprior.store_log_prior(idata, build_model(design, priors).model)
        except KeyError:  # draws lack a sampled variable: no sensitivity (it says why)
            pass
    return FitRecord(spec, design, idata, priors, data[design.used_columns].copy(),
                     _diagnosed(idata, design), dict(timing or {}))


@contextlib.contextmanager
def _watch_interrupts():
    """Record Ctrl-C (SIGINT) while the block runs, then behave as before.

    PyMC catches the KeyboardInterrupt of a Ctrl-C during sampling and returns the draws made
    so far; the flag lets :func:`fit_record` refuse such a truncated result instead of
    handing it on as a fit. Outside the main thread signals cannot be watched: the flag
    stays unset.
    """
    hits: list[int] = []
    if threading.current_thread() is not threading.main_thread():
        yield hits
        return
    previous = signal.getsignal(signal.SIGINT)
    if previous is signal.SIG_IGN:  # Ctrl-C is switched off: leave it so
        yield hits
        return

    def handler(signum: int, frame: Any) -> None:
        hits.append(signum)
        if callable(previous):
            previous(signum, frame)
        raise KeyboardInterrupt

    signal.signal(signal.SIGINT, handler)
    try:
        yield hits
    finally:
        signal.signal(signal.SIGINT, previous)


def _sample_or_interrupt(model: pm.Model, settings: SamplerSettings, rows: int, judge=None
                         ) -> az.InferenceData:
    """Run NUTS; a Ctrl-C anywhere in it raises KeyboardInterrupt with a clear message, and
    a result with fewer draws than asked for is never returned."""
    with _watch_interrupts() as hits:
        try:
            idata = _draw(model, settings, rows, judge)
        except KeyboardInterrupt:
            raise KeyboardInterrupt(INTERRUPTED) from None
        except Exception:
            if hits:  # the sampler failed on the draws an interrupt cut short
                raise KeyboardInterrupt(INTERRUPTED) from None
            raise
    if hits:
        raise KeyboardInterrupt(INTERRUPTED)
    post = idata.posterior
    got = (int(post.sizes.get("chain", 0)), int(post.sizes.get("draw", 0)))
    expected = settings.draws if not settings.until_enough else got[1]
    if got != (settings.chains, expected) or got[1] > settings.most_draws:
        raise BayesziError(
            f"the sampler returned {got[0]} chain(s) of {got[1]} draws instead of "
            f"{settings.chains} of {settings.draws} (was it interrupted?); nothing was kept. "
            "Rerun fit()"
        )
    return idata
