"""The model's own log density per record, evaluated from its PyTensor graph at posterior draws.

bayeszi stores the pointwise log-likelihood computed in NumPy from the draws
(:func:`bayeszi.engine.pointwise.pattern_log_likelihood`). Tests compare it with the density the
sampler actually used: the model's graph (:func:`bayeszi.model.patterns.pattern_logp`, unweighted)
with its free variables replaced by the drawn values. Equality means the model and the
predictions of :mod:`bayeszi.engine.draws` agree.

Example
-------
>>> ref, stored = graph_log_likelihood(fitted, draws=10)             # doctest: +SKIP
>>> ref.shape == stored.shape == (10, fitted.design.n)                # doctest: +SKIP
True
"""

from __future__ import annotations

import numpy as np
import pytensor
from pytensor.graph.replace import clone_replace

from bayeszi.model.build import build_model
from bayeszi.model.patterns import pattern_logp


def graph_log_likelihood(fitted, draws: int = 20) -> tuple[np.ndarray, np.ndarray]:
    """(model graph's values, stored values), both (draws, records), for the first ``draws``
    draws of chain 0."""
    from bayeszi.engine import loglik

    built = build_model(fitted.design, fitted.priors)
    model, lik = built.model, built.likelihood
    lp = pattern_logp(lik.family, lik.patterns, weighted=False)(
        None, lik.eta_c, lik.eta_z, lik.log_alpha)
    inputs = [rv.type(name=rv.name) for rv in model.free_RVs]
    lp = clone_replace(lp, replace=dict(zip(model.free_RVs, inputs, strict=True)))
    fn = pytensor.function(inputs, lp, on_unused_input="ignore")
    post = fitted.idata.posterior
    ref = np.stack([fn(*(np.asarray(post[rv.name].values[0, d]).astype(i.dtype)
                         for rv, i in zip(model.free_RVs, inputs, strict=True)))
                    for d in range(draws)])
    stored = loglik.record_values(fitted.idata)[0, :draws]
    return ref[:, lik.patterns.inverse], stored
