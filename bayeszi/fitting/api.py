"""The front door: :func:`fit`, :func:`prior_predictive` and :func:`load`.

Example
-------
>>> import bayeszi as bz                                              # doctest: +SKIP
>>> df = bz.data.load_crayfish()                                      # doctest: +SKIP
>>> m = bz.fit(df, counts="crayfish ~ water_temp + C(substrate) + depth",
...            zeros="~ barrier", family="zinb", exposure="trap_nights",
...            groups="reach", seed=1)                                # doctest: +SKIP
>>> print(m)                                                          # doctest: +SKIP
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import arviz as az
import pandas as pd
import pymc as pm

from bayeszi.answers.sensitivity import warn_about_priors
from bayeszi.base.errors import BayesziError
from bayeszi.base.renamed import refuse_renamed, refusing_renamed
from bayeszi.base.spec import ModelSpec, SamplerSettings
from bayeszi.engine import archive
from bayeszi.engine.fit import fit_record
from bayeszi.fitting.fitted import FittedModel
from bayeszi.model.build import build_model
from bayeszi.model.collinearity import warn_collinear
from bayeszi.model.design import build_design
from bayeszi.model.diagnostics import warn_about
from bayeszi.model.priors import resolve


def make_spec(counts: str, zeros: str | None = "~ 1", family: str = "zinb",
              exposure: str | None = None, offset: str | None = None,
              groups: str | Sequence[str] | None = None,
              varying: Mapping[str, Sequence[str]] | None = None,
              nested: Mapping[str, str] | None = None, correlated: bool = False,
              priors: Mapping[str, Any] | None = None, **sampler: Any) -> ModelSpec:
    """Build a validated :class:`ModelSpec` from :func:`fit`'s keyword arguments."""
    refuse_renamed(sampler, "the arguments of make_spec()")
    known = {"draws", "warmup_steps", "chains", "cores", "acceptance_target", "seed",
             "progressbar", "sampler", "until_enough", "block_draws", "draws_limit"}
    bad = sorted(set(sampler) - known)
    if bad:
        import difflib

        hints = {b: difflib.get_close_matches(b, sorted(known), n=1) for b in bad}
        text = ", ".join(f"{b!r}" + (f" (did you mean {h[0]!r}?)" if h else "")
                         for b, h in hints.items())
        raise BayesziError(f"unknown setting(s) {text}; known: {sorted(known)}")
    # ModelSpec checks and normalises every argument (types included), naming the bad one
    return ModelSpec(
        counts=counts, zeros="~ 1" if zeros is None else zeros, family=family,
        exposure=exposure, offset=offset, groups=groups, varying=varying, nested=nested,
        correlated=correlated, priors=priors, sampler=SamplerSettings(**sampler),
    )


@refusing_renamed
def fit(data: pd.DataFrame, counts: str, zeros: str | None = "~ 1", family: str = "zinb",
        exposure: str | None = None, offset: str | None = None,
        groups: str | Sequence[str] | None = None,
        varying: Mapping[str, Sequence[str]] | None = None,
        nested: Mapping[str, str] | None = None, correlated: bool = False,
        priors: Mapping[str, Any] | None = None, prior_draws: int = 0,
        draws: int = 1000, warmup_steps: int = 1000, chains: int = 2, cores: int | None = None,
        acceptance_target: float = 0.9, seed: int | None = None,
        progressbar: bool | None = None, sampler: str = "auto", until_enough: bool = False,
        block_draws: int = 200, draws_limit: int = 4000) -> FittedModel:
    """Fit a count regression with an optional zeros part by NUTS.

    Parameters
    ----------
    data : one row per record.
    counts : ``"response ~ predictors"`` for the count part (log link).
    zeros : ``"~ predictors"`` for the zeros part (logit link): P(extra zero) in ``zip`` and
        ``zinb``, P(Y = 0) in the hurdle families; intercept only by default.
    family : ``poisson``, ``negbin``, ``zip``, ``zinb``, ``hurdle-poisson``, ``hurdle-negbin``.
    exposure : effort column, entering the counts part as ``log(exposure)``.
    offset : a ready-made log-offset column (instead of exposure).
    groups : grouping column(s): partially pooled intercepts in both parts.
    varying : terms whose slopes vary by group, per part, e.g. ``{"counts": ["depth"]}``.
    nested : ``{"reach": "river"}`` when reach labels repeat across rivers.
    correlated : correlate each group's counts and zeros intercepts (LKJ prior).
    priors : overrides, see :mod:`bayeszi.model.priors`.
    prior_draws : also store this many prior and prior predictive draws.
    draws, warmup_steps, chains, cores, acceptance_target, seed, progressbar, sampler :
        NUTS settings (warm-up steps adapt the step size and mass matrix; their draws are
        discarded).
    until_enough, block_draws, draws_limit : draw in blocks of ``block_draws`` per chain
        until every reported parameter's R-hat, bulk ESS and tail ESS pass the warning
        thresholds (R-hat 1.01, ESS 400), at most ``draws_limit`` per chain; ``draws`` is then
        not used. The fit says how many draws it took and why it stopped
        (``print(fit)`` and the models table of a report).
        ``progressbar`` shows bayeszi's progress line while sampling (iterations done,
        time elapsed, an estimate of the time left; default: when standard error is a
        terminal). ``sampler="auto"`` takes nutpie for big fits, PyMC's NUTS for small ones.

    Returns
    -------
    FittedModel

    Example
    -------
    >>> m = fit(df, counts="crayfish ~ depth", zeros="~ barrier", family="zip",
    ...         exposure="trap_nights", seed=1)                    # doctest: +SKIP
    """
    spec = make_spec(counts, zeros, family, exposure, offset, groups, varying, nested,
                     correlated, priors, draws=draws, warmup_steps=warmup_steps, chains=chains,
                     cores=cores, acceptance_target=acceptance_target, seed=seed,
                     progressbar=progressbar, sampler=sampler, until_enough=until_enough,
                     block_draws=block_draws, draws_limit=draws_limit)
    return fit_spec(data, spec, prior_draws=prior_draws)


def fit_spec(data: pd.DataFrame, spec: ModelSpec, prior_draws: int = 0) -> FittedModel:
    """Fit a ready :class:`ModelSpec` to ``data`` (see :func:`fit`).

    Before sampling, collinear predictors are named in a warning
    (:mod:`bayeszi.model.collinearity`); after it, sampler trouble
    (:mod:`bayeszi.model.diagnostics`) and parameters whose prior decides the answer
    (:mod:`bayeszi.answers.sensitivity`).
    """
    if not isinstance(spec, ModelSpec):
        raise BayesziError(f"fit_spec() needs a ModelSpec (see bayeszi.make_spec), got "
                           f"{type(spec).__name__}")
    if isinstance(prior_draws, bool) or not isinstance(prior_draws, int) or prior_draws < 0:
        raise BayesziError(f"prior_draws must be a non-negative whole number, got "
                           f"{prior_draws!r}")
    design = build_design(data, spec)
    warn_collinear(design)  # before sampling: the usual cause of a weak likelihood
    record = fit_record(data, spec, prior_draws=prior_draws, design=design)
    warn_about(record.sampling)
    warn_about_priors(record)
    return FittedModel.from_record(record)


@refusing_renamed
def prior_predictive(data: pd.DataFrame, counts: str, zeros: str | None = "~ 1",
                     family: str = "zinb", exposure: str | None = None,
                     offset: str | None = None, groups: str | Sequence[str] | None = None,
                     priors: Mapping[str, Any] | None = None, draws: int = 1000,
                     seed: int | None = None, **kwargs: Any) -> az.InferenceData:
    """Draw from the prior and the prior predictive without fitting.

    Returns an InferenceData with ``prior`` and ``prior_predictive`` groups (``y`` has one
    value per row of ``data`` per draw). Use it to check that the priors give plausible counts.

    Why 1000 draws by default: a prior check reads tail points such as the 1% and 99%
    quantiles of the simulated counts; with n draws the Monte Carlo sd of the probability at
    an empirical q-quantile is sqrt(q(1 - q) / n) (common practice, binomial sd), so with
    1000 draws the 99% point lies between the 98.4% and 99.6% points (2 sd), while 500 would
    widen that to 98.1-99.9%. The draws are forward simulation, with no sampler, so they
    cost little; memory is draws x records values.

    Example
    -------
    >>> pp = prior_predictive(df, counts="crayfish ~ depth", family="zip")  # doctest: +SKIP
    >>> float(pp.prior_predictive["y"].quantile(0.99))                      # doctest: +SKIP
    """
    spec = make_spec(counts, zeros, family, exposure, offset, groups, priors=priors,
                     seed=seed, **kwargs)
    design = build_design(data, spec)
    model = build_model(design, resolve(design, spec.priors)).model
    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = pm.sample_prior_predictive(draws, random_seed=seed)
    return out


def load(path: str) -> FittedModel:
    """Load a fit saved with :meth:`FittedModel.save`."""
    return FittedModel.from_record(archive.load(path))


__all__ = ["fit", "fit_spec", "prior_predictive", "load", "make_spec"]
