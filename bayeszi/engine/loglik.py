"""The pointwise log-likelihood that LOO needs: how a fit stores it and how it is read back.

LOO needs log p(y_i | draw s) for every record ``i`` and draw ``s``. Records that share a
pattern (:mod:`bayeszi.model.patterns`) have the same values, so a fit may store them once per
pattern. :func:`store` keeps one column per record while chains x draws x records float64
values fit in :data:`RECORD_LIMIT_BYTES`; above that, for a fit whose records pool into
fewer patterns, it keeps one column per pattern (dim ``obs_pattern``) and, in the variable
``obs_pattern_of`` (dim ``obs``), the pattern of every record. 200,000 records of 2 x 1,000
draws take 3.2 GB per record but 0.2 GB for 12,600 patterns.

:func:`loo` returns ArviZ's PSIS-LOO with one entry per *record* either way, computed as
``arviz.loo`` computes it but a chunk of columns at a time (``arviz.psislw`` per chunk), so
its memory does not grow with the number of records. Per pattern each pattern's column is
smoothed once (the Pareto smoothing of a column depends only on that column, so each record
gets exactly the value and Pareto k its own column would give) and spread back over the
records; the total, its standard error ``sqrt(n var(elpd_i))`` and ``p_loo = lppd - elpd``
are computed over the records. :func:`record_values` gives the per-record array for other uses.

Example
-------
>>> import arviz as az, numpy as np, xarray as xr
>>> rng = np.random.default_rng(1)
>>> idata = az.from_dict(posterior={"a": rng.normal(size=(2, 50))})
>>> pat = rng.normal(-1.0, 0.1, size=(2, 50, 3))              # 3 patterns
>>> store(idata, pat, obs=["r1", "r2", "r3", "r4"], inverse=np.array([0, 1, 1, 2]),
...       limit_bytes=0)
'pattern'
>>> record_values(idata).shape
(2, 50, 4)
>>> int(loo(idata).n_data_points)
4
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Any

import arviz as az
import numpy as np
import xarray as xr
from scipy.special import logsumexp

__all__ = ["LOO_CHUNK", "RECORD_LIMIT_BYTES", "loo", "n_records", "record_values",
           "relative_efficiency", "store", "stored_per", "total"]

#: Store per record while chains x draws x records float64 values take at most this many
#: bytes (512 MiB: 2 chains x 1,000 draws x 33,500 records); per pattern above it.
RECORD_LIMIT_BYTES = 2**29
#: Columns of the log-likelihood smoothed at a time by :func:`loo`.
LOO_CHUNK = 2000
PATTERN_DIM = "obs_pattern"
INDEX_VAR = "obs_pattern_of"


def store(idata: az.InferenceData, values: np.ndarray, obs: Sequence[Any],
          inverse: np.ndarray | None = None, limit_bytes: int | None = None) -> str:
    """Add the log-likelihood group ``y`` to ``idata``; returns ``"record"`` or ``"pattern"``.

    ``values`` has dims (chain, draw, k): per record (``inverse`` None, k = len(obs)) or per
    pattern (``inverse[i]`` the pattern of record ``i``). Per-pattern values are spread to
    records unless that would take more than ``limit_bytes`` (default
    :data:`RECORD_LIMIT_BYTES`, read at call time).

    Example
    -------
    >>> store(fitted.idata, ll, obs, inverse=patterns.inverse)   # doctest: +SKIP
    'record'
    """
    limit = RECORD_LIMIT_BYTES if limit_bytes is None else limit_bytes
    chain, draw = idata.posterior["chain"].values, idata.posterior["draw"].values
    n = len(obs)
    if inverse is not None and values.shape[-1] < n \
            and values.shape[0] * values.shape[1] * n * 8 > limit:
        ds = xr.Dataset(
            {"y": (("chain", "draw", PATTERN_DIM), values),
             INDEX_VAR: (("obs",), np.asarray(inverse, dtype=np.int64))},
            coords={"chain": chain, "draw": draw, "obs": list(obs),
                    PATTERN_DIM: np.arange(values.shape[-1])})
        idata.add_groups(log_likelihood=ds)
        return "pattern"
    if inverse is not None:  # patterns are not in record order even when none are pooled
        values = values[..., inverse]
    ds = xr.Dataset({"y": (("chain", "draw", "obs"), values)},
                    coords={"chain": chain, "draw": draw, "obs": list(obs)})
    idata.add_groups(log_likelihood=ds)
    return "record"


def stored_per(idata: az.InferenceData) -> str | None:
    """``"record"``, ``"pattern"`` or None (no log-likelihood ``y`` stored).

    Example
    -------
    >>> stored_per(fitted.idata)                                 # doctest: +SKIP
    'record'
    """
    if "log_likelihood" not in idata.groups() or "y" not in idata.log_likelihood:
        return None
    return "pattern" if PATTERN_DIM in idata.log_likelihood["y"].dims else "record"


def n_records(idata: az.InferenceData) -> int | None:
    """Number of records the stored log-likelihood covers (None when none is stored).

    Example
    -------
    >>> n_records(fitted.idata) == fitted.design.n                # doctest: +SKIP
    True
    """
    per = stored_per(idata)
    if per is None:
        return None
    if per == "pattern":
        return int(idata.log_likelihood[INDEX_VAR].sizes["obs"])
    return int(idata.log_likelihood["y"].sizes.get("obs", 0))


def record_values(idata: az.InferenceData) -> np.ndarray:
    """The log-likelihood per record, dims (chain, draw, record), however it is stored.
    Per pattern this builds the full array (chains x draws x records float64 values).

    Example
    -------
    >>> record_values(fitted.idata).shape                        # doctest: +SKIP
    (2, 1000, 200000)
    """
    ll = idata.log_likelihood["y"]
    if PATTERN_DIM not in ll.dims:
        return np.asarray(ll.values)
    return np.asarray(ll.values)[..., idata.log_likelihood[INDEX_VAR].values]


def total(idata: az.InferenceData) -> np.ndarray:
    """The log-likelihood of all records per draw, dims (chain, draw), however it is stored
    (per pattern, each pattern counts once per record it stands for).

    Example
    -------
    >>> total(fitted.idata).shape                                 # doctest: +SKIP
    (2, 1000)
    """
    ll = idata.log_likelihood["y"]
    values = np.asarray(ll.values)
    if PATTERN_DIM not in ll.dims:
        return values.sum(axis=-1)
    weights = np.bincount(idata.log_likelihood[INDEX_VAR].values, minlength=values.shape[-1])
    return values @ weights.astype(float)


def relative_efficiency(posterior: xr.Dataset) -> float:
    """Mean ESS over every posterior variable divided by the number of draws, as
    ``arviz.loo`` computes it for PSIS; non-finite ESS values (a constant variable) are left
    out, and 1.0 is returned when none remain.

    Example
    -------
    >>> relative_efficiency(fitted.idata.posterior)               # doctest: +SKIP
    0.61
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ess = az.ess(posterior, method="mean")
    vals = np.hstack([np.asarray(ess[v]).ravel() for v in ess.data_vars])
    vals = vals[np.isfinite(vals)]
    if vals.size == 0:
        return 1.0
    return float(vals.mean() / (posterior.sizes["chain"] * posterior.sizes["draw"]))


def loo(idata: az.InferenceData, chunk: int = LOO_CHUNK) -> Any:
    """PSIS-LOO (``arviz.ELPDData``, pointwise, log scale) with one entry per record.

    The same numbers as ``arviz.loo(idata, pointwise=True, var_name="y")`` on the
    per-record array, computed ``chunk`` columns at a time (Pareto smoothing,
    ``arviz.psislw``, works column by column), so memory stays near one chunk's worth
    however many records there are; per pattern, each pattern is smoothed once.

    Example
    -------
    >>> elpd = loo(fitted.idata)                                  # doctest: +SKIP
    >>> elpd.loo_i.size == fitted.design.n                        # doctest: +SKIP
    True
    """
    from arviz.stats.stats_utils import ELPDData

    ll = idata.log_likelihood["y"]
    per_pattern = PATTERN_DIM in ll.dims
    values = np.asarray(ll.values)
    chains, draws, m = values.shape
    samples = chains * draws
    reff = 1.0 if chains == 1 else relative_efficiency(idata.posterior)
    loo_cols, k_cols, lppd_cols = np.empty(m), np.empty(m), np.empty(m)
    for c0 in range(0, m, chunk):
        block = values[..., c0:c0 + chunk].reshape(samples, -1).T  # (columns, samples)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            lw, k = az.psislw(-block, reff)
        loo_cols[c0:c0 + chunk] = logsumexp(lw + block, axis=1)
        k_cols[c0:c0 + chunk] = k
        lppd_cols[c0:c0 + chunk] = logsumexp(block, axis=1) - np.log(samples)
        del block, lw
    if per_pattern:
        inverse = idata.log_likelihood[INDEX_VAR].values
        loo_i, k, lppd_i = loo_cols[inverse], k_cols[inverse], lppd_cols[inverse]
    else:
        loo_i, k, lppd_i = loo_cols, k_cols, lppd_cols
    obs = idata.log_likelihood["obs"].values
    n = loo_i.size
    good_k = min(1 - 1 / np.log10(samples), 0.7)
    elpd = float(loo_i.sum())
    return ELPDData(
        data=[elpd, float(np.sqrt(n * np.var(loo_i))), float(lppd_i.sum() - elpd), samples,
              n, bool(np.any(k > good_k)),
              xr.DataArray(loo_i, dims=["obs"], coords={"obs": obs}, name="loo_i"),
              xr.DataArray(k, dims=["obs"], coords={"obs": obs}, name="pareto_shape"),
              "log", good_k],
        index=["elpd_loo", "se", "p_loo", "n_samples", "n_data_points", "warning", "loo_i",
               "pareto_k", "scale", "good_k"])
