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
import importlib.abc
import importlib.util
import sys
from typing import Any

from bayeszi.base.errors import BayesziError
from bayeszi.base.renamed import refuse_renamed_function
from bayeszi.base.version import __version__

_LAZY = {
    "fit": "bayeszi.fitting.api",
    "fit_spec": "bayeszi.fitting.api",
    "load": "bayeszi.fitting.api",
    "make_spec": "bayeszi.fitting.api",
    "prior_predictive": "bayeszi.fitting.api",
    "FAMILY_NAMES": "bayeszi.families",
    "get_family": "bayeszi.families",
    "ModelSpec": "bayeszi.base.spec",
    "SamplerSettings": "bayeszi.base.spec",
    "BayesziWarning": "bayeszi.base.errors",
    "FittedModel": "bayeszi.fitting.fitted",
    "rank_models": "bayeszi.answers.comparison",
    "average_predictions": "bayeszi.answers.averaged",
    "average_prediction_draws": "bayeszi.answers.averaged",
    "average_contrast": "bayeszi.answers.averaged",
    "averaged_predictive_comparison": "bayeszi.answers.averaged",
    "fit_candidates": "bayeszi.fitting.candidates",
}

#: Public modules, loaded on first use: ``bz.priors.normal(mean=0, sd=1)``.
_LAZY_MODULES = {"priors": "bayeszi.model.distributions"}
#: Names of bayeszi 0.1 that now only say what to write instead (not listed in ``__all__``).
_REFUSED = {"Prior": "bayeszi.model.distributions"}

__all__ = ["BayesziError", "__version__", *sorted([*_LAZY, *_LAZY_MODULES])]


def __getattr__(name: str) -> Any:
    if name in _LAZY_MODULES:
        value = importlib.import_module(_LAZY_MODULES[name])
    elif name in _LAZY or name in _REFUSED:
        value = getattr(importlib.import_module({**_LAZY, **_REFUSED}[name]), name)
    else:
        refuse_renamed_function("bayeszi", name)
        raise AttributeError(f"module 'bayeszi' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY) | set(_LAZY_MODULES))


#: Module paths of the flat layout before the layers (0.1.0), kept as aliases so that code
#: written against them (``import bayeszi.checks``) keeps working: the same module object;
#: and ``bayeszi.priors``, the public name of the prior functions
#: (``from bayeszi.priors import normal``).
_MOVED = {
    "bayeszi.priors": "bayeszi.model.distributions",
    "bayeszi.candidates": "bayeszi.fitting.candidates",
    "bayeszi.comparison": "bayeszi.answers.comparison",
    "bayeszi.compareplots": "bayeszi.plots.compareplots",
    "bayeszi.loglik": "bayeszi.engine.loglik",
    "bayeszi.checks": "bayeszi.answers.checks",
    "bayeszi.checkplots": "bayeszi.plots.checkplots",
    "bayeszi.groups": "bayeszi.answers.groups",
    "bayeszi.predict": "bayeszi.answers.predict",
    "bayeszi.contrast": "bayeszi.answers.contrast",
    "bayeszi.study": "bayeszi.app.study",
    "bayeszi.report": "bayeszi.app.report",
    "bayeszi.cli": "bayeszi.app.cli",
    "bayeszi.api": "bayeszi.fitting.api",
    "bayeszi.fitted": "bayeszi.fitting.fitted",
    "bayeszi.spec": "bayeszi.base.spec",
    "bayeszi.errors": "bayeszi.base.errors",
}


class _MovedModules(importlib.abc.MetaPathFinder, importlib.abc.Loader):
    """Finds an old module path and hands out the module at its new place."""

    def find_spec(self, fullname: str, path: Any, target: Any = None) -> Any:
        if fullname in _MOVED:
            return importlib.util.spec_from_loader(fullname, self)
        return None

    def create_module(self, spec: Any) -> Any:
        module = importlib.import_module(_MOVED[spec.name])
        spec.loader_state = module.__spec__  # its own spec, put back by exec_module
        return module

    def exec_module(self, module: Any) -> None:
        # the import system stamped the alias's spec on the module: give it back its own
        module.__spec__ = module.__spec__.loader_state


if not any(isinstance(f, _MovedModules) for f in sys.meta_path):
    sys.meta_path.append(_MovedModules())
