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

import contextlib
import signal
import threading
import time
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import arviz as az
import pandas as pd
import pymc as pm

from bayeszi import loglik
from bayeszi.build import build_model
from bayeszi.design import build_design
from bayeszi.errors import BayesziError
from bayeszi.fitted import FittedModel, add_user_scale
from bayeszi.patterns import pattern_log_likelihood
from bayeszi.priors import resolve
from bayeszi.sample import diagnose, run_nuts, warn_about
from bayeszi.spec import ModelSpec, SamplerSettings


def make_spec(counts: str, zeros: str | None = "~ 1", family: str = "zinb",
              exposure: str | None = None, offset: str | None = None,
              groups: str | Sequence[str] | None = None,
              varying: Mapping[str, Sequence[str]] | None = None,
              nested: Mapping[str, str] | None = None, correlated: bool = False,
              priors: Mapping[str, Any] | None = None, **sampler: Any) -> ModelSpec:
    """Build a validated :class:`ModelSpec` from :func:`fit`'s keyword arguments."""
    known = {"draws", "tune", "chains", "cores", "target_accept", "seed", "progressbar",
             "sampler"}
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


def assemble(spec: ModelSpec, data: pd.DataFrame, idata: az.InferenceData) -> FittedModel:
    """Rebuild a fitted model from its spec, data and draws (used by load)."""
    design = build_design(data, spec)
    priors = resolve(design, spec.priors)
    fitted = FittedModel(spec, design, idata, priors)
    fitted._data = data[design.used_columns].copy()  # type: ignore[attr-defined]
    return fitted


def fit(data: pd.DataFrame, counts: str, zeros: str | None = "~ 1", family: str = "zinb",
        exposure: str | None = None, offset: str | None = None,
        groups: str | Sequence[str] | None = None,
        varying: Mapping[str, Sequence[str]] | None = None,
        nested: Mapping[str, str] | None = None, correlated: bool = False,
        priors: Mapping[str, Any] | None = None, prior_draws: int = 0,
        draws: int = 1000, tune: int = 1000, chains: int = 2, cores: int | None = None,
        target_accept: float = 0.9, seed: int | None = None,
        progressbar: bool | None = None, sampler: str = "auto") -> FittedModel:
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
    priors : overrides, see :mod:`bayeszi.priors`.
    prior_draws : also store this many prior and prior predictive draws.
    draws, tune, chains, cores, target_accept, seed, progressbar, sampler : NUTS settings.

    Returns
    -------
    FittedModel

    Example
    -------
    >>> m = fit(df, counts="crayfish ~ depth", zeros="~ barrier", family="zip",
    ...         exposure="trap_nights", seed=1)                    # doctest: +SKIP
    """
    spec = make_spec(counts, zeros, family, exposure, offset, groups, varying, nested,
                     correlated, priors, draws=draws, tune=tune, chains=chains, cores=cores,
                     target_accept=target_accept, seed=seed, progressbar=progressbar,
                     sampler=sampler)
    return fit_spec(data, spec, prior_draws=prior_draws)


def fit_spec(data: pd.DataFrame, spec: ModelSpec, prior_draws: int = 0) -> FittedModel:
    """Fit a ready :class:`ModelSpec` to ``data`` (see :func:`fit`)."""
    if not isinstance(spec, ModelSpec):
        raise BayesziError(f"fit_spec() needs a ModelSpec (see bayeszi.make_spec), got "
                           f"{type(spec).__name__}")
    if isinstance(prior_draws, bool) or not isinstance(prior_draws, int) or prior_draws < 0:
        raise BayesziError(f"prior_draws must be a non-negative whole number, got "
                           f"{prior_draws!r}")
    t0 = time.perf_counter()
    design = build_design(data, spec)
    priors = resolve(design, spec.priors)
    model = build_model(design, priors)
    t1 = time.perf_counter()
    idata = _sample_or_interrupt(model, spec.sampler)
    t2 = time.perf_counter()
    add_user_scale(idata, design)
    if prior_draws:
        with model, warnings.catch_warnings():
            warnings.simplefilter("ignore")
            prior = pm.sample_prior_predictive(prior_draws, random_seed=spec.sampler.seed)
        idata.extend(prior)
    fitted = FittedModel(spec, design, idata, priors)
    # the pointwise log-likelihood for LOO, per pattern in NumPy (nothing to compile)
    t3 = time.perf_counter()
    pats = model.bayeszi_likelihood.patterns
    loglik.store(idata, pattern_log_likelihood(fitted, pats), obs=list(model.coords["obs"]),
                 inverse=pats.inverse)
    fitted.timing = {"build_s": t1 - t0, "sample_s": t2 - t1,
                     "log_likelihood_s": time.perf_counter() - t3}
    fitted._data = data[design.used_columns].copy()  # type: ignore[attr-defined]
    diag = diagnose(idata)
    fitted._diag = diag
    warn_about(diag)
    return fitted


INTERRUPTED = "sampling interrupted: nothing was kept or written; rerun fit() to start again"


@contextlib.contextmanager
def _watch_interrupts():
    """Record Ctrl-C (SIGINT) while the block runs, then behave as before.

    PyMC catches the KeyboardInterrupt of a Ctrl-C during sampling and returns the draws made
    so far; the flag lets :func:`fit_spec` refuse such a truncated result instead of handing
    it on as a fit. Outside the main thread signals cannot be watched: the flag stays unset.
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


def _sample_or_interrupt(model: pm.Model, settings: SamplerSettings) -> az.InferenceData:
    """Run NUTS; a Ctrl-C anywhere in it raises KeyboardInterrupt with a clear message, and
    a result with fewer draws than asked for is never returned."""
    with _watch_interrupts() as hits:
        try:
            idata = run_nuts(model, settings)
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
    if got != (settings.chains, settings.draws):
        raise BayesziError(
            f"the sampler returned {got[0]} chain(s) of {got[1]} draws instead of "
            f"{settings.chains} of {settings.draws} (was it interrupted?); nothing was kept. "
            "Rerun fit()"
        )
    return idata


def prior_predictive(data: pd.DataFrame, counts: str, zeros: str | None = "~ 1",
                     family: str = "zinb", exposure: str | None = None,
                     offset: str | None = None, groups: str | Sequence[str] | None = None,
                     priors: Mapping[str, Any] | None = None, draws: int = 500,
                     seed: int | None = None, **kwargs: Any) -> az.InferenceData:
    """Draw from the prior and the prior predictive without fitting.

    Returns an InferenceData with ``prior`` and ``prior_predictive`` groups (``y`` has one
    value per row of ``data`` per draw). Use it to check that the priors give plausible counts.

    Example
    -------
    >>> pp = prior_predictive(df, counts="crayfish ~ depth", family="zip")  # doctest: +SKIP
    >>> float(pp.prior_predictive["y"].quantile(0.99))                      # doctest: +SKIP
    """
    spec = make_spec(counts, zeros, family, exposure, offset, groups, priors=priors,
                     seed=seed, **kwargs)
    design = build_design(data, spec)
    model = build_model(design, resolve(design, spec.priors))
    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = pm.sample_prior_predictive(draws, random_seed=seed)
    return out


def load(path: str) -> FittedModel:
    """Load a fit saved with :meth:`FittedModel.save`."""
    from bayeszi.store import load as _load

    return _load(path)


__all__ = ["fit", "fit_spec", "prior_predictive", "load", "make_spec"]
