"""Run NUTS on CPU: PyMC's sampler for small fits, nutpie for big ones.

:func:`run_nuts` samples a PyMC model and returns an ArviZ InferenceData; the diagnostics
of the draws are :mod:`bayeszi.model.diagnostics`. Progress is bayeszi's own line
(:mod:`bayeszi.model.progress`); the samplers' progress bars and advice stay hidden.

Example
-------
>>> from bayeszi.model.sample import choose_sampler
>>> choose_sampler("pymc")
'pymc'
"""

from __future__ import annotations

import os
import sys
import time
import warnings

import arviz as az
import numpy as np
import pymc as pm
import xarray as xr

from bayeszi.base.errors import BayesziWarning
from bayeszi.base.spec import SamplerSettings
from bayeszi.model.enough import BlockPlan, sample_until_enough
from bayeszi.model.progress import SamplingProgress


def chain_cores(settings: SamplerSettings) -> int:
    """Cores for the chains: as set, else one per chain up to the machine's."""
    if settings.cores is not None:
        return settings.cores
    return max(1, min(settings.chains, os.cpu_count() or 1))


#: ``sampler="auto"`` uses nutpie once a fit's work, patterns x (warm-up steps +
#: draws) x chains, reaches this; below it PyMC's NUTS finishes first, because numba's
#: compile (about 15 s) takes longer than PyTensor's C compile. Measured
#: (docs/performance.md): nutpie lost at 2.4e5 (400 records x 300 iterations x 2 chains,
#: 1.8x slower) and at 6e6-8e6 (2,000 records, 2 x 2,000 iterations: PyMC 0-30% faster),
#: and was 2.9x faster at 2.6e7 (20,000 discrete records).
NUTPIE_MIN_WORK = 1e7
#: from this much work on, a fit that has to fall back to PyMC's NUTS (nutpie cannot be
#: imported) warns before sampling that it will be slow: nutpie was 2.9x faster at 2.6e7
#: (docs/performance.md), and on a real 20,000-record panel (8e7) PyMC's NUTS gave no
#: answer in 25 minutes where nutpie took 4 (issue 23).
SLOW_WITHOUT_NUTPIE_WORK = 2e7


def nutpie_problem() -> str | None:
    """Why nutpie (with numba, which it compiles PyMC models with) cannot be used here, or
    None when both import.

    Example
    -------
    >>> nutpie_problem() is None or isinstance(nutpie_problem(), str)
    True
    """
    try:
        import numba  # noqa: F401
        import nutpie  # noqa: F401
    except Exception as err:  # missing, or broken by a version clash: treated as absent
        return f"{type(err).__name__}: {' '.join(str(err).split())[:200]}"
    return None


def nutpie_version() -> str | None:
    """The installed nutpie's version, or None when it (or numba) cannot be imported."""
    if nutpie_problem() is not None:
        return None
    import nutpie

    return str(getattr(nutpie, "__version__", "unknown"))


def slow_fit_warning(requested: str, work: float | None) -> str | None:
    """The warning a fit of ``work`` gets before sampling when ``sampler=requested`` would
    take nutpie but nutpie cannot be imported; None when there is nothing to say.

    Example
    -------
    >>> slow_fit_warning("pymc", 1e12) is None     # PyMC's NUTS asked for by name
    True
    """
    if requested != "auto" or (work is not None and work < SLOW_WITHOUT_NUTPIE_WORK):
        return None
    problem = nutpie_problem()
    if problem is None:
        return None
    size = "" if work is None else f" (about {work / 1e6:,.0f} million record evaluations)"
    return (
        f"this is a big fit{size}, and nutpie, the sampler bayeszi uses for big fits, "
        f"cannot be imported here ({problem}); PyMC's NUTS will sample instead and can take "
        "several times as long. nutpie is a dependency of bayeszi: reinstall it with "
        "'pip install \"nutpie[pymc]>=0.16.8,<0.17\"' (it needs numba too), or pass "
        "sampler='pymc' to go ahead with PyMC's NUTS without this warning"
    )


def choose_sampler(requested: str, work: float | None = None) -> str:
    """``"pymc"`` or ``"nutpie"`` for a requested ``"auto"``, ``"pymc"`` or ``"nutpie"``.

    ``"auto"`` takes nutpie when it can be imported and ``work`` (patterns x iterations x
    chains; None counts as large) reaches :data:`NUTPIE_MIN_WORK`, else PyMC's NUTS; a big
    fit that falls back to PyMC's NUTS warns first (:func:`slow_fit_warning`). nutpie asked
    for by name but not importable falls back to PyMC's NUTS with a
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
        if work is not None and work < NUTPIE_MIN_WORK:
            return "pymc"
        message = slow_fit_warning(requested, work)
        if message is not None:
            warnings.warn(message, BayesziWarning, stacklevel=3)
        return "nutpie" if nutpie_version() is not None else "pymc"
    if nutpie_version() is None:
        warnings.warn(
            "sampler='nutpie' was asked for but nutpie cannot be imported "
            f"({nutpie_problem()}); using PyMC's NUTS instead. Reinstall it with "
            "'pip install \"nutpie[pymc]>=0.16.8,<0.17\"' or pass sampler='pymc' to silence "
            "this warning",
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


def progress_display(settings: SamplerSettings, show: bool, label: str
                     ) -> SamplingProgress | None:
    """bayeszi's progress line for this fit, or None when progress is off: warm-up steps
    plus the most draws the fit can take (:attr:`SamplerSettings.most_draws`), all chains.

    >>> progress_display(SamplerSettings(), False, "nutpie") is None
    True
    """
    if not show:
        return None
    total = (settings.warmup_steps + settings.most_draws) * settings.chains
    return SamplingProgress(total, f"{label}, {settings.chains} chain(s)")


#: draws per chain in each block of a fixed PyMC run (the progress line moves once a block)
FIXED_BLOCK = 100


def _sample_pymc(model: pm.Model, settings: SamplerSettings, progress: bool
                 ) -> az.InferenceData:
    """``settings.draws`` draws per chain with PyMC's NUTS step method, in blocks of
    :data:`FIXED_BLOCK` (:func:`~bayeszi.model.enough.sample_until_enough` without a judge:
    the draws of ``pm.sample`` with the same seed, wherever the blocks fall)."""
    display = progress_display(settings, progress, "PyMC's NUTS")
    t0 = time.perf_counter()
    run = sample_until_enough(
        model, chains=settings.chains, warmup_steps=settings.warmup_steps,
        plan=BlockPlan(FIXED_BLOCK, settings.draws),
        acceptance_target=settings.acceptance_target, seed=settings.seed, judge=None,
        on_progress=None if display is None else display.update,
        processes=settings.chains > 1 and chain_cores(settings) > 1)
    if display is not None:
        display.close()
    # as pm.sample records it (strata runs add it up)
    run.idata.posterior.attrs["sampling_time"] = time.perf_counter() - t0
    return run.idata


#: what nutpie's progress callback renders for us: draws done, draws in all, divergences
_NUTPIE_TEMPLATE = ("{{ total_finished_draws }} {{ total_draws }}"
                    "{% for chain in chains %} {{ chain.divergences }}{% endfor %}")


def _nutpie_settings(settings: SamplerSettings):
    """nutpie's sampler settings for ``settings`` (see :data:`NUTPIE_OPTIONS`)."""
    from nutpie import _lib

    nuts = _lib.PyNutsSettings.Diag(settings.seed)
    nuts.num_tune = settings.warmup_steps
    nuts.num_draws = settings.draws
    nuts.num_chains = settings.chains
    nuts.target_accept = settings.acceptance_target
    return nuts


def start_nutpie(compiled, nuts, cores: int, feed, template: str = None):
    """Start nutpie in the background with ``nuts`` (its settings object) and a progress
    callback ``feed(text)`` fed ``template`` rendered twice a second; returns the running
    sampler (nutpie's ``_BackgroundSampler``: ``wait``, ``inspect``, ``cancel``). Uses
    nutpie's lower-level sampler interface (as ``nutpie.sample`` does inside); None when this
    nutpie does not offer it.

    Example
    -------
    >>> sampler = start_nutpie(compiled, _nutpie_settings(settings), 2, print)  # doctest: +SKIP
    >>> idata = sampler.wait()                                                 # doctest: +SKIP
    """
    try:
        from nutpie import _lib
        from nutpie.sample import _BackgroundSampler
    except ImportError:
        return None
    try:
        kind = _lib.ProgressType.template_callback(500, template or _NUTPIE_TEMPLATE, cores,
                                                   feed)
        sampler = object.__new__(_BackgroundSampler)
        sampler._settings, sampler._compiled_model = nuts, compiled
        sampler._save_warmup, sampler._return_raw_trace = False, False
        sampler._html, sampler._zarr_store = None, None
        sampler._store = _lib.PyStorage.arrow()
        sampler._sampler = compiled._make_sampler(
            nuts, np.zeros(compiled.n_dim), cores, kind, sampler._store)
    except (AttributeError, TypeError):  # another nutpie inside
        return None
    return sampler


def _nutpie_with_progress(compiled, settings: SamplerSettings, display: SamplingProgress):
    """Start nutpie with a progress callback that feeds ``display``; None when this nutpie
    does not offer its lower-level interface (the caller samples without progress)."""
    def feed(text: str) -> None:
        parts = [int(float(v)) for v in text.split()]
        if len(parts) >= 2:
            display.update(parts[0], sum(parts[2:]))

    return start_nutpie(compiled, _nutpie_settings(settings), chain_cores(settings), feed)


def _nutpie_draws(compiled, settings: SamplerSettings, progress: bool) -> az.InferenceData:
    """Sample a compiled model with nutpie; all draws or a KeyboardInterrupt."""
    import nutpie

    display = progress_display(settings, progress, "nutpie")
    sampler = _nutpie_with_progress(compiled, settings, display) if display else None
    if sampler is None:
        idata = nutpie.sample(
            compiled, draws=settings.draws, tune=settings.warmup_steps, chains=settings.chains,
            cores=chain_cores(settings), seed=settings.seed, progress_bar=False,
            save_warmup=False, target_accept=settings.acceptance_target,
        )
    else:
        try:
            idata = sampler.wait()
        except BaseException:  # Ctrl-C or a failure: stop the chains, keep nothing
            sampler.cancel()
            raise
        display.close()
    if idata.posterior.sizes.get("draw", 0) < settings.draws:
        # nutpie returns what it has when interrupted; a fit keeps all draws or none
        raise KeyboardInterrupt("nutpie stopped before all draws were taken")
    return idata


def compile_nutpie(model: pm.Model):
    """The model compiled for nutpie (numba), with PyMC's and numba's chatter hidden."""
    import nutpie

    with _quiet_pymc(), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # numba's cache notes
        return nutpie.compile_pymc_model(model)


def as_pymc_idata(model: pm.Model, idata: az.InferenceData) -> az.InferenceData:
    """nutpie's draws read as PyMC's: the tree-depth flag under PyMC's name and the
    observed counts stored as PyMC stores them."""
    stats = idata.sample_stats
    if "maxdepth_reached" in stats and "reached_max_treedepth" not in stats:
        stats["reached_max_treedepth"] = stats["maxdepth_reached"]
    obs = {}
    for rv in model.observed_RVs:
        dims = tuple(model.named_vars_to_dims.get(rv.name) or ())
        obs[rv.name] = xr.DataArray(np.asarray(model.rvs_to_values[rv].data), dims=dims or None,
                                    coords={d: list(model.coords[d]) for d in dims})
    idata.add_groups(observed_data=xr.Dataset(obs))
    return idata


def _sample_nutpie(model: pm.Model, settings: SamplerSettings, progress: bool
                   ) -> az.InferenceData:
    compiled = compile_nutpie(model)
    with _quiet_pymc(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        idata = _nutpie_draws(compiled, settings, progress)
    return as_pymc_idata(model, idata)


def show_progress(settings: SamplerSettings) -> bool:
    """Whether the fit shows bayeszi's progress line: as set, else when standard error is a
    terminal."""
    if settings.progressbar is None:
        return sys.stderr.isatty()
    return bool(settings.progressbar)


def run_nuts(model: pm.Model, settings: SamplerSettings, rows: int) -> az.InferenceData:
    """Sample ``model`` with NUTS; the sampler used is recorded in ``sample_stats`` attrs.

    No pointwise log-likelihood is computed here: :func:`bayeszi.fitting.api.fit_spec` adds it after
    sampling, in NumPy (:func:`bayeszi.engine.pointwise.pattern_log_likelihood`). ``rows`` is
    the number of rows the density sums over (patterns), which the automatic choice weighs.

    ``settings.sampler`` picks PyMC's NUTS (``"pymc"``), nutpie (``"nutpie"``: falls back
    to PyMC with a warning when it cannot be imported) or the measured default (``"auto"``,
    see :func:`choose_sampler`). ``settings.progressbar`` (None: when standard error is a
    terminal) shows bayeszi's progress line (:class:`~bayeszi.model.progress.SamplingProgress`).
    The attribute ``bayeszi_sampler`` reads ``"pymc-nuts"`` or ``"nutpie-<version>"``.
    """
    progress = show_progress(settings)
    name = choose_sampler(settings.sampler, fit_work(rows, settings))
    if name == "nutpie":
        idata = _sample_nutpie(model, settings, bool(progress))
        label = f"nutpie-{nutpie_version()}"
    else:
        idata = _sample_pymc(model, settings, bool(progress))
        label = "pymc-nuts"
    idata.sample_stats.attrs["bayeszi_sampler"] = label
    return idata
