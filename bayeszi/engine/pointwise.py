"""The pointwise log-likelihood that LOO needs, computed from the draws in NumPy.

One value per row pattern (:mod:`bayeszi.model.patterns`) and posterior draw, from the
linear predictors that predictions use and the family's closed-form log-pmf, so nothing is
compiled; :mod:`bayeszi.engine.loglik` stores it per record.

Example
-------
>>> ll = pattern_log_likelihood(posterior, built.likelihood.patterns)  # doctest: +SKIP
"""

from __future__ import annotations

import numpy as np

from bayeszi.engine.draws import design_rows, linear_predictors
from bayeszi.engine.record import Posterior
from bayeszi.families import get_family
from bayeszi.model.patterns import Patterns

#: :func:`pattern_log_likelihood` works on about this many (draw, pattern) values at a time
LOGLIK_CHUNK_VALUES = 2_000_000


def pattern_log_likelihood(fitted: Posterior, patterns: Patterns, chunk: int | None = None
                           ) -> np.ndarray:
    """Log-likelihood of every *pattern* (one record of it) at every posterior draw, in NumPy.

    ``fitted`` holds the draws (a :class:`~bayeszi.engine.record.Posterior`) and
    ``patterns`` the patterns its model was built on (``built.likelihood.patterns``). The
    linear predictors are those of predictions (:func:`bayeszi.engine.draws.linear_predictors`,
    known groups) and the density the family's closed form
    (:meth:`~bayeszi.families.Family.logpmf`), ``chunk`` draws at a time (default: about
    :data:`LOGLIK_CHUNK_VALUES` values, so temporaries stay near 16 MB each), so nothing is
    compiled. Returns an array of shape (chain, draw, n_patterns); ``patterns.inverse`` maps
    records to patterns (see :mod:`bayeszi.engine.loglik`).

    Example
    -------
    >>> ll = pattern_log_likelihood(fitted, built.likelihood.patterns)  # doctest: +SKIP
    >>> ll.shape[-1] == built.likelihood.patterns.n_patterns  # doctest: +SKIP
    True
    """
    post = fitted.idata.posterior
    chains, draws = int(post.sizes["chain"]), int(post.sizes["draw"])
    fam = get_family(fitted.spec.family)
    rows = design_rows(patterns.design)
    y = patterns.design.y[None, :]
    out = np.empty((chains * draws, patterns.n_patterns))
    if chunk is None:
        chunk = max(1, LOGLIK_CHUNK_VALUES // max(1, patterns.n_patterns))
    for d0 in range(0, chains * draws, chunk):
        sel = np.arange(d0, min(chains * draws, d0 + chunk))
        lp = linear_predictors(fitted, rows, groups="known", draw_index=sel)
        out[sel] = fam.logpmf(y, lp.counts, lp.zeros, lp.log_alpha)
    return out.reshape(chains, draws, patterns.n_patterns)
