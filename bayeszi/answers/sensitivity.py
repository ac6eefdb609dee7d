"""Is the prior deciding the answer? Power-scaling sensitivity of every reported parameter.

Power-scaling (Kallioinen, Paananen, Buerkner & Vehtari 2023, Statistics and Computing 34:57)
asks how much a parameter's posterior would move if the prior, or the likelihood, were raised
to a power alpha close to 1 (made slightly stronger or weaker). No refit is needed: the
existing draws are reweighted by ``p^(alpha - 1)`` (Pareto-smoothed importance sampling),
and the sensitivity is the rate at which the cumulative Jensen-Shannon distance between
the reweighted and the original posterior grows with ``log2(alpha)``. ArviZ computes it
(``arviz.psens``); this module feeds it the fit's stored log prior of every draw (the
top-level priors, :mod:`bayeszi.engine.logprior`) and the log-likelihood of all records per
draw, and reads the two numbers per parameter in plain words:

* **prior-data conflict**: sensitive to both the prior and the data (each at least
  :data:`THRESHOLD`): prior and data pull the parameter in different directions;
* **prior dominates**: sensitive to the prior but not to the data: the data say little
  about this parameter (a weak likelihood, often from collinear predictors), and the prior
  sets the number;
* otherwise nothing to report.

The threshold 0.05 is the one the paper uses (from memory): a sensitivity of 0.05 or more
means the posterior moves noticeably when the prior (or likelihood) is made 1% stronger or
weaker. A sensitivity is a Monte Carlo estimate: with few draws, values near 0.05 may fall on
either side.

Example
-------
>>> table = prior_sensitivity(fitted)                      # doctest: +SKIP
>>> table[table[READING] != ""]                            # doctest: +SKIP
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator, Mapping
from typing import Any

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from bayeszi.base import names
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.engine import loglik, logprior
from bayeszi.engine.record import FitRecord

THRESHOLD = 0.05
"""Sensitivity at or above which a parameter counts as sensitive (the paper's value)."""
PRIOR = "sensitivity to prior"
DATA = "sensitivity to data"
READING = "reading"
CONFLICT = "prior-data conflict"
DOMINATES = "prior dominates"
#: the coefficient table's column holding :data:`READING`
TABLE_COLUMN = "prior sensitivity"

__all__ = ["CONFLICT", "DATA", "DOMINATES", "PRIOR", "READING", "TABLE_COLUMN", "THRESHOLD",
           "power_scaling", "prior_sensitivity", "reading", "sensitivity_problems",
           "warn_about_priors"]


def reading(prior: float, data: float, threshold: float = THRESHOLD) -> str:
    """The plain reading of one parameter's two sensitivities ("" when none applies).

    Example
    -------
    >>> reading(0.12, 0.20), reading(0.08, 0.01), reading(0.01, 0.20)
    ('prior-data conflict', 'prior dominates', '')
    """
    if not prior >= threshold:
        return ""
    return CONFLICT if data >= threshold else DOMINATES


def power_scaling(log_prior: xr.DataArray | np.ndarray, log_lik: xr.DataArray | np.ndarray,
                  variables: Mapping[str, Any], threshold: float = THRESHOLD) -> pd.DataFrame:
    """Sensitivity of each variable to power-scaling the prior and the likelihood.

    ``log_prior`` and ``log_lik`` hold one value per draw, dims (chain, draw);
    ``variables`` maps a row label to that variable's draws, dims (chain, draw). Returns one
    row per label with :data:`PRIOR`, :data:`DATA` and :data:`READING`.

    Example
    -------
    >>> rng = np.random.default_rng(0)
    >>> theta = rng.normal(0.5, 0.1, (2, 500))
    >>> lp = -0.5 * theta**2                               # prior N(0, 1)
    >>> ll = -0.5 * 100 * (theta - 0.5)**2                 # 100 records
    >>> t = power_scaling(lp, ll, {"theta": theta})
    >>> bool(t.loc["theta", PRIOR] < THRESHOLD <= t.loc["theta", DATA])
    True
    """
    labels = list(variables)
    shape = np.shape(np.asarray(log_prior))
    dims = ("chain", "draw")
    post = xr.Dataset({f"v{i}": (dims, np.asarray(variables[k], dtype=float).reshape(shape))
                       for i, k in enumerate(labels)})
    data = az.InferenceData(
        posterior=post,
        log_prior=xr.Dataset({"prior": (dims, np.asarray(log_prior, dtype=float))}),
        log_likelihood=xr.Dataset({"y": (dims, np.asarray(log_lik, dtype=float))}))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # Pareto-smoothing notes on near-flat weights
        prior = az.psens(data, component="prior")
        lik = az.psens(data, component="likelihood")
    rows = {k: {PRIOR: float(prior[f"v{i}"]), DATA: float(lik[f"v{i}"])}
            for i, k in enumerate(labels)}
    out = pd.DataFrame.from_dict(rows, orient="index")
    out[READING] = [reading(p, d, threshold) for p, d in zip(out[PRIOR], out[DATA],
                                                              strict=True)]
    return out


def _parameters(fit: FitRecord) -> Iterator[tuple[str, str, str, Any]]:
    """(part, term label, diagnostics key, draws) of each coefficient-table parameter (terms
    by their readable labels, as the coefficient table shows them)."""
    post = fit.idata.posterior
    for part, pdes in zip(names.PARTS, (fit.design.counts, fit.design.zeros), strict=True):
        if pdes is None:
            continue
        var = post[names.coef(part)]
        for term, label in zip(pdes.terms, pdes.labels, strict=True):
            yield (part, label, names.summary_key(names.coef(part), label),
                   var.sel({names.term_dim(part): term}).values)
    if names.DISPERSION in post:
        yield "counts", "dispersion (alpha)", names.DISPERSION, post[names.DISPERSION].values
    for g in fit.design.groups:
        for part in names.PARTS:
            name = names.group_sd(part, g.name)
            if name in post:
                yield part, names.group_sd_label(g.name), name, post[name].values
            sname = names.slope_sd(part, g.name)
            for t in fit.spec.varying.get(part, ()) if sname in post else ():
                yield (part, names.slope_sd_label(g.name, t), names.summary_key(sname, t),
                       post[sname].sel({names.slope_term_dim(part): t}).values)
        if names.corr(g.name) in post:
            yield ("both", names.corr_label(g.name), names.corr(g.name),
                   post[names.corr(g.name)].values)


def prior_sensitivity(fit: FitRecord, threshold: float = THRESHOLD) -> pd.DataFrame:
    """Power-scaling sensitivity of every parameter of the coefficient table.

    Rows are indexed by the parameter's diagnostics key (``counts_coef[depth]``); columns
    ``part``, ``term``, :data:`PRIOR`, :data:`DATA` and :data:`READING` ("prior-data
    conflict", "prior dominates" or ""). ``threshold``: see :data:`THRESHOLD`.

    Example
    -------
    >>> prior_sensitivity(fitted).loc["counts_coef[depth]", READING]   # doctest: +SKIP
    ''
    """
    if logprior.GROUP not in fit.idata.groups():
        raise BayesziError("this fit holds no log prior per draw, so its prior sensitivity "
                           "cannot be computed; refit it with this version of bayeszi")
    if loglik.stored_per(fit.idata) is None:
        raise BayesziError("this fit holds no log-likelihood, so its prior sensitivity cannot "
                           "be computed; refit it with bayeszi.fit")
    params = list(_parameters(fit))
    table = power_scaling(logprior.total(fit.idata).values, loglik.total(fit.idata),
                          {key: draws for _, _, key, draws in params}, threshold)
    table.insert(0, "term", [t for _, t, _, _ in params])
    table.insert(0, "part", [p for p, _, _, _ in params])
    table.attrs["threshold"] = threshold
    return table


def _names(rows: pd.DataFrame) -> str:
    parts = []
    for part, sub in rows.groupby("part", sort=False):
        parts.append(f"{part} part: {', '.join(map(str, sub['term']))}")
    return "; ".join(parts)


def _scale_note(rows: pd.DataFrame) -> str:
    """Advice for flagged rows that are not coefficients (the dispersion, group sds)."""
    other = [t for t in rows["term"] if t == "dispersion (alpha)" or " effects: " in str(t)]
    if not other:
        return ""
    return (f". For {', '.join(dict.fromkeys(other))}: the prior on it is informative at the "
            "value the data suggest; state one you can defend (priors={'dispersion': ...} or "
            "{'group_sd': ...}) or report that the data cannot settle it")


def sensitivity_problems(table: pd.DataFrame) -> list[str]:
    """Plain-language warnings for the flagged rows of :func:`prior_sensitivity`, naming the
    terms and what to do (empty when nothing is flagged).

    Example
    -------
    >>> sensitivity_problems(prior_sensitivity(fitted))   # doctest: +SKIP
    []
    """
    th = table.attrs.get("threshold", THRESHOLD)
    out = []
    conflict = table[table[READING] == CONFLICT]
    if len(conflict):
        out.append(
            f"prior-data conflict for {_names(conflict)}: these numbers move both when the "
            f"prior and when the data are weighted slightly differently (power-scaling "
            f"sensitivity of at least {th} to each; Kallioinen et al. 2023), so the prior "
            "pulls them away from where the data alone would put them. Do not report them as "
            "what the data say: check whether correlated predictors share one effect "
            "(rethink or combine them), collect more data, or state a prior for these terms "
            "that you can defend (priors=...), and show how the answer changes; see "
            "docs/sensitivity.md" + _scale_note(conflict))
    dominated = table[table[READING] == DOMINATES]
    if len(dominated):
        out.append(
            f"the prior dominates {_names(dominated)}: the data say little about these "
            f"numbers (sensitivity to the prior at least {th}, to the data below it), so "
            "their posterior is mostly the prior. Collect more data on them, rethink "
            "predictors that carry the same information, or state and defend the prior you "
            "use for them; see docs/sensitivity.md" + _scale_note(dominated))
    return out


def warn_about_priors(fit: FitRecord) -> pd.DataFrame | None:
    """Issue one :class:`BayesziWarning` per kind of prior sensitivity found in ``fit``;
    returns the table (None when the fit holds no log prior).

    Example
    -------
    >>> warn_about_priors(fitted)                          # doctest: +SKIP
    """
    try:
        table = prior_sensitivity(fit)
    except BayesziError:
        return None
    for text in sensitivity_problems(table):
        warnings.warn(text, BayesziWarning, stacklevel=3)
    return table
