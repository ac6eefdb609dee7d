"""How NUTS starts: initial points, the step method and its mass-matrix adaptation windows.

Every PyMC NUTS fit of bayeszi starts here (:func:`start_nuts`): the initial points are
PyMC's (``pm.init_nuts`` with ``"jitter+adapt_diag"``: jitter around the initial point, a
diagonal mass matrix adapted during warm-up), seeded as ``pm.sample`` seeds them, so a fit
with the default :data:`PYMC` windows draws exactly what ``pm.sample`` would.

The windows say when the mass matrix is first adapted. PyMC discards the first 50 warm-up
iterations and switches to its first estimate of the posterior variances after 101; until
then the sampler moves with a unit mass matrix, and in a model whose parameters' scales
differ (a tightly pinned intercept beside a loose group sd) each iteration takes many short
leapfrog steps (70-80 per iteration in the demo's grouped models, against 15 after the first
update). :data:`EARLY` (discard 20, update after 50) took 21%, 14% and 5% fewer warm-up
steps on the demo's candidates over four seeds, but in the simulation-based calibration
fits (400 warm-up steps, 300 draws) it lowered the median smallest bulk ESS by 5-20% and
raised the fits with R-hat above 1.01: PyMC's estimator switches windows every
``adaptation_window`` iterations, so shorter windows also mean a final mass matrix estimated
from fewer draws (docs/performance.md, "A better start for warm-up"). So it is not the
default; it stays here, measured, for whoever tries a better schedule.

Example
-------
>>> EARLY.adaptation_window, EARLY.discard_window
(50, 20)
>>> PYMC.adaptation_window, PYMC.discard_window
(101, 50)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pymc as pm
from pymc.step_methods.hmc.quadpotential import QuadPotentialDiagAdapt


@dataclass(frozen=True)
class Windows:
    """The diagonal mass matrix's adaptation: warm-up iterations discarded first, and the
    length of the window after which the first estimate replaces the unit matrix (later
    windows are as long)."""

    adaptation_window: int
    discard_window: int


#: PyMC's defaults (``QuadPotentialDiagAdapt``)
PYMC = Windows(adaptation_window=101, discard_window=50)
#: the first estimate after 50 iterations, 20 discarded (measured, not the default)
EARLY = Windows(adaptation_window=50, discard_window=20)


def chain_seeds(seed: int | None, chains: int) -> tuple[list[int], list[np.random.Generator]]:
    """One seed and one random stream per chain, as ``pm.sample`` derives them from its
    ``random_seed`` (one generator spawned per chain, an integer drawn from each).

    >>> seeds, rngs = chain_seeds(7, 2)
    >>> len(seeds), len(rngs)
    (2, 2)
    """
    rngs = np.random.default_rng(seed).spawn(chains)
    return [int(r.integers(2**30)) for r in rngs], list(rngs)


def start_nuts(model: pm.Model, chains: int, seed: int | None, acceptance_target: float,
               warmup_steps: int, windows: Windows = PYMC
               ) -> tuple[list[dict], object, list[np.random.Generator]]:
    """Initial points, the NUTS step and one random stream per chain for ``model``.

    The points and the step's compiled density are PyMC's (``pm.init_nuts``); with windows
    other than :data:`PYMC` the step is rebuilt around a potential with those windows,
    reusing the compiled density (nothing compiles twice). A potential cannot be swapped
    into a built step: its integrator keeps the one it was built with.

    Example
    -------
    >>> points, step, rngs = start_nuts(model, chains=2, seed=1, acceptance_target=0.9,
    ...                                 warmup_steps=500)                # doctest: +SKIP
    """
    seeds, rngs = chain_seeds(seed, chains)
    points, step = pm.init_nuts(init="jitter+adapt_diag", chains=chains, model=model,
                                random_seed=seeds, progressbar=False,
                                target_accept=acceptance_target, tune=warmup_steps)
    if windows == PYMC:
        return points, step, rngs
    old = step.potential
    potential = QuadPotentialDiagAdapt(
        old._n, old._initial_mean, old._initial_diag, old._initial_weight,
        adaptation_window=windows.adaptation_window, discard_window=windows.discard_window,
        rng=seeds[0])
    step = pm.NUTS(potential=potential, model=model, rng=seeds[0], initial_point=points[0],
                   logp_dlogp_func=step._logp_dlogp_func, target_accept=acceptance_target)
    return points, step, rngs


__all__ = ["EARLY", "PYMC", "Windows", "chain_seeds", "start_nuts"]
