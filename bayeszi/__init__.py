"""bayeszi: Bayesian regression for counts with excess zeros.

The heavy modules (PyMC, ArviZ) load on first use, so ``import bayeszi`` and
``bayeszi.data`` stay quick.

Example
-------
>>> import bayeszi as bz
>>> bz.FAMILY_NAMES
('poisson', 'negbin', 'zip', 'zinb', 'hurdle-poisson', 'hurdle-negbin')
"""

from __future__ import annotations

import importlib
from typing import Any

from bayeszi.errors import BayesziError

__version__ = "0.1.0"

_LAZY = {
    "fit": "bayeszi.api",
    "fit_spec": "bayeszi.api",
    "load": "bayeszi.api",
    "make_spec": "bayeszi.api",
    "prior_predictive": "bayeszi.api",
    "FAMILY_NAMES": "bayeszi.families",
    "get_family": "bayeszi.families",
    "Prior": "bayeszi.priors",
    "ModelSpec": "bayeszi.spec",
    "SamplerSettings": "bayeszi.spec",
    "BayesziWarning": "bayeszi.validate",
    "FittedModel": "bayeszi.fitted",
    "compare": "bayeszi.comparison",
    "fit_candidates": "bayeszi.candidates",
}

__all__ = ["BayesziError", "__version__", *sorted(_LAZY)]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'bayeszi' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
