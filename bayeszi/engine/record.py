"""What a fit is, as plain parts: the spec, the design, the draws, and what came with them.

:class:`Posterior` is what the engine needs to compute anything from the draws (the spec,
the design state and the InferenceData). :class:`FitRecord` adds the resolved priors, the
fitted data (its used columns), the sampler diagnostics and the timing: every field a fit
has, declared here, filled once by :func:`bayeszi.engine.fit.fit_record` or
:func:`bayeszi.engine.fit.rebuild_record`. The answer modules take a ``FitRecord``; the
public :class:`bayeszi.FittedModel` is one, with methods.

Example
-------
>>> rec = fit_record(df, spec)                         # doctest: +SKIP
>>> rec.data.columns.tolist(), rec.sampling.divergences  # doctest: +SKIP
(['y', 'x'], 0)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import arviz as az
import pandas as pd

from bayeszi.base.spec import ModelSpec
from bayeszi.model.design import Design
from bayeszi.model.diagnostics import Diagnostics
from bayeszi.model.priors import PriorSet


@dataclass(eq=False)
class Posterior:
    """The draws of a model with the spec and design that give them meaning."""

    spec: ModelSpec
    design: Design
    idata: az.InferenceData

    @property
    def n_draws(self) -> int:
        """Number of posterior draws (chains x draws)."""
        post = self.idata.posterior
        return int(post.sizes["chain"] * post.sizes["draw"])


@dataclass(eq=False)
class FitRecord(Posterior):
    """A finished fit: every field declared, none added later."""

    priors: PriorSet
    data: pd.DataFrame
    """The used columns of the fitted data, with their original row labels."""
    sampling: Diagnostics
    """Divergences, R-hat and ESS of the draws."""
    timing: dict[str, float] = field(default_factory=dict)
    """Seconds spent building, sampling and computing the log-likelihood."""
