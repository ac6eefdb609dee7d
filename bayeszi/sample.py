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
import xarray as xr

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


#: ``sampler="auto"`` uses nutpie (when installed) once a fit's work, patterns x (tune +
#: draws) x chains, reaches this; below it PyMC's NUTS finishes first, because numba's
#: compile (about 15 s) takes longer than PyTensor's C compile. Measured
#: (docs/performance.md): nutpie lost at 2.4e5 (400 records x 300 iterations x 2 chains,
#: 1.8x slower) and at 6e6-8e6 (2,000 records, 2 x 2,000 iterations: PyMC 0-30% faster),
#: and was 2.9x faster at 2.6e7 (20,000 discrete records).
NUTPIE_MIN_WORK = 1e7


def nutpie_version() -> str | None:
    """The installed nutpie's version, or None when it (or numba, which it compiles PyMC
    models with) cannot be imported."""
    try:
        import numba  # noqa: F401
        import nutpie
    except Exception:  # not installed, or broken by a version clash: treated as absent
        return None
    return str(getattr(nutpie, "__version__", "unknown"))


def choose_sampler(requested: str, work: float | None = None) -> str:
    """``"pymc"`` or ``"nutpie"`` for a requested ``"auto"``, ``"pymc"`` or ``"nutpie"``.

    ``"auto"`` takes nutpie when it is installed and ``work`` (patterns x iterations x
    chains; None counts as large) reaches :data:`NUTPIE_MIN_WORK`, else PyMC's NUTS.
    nutpie is optional: asked for by name but missing, it falls back to PyMC's NUTS with a
    :class:`BayesziWarning` that says how to install it.

    Example
    -------
    >>> choose_sampler("pymc")
    'pymc'
    >>> choose_sampler("auto", work=1e4)   # a small fit: PyMC starts faster
    'pymc'
    """
    if requested == "pymc":
        return "pymc"
    if requested == "auto":
        big = work is None or work >= NUTPIE_MIN_WORK
        return "nutpie" if big and nutpie_version() is not None else "pymc"
    if nutpie_version() is None:
        warnings.warn(
            "sampler='nutpie' was asked for but nutpie is not installed (or failed to "
            "import); using PyMC's NUTS instead. Install it with 'pip install nutpie[pymc]' or "
            "pass sampler='pymc' to silence this warning",
            BayesziWarning,
            stacklevel=3,
        )
        return "pymc"
    return "nutpie"


def fit_work(model: pm.Model, settings: SamplerSettings) -> float:
    """Patterns (or records) x (tune + draws) x chains: what :func:`choose_sampler` weighs."""
    lik = getattr(model, "bayeszi_likelihood", None)
    rows = lik.patterns.n_patterns if lik is not None else max(
        [int(np.prod(np.shape(model.rvs_to_values[rv].data))) for rv in model.observed_RVs]
        or [0])
    return float(rows) * (settings.tune + settings.draws) * settings.chains


def _quiet_pymc():
    """Context that hides PyMC's own sampling chatter (our warnings replace its advice)."""
    import contextlib
    import logging

    @contextlib.contextmanager
    def quiet():
        log = logging.getLogger("pymc")
        level = log.level
        log.setLevel(logging.ERROR)
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message=".*recommend running at least 4 chains.*")
            warnings.filterwarnings("ignore", category=RuntimeWarning)
            try:
                yield
            finally:
                log.setLevel(level)

    return quiet()


def _sample_pymc(model: pm.Model, settings: SamplerSettings, progress: bool
                 ) -> az.InferenceData:
    with model, _quiet_pymc():
        return pm.sample(
            draws=settings.draws,
            tune=settings.tune,
            chains=settings.chains,
            cores=_cores(settings),
            target_accept=settings.target_accept,
            random_seed=settings.seed,
            progressbar=progress,
            idata_kwargs={"log_likelihood": False},
            compute_convergence_checks=False,
        )


def _sample_nutpie(model: pm.Model, settings: SamplerSettings, progress: bool
                   ) -> az.InferenceData:
    import nutpie

    with _quiet_pymc(), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # numba's cache notes
        compiled = nutpie.compile_pymc_model(model)
        idata = nutpie.sample(
            compiled, draws=settings.draws, tune=settings.tune, chains=settings.chains,
            cores=_cores(settings), seed=settings.seed, progress_bar=progress,
            save_warmup=False, target_accept=settings.target_accept,
        )
    if idata.posterior.sizes.get("draw", 0) < settings.draws:
        # nutpie returns what it has when interrupted; a fit keeps all draws or none
        raise KeyboardInterrupt("nutpie stopped before all draws were taken")
    stats = idata.sample_stats
    if "maxdepth_reached" in stats and "reached_max_treedepth" not in stats:
        stats["reached_max_treedepth"] = stats["maxdepth_reached"]
    # the observed counts, as PyMC stores them
    obs = {}
    for rv in model.observed_RVs:
        dims = tuple(model.named_vars_to_dims.get(rv.name) or ())
        obs[rv.name] = xr.DataArray(np.asarray(model.rvs_to_values[rv].data), dims=dims or None,
                                    coords={d: list(model.coords[d]) for d in dims})
    idata.add_groups(observed_data=xr.Dataset(obs))
    return idata


def run_nuts(model: pm.Model, settings: SamplerSettings) -> az.InferenceData:
    """Sample ``model`` with NUTS; the sampler used is recorded in ``sample_stats`` attrs.

    No pointwise log-likelihood is computed here: :func:`bayeszi.api.fit_spec` adds it after
    sampling, in NumPy (:func:`bayeszi.patterns.pattern_log_likelihood`).

    ``settings.sampler`` picks PyMC's NUTS (``"pymc"``), nutpie (``"nutpie"``, optional:
    falls back to PyMC with a warning when missing) or the measured default (``"auto"``,
    see :func:`choose_sampler`).
    The attribute ``bayeszi_sampler`` reads ``"pymc-nuts"`` or ``"nutpie-<version>"``.
    """
    progress = settings.progressbar
    if progress is None:
        progress = sys.stderr.isatty()
    name = choose_sampler(settings.sampler, fit_work(model, settings))
    if name == "nutpie":
        idata = _sample_nutpie(model, settings, bool(progress))
        label = f"nutpie-{nutpie_version()}"
    else:
        idata = _sample_pymc(model, settings, bool(progress))
        label = "pymc-nuts"
    idata.sample_stats.attrs["bayeszi_sampler"] = label
    return idata


#: Name prefixes of the raw variables bayeszi.build samples for group effects (standard
#: normals, correlation transforms, centred levels); their effects are diagnosed instead.
_RAW_PREFIXES = tuple(f"{part}_{kind}_" for part in ("counts", "zeros")
                      for kind in ("z", "slope_z", "level")) + ("z_",)


def parameter_names(idata: az.InferenceData) -> list[str]:
    """The posterior variables worth diagnosing (skips raw non-centred z's and centred
    levels, whose effects are diagnosed instead)."""
    names = []
    for v in map(str, idata.posterior.data_vars):
        # by prefix: a grouping column's own name (say 'zone_z_1') must not hide its effects
        if v.startswith(_RAW_PREFIXES) or "_chol" in v or v.endswith("_std_coef") \
                or "_std_coef_" in v:
            continue
        names.append(v)
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
