"""Run NUTS on CPU and surface the sampler's diagnostics.

:func:`run_nuts` samples a PyMC model and returns an ArviZ InferenceData with the pointwise
log-likelihood stored for LOO. :func:`diagnose` computes divergences, R-hat and bulk/tail
ESS per parameter and :func:`warn_about` turns each problem into a warning that names the
parameters and says what to try.

Example
-------
>>> from bayeszi.sample import Thresholds
>>> Thresholds().rhat
1.01
"""

from __future__ import annotations

import os
import sys
import warnings
from dataclasses import dataclass

import arviz as az
import numpy as np
import pymc as pm

from bayeszi.spec import SamplerSettings
from bayeszi.validate import BayesziWarning


@dataclass(frozen=True)
class Thresholds:
    """What counts as sampler trouble (R-hat per Vehtari et al. 2021, Bayesian Anal.)."""

    rhat: float = 1.01
    ess: float = 400.0


def _cores(settings: SamplerSettings) -> int:
    if settings.cores is not None:
        return settings.cores
    return max(1, min(settings.chains, os.cpu_count() or 1))


def run_nuts(model: pm.Model, settings: SamplerSettings) -> az.InferenceData:
    """Sample ``model`` with NUTS; the sampler used is recorded in ``sample_stats`` attrs."""
    progress = settings.progressbar
    if progress is None:
        progress = sys.stderr.isatty()
    with model, warnings.catch_warnings():
        # PyMC's own advice is replaced by ours (see warn_about); keep the console calm.
        warnings.filterwarnings("ignore", message=".*recommend running at least 4 chains.*")
        warnings.filterwarnings("ignore", category=RuntimeWarning)
        import logging

        log = logging.getLogger("pymc")
        level = log.level
        log.setLevel(logging.ERROR)
        try:
            idata = pm.sample(
                draws=settings.draws,
                tune=settings.tune,
                chains=settings.chains,
                cores=_cores(settings),
                target_accept=settings.target_accept,
                random_seed=settings.seed,
                progressbar=progress,
                idata_kwargs={"log_likelihood": True},
                compute_convergence_checks=False,
            )
        finally:
            log.setLevel(level)
    idata.sample_stats.attrs["bayeszi_sampler"] = "pymc-nuts"
    return idata


def parameter_names(idata: az.InferenceData) -> list[str]:
    """The posterior variables worth diagnosing (skips raw non-centred z's)."""
    names = []
    for v in idata.posterior.data_vars:
        if "_z_" in v or v.startswith("z_") or "_chol" in v or v.endswith("_std_coef") \
                or "_std_coef_" in v:
            continue
        names.append(str(v))
    return names


def diagnose(idata: az.InferenceData, thresholds: Thresholds | None = None) -> dict:
    """Per-parameter R-hat and ESS (DataFrame) plus the divergence count and flags."""
    th = thresholds or Thresholds()
    names = parameter_names(idata)
    chains = int(idata.posterior.sizes["chain"])
    import logging

    log = logging.getLogger("arviz")
    level = log.level
    log.setLevel(logging.CRITICAL)  # one chain: arviz logs a shape message; we say it plainly
    try:
        summ = az.summary(idata, var_names=names, kind="diagnostics", round_to="none")
    finally:
        log.setLevel(level)
    summ = summ[["r_hat", "ess_bulk", "ess_tail"]].copy()
    if chains < 2:
        summ["r_hat"] = np.nan
    div = int(np.asarray(idata.sample_stats["diverging"]).sum())
    n_draws = int(idata.posterior.sizes["chain"] * idata.posterior.sizes["draw"])
    bad_rhat = summ.index[summ["r_hat"] > th.rhat].tolist()
    bad_ess = summ.index[(summ["ess_bulk"] < th.ess) | (summ["ess_tail"] < th.ess)].tolist()
    tree = idata.sample_stats.get("reached_max_treedepth")
    max_depth = int(np.asarray(tree).sum()) if tree is not None else 0
    return {
        "table": summ,
        "divergences": div,
        "draws": n_draws,
        "bad_rhat": bad_rhat,
        "bad_ess": bad_ess,
        "max_treedepth_hits": max_depth,
        "thresholds": th,
        "chains": chains,
    }


def _short(names: list[str], most: int = 6) -> str:
    more = len(names) - most
    return ", ".join(names[:most]) + (f" and {more} more" if more > 0 else "")


def problems(diag: dict) -> list[str]:
    """Plain-language descriptions of each sampler problem, with what to try."""
    th: Thresholds = diag["thresholds"]
    out = []
    if diag.get("chains", 2) < 2:
        out.append("only one chain was run, so R-hat cannot check convergence; use chains=2 "
                   "or more")
    if diag["divergences"]:
        out.append(
            f"{diag['divergences']} divergent transition(s) out of {diag['draws']} draws: the "
            "sampler met curvature it could not follow, so the draws may be biased. Try "
            "target_accept=0.95 or 0.99; if they persist, tighter priors on group sds or "
            "the dispersion, or a simpler zeros formula"
        )
    if diag["bad_rhat"]:
        out.append(
            f"R-hat above {th.rhat} for {_short(diag['bad_rhat'])}: the chains disagree. Run "
            "more tune and draws (e.g. tune=2000, draws=2000) and check the model is identified"
        )
    if diag["bad_ess"]:
        out.append(
            f"bulk or tail ESS below {th.ess:.0f} for {_short(diag['bad_ess'])}: too few "
            "effective draws for stable intervals. Run more draws or chains"
        )
    if diag["max_treedepth_hits"]:
        out.append(
            f"{diag['max_treedepth_hits']} draw(s) hit the maximum tree depth: sampling is slow "
            "and may be inefficient; check for strongly correlated or weakly identified terms"
        )
    return out


def warn_about(diag: dict) -> None:
    """Issue one :class:`BayesziWarning` per problem found."""
    for text in problems(diag):
        warnings.warn(text, BayesziWarning, stacklevel=3)
