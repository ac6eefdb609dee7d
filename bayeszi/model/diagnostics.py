"""What the sampler's draws say about themselves: divergences, R-hat, bulk and tail ESS.

:func:`diagnose` computes a :class:`Diagnostics` from an InferenceData; its
:meth:`~Diagnostics.problems` are plain-language descriptions with what to try, and
:func:`warn_about` turns each into a :class:`~bayeszi.base.errors.BayesziWarning`.

Example
-------
>>> from bayeszi.model.diagnostics import Thresholds
>>> Thresholds().rhat, Thresholds().ess
(1.01, 400.0)
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import arviz as az
import numpy as np
import pandas as pd

from bayeszi.base import names as var_names
from bayeszi.base.errors import BayesziWarning
from bayeszi.model.convergence import diagnostics_table


@dataclass(frozen=True)
class Thresholds:
    """What counts as sampler trouble (R-hat per Vehtari et al. 2021, Bayesian Anal.)."""

    rhat: float = 1.01
    ess: float = 400.0


def parameter_names(idata: az.InferenceData) -> list[str]:
    """The posterior variables worth diagnosing: all but the raw variables the model samples
    for group effects and coefficients (:func:`bayeszi.base.names.is_raw`: standard normals,
    correlation transforms, centred levels, internal-scale coefficients), whose effects and
    user-scale coefficients are diagnosed instead."""
    out = []
    for v in map(str, idata.posterior.data_vars):
        # by prefix: a grouping column's own name (say 'zone_z_1') must not hide its effects
        if not var_names.is_raw(v):
            out.append(v)
    return out


def passes(idata: az.InferenceData, thresholds: Thresholds | None = None) -> bool:
    """Whether every diagnosed parameter's R-hat, bulk ESS and tail ESS pass (what
    :func:`diagnose` would flag as none), checking the small variables first and the large
    ones (thousands of group effects) only when those pass: the same answer, sooner.

    Example
    -------
    >>> passes(fitted.idata)                         # doctest: +SKIP
    True
    """
    th = thresholds or Thresholds()
    names = parameter_names(idata)
    size = {n: int(np.prod(idata.posterior[n].shape[2:])) for n in names}
    for chunk in ([n for n in names if size[n] <= 100], [n for n in names if size[n] > 100]):
        if not chunk:
            continue
        summ = _named(diagnostics_table(idata.posterior, chunk))
        if _too_high_rhat(summ, th).any() or _too_low_ess(summ, th).any():
            return False
    return True


def _named(table: pd.DataFrame) -> pd.DataFrame:
    """The table of :func:`diagnostics_table` under bayeszi's column names."""
    return table[["r_hat", "ess_bulk", "ess_tail"]].set_axis(
        list(var_names.DIAGNOSTIC_COLUMNS), axis=1)


def _too_high_rhat(summ: pd.DataFrame, th: Thresholds) -> pd.Series:
    return summ[var_names.RHAT] > th.rhat


def _too_low_ess(summ: pd.DataFrame, th: Thresholds) -> pd.Series:
    return (summ[var_names.BULK_ESS] < th.ess) | (summ[var_names.TAIL_ESS] < th.ess)


@dataclass(frozen=True)
class Diagnostics:
    """The sampler diagnostics of one fit.

    ``table`` has one row per parameter (``R-hat``, ``bulk ESS``, ``tail ESS``);
    ``bad_rhat`` and ``bad_ess`` name the parameters past the :class:`Thresholds`.

    Example
    -------
    >>> d = fitted.diagnostics()                     # doctest: +SKIP
    >>> d.divergences, d.problems()                  # doctest: +SKIP
    (0, [])
    """

    table: pd.DataFrame
    divergences: int
    draws: int
    chains: int
    bad_rhat: list[str] = field(default_factory=list)
    bad_ess: list[str] = field(default_factory=list)
    max_treedepth_hits: int = 0
    thresholds: Thresholds = field(default_factory=Thresholds)
    #: what the low-ESS problem advises; a fit that drew until enough and hit its limit
    #: says to raise the limit instead
    more_draws: str = "Run more draws or chains"

    def problems(self) -> list[str]:
        """Plain-language descriptions of each sampler problem, with what to try."""
        th = self.thresholds
        out = []
        if self.chains < 2:
            out.append("only one chain was run, so R-hat cannot check convergence; use "
                       "chains=2 or more")
        if self.divergences:
            out.append(
                f"{self.divergences} divergent transition(s) out of {self.draws} draws: the "
                "sampler met curvature it could not follow, so the draws may be biased. Try "
                "acceptance_target=0.95 or 0.99; if they persist, tighter priors on group sds "
                "or the dispersion, or a simpler zeros formula"
            )
        if self.bad_rhat:
            out.append(
                f"R-hat above {th.rhat} for {_short(self.bad_rhat)}: the chains disagree. Run "
                "more warm-up steps and draws (e.g. warmup_steps=2000, draws=2000) and check the "
                "model is identified"
            )
        if self.bad_ess:
            out.append(
                f"bulk or tail ESS below {th.ess:.0f} for {_short(self.bad_ess)}: too few "
                f"effective draws for stable intervals. {self.more_draws}"
            )
        if self.max_treedepth_hits:
            out.append(
                f"{self.max_treedepth_hits} draw(s) hit the maximum tree depth: sampling is "
                "slow and may be inefficient; check for strongly correlated or weakly "
                "identified terms"
            )
        return out


def diagnose(idata: az.InferenceData, thresholds: Thresholds | None = None) -> Diagnostics:
    """Per-parameter R-hat and ESS plus the divergence count and flags."""
    th = thresholds or Thresholds()
    names = parameter_names(idata)
    chains = int(idata.posterior.sizes["chain"])
    # ArviZ's algorithms for all parameters at once (az.summary loops over scalars)
    summ = _named(diagnostics_table(idata.posterior, names))
    if chains < 2:
        summ[var_names.RHAT] = np.nan
    tree = idata.sample_stats.get("reached_max_treedepth")
    return Diagnostics(
        table=summ,
        divergences=int(np.asarray(idata.sample_stats["diverging"]).sum()),
        draws=int(idata.posterior.sizes["chain"] * idata.posterior.sizes["draw"]),
        chains=chains,
        bad_rhat=summ.index[_too_high_rhat(summ, th)].tolist(),
        bad_ess=summ.index[_too_low_ess(summ, th)].tolist(),
        max_treedepth_hits=int(np.asarray(tree).sum()) if tree is not None else 0,
        thresholds=th,
    )


def _short(names: list[str], most: int = 6) -> str:
    more = len(names) - most
    return ", ".join(names[:most]) + (f" and {more} more" if more > 0 else "")


def warn_about(diag: Diagnostics) -> None:
    """Issue one :class:`BayesziWarning` per problem found."""
    for text in diag.problems():
        warnings.warn(text, BayesziWarning, stacklevel=3)
