"""The six count families: two count kernels times three zero mechanisms.

Every family is described by three per-row quantities, always on the unconstrained scale:

``eta_c``
    log of the count-process mean ``mu`` (log link; already includes ``log(exposure)``).
``eta_z``
    logit of the zeros-part probability ``p``. In the zero-inflated families (``zip``,
    ``zinb``) ``p`` is the chance of an *extra* (structural) zero; in the hurdle families
    (``hurdle-poisson``, ``hurdle-negbin``) ``p`` is ``P(Y = 0)`` itself. Ignored (may be
    ``None``) for ``poisson`` and ``negbin``.
``log_alpha``
    log of the negative-binomial overdispersion ``alpha``: variance ``mu + alpha * mu**2``,
    ``alpha -> 0`` is the Poisson. Ignored (may be ``None``) for the Poisson-based families.

The package is layered inside too, one job per module:

- :mod:`~bayeszi.families.numerics`: stable building blocks (power series, Stirling form,
  ``log(1 - exp(-t))``, ``logaddexp``), NumPy and PyTensor versions side by side;
- :mod:`~bayeszi.families.kernels`: the Poisson and negative-binomial count kernels
  (``log f(y)``, ``log f(0)``, ``log(1 - f(0))``, moments, tails, draws, pmf ratio);
- :mod:`~bayeszi.families.mechanisms`: none, zero inflation, hurdle: how a kernel's pieces
  make the log-pmf, ``P(Y = 0)``, moments, tails, pmf tables and draws;
- :mod:`~bayeszi.families.family`: :class:`Family` (a kernel times a mechanism) and
  :func:`get_family`.

The NumPy methods serve everything after sampling (log-pmf, draws, mean, variance,
``P(Y = 0)``, tail probabilities, pmf tables), so predictions never need PyMC; the model
graph's density (``bayeszi.model.patterns.pattern_logp``) is built from the ``pt_`` methods.
All functions broadcast over their inputs (for instance draws x rows) and work on the log
scale; see ``docs/families.md`` for the formulas.

Example
-------
>>> import numpy as np
>>> from bayeszi.families import get_family
>>> zip_ = get_family("zip")
>>> zip_.zeros_label
'P(extra zero)'
>>> eta_c, eta_z = np.log(2.0), 0.0          # mu = 2, p = 0.5
>>> round(float(zip_.mean(eta_c, eta_z, None)), 6)          # (1 - p) mu
1.0
>>> round(float(zip_.prob_zero(eta_c, eta_z, None)), 6)     # p + (1 - p) exp(-mu)
0.567668
>>> round(float(np.exp(zip_.logpmf(0, eta_c, eta_z, None))), 6)
0.567668
>>> rng = np.random.default_rng(1)
>>> zip_.random(rng, eta_c, eta_z, None, size=5).dtype
dtype('int64')
"""

from bayeszi.base.names import FAMILY_NAMES
from bayeszi.families.family import Family, get_family

__all__ = ["FAMILY_NAMES", "Family", "get_family"]
