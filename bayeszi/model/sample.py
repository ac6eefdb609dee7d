"""Run NUTS on CPU: PyMC's sampler, or nutpie for big fits when it is installed.

:func:`run_nuts` samples a PyMC model and returns an ArviZ InferenceData; the diagnostics
of the draws are :mod:`bayeszi.model.diagnostics`.

Example
-------
>>> from bayeszi.model.sample import choose_sampler
>>> choose_sampler("pymc")
'pymc'
"""

from __future__ import annotations

import os
import sys
import warnings

import arviz as az
import numpy as np
import pymc as pm
import xarray as xr

from bayeszi.base.errors import BayesziWarning
from bayeszi.base.spec import SamplerSettings


def _cores(settings: SamplerSettings) -> int:
    if settings.cores is not None:
        return settings.cores
    return max(1, min(settings.chains, os.cpu_count() or 1))


#: ``sampler="auto"`` uses nutpie (when installed) once a fit's work, patterns x (warm-up steps +
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


def fit_work(rows: int, settings: SamplerSettings) -> float:
    """Patterns (or records) x (warm-up steps + draws) x chains: what :func:`choose_sampler`
    weighs."""
    return float(rows) * (settings.warmup_steps + settings.draws) * settings.chains


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
            tune=settings.warmup_steps,
            chains=settings.chains,
            cores=_cores(settings),
            target_accept=settings.acceptance_target,
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
            compiled, draws=settings.draws, tune=settings.warmup_steps, chains=settings.chains,
            cores=_cores(settings), seed=settings.seed, progress_bar=progress,
            save_warmup=False, target_accept=settings.acceptance_target,
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


def run_nuts(model: pm.Model, settings: SamplerSettings, rows: int) -> az.InferenceData:
    """Sample ``model`` with NUTS; the sampler used is recorded in ``sample_stats`` attrs.

    No pointwise log-likelihood is computed here: :func:`bayeszi.fitting.api.fit_spec` adds it after
    sampling, in NumPy (:func:`bayeszi.engine.pointwise.pattern_log_likelihood`). ``rows`` is
    the number of rows the density sums over (patterns), which the automatic choice weighs.

    ``settings.sampler`` picks PyMC's NUTS (``"pymc"``), nutpie (``"nutpie"``, optional:
    falls back to PyMC with a warning when missing) or the measured default (``"auto"``,
    see :func:`choose_sampler`).
    The attribute ``bayeszi_sampler`` reads ``"pymc-nuts"`` or ``"nutpie-<version>"``.
    """
    progress = settings.progressbar
    if progress is None:
        progress = sys.stderr.isatty()
    name = choose_sampler(settings.sampler, fit_work(rows, settings))
    if name == "nutpie":
        idata = _sample_nutpie(model, settings, bool(progress))
        label = f"nutpie-{nutpie_version()}"
    else:
        idata = _sample_pymc(model, settings, bool(progress))
        label = "pymc-nuts"
    idata.sample_stats.attrs["bayeszi_sampler"] = label
    return idata
