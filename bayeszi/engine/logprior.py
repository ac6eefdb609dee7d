"""The log prior density of every draw, kept in the InferenceData (group ``log_prior``).

Prior sensitivity (:mod:`bayeszi.answers.sensitivity`) reweights the existing draws as if
the prior were raised to a power near 1; for that it needs log p(theta) at every draw. It is
computed once after sampling by PyMC itself (``pymc.compute_log_prior``, on the constrained
scale, without the Jacobian of the sampler's transforms), so it is the density of the very
model that was sampled, and it is saved and loaded with the draws.

Only the *top-level* priors are kept: the coefficients of both parts, the dispersion, the
group sds (intercepts and slopes) and the correlation of correlated intercepts. The
standardised group effects (``counts_z_reach``, ...) and the centred levels are left out: their
normal density is the hierarchical part of the model, whose scale is itself a parameter, and
power-scaling it would not ask "does the prior I chose decide the answer?" (Kallioinen,
Paananen, Buerkner & Vehtari 2023, Stat. Comput., recommend scaling the top-level priors of
hierarchical models; from memory).

Example
-------
>>> from bayeszi.engine.logprior import is_top_level
>>> is_top_level("counts_std_coef"), is_top_level("counts_z_reach")
(True, False)
"""

from __future__ import annotations

import warnings

import arviz as az
import numpy as np
import pymc as pm
import xarray as xr

from bayeszi.base import names

GROUP = "log_prior"
"""The InferenceData group that holds the log prior per draw."""

#: name beginnings of sampled variables that belong to the hierarchical part (left out)
_HIERARCHICAL = tuple(f(part, "") for part in names.PARTS
                      for f in (names.group_raw, names.slope_raw, names.level))


def is_top_level(name: str) -> bool:
    """Whether free variable ``name`` carries a top-level prior (see the module text).

    Example
    -------
    >>> is_top_level("dispersion_sqrt"), is_top_level("counts_level_reach")
    (True, False)
    """
    return not name.startswith(_HIERARCHICAL)


def store_log_prior(idata: az.InferenceData, model: pm.Model) -> list[str]:
    """Add the group ``log_prior`` (one variable per top-level prior, per element) to
    ``idata``, replacing an earlier one; returns the variables' names.

    Example
    -------
    >>> store_log_prior(fitted.idata, built.model)              # doctest: +SKIP
    ['counts_std_coef', 'zeros_std_coef', 'dispersion_sqrt', 'counts_sd_reach', ...]
    """
    top = [rv.name for rv in model.free_RVs if is_top_level(rv.name)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = pm.compute_log_prior(idata, var_names=top, model=model,
                                  extend_inferencedata=False, progressbar=False)
    ds.attrs = {}
    if GROUP in idata.groups():
        del idata[GROUP]
    idata.add_groups({GROUP: ds})
    return top


def total(idata: az.InferenceData) -> xr.DataArray:
    """The summed top-level log prior per draw, dims (chain, draw).

    Example
    -------
    >>> total(fitted.idata).dims                                # doctest: +SKIP
    ('chain', 'draw')
    """
    ds = idata[GROUP]
    out = None
    for v in ds.data_vars:
        da = ds[v]
        extra = [d for d in da.dims if d not in ("chain", "draw")]
        part = da.sum(extra) if extra else da
        out = part if out is None else out + part
    if out is None:
        post = idata.posterior
        return xr.DataArray(np.zeros((post.sizes["chain"], post.sizes["draw"])),
                            dims=("chain", "draw"))
    return out.transpose("chain", "draw")


__all__ = ["GROUP", "is_top_level", "store_log_prior", "total"]
