"""How every PyMC NUTS fit starts (bayeszi/model/warmup.py): other mass-matrix windows
are the ones the sampler really uses, nothing is compiled twice, and a fixed run is the
block path without a judge (same draws as until enough stopped at the same total).

These are properties of the code (no tolerance). What the earlier windows do to warm-up
steps and ESS is measured in docs/performance.md.
"""

from __future__ import annotations

import numpy as np
import pymc as pm
import pytest
from simulate import poisson_pymc_model

from bayeszi.base.spec import SamplerSettings
from bayeszi.model.enough import BlockPlan, sample_until_enough
from bayeszi.model.sample import run_nuts
from bayeszi.model.warmup import EARLY, PYMC, start_nuts


@pytest.fixture(scope="module")
def model() -> pm.Model:
    return poisson_pymc_model()


def test_the_step_integrates_with_the_early_potential(model):
    """The potential with the early windows is the one the integrator moves with (a
    potential swapped into a built step would not be)."""
    with model:
        _points, step, rngs = start_nuts(model, chains=2, seed=1, acceptance_target=0.9,
                                         warmup_steps=100, windows=EARLY)
    pot = step.potential
    assert (pot.adaptation_window, pot._discard_window) == (EARLY.adaptation_window,
                                                            EARLY.discard_window)
    assert step.integrator._potential is pot
    assert len(rngs) == 2


@pytest.mark.parametrize("windows, updated", [(EARLY, True), (PYMC, False)])
def test_the_first_estimate_replaces_the_unit_matrix_after_the_window(model, windows, updated):
    """After 60 warm-up iterations the early windows (update at 50) have replaced the unit
    mass matrix by variance estimates; PyMC's (update at 101) have not yet."""
    with model:
        points, step, _ = start_nuts(model, chains=1, seed=2, acceptance_target=0.9,
                                     warmup_steps=200, windows=windows)
        point = points[0]
        for _ in range(60):
            point, _stats = step.step(point)
    assert (not np.allclose(step.potential._var, 1.0)) is updated


def test_the_density_is_compiled_once(model, monkeypatch):
    calls = []
    original = pm.Model.logp_dlogp_function

    def counting(self, *args, **kwargs):
        calls.append(1)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(pm.Model, "logp_dlogp_function", counting)
    with model:
        start_nuts(model, chains=2, seed=3, acceptance_target=0.9, warmup_steps=50,
                   windows=EARLY)
    assert len(calls) == 1


def test_a_fixed_run_is_the_block_path_without_a_judge(model):
    """run_nuts's fixed draws equal, value for value, a block run of the same total whose
    judge never stops it early: fixed and until-enough fits start and continue alike."""
    settings = SamplerSettings(draws=120, warmup_steps=100, chains=2, cores=1, seed=5,
                               sampler="pymc", progressbar=False)
    fixed = run_nuts(model, settings, rows=60)
    blocks = sample_until_enough(model, chains=2, warmup_steps=100, plan=BlockPlan(40, 120),
                                 acceptance_target=settings.acceptance_target, seed=5,
                                 judge=lambda idata: False)
    for name in ("a", "b"):
        np.testing.assert_array_equal(fixed.posterior[name].values,
                                      blocks.idata.posterior[name].values)
    assert fixed.posterior.attrs["sampling_time"] > 0
