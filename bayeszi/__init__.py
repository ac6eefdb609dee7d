"""bayeszi: Bayesian regression for counts with excess zeros.

Example
-------
>>> import bayeszi as bz
>>> bz.FAMILY_NAMES
('poisson', 'negbin', 'zip', 'zinb', 'hurdle-poisson', 'hurdle-negbin')
"""

from __future__ import annotations

__version__ = "0.1.0"

from bayeszi.api import fit, fit_spec, load, make_spec, prior_predictive
from bayeszi.errors import BayesziError
from bayeszi.families import FAMILY_NAMES, get_family
from bayeszi.priors import Prior
from bayeszi.spec import ModelSpec, SamplerSettings
from bayeszi.validate import BayesziWarning

__all__ = [
    "BayesziError",
    "BayesziWarning",
    "FAMILY_NAMES",
    "ModelSpec",
    "Prior",
    "SamplerSettings",
    "__version__",
    "fit",
    "fit_spec",
    "get_family",
    "load",
    "make_spec",
    "prior_predictive",
]
